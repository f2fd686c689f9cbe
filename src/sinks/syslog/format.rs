//! RFC 5424 messages: severities, the header fields, structured data (names cut to the
//! SD-NAME rules, values escaped), the UDP datagram cut, and octet-counting framing.

use std::collections::HashSet;
use std::fs;

use super::SyslogConfig;
use crate::core::alerts::{AlertEvent, EventKind};
use crate::core::vocabulary::{Cause, Severity};

/// SD-ID of the alert element. `32473` is the enterprise number RFC 5612 reserves for
/// documentation; it keeps our names out of the IANA-registered space without claiming a number.
pub const SD_ID_ALERT: &str = "alert@32473";
/// SD-ID of the evidence element (kept apart from the alert element so evidence names can
/// never collide with the fixed parameters).
pub const SD_ID_EVIDENCE: &str = "evidence@32473";
/// Largest UDP datagram sent. RFC 5426 §3.2: receivers SHOULD accept 2048 octets (IPv4 ones
/// MUST accept 480). Larger datagrams are often dropped or fragmented on the way.
pub const UDP_MAX_BYTES: usize = 2048;
/// Syslog severity for a service or solver failure. Alert events never use it; it is here so
/// the service's own failure records use the same table.
pub const SEVERITY_SERVICE_FAILURE: u8 = 3;

/// UTF-8 byte order mark (RFC 5424 §6.4).
const BOM: &str = "\u{feff}";
/// Header field lengths (RFC 5424 §6).
pub(super) const HOSTNAME_MAX: usize = 255;
pub(super) const APP_NAME_MAX: usize = 48;
/// SD-NAME length (RFC 5424 §6.3.3).
const SD_NAME_MAX: usize = 32;

/// The syslog severity of an event (the table in the [module docs](super): high 4, medium 5,
/// low 6, data quality 5).
pub fn syslog_severity(ev: &AlertEvent) -> u8 {
    if ev.cause == Cause::DataQuality {
        return 5;
    }
    match ev.severity {
        Severity::High => 4,
        Severity::Medium => 5,
        Severity::Low => 6,
    }
}

/// MSGID of an event: its kind in upper case.
fn msgid(kind: EventKind) -> &'static str {
    match kind {
        EventKind::Raised => "RAISED",
        EventKind::Updated => "UPDATED",
        EventKind::Cleared => "CLEARED",
    }
}

/// An evidence name cut to the SD-NAME rules (printable US-ASCII except `=`, space, `]`, `"`;
/// 1 to 32 characters), so any evidence key can travel as a parameter name.
pub fn sd_name(raw: &str) -> String {
    let name: String = raw
        .chars()
        .map(|c| if c.is_ascii_graphic() && !matches!(c, '=' | ']' | '"') { c } else { '_' })
        .take(SD_NAME_MAX)
        .collect();
    if name.is_empty() { "_".to_string() } else { name }
}

/// A parameter value with `\`, `"` and `]` escaped (RFC 5424 §6.3.3).
pub fn sd_escape(value: &str) -> String {
    let mut out = String::with_capacity(value.len());
    for c in value.chars() {
        if matches!(c, '\\' | '"' | ']') {
            out.push('\\');
        }
        out.push(c);
    }
    out
}

/// A header field: printable US-ASCII only (others become `_`), at most `max` characters,
/// `-` (the NILVALUE) when empty.
fn header_field(text: &str, max: usize) -> String {
    let t: String = text.chars().map(|c| if c.is_ascii_graphic() { c } else { '_' }).take(max).collect();
    if t.is_empty() { "-".to_string() } else { t }
}

fn evidence_text(v: &serde_json::Value) -> String {
    match v {
        serde_json::Value::String(s) => s.clone(),
        serde_json::Value::Null => String::new(),
        other => other.to_string(),
    }
}

fn push_param(out: &mut String, name: &str, value: &str) {
    out.push(' ');
    out.push_str(name);
    out.push_str("=\"");
    out.push_str(&sd_escape(value));
    out.push('"');
}

