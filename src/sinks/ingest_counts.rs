//! The ingest counters of the last days (records read, rejected, late; intervals closed and
//! not computed), one JSON file per unit and local day (`ingest-<unit>-<date>.json`), which the
//! shift reports read. Rewritten whole (atomically) at each checkpoint.

use std::collections::BTreeMap;
use std::path::Path;

use tracing::warn;

use crate::sinks::report::IngestDay;

/// Write the counters of each day in `days` into `dir`. A failure is logged and retried at the
/// next checkpoint.
pub fn write_days(dir: &Path, unit: &str, days: &BTreeMap<String, IngestDay>) {
    for (day, counts) in days {
        let path = dir.join(format!("ingest-{unit}-{day}.json"));
        if let Ok(text) = serde_json::to_string_pretty(counts) {
            let tmp = path.with_extension("json.tmp");
            if std::fs::write(&tmp, text).and_then(|()| std::fs::rename(&tmp, &path)).is_err() {
                warn!(unit = %unit, "cannot write the ingest counters");
            }
        }
    }
}
