//! Instrument checks, every interval with data: spikes of the thermometer (Hampel filter on
//! the residual), stuck transmitters (a tag frozen at one value although it used to show its
//! noise, or although the process moved), and steps (the residual moves at one moment and
//! stays: if the prediction did not move the thermometer moved on its own, if the measurement
//! did not move an input meter stepped that the plant did not follow).

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

use super::active::{Held, ev, round};
use super::baseline::Baseline;
use super::settings::MonitorConfig;
use super::stats;
use crate::core::flags::Flag;
use crate::core::spec::UnitSpec;
use crate::core::vocabulary::{Cause, Severity, TagKind};

/// What the instrument checks see of one interval.
#[derive(Debug, Clone, Copy)]
pub(super) struct Reading<'a> {
    /// Interval end, ms.
    pub(super) end_ms: i64,
    /// Steady-state prediction (before the dynamic compensation), K.
    pub(super) pred: f64,
    /// Measured effluent temperature, K.
    pub(super) meas: f64,
    /// Residual against the compensated prediction, K.
    pub(super) r: f64,
    /// Every tag's value, SI.
    pub(super) tags: &'a [Option<f64>],
}

/// The recent windows of the spike and flatline checks, and the recent spikes.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub(super) struct Instruments {
    recent_resid: VecDeque<f64>,
    recent_pred: VecDeque<f64>,
    recent_meas: VecDeque<f64>,
    recent_tags: VecDeque<Vec<Option<f64>>>,
    spikes: VecDeque<i64>,
}

/// Residual interval σ the checks use without a baseline, K.
const SIGMA_WITHOUT_BASELINE: f64 = 0.5 / 3.0;

impl Instruments {
    /// Forget the spike and flatline windows (after a pause or a gap); recent spikes stay.
    pub(super) fn forget_windows(&mut self) {
        self.recent_resid.clear();
        self.recent_pred.clear();
        self.recent_meas.clear();
        self.recent_tags.clear();
    }

    /// Spikes and flatlines: flags a spike in `flags`, raises and clears in `active`.
    pub(super) fn check(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        baseline: Option<&Baseline>,
        x: &Reading<'_>,
        active: &mut Held,
        flags: &mut Vec<Flag>,
    ) {
        let w = cfg.flatline_intervals.max(5);
        push_bounded(&mut self.recent_pred, x.pred, w);
        push_bounded(&mut self.recent_meas, x.meas, w);
        push_bounded_row(&mut self.recent_tags, x.tags, w, |row, tags| {
            row.clear();
            row.extend_from_slice(tags);
        });
        push_bounded(&mut self.recent_resid, x.r, 7);
        let sigma_i = baseline.map_or(SIGMA_WITHOUT_BASELINE, |b| b.sigma_interval.max(1e-3));
        if self.is_spike(sigma_i) && baseline.is_some() {
            flags.push(Flag::Spike(unit.effluent_temperature));
            self.spikes.push_back(x.end_ms);
        }
        self.raise_spikes(unit, x.end_ms, active);
        // Flatline: a continuous tag frozen at one value while the process moves.
        if self.recent_tags.len() < w {
            return;
        }
        let range = |v: &VecDeque<f64>| {
            let (lo, hi) = v.iter().fold((f64::MAX, f64::MIN), |(a, b), x| (a.min(*x), b.max(*x)));
            hi - lo
        };
        let pred_moved = range(&self.recent_pred) > (3.0 * sigma_i).max(0.3);
        let meas_moved = range(&self.recent_meas) > (3.0 * sigma_i).max(0.3);
        for (i, tag) in unit.tags.iter().enumerate() {
            if tag.kind != TagKind::Continuous || !tag.required {
                continue;
            }
            let process_moved = if i == unit.effluent_temperature { pred_moved } else { meas_moved };
            self.flatline(unit, baseline, i, w, process_moved, x.end_ms, active);
        }
    }

    /// Spike (Hampel filter, window 7, t = 3; Pearson 2002). The centre of the window is
    /// judged (a step is not a spike: after it the window's median follows).
    fn is_spike(&self, sigma_i: f64) -> bool {
        if self.recent_resid.len() != 7 {
            return false;
        }
        let mut v = [0.0; 7];
        for (d, s) in v.iter_mut().zip(&self.recent_resid) {
            *d = *s;
        }
        let centre = v[3];
        v.sort_unstable_by(f64::total_cmp);
        let med = v[3];
        let mut dev = v.map(|x| (x - med).abs());
        dev.sort_unstable_by(f64::total_cmp);
        let mad = (1.4826 * dev[3]).max(sigma_i);
        (centre - med).abs() > 3.0 * mad
    }

