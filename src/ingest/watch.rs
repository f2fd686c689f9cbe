//! File-system events as hints. The watcher only wakes the service; a reconcile pass over the
//! directory is the truth, so lost, duplicated or reordered events cost latency, never data.
//!
//! `auto` starts the platform watcher (inotify on Linux) on every export directory and falls
//! back to a polling watcher when that fails (network shares, missing directories, exhausted
//! inotify limits); `poll` forces polling; `off` relies on the service's periodic pass alone.

use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

use notify::{Config, Event, PollWatcher, RecommendedWatcher, RecursiveMode, Watcher};
use tokio::sync::Notify;
use tracing::{info, warn};

use crate::ingest::settings::WatchMode;

/// What is watching the directories.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum WatchStatus {
    /// Native events (inotify, FSEvents, ...).
    Native,
    /// A polling watcher.
    Polling,
    /// No watcher: the periodic pass only.
    Off,
}

impl WatchStatus {
    /// Name for logs and metrics.
    pub fn as_str(&self) -> &'static str {
        match self {
            WatchStatus::Native => "native",
            WatchStatus::Polling => "poll",
            WatchStatus::Off => "off",
        }
    }
}

/// A running watcher; dropping it stops the events.
pub struct Watch {
    _watcher: Option<Box<dyn Watcher + Send>>,
    /// The mode in effect.
    pub status: WatchStatus,
    /// Rescan requests (event-queue overflows) seen.
    pub rescans: Arc<AtomicU64>,
    /// Watcher errors seen.
    pub errors: Arc<AtomicU64>,
}

fn handler(
    wake: Arc<Notify>,
    rescans: Arc<AtomicU64>,
    errors: Arc<AtomicU64>,
) -> impl FnMut(notify::Result<Event>) + Send + 'static {
    move |res: notify::Result<Event>| {
        match res {
            Ok(ev) => {
                if ev.need_rescan() {
                    rescans.fetch_add(1, Ordering::Relaxed);
                } else if !wakes(&ev.kind) {
                    // Our own reads open and close the export files: waking on those would
                    // make every pass cause the next one (a busy loop with no data).
                    return;
                }
            }
            Err(_) => {
                errors.fetch_add(1, Ordering::Relaxed);
            }
        }
        // Never block the watcher's thread: just wake the service.
        wake.notify_one();
    }
}

/// Whether an event can mean new data: creation, modification (data, size, name, metadata),
/// removal. Access events (open, read, close without writing) cannot.
fn wakes(kind: &notify::EventKind) -> bool {
    use notify::EventKind as K;
    use notify::event::AccessKind;
    match kind {
        K::Access(AccessKind::Close(notify::event::AccessMode::Write)) => true,
        K::Access(_) => false,
        K::Any | K::Create(_) | K::Modify(_) | K::Remove(_) | K::Other => true,
    }
}

/// Start watching `dirs` (non-recursively) and wake `wake` on any change.
pub fn start(dirs: &[PathBuf], mode: WatchMode, poll_ms: u64, wake: Arc<Notify>) -> Watch {
    let rescans = Arc::new(AtomicU64::new(0));
    let errors = Arc::new(AtomicU64::new(0));
    let native = || -> notify::Result<Box<dyn Watcher + Send>> {
        let mut w = RecommendedWatcher::new(
            handler(wake.clone(), rescans.clone(), errors.clone()),
            Config::default(),
        )?;
        for d in dirs {
            w.watch(d, RecursiveMode::NonRecursive)?;
        }
        Ok(Box::new(w))
    };
    let polling = || -> notify::Result<Box<dyn Watcher + Send>> {
        let cfg = Config::default().with_poll_interval(Duration::from_millis(poll_ms.max(100)));
        let mut w = PollWatcher::new(handler(wake.clone(), rescans.clone(), errors.clone()), cfg)?;
        for d in dirs {
            w.watch(d, RecursiveMode::NonRecursive)?;
        }
        Ok(Box::new(w))
    };
    let (watcher, status) = match mode {
        WatchMode::Off => (None, WatchStatus::Off),
        WatchMode::Native => match native() {
            Ok(w) => (Some(w), WatchStatus::Native),
            Err(e) => {
                warn!(error = %e, "native file watcher failed; relying on the periodic pass");
                (None, WatchStatus::Off)
            }
        },
        WatchMode::Poll => match polling() {
            Ok(w) => (Some(w), WatchStatus::Polling),
            Err(e) => {
                warn!(error = %e, "polling watcher failed; relying on the periodic pass");
                (None, WatchStatus::Off)
            }
        },
        WatchMode::Auto => match native() {
            Ok(w) => (Some(w), WatchStatus::Native),
            Err(e) => {
                warn!(error = %e, "native file watcher unavailable; falling back to polling");
                match polling() {
                    Ok(w) => (Some(w), WatchStatus::Polling),
                    Err(e) => {
                        warn!(error = %e, "polling watcher failed too; relying on the periodic pass");
                        (None, WatchStatus::Off)
                    }
                }
            }
        },
    };
    info!(mode = status.as_str(), "watching export directories");
    Watch { _watcher: watcher, status, rescans, errors }
}

#[cfg(test)]
mod tests {
    use super::*;
    use notify::EventKind as K;
    use notify::event::{AccessKind, AccessMode, CreateKind, DataChange, ModifyKind};

    #[test]
    fn only_events_that_can_mean_new_data_wake_the_service() {
        assert!(!wakes(&K::Access(AccessKind::Open(AccessMode::Any))));
        assert!(!wakes(&K::Access(AccessKind::Close(AccessMode::Read))));
        assert!(!wakes(&K::Access(AccessKind::Read)));
        assert!(wakes(&K::Access(AccessKind::Close(AccessMode::Write))));
        assert!(wakes(&K::Modify(ModifyKind::Data(DataChange::Any))));
        assert!(wakes(&K::Create(CreateKind::File)));
        assert!(wakes(&K::Any));
    }
}
