//! Signals of the running service.

use std::path::PathBuf;

use crate::config::SiteConfig;

/// What the signal task asks the service loop to do.
pub enum Control {
    /// Stop (SIGTERM, SIGINT, or the signal task ended).
    Stop,
    /// Restart with a validated new configuration (SIGHUP).
    Reload(std::sync::Arc<SiteConfig>),
}

/// Turn process signals into [`Control`]s: TERM and INT stop; HUP reloads after validating the
/// new configuration (a bad one is logged with its locations and the running one carries on).
pub async fn signals(path: PathBuf, tx: tokio::sync::mpsc::Sender<Control>) {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{SignalKind, signal};
        let (Ok(mut term), Ok(mut int), Ok(mut hup)) =
            (signal(SignalKind::terminate()), signal(SignalKind::interrupt()), signal(SignalKind::hangup()))
        else {
            let _ = tokio::signal::ctrl_c().await;
            let _ = tx.send(Control::Stop).await;
            return;
        };
        loop {
            tokio::select! {
                _ = term.recv() => break,
                _ = int.recv() => break,
                _ = hup.recv() => {
                    match SiteConfig::load(&path) {
                        Ok(site) => {
                            if tx.send(Control::Reload(std::sync::Arc::new(site))).await.is_err() {
                                return;
                            }
                        }
                        Err(errors) => {
                            for e in &errors.0 {
                                tracing::error!(error = %e, "reload refused: the new configuration has a problem; the running one stays in force");
                            }
                        }
                    }
                }
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        let _ = tokio::signal::ctrl_c().await;
    }
    let _ = tx.send(Control::Stop).await;
}
