//! Interval assembly in event time: samples of each tag are buffered and, when an interval is
//! complete, aggregated (time-weighted mean for continuous tags, last value for analyzers),
//! with staleness, quality and range marked.
//!
//! Closing rules for the earliest open interval `[start, end)`, with the reorder window
//! `reorder` (rows a little out of order are still used):
//! * every required tag has a sample at or after `end + reorder` (the normal case);
//! * or the newest sample of any tag is at least `max(max_wait, reorder)` past `end` (a tag has
//!   gone quiet: event-time lateness, identical live and in replay);
//! * or the caller says the stream is quiet (no new data for `max_wait` of monotonic wall time
//!   in the live service, or the end of the input in replay): intervals up to the newest sample
//!   are closed.
//!
//! A sample for an interval already closed is *late* (it arrived more than the reorder window
//! out of order): it is counted, never silently used or dropped. Duplicates (same tag and time)
//! are idempotent: the first value wins, and [`Assembler::add`] says so (conflicting or not)
//! for the caller to count and log. Pure and deterministic; the state serializes into the
//! checkpoint.

use serde::{Deserialize, Serialize};

use crate::core::spec::UnitSpec;
use crate::core::vocabulary::TagKind;
use crate::core::vocabulary::{Quality, Sample};

/// Per-tag rules the assembler needs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TagRule {
    /// Aggregation.
    pub kind: TagKind,
    /// Whether closing waits for this tag.
    pub required: bool,
    /// Staleness limit, ms.
    pub stale_after_ms: i64,
    /// Valid range in the tag's unit.
    pub range: Option<(f64, f64)>,
}

impl TagRule {
    /// The rules of every tag of a unit, in tag-table order.
    pub fn of(spec: &UnitSpec) -> Vec<TagRule> {
        spec.tags
            .iter()
            .map(|t| TagRule {
                kind: t.kind,
                required: t.required,
                stale_after_ms: t.stale_after_ms,
                range: t.range,
            })
            .collect()
    }
}

/// What happened to a sample.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Added {
    /// Buffered.
    Accepted,
    /// Its interval was already closed.
    Late,
    /// A sample of the same tag and time is already buffered: the first value is kept.
    Duplicate {
        /// The values differ.
        conflicting: bool,
    },
    /// Far ahead of the data's own time: held until more data confirm the jump (then used),
    /// or until the data carry on at their old time (then counted as implausible).
    Held,
}

/// The least jump ahead of the data's newest time that is held for confirmation, ms: a stray
/// row dated months ahead must not close every interval up to it.
const MIN_JUMP_MS: i64 = 15 * 60_000;
/// Distinct sample times at the new time that confirm a jump (and that make the data's first
/// times trustworthy).
const CONFIRM_TIMES: u32 = 3;

/// Status of a tag in a closed interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TagStatus {
    /// A fresh good (or uncertain) value.
    Ok,
    /// The newest usable value is older than the staleness limit.
    Stale,
    /// No usable value has ever been seen.
    Missing,
    /// Samples arrived but none was usable (bad quality or out of range).
    Bad,
}

impl TagStatus {
    /// The word used in flags and messages.
    pub fn as_str(self) -> &'static str {
        match self {
            TagStatus::Ok => "ok",
            TagStatus::Stale => "stale",
            TagStatus::Missing => "missing",
            TagStatus::Bad => "bad",
        }
    }
}

/// One tag over one interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TagValue {
    /// Aggregate in the tag's unit (also given when stale, for display).
    pub value: Option<f64>,
    /// Status.
    pub status: TagStatus,
    /// Some sample used had uncertain quality.
    pub uncertain: bool,
    /// Samples in the interval.
    pub samples: u32,
    /// Samples rejected as bad quality.
    pub bad: u32,
    /// Samples outside the valid range.
    pub out_of_range: u32,
    /// Age of the newest usable value at the interval end, ms.
    pub age_ms: Option<i64>,
    /// Minimum and maximum of the usable samples in the interval (for flatline checks).
    pub min_max: Option<(f64, f64)>,
}