    /// Forget spikes older than an hour; three or more in the hour raise a thermometer fault.
    fn raise_spikes(&mut self, unit: &UnitSpec, now: i64, active: &mut Held) {
        while self.spikes.front().is_some_and(|t| *t < now - 3_600_000) {
            self.spikes.pop_front();
        }
        if self.spikes.len() >= 3 {
            let tag = &unit.tags[unit.effluent_temperature];
            active.raise(
                Cause::InstrumentFault,
                &tag.name,
                Severity::Low,
                format!(
                    "{} ({}) shows {} spikes in the last hour that the inputs do not explain: check the sensor wiring and transmitter.",
                    tag.name,
                    tag.role,
                    self.spikes.len()
                ),
                self.spikes.len() as f64,
                now,
                ev(&[("spikes_last_hour", self.spikes.len().into())]),
            );
        }
    }

    /// Tag `i` over the last `w` intervals: raised as stuck when frozen although it moves
    /// (its noise, or the process), cleared as soon as it moves again.
    #[allow(clippy::too_many_arguments)]
    fn flatline(
        &self,
        unit: &UnitSpec,
        baseline: Option<&Baseline>,
        i: usize,
        w: usize,
        process_moved: bool,
        now: i64,
        active: &mut Held,
    ) {
        let tag = &unit.tags[i];
        let stuck_held = |active: &Held| {
            active.iter().any(|a| {
                a.cause == Cause::InstrumentFault
                    && a.subject.strip_suffix(":stuck").is_some_and(|s| s == tag.name)
            })
        };
        // Cheapest first (this runs for every tag and interval): the two newest values already
        // differ by more than a flat window can span (its width is at most 1e-9 of its largest
        // magnitude, or of 1, which is at most 1.000000002 times the newest one's), so the
        // window is not flat, and with no stuck alert to clear there is nothing to do.
        let mut newest = self.recent_tags.iter().rev().filter_map(|t| t.get(i).copied().flatten());
        if let (Some(a), Some(b)) = (newest.next(), newest.next())
            && (a - b).abs() > 2e-9 * a.abs().max(1.0)
            && !stuck_held(active)
        {
            return;
        }
        let (n, lo, hi) = self
            .recent_tags
            .iter()
            .filter_map(|t| t.get(i).copied().flatten())
            .fold((0usize, f64::MAX, f64::MIN), |(n, a, b), x| (n + 1, a.min(x), b.max(x)));
        if n < w {
            return;
        }
        let flat = hi - lo <= 1e-9 * hi.abs().max(1.0);
        // A live transmitter shows its noise: zero variation over the window where the
        // baseline saw noise is already improbable (s < 0.3 σ_ref over 30 samples has
        // P ≈ 4×10⁻¹¹ for white noise). Without a noise reference, require the process to
        // have moved.
        let noisy = baseline
            .and_then(|b| b.tag_noise.get(i).copied().flatten())
            .is_some_and(|n| n > 1e-9 * hi.abs().max(1.0));
        let moved = noisy || process_moved;
        if !flat && !stuck_held(active) {
            return;
        }
        let subject = format!("{}:stuck", tag.name);
        if flat && moved {
            let minutes = (w as i64 * unit.interval_ms) as f64 / 60_000.0;
            active.raise(
                Cause::InstrumentFault,
                &subject,
                Severity::Medium,
                format!(
                    "{} ({}) has not changed for {minutes:.0} min although the process moved: the transmitter looks stuck; check it before trusting the related soft tags.",
                    tag.name, tag.role
                ),
                minutes,
                now,
                ev(&[("tag", tag.name.clone().into()), ("flat_minutes", round(minutes, 0)), ("value", round(hi, 4))]),
            );
        } else if !flat {
            // The stuck condition clears as soon as the tag moves again.
            active.retain(|a| !(a.cause == Cause::InstrumentFault && a.subject == subject));
        }
    }
}

/// One interval of the step test: end, residual, prediction, measurement, tag values.
type StepRow = (i64, f64, f64, f64, Vec<Option<f64>>);

/// The last 30 intervals of the step test (serialized as a plain list).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub(super) struct StepWindow(VecDeque<StepRow>);

/// A meter step waits this long (or twice the configured dead time plus lag, if longer) for
/// the plant to answer before it is blamed on the meter, ms. Common practice for liquid-filled
/// heaters and reactors: most answer a duty or flow move within half an hour; 45 min leaves room
/// for a slow one (measured on the plant zoo: fewer meter alerts on operator moves, bias steps still
/// raised within the hour).
const METER_WAIT_MS: i64 = 45 * 60_000;

