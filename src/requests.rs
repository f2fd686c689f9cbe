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
use crate::core::alerts::Shelf;

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