/// A closed interval.
#[derive(Debug, Clone, PartialEq)]
pub struct Closed {
    /// Start, ms since the epoch.
    pub start_ms: i64,
    /// End, ms since the epoch.
    pub end_ms: i64,
    /// Per tag, in tag-table order.
    pub tags: Vec<TagValue>,
    /// Duplicate samples with a different value (the first was kept).
    pub conflicting_duplicates: u32,
}

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
struct TagBuf {
    /// (time, value, quality) not yet consumed, in arrival order.
    samples: Vec<(i64, f64, Quality)>,
    /// The newest usable sample before the open window (sample-and-hold carry).
    carry: Option<(i64, f64, bool)>,
    /// Newest sample time seen (any quality).
    latest: Option<i64>,
    /// Whether a usable value was ever seen.
    ever_usable: bool,
}

/// The interval assembler of one unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Assembler {
    interval_ms: i64,
    max_wait_ms: i64,
    /// How far data must have passed an interval's end before it closes (set from the unit's
    /// settings at every start, like `max_wait_ms`).
    #[serde(default)]
    reorder_ms: i64,
    #[serde(skip)]
    rules: Vec<TagRule>,
    bufs: Vec<TagBuf>,
    /// Start of the earliest interval not yet closed (None before the first close).
    open_from: Option<i64>,
    /// Newest sample time of any tag.
    max_event: Option<i64>,
    /// Samples far ahead of `max_event`, held until confirmed: (tag, time, value, quality).
    #[serde(default)]
    held: Vec<(usize, i64, f64, Quality)>,
    /// Distinct times accepted since the data started or last jumped (up to CONFIRM_TIMES).
    #[serde(default = "confirmed_times")]
    epoch_times: u32,
    /// Samples found implausible and not used, not yet taken by the caller.
    #[serde(default)]
    implausible: u64,
    /// A long stretch without any data that was skipped (start, end), not yet taken.
    #[serde(default)]
    gap: Option<(i64, i64)>,
}

/// Checkpoints of earlier builds had trusted data.
fn confirmed_times() -> u32 {
    CONFIRM_TIMES
}

fn floor_to(t: i64, step: i64) -> i64 {
    t.div_euclid(step) * step
}

impl Assembler {
    /// A new assembler.
    pub fn new(interval_ms: i64, max_wait_ms: i64, reorder_ms: i64, rules: Vec<TagRule>) -> Assembler {
        let bufs = vec![TagBuf::default(); rules.len()];
        let reorder_ms = reorder_ms.max(0);
        Assembler {
            interval_ms,
            max_wait_ms,
            reorder_ms,
            rules,
            bufs,
            open_from: None,
            max_event: None,
            held: Vec::new(),
            epoch_times: 0,
            implausible: 0,
            gap: None,
        }
    }

    /// How far ahead of the data's newest time a sample is held for confirmation, ms.
    fn jump_ms(&self) -> i64 {
        MIN_JUMP_MS.max(3 * self.max_wait_ms).max(15 * self.interval_ms)
    }

    /// Samples found implausible since the last call (counted, not used).
    pub fn take_implausible(&mut self) -> u64 {
        std::mem::take(&mut self.implausible)
    }

    /// A long stretch without data skipped since the last call: (from, to), ms.
    pub fn take_gap(&mut self) -> Option<(i64, i64)> {
        self.gap.take()
    }

    /// The end of the input (replay): held samples were never confirmed; they are implausible.
    pub fn drop_held(&mut self) {
        self.implausible += self.held.len() as u64;
        self.held.clear();
    }

    /// Restore from a checkpoint with the current rules (tags must match by count; otherwise
    /// the saved buffers are dropped and the assembler starts fresh at the saved position).
    pub fn restore(
        mut saved: Assembler,
        interval_ms: i64,
        max_wait_ms: i64,
        reorder_ms: i64,
        rules: Vec<TagRule>,
    ) -> Assembler {
        if saved.bufs.len() != rules.len() || saved.interval_ms != interval_ms {
            let mut fresh = Assembler::new(interval_ms, max_wait_ms, reorder_ms, rules);
            fresh.open_from = saved.open_from.map(|t| floor_to(t, interval_ms));
            return fresh;
        }
        saved.rules = rules;
        saved.max_wait_ms = max_wait_ms;
        saved.reorder_ms = reorder_ms.max(0);
        saved
    }

