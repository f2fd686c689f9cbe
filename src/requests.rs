//! Requests from engineers to the running service: learn a new baseline, shelve alerts, end a
//! shelf. `efftemp rebaseline|shelve|unshelve` writes each as a JSON file into
//! `<state_dir>/requests/`; the service reads them at its next pass, applies them in event
//! time, logs each for the audit trail (who, why) and removes the file.
//!
//! File format (one object): `unit`, `action` (`rebaseline`, `shelve`, `unshelve`), for shelve
//! and unshelve a `selector` (an alert id, a cause, or `cause/subject`), for shelve `until`
//! (RFC 3339), and `reason` and `by`.

use std::io;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::core::UnitCore;
use crate::core::alerts::{Shelf, alert_id};
use crate::core::vocabulary::Cause;

/// What an engineer asks for.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "action", rename_all = "lowercase")]
pub enum Action {
    /// Forget the baseline and learn a new one (after maintenance).
    Rebaseline,
    /// Track but do not announce matching alerts until a time.
    Shelve {
        /// An alert id, a cause, or `cause/subject`.
        selector: String,
        /// Until when.
        until: jiff::Timestamp,
    },
    /// End a shelf early.
    Unshelve {
        /// The selector that was shelved.
        selector: String,
    },
}

/// One request file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Request {
    /// The unit it is for.
    pub unit: String,
    /// What to do.
    #[serde(flatten)]
    pub action: Action,
    /// Why (audit).
    pub reason: String,
    /// Who (audit).
    pub by: String,
}

impl Request {
    /// The action's name, as in the file and in messages.
    pub fn action_name(&self) -> &'static str {
        match self.action {
            Action::Rebaseline => "rebaseline",
            Action::Shelve { .. } => "shelve",
            Action::Unshelve { .. } => "unshelve",
        }
    }

    /// Apply the request to a unit's core; returns the sentence for the audit log (which
    /// records `by` and `reason` beside it).
    pub fn apply(&self, core: &mut UnitCore) -> String {
        match &self.action {
            Action::Rebaseline => {
                core.rebaseline();
                "re-baseline requested: the monitor learns a new baseline from now on".to_string()
            }
            Action::Shelve { selector, until } => {
                let note = core.shelve(Shelf {
                    selector: selector.clone(),
                    until_ms: until.as_millisecond(),
                    reason: self.reason.clone(),
                    by: self.by.clone(),
                });
                format!("{note} (until {until})")
            }
            Action::Unshelve { selector } => {
                let removed = core.unshelve(selector);
                format!(
                    "unshelve `{selector}`: {}",
                    if removed { "removed" } else { "there was no such shelf" }
                )
            }
        }
    }
}

/// Check a shelve/unshelve selector of unit `unit`: a cause (`heater_fouling`),
/// `cause/subject` with a known cause (`data_quality/TI-2050`), or an alert id of the unit
/// (`R-204-dq-1a2b3c4d`). The error names the causes and the one nearest to what was written.
pub fn check_selector(selector: &str, unit: &str) -> Result<(), String> {
    let s = selector.trim();
    let cause_part = s.split_once('/').map_or(s, |(c, _)| c);
    if Cause::from_name(cause_part).is_some() {
        return match s.split_once('/') {
            Some((_, subject)) if subject.trim().is_empty() => {
                Err(format!("selector `{s}` names no subject after `/` (e.g. `{cause_part}/TI-2050`)"))
            }
            _ => Ok(()),
        };
    }
    if let Some(prefix) = alert_id_prefix(s) {
        return if prefix == unit {
            Ok(())
        } else {
            Err(format!("`{s}` is an alert id of unit `{prefix}`, not of `{unit}`"))
        };
    }
    let names: Vec<&str> = Cause::ALL.iter().map(|c| c.as_str()).collect();
    let nearest = names.iter().min_by_key(|n| edit_distance(cause_part, n)).copied().unwrap_or_default();
    let example = alert_id(unit, Cause::DataQuality, "TI-1", 0);
    Err(format!(
        "unknown selector `{s}` (did you mean `{}`?): give a cause ({}), `cause/subject` (e.g. `data_quality/TI-2050`) or an alert id of this unit (like `{example}`)",
        if s.contains('/') {
            format!("{nearest}/{}", s.split_once('/').map_or("", |x| x.1))
        } else {
            nearest.to_string()
        },
        names.join(", ")
    ))
}

/// The unit part of an alert id `<unit>-<code>-<8 hex digits>`, if `s` has that shape.
fn alert_id_prefix(s: &str) -> Option<&str> {
    let (rest, hex) = s.rsplit_once('-')?;
    let (prefix, code) = rest.rsplit_once('-')?;
    let hex_ok = hex.len() == 8 && hex.bytes().all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b));
    (hex_ok && !prefix.is_empty() && Cause::ALL.iter().any(|c| c.code() == code)).then_some(prefix)
}

/// Levenshtein distance (insertions, deletions and substitutions of characters).
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut diag = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let next = (diag + usize::from(ca != *cb)).min(row[j] + 1).min(row[j + 1] + 1);
            diag = row[j + 1];
            row[j + 1] = next;
        }
    }
    row[b.len()]
}

/// The directory requests are dropped into.
pub fn directory(state_dir: &Path) -> PathBuf {
    state_dir.join("requests")
}

