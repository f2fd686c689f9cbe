//! The alert lifecycle (ISA-18.2 concepts, our own names): conditions seen per interval become
//! alerts that are *raised* after an on-delay, *updated* when their priority changes, and
//! *cleared* after an off-delay. Alert ids are derived from the unit, cause, subject and raise
//! time, so they are the same after a restart that re-processes the same data.
//!
//! Pure and driven by event time; the state serializes into the checkpoint.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::core::vocabulary::{Cause, Condition, Severity};
use crate::hash::fnv1a64;

/// Alert lifecycle settings.
#[derive(Debug, Clone, Copy)]
pub struct AlertConfig {
    /// Intervals before raising a data-quality or model-validity alert.
    pub on_delay: u32,
    /// Intervals before clearing it.
    pub off_delay: u32,
    /// A cleared alert of the same cause and subject is not raised again within this time
    /// unless its magnitude grew by half, ms.
    pub realert_suppress_ms: i64,
    /// More raises than this within `flood_window_ms` are grouped into one alert.
    pub flood_count: u32,
    /// Flood window, ms.
    pub flood_window_ms: i64,
    /// Remind about alerts active longer than this, ms.
    pub reminder_ms: i64,
    /// Longest shelving allowed, ms.
    pub shelve_max_ms: i64,
}

impl AlertConfig {
    /// Delays for a cause: data-quality and model-validity conditions use the configured on-
    /// and off-delays; statistical conditions carry their own hysteresis and use 1.
    fn delays(&self, cause: Cause) -> (u32, u32) {
        match cause {
            Cause::DataQuality | Cause::ModelValidity => (self.on_delay, self.off_delay),
            _ => (1, 1),
        }
    }
}

/// `raised`, `updated` or `cleared`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum EventKind {
    /// A new alert.
    Raised,
    /// An active alert changed (priority, magnitude, reminder).
    Updated,
    /// The alert is over.
    Cleared,
}

impl EventKind {
    /// The name used in the JSON lines, syslog and metrics.
    pub fn as_str(self) -> &'static str {
        match self {
            EventKind::Raised => "raised",
            EventKind::Updated => "updated",
            EventKind::Cleared => "cleared",
        }
    }
}

/// One alert event (a JSON line).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AlertEvent {
    /// Data time of the interval end (RFC 3339, in the unit's time zone).
    pub time: String,
    /// Unit.
    pub unit: String,
    /// Stable id.
    pub alert_id: String,
    /// Event kind.
    pub event: EventKind,
    /// Cause.
    pub cause: Cause,
    /// Priority.
    pub severity: Severity,
    /// One sentence an engineer can act on.
    pub message: String,
    /// What it is about (tag, flag, chart).
    pub subject: String,
    /// Per-unit event sequence number (monotonic; used to avoid repeats after a restart).
    pub sequence: u64,
    /// Supporting figures.
    pub evidence: serde_json::Map<String, serde_json::Value>,
    /// Event time in ms (not serialized; for ordering and deduplication).
    #[serde(skip)]
    pub time_ms: i64,
}

/// A shelf: alerts matching `selector` (an alert id, a cause, or `cause/subject`) are tracked
/// but not announced until `until_ms` (event time).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Shelf {
    /// What is shelved.
    pub selector: String,
    /// Until when, ms.
    pub until_ms: i64,
    /// Why (audit).
    pub reason: String,
    /// Who (audit).
    pub by: String,
}

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
struct Active {
    alert_id: String,
    raised_ms: i64,
    severity: Option<Severity>,
    /// Whether `raised` was emitted (false while shelved or grouped in a flood).
    announced: bool,
    /// Grouped into a flood alert.
    grouped: bool,
    last_reminder_ms: i64,
    magnitude: Option<f64>,
}

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
struct Entry {
    cause: Option<Cause>,
    subject: String,
    present: u32,
    absent: u32,
    active: Option<Active>,
    last: Option<Condition>,
    cleared_ms: Option<i64>,
    cleared_magnitude: Option<f64>,
}