    /// Start of the earliest open interval, if any interval was closed yet.
    pub fn open_from(&self) -> Option<i64> {
        self.open_from
    }

    /// Newest sample time accepted (kept in the checkpoint), ms.
    pub fn max_event(&self) -> Option<i64> {
        self.max_event
    }

    /// Whether samples are waiting in an open interval.
    pub fn has_open(&self) -> bool {
        self.bufs.iter().any(|b| !b.samples.is_empty())
    }

    /// Add a sample.
    pub fn add(&mut self, s: &Sample) -> Added {
        if let Some(max) = self.max_event
            && s.t_ms > max + self.jump_ms()
        {
            return self.hold(s);
        }
        if !self.held.is_empty() {
            // The data carry on at their old time: what was held was a stray.
            let first_held = self.held.iter().map(|h| h.1).min().unwrap_or(i64::MAX);
            if s.t_ms >= self.max_event.unwrap_or(s.t_ms) && s.t_ms < first_held {
                self.drop_held();
            }
        }
        self.accept(s)
    }

    /// Hold a sample far ahead; once the held samples span enough distinct times, take the
    /// jump: the data now run at the new time.
    fn hold(&mut self, s: &Sample) -> Added {
        self.held.push((s.tag, s.t_ms, s.value, s.quality));
        let mut times: Vec<i64> = self.held.iter().map(|h| h.1).collect();
        times.sort_unstable();
        times.dedup();
        let spans = times.last().copied().unwrap_or(0) - times.first().copied().unwrap_or(0);
        if (times.len() as u32) < CONFIRM_TIMES || spans < self.interval_ms {
            return Added::Held;
        }
        // Confirmed. Data of an epoch that never had enough times of its own (a first row
        // dated years back) are dropped as implausible rather than closed into intervals.
        if self.epoch_times < CONFIRM_TIMES {
            let n: usize = self.bufs.iter().map(|b| b.samples.len()).sum();
            self.implausible += n as u64;
            for b in &mut self.bufs {
                *b = TagBuf::default();
            }
            self.open_from = None;
        }
        self.max_event = None;
        self.epoch_times = 0;
        for (tag, t_ms, value, quality) in std::mem::take(&mut self.held) {
            self.accept(&Sample { tag, t_ms, value, quality });
        }
        Added::Accepted
    }

    /// Buffer a sample (not late, not a jump).
    fn accept(&mut self, s: &Sample) -> Added {
        if let Some(open) = self.open_from
            && s.t_ms < open
        {
            return Added::Late;
        }
        let Some(buf) = self.bufs.get_mut(s.tag) else { return Added::Late };
        // Duplicates are usually next to each other: search from the newest.
        if let Some(&(_, v, q)) = buf.samples.iter().rev().find(|x| x.0 == s.t_ms) {
            let same = (v == s.value || (v.is_nan() && s.value.is_nan())) && q == s.quality;
            return Added::Duplicate { conflicting: !same };
        }
        buf.samples.push((s.t_ms, s.value, s.quality));
        buf.latest = Some(buf.latest.map_or(s.t_ms, |l| l.max(s.t_ms)));
        if self.max_event.is_none_or(|m| s.t_ms > m) && self.epoch_times < CONFIRM_TIMES {
            self.epoch_times += 1;
        }
        self.max_event = Some(self.max_event.map_or(s.t_ms, |m| m.max(s.t_ms)));
        Added::Accepted
    }

    /// The earliest open interval, if there are samples. A long stretch without any data
    /// (the next sample at least the jump threshold past the open interval) is skipped in one
    /// step, not closed as thousands of empty intervals.
    fn earliest(&self) -> Option<(i64, i64)> {
        let min = || self.bufs.iter().flat_map(|b| b.samples.iter().map(|s| s.0)).min();
        let start = match self.open_from {
            // Only after a jump in the data can a stretch be skipped (the common case stays O(1)).
            Some(t) if self.max_event.is_some_and(|m| m >= t + self.interval_ms + self.jump_ms()) => {
                match min() {
                    Some(m) if m >= t + self.interval_ms + self.jump_ms() => floor_to(m, self.interval_ms),
                    _ => t,
                }
            }
            Some(t) => t,
            None => floor_to(min()?, self.interval_ms),
        };
        Some((start, start + self.interval_ms))
    }

