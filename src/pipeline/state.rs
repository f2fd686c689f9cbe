//! What the service keeps between runs: per unit, where each export file was read to, the
//! intervals still open, the monitor, the alert book, the ingest counters of the last days and
//! the end of the last interval. Written into the state directory's checkpoint
//! ([`crate::sinks::checkpoint`]) as a tagged, versioned value, so that a later build can read
//! (and upgrade) what an earlier one wrote.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::core::alerts::AlertBook;
use crate::core::assembly::Assembler;
use crate::core::monitor::Monitor;
use crate::ingest::tail::TailState;
use crate::sinks::journal::Span;
use crate::sinks::report::IngestDay;

/// The format tag of the checkpoints this build writes.
const FORMAT_1: &str = "efftemp-units-1";

/// Saved state of one unit.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct UnitState {
    /// Tailer offsets.
    pub tail: TailState,
    /// Open intervals.
    pub assembler: Option<Assembler>,
    /// Alert lifecycle.
    pub alerts: AlertBook,
    /// Monitor (baseline, charts, attribution).
    pub monitor: Option<Monitor>,
    /// Ingest counters by local day (for the shift reports).
    #[serde(default)]
    pub ingest: BTreeMap<String, IngestDay>,
    /// End of the last interval processed, ms.
    #[serde(default)]
    pub last_end_ms: Option<i64>,
    /// Header rows found again in the middle of export files, by file id (in decimal: JSON
    /// object keys are strings).
    #[serde(default)]
    pub header_overrides: BTreeMap<String, Vec<String>>,
    /// The monitor's block history in the unit's journal (`None`: none, or a checkpoint
    /// written before the journal, whose monitor carries its history inline).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub history: Option<Span>,
}

/// The state of every unit of a site, by unit name.
pub type Units = BTreeMap<String, UnitState>;

/// The checkpoint as stored: one variant per format, named by its `format` tag. A checkpoint
/// written before formats were tagged (no `format` key) is read as [`Stored::Untagged`].
#[derive(Debug, Clone)]
pub enum Stored {
    /// A tagged checkpoint.
    Tagged(Tagged),
    /// The first builds' checkpoint: `{"units": {...}}` without a tag (same content as format 1).
    Untagged {
        /// Per unit.
        units: Units,
    },
}

/// The tagged formats.
#[derive(Debug, Clone, Deserialize)]
#[serde(tag = "format")]
pub enum Tagged {
    /// Format 1.
    #[serde(rename = "efftemp-units-1")]
    V1 {
        /// Per unit.
        units: Units,
    },
}

impl<'de> Deserialize<'de> for Stored {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Stored, D::Error> {
        use serde::de::Error as _;
        #[derive(Deserialize)]
        struct First {
            units: Units,
        }
        let v = serde_json::Value::deserialize(d)?;
        if v.get("format").is_some() {
            Tagged::deserialize(v).map(Stored::Tagged).map_err(D::Error::custom)
        } else {
            First::deserialize(v).map(|f| Stored::Untagged { units: f.units }).map_err(D::Error::custom)
        }
    }
}

impl Stored {
    /// The units' state in the current format.
    pub fn into_units(self) -> Units {
        match self {
            Stored::Tagged(Tagged::V1 { units }) | Stored::Untagged { units } => units,
        }
    }
}

/// A [`UnitState`] borrowed from a running unit: the same JSON without copying the unit's
/// buffers, alert book and monitor history at every checkpoint.
#[derive(Serialize)]
pub struct UnitStateRef<'a> {
    /// Tailer offsets.
    pub tail: TailState,
    /// Open intervals.
    pub assembler: &'a Assembler,
    /// Alert lifecycle.
    pub alerts: &'a AlertBook,
    /// Monitor.
    pub monitor: &'a Monitor,
    /// Ingest counters by local day.
    pub ingest: &'a BTreeMap<String, IngestDay>,
    /// End of the last interval processed, ms.
    pub last_end_ms: Option<i64>,
    /// Header rows found again in the middle of export files, by file id (in decimal).
    pub header_overrides: BTreeMap<String, Vec<String>>,
    /// The monitor's block history in the unit's journal.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub history: Option<Span>,
}

/// The checkpoint to write, borrowed from the running units, tagged with the current format.
#[derive(Serialize)]
pub struct StoredRef<'a> {
    format: &'static str,
    units: BTreeMap<&'a str, UnitStateRef<'a>>,
}

