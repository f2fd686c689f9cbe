//! The shift-report sink: when an interval passes the end of the shift the previous interval
//! belonged to, the report of that shift is written (see [`write`](super::write)).

use std::io;
use std::path::PathBuf;

use jiff::civil::Time;
use tracing::{info, warn};

use super::ReportUnit;
use crate::core::Outcome;
use crate::core::calendar::{Shift, shift_containing};
use crate::sinks::Sink;

/// Writes each unit's shift report as its shift ends, in event time.
pub struct ShiftReports {
    unit: ReportUnit,
    output_dir: PathBuf,
    shifts: Vec<Time>,
    enabled: bool,
    /// End of the last interval seen (kept in the checkpoint).
    pub last_end_ms: Option<i64>,
    /// The shift whose report the next write renders (found by [`ShiftReports::due`]).
    pending: Option<Shift>,
    /// The report written last: path and text summary.
    written: Option<(PathBuf, String)>,
}

impl ShiftReports {
    /// Reports of `unit` under `output_dir` for the shift pattern `shifts`; with `enabled`
    /// false only the interval ends are tracked.
    pub fn new(
        unit: ReportUnit,
        output_dir: PathBuf,
        shifts: Vec<Time>,
        enabled: bool,
        last_end_ms: Option<i64>,
    ) -> ShiftReports {
        ShiftReports { unit, output_dir, shifts, enabled, last_end_ms, pending: None, written: None }
    }

    fn ended(&self, outcome: &Outcome) -> Option<Shift> {
        if !self.enabled {
            return None;
        }
        let end = outcome.evaluation.end_ms;
        let shift = shift_containing(self.last_end_ms?, &self.shifts, &self.unit.time_zone)?;
        (end >= shift.end_ms).then_some(shift)
    }

    /// Whether writing this outcome ends a shift (its report reads the other sinks' files,
    /// which must be flushed first).
    pub fn due(&mut self, outcome: &Outcome) -> bool {
        self.pending = self.ended(outcome);
        self.pending.is_some()
    }

    /// The report written by the last [`Sink::write`], if any.
    pub fn take_written(&mut self) -> Option<(PathBuf, String)> {
        self.written.take()
    }
}

impl Sink for ShiftReports {
    fn write(&mut self, outcome: &Outcome) -> io::Result<()> {
        let shift = self.pending.take().or_else(|| self.ended(outcome));
        self.last_end_ms = Some(outcome.evaluation.end_ms);
        let Some(shift) = shift else { return Ok(()) };
        // A report that cannot be written is logged; the data it would show are on disk.
        match super::write(&self.unit, &self.output_dir, &shift) {
            Ok((path, text)) => {
                info!(unit = %self.unit.name, report = %path.display(), "shift report written");
                self.written = Some((path, text));
            }
            Err(e) => warn!(unit = %self.unit.name, error = %e, "cannot write the shift report"),
        }
        Ok(())
    }

    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }

    fn sync(&mut self) -> io::Result<()> {
        Ok(())
    }
}
