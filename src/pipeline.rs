//! The processing pipeline of the service, shared by `run`, `replay` and the demo: per unit,
//! tail the export files, parse rows into samples, assemble intervals in event time, evaluate
//! the unit model, step the alert lifecycle and write the outputs; then checkpoint.
//!
//! Synchronous and driven by its caller: `run` calls [`Pipeline::pass`] on file events and
//! ticks, `replay` in a loop until the input is exhausted. The caller injects the monotonic
//! time, so the same inputs give the same outputs in both modes.

use std::collections::BTreeMap;
use std::io;
use std::path::PathBuf;
use std::sync::Arc;

use serde::{Deserialize, Serialize};
use tracing::{debug, info, warn};

use crate::config::{SiteConfig, UnitConfig};
use crate::core::alerts::{AlertBook, AlertEvent};
use crate::core::assembly::{Added, Assembler, TagRule};
use crate::core::calendar::DayCache;
use crate::core::model::{Evaluation, evaluate};
use crate::core::monitor::engine::Monitor;
use crate::ingest::rows::{HeaderInfo, Reject, RowParser};
use crate::ingest::tail::{
    EndCause, GenerationCause, Notice, PollStats, RejectReason, TailEvent, TailOptions, TailState, Tailer,
};
use crate::sinks::checkpoint::StateDir;
use crate::sinks::report::IngestDay;
use crate::sinks::softtags::{AlertWriter, SoftTagWriter};

/// Reason code and sentence of a tailer rejection.
fn describe_reject(r: &RejectReason) -> (&'static str, String) {
    match r {
        RejectReason::TooLong { bytes } => (
            "line_too_long",
            format!("record of {bytes} bytes exceeds max_record_bytes; skipped to the next line"),
        ),
        RejectReason::NulRun { bytes } => {
            ("nul_bytes", format!("{bytes} NUL bytes (a copy-truncate hole or preallocated space) skipped"))
        }
        RejectReason::ContainsNul => ("nul_bytes", "record contains NUL bytes".to_string()),
        RejectReason::Unterminated { bytes } => {
            ("unterminated", format!("the file was finished with an incomplete last row of {bytes} bytes"))
        }
        RejectReason::InvalidHeader => ("bad_header", "the header row is not valid UTF-8".to_string()),
    }
}

/// Whether a tailer notice deserves a warning, and its sentence.
fn describe_notice(n: &Notice) -> (bool, String) {
    match n {
        Notice::Discovered => (false, "new export file: reading from its first row".into()),
        Notice::NewGeneration { previous, cause } => (
            true,
            match cause {
                GenerationCause::Truncated => format!(
                    "file truncated or rewritten (was generation {previous}): reading it again from its first row; rows already read are not used twice"
                ),
                GenerationCause::Replaced => format!(
                    "file replaced by another (was generation {previous}): reading the new one from its first row"
                ),
            },
        ),
        Notice::Resumed { offset } => (false, format!("resuming at byte {offset}")),
        Notice::Renamed { from } => (false, format!("renamed from {} (rotation)", from.display())),
        Notice::Continued { from } => (
            false,
            format!(
                "continues {} (copy or superset replacement): reading on from the checkpoint",
                from.display()
            ),
        ),
        Notice::HeaderChanged { previous } => {
            (true, format!("the header differs from the previous file's ({} columns before)", previous.len()))
        }
        Notice::Sealed { fragment_bytes } => (
            *fragment_bytes > 0,
            format!("file finished and closed ({fragment_bytes} unterminated bytes at its end)"),
        ),
        Notice::Unsealed => (false, "a finished file changed: reading on".into()),
        Notice::Ended { cause, unread_bytes } => (
            *unread_bytes > 0,
            format!(
                "file no longer tracked ({}){}",
                match cause {
                    EndCause::Removed => "removed",
                    EndCause::Overwritten => "overwritten",
                },
                if *unread_bytes > 0 {
                    format!(
                        "; {unread_bytes} bytes were never read (rows lost before efftemp could read them)"
                    )
                } else {
                    String::new()
                }
            ),
        ),
        Notice::Error(e) => (true, format!("I/O error, retrying: {e}")),
    }
}

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
}

