//! `efftemp replay`: the pipeline over existing export files as a batch, with the same outputs
//! as the service, and a progress bar on a terminal.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::time::Duration;

use crate::config::SiteConfig;
use crate::pipeline::{Mode, Pipeline, PipelineError};

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

/// Total size of the files a unit would read (for the progress bar).
fn input_bytes(site: &SiteConfig) -> u64 {
    site.units
        .iter()
        .flat_map(|u| {
            std::fs::read_dir(&u.input.directory)
                .into_iter()
                .flatten()
                .flatten()
                .filter(|e| e.file_name().to_str().is_some_and(|n| u.input.selects(n)))
                .filter_map(|e| e.metadata().ok().map(|m| m.len()))
                .collect::<Vec<_>>()
        })
        .sum()
}

/// Process existing export files as a batch, with the same pipeline and outputs as `run`.
/// A progress bar is drawn on standard error when it is a terminal.
pub fn replay(site: &SiteConfig, output: Option<PathBuf>) -> Result<ReplaySummary, PipelineError> {
    let mut pipeline = Pipeline::new(site, &Mode::Replay { output })?;
    let total = input_bytes(site).max(1);
    let tty = std::io::stderr().is_terminal();
    let started = std::time::Instant::now();
    let mut last_draw = started;
    // Monotonic time stands still during a replay: only event time matters.
    loop {
        let s = pipeline.pass(0, false)?;
        if tty && last_draw.elapsed() >= Duration::from_millis(200) {
            draw(&pipeline, total, started);
            last_draw = std::time::Instant::now();
        }
        if s.records == 0 {
            break;
        }
    }
    pipeline.pass(0, true)?;
    pipeline.checkpoint()?;
    if tty {
        draw(&pipeline, total, started);
        eprintln!();
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
