//! The monitor's block history kept out of the checkpoint: one append-only journal per unit,
//! `<state_dir>/history/<unit>.jsonl`, one completed block per line.
//!
//! The history (up to the trend window, 14 days of 10-minute blocks, ~0.3 kB each) is most of
//! a unit's state; rewriting it whole at every checkpoint made the checkpoint cost grow with the
//! history and the number of units. Here a checkpoint appends only the blocks completed since
//! the last one (most checkpoints append nothing: a unit completes a block every ten minutes)
//! and the checkpoint itself records only which blocks are live, as a [`Span`]: the first and
//! last block end and the count.
//!
//! Crash safety: blocks are appended and made durable *before* the checkpoint that names them
//! is written, so every span a checkpoint on disk names is in the journal. Blocks written after
//! the last checkpoint (a crash in between) lie outside its span and are dropped when the
//! journal is opened. Old blocks are dropped by rewriting the journal (a temporary file renamed
//! over it) once it holds more dead lines than live ones, keeping every block the current and the
//! previous checkpoint name (the state directory keeps one previous checkpoint generation to fall
//! back on).

use std::collections::VecDeque;
use std::fs::{self, File, OpenOptions};
use std::io::{self, BufRead, BufReader, Write};
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::core::monitor::BlockRecord;
use crate::sinks::durable::SyncSet;

/// The live part of a unit's journal, as a checkpoint names it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Span {
    /// End of the first live block, ms.
    pub first_end_ms: i64,
    /// End of the last live block, ms.
    pub last_end_ms: i64,
    /// Live blocks.
    pub count: usize,
}

impl Span {
    /// The span of `history` (`None` when it is empty).
    pub fn of(history: &VecDeque<BlockRecord>) -> Option<Span> {
        Some(Span {
            first_end_ms: history.front()?.end_ms,
            last_end_ms: history.back()?.end_ms,
            count: history.len(),
        })
    }
}

/// One unit's history journal.
#[derive(Debug)]
pub struct Journal {
    path: PathBuf,
    /// Open for appending (after [`Journal::load`] or the first append).
    file: Option<File>,
    /// End of the last block in the file, ms.
    written_end_ms: Option<i64>,
    /// Lines in the file.
    lines: usize,
    /// First block end named by the last two checkpoints written (what a restart may need).
    named_first: [Option<i64>; 2],
}