/// A request from an engineer, dropped as a JSON file into `<state_dir>/requests/` by
/// `efftemp rebaseline|shelve|unshelve` and applied by the service at its next pass (audited
/// in the log).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Request {
    /// Unit name.
    pub unit: String,
    /// `rebaseline`, `shelve` or `unshelve`.
    pub action: String,
    /// Shelve/unshelve: an alert id, a cause, or `cause/subject`.
    #[serde(default)]
    pub selector: Option<String>,
    /// Shelve: until (RFC 3339).
    #[serde(default)]
    pub until: Option<String>,
    /// Why (audit).
    pub reason: String,
    /// Who (audit).
    pub by: String,
}

/// The checkpoint of a site.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
pub struct Checkpoint {
    /// Per unit name.
    pub units: BTreeMap<String, UnitState>,
}

/// A [`UnitState`] borrowed from a running unit: serializes to the same JSON without copying
/// the unit's buffers, alert book and monitor history at every checkpoint.
#[derive(Serialize)]
struct UnitStateRef<'a> {
    tail: TailState,
    assembler: &'a Assembler,
    alerts: &'a AlertBook,
    monitor: &'a Monitor,
    ingest: &'a BTreeMap<String, IngestDay>,
    last_end_ms: Option<i64>,
}

/// A [`Checkpoint`] borrowed from the running units.
#[derive(Serialize)]
struct CheckpointRef<'a> {
    units: BTreeMap<&'a str, UnitStateRef<'a>>,
}

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

/// One unit's runtime.
pub struct UnitRuntime {
    /// Configuration.
    pub cfg: Arc<UnitConfig>,
    tailer: Tailer,
    parser: RowParser,
    assembler: Assembler,
    alerts: AlertBook,
    monitor: Monitor,
    softtags: SoftTagWriter,
    alert_out: AlertWriter,
    /// Monotonic time of the last accepted sample.
    last_data_mono: Option<u64>,
    /// Counters.
    pub counters: Counters,
    /// The last evaluation (for status displays).
    pub last: Option<Evaluation>,
    /// Events written in the last pass (for the terminal display of the demo).
    pub new_events: Vec<AlertEvent>,
    /// Shift reports written in the last pass: (path, text summary).
    pub new_reports: Vec<(PathBuf, String)>,
    ingest: BTreeMap<String, IngestDay>,
    /// Local date of the records and intervals being counted.
    days: DayCache,
    last_end_ms: Option<i64>,
    site: Arc<SiteInfo>,
    /// Links refused at the last pass (warned about when the set changes).
    refused_links: Vec<PathBuf>,
    /// Syslog forwarding of new alert events (live service only).
    forward: Option<Arc<crate::sinks::syslog::Forwarder>>,
    /// Whether a pass has run since this runtime was created.
    started: bool,
}

/// Site facts every unit runtime needs (reports).
#[derive(Debug, Clone)]
struct SiteInfo {
    name: String,
    output: PathBuf,
    shifts: Vec<jiff::civil::Time>,
    shift_reports: bool,
}

fn rules(cfg: &UnitConfig) -> Vec<TagRule> {
    cfg.spec
        .tags
        .iter()
        .map(|t| TagRule {
            kind: t.kind,
            required: t.required,
            stale_after_ms: t.stale_after_ms,
            range: t.range,
        })
        .collect()
}