/// The alerts of one unit.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct AlertBook {
    entries: BTreeMap<String, Entry>,
    /// Sequence number of the last event.
    pub sequence: u64,
    /// Times of recent raises (flood detection).
    recent_raises: Vec<i64>,
    /// The active flood alert.
    flood: Option<Flood>,
    /// Shelves in force.
    pub shelves: Vec<Shelf>,
}

/// A group of alerts raised together (ISA-18.2 flood concept).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct Flood {
    id: String,
    raised_ms: i64,
    members: Vec<String>,
    announced: bool,
}

/// Key of a condition: cause and subject.
pub fn key_of(cause: Cause, subject: &str) -> String {
    format!("{}/{subject}", cause.as_str())
}

/// A stable alert id: unit, a short cause code, and a hash of (unit, cause, subject, raise
/// time), e.g. `R-204-dq-3f9a1c07`.
pub fn alert_id(unit: &str, cause: Cause, subject: &str, raised_ms: i64) -> String {
    let short = cause.code();
    let h = fnv1a64(format!("{unit}\u{1f}{}\u{1f}{subject}\u{1f}{raised_ms}", cause.as_str()).as_bytes());
    format!("{unit}-{short}-{:08x}", h as u32)
}

/// An active alert, for reports (and in the record a shift report keeps beside its HTML).
#[derive(Debug, Clone, PartialEq, Serialize, serde::Deserialize)]
pub struct ActiveAlert {
    /// Id.
    pub alert_id: String,
    /// Cause.
    pub cause: Cause,
    /// Subject.
    pub subject: String,
    /// Raised at, ms.
    pub raised_ms: i64,
    /// Severity.
    pub severity: Severity,
    /// Latest message.
    pub message: String,
    /// The evidence of the latest message (none in a report record written before it was kept).
    #[serde(default)]
    pub evidence: serde_json::Map<String, serde_json::Value>,
    /// Whether it is shelved.
    pub shelved: bool,
}

impl AlertBook {
    /// Active alerts.
    pub fn active(&self) -> Vec<ActiveAlert> {
        let mut v: Vec<ActiveAlert> = self
            .entries
            .iter()
            .filter_map(|(k, e)| {
                let a = e.active.as_ref()?;
                let cause = e.cause?;
                Some(ActiveAlert {
                    alert_id: a.alert_id.clone(),
                    cause,
                    subject: e.subject.clone(),
                    raised_ms: a.raised_ms,
                    severity: a.severity.unwrap_or(Severity::Low),
                    message: e.last.as_ref().map(|c| c.message.clone()).unwrap_or_default(),
                    evidence: e.last.as_ref().map(|c| c.evidence.clone()).unwrap_or_default(),
                    shelved: self.shelved(&a.alert_id, cause, k),
                })
            })
            .collect();
        if let Some(f) = &self.flood {
            v.push(ActiveAlert {
                alert_id: f.id.clone(),
                cause: Cause::Undetermined,
                subject: "flood".into(),
                raised_ms: f.raised_ms,
                severity: Severity::Medium,
                message: format!("{} alerts grouped", f.members.len()),
                evidence: serde_json::Map::new(),
                shelved: false,
            });
        }
        v
    }

    fn shelved(&self, id: &str, cause: Cause, key: &str) -> bool {
        self.shelves.iter().any(|s| s.selector == id || s.selector == cause.as_str() || s.selector == key)
    }

    /// Shelve alerts matching a selector. Returns a note for the audit log.
    pub fn shelve(&mut self, shelf: Shelf) -> String {
        let note = format!(
            "shelved `{}` until {} ms by {} ({})",
            shelf.selector, shelf.until_ms, shelf.by, shelf.reason
        );
        self.shelves.retain(|s| s.selector != shelf.selector);
        self.shelves.push(shelf);
        note
    }

    /// Remove a shelf. Returns whether one was removed.
    pub fn unshelve(&mut self, selector: &str) -> bool {
        let n = self.shelves.len();
        self.shelves.retain(|s| s.selector != selector);
        n != self.shelves.len()
    }