/// An input meter's step waiting for the plant's answer: if the residual still stands when it
/// is due, the plant did not follow and the meter is blamed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(super) struct PendingMeter {
    tag: usize,
    why: String,
    step: Step,
    step_ms: i64,
    due_ms: i64,
}

impl PendingMeter {
    /// The residual of the last 10 intervals is still at least two thirds of the step away
    /// from where it was before.
    fn still_standing(&self, window: &VecDeque<StepRow>) -> bool {
        let n = window.len().min(10);
        if n < 5 {
            return false;
        }
        let recent: Vec<f64> = window.iter().skip(window.len() - n).map(|x| x.1).collect();
        let before = self.step.after - self.step.size;
        let moved = stats::median(&recent) - before;
        moved.signum() == self.step.size.signum() && moved.abs() >= 2.0 / 3.0 * self.step.size.abs()
    }
}

/// A step of the residual: the median of the last 10 intervals against the 20 before.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
struct Step {
    /// Residual after the step (median of the last 10 intervals), K.
    after: f64,
    /// Its change, K.
    size: f64,
    /// Change of the prediction, K.
    prediction: f64,
    /// Change of the measurement, K.
    measurement: f64,
}

/// The input that moved most across a step, in units of its interval noise, and how many
/// other inputs moved too (an operating change moves several: a feed step and the duty
/// that follows it).
#[derive(Debug, Clone, Copy)]
struct Moved {
    tag: usize,
    by: f64,
    count: usize,
}

/// Which side moved in the step.
#[derive(Debug, Clone, Copy)]
struct Sides {
    /// The residual changed at one point, not gradually.
    abrupt: bool,
    /// The measurement made the change.
    measurement: bool,
    /// The prediction moved by the residual's step the other way.
    meter_consistent: bool,
}

