//! systemd's notification protocol (`sd_notify`): readiness and watchdog keep-alives sent as
//! datagrams to `$NOTIFY_SOCKET`, when the service runs under systemd with `Type=notify`.

use tracing::warn;

/// The service's side of `sd_notify` (a no-op outside systemd).
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