/// Queue a request: written to a temporary name and renamed, so the service never reads half
/// a file. Returns the file's path.
pub fn submit(state_dir: &Path, request: &Request) -> io::Result<PathBuf> {
    let dir = directory(state_dir);
    let nanos =
        std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_nanos());
    let path = dir.join(format!("{nanos}-{}-{}.json", request.unit, request.action_name()));
    std::fs::create_dir_all(&dir)?;
    let text = serde_json::to_string_pretty(request).map_err(io::Error::other)?;
    let tmp = path.with_extension("tmp");
    std::fs::write(&tmp, text)?;
    std::fs::rename(&tmp, &path)?;
    Ok(path)
}

/// The request files waiting in the state directory, oldest first, each read (or why it could
/// not be). The caller removes each file once it has dealt with it.
pub fn pending(state_dir: &Path) -> Vec<(PathBuf, Result<Request, String>)> {
    let Ok(rd) = std::fs::read_dir(directory(state_dir)) else { return Vec::new() };
    let mut files: Vec<PathBuf> =
        rd.flatten().map(|e| e.path()).filter(|p| p.extension().is_some_and(|e| e == "json")).collect();
    files.sort();
    files
        .into_iter()
        .map(|f| {
            let req = std::fs::read_to_string(&f)
                .map_err(|e| e.to_string())
                .and_then(|t| serde_json::from_str(&t).map_err(|e| e.to_string()));
            (f, req)
        })
        .collect()
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn shelve() -> Request {
        Request {
            unit: "R-1".into(),
            action: Action::Shelve {
                selector: "data_quality".into(),
                until: "2026-12-01T18:00:00Z".parse().unwrap(),
            },
            reason: "analyzer maintenance".into(),
            by: "jdoe".into(),
        }
    }

    #[test]
    fn the_file_format_round_trips_and_reads_files_of_earlier_builds() {
        let text = serde_json::to_string(&shelve()).unwrap();
        assert!(text.contains("\"action\":\"shelve\""), "{text}");
        assert_eq!(serde_json::from_str::<Request>(&text).unwrap(), shelve());
        // Earlier builds wrote every key, with nulls for the ones an action does not use.
        let old = r#"{"unit":"R-1","action":"rebaseline","selector":null,"until":null,"reason":"new catalyst","by":"jdoe"}"#;
        let r: Request = serde_json::from_str(old).unwrap();
        assert_eq!(r.action, Action::Rebaseline);
        assert_eq!(r.reason, "new catalyst");
    }

    #[test]
    fn requests_missing_what_their_action_needs_are_unreadable() {
        for bad in [
            r#"{"unit":"R-1","action":"shelve","selector":"x","reason":"r","by":"b"}"#,
            r#"{"unit":"R-1","action":"shelve","selector":"x","until":"soon","reason":"r","by":"b"}"#,
            r#"{"unit":"R-1","action":"unshelve","reason":"r","by":"b"}"#,
            r#"{"unit":"R-1","action":"reboot","reason":"r","by":"b"}"#,
        ] {
            assert!(serde_json::from_str::<Request>(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn selectors_are_causes_cause_subjects_or_alert_ids_of_the_unit() {
        for ok in ["heater_fouling", "data_quality/TI-2050", " undetermined ", "R-204-hf-1a2b3c4d"] {
            assert_eq!(check_selector(ok, "R-204"), Ok(()), "{ok}");
        }
        let id = alert_id("R-204", Cause::InstrumentFault, "TI-2050", 1_796_083_200_000);
        assert_eq!(check_selector(&id, "R-204"), Ok(()), "{id}");
        let typo = check_selector("heater_fuoling", "R-204").unwrap_err();
        assert!(typo.contains("did you mean `heater_fouling`?"), "{typo}");
        assert!(typo.contains("conversion_drift") && typo.contains("model_validity"), "{typo}");
        let sub = check_selector("data_qualty/TI-2050", "R-204").unwrap_err();
        assert!(sub.contains("did you mean `data_quality/TI-2050`?"), "{sub}");
        assert!(check_selector("data_quality/", "R-204").unwrap_err().contains("no subject"));
        let other = check_selector("R-205-hf-1a2b3c4d", "R-204").unwrap_err();
        assert!(other.contains("of unit `R-205`"), "{other}");
        // Not an alert id: unknown code, short or upper-case hex.
        for bad in ["R-204-xx-1a2b3c4d", "R-204-hf-1a2b3c", "R-204-hf-1A2B3C4D", ""] {
            assert!(check_selector(bad, "R-204").is_err(), "{bad}");
        }
        assert_eq!(edit_distance("heater_fuoling", "heater_fouling"), 2);
        assert_eq!(edit_distance("", "abc"), 3);
    }

    #[test]
    fn submitted_requests_are_pending_in_order() {
        let dir = tempfile::tempdir().unwrap();
        let a = submit(dir.path(), &shelve()).unwrap();
        let mut second = shelve();
        second.action = Action::Unshelve { selector: "data_quality".into() };
        let b = submit(dir.path(), &second).unwrap();
        std::fs::write(directory(dir.path()).join("zzz-broken.json"), "{").unwrap();
        let p = pending(dir.path());
        assert_eq!(p.len(), 3);
        assert_eq!((&p[0].0, p[0].1.as_ref().unwrap()), (&a, &shelve()));
        assert_eq!((&p[1].0, p[1].1.as_ref().unwrap()), (&b, &second));
        assert!(p[2].1.is_err());
        assert!(pending(&dir.path().join("nowhere")).is_empty());
    }
}