impl StepWindow {
    /// A step: the residual moved away from its baseline at one moment and stayed there.
    /// Compares the median of the last 10 intervals with the median of the 20 before; both
    /// windows must be quiet. If the prediction did not move, the thermometer moved on its own;
    /// if the measurement did not move, an input meter stepped that the plant did not follow.
    /// `lag` is the lag factor of the prediction's dynamic compensation.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn check(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        baseline: Option<&Baseline>,
        lag: f64,
        x: &Reading<'_>,
        pending: &mut Option<PendingMeter>,
        active: &mut Held,
    ) {
        let Some(b) = baseline else { return };
        let row = (x.end_ms, x.r, x.pred, x.meas);
        push_bounded_row(&mut self.0, (row, x.tags), 30, |old, (row, tags)| {
            (old.0, old.1, old.2, old.3) = row;
            old.4.clear();
            old.4.extend_from_slice(tags);
        });
        if let Some(p) = pending.as_ref() {
            if x.end_ms >= p.due_ms {
                if p.still_standing(&self.0) {
                    let tag_idx = p.tag;
                    if !active.holds(Cause::InstrumentFault, &unit.tags[tag_idx].name) {
                        self.raise(unit, b, tag_idx, &p.why, p.step, p.step_ms, x.end_ms, active);
                    }
                }
                *pending = None;
                self.0.clear();
            }
            return;
        }
        if self.0.len() < 30 {
            return;
        }
        let Some(step) = self.step(cfg, b) else { return };
        let before = step.after - step.size;
        if (step.after - b.mu).abs() <= (before - b.mu).abs() {
            // Back toward the baseline: the removal of a held instrument step (a thermometer
            // recalibrated, a meter repaired) ends that alert at once.
            let undone = |a: &super::active::Active| {
                a.step_k().is_some_and(|k| {
                    k.signum() != step.size.signum() && (k + step.size).abs() <= 0.4 * k.abs()
                })
            };
            if active.iter().any(undone) {
                active.retain(|a| !undone(a));
                self.0.clear();
            }
            return;
        }
        let (moved, frozen) = self.inputs_across(unit, b);
        let sides = self.sides(step, lag);
        let Some((tag_idx, why)) = suspect(unit, frozen, moved, sides, step) else { return };
        let input_moved = moved.is_some();
        // A frozen input explains a residual that moves while the prediction does not.
        if tag_idx == unit.effluent_temperature && active.iter().any(|a| a.subject.ends_with(":stuck")) {
            self.0.clear();
            return;
        }
        let tag = &unit.tags[tag_idx];
        if active.holds(Cause::InstrumentFault, &tag.name) {
            return;
        }
        let step_ms = self.0[20].0;
        if frozen != Some(tag_idx) && (tag_idx != unit.effluent_temperature || input_moved) {
            // An input meter moved and the plant temperature has not followed yet: the plant may
            // only be slow. Judged again once it has had time to answer. The same for a
            // thermometer step that came with an input move: the measurement may be the
            // plant's own answer to the move, faster or slower than the compensation.
            let wait = METER_WAIT_MS.max(2 * (cfg.dead_time_ms + cfg.lag_ms));
            *pending = Some(PendingMeter { tag: tag_idx, why, step, step_ms, due_ms: step_ms + wait });
            return;
        }
        self.raise(unit, b, tag_idx, &why, step, step_ms, x.end_ms, active);
        self.0.clear();
    }

    /// One figure of the rows in `range` (at most 30), into `buf`.
    fn col<'b>(
        &self,
        f: &dyn Fn(&StepRow) -> f64,
        range: std::ops::Range<usize>,
        buf: &'b mut [f64; 30],
    ) -> &'b [f64] {
        let mut n = 0;
        for (slot, row) in buf.iter_mut().zip(self.0.range(range)) {
            *slot = f(row);
            n += 1;
        }
        &buf[..n]
    }

    /// The residual's step, if it stands out from what the step statistic does on steady
    /// data and both windows are quiet.
    fn step(&self, cfg: &MonitorConfig, b: &Baseline) -> Option<Step> {
        let (mut b1, mut b2) = ([0.0; 30], [0.0; 30]);
        let (rb, ra) = (self.col(&|x| x.1, 0..20, &mut b1), self.col(&|x| x.1, 20..30, &mut b2));
        let (mb, ma) = (stats::median(rb), stats::median(ra));
        let dr = ma - mb;
        let sig_i = b.sigma_interval.max(1e-3);
        // A step must stand out from what the step statistic does on steady data (six times
        // its robust scatter), or, for baselines without that figure, four block σ.
        let threshold = if b.step_sigma > 0.0 {
            (6.0 * b.step_sigma).max(0.3)
        } else {
            (cfg.step_z * b.sigma).max(4.0 * b.sigma).max(0.3)
        };
        // Cheapest test first: most intervals have no step.
        if dr.abs() < threshold {
            return None;
        }
        let quiet = stats::mad_sigma(rb) <= 3.0 * sig_i && stats::mad_sigma(ra) <= 3.0 * sig_i;
        if !quiet {
            return None;
        }
        let (mut b3, mut b4) = ([0.0; 30], [0.0; 30]);
        let dp = stats::median(self.col(&|x| x.2, 20..30, &mut b3))
            - stats::median(self.col(&|x| x.2, 0..20, &mut b4));
        let dm = stats::median(self.col(&|x| x.3, 20..30, &mut b3))
            - stats::median(self.col(&|x| x.3, 0..20, &mut b4));
        Some(Step { after: ma, size: dr, prediction: dp, measurement: dm })
    }

    /// Which input changed most across the step, in units of its interval noise (at least six
    /// of them), and which one, if any, is frozen (no noise in the after-window although the
    /// baseline saw noise).
    fn inputs_across(&self, unit: &UnitSpec, b: &Baseline) -> (Option<Moved>, Option<usize>) {
        let mut moved: Option<Moved> = None;
        let mut frozen: Option<usize> = None;
        for (i, tag) in unit.tags.iter().enumerate() {
            if i == unit.effluent_temperature || tag.kind != TagKind::Continuous || tag.info {
                continue;
            }
            let before: Vec<f64> =
                self.0.range(0..20).filter_map(|x| x.4.get(i).copied().flatten()).collect();
            let after: Vec<f64> =
                self.0.range(20..30).filter_map(|x| x.4.get(i).copied().flatten()).collect();
            if before.len() < 10 || after.len() < 5 {
                continue;
            }
            let noise = b.tag_noise.get(i).copied().flatten().unwrap_or(0.0);
            let (lo, hi) = after.iter().fold((f64::MAX, f64::MIN), |(a, c), x| (a.min(*x), c.max(*x)));
            if noise > 1e-9 * hi.abs().max(1.0) && hi - lo <= 1e-9 * hi.abs().max(1.0) {
                frozen = Some(i);
            }
            // Moved: the change of the medians exceeds six times the tag's interval noise
            // (the noise of a 10-against-20 median difference is about 0.4 of it).
            let d = (stats::median(&after) - stats::median(&before)) / noise.max(1e-9 * hi.abs().max(1.0));
            if d.abs() >= 6.0 {
                moved = Some(match moved {
                    None => Moved { tag: i, by: d, count: 0 },
                    Some(m) if d.abs() > m.by.abs() => Moved { tag: i, by: d, count: m.count + 1 },
                    Some(m) => Moved { count: m.count + 1, ..m },
                });
            }
        }
        (moved, frozen)
    }

    /// Where is the change, and which side made it? A thermometer fault moves the
    /// measurement within an interval or two while the (compensated) prediction stays put;
    /// an input — a stepping meter, or an analyzer whose held value updates — moves the
    /// prediction instead; a real process change moves both together (and, with the
    /// dynamics compensated, not abruptly). The change over a point is the difference of the
    /// medians of the three intervals after and the three before it (robust to the noise of
    /// single intervals; a step inside an interval is still seen whole), at the point where
    /// the residual changes most.
    fn sides(&self, step: Step, lag: f64) -> Sides {
        let (dr, dp) = (step.size, step.prediction);
        let rs: Vec<f64> = self.0.iter().map(|x| x.1).collect();
        let ms: Vec<f64> = self.0.iter().map(|x| x.3).collect();
        let jump = |v: &[f64], k: usize| stats::median(&v[k..k + 3]) - stats::median(&v[k - 3..k]);
        let k = (12..=27).max_by(|&i, &j| jump(&rs, i).abs().total_cmp(&jump(&rs, j).abs())).unwrap_or(20);
        let jr = jump(&rs, k);
        let jm = jump(&ms, k);
        let abrupt = jr.abs() >= 0.7 * dr.abs() && jr.signum() == dr.signum();
        // A thermometer that steps while the plant is still answering an earlier move: the
        // measurement and the prediction both move, but the residual steps within two
        // intervals (the one the step fell in and the next). An input step reaches the
        // residual only through the lag compensation of the prediction, which lets through
        // 1 − a² of it in two intervals; when that is well below the residual's two-interval
        // share, the step came from the measurement side.
        let sharp = |v: &[f64], k: usize| v[k + 1] - v[k - 1];
        let k2 = (12..=27).max_by(|&i, &j| sharp(&rs, i).abs().total_cmp(&sharp(&rs, j).abs())).unwrap_or(20);
        let jr2 = sharp(&rs, k2);
        let lag_share = 1.0 - lag * lag;
        // A residual change that is a small part of a concurrent prediction move is more
        // likely a gain error of the model (a fouled heater's deficit grows with the duty, a
        // meter's span) than an instrument offset.
        let sharp_measurement = lag_share <= 0.6
            && jr2.signum() == dr.signum()
            && jr2.abs() >= 0.85 * dr.abs()
            && dr.abs() >= 0.25 * dp.abs();
        let measurement = abrupt && ((jm - jr).abs() <= 0.4 * jr.abs() || sharp_measurement);
        // A meter fault moves the prediction by the residual's step (the other way) while the
        // measurement stays: a step much smaller than the prediction change is something else.
        let meter_consistent = (dr + dp).abs() <= 0.5 * dr.abs();
        Sides { abrupt, measurement, meter_consistent }
    }

    /// Raise the instrument fault of the suspect tag.
    #[allow(clippy::too_many_arguments)]
    fn raise(
        &self,
        unit: &UnitSpec,
        b: &Baseline,
        tag_idx: usize,
        why: &str,
        step: Step,
        step_ms: i64,
        now: i64,
        active: &mut Held,
    ) {
        let Step { after: ma, size: dr, prediction: dp, measurement: dm } = step;
        let tag = &unit.tags[tag_idx];
        let when = crate::core::calendar::rfc3339(step_ms, &unit.time_zone);
        let message = format!(
            "The residual stepped by {dr:+.2} K at about {when} and stayed there while {why}: suspect {} ({}); check it against a reference (local gauge, duplicate sensor) before trusting the soft tags.",
            tag.name, tag.role
        );
        let evidence = ev(&[
            ("residual_k", round(ma, 3)),
            ("baseline_k", round(b.mu, 3)),
            ("step_k", round(dr, 3)),
            ("prediction_change_k", round(dp, 3)),
            ("measurement_change_k", round(dm, 3)),
            ("suspect_tag", tag.name.clone().into()),
            ("change_time", when.into()),
        ]);
        let name = tag.name.clone();
        active.raise(Cause::InstrumentFault, &name, Severity::Medium, message, dr.abs(), now, evidence);
    }
}

