//! `efftemp replay`: the pipeline over existing export files as a batch, with the same outputs
//! as the service, and a progress bar on a terminal.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::time::Duration;

use crate::config::{SiteConfig, UnitConfig};
use crate::pipeline::{Mode, Pipeline, PipelineError, PollLimits, UnitRuntime};

/// What a replay did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ReplaySummary {
    /// Records read.
    pub records: u64,
    /// Intervals written.
    pub intervals: u64,
    /// Rejected records and values.
    pub rejected: u64,
    /// Alert events written.
    pub alert_events: u64,
}

/// Why a replay did not succeed.
#[derive(Debug, thiserror::Error)]
pub enum ReplayError {
    /// The pipeline failed (outputs).
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    /// No unit read a usable value: one sentence per unit saying why.
    #[error("nothing usable was read:\n  {}", .0.join("\n  "))]
    NothingRead(Vec<String>),
}

/// The sizes of the files a unit would read (for the progress bar and the summary).
fn input_files(u: &UnitConfig) -> Vec<u64> {
    std::fs::read_dir(&u.input.directory)
        .into_iter()
        .flatten()
        .flatten()
        .filter(|e| e.file_name().to_str().is_some_and(|n| u.input.selects(n)))
        .filter_map(|e| e.metadata().ok().filter(std::fs::Metadata::is_file).map(|m| m.len()))
        .collect()
}

/// Total size of the files the units would read (for the progress bar).
fn input_bytes(site: &SiteConfig) -> u64 {
    site.units.iter().flat_map(input_files).sum()
}

/// Why a unit gave no usable value, if it did not.
fn nothing_read(u: &UnitRuntime) -> Option<String> {
    let c = &u.counters;
    if c.samples > 0 {
        return None;
    }
    let name = &u.cfg.spec.name;
    let input = &u.cfg.input;
    if let Some(why) = u.input_problem() {
        return Some(format!("unit {name}: {why}"));
    }
    let rejected: u64 = c.rejected.values().sum();
    if c.records == 0 && rejected == 0 {
        let files = input_files(&u.cfg).len();
        return Some(if files == 0 {
            let exclude = if input.exclude.is_empty() {
                String::new()
            } else {
                format!(" (excluding {})", input.exclude.join(", "))
            };
            format!(
                "unit {name}: no file in {} matches `{}`{exclude}",
                input.directory.display(),
                input.pattern
            )
        } else {
            format!("unit {name}: its {files} export file(s) hold no data rows")
        });
    }
    let mut reasons: Vec<(&&str, &u64)> = c.rejected.iter().collect();
    reasons.sort_by(|a, b| b.1.cmp(a.1));
    let reasons: Vec<String> = reasons.iter().take(3).map(|(k, v)| format!("{k}: {v}")).collect();
    Some(format!(
        "unit {name}: every one of its {} record(s) was rejected or unusable ({}; see the warnings)",
        c.records,
        if reasons.is_empty() { "no value in them".to_string() } else { reasons.join(", ") }
    ))
}

/// Export bytes read per pass of a replay.
const REPLAY_SLICE_BYTES: u64 = 32 << 20;

/// Process existing export files as a batch, with the same pipeline and outputs as `run`.
/// A progress bar is drawn on standard error when it is a terminal.
///
/// # Errors
/// [`ReplayError::NothingRead`] when no unit read a usable value (no export directory, no
/// matching file, or every row rejected); a unit that read nothing while others did is
/// warned about on standard error.
pub fn replay(site: &SiteConfig, output: Option<PathBuf>) -> Result<ReplaySummary, ReplayError> {
    let mut pipeline = Pipeline::new(site, &Mode::Replay { output })?;
    let total = input_bytes(site).max(1);
    let tty = std::io::stderr().is_terminal();
    let started = std::time::Instant::now();
    let mut last_draw = started;
    // Monotonic time stands still during a replay: only event time matters. Passes are bounded
    // so that the progress bar moves and a backlog of thousands of files is not held open at
    // once (files untouched for longer than the seal delay are closed once read).
    let limits = PollLimits {
        now_ms: 0,
        wall_ms: Some(jiff::Timestamp::now().as_millisecond()),
        budget_bytes: REPLAY_SLICE_BYTES,
    };
    loop {
        let s = pipeline.pass_within(&limits, false)?;
        if tty && last_draw.elapsed() >= Duration::from_millis(200) {
            draw(&pipeline, total, started);
            last_draw = std::time::Instant::now();
        }
        if s.records == 0 && !s.more {
            break;
        }
    }
    pipeline.pass(0, true)?;
    pipeline.checkpoint()?;
    if tty {
        draw(&pipeline, total, started);
        eprintln!();
    }
    let empty: Vec<String> = pipeline.units.iter().filter_map(nothing_read).collect();
    if !pipeline.units.is_empty() && empty.len() == pipeline.units.len() {
        return Err(ReplayError::NothingRead(empty));
    }
    for e in &empty {
        eprintln!("warning: nothing usable was read for {}", e.trim_start_matches("unit "));
    }
    let mut sum = ReplaySummary::default();
    for u in &pipeline.units {
        sum.records += u.counters.records;
        sum.intervals += u.counters.intervals;
        sum.rejected += u.counters.rejected.values().sum::<u64>();
        sum.alert_events += u.counters.alert_events.values().sum::<u64>();
    }
    Ok(sum)
}

fn draw(p: &Pipeline, total: u64, started: std::time::Instant) {
    let read: u64 = p.units.iter().map(|u| u.counters.bytes).sum();
    let records: u64 = p.units.iter().map(|u| u.counters.records).sum();
    let frac = (read as f64 / total as f64).clamp(0.0, 1.0);
    let width = 30;
    let filled = (frac * width as f64).round() as usize;
    let rate = records as f64 / started.elapsed().as_secs_f64().max(1e-3);
    let mut err = std::io::stderr().lock();
    let _ = write!(
        err,
        "\r[{}{}] {:5.1} %  {records} rows  {rate:.0} rows/s ",
        "#".repeat(filled),
        "-".repeat(width - filled),
        frac * 100.0
    );
    let _ = err.flush();
}
