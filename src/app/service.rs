//! The unattended service (`efftemp run`) and the batch replay (`efftemp replay`).
//!
//! The async shell is one loop: it waits for a file event, the periodic reconcile tick, the
//! quiet-stream deadline or shutdown, then runs a [`Pipeline`] pass on a blocking thread and
//! checkpoints. Clock, file events and shutdown are injected, so tests drive it with paused
//! tokio time and synthetic wake-ups.

use std::future::Future;
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use tokio::sync::Notify;
use tokio::time::Instant;
use tracing::{debug, error, info, warn};

use crate::config::SiteConfig;
use crate::ingest::glob::name_matches;
use crate::ingest::watch::{self, WatchStatus};
use crate::pipeline::{Mode, Pipeline, PipelineError};

/// A monotonic clock in milliseconds (tokio time, so tests can pause it).
#[derive(Debug, Clone, Copy)]
pub struct MonoClock {
    start: Instant,
}

impl Default for MonoClock {
    fn default() -> Self {
        MonoClock { start: Instant::now() }
    }
}

impl MonoClock {
    /// Milliseconds since the clock was made.
    pub fn now_ms(&self) -> u64 {
        u64::try_from(self.start.elapsed().as_millis()).unwrap_or(u64::MAX)
    }
}

/// Errors that stop the service.
#[derive(Debug, thiserror::Error)]
pub enum ServiceError {
    /// The pipeline failed (state directory, outputs).
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    /// A blocking task panicked.
    #[error("internal error: {0}")]
    Internal(String),
}

/// How the service is woken besides its own timers.
pub enum Wake {
    /// Start file watchers on the export directories.
    Watchers,
    /// Use this notifier (tests): the caller wakes the loop.
    External(Arc<Notify>),
}

/// Called after every pass with the pipeline (the demo prints alerts from it).
pub type Observer = Box<dyn FnMut(&Pipeline) + Send>;

/// systemd's notification protocol (`sd_notify`): readiness and watchdog keep-alives sent as
/// datagrams to `$NOTIFY_SOCKET`, when the service runs under systemd with `Type=notify`.
#[derive(Debug)]
pub struct Notifier {
    #[cfg(unix)]
    socket: Option<(std::os::unix::net::UnixDatagram, std::os::unix::net::SocketAddr)>,
    /// Watchdog interval from `$WATCHDOG_USEC`, ms (keep-alives go at half of it).
    pub watchdog_ms: Option<u64>,
}

impl Notifier {
    /// From the environment (a no-op outside systemd).
    pub fn from_env() -> Notifier {
        let watchdog_ms =
            std::env::var("WATCHDOG_USEC").ok().and_then(|v| v.parse::<u64>().ok()).map(|us| us / 1000);
        #[cfg(unix)]
        {
            let socket = std::env::var("NOTIFY_SOCKET").ok().and_then(|path| {
                use std::os::unix::net::{SocketAddr, UnixDatagram};
                let addr = if let Some(name) = path.strip_prefix('@') {
                    #[cfg(target_os = "linux")]
                    {
                        use std::os::linux::net::SocketAddrExt;
                        SocketAddr::from_abstract_name(name.as_bytes()).ok()?
                    }
                    #[cfg(not(target_os = "linux"))]
                    {
                        let _ = name;
                        return None;
                    }
                } else {
                    SocketAddr::from_pathname(&path).ok()?
                };
                Some((UnixDatagram::unbound().ok()?, addr))
            });
            Notifier { socket, watchdog_ms }
        }
        #[cfg(not(unix))]
        Notifier { watchdog_ms }
    }

    /// Send a state string such as `READY=1`.
    pub fn notify(&self, state: &str) {
        #[cfg(unix)]
        if let Some((sock, addr)) = &self.socket
            && let Err(e) = sock.send_to_addr(state.as_bytes(), addr)
        {
            warn!(error = %e, "cannot notify systemd");
        }
        #[cfg(not(unix))]
        let _ = state;
    }
}

/// How long after a file event the service waits for more before it runs a pass.
const EVENT_COALESCE_MS: u64 = 25;

/// Checkpoint writing may take at most 1/CHECKPOINT_DUTY of the service's time.
const CHECKPOINT_DUTY: u64 = 20;