/// The tag to suspect and why: a frozen input first, then the thermometer when the
/// measurement made the change, then an input meter that stepped alone while the plant
/// temperature did not follow. A gradual change, an operating change, or the prediction stepping on an
/// analyzer update is not an instrument step (the drift charts judge what persists).
fn suspect(
    unit: &UnitSpec,
    frozen: Option<usize>,
    moved: Option<Moved>,
    sides: Sides,
    step: Step,
) -> Option<(usize, String)> {
    let (dr, dm) = (step.size, step.measurement);
    match (frozen, moved) {
        (Some(i), _) => Some((i, format!("{} shows no noise at all since then (frozen)", unit.tags[i].name))),
        _ if sides.measurement => Some((
            unit.effluent_temperature,
            if moved.is_none() {
                "no input moved".to_string()
            } else {
                "the measurement jumped within two intervals, faster than the prediction can move".to_string()
            },
        )),
        // One meter alone: when other inputs moved with it, it was an operating move.
        (None, Some(Moved { tag: i, by: d, count: 0 }))
            if sides.abrupt && sides.meter_consistent && dm.abs() < dr.abs() / 3.0 =>
        {
            Some((
                i,
                format!(
                    "{} moved by {d:+.0} times its noise while the plant temperature did not follow",
                    unit.tags[i].name
                ),
            ))
        }
        _ => None,
    }
}