    /// Whether the earliest open interval may close now (cheap; call after each sample).
    pub fn ready(&self, quiet: bool) -> bool {
        let (Some((start, end)), Some(max_event)) = (self.earliest(), self.max_event) else { return false };
        if quiet && start <= max_event {
            return true;
        }
        if max_event >= end + self.max_wait_ms.max(self.reorder_ms) {
            return true;
        }
        let passed = end + self.reorder_ms;
        let mut any_required = false;
        for (rule, buf) in self.rules.iter().zip(&self.bufs) {
            if rule.required {
                any_required = true;
                if buf.latest.is_none_or(|l| l < passed) {
                    return false;
                }
            }
        }
        any_required
    }

    /// Close the earliest interval if it is ready.
    pub fn close_next(&mut self, quiet: bool) -> Option<Closed> {
        if !self.ready(quiet) {
            return None;
        }
        let (start, end) = self.earliest()?;
        if let Some(open) = self.open_from
            && start > open
        {
            // A long stretch without any data, skipped in one step (see `earliest`).
            self.gap = Some((open, start));
            for b in &mut self.bufs {
                b.carry = None;
            }
        }
        let mut conflicting = 0u32;
        let tags = self
            .rules
            .iter()
            .zip(self.bufs.iter_mut())
            .map(|(rule, buf)| aggregate(rule, buf, start, end, &mut conflicting))
            .collect();
        self.open_from = Some(end);
        Some(Closed { start_ms: start, end_ms: end, tags, conflicting_duplicates: conflicting })
    }
}

fn usable(rule: &TagRule, v: f64, q: Quality) -> Result<(), bool> {
    if q == Quality::Bad || !v.is_finite() {
        return Err(false);
    }
    if let Some((lo, hi)) = rule.range
        && (v < lo || v > hi)
    {
        return Err(true);
    }
    Ok(())
}

