//! Forwarding of alert events to a syslog collector (RFC 5424 messages over UDP, or over TCP
//! with RFC 6587 octet-counting framing).
//!
//! Sites already watch a log aggregator; sending every alert transition there means nobody has
//! to poll our JSON-lines file. The forwarder is independent of the pipeline: the caller hands
//! it each event that is new on disk ([`Forwarder::send`]), and a background thread delivers.
//!
//! # Message
//!
//! ```text
//! <PRI>1 TIMESTAMP HOSTNAME APP-NAME PROCID MSGID [alert@32473 ...][evidence@32473 ...][origin ...] BOM MSG
//! ```
//!
//! * `PRI` = facility × 8 + severity (table below). The facility defaults to 16 (`local0`).
//! * `TIMESTAMP` is the *emit* time (when [`Forwarder::send`] was called) in UTC, RFC 3339
//!   with microseconds. The *data* time of the interval is the `data_time` parameter. The
//!   emit time is stored with the queued event, so a resent event carries the same timestamp.
//! * `PROCID` is the process id of the process that queued the event.
//! * `MSGID` is the event kind in upper case: `RAISED`, `UPDATED` or `CLEARED`. We chose the
//!   kind rather than the cause because it is a small closed set that collectors can route on
//!   (for example, page on `RAISED` only). The cause is in the structured data.
//! * Structured data:
//!   * `[alert@32473 unit alert_id event cause severity subject sequence data_time]`;
//!   * `[evidence@32473 ...]` with the event's evidence map (omitted when empty). Names are
//!     cut to the RFC's SD-NAME rules: printable US-ASCII without `=`, space, `]` and `"`
//!     (each replaced by `_`), at most 32 characters; a name that collides after that gets a
//!     `~2`, `~3`, … suffix. Strings are sent as they are, numbers and booleans as JSON text,
//!     arrays and objects as compact JSON, null as an empty string;
//!   * `[origin software="efftemp" swVersion="…"]` (the SD-ID registered by RFC 5424 §7.2),
//!     so the aggregator knows which build produced the event.
//!
//!   32473 is the private enterprise number reserved for documentation by RFC 5612; a site
//!   that needs its own can change [`SD_ID_ALERT`] and [`SD_ID_EVIDENCE`]. Parameter values
//!   escape `\`, `"` and `]` with a backslash (RFC 5424 §6.3.3).
//! * `MSG` is the event's one-sentence message, UTF-8, preceded by a byte order mark as RFC
//!   5424 §6.4 allows, so collectors know the text is UTF-8.
//!
//! # Severity
//!
//! | Event | Syslog severity |
//! |---|---|
//! | high-priority alert | 4 Warning |
//! | medium-priority alert | 5 Notice |
//! | low-priority alert | 6 Informational |
//! | data-quality alert (cause `data_quality`, any priority) | 5 Notice |
//! | service or solver failure (not an alert event; reserved for the service's own log) | 3 Error |
//!
//! Severities 0–2 (Emergency, Alert, Critical) are never used: efftemp is advisory. A clear or
//! an update keeps its alert's severity, so a collector filtering on severity sees the whole
//! lifecycle, not only the raise.
//!
//! # Delivery
//!
//! * [`Forwarder::send`] never touches the network: it appends the event to a bounded queue in
//!   `queue_dir` (one file per event, written to a temporary name, fsync'd, renamed, and the
//!   directory fsync'd) and returns. One background thread delivers in order.
//! * An event leaves the queue only after it was written completely **and** the connection was
//!   still open `confirm_ms` later (a collector that stops after reading resets or closes the
//!   connection; the forwarder sees that before it forgets the event). Delivery is therefore
//!   *at-least-once*: when the collector restarts, the one event in flight may arrive twice.
//!   `alert_id` + `sequence` identify an event, so the aggregator can de-duplicate. Plain TCP
//!   syslog has no acknowledgements: a collector that dies after accepting bytes but before
//!   storing them can still lose the last event; RELP or TLS are not implemented here.
//! * While the collector is unreachable events accumulate. When more than `queue_max` are
//!   waiting, the oldest (never the one in flight) are deleted, counted in
//!   [`ForwardStats::dropped`] and reported with a `tracing` warning giving the number.
//! * Reconnection uses exponential backoff from `reconnect_min_ms` to `reconnect_max_ms`.
//! * [`Forwarder::shutdown`] drains for up to its timeout; whatever is left stays on disk and is
//!   sent after the next [`Forwarder::start`] with the same `queue_dir`.
//! * UDP: one datagram per message, at most [`UDP_MAX_BYTES`]. A longer message first loses its
//!   evidence element, then the end of its text; the alert element then carries
//!   `truncated="evidence"` or `truncated="evidence message"`. UDP has no delivery guarantee:
//!   the queue covers local errors and an "ICMP port unreachable" answer, nothing more. Use TCP
//!   when every alert must arrive.
//!
//! The message format is in `format`, the on-disk queue in `queue`, and the delivery thread in
//! `deliver`; this file has the configuration, the [`Forwarder`] and its counters.

