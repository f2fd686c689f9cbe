//! The delivery thread: the link to the collector (TCP or UDP), reconnection with backoff, and
//! the send-then-confirm loop that takes an event off the queue.

use std::fs;
use std::io::{self, Read, Write};
use std::net::{SocketAddr, TcpStream, ToSocketAddrs, UdpSocket};
use std::path::PathBuf;
use std::sync::PoisonError;
use std::time::{Duration, Instant};

use super::format::{format_datagram, format_rfc5424, frame_octet_counted};
use super::queue::Record;
use super::{Shared, SyslogConfig, Transport};

/// Longest a single connect or write may block the delivery thread.
const IO_TIMEOUT: Duration = Duration::from_secs(2);

/// An open path to the collector.
enum Link {
    Tcp(TcpStream),
    Udp(UdpSocket),
    Relp(super::relp::Session),
}

impl Link {
    fn open(cfg: &SyslogConfig, timeout: Duration) -> io::Result<Link> {
        let addrs: Vec<SocketAddr> = cfg.address.trim().to_socket_addrs()?.collect();
        let mut last = io::Error::new(io::ErrorKind::NotFound, "the address resolved to nothing");
        for addr in addrs {
            let opened = match cfg.transport {
                Transport::Tcp => TcpStream::connect_timeout(&addr, timeout).and_then(|s| {
                    s.set_nodelay(true)?;
                    s.set_write_timeout(Some(IO_TIMEOUT))?;
                    Ok(Link::Tcp(s))
                }),
                Transport::Relp => TcpStream::connect_timeout(&addr, timeout).and_then(|s| {
                    s.set_nodelay(true)?;
                    s.set_write_timeout(Some(IO_TIMEOUT))?;
                    Ok(Link::Relp(super::relp::Session::open(s, Duration::from_millis(cfg.ack_timeout_ms))?))
                }),
                Transport::Udp => {
                    let local: SocketAddr =
                        if addr.is_ipv4() { ([0, 0, 0, 0], 0).into() } else { ([0u16; 8], 0).into() };
                    UdpSocket::bind(local).and_then(|s| {
                        s.connect(addr)?;
                        s.set_nonblocking(true)?;
                        Ok(Link::Udp(s))
                    })
                }
            };
            match opened {
                Ok(link) => return Ok(link),
                Err(e) => last = e,
            }
        }
        Err(last)
    }

    fn write(&mut self, msg: &str) -> io::Result<()> {
        match self {
            Link::Tcp(s) => s.write_all(&frame_octet_counted(msg)),
            Link::Relp(r) => r.send(msg.as_bytes()),
            Link::Udp(s) => {
                let n = s.send(msg.as_bytes())?;
                if n == msg.len() { Ok(()) } else { Err(io::Error::other("short datagram")) }
            }
        }
    }

    /// Whether the link still looks usable. A collector never sends to us, so anything readable
    /// on TCP is the end of the stream or an error; on connected UDP, a pending "port
    /// unreachable" shows as a refused connection.
    fn check(&mut self) -> io::Result<()> {
        let mut buf = [0u8; 512];
        match self {
            Link::Tcp(s) => {
                s.set_nonblocking(true)?;
                let r = loop {
                    match s.read(&mut buf) {
                        Ok(0) => {
                            break Err(io::Error::new(
                                io::ErrorKind::UnexpectedEof,
                                "the collector closed the connection",
                            ));
                        }
                        Ok(_) => continue,
                        Err(e) if e.kind() == io::ErrorKind::WouldBlock => break Ok(()),
                        Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                        Err(e) => break Err(e),
                    }
                };
                s.set_nonblocking(false)?;
                r
            }
            Link::Relp(r) => r.check(),
            Link::Udp(s) => loop {
                match s.recv(&mut buf) {
                    Ok(_) => continue,
                    Err(e) if e.kind() == io::ErrorKind::WouldBlock => return Ok(()),
                    Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                    Err(e) => return Err(e),
                }
            },
        }
    }
}

/// Mutable state of the delivery loop.
struct Delivery<'a> {
    shared: &'a Shared,
    cfg: &'a SyslogConfig,
    link: Option<Link>,
    failures: u32,
    ever_connected: bool,
    outage_since: Option<Instant>,
}