    /// Advance one interval: returns the events to emit and audit notes (expired shelves).
    pub fn step(
        &mut self,
        unit: &str,
        end_ms: i64,
        time: &str,
        conditions: &[Condition],
        cfg: AlertConfig,
    ) -> (Vec<AlertEvent>, Vec<String>) {
        let notes = self.expire_shelves(end_ms);
        self.recent_raises.retain(|t| *t > end_ms - cfg.flood_window_ms);
        let mut events = Events { unit, time, end_ms, sequence: self.sequence, list: Vec::new() };
        let seen = self.present(conditions, cfg, &mut events);
        self.announce_unshelved(&seen, &mut events);
        self.count_absent(&seen, cfg, &mut events);
        self.step_flood(&mut events);
        self.sequence = events.sequence;
        (events.list, notes)
    }

    /// Shelves expire in event time; returns the audit notes.
    fn expire_shelves(&mut self, end_ms: i64) -> Vec<String> {
        let expired: Vec<Shelf> = self.shelves.iter().filter(|s| s.until_ms <= end_ms).cloned().collect();
        self.shelves.retain(|s| s.until_ms > end_ms);
        expired
            .into_iter()
            .map(|s| format!("shelf `{}` expired (set by {}: {})", s.selector, s.by, s.reason))
            .collect()
    }

    /// The conditions present in this interval: counted towards the on-delay, raised (alone,
    /// shelved, or grouped into a flood), updated or reminded about. Returns their keys.
    fn present(
        &mut self,
        conditions: &[Condition],
        cfg: AlertConfig,
        events: &mut Events<'_>,
    ) -> Vec<String> {
        let end_ms = events.end_ms;
        let mut seen: Vec<String> = Vec::with_capacity(conditions.len());
        for c in conditions {
            let key = key_of(c.cause, &c.subject);
            if seen.contains(&key) {
                continue;
            }
            seen.push(key.clone());
            let (on_delay, _) = cfg.delays(c.cause);
            let shelved_cause =
                self.shelves.iter().any(|s| s.selector == c.cause.as_str() || s.selector == key);
            let flood_full = self.recent_raises.len() as u32 >= cfg.flood_count;
            let e = self.entries.entry(key.clone()).or_insert_with(|| Entry {
                cause: Some(c.cause),
                subject: c.subject.clone(),
                ..Entry::default()
            });
            e.present = e.present.saturating_add(1);
            e.absent = 0;
            e.last = Some(c.clone());
            match &mut e.active {
                None if e.present >= on_delay => {
                    if suppressed(e, c, end_ms, cfg) {
                        continue;
                    }
                    let id = alert_id(events.unit, c.cause, &c.subject, end_ms);
                    let grouped = flood_full && !shelved_cause;
                    let announced = !shelved_cause && !grouped;
                    e.active = Some(Active {
                        alert_id: id.clone(),
                        raised_ms: end_ms,
                        severity: Some(c.severity),
                        announced,
                        grouped,
                        last_reminder_ms: end_ms,
                        magnitude: c.magnitude,
                    });
                    if announced {
                        events.push(&id, EventKind::Raised, c);
                        self.recent_raises.push(end_ms);
                    }
                    if grouped {
                        join_flood(&mut self.flood, &key, events.unit, end_ms);
                    }
                }
                Some(a) => update(a, c, cfg, events),
                None => {}
            }
        }
        seen
    }

    /// Announce alerts whose shelf has gone while they are still active.
    fn announce_unshelved(&mut self, seen: &[String], events: &mut Events<'_>) {
        let shelves = self.shelves.clone();
        for (key, e) in self.entries.iter_mut() {
            let (Some(a), Some(cause), Some(c)) = (e.active.as_mut(), e.cause, e.last.as_ref()) else {
                continue;
            };
            let shelved = shelves
                .iter()
                .any(|s| s.selector == a.alert_id || s.selector == cause.as_str() || s.selector == *key);
            if !a.announced && !a.grouped && !shelved && seen.contains(key) {
                a.announced = true;
                events.push(&a.alert_id.clone(), EventKind::Raised, c);
            }
        }
    }