/// Append `v`, keeping the last `n`.
/// [`push_bounded`] of a row built from `v`: when the queue is full, the oldest row is
/// overwritten in place by `fill` (its buffers reused) instead of a new one allocated.
fn push_bounded_row<T: Default, V: Copy>(q: &mut VecDeque<T>, v: V, n: usize, fill: impl Fn(&mut T, V)) {
    let mut row = if n > 0 && q.len() >= n { q.pop_front().unwrap_or_default() } else { T::default() };
    fill(&mut row, v);
    push_bounded(q, row, n);
}

fn push_bounded<T>(q: &mut VecDeque<T>, v: T, n: usize) {
    q.push_back(v);
    while q.len() > n {
        q.pop_front();
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::core::monitor::tests::{AMBIENT, CP, DUTY, FLOW, MIN, Point, T0, TOUT, baseline, unit};
    use crate::rng::Rng;

    /// The instrument checks fed interval by interval, with what they flagged and raised.
    struct Checks {
        cfg: MonitorConfig,
        unit: UnitSpec,
        baseline: Option<Baseline>,
        instruments: Instruments,
        steps: StepWindow,
        pending: Option<PendingMeter>,
        active: Held,
        /// (interval, flag) of every flag.
        flags: Vec<(i64, Flag)>,
        /// The conditions held after each interval.
        log: Vec<Vec<(Cause, String)>>,
        k: i64,
    }

    impl Checks {
        fn new() -> Checks {
            let cfg = MonitorConfig::default();
            let baseline = Some(baseline(&cfg, 10));
            Checks {
                cfg,
                unit: unit(),
                baseline,
                instruments: Instruments::default(),
                steps: StepWindow::default(),
                pending: None,
                active: Held::default(),
                flags: Vec::new(),
                log: Vec::new(),
                k: 0,
            }
        }

        /// One interval at `p` (its prediction taken as already compensated, no lag).
        fn run(&mut self, p: Point) {
            let tags = [Some(p.feed), Some(p.feed_t), Some(p.duty), Some(p.meas), Some(p.ambient)];
            let x = Reading {
                end_ms: T0 + (self.k + 1) * MIN,
                pred: p.pred,
                meas: p.meas,
                r: p.meas - p.pred,
                tags: &tags,
            };
            let mut flags = Vec::new();
            let b = self.baseline.as_ref();
            self.instruments.check(&self.cfg, &self.unit, b, &x, &mut self.active, &mut flags);
            self.steps.check(&self.cfg, &self.unit, b, 0.0, &x, &mut self.pending, &mut self.active);
            self.flags.extend(flags.into_iter().map(|f| (self.k, f)));
            self.log.push(self.held());
            self.k += 1;
        }

        /// `n` intervals at the nominal point with noise, each changed by `change(k, point)`.
        fn intervals(&mut self, rng: &mut Rng, n: i64, change: impl Fn(i64, &mut Point)) {
            for k in 0..n {
                let mut p = Point::nominal().noisy(rng);
                change(k, &mut p);
                self.run(p);
            }
        }

        fn held(&self) -> Vec<(Cause, String)> {
            self.active.iter().map(|a| (a.cause, a.subject.clone())).collect()
        }
    }

    #[test]
    fn a_hampel_spike_is_flagged_but_a_step_is_not() {
        let mut rng = Rng::new(1);
        let spike = |k: i64, p: &mut Point| p.meas += if k == 20 { 1.0 } else { 0.0 };
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 40, spike);
        // Judged when it is the centre of the window of 7, three intervals later.
        assert_eq!(checks.flags, vec![(23, Flag::Spike(TOUT))]);
        assert!(checks.held().is_empty(), "one spike raises nothing: {:?}", checks.held());

        let mut checks = Checks::new();
        checks.intervals(&mut rng, 40, |k, p| p.meas += if k >= 20 { 1.0 } else { 0.0 });
        assert!(checks.flags.is_empty(), "{:?}", checks.flags);

        // Without a baseline nothing is flagged.
        let mut checks = Checks { baseline: None, ..Checks::new() };
        checks.intervals(&mut rng, 40, spike);
        assert!(checks.flags.is_empty(), "{:?}", checks.flags);
    }

    #[test]
    fn three_spikes_within_an_hour_raise_a_thermometer_fault() {
        let mut rng = Rng::new(2);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 60, |k, p| p.meas -= if [10, 25, 40].contains(&k) { 1.0 } else { 0.0 });
        // The third spike is judged at interval 43.
        let raised = checks.log.iter().position(|h| !h.is_empty()).unwrap();
        assert_eq!(raised, 43);
        assert_eq!(checks.held(), vec![(Cause::InstrumentFault, "TI-109".to_string())]);
        let a = checks.active.iter().next().unwrap();
        assert_eq!((a.severity, a.magnitude), (Severity::Low, 3.0));
        assert!(a.message.contains("3 spikes in the last hour"), "{}", a.message);
    }

    #[test]
    fn a_frozen_tag_with_baseline_noise_is_raised_as_stuck_and_clears_when_it_moves() {
        let mut rng = Rng::new(3);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 100, |k, p| {
            if (40..80).contains(&k) {
                p.feed = 10.0;
            }
        });
        // Frozen from interval 40: the window of 30 is all one value at interval 69; it
        // moves again at 80.
        let stuck = vec![(Cause::InstrumentFault, "FI-101:stuck".to_string())];
        for (k, held) in checks.log.iter().enumerate() {
            assert_eq!(*held, if (69..80).contains(&k) { stuck.clone() } else { vec![] }, "interval {k}");
        }
        // The ambient thermometer is constant all along, but it is not a required tag, and the
        // thermometers and meters that moved are not frozen.
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 100, |_, _| {});
        assert!(checks.log.iter().all(Vec::is_empty), "{:?}", checks.held());
        assert!(!checks.unit.tags[AMBIENT].required);
    }

    #[test]
    fn a_thermometer_step_is_blamed_on_the_thermometer() {
        let mut rng = Rng::new(4);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 30, |k, p| p.meas += if k >= 20 { 1.0 } else { 0.0 });
        assert_eq!(checks.held(), vec![(Cause::InstrumentFault, "TI-109".to_string())]);
        let a = checks.active.iter().next().unwrap();
        let step = a.step_k().unwrap();
        assert!((step - 1.0).abs() < 0.1, "step {step}");
        assert!(a.evidence["prediction_change_k"].as_f64().unwrap().abs() < 1e-9);
        assert!(a.message.contains("while no input moved: suspect TI-109"), "{}", a.message);
        assert_eq!(a.evidence["change_time"], "2026-12-01T00:21:00+00:00");
    }

    #[test]
    fn a_thermometer_step_alert_ends_when_the_step_is_removed() {
        let mut rng = Rng::new(8);
        let mut checks = Checks::new();
        // Reads 1 K high from interval 20 to 89, then corrected.
        checks.intervals(&mut rng, 160, |k, p| p.meas += if (20..90).contains(&k) { 1.0 } else { 0.0 });
        let held: Vec<bool> = checks.log.iter().map(|h| !h.is_empty()).collect();
        assert!(held[35..90].iter().all(|h| *h), "held while the step stands");
        let cleared = (90..160).find(|k| !held[*k]).unwrap();
        assert!(cleared <= 90 + 12, "cleared {} intervals after the correction", cleared - 90);
        assert!(held[cleared..].iter().all(|h| !h), "not raised again");
    }

    #[test]
    fn a_duty_move_that_the_plant_follows_slowly_is_not_a_meter_fault() {
        // The operators raise the duty by 5 %; the plant answers after 8 min of dead time with
        // a 15-min lag, which the monitor was not told about.
        let mut rng = Rng::new(6);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 120, |k, p| {
            let rise = 0.05 * p.duty / (p.feed * CP);
            if k >= 20 {
                p.duty *= 1.05;
            }
            p.pred = p.feed_t + p.duty / (p.feed * CP);
            let t = (k - 28) as f64;
            p.meas += if t > 0.0 { rise * (1.0 - (-t / 15.0).exp()) } else { 0.0 };
        });
        assert!(checks.log.iter().all(Vec::is_empty), "{:?}", checks.held());
    }

    #[test]
    fn a_feed_step_with_a_duty_follow_up_is_an_operating_move_not_a_meter_fault() {
        // The operators cut the feed by 10 % and follow with the duty two minutes later; the
        // plant holds its temperature, but after the move the model runs 0.6 K cooler (its
        // design conversion no longer fits the longer residence time). Two inputs moved
        // together: an operating change, not a meter that stepped on its own.
        let mut rng = Rng::new(9);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 120, |k, p| {
            if k >= 20 {
                p.feed *= 0.9;
            }
            if k >= 22 {
                p.duty *= 0.9;
                p.pred -= 0.6;
            }
        });
        assert!(checks.log.iter().all(Vec::is_empty), "{:?}", checks.held());
    }

    #[test]
    fn a_thermometer_jump_after_an_input_move_waits_for_the_plant_to_settle() {
        // The duty rises 5 % (2 K of heating) and the plant answers after 4 min within two
        // intervals, overshooting by 1.5 K that dies out with a time constant of 10 min: the
        // measurement jumps, but it is the plant's own answer. Judged once the plant has had
        // time to settle: nothing stands. (The prediction is computed from the noise-free
        // inputs, so that the residual's noise is the thermometer's, as the baseline says.)
        let mut rng = Rng::new(10);
        let nominal = Point::nominal();
        let predicted = |k: i64| {
            let duty = nominal.duty * if k >= 20 { 1.05 } else { 1.0 };
            (duty, nominal.feed_t + duty / (nominal.feed * CP))
        };
        let rise = 0.05 * nominal.duty / (nominal.feed * CP);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 150, |k, p| {
            let (duty, pred) = predicted(k);
            (p.duty, p.pred) = (p.duty * duty / nominal.duty, pred);
            if k >= 24 {
                let t = (k - 24) as f64;
                p.meas += (rise + 1.5 * (-t / 10.0).exp()) * (1.0 - (-t / 1.5).exp());
            }
        });
        let first = checks.log.iter().position(|h| !h.is_empty());
        assert!(first.is_none(), "raised at {first:?}: {:?}", checks.held());
        // A thermometer that steps by 1 K at that moment is still raised, once the wait is over.
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 150, |k, p| {
            let (duty, pred) = predicted(k);
            (p.duty, p.pred) = (p.duty * duty / nominal.duty, pred);
            if k >= 24 {
                p.meas += rise + 1.0;
            }
        });
        let first = checks.log.iter().position(|h| !h.is_empty()).expect("raised");
        assert!(first <= 24 + 60, "raised at interval {first}");
        assert_eq!(checks.held(), vec![(Cause::InstrumentFault, "TI-109".to_string())]);
    }

    #[test]
    fn a_meter_step_is_blamed_on_the_meter() {
        let mut rng = Rng::new(5);
        let mut checks = Checks::new();
        checks.intervals(&mut rng, 70, |k, p| {
            // The duty meter reads 5 % high: the model predicts a hotter effluent that the
            // plant does not deliver.
            if k >= 20 {
                p.duty *= 1.05;
            }
            p.pred = p.feed_t + p.duty / (p.feed * CP);
        });
        // Not before the plant has had 45 min to answer; then blamed on the meter.
        let first = checks.log.iter().position(|h| !h.is_empty()).unwrap();
        assert!((65..=67).contains(&first), "raised at interval {first}");
        assert_eq!(checks.held(), vec![(Cause::InstrumentFault, "JI-103".to_string())]);
        let a = checks.active.iter().next().unwrap();
        let step = a.step_k().unwrap();
        let want = -0.05 * 30_000.0 / (10.0 * CP);
        assert!((step / want - 1.0).abs() < 0.1, "step {step}, expected {want}");
        assert!(a.message.contains("JI-103 moved by +"), "{}", a.message);
        assert!(a.message.contains("suspect JI-103 (heater duty)"), "{}", a.message);
        assert_eq!(
            (checks.unit.tags[DUTY].name.as_str(), checks.unit.tags[FLOW].name.as_str()),
            ("JI-103", "FI-101")
        );
    }
}