impl Journal {
    /// The journal of `unit` in the state directory `state_dir` (nothing is opened yet).
    pub fn new(state_dir: &Path, unit: &str) -> Journal {
        Journal {
            path: state_dir.join("history").join(format!("{unit}.jsonl")),
            file: None,
            written_end_ms: None,
            lines: 0,
            named_first: [None; 2],
        }
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Read the blocks a checkpoint names (`span`), and rewrite the journal to hold exactly
    /// them (dropping blocks appended after that checkpoint). Returns the blocks and, when some
    /// are missing or unreadable, a note saying so (the monitor goes on with what was found).
    ///
    /// # Errors
    /// When the journal cannot be rewritten.
    pub fn load(&mut self, span: Option<Span>) -> io::Result<(VecDeque<BlockRecord>, Option<String>)> {
        let mut blocks = VecDeque::new();
        let mut bad = 0usize;
        if let Some(span) = span {
            match File::open(&self.path) {
                Ok(f) => {
                    for line in BufReader::new(f).lines() {
                        let Ok(line) = line else {
                            bad += 1;
                            break;
                        };
                        match serde_json::from_str::<BlockRecord>(&line) {
                            Ok(b) if (span.first_end_ms..=span.last_end_ms).contains(&b.end_ms) => {
                                if blocks.back().is_none_or(|p: &BlockRecord| p.end_ms < b.end_ms) {
                                    blocks.push_back(b);
                                }
                            }
                            Ok(_) => {}
                            // A torn last line (a crash while appending after the checkpoint).
                            Err(_) => bad += 1,
                        }
                    }
                }
                Err(e) if e.kind() == io::ErrorKind::NotFound => {}
                Err(e) => return Err(e),
            }
        }
        let note = span.filter(|s| s.count != blocks.len()).map(|s| {
            format!(
                "monitor history: {} of the {} blocks the checkpoint names were found in {}{}; the monitor goes on with them",
                blocks.len(),
                s.count,
                self.path.display(),
                if bad > 0 { format!(" ({bad} unreadable line(s))") } else { String::new() }
            )
        });
        self.rewrite(&blocks)?;
        self.named_first = [span.map(|s| s.first_end_ms); 2];
        Ok((blocks, note))
    }

    /// Append the blocks of `history` completed since the last call and name the journal in
    /// `set` to be made durable with the other outputs; rewrite the journal when it holds more
    /// dead lines than live ones. Returns the span to name in the checkpoint about to be
    /// written. Call [`Journal::named`] once it is written.
    ///
    /// # Errors
    /// When the journal cannot be written (the checkpoint must then not be written either).
    pub fn sync(&mut self, history: &VecDeque<BlockRecord>, set: &mut SyncSet) -> io::Result<Option<Span>> {
        let span = Span::of(history);
        let keep_from = self.named_first.iter().flatten().copied().chain(span.map(|s| s.first_end_ms)).min();
        let dead = self.lines.saturating_sub(history.len());
        if self.file.is_none() || dead > history.len() + 64 {
            // Keep what the checkpoints on disk still name, as far as `history` has it.
            let keep: VecDeque<BlockRecord> =
                history.iter().filter(|b| keep_from.is_none_or(|k| b.end_ms >= k)).cloned().collect();
            self.rewrite(&keep)?;
            return Ok(span);
        }
        // The blocks completed since the last call are the newest ones: count them from the back.
        let fresh =
            history.iter().rev().take_while(|b| self.written_end_ms.is_none_or(|w| b.end_ms > w)).count();
        if fresh == 0 {
            if set.force
                && let Some(f) = self.file.as_ref()
            {
                set.add(f, self.path.clone(), false)?;
            }
            return Ok(span);
        }
        let mut text = String::new();
        for b in history.range(history.len() - fresh..) {
            text.push_str(&serde_json::to_string(b).map_err(io::Error::other)?);
            text.push('\n');
        }
        if let Some(f) = self.file.as_mut() {
            f.write_all(text.as_bytes())?;
            set.add(f, self.path.clone(), false)?;
        }
        self.lines += fresh;
        self.written_end_ms = history.back().map(|b| b.end_ms);
        Ok(span)
    }

    /// A checkpoint naming `span` was written.
    pub fn named(&mut self, span: Option<Span>) {
        self.named_first = [self.named_first[1], span.map(|s| s.first_end_ms)];
    }

    /// Replace the journal by `blocks` (a temporary file renamed over it), open for appending.
    fn rewrite(&mut self, blocks: &VecDeque<BlockRecord>) -> io::Result<()> {
        self.file = None;
        let dir = self.path.parent().unwrap_or(Path::new("."));
        fs::create_dir_all(dir)?;
        let tmp = self.path.with_extension("jsonl.tmp");
        {
            let mut f = File::create(&tmp)?;
            let mut text = String::new();
            for b in blocks {
                text.push_str(&serde_json::to_string(b).map_err(io::Error::other)?);
                text.push('\n');
            }
            f.write_all(text.as_bytes())?;
            f.sync_all()?;
        }
        fs::rename(&tmp, &self.path)?;
        #[cfg(unix)]
        File::open(dir)?.sync_all()?;
        self.file = Some(OpenOptions::new().append(true).open(&self.path)?);
        self.lines = blocks.len();
        self.written_end_ms = blocks.back().map(|b| b.end_ms);
        Ok(())
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    /// Append and make durable, as a checkpoint does.
    fn sync(j: &mut Journal, history: &VecDeque<BlockRecord>) -> Option<Span> {
        let mut set = SyncSet::default();
        let span = j.sync(history, &mut set).unwrap();
        set.finish().unwrap();
        span
    }

    fn block(end_ms: i64) -> BlockRecord {
        BlockRecord {
            end_ms,
            residual: 0.1 * end_ms as f64,
            z: 0.5,
            eff: Some(0.97),
            conv: None,
            conv_measured: None,
            duty: Some(30_000.0),
            key_feed: None,
            heat_capacity: Some(760.0),
            ambient: None,
            tags: vec![Some(1.0), None],
        }
    }

    fn history(ends: std::ops::Range<i64>) -> VecDeque<BlockRecord> {
        ends.map(block).collect()
    }

    #[test]
    fn appends_only_new_blocks_and_reads_back_what_a_checkpoint_names() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::new(dir.path(), "R-1");
        let (h0, note) = j.load(None).unwrap();
        assert!(h0.is_empty() && note.is_none());
        let span = sync(&mut j, &history(0..10));
        j.named(span);
        let size = fs::metadata(j.path()).unwrap().len();
        // Nothing new: nothing written.
        sync(&mut j, &history(0..10));
        assert_eq!(fs::metadata(j.path()).unwrap().len(), size);
        // Two more blocks (the first two dropped from the window): two lines appended.
        let span = sync(&mut j, &history(2..12));
        assert_eq!(span, Some(Span { first_end_ms: 2, last_end_ms: 11, count: 10 }));
        let text = fs::read_to_string(j.path()).unwrap();
        assert_eq!(text.lines().count(), 12);
        // A restart from that checkpoint reads exactly its blocks.
        let mut again = Journal::new(dir.path(), "R-1");
        let (h, note) = again.load(span).unwrap();
        assert_eq!(h, history(2..12));
        assert!(note.is_none());
    }

    #[test]
    fn blocks_after_the_checkpoint_and_a_torn_line_are_dropped_at_load() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::new(dir.path(), "R-1");
        j.load(None).unwrap();
        let named = sync(&mut j, &history(0..5));
        j.named(named);
        // Appended for a checkpoint that was never written, then a torn line.
        sync(&mut j, &history(0..8));
        let mut f = OpenOptions::new().append(true).open(j.path()).unwrap();
        f.write_all(b"{\"end_ms\": 9, \"resid").unwrap();
        let mut again = Journal::new(dir.path(), "R-1");
        let (h, note) = again.load(named).unwrap();
        assert_eq!(h, history(0..5));
        assert!(note.is_none(), "{note:?}");
        assert_eq!(fs::read_to_string(again.path()).unwrap().lines().count(), 5);
        // The journal goes on from there.
        let span = sync(&mut again, &history(1..7));
        let (h, _) = Journal::new(dir.path(), "R-1").load(span).unwrap();
        assert_eq!(h, history(1..7));
    }