impl<'a> StoredRef<'a> {
    /// The checkpoint of these units.
    pub fn new(units: BTreeMap<&'a str, UnitStateRef<'a>>) -> StoredRef<'a> {
        StoredRef { format: FORMAT_1, units }
    }

    /// The checkpoint's JSON text: the same bytes as `serde_json::to_vec(self)`, with the
    /// units serialized on several threads (at 200 units the text is about 3 MB, most of it
    /// numbers to format, and the thread that syncs the outputs meanwhile only waits on the disk).
    ///
    /// # Errors
    /// When a unit's state cannot be serialized.
    pub fn to_json(&self) -> serde_json::Result<Vec<u8>> {
        let units: Vec<(&str, &UnitStateRef<'a>)> = self.units.iter().map(|(k, v)| (*k, v)).collect();
        let threads = std::thread::available_parallelism().map_or(1, usize::from).clamp(1, ENCODE_THREADS);
        let chunk = units.len().div_ceil(threads).max(MIN_UNITS_PER_THREAD);
        let encode = |part: &[(&str, &UnitStateRef<'a>)]| -> serde_json::Result<Vec<u8>> {
            let mut out = Vec::with_capacity(part.len() * 16 * 1024);
            for (name, unit) in part {
                if !out.is_empty() {
                    out.push(b',');
                }
                serde_json::to_writer(&mut out, name)?;
                out.push(b':');
                serde_json::to_writer(&mut out, unit)?;
            }
            Ok(out)
        };
        let parts: Vec<serde_json::Result<Vec<u8>>> = if units.len() <= chunk {
            vec![encode(&units)]
        } else {
            std::thread::scope(|s| {
                let handles: Vec<_> = units.chunks(chunk).map(|part| s.spawn(move || encode(part))).collect();
                handles
                    .into_iter()
                    .map(|h| {
                        h.join().unwrap_or_else(|_| {
                            Err(serde::ser::Error::custom("a checkpoint encoding thread panicked"))
                        })
                    })
                    .collect()
            })
        };
        let mut text = Vec::with_capacity(parts.iter().flatten().map(Vec::len).sum::<usize>() + 64);
        text.extend_from_slice(br#"{"format":"#);
        serde_json::to_writer(&mut text, self.format)?;
        text.extend_from_slice(br#","units":{"#);
        let mut first = true;
        for part in parts {
            let part = part?;
            if part.is_empty() {
                continue;
            }
            if !first {
                text.push(b',');
            }
            first = false;
            text.extend_from_slice(&part);
        }
        text.extend_from_slice(b"}}");
        Ok(text)
    }
}

/// At most this many threads encode a checkpoint.
const ENCODE_THREADS: usize = 4;

/// Fewer units than this are not worth a thread of their own.
const MIN_UNITS_PER_THREAD: usize = 16;

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn unit_state_json() -> serde_json::Value {
        serde_json::to_value(UnitState { last_end_ms: Some(60_000), ..UnitState::default() }).unwrap()
    }

    #[test]
    fn the_current_format_and_the_untagged_first_one_both_read() {
        let unit = unit_state_json();
        let tagged = serde_json::json!({ "format": FORMAT_1, "units": { "R-1": unit } });
        let untagged = serde_json::json!({ "units": { "R-1": unit } });
        for v in [tagged, untagged] {
            let s: Stored = serde_json::from_value(v.clone()).unwrap();
            let units = s.into_units();
            assert_eq!(units["R-1"].last_end_ms, Some(60_000), "{v}");
        }
    }

    #[test]
    fn an_unknown_format_is_not_read_as_another() {
        let v = serde_json::json!({ "format": "efftemp-units-99", "units": {} });
        assert!(serde_json::from_value::<Stored>(v).is_err());
    }

    #[test]
    fn what_is_written_is_what_is_read() {
        let s = UnitState::default();
        let a = Assembler::new(60_000, 180_000, 60_000, Vec::new());
        let m = Monitor::new(&crate::core::monitor::settings::MonitorConfig::default(), 60_000);
        let overrides =
            BTreeMap::from([("7".to_string(), vec!["Timestamp".to_string(), "TI-1".to_string()])]);
        let r = UnitStateRef {
            tail: s.tail.clone(),
            assembler: &a,
            alerts: &s.alerts,
            monitor: &m,
            ingest: &s.ingest,
            last_end_ms: Some(5),
            header_overrides: overrides.clone(),
            history: Some(Span { first_end_ms: 600_000, last_end_ms: 1_200_000, count: 2 }),
        };
        let stored = StoredRef::new(BTreeMap::from([("U", r)]));
        let text = serde_json::to_string(&stored).unwrap();
        assert_eq!(stored.to_json().unwrap(), text.as_bytes());
        assert!(text.starts_with(r#"{"format":"efftemp-units-1","units":"#), "{text}");
        let back = serde_json::from_str::<Stored>(&text).unwrap().into_units();
        assert_eq!(back["U"].last_end_ms, Some(5));
        assert_eq!(back["U"].monitor.as_ref(), Some(&m));
        assert_eq!(back["U"].header_overrides, overrides);
        assert_eq!(back["U"].history.map(|s| s.count), Some(2));
    }

    #[test]
    fn the_threaded_encoding_is_the_serde_encoding() {
        let a = Assembler::new(60_000, 180_000, 60_000, Vec::new());
        let m = Monitor::new(&crate::core::monitor::settings::MonitorConfig::default(), 60_000);
        let s = UnitState::default();
        let names: Vec<String> = (0..70).map(|i| format!("U-{i:03} \"quoted\"")).collect();
        for n in [0, 1, 15, 16, 17, 70] {
            let units = names[..n]
                .iter()
                .enumerate()
                .map(|(i, name)| {
                    let r = UnitStateRef {
                        tail: s.tail.clone(),
                        assembler: &a,
                        alerts: &s.alerts,
                        monitor: &m,
                        ingest: &s.ingest,
                        last_end_ms: Some(i as i64),
                        header_overrides: BTreeMap::new(),
                        history: (i % 2 == 0).then_some(Span { first_end_ms: 0, last_end_ms: 9, count: 10 }),
                    };
                    (name.as_str(), r)
                })
                .collect();
            let stored = StoredRef::new(units);
            let want = serde_json::to_vec(&stored).unwrap();
            assert_eq!(
                String::from_utf8(stored.to_json().unwrap()).unwrap(),
                String::from_utf8(want).unwrap(),
                "{n} units"
            );
        }
    }
}
