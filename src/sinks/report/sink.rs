//! The shift-report sink: it keeps the shift in progress in memory ([`ShiftBook`]) and, when
//! an interval ends past its shift, renders that shift's report from memory and writes it
//! (the HTML page and the record of what the soft tags do not hold). The book is also on the
//! live board, for the service's pages.

use std::io;
use std::path::PathBuf;
use std::sync::{Arc, Mutex, PoisonError};

use jiff::civil::Time;
use tracing::{info, warn};

use super::ReportUnit;
use super::live::{Board, SharedBook, board};
use super::shift::{ReadCounts, ShiftBook};
use crate::core::{Outcome, UnitCore};
use crate::sinks::Sink;
use crate::sinks::durable::SyncSet;

/// Writes each unit's shift report as its shift ends, in event time.
pub struct ShiftReports {
    book: Option<SharedBook>,
    board: Option<Arc<Board>>,
    name: String,
    output_dir: PathBuf,
    /// End of the last interval seen (kept in the checkpoint).
    pub last_end_ms: Option<i64>,
    /// The report written last: path and text summary.
    written: Option<(PathBuf, String)>,
}

impl ShiftReports {
    /// Reports of `unit` under `output_dir` for the shift pattern `shifts`; with `enabled`
    /// false only the interval ends are tracked (no book, no live view).
    pub fn new(
        mut unit: ReportUnit,
        output_dir: PathBuf,
        shifts: Vec<Time>,
        enabled: bool,
        last_end_ms: Option<i64>,
    ) -> ShiftReports {
        unit.output_dir = output_dir.clone();
        unit.shifts = shifts;
        let name = unit.name.clone();
        let book = enabled.then(|| {
            let mut book = ShiftBook::new(Arc::new(unit));
            // After a restart the shift in progress is loaded from the files once, so that the
            // live view and the shift's report have its first part.
            if let Some(t) = last_end_ms {
                book.begin(t + 1, Some(t));
            }
            Arc::new(Mutex::new(book))
        });
        let board = book.as_ref().map(|b| {
            let board = board(&output_dir);
            board.register(&name, b.clone());
            board
        });
        ShiftReports { book, board, name, output_dir, last_end_ms, written: None }
    }

    /// Take what the unit's monitor and alert book hold after the interval about to be
    /// written, and the pipeline's read counters.
    pub fn observe(&mut self, core: &UnitCore, read: ReadCounts<'_>) {
        if let Some(b) = &self.book {
            b.lock().unwrap_or_else(PoisonError::into_inner).observe(core, read);
        }
    }

    /// The report written by the last [`Sink::write`], if any.
    pub fn take_written(&mut self) -> Option<(PathBuf, String)> {
        self.written.take()
    }
}

impl Drop for ShiftReports {
    fn drop(&mut self) {
        if let (Some(board), Some(book)) = (&self.board, &self.book) {
            board.unregister(&self.name, book);
        }
    }
}

impl Sink for ShiftReports {
    fn write(&mut self, outcome: &Outcome) -> io::Result<()> {
        let end = outcome.evaluation.end_ms;
        self.last_end_ms = Some(end);
        let Some(book) = &self.book else { return Ok(()) };
        let mut book = book.lock().unwrap_or_else(PoisonError::into_inner);
        if book.shift.is_none() {
            book.begin(end, None);
        } else if book.ends_shift(end) {
            // A report that cannot be written is logged; its data are in the soft tags.
            if let Some(data) = book.data(false) {
                match super::write_report(&data, &self.output_dir) {
                    Ok((path, text)) => {
                        info!(unit = %self.name, report = %path.display(), "shift report written");
                        self.written = Some((path, text));
                    }
                    Err(e) => warn!(unit = %self.name, error = %e, "cannot write the shift report"),
                }
            }
            book.close();
            book.begin(end, None);
        }
        book.add(outcome);
        Ok(())
    }

    fn flush(&mut self) -> io::Result<()> {
        Ok(())
    }

    fn sync_into(&mut self, _: &mut SyncSet) -> io::Result<()> {
        Ok(())
    }
}