    /// Absent conditions count towards clearing; entries cleared long enough ago are
    /// forgotten.
    fn count_absent(&mut self, seen: &[String], cfg: AlertConfig, events: &mut Events<'_>) {
        let end_ms = events.end_ms;
        let mut finished = Vec::new();
        for (key, e) in self.entries.iter_mut() {
            if seen.contains(key) {
                continue;
            }
            let Some(cause) = e.cause else { continue };
            let (_, off_delay) = cfg.delays(cause);
            e.present = 0;
            e.absent = e.absent.saturating_add(1);
            if e.active.is_some()
                && e.absent >= off_delay
                && let Some(a) = e.active.take()
            {
                e.cleared_ms = Some(end_ms);
                e.cleared_magnitude = a.magnitude;
                if a.announced {
                    let c = cleared(e, cause, &a, end_ms);
                    events.push(&a.alert_id, EventKind::Cleared, &c);
                }
            }
            if e.active.is_none()
                && e.absent >= off_delay
                && e.cleared_ms.is_none_or(|t| end_ms - t >= cfg.realert_suppress_ms)
            {
                finished.push(key.clone());
            }
        }
        for k in finished {
            self.entries.remove(&k);
        }
    }

    /// The flood alert: raised when it forms, cleared when no member is active.
    fn step_flood(&mut self, events: &mut Events<'_>) {
        let unit = events.unit;
        if let Some(mut f) = self.flood.take() {
            let live = f.members.iter().any(|k| self.entries.get(k).is_some_and(|e| e.active.is_some()));
            if !f.announced && live {
                let c = flood_condition(unit, &f.members, &self.entries);
                events.push(&f.id, EventKind::Raised, &c);
                f.announced = true;
            }
            if live {
                self.flood = Some(f);
            } else if f.announced {
                let mut c = flood_condition(unit, &f.members, &self.entries);
                c.message =
                    format!("Cleared: the {} grouped alerts on {unit} are back to normal.", f.members.len());
                events.push(&f.id, EventKind::Cleared, &c);
            }
        }
    }
}

/// The events of one step, numbered in order from the book's last sequence number.
struct Events<'a> {
    unit: &'a str,
    time: &'a str,
    end_ms: i64,
    /// Sequence number of the last event.
    sequence: u64,
    list: Vec<AlertEvent>,
}

impl Events<'_> {
    fn push(&mut self, id: &str, kind: EventKind, c: &Condition) {
        self.sequence += 1;
        self.list.push(event(self.unit, id, kind, c, self.time, self.end_ms, self.sequence));
    }
}

/// Re-raise suppression: recently cleared and not grown by half.
fn suppressed(e: &Entry, c: &Condition, end_ms: i64, cfg: AlertConfig) -> bool {
    e.cleared_ms.is_some_and(|t| end_ms - t < cfg.realert_suppress_ms)
        && match (c.magnitude, e.cleared_magnitude) {
            (Some(m), Some(prev)) => m <= 1.5 * prev,
            _ => true,
        }
}

/// A raised alert grouped into the flood alert (which forms with its first member).
fn join_flood(flood: &mut Option<Flood>, key: &str, unit: &str, end_ms: i64) {
    match flood {
        Some(f) => f.members.push(key.to_string()),
        None => {
            let id = alert_id(unit, Cause::Undetermined, "flood", end_ms);
            *flood = Some(Flood { id, raised_ms: end_ms, members: vec![key.to_string()], announced: false });
        }
    }
}

/// An active alert seen again: updated when its priority changed or its magnitude grew by
/// half, reminded about when it has been active for `reminder_ms` since the last word.
fn update(a: &mut Active, c: &Condition, cfg: AlertConfig, events: &mut Events<'_>) {
    let end_ms = events.end_ms;
    let grew = match (c.magnitude, a.magnitude) {
        (Some(m), Some(prev)) => m >= 1.5 * prev && m - prev > 0.0,
        _ => false,
    };
    if a.announced && (a.severity != Some(c.severity) || grew) {
        a.severity = Some(c.severity);
        a.magnitude = c.magnitude;
        a.last_reminder_ms = end_ms;
        let id = a.alert_id.clone();
        events.push(&id, EventKind::Updated, c);
    } else if a.announced && end_ms - a.last_reminder_ms >= cfg.reminder_ms {
        a.last_reminder_ms = end_ms;
        let id = a.alert_id.clone();
        let hours = (end_ms - a.raised_ms) as f64 / 3_600_000.0;
        let mut r = c.clone();
        r.message = format!("Reminder: active for {hours:.0} h. {}", c.message);
        r.evidence.insert("reminder".into(), true.into());
        r.evidence.insert("active_h".into(), hours.round().into());
        events.push(&id, EventKind::Updated, &r);
    }
}