    #[test]
    fn a_missing_journal_is_a_note_not_an_error() {
        let dir = tempfile::tempdir().unwrap();
        let span = Some(Span { first_end_ms: 0, last_end_ms: 9, count: 10 });
        let (h, note) = Journal::new(dir.path(), "R-1").load(span).unwrap();
        assert!(h.is_empty());
        assert!(note.unwrap().contains("0 of the 10 blocks"));
    }

    #[test]
    fn the_journal_stays_bounded_and_keeps_what_the_checkpoints_on_disk_name() {
        let dir = tempfile::tempdir().unwrap();
        let mut j = Journal::new(dir.path(), "R-1");
        j.load(None).unwrap();
        let window = 100;
        let mut spans = Vec::new();
        for end in 0..2_000i64 {
            let h = history((end - window + 1).max(0)..end + 1);
            let span = sync(&mut j, &h);
            j.named(span);
            spans.push(span);
            let lines = fs::read_to_string(j.path()).unwrap().lines().count();
            assert!(lines <= 2 * window as usize + 66, "{lines} lines at block {end}");
        }
        // Both checkpoint generations on disk (the last and the previous) can be restored.
        for span in &spans[spans.len() - 2..] {
            let (h, note) = Journal::new(dir.path(), "R-1").load(*span).unwrap();
            assert_eq!(h.len(), span.unwrap().count, "{note:?}");
            // load rewrote the journal to that span; put the newest back for the next round.
            let newest = history(2_000 - window..2_000);
            let mut j = Journal::new(dir.path(), "R-1");
            j.load(None).unwrap();
            sync(&mut j, &newest);
        }
    }
}
