//! Repeated warnings, limited per file and reason: the first occurrence in a file is logged in
//! full, the others are only counted and summed up in one line per pass (and when the file is
//! finished), with the lines they were on and the last one's sentence. One header problem then
//! costs two log lines, not one per row. The counters and metrics are kept by the callers and
//! stay exact; only the log is shortened.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use tracing::warn;

/// Occurrences of one reason in one file since the last summary.
#[derive(Debug)]
struct Repeats {
    /// The file's current path (a renamed file is summed up under its new name).
    path: PathBuf,
    /// Occurrences counted, not logged.
    more: u64,
    /// First and last line of those.
    lines: (u64, u64),
    /// The sentence of the last one.
    last: String,
}

/// What was only counted for one reason in one file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Summary {
    /// The file (its name now).
    pub file: PathBuf,
    /// Reason code.
    pub code: &'static str,
    /// Occurrences not logged one by one.
    pub count: u64,
    /// Line of the first of them.
    pub first_line: u64,
    /// Line of the last of them.
    pub last_line: u64,
    /// The sentence of the last of them.
    pub last: String,
}

/// The rate limiter of one unit's warnings, keyed by file generation id and reason code.
#[derive(Debug, Default)]
pub struct RepeatLog {
    entries: BTreeMap<(u64, &'static str), Repeats>,
}

impl RepeatLog {
    /// An occurrence of `code` in file `id` (now at `path`) at `line`: `true` when it is to be
    /// logged in full (the first of the file), else it is counted for the summary and
    /// `text` (its sentence) kept.
    pub fn first(
        &mut self,
        id: u64,
        path: &Path,
        code: &'static str,
        line: u64,
        text: impl FnOnce() -> String,
    ) -> bool {
        match self.entries.get_mut(&(id, code)) {
            None => {
                let r = Repeats { path: path.to_path_buf(), more: 0, lines: (0, 0), last: String::new() };
                self.entries.insert((id, code), r);
                true
            }
            Some(r) => {
                if r.path != path {
                    r.path = path.to_path_buf();
                }
                if r.more == 0 {
                    r.lines.0 = line;
                }
                r.more += 1;
                r.lines.1 = line;
                r.last = text();
                false
            }
        }
    }

    /// Count every later occurrence of `code` in file `id` without logging it one by one (the
    /// caller has just logged why the whole file is refused).
    pub fn logged(&mut self, id: u64, path: &Path, code: &'static str) {
        let _ = self.first(id, path, code, 0, String::new);
    }

    /// The summaries of everything counted since the last call (at the end of a pass).
    pub fn take(&mut self) -> Vec<Summary> {
        self.entries.iter_mut().filter_map(|(&(_, code), r)| summary(code, r)).collect()
    }

    /// The summaries of file `id`, which is finished: it is forgotten.
    pub fn finish(&mut self, id: u64) -> Vec<Summary> {
        let keys: Vec<(u64, &'static str)> =
            self.entries.range((id, "")..).take_while(|(k, _)| k.0 == id).map(|(k, _)| *k).collect();
        let mut out = Vec::new();
        for k in keys {
            if let Some(mut r) = self.entries.remove(&k) {
                out.extend(summary(k.1, &mut r));
            }
        }
        out
    }
}

fn summary(code: &'static str, r: &mut Repeats) -> Option<Summary> {
    if r.more == 0 {
        return None;
    }
    let s = Summary {
        file: r.path.clone(),
        code,
        count: r.more,
        first_line: r.lines.0,
        last_line: r.lines.1,
        last: std::mem::take(&mut r.last),
    };
    r.more = 0;
    Some(s)
}

/// Log a summary: a single occurrence as itself, several as one line.
pub fn warn_summary(unit: &str, s: &Summary) {
    let file = s.file.display();
    if s.count == 1 {
        warn!(unit = %unit, file = %file, line = s.last_line, reason = s.code, "{}", s.last);
    } else {
        warn!(
            unit = %unit, file = %file, line = s.first_line, last_line = s.last_line, count = s.count, reason = s.code,
            "… and {} more rows with the same problem ({}) in this file, lines {}-{}; the last: {}",
            s.count, s.code, s.first_line, s.last_line, s.last
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_first_is_logged_the_rest_summed_up_per_pass_and_file() {
        let mut log = RepeatLog::default();
        let a = Path::new("a.csv");
        assert!(log.first(1, a, "non_numeric", 2, || "x".into()));
        for line in 3..=12_961 {
            assert!(!log.first(1, a, "non_numeric", line, || format!("row {line}")));
        }
        assert!(log.first(1, a, "short_row", 5, || "y".into()), "another reason is logged on its own");
        assert!(log.first(2, a, "non_numeric", 7, || "z".into()), "another file is logged on its own");
        let s = log.take();
        assert_eq!(s.len(), 1);
        assert_eq!((s[0].count, s[0].first_line, s[0].last_line), (12_959, 3, 12_961));
        assert_eq!(s[0].last, "row 12961");
        assert!(log.take().is_empty(), "a summary is given once");
        // Later passes sum up again; a renamed file is summed up under its new name.
        assert!(!log.first(1, Path::new("b.csv"), "non_numeric", 20_000, || "w".into()));
        let s = log.finish(1);
        assert_eq!((s[0].file.as_path(), s[0].count), (Path::new("b.csv"), 1));
        assert!(log.first(1, a, "non_numeric", 1, || "v".into()), "a finished file is forgotten");
        // A file refused at its header: its rows are only counted.
        log.logged(3, a, "wrong_layout");
        assert!(!log.first(3, a, "wrong_layout", 2, || "r".into()));
        assert_eq!(log.take().len(), 1);
    }
}