mod deliver;
mod format;
mod queue;
mod relp;
mod sink;

use std::io;
use std::path::PathBuf;
use std::sync::{Arc, Condvar, Mutex, MutexGuard, PoisonError};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

use serde::Serialize;

use self::deliver::deliver;
use self::format::{APP_NAME_MAX, HOSTNAME_MAX};
pub use self::format::{
    SD_ID_ALERT, SD_ID_EVIDENCE, SEVERITY_SERVICE_FAILURE, UDP_MAX_BYTES, format_datagram, format_rfc5424,
    frame_octet_counted, local_hostname, sd_escape, sd_name, syslog_severity,
};
use self::queue::{DiskQueue, Record};
pub use self::sink::SyslogSink;
use crate::core::alerts::AlertEvent;

/// Default facility: 16, `local0`, the usual choice for site applications.
pub const DEFAULT_FACILITY: u8 = 16;
/// Default queue bound, events: about a week of a busy site's alerts.
pub const DEFAULT_QUEUE_MAX: usize = 10_000;

/// How messages travel to the collector.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Transport {
    /// One datagram per message (RFC 5426): simple, lossy, truncated to [`UDP_MAX_BYTES`].
    Udp,
    /// A stream with octet-counting framing (RFC 6587 §3.4.1): reliable enough to queue and
    /// resend, and safe for messages that contain line breaks. An event counts as sent once it
    /// is written and the connection survives `confirm_ms`: a collector that accepts but never
    /// reads, then resets, loses what its kernel had buffered (use RELP where that matters).
    Tcp,
    /// RELP over TCP: each event is acknowledged by the collector (`rsp 200`) before it leaves
    /// the queue; a collector that does not answer within 5 s is treated as down.
    Relp,
}

/// Where and how alert events are forwarded.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SyslogConfig {
    /// Collector, `host:port` (IPv6 in brackets: `[::1]:514`). Resolved at every connect, so a
    /// DNS change is picked up after a reconnect.
    pub address: String,
    /// UDP or TCP.
    pub transport: Transport,
    /// APP-NAME field (default `efftemp`), what collectors usually filter on.
    pub app_name: String,
    /// HOSTNAME field; `None` uses the machine's host name.
    pub hostname: Option<String>,
    /// Syslog facility 0–23 (default 16, `local0`).
    pub facility: u8,
    /// Directory of the on-disk queue (the site configuration uses `<state_dir>/syslog-queue`).
    pub queue_dir: PathBuf,
    /// Most events kept while the collector is unreachable; older ones are dropped (counted).
    pub queue_max: usize,
    /// First reconnect delay after a failure, ms.
    pub reconnect_min_ms: u64,
    /// Longest reconnect delay, ms (the delay doubles per failed attempt up to this).
    pub reconnect_max_ms: u64,
    /// How long after writing an event the connection must still be open before the event
    /// leaves the queue, ms (default 20: several round trips on a plant network). A larger
    /// value protects better against a collector that stops right after reading, and slows a
    /// backlog's drain to about one event per `confirm_ms`.
    pub confirm_ms: u64,
    /// RELP: how long the collector may take to acknowledge one event, ms (default 5000); no
    /// answer means a hung collector, and the event stays queued.
    pub ack_timeout_ms: u64,
}

impl SyslogConfig {
    /// A configuration with the defaults for everything but the collector and the queue
    /// directory, so callers and tests only name what matters to them.
    pub fn new(address: impl Into<String>, transport: Transport, queue_dir: impl Into<PathBuf>) -> Self {
        SyslogConfig {
            address: address.into(),
            transport,
            app_name: "efftemp".to_string(),
            hostname: None,
            facility: DEFAULT_FACILITY,
            queue_dir: queue_dir.into(),
            queue_max: DEFAULT_QUEUE_MAX,
            reconnect_min_ms: 500,
            reconnect_max_ms: 60_000,
            confirm_ms: 20,
            ack_timeout_ms: 5_000,
        }
    }

