//! The data path, shared by `run`, `replay` and the demo. Per unit ([`UnitRuntime`]): the
//! export files are read ([`ExportReader`](crate::ingest::reader::ExportReader): tail → rows)
//! into samples, assembled into intervals in event time
//! ([`Assembler`](crate::core::assembly::Assembler)), each closed interval is computed by the
//! pure core ([`UnitCore::step`](crate::core::UnitCore::step)) and its outcome written by the
//! [`Sinks`](crate::sinks::Sinks); then everything is checkpointed ([`state`]).
//!
//! Synchronous and driven by its caller: `run` calls [`Pipeline::pass`] on file events and
//! ticks, `replay` in a loop until the input is exhausted. The caller injects the monotonic
//! time, so the same inputs give the same outputs in both modes.

use std::collections::BTreeMap;
use std::io;
use std::path::PathBuf;
use std::sync::Arc;

use tracing::{info, warn};

use crate::config::SiteConfig;
/// How much one pass may do (see [`Pipeline::pass_within`]): the tailer's limits, the budget
/// shared by the units in turn.
pub use crate::ingest::tail::PollLimits;
use crate::sinks::checkpoint::StateDir;
use crate::sinks::durable::SyncSet;
use crate::sinks::syslog::Forwarder;

mod counters;
pub mod state;
mod unit;

pub use counters::{Counters, Tally, UnitSnapshot};
use state::{Stored, StoredRef};
use unit::Outputs;
pub use unit::UnitRuntime;

/// Where a pipeline writes and how it treats its state.
#[derive(Debug, Clone, PartialEq)]
pub enum Mode {
    /// The service: state directory, checkpoints.
    Live,
    /// A batch over existing files: no state directory; fresh outputs under `output`.
    Replay {
        /// Output directory (the site's when `None`).
        output: Option<PathBuf>,
    },
}

/// The current day's ingest counters are rewritten at most this often by routine checkpoints
/// (200 units: 200 file replacements per checkpoint otherwise).
pub const INGEST_COUNTS_EVERY_MS: u64 = 60_000;

/// The pipeline of a site.
pub struct Pipeline {
    /// Units.
    pub units: Vec<UnitRuntime>,
    state: Option<StateDir>,
    /// Notes from loading the checkpoint.
    pub notes: Vec<String>,
    /// Request entries (or a request folder) already reported as refused and left in place.
    refused_requests: std::collections::HashSet<PathBuf>,
    /// The unit a bounded pass starts with (the one after the unit that spent the last
    /// pass's budget), so that every unit gets its turn while one of them catches up.
    next_unit: usize,
    /// The last checkpoint's fsyncs did not all succeed: the next one syncs every open file.
    sync_failed: bool,
    /// When the current day's ingest counters were last written (monotonic ms; `None`: never
    /// or by a final checkpoint).
    counts_written_ms: Option<u64>,
}

/// What a pass did.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct PassSummary {
    /// Records read.
    pub records: u64,
    /// Intervals closed.
    pub intervals: u64,
    /// The pass stopped at its budget: the files hold more (call again at once).
    pub more: bool,
}

/// Errors of the pipeline.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// State directory problem.
    #[error(transparent)]
    State(#[from] crate::sinks::checkpoint::StateError),
    /// Output I/O.
    #[error("unit {unit}: cannot write outputs: {source}")]
    Output {
        /// Unit.
        unit: String,
        /// Cause.
        source: io::Error,
    },
}

impl Pipeline {
    /// A pipeline of no units (a placeholder while the real one is on another thread).
    pub(crate) fn empty() -> Pipeline {
        Pipeline {
            units: Vec::new(),
            state: None,
            notes: Vec::new(),
            refused_requests: Default::default(),
            next_unit: 0,
            sync_failed: false,
            counts_written_ms: None,
        }
    }