impl UnitRuntime {
    fn new(
        cfg: Arc<UnitConfig>,
        service: &crate::config::ServiceConfig,
        site: Arc<SiteInfo>,
        saved: Option<UnitState>,
        stdout: bool,
    ) -> io::Result<UnitRuntime> {
        let output = site.output.clone();
        let saved = saved.unwrap_or_default();
        let opts = TailOptions {
            pattern: cfg.input.pattern.clone(),
            max_record_bytes: service.max_record_bytes,
            seal_after_ms: service.seal_after_ms,
            links_outside: cfg.input.links_outside,
            ..TailOptions::default()
        };
        let tailer = Tailer::new(cfg.input.directory.clone(), opts, Some(saved.tail));
        let names: Vec<String> = cfg.spec.tags.iter().map(|t| t.name.clone()).collect();
        let parser = RowParser::new(&cfg.input, &names);
        let assembler = match saved.assembler {
            Some(a) => Assembler::restore(a, cfg.spec.interval_ms, cfg.spec.max_wait_ms, rules(&cfg)),
            None => Assembler::new(cfg.spec.interval_ms, cfg.spec.max_wait_ms, rules(&cfg)),
        };
        let dir = output.join(&cfg.spec.name);
        let softtags = SoftTagWriter::open(
            &dir,
            &cfg.spec.name,
            cfg.spec.time_zone.clone(),
            cfg.spec.temperature_unit(),
        )?;
        let alert_out = AlertWriter::open(&dir, &cfg.spec.name, cfg.spec.time_zone.clone(), stdout)?;
        let monitor = saved.monitor.unwrap_or_else(|| Monitor::new(&cfg.spec.monitor, cfg.spec.interval_ms));
        Ok(UnitRuntime {
            cfg,
            tailer,
            parser,
            assembler,
            alerts: saved.alerts,
            monitor,
            softtags,
            alert_out,
            last_data_mono: None,
            counters: Counters::default(),
            last: None,
            new_events: Vec::new(),
            new_reports: Vec::new(),
            ingest: saved.ingest,
            days: DayCache::default(),
            last_end_ms: saved.last_end_ms,
            site,
            refused_links: Vec::new(),
            forward: None,
            started: false,
        })
    }

    /// Apply one request (audited).
    fn apply(&mut self, r: &Request) {
        match r.action.as_str() {
            "rebaseline" => {
                self.monitor.rebaseline();
                info!(target: "efftemp::audit", unit = %self.cfg.spec.name, by = %r.by, reason = %r.reason, "re-baseline requested: the monitor learns a new baseline from now on");
            }
            "shelve" => {
                let until = r
                    .until
                    .as_deref()
                    .and_then(|u| u.parse::<jiff::Timestamp>().ok())
                    .map(|t| t.as_millisecond());
                match (r.selector.clone(), until) {
                    (Some(selector), Some(until_ms)) => {
                        let note = self.alerts.shelve(crate::core::alerts::Shelf {
                            selector,
                            until_ms,
                            reason: r.reason.clone(),
                            by: r.by.clone(),
                        });
                        info!(target: "efftemp::audit", unit = %self.cfg.spec.name, "{note} (until {})", r.until.as_deref().unwrap_or(""));
                    }
                    _ => {
                        warn!(unit = %self.cfg.spec.name, "shelve request without selector or valid `until` ignored")
                    }
                }
            }
            "unshelve" => {
                let sel = r.selector.clone().unwrap_or_default();
                let removed = self.alerts.unshelve(&sel);
                info!(target: "efftemp::audit", unit = %self.cfg.spec.name, by = %r.by, reason = %r.reason, removed, "unshelve `{sel}`");
            }
            other => warn!(unit = %self.cfg.spec.name, action = other, "unknown request ignored"),
        }
    }

