//! The unattended service (`efftemp run`).
//!
//! The async shell is one loop: it waits for a file event, the periodic reconcile tick, the
//! quiet-stream deadline or shutdown, then runs a [`Pipeline`] pass on a blocking thread and
//! checkpoints. Clock, file events and shutdown are injected, so tests drive it with paused
//! tokio time and synthetic wake-ups.

use std::future::Future;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use tokio::sync::Notify;
use tokio::time::Instant;
use tracing::{debug, error, info, warn};

use crate::app::http::Snapshot;
use crate::app::notify::Notifier;
use crate::config::SiteConfig;
use crate::ingest::watch::{self, Watch, WatchStatus};
use crate::pipeline::{Mode, Pipeline, PipelineError, PollLimits};
use crate::sinks::syslog::Forwarder;

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
    /// Degraded and not yet able to start again from the checkpoint.
    #[error("cannot resume from the checkpoint: {0}")]
    Resume(String),
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

/// How long after a file event the service waits for more before it runs a pass.
const EVENT_COALESCE_MS: u64 = 25;

/// Checkpoint writing may take at most 1/CHECKPOINT_DUTY of the service's time.
const CHECKPOINT_DUTY: u64 = 20;

/// The read budget of the first pass, and its bounds, bytes.
const FIRST_SLICE_BYTES: u64 = 256 << 10;
const MIN_SLICE_BYTES: u64 = 64 << 10;
const MAX_SLICE_BYTES: u64 = 64 << 20;

/// The next pass's read budget after a pass that read `read` bytes in `took_ms`: scaled so the
/// pass takes about `slice_ms` (`[service] catch_up_slice`: between passes the service
/// checkpoints, keeps the watchdog fed, publishes its progress and looks at the shutdown
/// signal), changing by at most a factor of 4 at a time.
fn next_slice(budget: u64, read: u64, took_ms: u64, slice_ms: u64) -> u64 {
    if read < budget / 2 {
        // The pass was not limited by its budget: no measure of the rate.
        return budget;
    }
    let rate = read as f64 / took_ms.max(1) as f64;
    let want = (rate * slice_ms as f64).clamp(budget as f64 / 4.0, budget as f64 * 4.0);
    (want as u64).clamp(MIN_SLICE_BYTES, MAX_SLICE_BYTES)
}

/// Run the service until `shutdown` completes. Outputs and the checkpoint are flushed on exit.
pub async fn run(
    site: Arc<SiteConfig>,
    wake: Wake,
    shutdown: impl Future<Output = ()>,
    mut observer: Option<Observer>,
    snapshots: Option<tokio::sync::watch::Sender<Snapshot>>,
) -> Result<(), ServiceError> {
    let mut svc = Service::start(site, wake, snapshots).await?;
    let mut tick = tokio::time::interval(Duration::from_millis(svc.site.service.reconcile_ms.max(100)));
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Skip);
    tokio::pin!(shutdown);
    loop {
        let quiet = svc.pipeline.next_quiet_deadline().map(|t| t.saturating_sub(svc.clock.now_ms()));
        let quiet_sleep = tokio::time::sleep(Duration::from_millis(quiet.unwrap_or(3_600_000)));
        // Behind (the last pass stopped at its budget): the next slice follows at once, after
        // a look at the shutdown signal.
        let behind = svc.behind;
        let woken_by_event = tokio::select! {
            biased;
            () = &mut shutdown => break,
            () = std::future::ready(()), if behind => false,
            () = svc.notify.notified() => true,
            _ = tick.tick() => false,
            () = quiet_sleep, if quiet.is_some() => false,
        };
        if woken_by_event {
            // A writer appending to many files sends a burst of events: let them gather so one
            // pass serves them all (a few tens of ms against a latency budget of a second).
            tokio::time::sleep(Duration::from_millis(EVENT_COALESCE_MS)).await;
        }
        if let Err(e) = svc.pass_and_checkpoint(observer.as_mut()).await {
            // Outputs cannot be written (a full disk, a read-only or vanished folder): keep
            // running degraded, say why on /healthz, and start again from the last checkpoint
            // after a pause, exactly as a restart would (outputs are idempotent, so nothing is
            // lost or repeated once the fault clears). Only a broken internal task stops it.
            if let ServiceError::Internal(_) = e {
                return Err(e);
            }
            svc.degrade(&e);
            tokio::select! {
                biased;
                () = &mut shutdown => break,
                () = tokio::time::sleep(Duration::from_millis(svc.retry_ms)) => {}
            }
            svc.retry_ms = (svc.retry_ms * 2).min(MAX_RETRY_MS);
            svc.resume().await?;
        }
    }
    svc.stop().await
}

