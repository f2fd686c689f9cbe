//! One unit's runtime: its reader, assembler, core and sinks, and the pass that moves what was
//! read through them.

use std::collections::BTreeMap;
use std::io;
use std::path::PathBuf;
use std::sync::Arc;

use tracing::{info, warn};

use super::counters::{Counters, Tally, UnitSnapshot};
use super::state::{UnitState, UnitStateRef};
use crate::config::{ServiceConfig, SiteConfig, UnitConfig};
use crate::core::alerts::AlertEvent;
use crate::core::assembly::{Added, Assembler, Closed, TagRule};
use crate::core::flags::{Flag, FlagNames};
use crate::core::model::Evaluation;
use crate::core::{Note, UnitCore};
use crate::ingest::reader::{ExportReader, Read};
use crate::ingest::repeat::{RepeatLog, warn_summary};
use crate::ingest::tail::{PollLimits, PollStats, TailOptions};
use crate::sinks::alert_log::AlertWriter;
use crate::sinks::durable::SyncSet;
use crate::sinks::journal::{Journal, Span};
use crate::sinks::report::ReportUnit;
use crate::sinks::report::ShiftReports;
use crate::sinks::softtags::{SoftTagWriter, info_columns};
use crate::sinks::syslog::Forwarder;
use crate::sinks::syslog::SyslogSink;
use crate::sinks::{Sinks, ingest_counts};

/// The reason code under which duplicate samples (same tag and time) are counted.
const DUPLICATE: &str = "duplicate";
/// The rejection reason of samples dated far from the data's own time and never confirmed.
const IMPLAUSIBLE_TIME: &str = "implausible_time";

/// One unit's runtime.
pub struct UnitRuntime {
    /// Configuration.
    pub cfg: Arc<UnitConfig>,
    reader: ExportReader,
    assembler: Assembler,
    core: UnitCore,
    sinks: Sinks,
    tally: Tally,
    /// The ingest counters as last written, per day (only changed days are rewritten).
    ingest_written: BTreeMap<String, crate::sinks::report::IngestDay>,
    /// The unit's output directory.
    dir: PathBuf,
    /// Counters.
    pub counters: Counters,
    /// The last evaluation (for status displays).
    pub last: Option<Evaluation>,
    /// Events written in the last pass (for the terminal display of the demo).
    pub new_events: Vec<AlertEvent>,
    /// Shift reports written in the last pass: (path, text summary).
    pub new_reports: Vec<(PathBuf, String)>,
    /// Late and duplicate samples, logged once per file and reason, then summed up per pass.
    repeats: RepeatLog,
    /// Monotonic time of the last accepted sample.
    last_data_mono: Option<u64>,
    /// Whether a pass has run since this runtime was created.
    started: bool,
    /// What the last pass left unread (see [`UnitRuntime::backlog`]).
    backlog: Option<u64>,
    /// The monitor's block history journal (live service).
    journal: Option<Journal>,
    /// The journal's live span, as the next checkpoint names it.
    history_span: Option<Span>,
    /// How long outputs are kept, and the data day they were last pruned for.
    retention: crate::sinks::retention::Retention,
    pruned_day: Option<jiff::civil::Date>,
}

/// What the reader's records and the closed intervals flow through in one pass.
struct Downstream<'a> {
    assembler: &'a mut Assembler,
    core: &'a mut UnitCore,
    sinks: &'a mut Sinks,
    tally: &'a mut Tally,
    counters: &'a mut Counters,
    last: &'a mut Option<Evaluation>,
    new_events: &'a mut Vec<AlertEvent>,
    new_reports: &'a mut Vec<(PathBuf, String)>,
    repeats: &'a mut RepeatLog,
    got_data: bool,
    error: Option<io::Error>,
}

