//! The pipeline's counters: per unit, what was read, rejected and computed (for the metrics
//! and the replay summary), the ingest counters of the last local days (for the shift
//! reports), and the snapshot the metrics endpoint shows.

use std::collections::BTreeMap;

use jiff::tz::TimeZone;

use crate::core::calendar::DayCache;
use crate::ingest::rows::Reject;
use crate::sinks::report::IngestDay;

/// Counters of one unit (exposed as metrics and in logs).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Counters {
    /// Data records read.
    pub records: u64,
    /// Samples accepted.
    pub samples: u64,
    /// Rejections by reason code.
    pub rejected: BTreeMap<&'static str, u64>,
    /// Samples for already-closed intervals.
    pub late: u64,
    /// Duplicates with a different value.
    pub conflicting_duplicates: u64,
    /// Intervals closed.
    pub intervals: u64,
    /// Intervals whose prediction could not be computed.
    pub not_computed: u64,
    /// Solver failures.
    pub solver_failures: u64,
    /// Alert events by (cause, event).
    pub alert_events: BTreeMap<(String, String), u64>,
    /// Bytes read from export files.
    pub bytes: u64,
}

/// The ingest counters by local day: records go to the day of the newest data, intervals to
/// the day they end in. What is counted before any data time is known (a file refused at its
/// header, rows with unreadable timestamps) goes to the first day data arrive.
#[derive(Debug, Clone, Default)]
pub struct Tally {
    /// Counters by local date (`YYYY-MM-DD`).
    pub days: BTreeMap<String, IngestDay>,
    /// Counted before any data time was known.
    pending: IngestDay,
    cache: DayCache,
}

impl Tally {
    /// Resume from saved counters.
    pub fn new(days: BTreeMap<String, IngestDay>) -> Tally {
        Tally { days, pending: IngestDay::default(), cache: DayCache::default() }
    }

    fn day_at(&mut self, t_ms: i64, tz: &TimeZone) -> &mut IngestDay {
        let day = self.cache.day_at(t_ms, tz);
        if !self.days.contains_key(day) {
            self.days.insert(day.to_owned(), IngestDay::default());
        }
        let d = self.days.get_mut(day).expect("inserted above");
        if self.pending != IngestDay::default() {
            let p = std::mem::take(&mut self.pending);
            d.records += p.records;
            d.late += p.late;
            for (k, v) in p.rejected {
                *d.rejected.entry(k).or_default() += v;
            }
        }
        d
    }

    /// The day of the newest data, or the counters waiting for one.
    fn day_or_pending(&mut self, newest: Option<i64>, tz: &TimeZone) -> &mut IngestDay {
        match newest {
            Some(t) => self.day_at(t, tz),
            None => &mut self.pending,
        }
    }

    /// A record read, with its late samples and rejections; `newest` is the newest data time.
    pub fn record(&mut self, newest: Option<i64>, tz: &TimeZone, late: u64, rejects: &[Reject]) {
        let d = self.day_or_pending(newest, tz);
        d.records += 1;
        d.late += late;
        for r in rejects {
            *d.rejected.entry(r.code().to_string()).or_default() += 1;
        }
    }

    /// `n` samples not used for reason `code` (duplicates).
    pub fn count(&mut self, newest: Option<i64>, tz: &TimeZone, code: &str, n: u64) {
        *self.day_or_pending(newest, tz).rejected.entry(code.to_string()).or_default() += n;
    }

    /// A record the tailer rejected.
    pub fn rejected(&mut self, newest: Option<i64>, tz: &TimeZone, code: &str) {
        *self.day_or_pending(newest, tz).rejected.entry(code.to_string()).or_default() += 1;
    }

    /// An interval closed (and whether its prediction was computed).
    pub fn interval(&mut self, end_ms: i64, tz: &TimeZone, computed: bool) {
        let day = self.cache.day_of_interval(end_ms, tz);
        if !self.days.contains_key(day) {
            self.days.insert(day.to_owned(), IngestDay::default());
        }
        let d = self.days.get_mut(day).expect("inserted above");
        d.intervals += 1;
        if !computed {
            d.not_computed += 1;
        }
    }

    /// Keep the last three days only.
    pub fn trim(&mut self) {
        while self.days.len() > 3 {
            self.days.pop_first();
        }
    }
}

/// Figures of one unit.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct UnitSnapshot {
    /// Unit name.
    pub name: String,
    /// Data records read.
    pub records: u64,
    /// Rejections by reason.
    pub rejected: BTreeMap<String, u64>,
    /// Late samples.
    pub late: u64,
    /// Intervals closed.
    pub intervals: u64,
    /// Intervals not computed.
    pub not_computed: u64,
    /// Solver failures.
    pub solver_failures: u64,
    /// Alert events written, by (cause, event).
    pub alert_events: BTreeMap<(String, String), u64>,
    /// Active alerts by cause.
    pub active_alerts: BTreeMap<String, u64>,
    /// Newest data time, ms.
    pub last_data_ms: Option<i64>,
    /// Monitor state.
    pub monitor_state: String,
    /// Bytes read from export files.
    pub bytes: u64,
    /// Why the export directory could not be read at the last pass (the unit is blind).
    pub input_problem: Option<String>,
    /// Export bytes waiting beyond what the last pass read (`None`: it read everything).
    pub backlog_bytes: Option<u64>,
}
