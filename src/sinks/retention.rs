//! Retention of a unit's outputs: soft-tag and ingest-count files, alert logs and shift reports
//! older than their configured age (in days before the unit's newest data day) are deleted, so
//! a service that runs for years does not fill its disk. The selection is a pure function of
//! the file names; only [`prune`] touches the disk.

use std::io;
use std::path::Path;

use jiff::civil::Date;

/// How many days of each kind of output to keep (`None`: forever).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Retention {
    /// Soft-tag files and the ingest counts of the same days.
    pub soft_tags_days: Option<u32>,
    /// Alert logs (JSON lines).
    pub alerts_days: Option<u32>,
    /// Shift reports (HTML; `efftemp report` can write one again from the soft tags).
    pub reports_days: Option<u32>,
}

impl Default for Retention {
    /// Soft tags and alerts forever (they are the record), shift reports 90 days.
    fn default() -> Self {
        Retention { soft_tags_days: None, alerts_days: None, reports_days: Some(90) }
    }
}

/// The shortest retention accepted: the service reads back recent alert logs and soft tags
/// (shift reports, restarts), so a week is always kept.
pub const MIN_DAYS: u32 = 7;

/// The date a unit output file's name carries, and how long its kind is kept.
fn dated(name: &str, unit: &str, r: &Retention) -> Option<(Date, Option<u32>)> {
    let pick =
        |prefix: &str, suffix: &str| name.strip_prefix(prefix)?.strip_suffix(suffix).map(str::to_string);
    if let Some(d) = pick(&format!("softtags-{unit}-"), ".csv") {
        return Some((d.parse().ok()?, r.soft_tags_days));
    }
    if let Some(d) = pick(&format!("ingest-{unit}-"), ".json") {
        return Some((d.parse().ok()?, r.soft_tags_days));
    }
    if let Some(d) = pick(&format!("alerts-{unit}-"), ".jsonl") {
        return Some((d.parse().ok()?, r.alerts_days));
    }
    // Reports: shift-<unit>-YYYYMMDD-HHMM.html
    let slug = pick(&format!("shift-{unit}-"), ".html")?;
    let ymd = slug.get(..8)?;
    let date =
        Date::new(ymd.get(..4)?.parse().ok()?, ymd.get(4..6)?.parse().ok()?, ymd.get(6..8)?.parse().ok()?)
            .ok()?;
    Some((date, r.reports_days))
}

/// The names among `names` that are past their retention on `today` (a file of day D is kept
/// while D is within `days` days before `today`).
pub fn expired<'a>(names: &'a [String], unit: &str, today: Date, r: &Retention) -> Vec<&'a str> {
    names
        .iter()
        .filter(|n| {
            dated(n, unit, r).is_some_and(|(day, keep)| {
                keep.is_some_and(|k| {
                    today.since(day).is_ok_and(|span| span.get_days() > i32::try_from(k).unwrap_or(i32::MAX))
                })
            })
        })
        .map(String::as_str)
        .collect()
}

/// Delete the expired outputs of `unit` in `dir` (and `dir/reports`); returns how many went.
pub fn prune(dir: &Path, unit: &str, today: Date, r: &Retention) -> io::Result<usize> {
    let mut gone = 0;
    for d in [dir.to_path_buf(), dir.join("reports")] {
        let Ok(rd) = std::fs::read_dir(&d) else { continue };
        let names: Vec<String> = rd.flatten().filter_map(|e| e.file_name().into_string().ok()).collect();
        for name in expired(&names, unit, today, r) {
            std::fs::remove_file(d.join(name))?;
            gone += 1;
        }
    }
    Ok(gone)
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn each_kind_is_kept_for_its_own_days_counted_from_the_newest_data_day() {
        let names: Vec<String> = [
            "softtags-R-1-2026-11-01.csv",
            "softtags-R-1-2026-11-02.csv",
            "ingest-R-1-2026-11-01.json",
            "alerts-R-1-2026-11-01.jsonl",
            "shift-R-1-20260901-0600.html",
            "shift-R-1-20261101-0600.html",
            "softtags-R-10-2026-01-01.csv", // another unit whose name starts the same
            "notes.txt",
        ]
        .map(String::from)
        .to_vec();
        let today: Date = "2026-12-02".parse().unwrap();
        let r = Retention { soft_tags_days: Some(30), alerts_days: None, reports_days: Some(90) };
        // 11-01 is 31 days before 12-02: past 30; 11-02 is exactly 30: kept.
        assert_eq!(
            expired(&names, "R-1", today, &r),
            vec!["softtags-R-1-2026-11-01.csv", "ingest-R-1-2026-11-01.json", "shift-R-1-20260901-0600.html"]
        );
        assert!(expired(&names, "R-1", today, &Retention { reports_days: None, ..r }).len() == 2);
        let dir = tempfile::tempdir().unwrap();
        std::fs::create_dir(dir.path().join("reports")).unwrap();
        for n in &names {
            let sub =
                if n.starts_with("shift-") { dir.path().join("reports") } else { dir.path().to_path_buf() };
            std::fs::write(sub.join(n), "x").unwrap();
        }
        assert_eq!(prune(dir.path(), "R-1", today, &r).unwrap(), 3);
        assert!(dir.path().join("softtags-R-1-2026-11-02.csv").exists());
        assert!(dir.path().join("softtags-R-10-2026-01-01.csv").exists());
        assert!(!dir.path().join("reports/shift-R-1-20260901-0600.html").exists());
    }
}