impl Downstream<'_> {
    /// A record from the reader: its samples into the assembler, intervals closed when ready.
    /// Late and duplicate samples are counted exactly (late apart, duplicates as a rejection
    /// reason) and logged with file and line, once per file and reason and then summed up.
    fn read(&mut self, read: Read<'_>) {
        let spec = self.core.spec();
        match read {
            Read::Record { file, id, line, samples, rejects } => {
                self.counters.records += 1;
                let (mut late, mut dup, mut conflicting) = (Vec::new(), Vec::new(), 0u64);
                for s in samples {
                    match self.assembler.add(s) {
                        Added::Accepted => {
                            self.counters.samples += 1;
                            self.got_data = true;
                        }
                        Added::Late => late.push(s.tag),
                        Added::Held => {}
                        Added::Duplicate { conflicting: c } => {
                            dup.push(s.tag);
                            conflicting += u64::from(c);
                        }
                    }
                }
                self.counters.late += late.len() as u64;
                self.counters.conflicting_duplicates += conflicting;
                for r in rejects {
                    *self.counters.rejected.entry(r.code()).or_default() += 1;
                }
                let newest = self.assembler.max_event();
                self.tally.record(newest, &spec.time_zone, late.len() as u64, rejects);
                if !dup.is_empty() {
                    *self.counters.rejected.entry(DUPLICATE).or_default() += dup.len() as u64;
                    self.tally.count(newest, &spec.time_zone, DUPLICATE, dup.len() as u64);
                }
                let names = |tags: &[usize]| {
                    let mut v: Vec<&str> = tags.iter().take(3).map(|&t| spec.tags[t].name.as_str()).collect();
                    if tags.len() > 3 {
                        v.push("...");
                    }
                    v.join(", ")
                };
                if !late.is_empty() {
                    let text = || {
                        format!(
                            "late: {} sample(s) ({}) for an interval already closed (more than the reorder window out of order): counted, not used",
                            late.len(),
                            names(&late)
                        )
                    };
                    if self.repeats.first(id, file, "late", line, text) {
                        warn!(unit = %spec.name, file = %file.display(), line, reason = "late", "{}", text());
                    }
                }
                if !dup.is_empty() {
                    let text = || {
                        format!(
                            "duplicate: {} sample(s) ({}) with a tag and time already read{}: the first value is kept",
                            dup.len(),
                            names(&dup),
                            if conflicting > 0 {
                                format!(", {conflicting} with a different value")
                            } else {
                                String::new()
                            }
                        )
                    };
                    if self.repeats.first(id, file, DUPLICATE, line, text) {
                        warn!(unit = %spec.name, file = %file.display(), line, reason = DUPLICATE, "{}", text());
                    }
                }
                if self.assembler.ready(false) {
                    self.close(false);
                }
            }
            Read::Rejected { code } => {
                *self.counters.rejected.entry(code).or_default() += 1;
                self.tally.rejected(self.assembler.max_event(), &spec.time_zone, code);
            }
        }
    }

    /// Close every interval that is ready: compute it, write its outcome.
    fn close(&mut self, quiet: bool) {
        while self.error.is_none() {
            let Some(closed) = self.assembler.close_next(quiet) else { break };
            if let Some((from, to)) = self.assembler.take_gap() {
                let spec = self.core.spec();
                info!(
                    unit = %spec.name,
                    from = %crate::core::calendar::rfc3339(from, &spec.time_zone),
                    to = %crate::core::calendar::rfc3339(to, &spec.time_zone),
                    intervals = (to - from) / spec.interval_ms.max(1),
                    "no data in this stretch: skipped in one step"
                );
            }
            if let Err(e) = self.interval(&closed) {
                self.error = Some(e);
            }
        }
        self.implausible();
        self.tally.trim();
    }

    /// Count and log the samples the assembler found implausible (far from the data's own
    /// time, never confirmed by more data).
    fn implausible(&mut self) {
        let n = self.assembler.take_implausible();
        if n == 0 {
            return;
        }
        let spec = self.core.spec();
        *self.counters.rejected.entry(IMPLAUSIBLE_TIME).or_default() += n;
        self.tally.count(self.assembler.max_event(), &spec.time_zone, IMPLAUSIBLE_TIME, n);
        warn!(
            unit = %spec.name,
            samples = n,
            reason = IMPLAUSIBLE_TIME,
            "implausible time: {n} sample(s) dated far from the data's own time and never confirmed by more data: counted, not used"
        );
    }

    fn interval(&mut self, closed: &Closed) -> io::Result<()> {
        // Duplicates are normally reported by `Assembler::add`; these are strays found at close.
        self.counters.conflicting_duplicates += u64::from(closed.conflicting_duplicates);
        let o = self.core.step(closed);
        let spec = self.core.spec();
        for note in &o.notes {
            match note {
                Note::Monitor(n) => info!(unit = %spec.name, "{n}"),
                Note::Audit(n) => info!(target: "efftemp::audit", unit = %spec.name, "{n}"),
            }
        }
        let ev = &o.evaluation;
        self.counters.intervals += 1;
        self.tally.interval(ev.end_ms, &spec.time_zone, ev.predicted_k.is_some());
        if ev.predicted_k.is_none() {
            self.counters.not_computed += 1;
            self.counters.solver_failures += u64::from(ev.flags.contains(&Flag::SolverFailed));
        }
        // The shift report keeps the shift in memory: what the monitor and the alert book hold
        // now, and what was read before this interval closed.
        if let Some(r) = self.sinks.reports.as_mut() {
            let c = &*self.counters;
            let read = crate::sinks::report::ReadCounts {
                records: c.records,
                late: c.late,
                rejected: Some(&c.rejected),
            };
            r.observe(self.core, read);
        }
        let written = self.sinks.write(&o)?;
        for e in written.events {
            let k = (e.cause.as_str().to_string(), e.event.as_str().to_string());
            *self.counters.alert_events.entry(k).or_default() += 1;
            self.new_events.push(e);
        }
        self.new_reports.extend(written.report);
        *self.last = Some(o.evaluation);
        Ok(())
    }
}