    /// Check the values a forwarder cannot work with (the site configuration reports the same
    /// problems with file and line; this covers configurations built in code).
    pub fn validate(&self) -> Result<(), String> {
        check_address(&self.address)?;
        if self.facility > 23 {
            return Err(format!("facility {} is out of range 0..=23", self.facility));
        }
        if self.queue_max == 0 {
            return Err("queue_max must be at least 1".into());
        }
        if self.reconnect_min_ms == 0 || self.reconnect_min_ms > self.reconnect_max_ms {
            return Err(format!(
                "reconnect delays must satisfy 0 < min <= max, got {} ms and {} ms",
                self.reconnect_min_ms, self.reconnect_max_ms
            ));
        }
        check_app_name(&self.app_name)?;
        if let Some(h) = &self.hostname {
            check_hostname(h)?;
        }
        Ok(())
    }
}

/// Check a `host:port` collector address without resolving it (DNS may be down when the
/// service starts; resolution happens at every connect).
pub fn check_address(address: &str) -> Result<(), String> {
    let bad =
        |why: &str| Err(format!("`{address}` is not a collector address: {why} (e.g. \"logs.example:514\")"));
    let Some((host, port)) = address.trim().rsplit_once(':') else {
        return bad("no `:port`");
    };
    if host.is_empty() {
        return bad("no host");
    }
    if host.contains(':') && !(host.starts_with('[') && host.ends_with(']')) {
        return bad("an IPv6 address needs brackets, like [::1]:514");
    }
    if host.chars().any(|c| c.is_whitespace() || c.is_control()) {
        return bad("the host contains spaces");
    }
    match port.parse::<u16>() {
        Ok(p) if p > 0 => Ok(()),
        _ => bad("the port must be a number 1..=65535"),
    }
}

/// Check an APP-NAME: 1 to 48 printable US-ASCII characters (RFC 5424 §6.2.5); a bad one would
/// otherwise be silently rewritten in every message.
pub fn check_app_name(text: &str) -> Result<(), String> {
    check_header_text("app_name", text, APP_NAME_MAX)
}

/// Check a HOSTNAME: 1 to 255 printable US-ASCII characters (RFC 5424 §6.2.4).
pub fn check_hostname(text: &str) -> Result<(), String> {
    check_header_text("hostname", text, HOSTNAME_MAX)
}

fn check_header_text(what: &str, text: &str, max: usize) -> Result<(), String> {
    if text.is_empty() || text.len() > max || !text.chars().all(|c| c.is_ascii_graphic()) {
        return Err(format!(
            "{what} `{text}` must be 1 to {max} printable US-ASCII characters without spaces (RFC 5424 §6.2)"
        ));
    }
    Ok(())
}

/// The facility number of a name (`kern` … `ntp` = 0–12, `local0` … `local7` = 16–23), so the
/// configuration can say `"local3"` instead of 19.
pub fn facility_from_name(name: &str) -> Option<u8> {
    const NAMES: [&str; 13] = [
        "kern", "user", "mail", "daemon", "auth", "syslog", "lpr", "news", "uucp", "cron", "authpriv", "ftp",
        "ntp",
    ];
    let name = name.trim().to_ascii_lowercase();
    if let Some(i) = NAMES.iter().position(|n| *n == name) {
        return u8::try_from(i).ok();
    }
    let n: u8 = name.strip_prefix("local")?.parse().ok()?;
    (n <= 7).then_some(16 + n)
}

/// Why the forwarder cannot start.
#[derive(Debug, thiserror::Error)]
pub enum ForwardError {
    /// The configuration cannot work (bad address, facility, bounds).
    #[error("syslog forwarding: {0}")]
    Config(String),
    /// Another forwarder uses the same queue directory (two would send every event twice).
    #[error("syslog queue directory {dir} is in use by another forwarder; use one queue per collector")]
    Locked {
        /// The directory.
        dir: PathBuf,
    },
    /// The delivery thread cannot be started.
    #[error("syslog forwarding: cannot start the delivery thread: {0}")]
    Thread(io::Error),
    /// The queue directory cannot be created, locked or read.
    #[error("syslog queue directory {dir}: {source}")]
    Queue {
        /// The directory.
        dir: PathBuf,
        /// The error.
        source: io::Error,
    },
}

/// Counters of a running forwarder (for health reports and tests).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct ForwardStats {
    /// Events waiting in the queue (including the one in flight).
    pub queued: usize,
    /// Events delivered since start.
    pub sent: u64,
    /// Events lost since start: the queue bound was exceeded, a queued file was unreadable, or
    /// an event could not be written to the queue.
    pub dropped: u64,
    /// Connections opened after the first one (each one follows a lost or failed connection).
    pub reconnects: u64,
    /// Whether a connection to the collector is open now.
    pub connected: bool,
}

#[derive(Debug)]
struct State {
    queue: DiskQueue,
    /// The event the delivery thread is sending (never dropped for the bound).
    in_flight: Option<u64>,
    /// When set, the delivery thread stops at this instant (or earlier, once the queue is empty).
    stop_at: Option<Instant>,
    sent: u64,
    dropped: u64,
    reconnects: u64,
    connected: bool,
}