    fn state(&self) -> UnitStateRef<'_> {
        UnitStateRef {
            tail: self.tailer.state(),
            assembler: &self.assembler,
            alerts: &self.alerts,
            monitor: &self.monitor,
            ingest: &self.ingest,
            last_end_ms: self.last_end_ms,
        }
    }

    /// One pass: read what is new, close what is ready. `quiet` flushes open intervals when the
    /// stream has been quiet (end of replay input, or `max_wait` without data in live mode).
    fn pass(&mut self, now_mono: u64, flush: bool) -> io::Result<u64> {
        let UnitRuntime {
            cfg,
            tailer,
            parser,
            assembler,
            alerts,
            monitor,
            softtags,
            alert_out,
            counters,
            last,
            new_events,
            last_data_mono,
            new_reports,
            ingest,
            days,
            last_end_ms,
            site,
            refused_links,
            forward,
            started,
        } = self;
        let site: &SiteInfo = site;
        let cfg: &UnitConfig = cfg;
        let mut io_error: Option<io::Error> = None;
        let mut got_data = false;
        let mut rejects: Vec<Reject> = Vec::new();
        let mut process = |assembler: &mut Assembler,
                           quiet: bool,
                           io_error: &mut Option<io::Error>,
                           counters: &mut Counters,
                           last: &mut Option<Evaluation>,
                           ingest: &mut BTreeMap<String, IngestDay>,
                           days: &mut DayCache| {
            while io_error.is_none() {
                let Some(closed) = assembler.close_next(quiet) else { break };
                counters.conflicting_duplicates += u64::from(closed.conflicting_duplicates);
                let mut ev = evaluate(&cfg.spec, &closed);
                let mo = monitor.step(&cfg.spec.monitor, &cfg.spec, &mut ev);
                if let Some(note) = &mo.note {
                    info!(unit = %cfg.spec.name, "{note}");
                }
                ev.flags.extend(mo.flags);
                ev.conditions.extend(mo.conditions);
                counters.intervals += 1;
                let today = ingest
                    .entry(days.day_of_interval(ev.end_ms, &cfg.spec.time_zone).to_owned())
                    .or_default();
                today.intervals += 1;
                if ev.predicted_k.is_none() {
                    today.not_computed += 1;
                    counters.not_computed += 1;
                    if ev.flags.iter().any(|f| f == "solver_failed") {
                        counters.solver_failures += 1;
                    }
                }
                let state = mo.state.as_str();
                let mut time = String::new();
                days.rfc3339_into(&mut time, ev.end_ms, &cfg.spec.time_zone);
                let (events, notes) =
                    alerts.step(&cfg.spec.name, ev.end_ms, &time, &ev.conditions, cfg.spec.alerts);
                for n in notes {
                    info!(target: "efftemp::audit", unit = %cfg.spec.name, "{n}");
                }
                if let Err(e) = softtags.write(&ev, state) {
                    *io_error = Some(e);
                    break;
                }
                for event in events {
                    // Queue for syslog before the file write: the queue is durable at once and
                    // the file at the next checkpoint, so a crash in between can repeat an
                    // event downstream (alert_id + sequence identify it) but never lose one.
                    if let Some(f) = forward.as_ref()
                        && alert_out.is_new(&event)
                    {
                        f.send(&event);
                    }
                    match alert_out.write(&event) {
                        Ok(true) => {
                            let k = (event.cause.as_str().to_string(), event.event.as_str().to_string());
                            *counters.alert_events.entry(k).or_default() += 1;
                            new_events.push(event);
                        }
                        Ok(false) => {}
                        Err(e) => {
                            *io_error = Some(e);
                            break;
                        }
                    }
                }
                // A shift ended: write its report (outputs flushed first so it sees them).
                let prev = last_end_ms.replace(ev.end_ms);
                if site.shift_reports
                    && let Some(shift) = prev.and_then(|p| {
                        crate::core::calendar::shift_containing(p, &site.shifts, &cfg.spec.time_zone)
                    })
                    && ev.end_ms >= shift.end_ms
                {
                    let res = softtags.flush().and_then(|()| alert_out.flush()).and_then(|()| {
                        crate::sinks::report::write(
                            &crate::sinks::report::ReportUnit::new(&site.name, &cfg.description, &cfg.spec),
                            &site.output,
                            &shift,
                        )
                    });
                    match res {
                        Ok((path, text)) => {
                            info!(unit = %cfg.spec.name, report = %path.display(), "shift report written");
                            new_reports.push((path, text));
                        }
                        Err(e) => {
                            warn!(unit = %cfg.spec.name, error = %e, "cannot write the shift report")
                        }
                    }
                }
                *last = Some(ev);
            }
            // Keep the ingest counters of the last few days only.
            while ingest.len() > 3 {
                let Some(first) = ingest.keys().next().cloned() else { break };
                ingest.remove(&first);
            }
        };
        let unit_name = cfg.spec.name.clone();
        let stats = tailer.poll(now_mono, &mut |event| match event {
            TailEvent::Header { file, fields } => match parser.header(file.id, fields) {
                HeaderInfo::Mapped { missing_tags, ignored_columns } => {
                    if !missing_tags.is_empty() && matches!(cfg.input.layout, crate::ingest::settings::Layout::Wide) {
                        warn!(unit = %unit_name, file = %file.path.display(), missing = %missing_tags.join(", "), "export file lacks columns for some tags");
                    }
                    debug!(unit = %unit_name, file = %file.path.display(), ignored_columns, "header read");
                }
                HeaderInfo::Unusable(r) => {
                    warn!(unit = %unit_name, file = %file.path.display(), reason = r.code(), "export file cannot be used: {r}; its rows are rejected");
                }
            },
            TailEvent::Record { file, record } => {
                counters.records += 1;
                rejects.clear();
                let mut late = 0;
                parser.record(file.id, record.len(), &|i| record.field(i), &mut |s| {
                    match assembler.add(&s) {
                        Added::Accepted => {
                            counters.samples += 1;
                            got_data = true;
                        }
                        Added::Late => {
                            counters.late += 1;
                            late += 1;
                            warn!(unit = %unit_name, file = %file.path.display(), line = record.line, tag = %cfg.spec.tags[s.tag].name, "late sample for an interval already closed: counted, not used");
                        }
                    }
                }, &mut rejects);
                for r in &rejects {
                    *counters.rejected.entry(r.code()).or_default() += 1;
                    warn!(unit = %unit_name, file = %file.path.display(), line = record.line, reason = r.code(), "rejected: {r}");
                }
                // Per-day data-quality counts go to the day of the newest data (this record's,
                // or the checkpointed newest before it); none before any data was ever seen.
                if let Some(t) = assembler.max_event() {
                    let d = ingest.entry(days.day_at(t, &cfg.spec.time_zone).to_owned()).or_default();
                    d.records += 1;
                    d.late += late;
                    for r in &rejects {
                        *d.rejected.entry(r.code().to_string()).or_default() += 1;
                    }
                }
                if assembler.ready(false) {
                    process(assembler, false, &mut io_error, counters, last, ingest, days);
                }
            }
            TailEvent::Rejected { file, line, reason } => {
                let (code, text) = describe_reject(&reason);
                *counters.rejected.entry(code).or_default() += 1;
                if let Some(t) = assembler.max_event() {
                    let day = days.day_at(t, &cfg.spec.time_zone).to_owned();
                    *ingest.entry(day).or_default().rejected.entry(code.to_string()).or_default() += 1;
                }
                warn!(unit = %unit_name, file = %file.path.display(), line, reason = code, "rejected: {text}");
            }
            TailEvent::Notice { file, notice } => {
                let (serious, text) = describe_notice(&notice);
                if serious {
                    warn!(unit = %unit_name, file = %file.path.display(), "{text}");
                } else {
                    info!(unit = %unit_name, file = %file.path.display(), "{text}");
                }
                if matches!(notice, Notice::Sealed { .. } | Notice::Ended { .. }) {
                    parser.forget(file.id);
                }
            }
        });
        let stats = match stats {
            Ok(s) => s,
            Err(e) => {
                // The directory could not be listed (e.g. a share briefly unmounted): state is
                // kept and the next pass retries.
                warn!(unit = %unit_name, error = %e, "export directory unavailable; retrying at the next pass");
                PollStats::default()
            }
        };
        counters.bytes += stats.bytes_read;
        if tailer.refused_links() != refused_links.as_slice() {
            for l in tailer.refused_links().iter().filter(|l| !refused_links.contains(l)) {
                warn!(unit = %unit_name, file = %l.display(), "symbolic link to a file outside the export directory: not read (set `links_outside = true` under [unit.input] to allow)");
            }
            *refused_links = tailer.refused_links().to_vec();
        }
        if got_data {
            *last_data_mono = Some(now_mono);
        }
        if !*started {
            // Intervals restored open from the checkpoint wait for late data like any others:
            // without new data they close after max_wait from this start.
            *started = true;
            if last_data_mono.is_none() && assembler.has_open() {
                *last_data_mono = Some(now_mono);
            }
        }
        let quiet = flush
            || last_data_mono.is_some_and(|t| {
                now_mono.saturating_sub(t) >= u64::try_from(cfg.spec.max_wait_ms).unwrap_or(u64::MAX)
            });
        process(assembler, quiet, &mut io_error, counters, last, ingest, days);
        if quiet {
            // Flushed: nothing more to do until new data arrive (no timer keeps firing).
            *last_data_mono = None;
        }
        if let Some(e) = io_error {
            return Err(e);
        }
        // Make what this pass wrote visible to readers at once (fsync waits for the checkpoint).
        softtags.flush()?;
        alert_out.flush()?;
        Ok(stats.records)
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
}