/// Site facts every unit's sinks need.
pub(super) struct Outputs<'a> {
    pub(super) site: &'a SiteConfig,
    pub(super) dir: PathBuf,
    pub(super) stdout: bool,
    /// The state directory (live service): the monitor's history goes to a journal there.
    pub(super) state_dir: Option<PathBuf>,
}

impl UnitRuntime {
    pub(super) fn new(
        cfg: &UnitConfig,
        service: &ServiceConfig,
        out: &Outputs<'_>,
        mut saved: UnitState,
    ) -> io::Result<Self> {
        let spec = Arc::new(cfg.spec.clone());
        let journal = match &out.state_dir {
            Some(dir) => {
                let mut j = Journal::new(dir, &spec.name);
                let (blocks, note) = j.load(saved.history)?;
                if let Some(note) = note {
                    warn!(unit = %spec.name, "{note}");
                }
                if let Some(m) = saved.monitor.as_mut()
                    && saved.history.is_some()
                {
                    m.history = blocks;
                }
                Some(j)
            }
            None => None,
        };
        let options = TailOptions {
            pattern: cfg.input.pattern.clone(),
            exclude: cfg.input.exclude.clone(),
            max_record_bytes: service.max_record_bytes,
            seal_after_ms: service.seal_after_ms,
            links_outside: cfg.input.links_outside,
            ..TailOptions::default()
        };
        let names: Vec<String> = spec.tags.iter().map(|t| t.name.clone()).collect();
        let mut reader = ExportReader::new(&spec.name, &cfg.input, options, &names, Some(saved.tail));
        reader.restore_header_overrides(
            saved.header_overrides.into_iter().filter_map(|(k, v)| Some((k.parse().ok()?, v))).collect(),
        );
        let rules = TagRule::of(&spec);
        let assembler = match saved.assembler {
            Some(a) => Assembler::restore(a, spec.interval_ms, spec.max_wait_ms, spec.reorder_ms, rules),
            None => Assembler::new(spec.interval_ms, spec.max_wait_ms, spec.reorder_ms, rules),
        };
        let dir = out.dir.join(&spec.name);
        let (tz, unit) = (spec.time_zone.clone(), spec.temperature_unit());
        let saved_end = saved.last_end_ms;
        let sinks = Sinks {
            soft_tags: SoftTagWriter::open(&dir, &spec.name, tz.clone(), unit, FlagNames::new(&spec))?
                .with_info(info_columns(&spec)),
            syslog: None,
            alert_log: AlertWriter::open(&dir, &spec.name, tz, out.stdout)?,
            reports: Some(ShiftReports::new(
                ReportUnit::new(&out.site.name, &cfg.description, &spec),
                out.dir.clone(),
                out.site.shifts.clone(),
                out.site.shift_reports,
                saved_end,
            )),
        };
        Ok(UnitRuntime {
            cfg: Arc::new(cfg.clone()),
            reader,
            assembler,
            core: UnitCore::new(spec, saved.monitor, saved.alerts),
            sinks,
            tally: Tally::new(saved.ingest),
            ingest_written: BTreeMap::new(),
            dir,
            counters: Counters::default(),
            last: None,
            new_events: Vec::new(),
            new_reports: Vec::new(),
            repeats: RepeatLog::default(),
            last_data_mono: None,
            started: false,
            backlog: None,
            journal,
            history_span: saved.history,
            retention: service.retention,
            pruned_day: None,
        })
    }