#[derive(Debug)]
struct Shared {
    state: Mutex<State>,
    wake: Condvar,
}

impl Shared {
    fn lock(&self) -> MutexGuard<'_, State> {
        self.state.lock().unwrap_or_else(PoisonError::into_inner)
    }
}

/// Delete the oldest events beyond the bound (never the one in flight); returns how many.
fn enforce_bound(st: &mut State, max: usize) -> usize {
    let mut dropped = 0;
    while st.queue.ids.len() > max {
        let index = usize::from(st.in_flight.is_some() && st.queue.ids.front() == st.in_flight.as_ref());
        if index >= st.queue.ids.len() {
            break;
        }
        st.queue.remove_at(index);
        dropped += 1;
    }
    st.dropped += dropped as u64;
    dropped
}

/// A running forwarder: a bounded on-disk queue and one delivery thread.
#[derive(Debug)]
pub struct Forwarder {
    shared: Arc<Shared>,
    thread: Option<JoinHandle<()>>,
    queue_max: usize,
    dir: PathBuf,
}

impl Forwarder {
    /// Open (or create) the queue, lock it, and start delivering; events left by a previous
    /// run are sent first, in order. Does not connect synchronously: a collector that is down
    /// at start only delays delivery.
    pub fn start(cfg: SyslogConfig) -> Result<Forwarder, ForwardError> {
        cfg.validate().map_err(ForwardError::Config)?;
        let queue = DiskQueue::open(&cfg.queue_dir)?;
        let left = queue.ids.len();
        let mut state = State {
            queue,
            in_flight: None,
            stop_at: None,
            sent: 0,
            dropped: 0,
            reconnects: 0,
            connected: false,
        };
        let over = enforce_bound(&mut state, cfg.queue_max);
        if over > 0 {
            tracing::warn!(
                dropped = over,
                queue_max = cfg.queue_max,
                "syslog queue: dropped the {over} oldest events left by the previous run (over queue_max)"
            );
        }
        if left > 0 {
            tracing::info!(
                events = left - over,
                dir = %cfg.queue_dir.display(),
                "syslog queue: resending events left by the previous run"
            );
        }
        let shared = Arc::new(Shared { state: Mutex::new(state), wake: Condvar::new() });
        let hostname = cfg.hostname.clone().unwrap_or_else(local_hostname);
        let queue_max = cfg.queue_max;
        let dir = cfg.queue_dir.clone();
        let worker = Arc::clone(&shared);
        let thread = std::thread::Builder::new()
            .name("efftemp-syslog".into())
            .spawn(move || deliver(&worker, &cfg, &hostname))
            .map_err(ForwardError::Thread)?;
        Ok(Forwarder { shared, thread: Some(thread), queue_max, dir })
    }

    /// Queue an event for delivery. Never waits for the network; it does write and fsync one
    /// small file (a few milliseconds), which is fine for alert rates even on an async thread.
    /// A failure to queue is logged and counted in [`ForwardStats::dropped`], never silent.
    pub fn send(&self, ev: &AlertEvent) {
        let rec = Record { emit_time: jiff::Timestamp::now(), procid: std::process::id(), event: ev.clone() };
        let mut st = self.shared.lock();
        if let Err(e) = st.queue.append(&rec) {
            st.dropped += 1;
            tracing::error!(
                alert_id = %ev.alert_id, sequence = ev.sequence, dir = %self.dir.display(), error = %e,
                "syslog queue: cannot queue an alert event; it will not be forwarded (the alert file has it)"
            );
            return;
        }
        let over = enforce_bound(&mut st, self.queue_max);
        if over > 0 {
            tracing::warn!(
                dropped = over,
                total_dropped = st.dropped,
                queue_max = self.queue_max,
                "syslog queue full (collector unreachable?): dropped the {over} oldest event(s), {} in total",
                st.dropped
            );
        }
        drop(st);
        self.shared.wake.notify_all();
    }

    /// Current counters.
    pub fn stats(&self) -> ForwardStats {
        let st = self.shared.lock();
        ForwardStats {
            queued: st.queue.ids.len(),
            sent: st.sent,
            dropped: st.dropped,
            reconnects: st.reconnects,
            connected: st.connected,
        }
    }

    /// Deliver what is queued for up to `timeout`, then stop. Undelivered events stay in the
    /// queue directory for the next start. Returns within `timeout`, plus `confirm_ms` and at
    /// worst one blocked write (2 s) to a collector that stopped reading.
    pub fn shutdown(mut self, timeout: Duration) {
        self.stop(Instant::now() + timeout);
        let st = self.shared.lock();
        if !st.queue.ids.is_empty() {
            tracing::info!(
                queued = st.queue.ids.len(),
                dir = %self.dir.display(),
                "syslog forwarder stopped; undelivered events stay queued for the next start"
            );
        }
    }