/// The first pause before a degraded service tries again; it doubles up to `MAX_RETRY_MS`.
const FIRST_RETRY_MS: u64 = 1_000;
/// The longest pause between tries of a degraded service.
const MAX_RETRY_MS: u64 = 30_000;

/// The running service: the pipeline and what surrounds it.
struct Service {
    site: Arc<SiteConfig>,
    pipeline: Pipeline,
    clock: MonoClock,
    notifier: Notifier,
    notify: Arc<Notify>,
    watch: Option<Watch>,
    watch_status: WatchStatus,
    forwarder: Option<Arc<Forwarder>>,
    snapshots: Option<tokio::sync::watch::Sender<Snapshot>>,
    passes: u64,
    last_watchdog: u64,
    last_checkpoint: u64,
    /// The gap between checkpoints: the configured interval, stretched so that writing the
    /// checkpoint takes at most 1/CHECKPOINT_DUTY of the time (a site with many units and
    /// weeks of monitor history writes megabytes; a crash then re-reads a little more data,
    /// nothing is lost).
    checkpoint_gap: u64,
    /// Whether anything was read or written since the last checkpoint.
    dirty: bool,
    /// Why the service is degraded (outputs or the checkpoint cannot be written), if it is.
    degraded: Option<String>,
    /// The pause before the next try while degraded.
    retry_ms: u64,
    /// Why the pipeline could not be rebuilt from the checkpoint (it is empty until it can).
    resume_error: Option<String>,
    /// The last pass stopped at its read budget: the files hold more.
    behind: bool,
    /// The read budget of the next pass, bytes (see [`next_slice`]).
    slice_bytes: u64,
    /// The status line last sent to systemd.
    status: String,
}

/// Run `f` on the pipeline on a blocking thread, and give the pipeline back.
async fn blocking<T: Send + 'static>(
    mut pipeline: Pipeline,
    f: impl FnOnce(&mut Pipeline) -> T + Send + 'static,
) -> Result<(Pipeline, T), ServiceError> {
    tokio::task::spawn_blocking(move || {
        let r = f(&mut pipeline);
        (pipeline, r)
    })
    .await
    .map_err(|e| ServiceError::Internal(e.to_string()))
}

