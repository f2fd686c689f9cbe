//! Requests from engineers to the running service: learn a new baseline, shelve alerts, end a
//! shelf. `efftemp rebaseline|shelve|unshelve` writes each as a JSON file into
//! `<state_dir>/requests/`; the service reads them at its next pass, applies them in event
//! time, logs each for the audit trail (who, why) and removes the file.
//!
//! File format (one object): `unit`, `action` (`rebaseline`, `shelve`, `unshelve`), for shelve
//! and unshelve a `selector` (an alert id, a cause, or `cause/subject`), for shelve `until`
//! (RFC 3339) and, from the command line, `duration_ms`, and `reason` and `by`.
//!
//! The request folder is a door into the service, so the service trusts a request only as far
//! as the command line would: a file must be a regular file (a FIFO, a directory or a symbolic
//! link is refused without being opened), at most [`MAX_REQUEST_BYTES`], owned by the service
//! account (the owner of the state directory) or root, in a folder nobody else can write; the
//! selector must be one the command line accepts, and a shelf lasts at most the unit's
//! `shelve_max`, counted in the unit's data time (a shelf asked for with a duration starts at
//! the unit's newest data, so catching up on old data does not stretch it). The audit line
//! carries the file owner's uid beside the `by` the file claims, with control characters
//! escaped so a reason cannot forge a log line.

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
        /// Until when (wall time when it was asked; used when `duration_ms` is absent).
        until: jiff::Timestamp,
        /// How long, from the unit's newest data when the service applies it (the command line
        /// writes it; hand-written files may leave it out).
        #[serde(default, skip_serializing_if = "Option::is_none")]
        duration_ms: Option<i64>,
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

    /// Check the request as the command line would for `unit` (selector known, a shelf within
    /// `shelve_max_ms`, a reason given), and resolve when a shelf ends in the unit's data time
    /// (`data_now_ms`, the unit's newest data; before any data, a duration runs from when it
    /// was asked). Returns the request with `until` resolved.
    pub fn admit(&self, shelve_max_ms: i64, data_now_ms: Option<i64>) -> Result<Request, String> {
        if self.reason.trim().is_empty() {
            return Err("the request gives no reason".into());
        }
        if self.reason.chars().count() > MAX_REASON_CHARS || self.by.chars().count() > 200 {
            return Err(format!("the reason is longer than {MAX_REASON_CHARS} characters"));
        }
        let mut admitted = self.clone();
        match &mut admitted.action {
            Action::Rebaseline => {}
            Action::Unshelve { selector } => check_selector(selector, &self.unit)?,
            Action::Shelve { selector, until, duration_ms } => {
                check_selector(selector, &self.unit)?;
                let (ms, data_now_ms) = match (*duration_ms, data_now_ms) {
                    (Some(d), _) if d <= 0 => return Err(format!("duration_ms {d} is not positive")),
                    (Some(d), Some(now)) => (d, now),
                    (Some(d), None) => (d, until.as_millisecond().saturating_sub(d)),
                    (None, Some(now)) => (until.as_millisecond().saturating_sub(now), now),
                    (None, None) => {
                        return Err(
                            "a shelf with only `until` needs the unit to have data; give `duration_ms`"
                                .into(),
                        );
                    }
                };
                if ms > shelve_max_ms {
                    return Err(format!(
                        "the shelf would last {:.1} h past the unit's newest data; this unit allows at most {:.1} h (shelve_max)",
                        ms as f64 / 3.6e6,
                        shelve_max_ms as f64 / 3.6e6
                    ));
                }
                *until = jiff::Timestamp::from_millisecond(data_now_ms.saturating_add(ms))
                    .map_err(|e| format!("until: {e}"))?;
            }
        }
        Ok(admitted)
    }

    /// Apply the request to a unit's core; returns the sentence for the audit log (which
    /// records `by` and `reason` beside it).
    pub fn apply(&self, core: &mut UnitCore) -> String {
        match &self.action {
            Action::Rebaseline => {
                core.rebaseline();
                "re-baseline requested: the monitor learns a new baseline from now on".to_string()
            }
            Action::Shelve { selector, until, .. } => {
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

/// The largest request file the service reads.
pub const MAX_REQUEST_BYTES: u64 = 64 * 1024;

/// The longest reason accepted.
pub const MAX_REASON_CHARS: usize = 500;

/// `text` with control characters escaped (`\n`, `\u{1b}`), for a log line nobody can forge.
pub fn escape_controls(text: &str) -> String {
    text.chars().flat_map(|c| if c.is_control() { c.escape_default().collect() } else { vec![c] }).collect()
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
/// a file. The folder is created 0750. Returns the file's path.
pub fn submit(state_dir: &Path, request: &Request) -> io::Result<PathBuf> {
    let dir = directory(state_dir);
    let nanos =
        std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_nanos());
    let path = dir.join(format!("{nanos}-{}-{}.json", request.unit, request.action_name()));
    #[cfg(unix)]
    {
        use std::os::unix::fs::DirBuilderExt as _;
        std::fs::DirBuilder::new().recursive(true).mode(0o750).create(&dir)?;
    }
    #[cfg(not(unix))]
    std::fs::create_dir_all(&dir)?;
    let text = serde_json::to_string_pretty(request).map_err(io::Error::other)?;
    let tmp = path.with_extension("tmp");
    std::fs::write(&tmp, text)?;
    std::fs::rename(&tmp, &path)?;
    Ok(path)
}

/// One entry of the request folder.
#[derive(Debug)]
pub struct Pending {
    /// The file.
    pub path: PathBuf,
    /// Its owner (uid), when known.
    pub owner: Option<u32>,
    /// The request, or why it is refused.
    pub request: Result<Request, String>,
    /// Whether the service should delete it once dealt with (a regular file); other entries
    /// are left alone and reported once.
    pub remove: bool,
}

/// The request files waiting in the state directory, oldest first, each read (or why it is
/// refused); or why the whole folder is refused. The caller removes each entry marked `remove`
/// once it has dealt with it.
pub fn pending(state_dir: &Path) -> Result<Vec<Pending>, String> {
    let dir = directory(state_dir);
    let Ok(rd) = std::fs::read_dir(&dir) else { return Ok(Vec::new()) };
    let service_uid = owner_of(state_dir);
    if let Some(problem) = folder_problem(&dir, service_uid) {
        return Err(problem);
    }
    let mut files: Vec<PathBuf> =
        rd.flatten().map(|e| e.path()).filter(|p| p.extension().is_some_and(|e| e == "json")).collect();
    files.sort();
    Ok(files.into_iter().map(|f| read_one(f, service_uid)).collect())
}

/// The owner of `path` (Unix), if it can be read.
fn owner_of(path: &Path) -> Option<u32> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt as _;
        std::fs::symlink_metadata(path).ok().map(|m| m.uid())
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        None
    }
}

/// Why the request folder itself cannot be trusted: a symbolic link, or writable by others.
fn folder_problem(dir: &Path, service_uid: Option<u32>) -> Option<String> {
    let meta = std::fs::symlink_metadata(dir).ok()?;
    if !meta.is_dir() {
        return Some(format!("{} is not a directory; requests are not read", dir.display()));
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::{MetadataExt as _, PermissionsExt as _};
        let mode = meta.permissions().mode() & 0o7777;
        if crate::sinks::checkpoint::writable_by_others(mode) {
            return Some(format!(
                "{} is group- or world-writable (mode {mode:04o}); requests are not read until it is 0750 or 0700",
                dir.display()
            ));
        }
        if service_uid.is_some_and(|u| meta.uid() != u && meta.uid() != 0) {
            return Some(format!(
                "{} is owned by uid {}, not by the service account; requests are not read",
                dir.display(),
                meta.uid()
            ));
        }
    }
    let _ = service_uid;
    None
}

/// Read one entry: refuse anything but a small regular file of the service account or root,
/// and never block on it (a FIFO is refused before it is opened).
fn read_one(path: PathBuf, service_uid: Option<u32>) -> Pending {
    let owner = owner_of(&path);
    let refuse = |why: String, remove: bool| Pending { path: path.clone(), owner, request: Err(why), remove };
    let Ok(meta) = std::fs::symlink_metadata(&path) else {
        return refuse("vanished before it could be read".into(), false);
    };
    if !meta.file_type().is_file() {
        let kind = if meta.is_dir() {
            "a directory"
        } else if meta.file_type().is_symlink() {
            "a symbolic link"
        } else {
            "not a regular file (a FIFO, socket or device)"
        };
        return refuse(format!("is {kind}; only regular files are read"), false);
    }
    if let (Some(o), Some(s)) = (owner, service_uid)
        && o != s
        && o != 0
    {
        return refuse(format!("is owned by uid {o}, not by the service account or root"), true);
    }
    if meta.len() > MAX_REQUEST_BYTES {
        return refuse(format!("is {} bytes, more than {MAX_REQUEST_BYTES}", meta.len()), true);
    }
    let text = read_capped(&path);
    let request = text.and_then(|t| serde_json::from_str::<Request>(&t).map_err(|e| e.to_string()));
    Pending { path, owner, request, remove: true }
}

/// The file's text, without blocking (opened non-blocking) and at most [`MAX_REQUEST_BYTES`].
fn read_capped(path: &Path) -> Result<String, String> {
    use std::io::Read as _;
    let mut opts = std::fs::OpenOptions::new();
    opts.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt as _;
        opts.custom_flags(libc::O_NONBLOCK | libc::O_NOFOLLOW);
    }
    let f = opts.open(path).map_err(|e| e.to_string())?;
    if !f.metadata().map_err(|e| e.to_string())?.is_file() {
        return Err("not a regular file".into());
    }
    let mut text = String::new();
    f.take(MAX_REQUEST_BYTES + 1).read_to_string(&mut text).map_err(|e| e.to_string())?;
    if text.len() as u64 > MAX_REQUEST_BYTES {
        return Err(format!("more than {MAX_REQUEST_BYTES} bytes"));
    }
    Ok(text)
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
                duration_ms: None,
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
        let p = pending(dir.path()).unwrap();
        assert_eq!(p.len(), 3);
        assert_eq!((&p[0].path, p[0].request.as_ref().unwrap()), (&a, &shelve()));
        assert_eq!((&p[1].path, p[1].request.as_ref().unwrap()), (&b, &second));
        assert!(p[2].request.is_err() && p[2].remove);
        assert!(pending(&dir.path().join("nowhere")).unwrap().is_empty());
    }

    /// FIFOs, directories, links and oversized files in the folder are refused without being
    /// opened (a FIFO would block the service) or read whole; a writable folder is refused.
    #[cfg(unix)]
    #[test]
    fn only_small_regular_files_in_a_private_folder_are_read() {
        use std::os::unix::fs::PermissionsExt as _;
        let dir = tempfile::tempdir().unwrap();
        let good = submit(dir.path(), &shelve()).unwrap();
        let req = directory(dir.path());
        let fifo = req.join("x-fifo.json");
        assert!(std::process::Command::new("mkfifo").arg(&fifo).status().unwrap().success());
        std::fs::create_dir(req.join("y-dir.json")).unwrap();
        std::os::unix::fs::symlink(&good, req.join("z-link.json")).unwrap();
        std::fs::write(req.join("zz-big.json"), vec![b' '; 300_000]).unwrap();
        let p = pending(dir.path()).unwrap();
        let by_name = |n: &str| p.iter().find(|e| e.path.file_name().unwrap() == n).unwrap();
        assert!(by_name(good.file_name().unwrap().to_str().unwrap()).request.is_ok());
        for (name, why, remove) in [
            ("x-fifo.json", "FIFO", false),
            ("y-dir.json", "a directory", false),
            ("z-link.json", "symbolic link", false),
            ("zz-big.json", "more than 65536", true),
        ] {
            let e = by_name(name);
            let err = e.request.as_ref().unwrap_err();
            assert!(err.contains(why), "{name}: {err}");
            assert_eq!(e.remove, remove, "{name}");
        }
        std::fs::set_permissions(&req, std::fs::Permissions::from_mode(0o777)).unwrap();
        let err = pending(dir.path()).unwrap_err();
        assert!(err.contains("world-writable") && err.contains("0777"), "{err}");
    }

    /// The service holds a request to the command line's limits, in the unit's data time: a
    /// duration runs from the unit's newest data; an `until` far past `shelve_max` is refused,
    /// as are unknown selectors and empty reasons.
    #[test]
    fn requests_are_held_to_the_command_line_limits_in_data_time() {
        let week = 7 * 86_400_000;
        let data_now = jiff::Timestamp::from_second(1_796_083_200).unwrap().as_millisecond();
        let mut r = shelve();
        r.action = Action::Shelve {
            selector: "instrument_fault".into(),
            until: "2999-01-01T00:00:00Z".parse().unwrap(),
            duration_ms: None,
        };
        assert!(r.admit(week, Some(data_now)).unwrap_err().contains("shelve_max"));
        // A CLI request made on catch-up data: 1 h from the newest data, whatever the wall clock.
        r.action = Action::Shelve {
            selector: "instrument_fault".into(),
            until: "2999-01-01T00:00:00Z".parse().unwrap(),
            duration_ms: Some(3_600_000),
        };
        let a = r.admit(week, Some(data_now)).unwrap();
        let Action::Shelve { until, .. } = a.action else { panic!() };
        assert_eq!(until.as_millisecond(), data_now + 3_600_000);
        r.action = Action::Shelve {
            selector: "heater_fuoling".into(),
            until: "2026-12-01T01:00:00Z".parse().unwrap(),
            duration_ms: None,
        };
        assert!(r.admit(week, Some(data_now)).unwrap_err().contains("did you mean `heater_fouling`"));
        let mut empty = shelve();
        empty.reason = "  ".into();
        assert!(empty.admit(week, Some(data_now)).is_err());
        assert_eq!(escape_controls("ok\nforged line\u{1b}[31m"), "ok\\nforged line\\u{1b}[31m");
    }
}
