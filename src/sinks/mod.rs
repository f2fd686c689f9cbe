//! Where the outcome of each interval goes: soft-tag CSV files, syslog, the alert log and the
//! shift reports, in that fixed order ([`Sinks`]); besides them the ingest counters and the
//! checkpoint of the state directory.
//!
//! Every sink is idempotent by the natural key of what it writes (a soft-tag row by its
//! interval end, an alert event by its sequence number), so re-processing intervals after a
//! restart writes nothing twice. The syslog queue comes before the alert log: the queue is
//! durable at once and the log at the next checkpoint, so a crash in between can repeat an
//! event downstream (its id and sequence number identify it) but never lose one.

use std::io;
use std::path::PathBuf;

use crate::core::Outcome;
use crate::core::alerts::AlertEvent;

pub mod alert_log;
pub mod checkpoint;
pub mod daily;
pub mod durable;
pub mod ingest_counts;
pub mod journal;
pub mod report;
pub mod retention;
pub mod softtags;
pub mod syslog;

use alert_log::AlertWriter;
use durable::SyncSet;
use report::ShiftReports;
use softtags::SoftTagWriter;
use syslog::SyslogSink;

/// One destination of the per-interval outcome.
pub trait Sink {
    /// Write what one interval produced; what is already written is skipped.
    fn write(&mut self, outcome: &Outcome) -> io::Result<()>;
    /// Make what was written visible to readers (no fsync).
    fn flush(&mut self) -> io::Result<()>;
    /// Flush what was written and name the files to fsync in `set`, so that it is durable
    /// before a checkpoint is written (the set is synced in parallel).
    fn sync_into(&mut self, set: &mut SyncSet) -> io::Result<()>;
}

/// The sinks of one unit, in their fixed order.
pub struct Sinks {
    /// Soft-tag rows.
    pub soft_tags: SoftTagWriter,
    /// Syslog forwarding (the live service, when configured).
    pub syslog: Option<SyslogSink>,
    /// The alert log.
    pub alert_log: AlertWriter,
    /// Shift reports when a shift ends (when enabled).
    pub reports: Option<ShiftReports>,
}

/// What the sinks wrote for one outcome that was not on disk before.
#[derive(Debug, Default)]
pub struct Written {
    /// Alert events newly in the alert log.
    pub events: Vec<AlertEvent>,
    /// A shift report: its path and text summary.
    pub report: Option<(PathBuf, String)>,
}

impl Sinks {
    /// Write one outcome to every sink in order (a shift report is rendered from memory, not
    /// from the files the sinks before it write).
    pub fn write(&mut self, outcome: &Outcome) -> io::Result<Written> {
        let before = self.alert_log.last_sequence;
        self.soft_tags.write(outcome)?;
        if let Some(s) = self.syslog.as_mut() {
            s.write(outcome)?;
        }
        self.alert_log.write(outcome)?;
        let events = outcome.events.iter().filter(|e| e.sequence > before).cloned().collect();
        let mut report = None;
        if let Some(r) = self.reports.as_mut() {
            r.write(outcome)?;
            report = r.take_written();
        }
        Ok(Written { events, report })
    }

    /// Flush every sink.
    pub fn flush(&mut self) -> io::Result<()> {
        for s in self.in_order() {
            s.flush()?;
        }
        Ok(())
    }

    /// Flush every sink and name its files to fsync in `set`.
    pub fn sync_into(&mut self, set: &mut SyncSet) -> io::Result<()> {
        for s in self.in_order() {
            s.sync_into(set)?;
        }
        Ok(())
    }

    fn in_order(&mut self) -> Vec<&mut dyn Sink> {
        let mut v: Vec<&mut dyn Sink> = vec![&mut self.soft_tags];
        if let Some(s) = self.syslog.as_mut() {
            v.push(s);
        }
        v.push(&mut self.alert_log);
        if let Some(r) = self.reports.as_mut() {
            v.push(r);
        }
        v
    }
}