/// The condition of a `cleared` event: the last one seen, with a message saying so.
fn cleared(e: &Entry, cause: Cause, a: &Active, end_ms: i64) -> Condition {
    let mut c = e.last.clone().unwrap_or_else(|| Condition {
        cause,
        subject: e.subject.clone(),
        severity: a.severity.unwrap_or(Severity::Low),
        message: String::new(),
        evidence: serde_json::Map::new(),
        magnitude: None,
    });
    c.message = format!("Cleared: {} is back to normal.", describe(cause, &e.subject));
    c.evidence.insert("active_min".into(), ((end_ms - a.raised_ms) as f64 / 60_000.0).round().into());
    c
}

fn flood_condition(unit: &str, members: &[String], entries: &BTreeMap<String, Entry>) -> Condition {
    let causes: Vec<Cause> = members.iter().filter_map(|k| entries.get(k).and_then(|e| e.cause)).collect();
    let cause = if !causes.is_empty() && causes.iter().all(|c| *c == Cause::DataQuality) {
        Cause::DataQuality
    } else {
        Cause::Undetermined
    };
    let first = members.first().cloned().unwrap_or_default();
    Condition {
        cause,
        subject: "flood".into(),
        severity: Severity::Medium,
        message: format!(
            "{} alerts on {unit} within a few minutes (first: {first}): a common cause such as an export outage or a plant upset is likely; the members are listed in the evidence and announced only through this alert.",
            members.len()
        ),
        evidence: [("members".to_string(), serde_json::Value::from(members.to_vec()))].into_iter().collect(),
        magnitude: None,
    }
}

fn describe(cause: Cause, subject: &str) -> String {
    match cause {
        Cause::DataQuality => format!("the data of {subject}"),
        Cause::ModelValidity => format!("model validity ({subject})"),
        other => format!("{} ({subject})", other.as_str().replace('_', " ")),
    }
}