    pub(super) fn state(&self) -> UnitStateRef<'_> {
        UnitStateRef {
            tail: self.reader.state(),
            assembler: &self.assembler,
            alerts: self.core.alerts(),
            monitor: self.core.monitor(),
            ingest: &self.tally.days,
            last_end_ms: self.sinks.reports.as_ref().and_then(|r| r.last_end_ms),
            header_overrides: self
                .reader
                .header_overrides()
                .iter()
                .map(|(k, v)| (k.to_string(), v.clone()))
                .collect(),
            history: self.history_span,
        }
    }

    /// One pass: read what is new (within `limits`), close what is ready. `flush` closes the
    /// open intervals (end of the replay input); they are also closed when the stream has been
    /// quiet for `max_wait` of monotonic time (live), but never while the files hold more than
    /// the pass read (a backlog is not quiet).
    pub(super) fn pass(&mut self, limits: &PollLimits, flush: bool) -> io::Result<PollStats> {
        let now_mono = limits.now_ms;
        let mut down = Downstream {
            assembler: &mut self.assembler,
            core: &mut self.core,
            sinks: &mut self.sinks,
            tally: &mut self.tally,
            counters: &mut self.counters,
            last: &mut self.last,
            new_events: &mut self.new_events,
            new_reports: &mut self.new_reports,
            repeats: &mut self.repeats,
            got_data: false,
            error: None,
        };
        self.reader.note_data_time(down.assembler.max_event());
        let stats = self.reader.poll(limits, &mut |read| down.read(read));
        self.backlog = stats.more.then_some(stats.unread_bytes);
        for s in down.repeats.take() {
            warn_summary(&down.core.spec().name, &s);
        }
        down.counters.bytes += stats.bytes_read;
        if down.got_data || stats.more {
            self.last_data_mono = Some(now_mono);
        }
        if !self.started {
            // Intervals restored open from the checkpoint wait for late data like any others:
            // without new data they close after max_wait from this start.
            self.started = true;
            if self.last_data_mono.is_none() && down.assembler.has_open() {
                self.last_data_mono = Some(now_mono);
            }
        }
        let wait = u64::try_from(down.core.spec().max_wait_ms).unwrap_or(u64::MAX);
        let quiet =
            flush || (!stats.more && self.last_data_mono.is_some_and(|t| now_mono.saturating_sub(t) >= wait));
        if flush {
            down.assembler.drop_held();
        }
        down.close(quiet);
        if quiet {
            // Flushed: nothing more to do until new data arrive (no timer keeps firing).
            self.last_data_mono = None;
        }
        if let Some(e) = down.error {
            return Err(e);
        }
        // Make what this pass wrote visible to readers at once (fsync waits for the checkpoint).
        self.sinks.flush()?;
        self.prune_when_the_day_changed();
        Ok(stats)
    }

    /// Data bytes waiting in the unit's files beyond what the last pass read (`None`: it read
    /// everything there was).
    pub fn backlog(&self) -> Option<u64> {
        self.backlog
    }

    /// Delete outputs past their retention, once per new data day of the unit.
    fn prune_when_the_day_changed(&mut self) {
        let Some(ms) = self.assembler.max_event() else { return };
        let Ok(day) =
            crate::core::calendar::day_of(ms, &self.cfg.spec.time_zone).parse::<jiff::civil::Date>()
        else {
            return;
        };
        if self.pruned_day == Some(day) {
            return;
        }
        self.pruned_day = Some(day);
        match crate::sinks::retention::prune(&self.dir, &self.cfg.spec.name, day, &self.retention) {
            Ok(0) => {}
            Ok(n) => {
                tracing::info!(unit = %self.cfg.spec.name, files = n, "outputs past their retention deleted")
            }
            Err(e) => {
                tracing::warn!(unit = %self.cfg.spec.name, error = %e, "cannot delete outputs past their retention")
            }
        }
    }

    /// The unit's monitor (baseline, charts, block history).
    pub fn monitor(&self) -> &crate::core::monitor::Monitor {
        self.core.monitor()
    }

    /// Why the unit's export directory could not be read at the last pass (`None`: it could).
    pub fn input_problem(&self) -> Option<&str> {
        self.reader.unavailable()
    }

    /// The unit's figures for `/metrics`.
    pub(super) fn snapshot(&self) -> UnitSnapshot {
        let mut active: BTreeMap<String, u64> = BTreeMap::new();
        for a in self.core.alerts().active() {
            *active.entry(a.cause.as_str().to_string()).or_default() += 1;
        }
        let c = &self.counters;
        UnitSnapshot {
            name: self.cfg.spec.name.clone(),
            records: c.records,
            rejected: c.rejected.iter().map(|(k, v)| ((*k).to_string(), *v)).collect(),
            late: c.late,
            intervals: c.intervals,
            not_computed: c.not_computed,
            solver_failures: c.solver_failures,
            alert_events: c.alert_events.clone(),
            active_alerts: active,
            last_data_ms: self.assembler.max_event(),
            monitor_state: self.core.monitor().state.as_str().to_string(),
            bytes: c.bytes,
            input_problem: self.reader.unavailable().map(|w| format!("unit {}: {w}", self.cfg.spec.name)),
            backlog_bytes: self.backlog,
        }
    }

    /// The unit's newest data time (ms), if it has seen data: what a request's duration is
    /// counted from.
    pub(super) fn data_now_ms(&self) -> Option<i64> {
        self.assembler.max_event()
    }

    /// Apply an engineer's request; returns the audit sentence.
    pub(super) fn apply(&mut self, request: &crate::requests::Request) -> String {
        request.apply(&mut self.core)
    }

    /// Flush the sinks and the journal, naming their files to fsync in `set`, and write the
    /// ingest counters that changed (the newest day's only when `counts_due`) before the
    /// checkpoint.
    pub(super) fn sync(&mut self, set: &mut SyncSet, counts_due: bool) -> io::Result<()> {
        self.sinks.sync_into(set)?;
        let newest = self.tally.days.keys().next_back().cloned();
        let skip = if counts_due { None } else { newest.as_deref() };
        ingest_counts::write_days(
            &self.dir,
            &self.cfg.spec.name,
            &self.tally.days,
            skip,
            &mut self.ingest_written,
        );
        if let Some(j) = self.journal.as_mut() {
            self.history_span = j.sync(&self.core.monitor().history, set)?;
        }
        Ok(())
    }

    /// The checkpoint naming this unit's journal span was written.
    pub(super) fn checkpoint_written(&mut self) {
        if let Some(j) = self.journal.as_mut() {
            j.named(self.history_span);
        }
    }

    /// Forward new alert events through `f`: events already in the alert log are not sent
    /// again.
    pub(super) fn forward_to(&mut self, f: &Arc<Forwarder>) {
        self.sinks.syslog = Some(SyslogSink::new(f.clone(), self.sinks.alert_log.last_sequence));
    }

    /// When the quiet stream should be flushed (monotonic ms), if intervals are open.
    pub(super) fn quiet_deadline(&self) -> Option<u64> {
        if !self.assembler.has_open() {
            return None;
        }
        self.last_data_mono.map(|t| t + u64::try_from(self.cfg.spec.max_wait_ms).unwrap_or(0))
    }
}