/// Run the service until `shutdown` completes. Outputs and the checkpoint are flushed on exit.
pub async fn run(
    site: Arc<SiteConfig>,
    wake: Wake,
    shutdown: impl Future<Output = ()>,
    mut observer: Option<Observer>,
    snapshots: Option<tokio::sync::watch::Sender<crate::app::http::Snapshot>>,
) -> Result<(), ServiceError> {
    let notifier = Notifier::from_env();
    let mut passes = 0u64;
    let mut last_watchdog = 0u64;
    let clock = MonoClock::default();
    let site2 = site.clone();
    let mut pipeline = tokio::task::spawn_blocking(move || Pipeline::new(&site2, &Mode::Live))
        .await
        .map_err(|e| ServiceError::Internal(e.to_string()))??;
    for note in &pipeline.notes {
        warn!("checkpoint: {note}");
    }
    // Syslog forwarding: its disk queue is locked for the life of this run (a reload stops
    // the old forwarder before the new run starts one).
    let forwarder = match &site.syslog {
        Some(cfg) => {
            let cfg = cfg.clone();
            let f = tokio::task::spawn_blocking(move || crate::sinks::syslog::Forwarder::start(cfg))
                .await
                .map_err(|e| ServiceError::Internal(e.to_string()))?
                .map_err(|e| ServiceError::Internal(format!("syslog forwarding: {e}")))?;
            let f = Arc::new(f);
            pipeline.set_forwarder(&f);
            info!(address = %site.syslog.as_ref().map_or("", |c| c.address.as_str()), "forwarding alert events to syslog");
            Some(f)
        }
        None => None,
    };
    let notify = match &wake {
        Wake::External(n) => n.clone(),
        Wake::Watchers => Arc::new(Notify::new()),
    };
    let _watch = match wake {
        Wake::Watchers => {
            let mut dirs: Vec<PathBuf> = site.units.iter().map(|u| u.input.directory.clone()).collect();
            dirs.sort();
            dirs.dedup();
            Some(watch::start(&dirs, site.service.watch, site.service.reconcile_ms, notify.clone()))
        }
        Wake::External(_) => None,
    };
    let watch_status = _watch.as_ref().map_or(WatchStatus::Off, |w| w.status.clone());
    info!(units = site.units.len(), watch = watch_status.as_str(), state = %site.state_dir.display(), output = %site.output_dir.display(), "efftemp service started");
    let mut tick = tokio::time::interval(Duration::from_millis(site.service.reconcile_ms.max(100)));
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    let mut last_checkpoint = clock.now_ms();
    // The gap between checkpoints: the configured interval, stretched so that writing the
    // checkpoint takes at most 1/CHECKPOINT_DUTY of the time (a site with many units and weeks
    // of monitor history writes megabytes; a crash then re-reads a little more data, nothing
    // is lost).
    let mut checkpoint_gap = site.service.checkpoint_ms;
    let mut dirty = false;
    tokio::pin!(shutdown);
    loop {
        let quiet = pipeline.next_quiet_deadline().map(|t| t.saturating_sub(clock.now_ms()));
        let quiet_sleep = tokio::time::sleep(Duration::from_millis(quiet.unwrap_or(3_600_000)));
        let woken_by_event = tokio::select! {
            biased;
            () = &mut shutdown => break,
            () = notify.notified() => true,
            _ = tick.tick() => false,
            () = quiet_sleep, if quiet.is_some() => false,
        };
        if woken_by_event {
            // A writer appending to many files sends a burst of events: let them gather so one
            // pass serves them all (a few tens of ms against a latency budget of a second).
            tokio::time::sleep(Duration::from_millis(EVENT_COALESCE_MS)).await;
        }
        let now = clock.now_ms();
        let (p, res) = tokio::task::spawn_blocking(move || {
            let r = pipeline.pass(now, false);
            (pipeline, r)
        })
        .await
        .map_err(|e| ServiceError::Internal(e.to_string()))?;
        pipeline = p;
        match res {
            Ok(s) => dirty |= s.records > 0 || s.intervals > 0,
            Err(e) => {
                error!(error = %e, "stopping: outputs cannot be written; restart resumes from the last checkpoint");
                return Err(e.into());
            }
        }
        if let Some(obs) = observer.as_mut() {
            obs(&pipeline);
        }
        passes += 1;
        if passes == 1 {
            notifier.notify("READY=1\nSTATUS=watching the export directories");
        }
        if let Some(wd) = notifier.watchdog_ms
            && clock.now_ms().saturating_sub(last_watchdog) >= wd / 2
        {
            notifier.notify("WATCHDOG=1");
            last_watchdog = clock.now_ms();
        }
        if let Some(tx) = &snapshots {
            let (writes, failures) = pipeline.checkpoint_counts();
            let snap = crate::app::http::Snapshot {
                units: pipeline.snapshot_units(),
                checkpoint_writes: writes,
                checkpoint_failures: failures,
                watch_mode: watch_status.as_str().to_string(),
                rescans: _watch.as_ref().map_or(0, |w| w.rescans.load(std::sync::atomic::Ordering::Relaxed)),
                watcher_errors: _watch
                    .as_ref()
                    .map_or(0, |w| w.errors.load(std::sync::atomic::Ordering::Relaxed)),
                syslog: forwarder.as_ref().map(|f| f.stats()),
                passes,
                last_pass_ms: Some(jiff::Timestamp::now().as_millisecond()),
                ready_within_ms: i64::try_from(site.service.reconcile_ms.max(1_000) * 3).unwrap_or(i64::MAX),
            };
            let _ = tx.send(snap);
        }
        if dirty && clock.now_ms().saturating_sub(last_checkpoint) >= checkpoint_gap {
            let started = std::time::Instant::now();
            let (p, res) = tokio::task::spawn_blocking(move || {
                let r = pipeline.checkpoint();
                (pipeline, r)
            })
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?;
            pipeline = p;
            res?;
            let took_ms = u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX);
            checkpoint_gap = site.service.checkpoint_ms.max(took_ms.saturating_mul(CHECKPOINT_DUTY));
            if checkpoint_gap > site.service.checkpoint_ms {
                debug!(took_ms, gap_ms = checkpoint_gap, "checkpoint is large: next one after a longer gap");
            }
            last_checkpoint = clock.now_ms();
            dirty = false;
        }
    }
    notifier.notify("STOPPING=1");
    info!("shutting down: flushing outputs and the checkpoint");
    let res = tokio::task::spawn_blocking(move || {
        let r = pipeline.checkpoint();
        drop(pipeline);
        // Give the collector a moment for what is queued; the rest stays in the disk queue
        // and is sent first at the next start.
        if let Some(f) = forwarder.and_then(|f| Arc::try_unwrap(f).ok()) {
            f.shutdown(Duration::from_millis(1_500));
        }
        r
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))?;
    res?;
    info!("stopped");
    Ok(())
}

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
                .filter(|e| e.file_name().to_str().is_some_and(|n| name_matches(&u.input.pattern, n)))
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