fn event(
    unit: &str,
    id: &str,
    kind: EventKind,
    c: &Condition,
    time: &str,
    end_ms: i64,
    seq: u64,
) -> AlertEvent {
    AlertEvent {
        time: time.to_string(),
        unit: unit.to_string(),
        alert_id: id.to_string(),
        event: kind,
        cause: c.cause,
        severity: c.severity,
        message: c.message.clone(),
        subject: c.subject.clone(),
        sequence: seq,
        evidence: c.evidence.clone(),
        time_ms: end_ms,
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    const LC: AlertConfig = AlertConfig {
        on_delay: 2,
        off_delay: 3,
        realert_suppress_ms: 12 * 3_600_000,
        flood_count: 10,
        flood_window_ms: 600_000,
        reminder_ms: 86_400_000,
        shelve_max_ms: 7 * 86_400_000,
    };

    fn cond(subject: &str, severity: Severity) -> Condition {
        Condition {
            cause: Cause::DataQuality,
            subject: subject.into(),
            severity,
            message: format!("{subject} is stale"),
            evidence: serde_json::Map::new(),
            magnitude: None,
        }
    }

    #[test]
    fn on_and_off_delays_and_stable_ids() {
        let cfg = AlertConfig { on_delay: 2, off_delay: 3, ..LC };
        let mut book = AlertBook::default();
        let c = [cond("TI-1", Severity::Medium)];
        assert!(book.step("R-1", 60_000, "t1", &c, cfg).0.is_empty());
        let ev = book.step("R-1", 120_000, "t2", &c, cfg).0;
        assert_eq!(ev.len(), 1);
        assert_eq!(ev[0].event, EventKind::Raised);
        let id = ev[0].alert_id.clone();
        assert_eq!(id, alert_id("R-1", Cause::DataQuality, "TI-1", 120_000));
        // Priority change: updated.
        let ev = book.step("R-1", 180_000, "t3", &[cond("TI-1", Severity::High)], cfg).0;
        assert_eq!((ev[0].event, ev[0].alert_id.as_str()), (EventKind::Updated, id.as_str()));
        // Absent for 2 intervals: still active; the third clears.
        assert!(book.step("R-1", 240_000, "t4", &[], cfg).0.is_empty());
        assert!(book.step("R-1", 300_000, "t5", &[], cfg).0.is_empty());
        let ev = book.step("R-1", 360_000, "t6", &[], cfg).0;
        assert_eq!((ev[0].event, ev[0].sequence), (EventKind::Cleared, 3));
        assert!(book.active().is_empty());
        // Re-raise suppression: the same condition soon after the clear stays silent...
        assert!(book.step("R-1", 420_000, "t7", &c, cfg).0.is_empty());
        assert!(book.step("R-1", 480_000, "t8", &c, cfg).0.is_empty());
        // ...but raises again once the suppression window has passed (it is still present).
        let later = 360_000 + 12 * 3_600_000;
        assert_eq!(book.step("R-1", later, "t9", &c, cfg).0[0].event, EventKind::Raised);
    }

    #[test]
    fn the_same_data_gives_the_same_events_after_a_restart() {
        let cfg = AlertConfig { on_delay: 1, off_delay: 1, ..LC };
        let mut a = AlertBook::default();
        a.step("R-1", 60_000, "t1", &[cond("X", Severity::Low)], cfg);
        let saved = serde_json::to_string(&a).unwrap();
        let ev_a = a.step("R-1", 120_000, "t2", &[], cfg).0;
        let mut b: AlertBook = serde_json::from_str(&saved).unwrap();
        let ev_b = b.step("R-1", 120_000, "t2", &[], cfg).0;
        assert_eq!(ev_a, ev_b);
    }

    #[test]
    fn floods_are_grouped_reminders_sent_and_shelves_respected() {
        let cfg = AlertConfig { on_delay: 1, off_delay: 1, flood_count: 3, ..LC };
        let mut book = AlertBook::default();
        let conds: Vec<Condition> = (0..6).map(|i| cond(&format!("T-{i}"), Severity::Medium)).collect();
        let ev = book.step("R-1", 60_000, "t", &conds, cfg).0;
        let raised: Vec<&str> =
            ev.iter().filter(|e| e.event == EventKind::Raised).map(|e| e.subject.as_str()).collect();
        assert_eq!(raised, vec!["T-0", "T-1", "T-2", "flood"], "three alone, the rest grouped");
        let flood = ev.iter().find(|e| e.subject == "flood").unwrap();
        assert_eq!(flood.evidence["members"].as_array().unwrap().len(), 3);
        // All clear: the three single alerts and the flood alert clear.
        let ev = book.step("R-1", 120_000, "t", &[], cfg).0;
        assert_eq!(ev.iter().filter(|e| e.event == EventKind::Cleared).count(), 4);

        // Reminder after 24 h.
        let mut book = AlertBook::default();
        let c = [cond("X", Severity::Low)];
        book.step("R-1", 0, "t", &c, cfg);
        let ev = book.step("R-1", 86_400_000, "t", &c, cfg).0;
        assert_eq!(ev[0].event, EventKind::Updated);
        assert_eq!(ev[0].evidence["reminder"], true);

        // Shelving: tracked silently, announced when the shelf expires while still active.
        let mut book = AlertBook::default();
        book.shelve(Shelf {
            selector: "data_quality".into(),
            until_ms: 180_000,
            reason: "transmitter replacement".into(),
            by: "test".into(),
        });
        assert!(book.step("R-1", 60_000, "t", &c, cfg).0.is_empty());
        assert!(book.step("R-1", 120_000, "t", &c, cfg).0.is_empty());
        let (ev, notes) = book.step("R-1", 180_000, "t", &c, cfg);
        assert_eq!(ev[0].event, EventKind::Raised);
        assert!(notes[0].contains("expired"), "{notes:?}");
    }
}