impl Service {
    async fn start(
        site: Arc<SiteConfig>,
        wake: Wake,
        snapshots: Option<tokio::sync::watch::Sender<Snapshot>>,
    ) -> Result<Service, ServiceError> {
        let site2 = site.clone();
        let mut pipeline = tokio::task::spawn_blocking(move || Pipeline::new(&site2, &Mode::Live))
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))??;
        for note in &pipeline.notes {
            warn!("checkpoint: {note}");
        }
        let forwarder = start_forwarder(&site, &mut pipeline).await?;
        let notify = match &wake {
            Wake::External(n) => n.clone(),
            Wake::Watchers => Arc::new(Notify::new()),
        };
        let watch = match wake {
            Wake::Watchers => {
                let mut dirs: Vec<PathBuf> = site.units.iter().map(|u| u.input.directory.clone()).collect();
                dirs.sort();
                dirs.dedup();
                Some(watch::start(&dirs, site.service.watch, site.service.reconcile_ms, notify.clone()))
            }
            Wake::External(_) => None,
        };
        let watch_status = watch.as_ref().map_or(WatchStatus::Off, |w| w.status.clone());
        info!(units = site.units.len(), watch = watch_status.as_str(), state = %site.state_dir.display(), output = %site.output_dir.display(), "efftemp service started");
        let clock = MonoClock::default();
        let checkpoint_gap = site.service.checkpoint_ms;
        Ok(Service {
            last_checkpoint: clock.now_ms(),
            site,
            pipeline,
            clock,
            notifier: Notifier::from_env(),
            notify,
            watch,
            watch_status,
            forwarder,
            snapshots,
            passes: 0,
            last_watchdog: 0,
            checkpoint_gap,
            dirty: false,
            degraded: None,
            retry_ms: FIRST_RETRY_MS,
            resume_error: None,
            behind: false,
            slice_bytes: FIRST_SLICE_BYTES,
            status: String::new(),
        })
    }

    /// A pass, the observer, the progress report and a checkpoint when due.
    async fn pass_and_checkpoint(&mut self, observer: Option<&mut Observer>) -> Result<(), ServiceError> {
        if self.resume_error.is_some() {
            // The last rebuild failed: the pipeline is empty; a pass would do nothing and look
            // healthy. Try the rebuild again first.
            self.resume().await?;
            if let Some(e) = &self.resume_error {
                return Err(ServiceError::Resume(e.clone()));
            }
        }
        self.pass().await?;
        if let Some(obs) = observer {
            obs(&self.pipeline);
        }
        let failures_before = self.pipeline.checkpoint_counts().1;
        self.checkpoint_when_due().await?;
        let (_, failures) = self.pipeline.checkpoint_counts();
        if failures > failures_before {
            let why = format!("the checkpoint cannot be written in {}", self.site.state_dir.display());
            if self.degraded.as_deref() != Some(why.as_str()) {
                warn!("degraded: {why}; outputs go on, a restart would re-read more data");
            }
            self.degraded = Some(why);
        } else if self.degraded.is_some() {
            info!("no longer degraded: outputs and the checkpoint are written again");
            self.degraded = None;
            self.retry_ms = FIRST_RETRY_MS;
        }
        self.report_progress();
        Ok(())
    }

    /// Enter (or stay in) the degraded state after `e`: logged once per cause, published.
    fn degrade(&mut self, e: &ServiceError) {
        let why = format!("outputs cannot be written: {e}");
        if self.degraded.as_deref() != Some(why.as_str()) {
            error!(error = %e, "degraded: outputs cannot be written; retrying from the last checkpoint");
        }
        self.degraded = Some(why);
        self.report_progress();
    }

    /// Start again from the last checkpoint, as a restart would: the pipeline (and its state
    /// directory lock) is dropped and rebuilt; the forwarder and watchers carry on.
    async fn resume(&mut self) -> Result<(), ServiceError> {
        drop(std::mem::replace(&mut self.pipeline, Pipeline::empty()));
        let site = self.site.clone();
        let rebuilt = tokio::task::spawn_blocking(move || Pipeline::new(&site, &Mode::Live))
            .await
            .map_err(|e| ServiceError::Internal(e.to_string()))?;
        match rebuilt {
            Ok(mut p) => {
                if let Some(f) = &self.forwarder {
                    p.set_forwarder(f);
                }
                self.pipeline = p;
                self.dirty = false;
                self.resume_error = None;
            }
            Err(e) => {
                // The checkpoint or the outputs cannot be opened yet: stay degraded with an empty
                // pipeline; the next iteration tries the rebuild again after the pause.
                if self.resume_error.is_none() {
                    warn!(error = %e, "cannot resume from the checkpoint yet");
                }
                self.degraded = Some(format!("cannot resume from the checkpoint: {e}"));
                self.resume_error = Some(e.to_string());
            }
        }
        Ok(())
    }

    /// One pipeline pass at the current monotonic time, bounded by the read budget.
    async fn pass(&mut self) -> Result<(), ServiceError> {
        let limits = PollLimits {
            now_ms: self.clock.now_ms(),
            wall_ms: Some(jiff::Timestamp::now().as_millisecond()),
            budget_bytes: self.slice_bytes,
        };
        let bytes_before = self.pipeline.bytes_read();
        let started = std::time::Instant::now();
        let pipeline = std::mem::replace(&mut self.pipeline, Pipeline::empty());
        let (p, res) = blocking(pipeline, move |p| p.pass_within(&limits, false)).await?;
        self.pipeline = p;
        let s = res?;
        let took_ms = u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX);
        let read = self.pipeline.bytes_read().saturating_sub(bytes_before);
        self.slice_bytes = next_slice(self.slice_bytes, read, took_ms, self.site.service.slice_ms);
        if s.more != self.behind {
            if s.more {
                info!(
                    budget_bytes = self.slice_bytes,
                    "catching up: the export files hold a backlog; reading it in slices"
                );
            } else {
                info!("caught up with the export files");
            }
        }
        self.behind = s.more;
        self.dirty |= s.records > 0 || s.intervals > 0;
        self.passes += 1;
        Ok(())
    }

    /// Readiness, watchdog keep-alives and the metrics snapshot after a pass.
    fn report_progress(&mut self) {
        let status = self.status_line();
        if self.passes == 1 {
            self.notifier.notify(&format!("READY=1\nSTATUS={status}"));
            self.status = status;
        } else if self.passes > 1 && status != self.status {
            self.notifier.notify(&format!("STATUS={status}"));
            self.status = status;
        }
        if let Some(wd) = self.notifier.watchdog_ms
            && self.clock.now_ms().saturating_sub(self.last_watchdog) >= wd / 2
        {
            self.notifier.notify("WATCHDOG=1");
            self.last_watchdog = self.clock.now_ms();
        }
        let Some(tx) = &self.snapshots else { return };
        let (writes, failures) = self.pipeline.checkpoint_counts();
        let counter = |f: fn(&Watch) -> &std::sync::atomic::AtomicU64| {
            self.watch.as_ref().map_or(0, |w| f(w).load(std::sync::atomic::Ordering::Relaxed))
        };
        let snap = Snapshot {
            units: self.pipeline.snapshot_units(),
            checkpoint_writes: writes,
            checkpoint_failures: failures,
            watch_mode: self.watch_status.as_str().to_string(),
            rescans: counter(|w| &*w.rescans),
            watcher_errors: counter(|w| &*w.errors),
            syslog: self.forwarder.as_ref().map(|f| f.stats()),
            passes: self.passes,
            degraded: self.degraded.clone(),
            last_pass_ms: Some(jiff::Timestamp::now().as_millisecond()),
            ready_within_ms: i64::try_from(self.site.service.reconcile_ms.max(1_000) * 3).unwrap_or(i64::MAX),
            catching_up: self.behind,
        };
        let _ = tx.send(snap);
    }

    /// The systemd status line: watching, or catching up and how far.
    fn status_line(&self) -> String {
        if !self.behind {
            return "watching the export directories".to_string();
        }
        let unread: u64 = self.pipeline.units.iter().filter_map(|u| u.backlog()).sum();
        let units = self.pipeline.units.iter().filter(|u| u.backlog().is_some()).count();
        format!("catching up: {} unread in {units} unit(s)", crate::app::http::human_bytes(unread))
    }

    /// Write the checkpoint when something changed and the gap since the last one is over.
    async fn checkpoint_when_due(&mut self) -> Result<(), ServiceError> {
        if !self.dirty || self.clock.now_ms().saturating_sub(self.last_checkpoint) < self.checkpoint_gap {
            return Ok(());
        }
        let started = std::time::Instant::now();
        let pipeline = std::mem::replace(&mut self.pipeline, Pipeline::empty());
        let now = self.clock.now_ms();
        let (p, res) = blocking(pipeline, move |p| p.checkpoint_at(now)).await?;
        self.pipeline = p;
        res?;
        let took_ms = u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX);
        let configured = self.site.service.checkpoint_ms;
        self.checkpoint_gap = configured.max(took_ms.saturating_mul(CHECKPOINT_DUTY));
        if self.checkpoint_gap > configured {
            debug!(took_ms, gap_ms = self.checkpoint_gap, "checkpoint is large: next one after a longer gap");
        }
        self.last_checkpoint = self.clock.now_ms();
        self.dirty = false;
        Ok(())
    }

    /// Flush the outputs and the checkpoint, and stop the forwarder.
    async fn stop(self) -> Result<(), ServiceError> {
        self.notifier.notify("STOPPING=1");
        info!("shutting down: flushing outputs and the checkpoint");
        let forwarder = self.forwarder;
        let (_, res) = blocking(self.pipeline, move |p| {
            let r = p.checkpoint();
            // Give the collector a moment for what is queued; the rest stays in the disk queue
            // and is sent first at the next start.
            if let Some(f) = forwarder.and_then(|f| Arc::try_unwrap(f).ok()) {
                f.shutdown(Duration::from_millis(1_000));
            }
            r
        })
        .await?;
        res?;
        info!("stopped");
        Ok(())
    }
}

/// Syslog forwarding: its disk queue is locked for the life of this run (a reload stops the
/// old forwarder before the new run starts one).
async fn start_forwarder(
    site: &SiteConfig,
    pipeline: &mut Pipeline,
) -> Result<Option<Arc<Forwarder>>, ServiceError> {
    let Some(cfg) = site.syslog.clone() else { return Ok(None) };
    let address = cfg.address.clone();
    let f = tokio::task::spawn_blocking(move || Forwarder::start(cfg))
        .await
        .map_err(|e| ServiceError::Internal(e.to_string()))?
        .map_err(|e| ServiceError::Internal(format!("syslog forwarding: {e}")))?;
    let f = Arc::new(f);
    pipeline.set_forwarder(&f);
    info!(address = %address, "forwarding alert events to syslog");
    Ok(Some(f))
}
