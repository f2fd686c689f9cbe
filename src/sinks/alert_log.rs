//! The alert log: one JSON object per alert event, one file per unit and local day
//! (`alerts-<unit>-<date>.jsonl`), optionally echoed on standard output. Idempotent: an event
//! whose sequence number is already on disk is not written again.

use std::io::{self, Write};
use std::path::{Path, PathBuf};

use jiff::Timestamp;
use jiff::tz::TimeZone;

use crate::core::Outcome;
use crate::core::alerts::AlertEvent;
use crate::core::calendar::DayCache;
use crate::sinks::Sink;
use crate::sinks::daily::{DayFile, dated_files, day_file, flush_day, flush_day_into, last_complete_line};
use crate::sinks::durable::SyncSet;

/// Alert JSON-lines writer of one unit.
pub struct AlertWriter {
    dir: PathBuf,
    /// File-name prefix, `alerts-<unit>-`.
    prefix: String,
    tz: TimeZone,
    current: Option<DayFile>,
    days: DayCache,
    stdout: bool,
    /// Sequence number of the last event on disk.
    pub last_sequence: u64,
}

impl AlertWriter {
    /// Open the writer; finds the last sequence number on disk.
    pub fn open(dir: &Path, unit: &str, tz: TimeZone, stdout: bool) -> io::Result<AlertWriter> {
        let prefix = format!("alerts-{unit}-");
        let mut last = 0;
        for (_, path) in dated_files(dir, &prefix, ".jsonl").into_iter().rev() {
            if let Some(line) = last_complete_line(&path, true)?
                && let Ok(v) = serde_json::from_str::<serde_json::Value>(&line)
            {
                last = v.get("sequence").and_then(serde_json::Value::as_u64).unwrap_or(0);
                break;
            }
        }
        Ok(AlertWriter {
            dir: dir.to_path_buf(),
            prefix,
            tz,
            current: None,
            days: DayCache::default(),
            stdout,
            last_sequence: last,
        })
    }

    /// Whether an event is not yet on disk (it would be written).
    pub fn is_new(&self, ev: &AlertEvent) -> bool {
        ev.sequence > self.last_sequence
    }

    /// Append an event unless its sequence number is already on disk. Returns whether it was
    /// written (callers forward only written events).
    pub fn write_event(&mut self, ev: &AlertEvent) -> io::Result<bool> {
        if ev.sequence <= self.last_sequence {
            return Ok(false);
        }
        let day = self.days.day_at(ev.time_ms, &self.tz);
        let file = day_file(&mut self.current, &self.dir, &self.prefix, ".jsonl", day, None)?;
        let line = serde_json::to_string(ev).map_err(io::Error::other)?;
        writeln!(file.out, "{line}")?;
        if self.stdout {
            let mut out = io::stdout().lock();
            match writeln!(out, "{line}").and_then(|()| out.flush()) {
                Ok(()) => {}
                // The reader of standard output went away: the copies stop, the alert log
                // (the record) goes on.
                Err(e) if e.kind() == io::ErrorKind::BrokenPipe => {
                    tracing::warn!(unit = %ev.unit, "standard output is closed: alert events are no longer copied there");
                    self.stdout = false;
                }
                Err(e) => return Err(e),
            }
        }
        self.last_sequence = ev.sequence;
        Ok(true)
    }
}

impl Sink for AlertWriter {
    fn write(&mut self, outcome: &Outcome) -> io::Result<()> {
        for event in &outcome.events {
            self.write_event(event)?;
        }
        Ok(())
    }

    fn flush(&mut self) -> io::Result<()> {
        flush_day(&mut self.current, false)
    }

    fn sync_into(&mut self, set: &mut SyncSet) -> io::Result<()> {
        flush_day_into(&mut self.current, set)
    }
}

/// Every alert event of a unit up to `to_ms` (all files: active alerts may be old).
pub fn load_events(dir: &Path, unit: &str, to_ms: i64) -> Vec<AlertEvent> {
    let files = crate::sinks::daily::dated_files(dir, &format!("alerts-{unit}-"), ".jsonl");
    let mut out = Vec::new();
    for (_, f) in files {
        for line in std::fs::read_to_string(&f).unwrap_or_default().lines() {
            if let Ok(mut e) = serde_json::from_str::<AlertEvent>(line) {
                e.time_ms = e.time.parse::<Timestamp>().map(|t| t.as_millisecond()).unwrap_or(0);
                if e.time_ms <= to_ms {
                    out.push(e);
                }
            }
        }
    }
    out.sort_by_key(|e| e.sequence);
    out
}
