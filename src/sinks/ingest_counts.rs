//! The ingest counters of the last days (records read, rejected, late; intervals closed and
//! not computed), one JSON file per unit and local day (`ingest-<unit>-<date>.json`), which the
//! shift reports read. A day's file is rewritten whole (atomically) at a checkpoint when its
//! counts changed since it was last written.

use std::collections::BTreeMap;
use std::path::Path;

use tracing::warn;

use crate::sinks::report::IngestDay;

/// Write the counters of each day in `days` that differ from what `written` says is on disk
/// into `dir`, except the day `skip`, and note them in `written` (days no longer in `days` are
/// forgotten). A failure is logged and retried at the next checkpoint.
pub fn write_days(
    dir: &Path,
    unit: &str,
    days: &BTreeMap<String, IngestDay>,
    skip: Option<&str>,
    written: &mut BTreeMap<String, IngestDay>,
) {
    written.retain(|day, _| days.contains_key(day));
    for (day, counts) in days {
        if written.get(day) == Some(counts) || skip == Some(day.as_str()) {
            continue;
        }
        let path = dir.join(format!("ingest-{unit}-{day}.json"));
        if let Ok(text) = serde_json::to_string_pretty(counts) {
            let tmp = path.with_extension("json.tmp");
            if std::fs::write(&tmp, text).and_then(|()| std::fs::rename(&tmp, &path)).is_err() {
                warn!(unit = %unit, "cannot write the ingest counters");
                written.remove(day);
            } else {
                written.insert(day.clone(), counts.clone());
            }
        }
    }
}