    /// Build the pipeline for a site.
    pub fn new(site: &SiteConfig, mode: &Mode) -> Result<Pipeline, PipelineError> {
        let (state, mut saved, notes, out) = match mode {
            Mode::Live => {
                let dir = StateDir::open(&site.state_dir)?;
                let (stored, notes): (Option<Stored>, Vec<String>) = dir.load();
                let out = Outputs {
                    site,
                    dir: site.output_dir.clone(),
                    stdout: site.service.alerts_to_stdout,
                    state_dir: Some(site.state_dir.clone()),
                };
                (Some(dir), stored.map(Stored::into_units).unwrap_or_default(), notes, out)
            }
            Mode::Replay { output } => {
                let dir = output.clone().unwrap_or_else(|| site.output_dir.clone());
                (None, BTreeMap::new(), Vec::new(), Outputs { site, dir, stdout: false, state_dir: None })
            }
        };
        let mut units = Vec::new();
        for u in &site.units {
            let s = saved.remove(&u.spec.name).unwrap_or_default();
            let rt = UnitRuntime::new(u, &site.service, &out, s)
                .map_err(|source| PipelineError::Output { unit: u.spec.name.clone(), source })?;
            units.push(rt);
        }
        Ok(Pipeline { units, state, notes, ..Pipeline::empty() })
    }

    /// One pass over every unit, reading everything there is.
    pub fn pass(&mut self, now_mono: u64, flush: bool) -> Result<PassSummary, PipelineError> {
        self.pass_within(&PollLimits { now_ms: now_mono, wall_ms: None, budget_bytes: u64::MAX }, flush)
    }

    /// One bounded pass: the units, starting with the one after the unit that stopped the
    /// last pass, read until `limits.budget_bytes` are spent between them; the units after
    /// that are left for the next pass. [`PassSummary::more`] says that a unit's files hold
    /// more than this pass read (or a unit was left out): the caller calls again at once, with
    /// a checkpoint, a watchdog keep-alive and a look at its shutdown signal in between. The
    /// records of a unit arrive in the same order as in one unlimited pass, so the outputs do
    /// not depend on the budget.
    pub fn pass_within(&mut self, limits: &PollLimits, flush: bool) -> Result<PassSummary, PipelineError> {
        let mut summary = PassSummary::default();
        self.apply_requests();
        for u in &mut self.units {
            u.new_events.clear();
            u.new_reports.clear();
        }
        let n = self.units.len();
        let start = if n == 0 { 0 } else { self.next_unit % n };
        let mut budget = limits.budget_bytes;
        for k in 0..n {
            let i = (start + k) % n;
            let u = &mut self.units[i];
            if budget == 0 {
                // Left for the next pass, which starts with this unit.
                self.next_unit = i;
                summary.more = true;
                break;
            }
            let before = u.counters.intervals;
            let poll = PollLimits { budget_bytes: budget, ..*limits };
            let stats = u
                .pass(&poll, flush)
                .map_err(|source| PipelineError::Output { unit: u.cfg.spec.name.clone(), source })?;
            summary.records += stats.records;
            summary.intervals += u.counters.intervals - before;
            summary.more |= stats.more;
            if budget != u64::MAX {
                budget = budget.saturating_sub(stats.bytes_read);
                if stats.more {
                    budget = 0;
                }
            }
            if budget == 0 {
                self.next_unit = i + 1;
            }
        }
        Ok(summary)
    }

    /// Apply engineers' requests waiting in the state directory (live service only): each is
    /// held to the command line's limits, applied, logged for the audit trail and removed. A
    /// refused entry that cannot be removed (a directory, a FIFO) is reported once.
    fn apply_requests(&mut self) {
        let Some(dir) = self.state.as_ref().map(StateDir::path) else { return };
        let entries = match crate::requests::pending(dir) {
            Ok(entries) => entries,
            Err(problem) => {
                if self.refused_requests.insert(PathBuf::from(&problem)) {
                    warn!("{problem}");
                }
                return;
            }
        };
        for e in entries {
            let file = e.path.display().to_string();
            let owner = e.owner.map_or_else(|| "unknown".to_string(), |u| u.to_string());
            let outcome = e.request.and_then(|r| {
                let u = self.units.iter_mut().find(|u| u.cfg.spec.name == r.unit).ok_or_else(|| {
                    format!("request for an unknown unit `{}`", crate::requests::escape_controls(&r.unit))
                })?;
                let admitted = r.admit(u.cfg.spec.alerts.shelve_max_ms, u.data_now_ms())?;
                Ok((u.apply(&admitted), admitted))
            });
            match outcome {
                Ok((note, r)) => {
                    let esc = crate::requests::escape_controls;
                    info!(target: "efftemp::audit", unit = %r.unit, action = r.action_name(), by = %esc(&r.by), file_owner_uid = %owner, reason = %esc(&r.reason), "{}", esc(&note));
                }
                Err(why) if e.remove || self.refused_requests.insert(e.path.clone()) => {
                    warn!(file = %file, file_owner_uid = %owner, "request refused: {}", crate::requests::escape_controls(&why));
                }
                Err(_) => {}
            }
            if e.remove
                && let Err(err) = std::fs::remove_file(&e.path)
            {
                warn!(file = %file, error = %err, "cannot remove a request");
            }
        }
    }