impl Delivery<'_> {
    /// Record a failure: drop the link, log (once per outage), give the event back to the queue,
    /// and wait the backoff delay. Returns false when it is time to stop.
    fn fail(&mut self, what: &str, e: &io::Error) -> bool {
        self.link = None;
        let queued = {
            let mut st = self.shared.lock();
            st.connected = false;
            st.in_flight = None;
            st.queue.ids.len()
        };
        if self.outage_since.is_none() {
            self.outage_since = Some(Instant::now());
            tracing::warn!(
                collector = %self.cfg.address, error = %e, queued,
                "syslog forwarding: {what} failed; events stay queued and are retried with backoff"
            );
        } else {
            tracing::debug!(
                collector = %self.cfg.address,
                error = %e,
                queued,
                "syslog forwarding: {what} failed again"
            );
        }
        let shift = self.failures.min(20);
        self.failures = self.failures.saturating_add(1);
        let delay = self.cfg.reconnect_min_ms.saturating_mul(1u64 << shift).min(self.cfg.reconnect_max_ms);
        self.wait(Duration::from_millis(delay))
    }

    /// Sleep up to `d`, cut short by the stop time. Returns false when it is time to stop.
    fn wait(&self, d: Duration) -> bool {
        let until = Instant::now() + d;
        let mut st = self.shared.lock();
        loop {
            let now = Instant::now();
            if st.stop_at.is_some_and(|s| now >= s) {
                return false;
            }
            if now >= until {
                return true;
            }
            let mut left = until - now;
            if let Some(s) = st.stop_at {
                left = left.min(s - now);
            }
            st = self.shared.wake.wait_timeout(st, left).unwrap_or_else(PoisonError::into_inner).0;
        }
    }

    /// The next event to send (marked in flight), or None when it is time to stop.
    fn next(&self) -> Option<(u64, PathBuf)> {
        let mut st = self.shared.lock();
        loop {
            let now = Instant::now();
            if st.stop_at.is_some_and(|s| now >= s) {
                return None;
            }
            if let Some(&id) = st.queue.ids.front() {
                st.in_flight = Some(id);
                return Some((id, st.queue.path(id)));
            }
            if st.stop_at.is_some() {
                return None;
            }
            st = self
                .shared
                .wake
                .wait_timeout(st, Duration::from_millis(500))
                .unwrap_or_else(PoisonError::into_inner)
                .0;
        }
    }

    /// How long a connect may take: the I/O timeout, or less when stopping.
    fn budget(&self) -> Duration {
        let st = self.shared.lock();
        match st.stop_at {
            Some(s) => {
                s.saturating_duration_since(Instant::now()).clamp(Duration::from_millis(10), IO_TIMEOUT)
            }
            None => IO_TIMEOUT,
        }
    }

    fn connect(&mut self) -> io::Result<()> {
        let link = Link::open(self.cfg, self.budget())?;
        self.link = Some(link);
        let mut st = self.shared.lock();
        st.connected = true;
        if self.ever_connected {
            st.reconnects += 1;
        }
        self.ever_connected = true;
        Ok(())
    }

    /// The event left the building: delete it and count it.
    fn delivered(&mut self, id: u64) {
        let mut st = self.shared.lock();
        if let Some(i) = st.queue.ids.iter().position(|x| *x == id) {
            st.queue.remove_at(i);
        }
        st.in_flight = None;
        st.sent += 1;
        drop(st);
        self.failures = 0;
        if let Some(since) = self.outage_since.take() {
            tracing::info!(
                collector = %self.cfg.address,
                outage_s = since.elapsed().as_secs_f64(),
                "syslog forwarding resumed"
            );
        }
    }
}

/// The delivery thread: send queued events in order, one at a time, until stopped.
pub(super) fn deliver(shared: &Shared, cfg: &SyslogConfig, hostname: &str) {
    let mut d = Delivery { shared, cfg, link: None, failures: 0, ever_connected: false, outage_since: None };
    while let Some((id, path)) = d.next() {
        let rec: Record = match fs::read(&path).and_then(|b| {
            serde_json::from_slice(&b).map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e))
        }) {
            Ok(r) => r,
            Err(e) => {
                let mut st = shared.lock();
                if let Some(i) = st.queue.ids.iter().position(|x| *x == id) {
                    st.queue.remove_at(i);
                }
                st.in_flight = None;
                st.dropped += 1;
                tracing::warn!(
                    file = %path.display(),
                    error = %e,
                    "syslog queue: dropped 1 unreadable queued event"
                );
                continue;
            }
        };
        // A link that went away while idle is noticed before writing, not after.
        if let Some(link) = d.link.as_mut()
            && link.check().is_err()
        {
            d.link = None;
            shared.lock().connected = false;
        }
        if d.link.is_none()
            && let Err(e) = d.connect()
        {
            if d.fail("connecting", &e) {
                continue;
            }
            break;
        }
        let msg = match cfg.transport {
            Transport::Tcp | Transport::Relp => {
                format_rfc5424(&rec.event, cfg, hostname, rec.procid, rec.emit_time)
            }
            Transport::Udp => format_datagram(&rec.event, cfg, hostname, rec.procid, rec.emit_time),
        };
        let Some(link) = d.link.as_mut() else { continue };
        let mut sent = link.write(&msg);
        // RELP's answer is the confirmation; plain TCP can only wait and see the link survive.
        if sent.is_ok() && cfg.transport != Transport::Relp {
            std::thread::sleep(Duration::from_millis(cfg.confirm_ms));
            sent = link.check();
        }
        match sent {
            Ok(()) => d.delivered(id),
            Err(e) => {
                if !d.fail("sending", &e) {
                    break;
                }
            }
        }
    }
    shared.lock().connected = false;
}