fn aggregate(rule: &TagRule, buf: &mut TagBuf, start: i64, end: i64, conflicting: &mut u32) -> TagValue {
    // Take this window's samples (and any strays before it, which can only be duplicates of
    // already-consumed times) in time order; the rest stay buffered.
    if !buf.samples.is_sorted_by_key(|s| s.0) {
        buf.samples.sort_by_key(|s| s.0);
    }
    let cut = buf.samples.partition_point(|s| s.0 < end);
    let window: Vec<(i64, f64, Quality)> = buf.samples.drain(..cut).collect();
    let mut samples = 0u32;
    let mut bad = 0u32;
    let mut out_of_range = 0u32;
    let mut uncertain = false;
    let mut min_max: Option<(f64, f64)> = None;
    // Time-weighted integration with sample-and-hold.
    // The value held from before the window (staleness is judged from its age below).
    let mut held: Option<(i64, f64, bool)> = buf.carry;
    let mut acc = 0.0;
    let mut covered = 0i64;
    let mut last_t: Option<i64> = None;
    let mut cursor = start;
    for (t, v, q) in window {
        if last_t == Some(t) {
            // A duplicate: the first value wins.
            if let Some((ht, hv, _)) = held
                && ht == t
                && hv != v
            {
                *conflicting += 1;
            }
            continue;
        }
        last_t = Some(t);
        if t < start {
            continue;
        }
        samples += 1;
        // Close the held segment up to this sample.
        if let Some((_, hv, _)) = held {
            let dt = t - cursor;
            if dt > 0 {
                acc += hv * dt as f64;
                covered += dt;
            }
        }
        cursor = t;
        match usable(rule, v, q) {
            Ok(()) => {
                uncertain |= q == Quality::Uncertain;
                held = Some((t, v, q == Quality::Uncertain));
                buf.ever_usable = true;
                min_max = Some(min_max.map_or((v, v), |(a, b)| (a.min(v), b.max(v))));
            }
            Err(range) => {
                if range {
                    out_of_range += 1;
                } else {
                    bad += 1;
                }
                // An unusable sample ends the held value: the value is unknown from here on.
                held = None;
            }
        }
    }
    if let Some((_, hv, _)) = held {
        let dt = end - cursor;
        if dt > 0 {
            acc += hv * dt as f64;
            covered += dt;
        }
    }
    // The newest sample decides what is held next: a usable value, or nothing after an
    // unusable one (the value is unknown until the next usable sample).
    buf.carry = held;
    let newest_usable = buf.carry.map(|c| c.0);
    let age_ms = newest_usable.map(|t| end - t);
    let value = match rule.kind {
        TagKind::Continuous if covered > 0 => Some(acc / covered as f64),
        TagKind::Continuous => buf.carry.map(|c| c.1),
        TagKind::Analyzer => buf.carry.map(|c| c.1),
    };
    uncertain |= buf.carry.is_some_and(|c| c.2) && rule.kind == TagKind::Analyzer;
    let status = match age_ms {
        Some(age) if age <= rule.stale_after_ms => TagStatus::Ok,
        Some(_) => TagStatus::Stale,
        None if samples > 0 || buf.ever_usable => TagStatus::Bad,
        None => TagStatus::Missing,
    };
    TagValue { value, status, uncertain, samples, bad, out_of_range, age_ms, min_max }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    const MIN: i64 = 60_000;

    fn rule(kind: TagKind, required: bool) -> TagRule {
        TagRule { kind, required, stale_after_ms: 5 * MIN, range: Some((0.0, 1000.0)) }
    }

    fn s(tag: usize, t: i64, v: f64) -> Sample {
        Sample { tag, t_ms: t, value: v, quality: Quality::Good }
    }

    #[test]
    fn time_weighted_mean_with_sample_and_hold() {
        let mut a = Assembler::new(MIN, 5 * MIN, 0, vec![rule(TagKind::Continuous, true)]);
        // 10 for the first 15 s, 20 for the remaining 45 s: mean 17.5.
        a.add(&s(0, 0, 10.0));
        a.add(&s(0, 15_000, 20.0));
        assert!(a.close_next(false).is_none(), "no data past the end yet");
        a.add(&s(0, MIN, 30.0));
        let c = a.close_next(false).unwrap();
        assert_eq!((c.start_ms, c.end_ms), (0, MIN));
        assert!((c.tags[0].value.unwrap() - 17.5).abs() < 1e-12);
        assert_eq!(c.tags[0].status, TagStatus::Ok);
        // Out of order inside the open interval: used. Before it: late.
        a.add(&s(0, MIN + 30_000, 50.0));
        a.add(&s(0, MIN + 10_000, 40.0));
        assert_eq!(a.add(&s(0, 30_000, 1.0)), Added::Late);
        a.add(&s(0, 2 * MIN, 0.0));
        let c = a.close_next(false).unwrap();
        // 30 for 10 s, 40 for 20 s, 50 for 30 s.
        assert!((c.tags[0].value.unwrap() - (300.0 + 800.0 + 1500.0) / 60.0).abs() < 1e-9);
    }

    #[test]
    fn duplicates_are_idempotent_and_conflicts_counted() {
        let mut a = Assembler::new(MIN, 5 * MIN, 0, vec![rule(TagKind::Continuous, true)]);
        assert_eq!(a.add(&s(0, 0, 10.0)), Added::Accepted);
        assert_eq!(a.add(&s(0, 0, 10.0)), Added::Duplicate { conflicting: false });
        assert_eq!(a.add(&s(0, 30_000, 20.0)), Added::Accepted);
        assert_eq!(a.add(&s(0, 30_000, 99.0)), Added::Duplicate { conflicting: true });
        a.add(&s(0, MIN, 1.0));
        let c = a.close_next(false).unwrap();
        assert!((c.tags[0].value.unwrap() - 15.0).abs() < 1e-12, "the first value is kept");
        assert_eq!(c.tags[0].samples, 2);
    }

    #[test]
    fn analyzer_last_value_staleness_and_bad_quality() {
        let rules = vec![rule(TagKind::Continuous, true), rule(TagKind::Analyzer, false)];
        let mut a = Assembler::new(MIN, 5 * MIN, 0, rules);
        a.add(&s(1, 0, 0.3));
        for m in 0..=8 {
            a.add(&s(0, m * MIN, 1.0));
        }
        let mut out = Vec::new();
        while let Some(c) = a.close_next(false) {
            out.push(c);
        }
        assert_eq!(out.len(), 8);
        assert_eq!(out[0].tags[1].value, Some(0.3));
        assert_eq!(out[3].tags[1].status, TagStatus::Ok);
        assert_eq!(out[5].tags[1].status, TagStatus::Stale, "6 min old > 5 min");
        // A bad sample is not used, and a value outside the range counts as out of range.
        let mut b = Assembler::new(MIN, 5 * MIN, 0, vec![rule(TagKind::Continuous, true)]);
        b.add(&Sample { tag: 0, t_ms: 0, value: 5.0, quality: Quality::Bad });
        b.add(&s(0, 20_000, 5000.0));
        b.add(&s(0, MIN, 1.0));
        let c = b.close_next(false).unwrap();
        assert_eq!((c.tags[0].status, c.tags[0].bad, c.tags[0].out_of_range), (TagStatus::Bad, 1, 1));
    }

    #[test]
    fn quiet_tag_and_quiet_stream_close_intervals() {
        let rules = vec![rule(TagKind::Continuous, true), rule(TagKind::Continuous, true)];
        let mut a = Assembler::new(MIN, 3 * MIN, 0, rules);
        // Tag 1 stops after the first minute; tag 0 keeps going.
        a.add(&s(1, 0, 5.0));
        for m in 0..=3 {
            a.add(&s(0, m * MIN, 1.0));
        }
        assert!(a.close_next(false).is_none(), "waits for tag 1 until 3 min past the end");
        a.add(&s(0, 4 * MIN, 1.0));
        let c = a.close_next(false).unwrap();
        assert_eq!(c.end_ms, MIN);
        // End of input: the stream is quiet, intervals up to the newest sample close.
        let mut n = 1;
        while a.close_next(true).is_some() {
            n += 1;
        }
        assert_eq!(n, 5);
    }

    /// A row that arrives out of order by less than the reorder window is used; an interval
    /// closes only once the required tags have passed its end by the window.
    #[test]
    fn rows_out_of_order_within_the_reorder_window_are_used() {
        let mut a = Assembler::new(MIN, 5 * MIN, MIN, vec![rule(TagKind::Continuous, true)]);
        for t in [0, 30_000, MIN, MIN + 30_000] {
            a.add(&s(0, t, 10.0));
        }
        assert!(a.close_next(false).is_none(), "data has not passed the end by the window yet");
        a.add(&s(0, 2 * MIN, 10.0));
        // The row of 00:00:50 comes a minute late, after the row of 00:01:50.
        a.add(&s(0, MIN + 50_000, 10.0));
        assert_eq!(a.add(&s(0, 50_000, 40.0)), Added::Accepted, "within the window: used");
        let c = a.close_next(false).unwrap();
        assert_eq!(c.end_ms, MIN);
        // 10 for 50 s, 40 for 10 s.
        assert!((c.tags[0].value.unwrap() - 15.0).abs() < 1e-12, "{:?}", c.tags[0]);
        assert!(a.close_next(false).is_none());
        assert_eq!(a.add(&s(0, 55_000, 1.0)), Added::Late, "beyond the window: late");
        // A quiet tag still closes after max_wait, and the end of input closes the rest.
        a.add(&s(0, 7 * MIN, 10.0));
        assert_eq!(a.close_next(false).unwrap().end_ms, 2 * MIN);
    }

    #[test]
    fn checkpoint_round_trip() {
        let rules = vec![rule(TagKind::Continuous, true)];
        let mut a = Assembler::new(MIN, 5 * MIN, 0, rules.clone());
        a.add(&s(0, 0, 1.0));
        a.add(&s(0, MIN, 2.0));
        a.close_next(false);
        let json = serde_json::to_string(&a).unwrap();
        let b = Assembler::restore(serde_json::from_str(&json).unwrap(), MIN, 5 * MIN, 0, rules);
        assert_eq!(a, b);
    }

    /// Feed a 10-s stream of one tag from minute `m0` to `m1` (exclusive); close what is ready
    /// after each sample; return the ends of the intervals closed.
    fn stream(a: &mut Assembler, m0: i64, m1: i64, closed: &mut Vec<i64>) {
        for k in (m0 * 6)..(m1 * 6) {
            a.add(&s(0, k * 10_000, 1.0));
            while let Some(c) = a.close_next(false) {
                closed.push(c.end_ms);
            }
        }
    }

    /// One row dated a year ahead in the middle of the stream is held, found a stray when the
    /// data carry on at their own time, counted as implausible, and closes nothing: every
    /// interval of the real data closes once, in order.
    #[test]
    fn a_row_dated_far_ahead_closes_nothing_and_is_counted() {
        let mut a = Assembler::new(MIN, 3 * MIN, MIN, vec![rule(TagKind::Continuous, true)]);
        let mut closed = Vec::new();
        stream(&mut a, 0, 30, &mut closed);
        assert_eq!(a.add(&s(0, 365 * 1_440 * MIN, 7.0)), Added::Held);
        stream(&mut a, 30, 60, &mut closed);
        assert_eq!(a.take_implausible(), 1);
        while let Some(c) = a.close_next(true) {
            closed.push(c.end_ms);
        }
        let want: Vec<i64> = (1..=60).map(|m| m * MIN).collect();
        assert_eq!(closed, want);
        assert_eq!(a.take_gap(), None);
    }

    /// The first row ever dated 26 years back, then the real data: once the real data confirm
    /// their time, the lone old row is implausible; no interval of the old date is closed and
    /// nothing is filled in between.
    #[test]
    fn a_first_row_dated_years_back_is_dropped_when_the_real_data_confirm_their_time() {
        let mut a = Assembler::new(MIN, 3 * MIN, MIN, vec![rule(TagKind::Continuous, true)]);
        let now = 1_796_083_200_000; // 2026-12-01
        a.add(&s(0, 946_684_800_000, 1.0)); // 2000-01-01
        let mut closed = Vec::new();
        for k in 0..(20 * 6) {
            a.add(&s(0, now + k * 10_000, 1.0));
            while let Some(c) = a.close_next(false) {
                closed.push(c.end_ms);
            }
        }
        assert_eq!(a.take_implausible(), 1);
        assert!(closed.iter().all(|e| *e > now), "an interval of 2000 was closed: {closed:?}");
        assert_eq!(closed.first(), Some(&(now + MIN)));
        assert!(closed.len() >= 17, "{}", closed.len());
    }

    /// A real outage of two days: the resumed data are held until they confirm their time,
    /// then used; the silent stretch is skipped in one step (one gap), not closed as 2,880
    /// empty intervals, and nothing is counted implausible.
    #[test]
    fn a_real_outage_is_one_skipped_gap_and_loses_nothing() {
        let mut a = Assembler::new(MIN, 3 * MIN, MIN, vec![rule(TagKind::Continuous, true)]);
        let mut closed = Vec::new();
        stream(&mut a, 0, 10, &mut closed);
        stream(&mut a, 2 * 1_440, 2 * 1_440 + 10, &mut closed);
        while let Some(c) = a.close_next(true) {
            closed.push(c.end_ms);
        }
        assert_eq!(a.take_implausible(), 0);
        let gap = a.take_gap().expect("one skipped gap");
        assert_eq!(gap, (10 * MIN, 2 * 1_440 * MIN));
        let mut want: Vec<i64> = (1..=10).map(|m| m * MIN).collect();
        want.extend((1..=10).map(|m| (2 * 1_440 + m) * MIN));
        assert_eq!(closed, want);
        assert!(!a.has_open());
    }
}