    /// Sync the outputs, then write the checkpoint (outputs are never behind the checkpoint).
    ///
    /// Every unit's files are flushed first and fsynced together (in parallel); after a failed
    /// fsync the next checkpoint syncs every open file again.
    pub fn checkpoint(&mut self) -> Result<(), PipelineError> {
        self.checkpoint_inner(None)
    }

    /// A routine checkpoint of the running service at monotonic time `now_ms`: as
    /// [`Pipeline::checkpoint`], but the ingest counters of the current day (read only by
    /// reports) are rewritten at most once per [`INGEST_COUNTS_EVERY_MS`].
    pub fn checkpoint_at(&mut self, now_ms: u64) -> Result<(), PipelineError> {
        self.checkpoint_inner(Some(now_ms))
    }

    fn checkpoint_inner(&mut self, now_ms: Option<u64>) -> Result<(), PipelineError> {
        let counts_due = match (now_ms, self.counts_written_ms) {
            (Some(now), Some(then)) => now.saturating_sub(then) >= INGEST_COUNTS_EVERY_MS,
            _ => true,
        };
        if counts_due {
            self.counts_written_ms = now_ms;
        }
        let mut set = SyncSet::new(self.sync_failed);
        // Until the set is synced, a file it named may not be durable: force the next one.
        self.sync_failed = true;
        for u in &mut self.units {
            set.begin(&u.cfg.spec.name);
            u.sync(&mut set, counts_due)
                .map_err(|source| PipelineError::Output { unit: u.cfg.spec.name.clone(), source })?;
        }
        // The outputs are synced while the checkpoint is written beside the current one; it is
        // put in force only once they are durable.
        let dir = self.state.as_ref().map(|d| d.path().to_path_buf());
        let units = &self.units;
        let (synced, prepared) = std::thread::scope(|s| {
            let syncing = s.spawn(move || set.finish());
            let prepared = dir.map(|dir| {
                let units = units.iter().map(|u| (u.cfg.spec.name.as_str(), u.state())).collect();
                let text = StoredRef::new(units).to_json().map_err(io::Error::other)?;
                StateDir::prepare_payload(&dir, &text)
            });
            let synced = syncing
                .join()
                .unwrap_or_else(|_| Err((String::new(), io::Error::other("an fsync thread panicked"))));
            (synced, prepared)
        });
        synced.map_err(|(unit, source)| PipelineError::Output { unit, source })?;
        self.sync_failed = false;
        if let Some(dir) = self.state.as_mut() {
            match prepared {
                Some(Ok(p)) => match dir.commit(p) {
                    Ok(()) => {
                        for u in &mut self.units {
                            u.checkpoint_written();
                        }
                    }
                    Err(e) => warn!(error = %e, "checkpoint write failed; will retry"),
                },
                Some(Err(e)) => {
                    dir.failed();
                    warn!(error = %e, "checkpoint write failed; will retry");
                }
                None => {}
            }
        }
        Ok(())
    }

    /// The per-unit figures for `/metrics`.
    pub fn snapshot_units(&self) -> Vec<UnitSnapshot> {
        self.units.iter().map(UnitRuntime::snapshot).collect()
    }

    /// Forward every new alert event to syslog through `f` (the live service): events already
    /// in a unit's alert log are not sent again.
    pub fn set_forwarder(&mut self, f: &Arc<Forwarder>) {
        for u in &mut self.units {
            u.forward_to(f);
        }
    }

    /// Export bytes read so far, over all units.
    pub fn bytes_read(&self) -> u64 {
        self.units.iter().map(|u| u.counters.bytes).sum()
    }

    /// Checkpoint writes and failures so far.
    pub fn checkpoint_counts(&self) -> (u64, u64) {
        self.state.as_ref().map_or((0, 0), |s| (s.writes, s.failures))
    }

    /// Earliest monotonic time at which a quiet stream should be flushed (for the service's
    /// timer: no periodic wake-ups are needed for it).
    pub fn next_quiet_deadline(&self) -> Option<u64> {
        self.units.iter().filter_map(UnitRuntime::quiet_deadline).min()
    }
}