    fn stop(&mut self, at: Instant) {
        self.shared.lock().stop_at = Some(at);
        self.shared.wake.notify_all();
        if let Some(t) = self.thread.take()
            && t.join().is_err()
        {
            tracing::error!("syslog delivery thread panicked");
        }
    }
}

impl Drop for Forwarder {
    /// Dropping without [`Forwarder::shutdown`] stops at once; queued events stay on disk.
    fn drop(&mut self) {
        if self.thread.is_some() {
            self.stop(Instant::now());
        }
    }
}

#[cfg(test)]
#[path = "../../../tests/it/rfc5424.rs"]
mod rfc5424;

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use std::fs;
    use std::io::Read;

    use super::rfc5424::parse;
    use super::*;
    use crate::core::alerts::EventKind;
    use crate::core::vocabulary::{Cause, Severity};

    fn event(severity: Severity, cause: Cause) -> AlertEvent {
        AlertEvent {
            time: "2026-12-01T06:15:00+01:00".into(),
            unit: "R-204".into(),
            alert_id: "R-204-hf-3f9a1c07".into(),
            event: EventKind::Raised,
            cause,
            severity,
            message: "Heater effectiveness fell to 0.82 (baseline 0.91): plan a cleaning.".into(),
            subject: "heater".into(),
            sequence: 17,
            evidence: serde_json::Map::new(),
            time_ms: 0,
        }
    }

    fn cfg() -> SyslogConfig {
        SyslogConfig::new("127.0.0.1:514", Transport::Tcp, "/nonexistent")
    }

    fn at() -> jiff::Timestamp {
        "2026-12-01T05:15:02.5Z".parse().unwrap()
    }

    #[test]
    fn pri_follows_the_severity_table() {
        let c = cfg();
        for (sev, cause, pri) in [
            (Severity::High, Cause::HeaterFouling, 16 * 8 + 4),
            (Severity::Medium, Cause::ConversionDrift, 16 * 8 + 5),
            (Severity::Low, Cause::HeatLoss, 16 * 8 + 6),
            (Severity::High, Cause::DataQuality, 16 * 8 + 5),
            (Severity::Low, Cause::DataQuality, 16 * 8 + 5),
        ] {
            let m = format_rfc5424(&event(sev, cause), &c, "host", 7, at());
            assert!(m.starts_with(&format!("<{pri}>1 ")), "{sev:?} {cause:?}: {m}");
        }
        let kern = SyslogConfig { facility: 0, ..cfg() };
        assert!(
            format_rfc5424(&event(Severity::High, Cause::HeatLoss), &kern, "h", 1, at()).starts_with("<4>1 ")
        );
        // Never 0–2 for any event.
        for sev in [Severity::Low, Severity::Medium, Severity::High] {
            for cause in [Cause::DataQuality, Cause::ModelValidity, Cause::InstrumentFault] {
                assert!(syslog_severity(&event(sev, cause)) >= 3);
            }
        }
    }

    #[test]
    fn header_fields_and_round_trip() {
        let mut ev = event(Severity::Medium, Cause::HeaterFouling);
        ev.event = EventKind::Cleared;
        ev.evidence.insert("effectiveness".into(), 0.82.into());
        ev.evidence.insert("members".into(), serde_json::json!(["a", "b"]));
        ev.evidence.insert("note".into(), serde_json::Value::Null);
        let m = format_rfc5424(&ev, &cfg(), "plant-host", 4242, at());
        let p = parse(&m).unwrap();
        assert_eq!(p.pri, 16 * 8 + 5);
        assert_eq!(p.timestamp, "2026-12-01T05:15:02.500000Z");
        assert_eq!(
            (p.hostname.as_str(), p.app_name.as_str(), p.procid.as_str()),
            ("plant-host", "efftemp", "4242")
        );
        assert_eq!(p.msgid, "CLEARED");
        let a = p.element(SD_ID_ALERT).unwrap();
        for (k, v) in [
            ("unit", "R-204"),
            ("alert_id", "R-204-hf-3f9a1c07"),
            ("event", "cleared"),
            ("cause", "heater_fouling"),
            ("severity", "medium"),
            ("subject", "heater"),
            ("sequence", "17"),
            ("data_time", "2026-12-01T06:15:00+01:00"),
        ] {
            assert_eq!(a.get(k), Some(v), "{k} in {m}");
        }
        let e = p.element(SD_ID_EVIDENCE).unwrap();
        assert_eq!(e.get("effectiveness"), Some("0.82"));
        assert_eq!(e.get("members"), Some(r#"["a","b"]"#));
        assert_eq!(e.get("note"), Some(""));
        assert_eq!(p.element("origin").unwrap().get("software"), Some("efftemp"));
        assert!(p.bom);
        assert_eq!(p.msg, ev.message);
        // No evidence: no evidence element.
        let m = format_rfc5424(&event(Severity::Low, Cause::HeatLoss), &cfg(), "h", 1, at());
        assert!(parse(&m).unwrap().element(SD_ID_EVIDENCE).is_none(), "{m}");
    }

    #[test]
    fn sd_values_are_escaped_and_names_sanitized() {
        assert_eq!(sd_escape(r#"a\b"c]d[e"#), r#"a\\b\"c\]d[e"#);
        assert_eq!(sd_name("residual K"), "residual_K");
        assert_eq!(sd_name("a=b]c\"d"), "a_b_c_d");
        assert_eq!(sd_name("ΔT"), "_T");
        assert_eq!(sd_name(""), "_");
        assert_eq!(sd_name(&"x".repeat(40)).len(), 32);

        let mut ev = event(Severity::High, Cause::InstrumentFault);
        ev.subject = r#"TI-2050 "A" [bed]"#.into();
        ev.message = "Line one\\ with ] and \" and 57 °C".into();
        ev.evidence.insert("residual K".into(), 3.5.into());
        ev.evidence.insert("residual=K".into(), 4.5.into());
        ev.evidence.insert("path".into(), r#"C:\x]"y""#.into());
        ev.evidence.insert("y".repeat(40), 1.into());
        let m = format_rfc5424(&ev, &cfg(), "h", 1, at());
        let p = parse(&m).unwrap();
        assert_eq!(p.element(SD_ID_ALERT).unwrap().get("subject"), Some(ev.subject.as_str()));
        let e = p.element(SD_ID_EVIDENCE).unwrap();
        assert_eq!(e.get("residual_K"), Some("3.5"));
        assert_eq!(e.get("residual_K~2"), Some("4.5"));
        assert_eq!(e.get("path"), Some(r#"C:\x]"y""#));
        assert_eq!(e.get(&"y".repeat(32)), Some("1"));
        assert!(e.params.iter().all(|(k, _)| k.len() <= 32));
        assert_eq!(p.msg, ev.message);
        // Header fields are printable US-ASCII.
        let odd = SyslogConfig { app_name: "eff temp".into(), ..cfg() };
        let p = parse(&format_rfc5424(&ev, &odd, "", 1, at())).unwrap();
        assert_eq!((p.hostname.as_str(), p.app_name.as_str()), ("-", "eff_temp"));
    }

    #[test]
    fn octet_counting_counts_bytes() {
        assert_eq!(frame_octet_counted("abc"), b"3 abc");
        let m = format_rfc5424(&event(Severity::Low, Cause::HeatLoss), &cfg(), "h", 1, at());
        let framed = frame_octet_counted(&m);
        let text = String::from_utf8(framed).unwrap();
        let (len, rest) = text.split_once(' ').unwrap();
        assert_eq!(len.parse::<usize>().unwrap(), rest.len());
        assert_eq!(rest, m);
        // Multi-byte text and the BOM count as bytes, not characters.
        assert!(m.len() > m.chars().count());
        assert_eq!(frame_octet_counted("°C\nx"), "5 °C\nx".as_bytes());
    }

    #[test]
    fn datagrams_are_cut_to_size_and_still_parse() {
        let mut ev = event(Severity::Medium, Cause::Undetermined);
        let members: Vec<String> = (0..200).map(|i| format!("data_quality/TI-{i:04}")).collect();
        ev.evidence.insert("members".into(), members.into());
        let full = format_rfc5424(&ev, &cfg(), "h", 1, at());
        assert!(full.len() > UDP_MAX_BYTES);
        let d = format_datagram(&ev, &cfg(), "h", 1, at());
        assert!(d.len() <= UDP_MAX_BYTES);
        let p = parse(&d).unwrap();
        assert_eq!(p.element(SD_ID_ALERT).unwrap().get("truncated"), Some("evidence"));
        assert_eq!(p.msg, ev.message);

        ev.message = "Ä".repeat(3000);
        let d = format_datagram(&ev, &cfg(), "h", 1, at());
        assert!(d.len() <= UDP_MAX_BYTES && d.len() > UDP_MAX_BYTES - 4);
        let p = parse(&d).unwrap();
        assert_eq!(p.element(SD_ID_ALERT).unwrap().get("truncated"), Some("evidence message"));
        assert!(ev.message.starts_with(&p.msg) && !p.msg.is_empty());
        // Small events go through unchanged.
        let small = event(Severity::Low, Cause::HeatLoss);
        assert_eq!(
            format_datagram(&small, &cfg(), "h", 1, at()),
            format_rfc5424(&small, &cfg(), "h", 1, at())
        );
    }

    #[test]
    fn configuration_checks() {
        assert_eq!(facility_from_name("local0"), Some(16));
        assert_eq!(facility_from_name("LOCAL7"), Some(23));
        assert_eq!(facility_from_name("daemon"), Some(3));
        assert_eq!(facility_from_name("local8"), None);
        assert!(check_address("logs.example:514").is_ok());
        assert!(check_address("[::1]:6514").is_ok());
        assert!(check_address("::1:514").is_err());
        assert!(check_address("logs.example").is_err());
        assert!(check_address("logs.example:0").is_err());
        assert!(check_address(":514").is_err());
        assert!(SyslogConfig { facility: 24, ..cfg() }.validate().is_err());
        assert!(SyslogConfig { reconnect_min_ms: 10, reconnect_max_ms: 5, ..cfg() }.validate().is_err());
        assert!(SyslogConfig { hostname: Some("a b".into()), ..cfg() }.validate().is_err());
        assert!(cfg().validate().is_ok());
    }

    /// Reads octet-counted frames from one connection; returns the messages.
    fn read_frames(conn: &mut std::net::TcpStream, n: usize) -> Vec<String> {
        let mut out = Vec::new();
        for _ in 0..n {
            let mut len = Vec::new();
            let mut b = [0u8; 1];
            loop {
                conn.read_exact(&mut b).unwrap();
                if b[0] == b' ' {
                    break;
                }
                assert!(b[0].is_ascii_digit(), "frame length digit, got {:?}", b[0] as char);
                len.push(b[0]);
            }
            let len: usize = String::from_utf8(len).unwrap().parse().unwrap();
            let mut msg = vec![0u8; len];
            conn.read_exact(&mut msg).unwrap();
            out.push(String::from_utf8(msg).unwrap());
        }
        out
    }

    fn sequence_of(msg: &str) -> u64 {
        parse(msg).unwrap().element(SD_ID_ALERT).unwrap().get("sequence").unwrap().parse().unwrap()
    }

    /// A collector that hangs up after three frames: the event in flight is sent again on the
    /// next connection, nothing is lost, and order is kept (independent of rsyslogd).
    #[test]
    fn a_connection_closed_by_the_collector_loses_nothing() {
        let listener = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
        let port = listener.local_addr().unwrap().port();
        let (done_tx, done_rx) = std::sync::mpsc::channel::<()>();
        let collector = std::thread::spawn(move || {
            let (mut first, _) = listener.accept().unwrap();
            let mut got = read_frames(&mut first, 3);
            drop(first);
            let (mut second, _) = listener.accept().unwrap();
            while got.iter().map(|m| sequence_of(m)).max() < Some(8) {
                got.extend(read_frames(&mut second, 1));
            }
            // Stay connected until the forwarder has confirmed the last event.
            let _ = done_rx.recv_timeout(Duration::from_secs(10));
            got
        });
        let dir = tempfile::tempdir().unwrap();
        let c = SyslogConfig {
            reconnect_min_ms: 10,
            reconnect_max_ms: 50,
            confirm_ms: 10,
            ..SyslogConfig::new(format!("127.0.0.1:{port}"), Transport::Tcp, dir.path())
        };
        let f = Forwarder::start(c).unwrap();
        for seq in 1..=8 {
            let mut ev = event(Severity::Medium, Cause::HeatLoss);
            ev.sequence = seq;
            f.send(&ev);
        }
        let start = Instant::now();
        while f.stats().queued > 0 && start.elapsed() < Duration::from_secs(10) {
            std::thread::sleep(Duration::from_millis(5));
        }
        let s = f.stats();
        done_tx.send(()).unwrap();
        let got: Vec<u64> = collector.join().unwrap().iter().map(|m| sequence_of(m)).collect();
        let mut unique = got.clone();
        unique.dedup();
        assert_eq!(unique, (1..=8).collect::<Vec<_>>(), "in order, none lost: {got:?}");
        assert!(got.len() <= 9, "at most the one event in flight twice: {got:?}");
        assert_eq!((s.queued, s.dropped, s.reconnects), (0, 0, 1), "{s:?}");
        f.shutdown(Duration::from_secs(1));
    }

    /// The queue survives a restart, keeps order, and drops the oldest beyond its bound.
    #[test]
    fn queue_is_bounded_ordered_and_persistent() {
        let dir = tempfile::tempdir().unwrap();
        // Nothing listens on this port: events only queue.
        let port = std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port();
        let c = SyslogConfig {
            queue_max: 3,
            reconnect_min_ms: 1_000,
            reconnect_max_ms: 1_000,
            ..SyslogConfig::new(format!("127.0.0.1:{port}"), Transport::Tcp, dir.path())
        };
        let f = Forwarder::start(c.clone()).unwrap();
        assert!(matches!(Forwarder::start(c.clone()), Err(ForwardError::Locked { .. })));
        for seq in 1..=5 {
            let mut ev = event(Severity::Low, Cause::HeatLoss);
            ev.sequence = seq;
            f.send(&ev);
        }
        let s = f.stats();
        assert_eq!((s.queued, s.dropped, s.sent, s.connected), (3, 2, 0, false));
        f.shutdown(Duration::from_millis(10));
        let q = DiskQueue::open(dir.path()).unwrap();
        let seqs: Vec<u64> = q
            .ids
            .iter()
            .map(|id| {
                let r: Record = serde_json::from_slice(&fs::read(q.path(*id)).unwrap()).unwrap();
                r.event.sequence
            })
            .collect();
        // The oldest went, except the one the delivery thread may have held in flight when the
        // bound was hit (1, 2 or 3 depending on when the thread first looked).
        assert_eq!(seqs.len(), 3);
        assert_eq!(&seqs[1..], &[4, 5]);
        assert!((1..=3).contains(&seqs[0]), "{seqs:?}");
    }

    /// A RELP collector that accepts but never reads or answers (hung), then resets: nothing is
    /// counted as sent and every event stays queued; once a collector that answers is back, all
    /// are delivered in order. (A fake collector speaking the RELP frames; `forward.rs` checks
    /// against rsyslogd's `imrelp`.)
    #[test]
    fn relp_events_leave_the_queue_only_when_the_collector_acknowledges_them() {
        use std::io::Write as _;
        let listener = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
        let port = listener.local_addr().unwrap().port();
        let (release_tx, release_rx) = std::sync::mpsc::channel::<()>();
        let collector = std::thread::spawn(move || {
            // Hung: hold the connection, read nothing, then reset.
            let (hung, _) = listener.accept().unwrap();
            let _ = release_rx.recv();
            drop(hung);
            // Healthy: answer every transaction.
            let mut got = Vec::new();
            while got.len() < 13 {
                let (mut conn, _) = listener.accept().unwrap();
                conn.set_read_timeout(Some(Duration::from_secs(10))).unwrap();
                let mut buf = Vec::new();
                let mut chunk = [0u8; 4096];
                'session: loop {
                    while let Some((f, used)) = super::relp::parse(&buf).unwrap() {
                        buf.drain(..used);
                        let answer = match f.command.as_str() {
                            "open" => "200 OK\nrelp_version=0\ncommands=syslog".to_string(),
                            "syslog" => {
                                got.push(String::from_utf8(f.data).unwrap());
                                "200 OK".to_string()
                            }
                            _ => break 'session,
                        };
                        conn.write_all(&super::relp::frame(f.txnr, "rsp", answer.as_bytes())).unwrap();
                        if got.len() == 13 {
                            break 'session;
                        }
                    }
                    match conn.read(&mut chunk) {
                        Ok(0) | Err(_) => break,
                        Ok(n) => buf.extend_from_slice(&chunk[..n]),
                    }
                }
            }
            got
        });
        let dir = tempfile::tempdir().unwrap();
        let c = SyslogConfig {
            reconnect_min_ms: 10,
            reconnect_max_ms: 100,
            ack_timeout_ms: 300,
            ..SyslogConfig::new(format!("127.0.0.1:{port}"), Transport::Relp, dir.path())
        };
        let f = Forwarder::start(c).unwrap();
        for seq in 1..=13 {
            let mut ev = event(Severity::Medium, Cause::HeatLoss);
            ev.sequence = seq;
            f.send(&ev);
        }
        std::thread::sleep(Duration::from_millis(1_000));
        let s = f.stats();
        assert_eq!((s.sent, s.queued), (0, 13), "a hung collector acknowledges nothing: {s:?}");
        release_tx.send(()).unwrap();
        let start = Instant::now();
        while f.stats().queued > 0 && start.elapsed() < Duration::from_secs(20) {
            std::thread::sleep(Duration::from_millis(10));
        }
        let s = f.stats();
        let got: Vec<u64> = collector.join().unwrap().iter().map(|m| sequence_of(m)).collect();
        assert_eq!(got, (1..=13).collect::<Vec<_>>(), "in order, none lost, none twice");
        assert_eq!((s.sent, s.queued, s.dropped), (13, 0, 0), "{s:?}");
        f.shutdown(Duration::from_secs(1));
    }
}