/// Everything before the BOM: header, structured data and the separating space.
fn prefix(
    ev: &AlertEvent,
    cfg: &SyslogConfig,
    hostname: &str,
    procid: u32,
    emit_time: jiff::Timestamp,
    evidence: bool,
    truncated: Option<&str>,
) -> String {
    let pri = u16::from(cfg.facility.min(23)) * 8 + u16::from(syslog_severity(ev));
    let ts = jiff::fmt::temporal::DateTimePrinter::new().precision(Some(6)).timestamp_to_string(&emit_time);
    let mut out = format!(
        "<{pri}>1 {ts} {} {} {procid} {} [{SD_ID_ALERT}",
        header_field(hostname, HOSTNAME_MAX),
        header_field(&cfg.app_name, APP_NAME_MAX),
        msgid(ev.event),
    );
    let event = ev.event.as_str();
    for (name, value) in [
        ("unit", ev.unit.as_str()),
        ("alert_id", ev.alert_id.as_str()),
        ("event", event),
        ("cause", ev.cause.as_str()),
        ("severity", ev.severity.as_str()),
        ("subject", ev.subject.as_str()),
        ("sequence", ev.sequence.to_string().as_str()),
        ("data_time", ev.time.as_str()),
    ] {
        push_param(&mut out, name, value);
    }
    if let Some(t) = truncated {
        push_param(&mut out, "truncated", t);
    }
    out.push(']');
    if evidence && !ev.evidence.is_empty() {
        out.push('[');
        out.push_str(SD_ID_EVIDENCE);
        let mut used = HashSet::new();
        for (k, v) in &ev.evidence {
            let base = sd_name(k);
            let mut name = base.clone();
            let mut n = 2;
            while !used.insert(name.clone()) {
                let suffix = format!("~{n}");
                let keep: String = base.chars().take(SD_NAME_MAX - suffix.len()).collect();
                name = format!("{keep}{suffix}");
                n += 1;
            }
            push_param(&mut out, &name, &evidence_text(v));
        }
        out.push(']');
    }
    out.push_str("[origin software=\"efftemp\" swVersion=\"");
    out.push_str(&sd_escape(env!("CARGO_PKG_VERSION")));
    out.push_str("\"] ");
    out
}

/// One RFC 5424 message for an event (without transport framing); see the [module docs](super)
/// for the fields. `emit_time` is the TIMESTAMP (UTC, microseconds); the event's own data time
/// travels as `data_time`.
pub fn format_rfc5424(
    ev: &AlertEvent,
    cfg: &SyslogConfig,
    hostname: &str,
    procid: u32,
    emit_time: jiff::Timestamp,
) -> String {
    let mut out = prefix(ev, cfg, hostname, procid, emit_time, true, None);
    out.push_str(BOM);
    out.push_str(&ev.message);
    out
}

/// The message as one UDP datagram of at most [`UDP_MAX_BYTES`]: the evidence element goes
/// first, then the end of the text (cut at a character boundary); the alert element says what
/// was cut in `truncated`.
pub fn format_datagram(
    ev: &AlertEvent,
    cfg: &SyslogConfig,
    hostname: &str,
    procid: u32,
    emit_time: jiff::Timestamp,
) -> String {
    let full = format_rfc5424(ev, cfg, hostname, procid, emit_time);
    if full.len() <= UDP_MAX_BYTES {
        return full;
    }
    let mut out = prefix(ev, cfg, hostname, procid, emit_time, false, Some("evidence"));
    if out.len() + BOM.len() + ev.message.len() <= UDP_MAX_BYTES {
        out.push_str(BOM);
        out.push_str(&ev.message);
        return out;
    }
    let mut out = prefix(ev, cfg, hostname, procid, emit_time, false, Some("evidence message"));
    out.push_str(BOM);
    out.push_str(&ev.message);
    cut_at_char_boundary(&mut out, UDP_MAX_BYTES);
    out
}

fn cut_at_char_boundary(s: &mut String, max: usize) {
    if s.len() <= max {
        return;
    }
    let mut end = max;
    while !s.is_char_boundary(end) {
        end -= 1;
    }
    s.truncate(end);
}

/// Octet-counting framing (RFC 6587 §3.4.1): `MSG-LEN SP SYSLOG-MSG`, the length in octets.
/// Unlike newline framing it survives line breaks inside the message.
pub fn frame_octet_counted(msg: &str) -> Vec<u8> {
    let mut out = format!("{} ", msg.len()).into_bytes();
    out.extend_from_slice(msg.as_bytes());
    out
}

/// The machine's host name, for the HOSTNAME field when none is configured. Read from the
/// kernel (no `unsafe` call), falling back to `/etc/hostname`, `$HOSTNAME`, then `-`.
pub fn local_hostname() -> String {
    for path in ["/proc/sys/kernel/hostname", "/etc/hostname"] {
        if let Ok(text) = fs::read_to_string(path) {
            let t = text.trim();
            if !t.is_empty() {
                return t.to_string();
            }
        }
    }
    std::env::var("HOSTNAME").ok().filter(|h| !h.trim().is_empty()).unwrap_or_else(|| "-".to_string())
}