/// The pipeline of a site.
pub struct Pipeline {
    /// Units.
    pub units: Vec<UnitRuntime>,
    state: Option<StateDir>,
    /// Notes from loading the checkpoint.
    pub notes: Vec<String>,
}

/// What a pass did.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct PassSummary {
    /// Records read.
    pub records: u64,
    /// Intervals closed.
    pub intervals: u64,
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
    /// Build the pipeline for a site.
    pub fn new(site: &SiteConfig, mode: &Mode) -> Result<Pipeline, PipelineError> {
        let (state, saved, notes, output, stdout) = match mode {
            Mode::Live => {
                let dir = StateDir::open(&site.state_dir)?;
                let (saved, notes): (Option<Checkpoint>, Vec<String>) = dir.load();
                (
                    Some(dir),
                    saved.unwrap_or_default(),
                    notes,
                    site.output_dir.clone(),
                    site.service.alerts_to_stdout,
                )
            }
            Mode::Replay { output } => (
                None,
                Checkpoint::default(),
                Vec::new(),
                output.clone().unwrap_or_else(|| site.output_dir.clone()),
                false,
            ),
        };
        let mut saved = saved;
        let mut units = Vec::new();
        let info = Arc::new(SiteInfo {
            name: site.name.clone(),
            output: output.clone(),
            shifts: site.shifts.clone(),
            shift_reports: site.shift_reports,
        });
        for u in &site.units {
            let s = saved.units.remove(&u.spec.name);
            let rt = UnitRuntime::new(Arc::new(u.clone()), &site.service, info.clone(), s, stdout)
                .map_err(|source| PipelineError::Output { unit: u.spec.name.clone(), source })?;
            units.push(rt);
        }
        Ok(Pipeline { units, state, notes })
    }

    /// One pass over every unit.
    pub fn pass(&mut self, now_mono: u64, flush: bool) -> Result<PassSummary, PipelineError> {
        let mut summary = PassSummary::default();
        self.apply_requests();
        for u in &mut self.units {
            u.new_events.clear();
            u.new_reports.clear();
            let before = u.counters.intervals;
            summary.records += u
                .pass(now_mono, flush)
                .map_err(|source| PipelineError::Output { unit: u.cfg.spec.name.clone(), source })?;
            summary.intervals += u.counters.intervals - before;
        }
        Ok(summary)
    }

    /// Apply engineers' requests (rebaseline, shelve, unshelve) waiting in the state
    /// directory; each is logged for the audit trail and then removed.
    fn apply_requests(&mut self) {
        let Some(dir) = self.state.as_ref().map(|s| s.path().join("requests")) else { return };
        let Ok(rd) = std::fs::read_dir(&dir) else { return };
        let mut files: Vec<PathBuf> =
            rd.flatten().map(|e| e.path()).filter(|p| p.extension().is_some_and(|e| e == "json")).collect();
        files.sort();
        for f in files {
            let req: Result<Request, String> = std::fs::read_to_string(&f)
                .map_err(|e| e.to_string())
                .and_then(|t| serde_json::from_str(&t).map_err(|e| e.to_string()));
            match req {
                Err(e) => warn!(file = %f.display(), error = %e, "ignoring an unreadable request"),
                Ok(r) => match self.units.iter_mut().find(|u| u.cfg.spec.name == r.unit) {
                    None => warn!(file = %f.display(), unit = %r.unit, "request for an unknown unit ignored"),
                    Some(u) => u.apply(&r),
                },
            }
            if let Err(e) = std::fs::remove_file(&f) {
                warn!(file = %f.display(), error = %e, "cannot remove an applied request");
            }
        }
    }

    /// Sync the outputs, then write the checkpoint (outputs are never behind the checkpoint).
    pub fn checkpoint(&mut self) -> Result<(), PipelineError> {
        for u in &mut self.units {
            u.softtags
                .sync()
                .and_then(|()| u.alert_out.sync())
                .map_err(|source| PipelineError::Output { unit: u.cfg.spec.name.clone(), source })?;
            for (day, counts) in &u.ingest {
                let path = u
                    .site
                    .output
                    .join(&u.cfg.spec.name)
                    .join(format!("ingest-{}-{day}.json", u.cfg.spec.name));
                if let Ok(text) = serde_json::to_string_pretty(counts) {
                    let tmp = path.with_extension("json.tmp");
                    if std::fs::write(&tmp, text).and_then(|()| std::fs::rename(&tmp, &path)).is_err() {
                        warn!(unit = %u.cfg.spec.name, "cannot write the ingest counters");
                    }
                }
            }
        }
        if let Some(dir) = self.state.as_mut() {
            let cp = CheckpointRef {
                units: self.units.iter().map(|u| (u.cfg.spec.name.as_str(), u.state())).collect(),
            };
            if let Err(e) = dir.save(&cp) {
                warn!(error = %e, "checkpoint write failed; will retry");
            }
        }
        Ok(())
    }

    /// The per-unit figures for `/metrics`.
    pub fn snapshot_units(&self) -> Vec<UnitSnapshot> {
        self.units
            .iter()
            .map(|u| {
                let mut active: BTreeMap<String, u64> = BTreeMap::new();
                for a in u.alerts.active() {
                    *active.entry(a.cause.as_str().to_string()).or_default() += 1;
                }
                UnitSnapshot {
                    name: u.cfg.spec.name.clone(),
                    records: u.counters.records,
                    rejected: u.counters.rejected.iter().map(|(k, v)| ((*k).to_string(), *v)).collect(),
                    late: u.counters.late,
                    intervals: u.counters.intervals,
                    not_computed: u.counters.not_computed,
                    solver_failures: u.counters.solver_failures,
                    alert_events: u.counters.alert_events.clone(),
                    active_alerts: active,
                    last_data_ms: u.assembler.max_event(),
                    monitor_state: u.monitor.state.as_str().to_string(),
                    bytes: u.counters.bytes,
                }
            })
            .collect()
    }

    /// Forward every new alert event to syslog through `f` (the live service).
    pub fn set_forwarder(&mut self, f: &Arc<crate::sinks::syslog::Forwarder>) {
        for u in &mut self.units {
            u.forward = Some(f.clone());
        }
    }

    /// Checkpoint writes and failures so far.
    pub fn checkpoint_counts(&self) -> (u64, u64) {
        self.state.as_ref().map_or((0, 0), |s| (s.writes, s.failures))
    }

    /// Earliest monotonic time at which a quiet stream should be flushed (for the service's
    /// timer: no periodic wake-ups are needed for it).
    pub fn next_quiet_deadline(&self) -> Option<u64> {
        self.units
            .iter()
            .filter(|u| u.assembler.has_open())
            .filter_map(|u| u.last_data_mono.map(|t| t + u64::try_from(u.cfg.spec.max_wait_ms).unwrap_or(0)))
            .min()
    }
}
