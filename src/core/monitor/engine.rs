//! The monitor of one unit: a state machine over the per-interval evaluations that
//! compensates the prediction's dynamics, detects steady state, learns a baseline of the
//! residual on block means, runs CUSUM, EWMA and Shewhart checks on the standardized block
//! residual, heater effectiveness and apparent conversion, and attributes a mismatch to a cause.
//!
//! States (shown in the soft-tag `monitor_state` column):
//! * `learning`: steady data are collected for the baseline;
//! * `watching`: charts run and alerts can be raised;
//! * `unsteady`: inputs are moving; statistics are frozen, only a gross check runs;
//! * `settling`: steady again, waiting dead time + 3 lag constants before resuming;
//! * `paused`: the unit is down, the feed is below its minimum, or a key input is unusable.
//!
//! Pure and driven by event time; the state serializes into the checkpoint.

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

use super::charts::{Cusum, Ewma, Side, cusum_h_for, ewma_l_for};
use super::dynamics::Fopdt;
use super::settings::MonitorConfig;
use super::ssd::{Floor, SteadyState};
use super::stats::{self, AsymptoticFit, LineFit};
use crate::core::flags::Flag;
use crate::core::model::Evaluation;
use crate::core::spec::UnitSpec;
use crate::core::vocabulary::{Cause, Condition, Severity, TagKind};

/// Monitor state.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MonitorState {
    /// Building the baseline.
    Learning,
    /// Charts running.
    Watching,
    /// Inputs moving.
    Unsteady,
    /// Waiting for the dynamics to settle.
    Settling,
    /// Suspended.
    Paused,
}

impl MonitorState {
    /// Name for the soft-tag column.
    pub fn as_str(self) -> &'static str {
        match self {
            MonitorState::Learning => "learning",
            MonitorState::Watching => "watching",
            MonitorState::Unsteady => "unsteady",
            MonitorState::Settling => "settling",
            MonitorState::Paused => "paused",
        }
    }
}

/// One learning interval: residual, effectiveness, apparent and measured conversion, total
/// feed, and the tags' values (SI).
type LearnRow = (f64, Option<f64>, Option<f64>, Option<f64>, f64, Vec<Option<f64>>);

/// One interval of the step test: end, residual, prediction, measurement, tag values.
type StepRow = (i64, f64, f64, f64, Vec<Option<f64>>);

/// The learned reference.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Baseline {
    /// Intervals per block.
    pub block: usize,
    /// Residual block mean, K.
    pub mu: f64,
    /// Residual block σ, K.
    pub sigma: f64,
    /// Residual interval σ, K (gross checks, spikes).
    pub sigma_interval: f64,
    /// Effectiveness mean and σ (block).
    pub eff: Option<(f64, f64)>,
    /// Apparent conversion mean and σ (block).
    pub conv: Option<(f64, f64)>,
    /// Measured conversion mean and σ (block).
    pub conv_measured: Option<(f64, f64)>,
    /// Mean total feed, mol/s.
    pub feed: f64,
    /// Block σ of each tag (SI), for step attribution.
    pub tag_sigma: Vec<Option<f64>>,
    /// Interval-to-interval noise of each tag (SI): σ of successive differences / √2.
    #[serde(default)]
    pub tag_noise: Vec<Option<f64>>,
    /// When it was learned (event time, ms).
    pub learned_ms: i64,
    /// Blocks used.
    pub blocks: usize,
    /// Robust scatter of the step statistic on the learning data (0: not known).
    #[serde(default)]
    pub step_sigma: f64,
    /// Lag-1 autocorrelation of the block means.
    pub acf1: f64,
    /// CUSUM decision interval for the false-alert target.
    pub h: f64,
    /// EWMA limit width for the false-alert target.
    pub l: f64,
}

/// One completed block while watching.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BlockRecord {
    /// Block end, ms.
    pub end_ms: i64,
    /// Mean residual, K.
    pub residual: f64,
    /// Standardized residual.
    pub z: f64,
    /// Mean heater effectiveness.
    pub eff: Option<f64>,
    /// Mean apparent conversion.
    pub conv: Option<f64>,
    /// Mean measured conversion.
    pub conv_measured: Option<f64>,
    /// Mean reported duty, W.
    pub duty: Option<f64>,
    /// Mean key-reactant feed, mol/s.
    pub key_feed: Option<f64>,
    /// Mean effluent heat-capacity flow, W/K.
    pub heat_capacity: Option<f64>,
    /// Mean ambient temperature, K.
    pub ambient: Option<f64>,
    /// Mean of each tag, SI.
    pub tags: Vec<Option<f64>>,
}

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
struct Acc {
    n: usize,
    start_ms: Option<i64>,
    residual: f64,
    eff: (f64, usize),
    conv: (f64, usize),
    conv_measured: (f64, usize),
    duty: (f64, usize),
    key_feed: (f64, usize),
    heat_capacity: (f64, usize),
    ambient: (f64, usize),
    tags: Vec<(f64, usize)>,
}

fn add(acc: &mut (f64, usize), v: Option<f64>) {
    if let Some(v) = v {
        acc.0 += v;
        acc.1 += 1;
    }
}

fn avg(acc: (f64, usize)) -> Option<f64> {
    (acc.1 > 0).then(|| acc.0 / acc.1 as f64)
}

/// An alert condition the monitor keeps with its own hysteresis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct Active {
    cause: Cause,
    subject: String,
    severity: Severity,
    message: String,
    magnitude: f64,
    since_ms: i64,
    clean: u32,
    evidence: serde_json::Map<String, serde_json::Value>,
}

impl Active {
    /// The offset of an instrument step alert (its `step_k` evidence); `None` for every other
    /// alert, including frozen tags and spikes.
    fn step_k(&self) -> Option<f64> {
        if self.cause != Cause::InstrumentFault {
            return None;
        }
        self.evidence.get("step_k").and_then(serde_json::Value::as_f64)
    }
}

/// What the charts said in this block, for the attribution.
#[derive(Debug, Clone, Copy)]
struct ChartSignals {
    /// Heater-effectiveness charts.
    eff: Option<Side>,
    /// Apparent-conversion charts.
    conv: Option<Side>,
    /// The measured conversion has shifted (large at once, or accumulated by its charts).
    conv_measured_shift: bool,
    /// The residual (or effectiveness, apparent conversion) deviation is material.
    residual_material: bool,
}

/// The charts on one standardized statistic.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct ChartPair {
    cusum: Cusum,
    ewma: Ewma,
}

impl ChartPair {
    fn new(b: &Baseline, cfg: &MonitorConfig) -> ChartPair {
        ChartPair { cusum: Cusum::new(cfg.cusum_k, b.h), ewma: Ewma::new(cfg.ewma_lambda, b.l) }
    }
    fn step(&mut self, z: f64) -> Option<Side> {
        let zc = z.clamp(-4.0, 4.0);
        let a = self.cusum.step(zc);
        let b = self.ewma.step(zc);
        a.or(b)
    }
    fn restart(&mut self) {
        self.cusum.restart_fir();
        self.ewma.reset();
    }
}

/// The monitor of one unit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Monitor {
    /// Current state.
    pub state: MonitorState,
    fopdt: Fopdt,
    ssd: SteadyState,
    settle_until_ms: Option<i64>,
    acc: Acc,
    learning: Vec<LearnRow>,
    /// The baseline, once learned.
    pub baseline: Option<Baseline>,
    resid: Option<ChartPair>,
    eff: Option<ChartPair>,
    conv: Option<ChartPair>,
    /// Charts on the measured conversion (with an effluent analyzer).
    #[serde(default)]
    conv_measured: Option<ChartPair>,
    /// Completed blocks while watching (bounded).
    pub history: VecDeque<BlockRecord>,
    active: Vec<Active>,
    recent_resid: VecDeque<f64>,
    recent_pred: VecDeque<f64>,
    recent_meas: VecDeque<f64>,
    recent_tags: VecDeque<Vec<Option<f64>>>,
    spikes: VecDeque<i64>,
    /// Start of the current deviation episode (the first chart signal after a quiet spell).
    episode_ms: Option<i64>,
    /// The separation regression's latest verdict and how many evaluations in a row gave it
    /// (a cause is named only when the data keep saying the same thing).
    #[serde(default)]
    verdict_run: Option<(Cause, u32)>,
    /// Recent intervals for the step test: (end, residual, predicted, measured, tag values).
    steps: VecDeque<StepRow>,
    /// The last computed effectiveness trend, for reports.
    pub trend: Option<Trend>,
}

/// A fitted effectiveness trend with its projection.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Trend {
    /// Slope per day (fraction of effectiveness per day).
    pub slope_per_day: f64,
    /// Its t-statistic.
    pub t: f64,
    /// `linear` or `asymptotic`.
    pub model: String,
    /// Fitted effectiveness now.
    pub now: f64,
    /// Projected time the limit is reached, ms (None: not expected).
    pub limit_ms: Option<i64>,
    /// Earliest and latest projected times (±2 σ), ms.
    pub range_ms: Option<(i64, i64)>,
    /// Points (time ms, effectiveness) the fit used.
    pub points: Vec<(i64, f64)>,
    /// Asymptote of the Kern–Seaton fit, when chosen.
    pub asymptote: Option<f64>,
}

fn ev(pairs: &[(&str, serde_json::Value)]) -> serde_json::Map<String, serde_json::Value> {
    pairs.iter().map(|(k, v)| ((*k).to_string(), v.clone())).collect()
}

fn round(x: f64, d: i32) -> serde_json::Value {
    let f = 10f64.powi(d);
    ((x * f).round() / f).into()
}

/// What the monitor produced for one interval.
#[derive(Debug, Clone, PartialEq)]
pub struct MonitorOutput {
    /// State.
    pub state: MonitorState,
    /// Statistical conditions for the alert lifecycle.
    pub conditions: Vec<Condition>,
    /// Extra soft-tag flags.
    pub flags: Vec<Flag>,
    /// A log line when something notable happened (baseline learned...).
    pub note: Option<String>,
}

impl Monitor {
    /// A fresh monitor.
    pub fn new(cfg: &MonitorConfig, interval_ms: i64) -> Monitor {
        Monitor {
            state: MonitorState::Learning,
            fopdt: Fopdt::new(cfg.dead_time_ms, cfg.lag_ms, interval_ms),
            ssd: SteadyState::default(),
            settle_until_ms: None,
            acc: Acc::default(),
            learning: Vec::new(),
            baseline: None,
            resid: None,
            eff: None,
            conv: None,
            conv_measured: None,
            history: VecDeque::new(),
            active: Vec::new(),
            recent_resid: VecDeque::new(),
            recent_pred: VecDeque::new(),
            recent_meas: VecDeque::new(),
            recent_tags: VecDeque::new(),
            spikes: VecDeque::new(),
            steps: VecDeque::new(),
            episode_ms: None,
            verdict_run: None,
            trend: None,
        }
    }

    /// Forget the baseline and learn again (after maintenance); audited by the caller.
    pub fn rebaseline(&mut self) {
        self.baseline = None;
        self.learning.clear();
        self.resid = None;
        self.eff = None;
        self.conv = None;
        self.conv_measured = None;
        self.history.clear();
        self.active.clear();
        self.acc = Acc::default();
        self.trend = None;
        self.state = MonitorState::Learning;
    }

    fn block_len(&self, cfg: &MonitorConfig) -> usize {
        self.baseline.as_ref().map_or(cfg.block_intervals, |b| b.block).max(1)
    }

    /// Process one interval. Replaces the evaluation's prediction and residual by their
    /// dynamically compensated values.
    pub fn step(&mut self, cfg: &MonitorConfig, unit: &UnitSpec, e: &mut Evaluation) -> MonitorOutput {
        let mut out =
            MonitorOutput { state: self.state, conditions: Vec::new(), flags: Vec::new(), note: None };
        let (Some(pred_ss), Some(meas)) = (e.predicted_k, e.measured_k) else {
            self.pause();
            out.state = self.state;
            self.emit_active(&mut out);
            return out;
        };
        let pred = self.fopdt.step(pred_ss);
        e.predicted_k = Some(pred);
        let r = meas - pred;
        e.residual_k = Some(r);
        let feed = e.signals.feed_mol_s.unwrap_or(0.0);
        if let Some(b) = &self.baseline
            && feed < cfg.min_feed_fraction * b.feed
        {
            self.pause();
            out.state = self.state;
            out.flags.push(Flag::UnitDown);
            return out;
        }
        self.instrument_checks(cfg, unit, e, pred_ss, meas, r, &mut out);
        self.step_check(cfg, unit, e, pred_ss, meas, r);

        // Steady state on the key signals and the residual.
        let mut xs = vec![Some(meas), e.signals.feed_mol_s, e.signals.duty_w, Some(r)];
        xs.extend(e.signals.feed_temperatures_k.iter().copied());
        // Practical-significance floors (instrument noise): 0.1 K on temperatures and the
        // residual, 0.5 % on flows and the duty.
        let mut floors = vec![
            Floor { abs: cfg.ssd_floor_k, rel: 0.0 },
            Floor { abs: 0.0, rel: cfg.ssd_floor_rel },
            Floor { abs: 0.0, rel: cfg.ssd_floor_rel },
            Floor { abs: cfg.ssd_floor_k, rel: 0.0 },
        ];
        floors.extend(e.signals.feed_temperatures_k.iter().map(|_| Floor { abs: cfg.ssd_floor_k, rel: 0.0 }));
        let steady = self.ssd.step_floored(&xs, &floors, &cfg.ssd);
        if !steady {
            // Statistics freeze; a partial block is kept (the residual of a good model is
            // stationary across operating changes) and completes with later steady intervals.
            self.state = MonitorState::Unsteady;
            self.settle_until_ms = None;
            out.flags.push(Flag::Unsteady);
            self.gross_check(cfg, e, r, &mut out);
            out.state = self.state;
            self.emit_active(&mut out);
            return out;
        }
        if matches!(self.state, MonitorState::Unsteady | MonitorState::Paused) {
            let settle = cfg.dead_time_ms + 3 * cfg.lag_ms;
            self.settle_until_ms = Some(e.end_ms + settle);
        }
        if let Some(until) = self.settle_until_ms {
            if e.end_ms < until {
                self.state = MonitorState::Settling;
                out.state = self.state;
                self.emit_active(&mut out);
                return out;
            }
            self.settle_until_ms = None;
            // Resume with a head start: a shift that persisted through the transient shows fast.
            for c in [&mut self.resid, &mut self.eff, &mut self.conv, &mut self.conv_measured]
                .into_iter()
                .flatten()
            {
                c.restart();
            }
        }
        self.state = if self.baseline.is_some() { MonitorState::Watching } else { MonitorState::Learning };

        // Accumulate the block.
        let a = &mut self.acc;
        if a.start_ms.is_none() {
            a.start_ms = Some(e.start_ms);
            a.tags = vec![(0.0, 0); e.signals.tag_values_si.len()];
        }
        a.n += 1;
        a.residual += r;
        add(&mut a.eff, e.effectiveness);
        add(&mut a.conv, e.apparent_conversion);
        add(&mut a.conv_measured, e.signals.measured_conversion);
        add(&mut a.duty, e.signals.duty_w);
        add(&mut a.key_feed, e.signals.key_feed_mol_s);
        add(&mut a.heat_capacity, e.signals.heat_capacity_w_k);
        add(&mut a.ambient, e.signals.ambient_k);
        for (t, v) in a.tags.iter_mut().zip(&e.signals.tag_values_si) {
            add(t, *v);
        }
        if self.baseline.is_none() {
            self.learning.push((
                r,
                e.effectiveness,
                e.apparent_conversion,
                e.signals.measured_conversion,
                feed,
                e.signals.tag_values_si.clone(),
            ));
        }
        if a.n >= self.block_len(cfg) {
            let acc = std::mem::take(&mut self.acc);
            self.end_block(cfg, unit, acc, e, &mut out);
        }
        if e.u_pred_k.is_some_and(|u| u > cfg.max_prediction_uncertainty) {
            out.flags.push(Flag::UncertainInputs);
        } else {
            self.emit_active(&mut out);
        }
        out.state = self.state;
        out
    }

    fn pause(&mut self) {
        self.state = MonitorState::Paused;
        self.acc = Acc::default();
        self.fopdt.reset();
        self.settle_until_ms = None;
    }

    fn emit_active(&self, out: &mut MonitorOutput) {
        for a in &self.active {
            let mut evidence = a.evidence.clone();
            evidence.insert("magnitude".into(), round(a.magnitude, 3));
            out.conditions.push(Condition {
                cause: a.cause,
                subject: a.subject.clone(),
                severity: a.severity,
                message: a.message.clone(),
                evidence,
                magnitude: Some(a.magnitude),
            });
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn raise(
        &mut self,
        cause: Cause,
        subject: &str,
        severity: Severity,
        message: String,
        magnitude: f64,
        now: i64,
        evidence: serde_json::Map<String, serde_json::Value>,
    ) {
        match self.active.iter_mut().find(|a| a.cause == cause && a.subject == subject) {
            Some(a) => {
                a.message = message;
                a.severity = severity;
                a.magnitude = magnitude;
                a.clean = 0;
                a.evidence = evidence;
            }
            None => {
                // A new explanation of the same deviation replaces the previous one.
                if matches!(
                    cause,
                    Cause::HeaterFouling | Cause::ConversionDrift | Cause::Undetermined | Cause::HeatLoss
                ) {
                    self.active.retain(|a| {
                        !matches!(
                            a.cause,
                            Cause::HeaterFouling
                                | Cause::ConversionDrift
                                | Cause::Undetermined
                                | Cause::HeatLoss
                        )
                    });
                }
                self.active.push(Active {
                    cause,
                    subject: subject.to_string(),
                    severity,
                    message,
                    magnitude,
                    since_ms: now,
                    clean: 0,
                    evidence,
                });
            }
        }
    }

    /// Spikes and flatlines, every interval with data.
    #[allow(clippy::too_many_arguments)]
    fn instrument_checks(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        e: &Evaluation,
        pred_ss: f64,
        meas: f64,
        r: f64,
        out: &mut MonitorOutput,
    ) {
        let w = cfg.flatline_intervals.max(5);
        push_bounded(&mut self.recent_pred, pred_ss, w);
        push_bounded(&mut self.recent_meas, meas, w);
        push_bounded(&mut self.recent_tags, e.signals.tag_values_si.clone(), w);
        push_bounded(&mut self.recent_resid, r, 7);
        let sigma_i = self.baseline.as_ref().map_or(0.5 / 3.0, |b| b.sigma_interval.max(1e-3));
        // Spike (Hampel filter, window 7, t = 3; Pearson 2002).
        // The centre of the window is judged (a step is not a spike: after it the window's
        // median follows).
        if self.recent_resid.len() == 7 {
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
            if (centre - med).abs() > 3.0 * mad && self.baseline.is_some() {
                out.flags.push(Flag::Spike(unit.effluent_temperature));
                self.spikes.push_back(e.end_ms);
            }
        }
        while self.spikes.front().is_some_and(|t| *t < e.end_ms - 3_600_000) {
            self.spikes.pop_front();
        }
        if self.spikes.len() >= 3 {
            let tag = &unit.tags[unit.effluent_temperature];
            self.raise(
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
                e.end_ms,
                ev(&[("spikes_last_hour", self.spikes.len().into())]),
            );
        }
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
            let (n, lo, hi) = self
                .recent_tags
                .iter()
                .filter_map(|t| t.get(i).copied().flatten())
                .fold((0usize, f64::MAX, f64::MIN), |(n, a, b), x| (n + 1, a.min(x), b.max(x)));
            if n < w {
                continue;
            }
            let flat = hi - lo <= 1e-9 * hi.abs().max(1.0);
            // A live transmitter shows its noise: zero variation over the window where the
            // baseline saw noise is already improbable (s < 0.3 σ_ref over 30 samples has
            // P ≈ 4×10⁻¹¹ for white noise; monitoring note §5.4). Without a noise reference,
            // require the process to have moved.
            let noisy = self
                .baseline
                .as_ref()
                .and_then(|b| b.tag_noise.get(i).copied().flatten())
                .is_some_and(|n| n > 1e-9 * hi.abs().max(1.0));
            let moved = noisy || if i == unit.effluent_temperature { pred_moved } else { meas_moved };
            if !flat
                && !self.active.iter().any(|a| {
                    a.cause == Cause::InstrumentFault
                        && a.subject.strip_suffix(":stuck").is_some_and(|s| s == tag.name)
                })
            {
                continue;
            }
            let subject = format!("{}:stuck", tag.name);
            if flat && moved {
                let minutes = (w as i64 * unit.interval_ms) as f64 / 60_000.0;
                self.raise(
                    Cause::InstrumentFault,
                    &subject,
                    Severity::Medium,
                    format!(
                        "{} ({}) has not changed for {minutes:.0} min although the process moved: the transmitter looks stuck; check it before trusting the related soft tags.",
                        tag.name, tag.role
                    ),
                    minutes,
                    e.end_ms,
                    ev(&[("tag", tag.name.clone().into()), ("flat_minutes", round(minutes, 0)), ("value", round(hi, 4))]),
                );
            } else if !flat {
                // The stuck condition clears as soon as the tag moves again.
                self.active.retain(|a| !(a.cause == Cause::InstrumentFault && a.subject == subject));
            }
        }
    }

    fn gross_check(&mut self, cfg: &MonitorConfig, e: &Evaluation, r: f64, out: &mut MonitorOutput) {
        let Some(b) = &self.baseline else { return };
        let z = (r - b.mu) / b.sigma_interval.max(1e-3);
        if z.abs() > cfg.gross_z {
            out.flags.push(Flag::GrossResidual);
            let _ = e;
        }
    }

    fn end_block(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        acc: Acc,
        e: &Evaluation,
        out: &mut MonitorOutput,
    ) {
        let n = acc.n as f64;
        let rec = BlockRecord {
            end_ms: e.end_ms,
            residual: acc.residual / n,
            z: 0.0,
            eff: avg(acc.eff),
            conv: avg(acc.conv),
            conv_measured: avg(acc.conv_measured),
            duty: avg(acc.duty),
            key_feed: avg(acc.key_feed),
            heat_capacity: avg(acc.heat_capacity),
            ambient: avg(acc.ambient),
            tags: acc.tags.iter().map(|t| avg(*t)).collect(),
        };
        if self.baseline.is_none() {
            let need = cfg.baseline_blocks * cfg.block_intervals;
            if self.learning.len() >= need {
                self.learn(cfg, unit, e.end_ms, out);
            }
            return;
        }
        self.watch_block(cfg, unit, rec, out);
    }

    fn learn(&mut self, cfg: &MonitorConfig, unit: &UnitSpec, now: i64, out: &mut MonitorOutput) {
        let resid: Vec<f64> = self.learning.iter().map(|l| l.0).collect();
        let b0 = cfg.block_intervals.max(1);
        let candidates = [b0, 2 * b0, 3 * b0, 6 * b0];
        let block = stats::choose_block(&resid, &candidates, 0.2, 30);
        let means = stats::block_means(&resid, block);
        let mu = stats::median(&means);
        // Robust σ, not below 80 % of the standard deviation (the MAD of a few dozen values
        // can be small by chance), inflated for any autocorrelation the blocks still carry
        // (variance of a mean of correlated values; batch-means practice).
        let rho = stats::acf1(&means).clamp(0.0, 0.8);
        let inflate = ((1.0 + rho) / (1.0 - rho)).sqrt();
        let sigma = (stats::mad_sigma(&means).max(0.8 * stats::std_dev(&means)) * inflate).max(0.01);
        let sigma_interval = stats::mad_sigma(&resid).max(0.01);
        // Scatter of the step statistic itself (median of 10 intervals against the 20 before)
        // on the steady learning data: slow wander of the residual makes it larger than the
        // interval noise suggests, and the step test is judged against it.
        let steps: Vec<f64> = (20..resid.len().saturating_sub(10))
            .step_by(3)
            .map(|t| stats::median(&resid[t..t + 10]) - stats::median(&resid[t - 20..t]))
            .collect();
        let step_sigma = if steps.len() >= 30 { stats::mad_sigma(&steps) } else { 0.0 };
        let series = |f: &dyn Fn(&LearnRow) -> Option<f64>| -> Option<(f64, f64)> {
            let v: Vec<f64> = self.learning.iter().filter_map(f).collect();
            if v.len() < block * 10 {
                return None;
            }
            let m = stats::block_means(&v, block);
            let rho = stats::acf1(&m).clamp(0.0, 0.8);
            let inflate = ((1.0 + rho) / (1.0 - rho)).sqrt();
            Some((
                stats::median(&m),
                (stats::mad_sigma(&m).max(0.8 * stats::std_dev(&m)) * inflate).max(1e-6),
            ))
        };
        let eff = series(&|l| l.1);
        let conv = series(&|l| l.2);
        let conv_measured = series(&|l| l.3);
        let feed = stats::mean(&self.learning.iter().map(|l| l.4).collect::<Vec<_>>());
        let ntags = unit.tags.len();
        let tag_sigma = (0..ntags)
            .map(|i| {
                let v: Vec<f64> =
                    self.learning.iter().filter_map(|l| l.5.get(i).copied().flatten()).collect();
                (v.len() >= block * 10).then(|| stats::std_dev(&stats::block_means(&v, block)).max(1e-9))
            })
            .collect();
        let tag_noise = (0..ntags)
            .map(|i| {
                let v: Vec<f64> =
                    self.learning.iter().filter_map(|l| l.5.get(i).copied().flatten()).collect();
                let d: Vec<f64> = v.windows(2).map(|w| w[1] - w[0]).collect();
                (d.len() >= 100).then(|| stats::mad_sigma(&d) / std::f64::consts::SQRT_2)
            })
            .collect();
        let arl0 = cfg.false_alert_days * 86_400_000.0 / (block as f64 * unit.interval_ms as f64);
        let h = cusum_h_for(cfg.cusum_k, arl0);
        let l = ewma_l_for(cfg.ewma_lambda, arl0);
        let baseline = Baseline {
            block,
            mu,
            sigma,
            sigma_interval,
            eff,
            conv,
            conv_measured,
            feed,
            tag_sigma,
            tag_noise,
            learned_ms: now,
            blocks: means.len(),
            step_sigma,
            acf1: stats::acf1(&means),
            h,
            l,
        };
        out.note = Some(format!(
            "baseline learned from {} blocks of {} intervals: residual {:+.3} K ± {:.3} K (block σ), lag-1 autocorrelation {:.2}; CUSUM h = {:.2}, EWMA L = {:.3} for one false alert per {:.0} days per chart",
            baseline.blocks, block, mu, sigma, baseline.acf1, h, l, cfg.false_alert_days
        ));
        self.resid = Some(ChartPair::new(&baseline, cfg));
        self.eff = baseline.eff.map(|_| ChartPair::new(&baseline, cfg));
        self.conv = baseline.conv.map(|_| ChartPair::new(&baseline, cfg));
        self.conv_measured = baseline.conv_measured.map(|_| ChartPair::new(&baseline, cfg));
        self.baseline = Some(baseline);
        self.learning.clear();
        self.state = MonitorState::Watching;
    }

    fn watch_block(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        mut rec: BlockRecord,
        _out: &mut MonitorOutput,
    ) {
        let Some(b) = self.baseline.clone() else { return };
        rec.z = (rec.residual - b.mu) / b.sigma;
        let z = rec.z;
        let resid_signal = self.resid.as_mut().and_then(|c| c.step(z));
        let ze = match (rec.eff, b.eff) {
            (Some(x), Some((m, s))) => Some((x - m) / s),
            _ => None,
        };
        let eff_signal = match (ze, self.eff.as_mut()) {
            (Some(ze), Some(c)) => c.step(ze),
            _ => None,
        };
        let zc = match (rec.conv, b.conv) {
            (Some(x), Some((m, s))) => Some((x - m) / s),
            _ => None,
        };
        let conv_signal = match (zc, self.conv.as_mut()) {
            (Some(zc), Some(c)) => c.step(zc),
            _ => None,
        };
        let keep = cfg.trend_window_ms.max(cfg.ambient_window_ms).max(cfg.separation_window_ms);
        self.history.push_back(rec.clone());
        while self.history.front().is_some_and(|h| h.end_ms < rec.end_ms - keep) {
            self.history.pop_front();
        }
        let now = rec.end_ms;
        let n = self.history.len();
        let shewhart =
            n >= 2 && self.history.iter().rev().take(3).filter(|h| h.z.abs() >= cfg.shewhart_z).count() >= 2;

        // 2. A drift or sustained shift: charts signal without a step signature.
        // A chart signal becomes an alert condition only when the deviation is material: the
        // mean |z| of the last three blocks at least `clear_z` (the charts on effectiveness and
        // apparent conversion see the same residual, so they only count when their own shift
        // is material too).
        let recent: Vec<f64> = self.history.iter().rev().take(3).map(|h| h.z).collect();
        let material = (recent.iter().sum::<f64>() / recent.len().max(1) as f64).abs() >= cfg.clear_z;
        let eff_material = ze.is_some_and(|v| v.abs() >= cfg.clear_z);
        let conv_material = zc.is_some_and(|v| v.abs() >= cfg.clear_z);
        // With a conversion analyzer the prediction already uses the measured conversion, so
        // a chemistry change leaves the residual alone: watch the measured conversion itself.
        let zxm: Vec<f64> = self
            .history
            .iter()
            .rev()
            .take(3)
            .filter_map(|h| Some((h.conv_measured? - b.conv_measured?.0) / b.conv_measured?.1))
            .collect();
        let zxm_mean = if zxm.len() == 3 { zxm.iter().sum::<f64>() / 3.0 } else { 0.0 };
        // A large shift at once, or a smaller one that the charts accumulate (a CUSUM sees a
        // sustained 3σ shift within a few blocks), as long as it is material now.
        let conv_measured_signal = match (rec.conv_measured, b.conv_measured, self.conv_measured.as_mut()) {
            (Some(x), Some((m, s)), Some(c)) => c.step((x - m) / s),
            _ => None,
        };
        let conv_measured_shift = zxm_mean.abs() >= cfg.enter_z
            || (conv_measured_signal.is_some() && zxm_mean.abs() >= cfg.clear_z);
        let signal_residual = material
            && (resid_signal.is_some()
                || (eff_signal.is_some() && eff_material)
                || (conv_signal.is_some() && conv_material)
                || shewhart
                || z.abs() >= cfg.enter_z);
        let signal = conv_measured_shift || signal_residual;
        let step_active = self.active.iter().any(|a| a.step_k().is_some());
        if signal && self.episode_ms.is_none() {
            // The episode began when the residual first left its band, not at the signal.
            let start =
                self.history.iter().rev().take_while(|h| h.z.abs() >= 1.0).last().map_or(now, |h| h.end_ms);
            self.episode_ms = Some(start - b.block as i64 * unit.interval_ms);
        }
        if signal && !step_active {
            let signals = ChartSignals {
                eff: eff_signal,
                conv: conv_signal,
                conv_measured_shift,
                residual_material: signal_residual,
            };
            self.attribute_drift(cfg, unit, &b, now, signals);
        }
        // 3. Hysteresis: conditions clear after clean blocks.
        // An active instrument step (a thermometer or meter offset) is taken out of the residual
        // before judging whether a process condition has cleared: otherwise a drift alert raised
        // before the step could never clear while the instrument alert stands.
        let step_offset: f64 = self.active.iter().filter_map(Active::step_k).sum();
        let resid_ok = ((rec.residual - step_offset - b.mu) / b.sigma).abs() < cfg.clear_z;
        // Heater effectiveness and apparent conversion are computed from the same measurements,
        // so they carry the instrument's offset too: while a step stands, only the corrected
        // residual can tell that a process condition is over.
        let eff_ok = step_offset != 0.0 || ze.is_none_or(|v| v.abs() < cfg.clear_z);
        let conv_ok = step_offset != 0.0 || zc.is_none_or(|v| v.abs() < cfg.clear_z);
        let mut cleared = false;
        let level = rec.residual;
        for a in &mut self.active {
            let num = |k: &str| a.evidence.get(k).and_then(serde_json::Value::as_f64);
            let ok = match a.cause {
                Cause::HeaterFouling => eff_ok && resid_ok,
                // With an analyzer, the measured conversion decides, with a deadband below the
                // level a chart may raise at (clear_z): back within clear_z − 1 σ.
                Cause::ConversionDrift => match (rec.conv_measured, b.conv_measured) {
                    (Some(x), Some((m, sd))) => {
                        ((x - m) / sd).abs() < (cfg.clear_z - 1.0).max(1.0) && resid_ok
                    }
                    _ => conv_ok && resid_ok,
                },
                Cause::InstrumentFault if a.subject.ends_with(":stuck") => false,
                // A step clears when the residual is back near where it was before the step
                // (not when it merely looks ordinary against the baseline's scatter).
                Cause::InstrumentFault => match (num("residual_k"), num("step_k")) {
                    (Some(after), Some(step)) => (level - (after - step)).abs() < step.abs() / 3.0,
                    _ => resid_ok,
                },
                _ => resid_ok,
            };
            a.clean = if ok { a.clean + 1 } else { 0 };
            cleared |= a.clean >= cfg.clear_blocks;
        }
        if cleared {
            self.active.retain(|a| a.clean < cfg.clear_blocks);
            if !self.active.iter().any(|a| {
                matches!(
                    a.cause,
                    Cause::HeaterFouling | Cause::ConversionDrift | Cause::Undetermined | Cause::HeatLoss
                )
            }) {
                self.episode_ms = None;
            }
            if self.active.is_empty() {
                for c in [&mut self.resid, &mut self.eff, &mut self.conv, &mut self.conv_measured]
                    .into_iter()
                    .flatten()
                {
                    c.restart();
                }
            }
        }
        if self.active.iter().any(|a| a.cause == Cause::HeaterFouling) || eff_signal.is_some() {
            self.trend = self.fit_trend(cfg, now);
        }
    }

    /// A step: the residual moved away from its baseline at one moment and stayed there.
    /// Compares the median of the last 10 intervals with the median of the 20 before; both
    /// windows must be quiet. If the prediction did not move, the thermometer moved on its own;
    /// if the measurement did not move, an input meter stepped that the plant did not follow.
    fn step_check(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        e: &Evaluation,
        pred: f64,
        meas: f64,
        r: f64,
    ) {
        let Some(b) = self.baseline.as_ref() else { return };
        push_bounded(&mut self.steps, (e.end_ms, r, pred, meas, e.signals.tag_values_si.clone()), 30);
        if self.steps.len() < 30 {
            return;
        }
        let col = |f: &dyn Fn(&StepRow) -> f64, range: std::ops::Range<usize>| -> Vec<f64> {
            self.steps.range(range).map(f).collect()
        };
        let (rb, ra) = (col(&|x| x.1, 0..20), col(&|x| x.1, 20..30));
        let (mb, ma) = (stats::median(&rb), stats::median(&ra));
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
            return;
        }
        let quiet = stats::mad_sigma(&rb) <= 3.0 * sig_i && stats::mad_sigma(&ra) <= 3.0 * sig_i;
        let away = (ma - b.mu).abs() > (mb - b.mu).abs();
        if !quiet || !away {
            return;
        }
        let dp = stats::median(&col(&|x| x.2, 20..30)) - stats::median(&col(&|x| x.2, 0..20));
        let dm = stats::median(&col(&|x| x.3, 20..30)) - stats::median(&col(&|x| x.3, 0..20));
        // Which inputs changed across the step, in units of their block scatter, and is any
        // of them frozen (no noise in the after-window although the baseline saw noise)?
        let mut moved: Option<(usize, f64)> = None;
        let mut frozen: Option<usize> = None;
        for (i, tag) in unit.tags.iter().enumerate() {
            if i == unit.effluent_temperature || tag.kind != TagKind::Continuous {
                continue;
            }
            let before: Vec<f64> =
                self.steps.range(0..20).filter_map(|x| x.4.get(i).copied().flatten()).collect();
            let after: Vec<f64> =
                self.steps.range(20..30).filter_map(|x| x.4.get(i).copied().flatten()).collect();
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
            if d.abs() >= 6.0 && moved.is_none_or(|(_, v)| d.abs() > v.abs()) {
                moved = Some((i, d));
            }
        }
        // Where is the change, and which side made it? A thermometer fault moves the
        // measurement within an interval or two while the (compensated) prediction stays put;
        // an input — a stepping meter, or an analyzer whose held value updates — moves the
        // prediction instead; a real process change moves both together (and, with the
        // dynamics compensated, not abruptly). The change over a point is the difference of the
        // medians of the three intervals after and the three before it (robust to the noise of
        // single intervals; a step inside an interval is still seen whole), at the point where
        // the residual changes most.
        let rs: Vec<f64> = self.steps.iter().map(|x| x.1).collect();
        let ms: Vec<f64> = self.steps.iter().map(|x| x.3).collect();
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
        let lag_share = 1.0 - self.fopdt.a * self.fopdt.a;
        // A residual change that is a small part of a concurrent prediction move is more
        // likely a gain error of the model (a fouled heater's deficit grows with the duty, a
        // meter's span) than an instrument offset.
        let sharp_measurement = lag_share <= 0.6
            && jr2.signum() == dr.signum()
            && jr2.abs() >= 0.85 * dr.abs()
            && dr.abs() >= 0.25 * dp.abs();
        let measurement_side = abrupt && ((jm - jr).abs() <= 0.4 * jr.abs() || sharp_measurement);
        // A meter fault moves the prediction by the residual's step (the other way) while the
        // measurement stays: a step much smaller than the prediction change is something else.
        let meter_consistent = (dr + dp).abs() <= 0.5 * dr.abs();
        let suspect = match (frozen, moved) {
            (Some(i), _) => {
                Some((i, format!("{} shows no noise at all since then (frozen)", unit.tags[i].name)))
            }
            _ if measurement_side => Some((
                unit.effluent_temperature,
                if moved.is_none() {
                    "no input moved".to_string()
                } else {
                    "the measurement jumped within two intervals, faster than the prediction can move"
                        .to_string()
                },
            )),
            // An input meter that stepped while the plant temperature did not follow.
            (None, Some((i, d))) if abrupt && meter_consistent && dm.abs() < dr.abs() / 3.0 => Some((
                i,
                format!(
                    "{} moved by {d:+.0} times its noise while the plant temperature did not follow",
                    unit.tags[i].name
                ),
            )),
            // A gradual change, an operating change, or the prediction stepping on an analyzer
            // update: not an instrument step (the drift charts judge what persists).
            _ => None,
        };
        let Some((tag_idx, why)) = suspect else { return };
        // A frozen input explains a residual that moves while the prediction does not.
        if tag_idx == unit.effluent_temperature && self.active.iter().any(|a| a.subject.ends_with(":stuck")) {
            self.steps.clear();
            return;
        }
        let tag = &unit.tags[tag_idx];
        if self.active.iter().any(|a| a.cause == Cause::InstrumentFault && a.subject == tag.name) {
            return;
        }
        let when = crate::core::calendar::rfc3339(self.steps[20].0, &unit.time_zone);
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
        self.raise(Cause::InstrumentFault, &name, Severity::Medium, message, dr.abs(), e.end_ms, evidence);
        self.steps.clear();
    }

    fn window(&self, span_ms: i64, now: i64) -> Vec<&BlockRecord> {
        self.history.iter().filter(|h| h.end_ms > now - span_ms).collect()
    }

    fn attribute_drift(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        b: &Baseline,
        now: i64,
        signals: ChartSignals,
    ) {
        let ChartSignals { eff: eff_signal, conv: conv_signal, conv_measured_shift, residual_material } =
            signals;
        let last = self.history.back().cloned();
        let Some(last) = last else { return };
        // An active instrument fault (the thermometer, or a frozen input) already explains the
        // deviation: no second explanation of the same thing.
        let thermometer = &unit.tags[unit.effluent_temperature].name;
        if self.active.iter().any(|a| {
            a.cause == Cause::InstrumentFault && (a.subject == *thermometer || a.subject.ends_with(":stuck"))
        }) {
            return;
        }
        let dev_k = last.residual - b.mu;
        // Heat loss: the residual follows the ambient temperature. Both series are detrended
        // first (a fault's slow drift correlates with a daily cycle by chance), the window must
        // hold at least a day and a half, and the sign must be physical: a warmer ambient loses
        // less heat, so the residual rises with it.
        // Only the current deviation episode: blocks from before it dilute the relation.
        let span = match self.episode_ms {
            Some(ep) => cfg.ambient_window_ms.min(now - ep),
            None => cfg.ambient_window_ms,
        };
        let amb = self.window(span, now);
        let rows: Vec<(f64, f64, f64, Option<f64>)> = amb
            .iter()
            .filter_map(|h| h.ambient.map(|a| (h.end_ms as f64 / 3.6e6, h.residual, a, h.duty)))
            .collect();
        let span_h = rows.last().map_or(0.0, |l| l.0) - rows.first().map_or(0.0, |f| f.0);
        if rows.len() >= 24 && span_h >= 36.0 {
            // Partial correlation: time and (when reported) the duty are taken out of both
            // series first. A fouling deficit scales with the duty, and where the duty follows
            // the weather (colder feed, more steam) it would otherwise pass for a heat loss.
            let t: Vec<f64> = rows.iter().map(|r| r.0).collect();
            let duty: Option<Vec<f64>> = rows.iter().map(|r| r.3).collect();
            let mut covariates: Vec<&[f64]> = vec![&t];
            if let Some(q) = duty.as_deref().filter(|q| stats::std_dev(q) > 1e-6 * stats::mean(q).abs()) {
                covariates.push(q);
            }
            let detrend = |v: Vec<f64>| -> Vec<f64> { partial_out(&v, &covariates).unwrap_or(v) };
            let ra = detrend(rows.iter().map(|r| r.1).collect());
            let aa = detrend(rows.iter().map(|r| r.2).collect());
            let rho = stats::correlation(&ra, &aa);
            let slope = LineFit::fit(&aa, &ra).map_or(0.0, |f| f.b);
            // Physical consistency: an extra loss UA·(T − T_amb) shifts the residual by
            // −UA·(T − T_amb)/C and makes it rise by UA/C per kelvin of ambient, so the shift
            // must be about −slope·(T − T_amb). A correlation that explains a small part of the
            // deviation (or has the wrong sign) is not a heat loss.
            let te = unit.effluent_temperature;
            let gaps: Vec<f64> =
                amb.iter().filter_map(|h| Some(h.tags.get(te).copied().flatten()? - h.ambient?)).collect();
            let expected_dev = -slope * stats::mean(&gaps);
            let ratio = if expected_dev.abs() > 1e-9 { dev_k / expected_dev } else { 0.0 };
            let consistent = !gaps.is_empty() && (0.5..=2.0).contains(&ratio);
            if stats::std_dev(&aa) > 1.0 && rho > cfg.ambient_correlation && consistent {
                let message = format!(
                    "The residual follows the ambient temperature (correlation {rho:+.2} over {:.1} days, {slope:+.3} K per K of ambient): heat is being lost to the surroundings; check the insulation and cladding of the heater and reactor.",
                    span_h / 24.0
                );
                let evidence = ev(&[
                    ("correlation", round(rho, 3)),
                    ("k_per_k_ambient", round(slope, 4)),
                    ("residual_k", round(last.residual, 3)),
                    ("baseline_k", round(b.mu, 3)),
                ]);
                self.raise(Cause::HeatLoss, "ambient", Severity::Low, message, rho.abs(), now, evidence);
                return;
            }
        }
        let eff_drop = match (last.eff, b.eff) {
            (Some(x), Some((m, s))) => (x - m) / s <= -cfg.clear_z || eff_signal == Some(Side::Down),
            _ => false,
        };
        // With a measured conversion the chemistry side is observed directly.
        if let (Some(xm), Some((m, s))) = (last.conv_measured, b.conv_measured) {
            let zx = (xm - m) / s;
            if zx.abs() >= cfg.enter_z || (conv_measured_shift && zx.abs() >= cfg.clear_z) {
                self.raise_conversion(unit, b, now, xm - m, "the conversion analyzer confirms it", zx);
            } else if !residual_material {
                // Only the conversion charts spoke, and the conversion is back inside its band
                // now: nothing to explain in the energy balance.
            } else if eff_drop {
                self.raise_fouling(cfg, unit, b, now, "the measured conversion is steady");
            } else {
                self.raise_undetermined(unit, b, now, dev_k, "the measured conversion is steady and the heater effectiveness too: check the instruments and the heat loss");
            }
            return;
        }
        // Without an effluent analyzer: a fouling deficit scales with the duty, a conversion
        // deficit with the key reactant's feed. Regress the energy residual on both.
        // Only the current episode: data from before it (another cause, since cleared) would
        // blur the regression.
        let since = self.episode_ms.unwrap_or(i64::MIN).max(now - cfg.separation_window_ms);
        let win: Vec<&BlockRecord> = self.history.iter().filter(|h| h.end_ms > since).collect();
        let rows: Vec<(f64, f64, f64, f64)> = win
            .iter()
            .filter_map(|h| {
                Some(((h.residual - b.mu) * h.heat_capacity?, h.duty?, h.key_feed?, h.end_ms as f64 / 3.6e6))
            })
            .collect();
        let verdict = if rows.len() >= 12 {
            // A fouling deficit is a fixed fraction of the duty, a conversion deficit a fixed
            // fraction of the key reactant's feed, whatever the operating point. So the
            // deficit per unit of duty stays put when the feed-to-duty ratio moves if the
            // heater is fouling, and follows that ratio if the conversion changed (and the
            // other way round for the deficit per unit of feed). Only the ratio's movement
            // separates them: if the duty followed the feed, nothing can. Both fits carry a
            // time term for the fault's growth; their t-statistics are deflated for the
            // autocorrelation of the fit residuals (effective sample size).
            let y: Vec<f64> = rows.iter().map(|r| r.0).collect();
            let q: Vec<f64> = rows.iter().map(|r| r.1).collect();
            let f: Vec<f64> = rows.iter().map(|r| r.2).collect();
            let t: Vec<f64> = rows.iter().map(|r| r.3).collect();
            let cv = |v: &[f64]| stats::std_dev(v) / stats::mean(v).abs().max(1e-12);
            let u: Vec<f64> = f.iter().zip(&q).map(|(f, q)| f / q).collect();
            if q.iter().chain(&f).any(|v| *v <= 0.0) {
                Err("the duty or the feed rate was not positive throughout")
            } else if cv(&u) < 0.03 {
                Err("the duty followed the feed rate (their ratio hardly varied)")
            } else {
                let per_duty: Vec<f64> = y.iter().zip(&q).map(|(y, q)| y / q).collect();
                let per_feed: Vec<f64> = y.iter().zip(&f).map(|(y, f)| y / f).collect();
                let inv_u: Vec<f64> = u.iter().map(|u| 1.0 / u).collect();
                match (deflated_slope_t(&per_duty, &u, &t), deflated_slope_t(&per_feed, &inv_u, &t)) {
                    (Some(te), Some(tf)) if te.abs() < 1.5 && tf.abs() >= 5.0 => Ok(Cause::HeaterFouling),
                    (Some(te), Some(tf)) if tf.abs() < 1.5 && te.abs() >= 5.0 => Ok(Cause::ConversionDrift),
                    _ => Err("the deficit is explained equally well by the duty and by the feed rate"),
                }
            }
        } else {
            Err("there are too few steady blocks since the change")
        };
        // A cause is named only when three evaluations in a row (three blocks) agree.
        let verdict = match verdict {
            Ok(c) => {
                let n = match self.verdict_run {
                    Some((prev, n)) if prev == c => n + 1,
                    _ => 1,
                };
                self.verdict_run = Some((c, n));
                if n >= 3 {
                    Ok(c)
                } else {
                    Err("the separation of heater fouling from a conversion change is not yet stable")
                }
            }
            Err(e) => {
                self.verdict_run = None;
                Err(e)
            }
        };
        // An attribution already made stands until the data positively support the other cause.
        let attributed = self
            .active
            .iter()
            .find(|a| matches!(a.cause, Cause::HeaterFouling | Cause::ConversionDrift))
            .map(|a| a.cause);
        let verdict = match (verdict, attributed) {
            (Err(_), Some(c)) => Ok(c),
            (v, _) => v,
        };
        // A fouled heater delivers less heat: it cannot make the effluent hotter.
        let verdict = match verdict {
            Ok(Cause::HeaterFouling) if dev_k > 0.0 => {
                Err("the effluent runs hotter than expected, which a fouled heater cannot cause")
            }
            v => v,
        };
        match verdict {
            Ok(Cause::HeaterFouling) => self.raise_fouling(
                cfg,
                unit,
                b,
                now,
                "the energy deficit scales with the duty, not with the feed rate",
            ),
            Ok(_) => {
                let dx = match (last.conv, b.conv) {
                    (Some(x), Some((m, _))) => x - m,
                    _ => 0.0,
                };
                let zx = match (last.conv, b.conv) {
                    (Some(x), Some((m, s))) => (x - m) / s,
                    _ => 0.0,
                };
                self.raise_conversion(
                    unit,
                    b,
                    now,
                    dx,
                    "the energy deficit scales with the key reactant's feed, not with the duty",
                    zx,
                );
            }
            Err(why)
                if eff_drop
                    || conv_signal.is_some()
                    || eff_signal.is_some()
                    || dev_k.abs() / b.sigma >= cfg.enter_z =>
            {
                self.raise_undetermined(unit, b, now, dev_k, why);
            }
            Err(_) => {}
        }
    }

    fn raise_fouling(&mut self, cfg: &MonitorConfig, unit: &UnitSpec, b: &Baseline, now: i64, why: &str) {
        let Some(last) = self.history.back().cloned() else { return };
        let (Some(eff), Some((m, _))) = (last.eff, b.eff) else { return };
        let loss = (m - eff) / m * 100.0;
        self.trend = self.fit_trend(cfg, now);
        let projection = match &self.trend {
            Some(t) => match (t.limit_ms, t.range_ms) {
                (Some(at), Some((lo, hi))) => format!(
                    "; at the fitted rate ({:+.2} %/day, {} model) it reaches the cleaning limit {:.0} % on {} (between {} and {})",
                    t.slope_per_day * 100.0,
                    t.model,
                    cfg.effectiveness_limit * 100.0,
                    day(at, unit),
                    day(lo, unit),
                    day(hi, unit)
                ),
                (None, _) if t.asymptote.is_some() => format!(
                    "; the fouling is levelling off near {:.1} % and is not expected to reach the cleaning limit",
                    t.asymptote.unwrap_or(0.0) * 100.0
                ),
                _ => "; no significant trend yet for a projection".to_string(),
            },
            None => "; not enough days yet for a projection".to_string(),
        };
        let message = format!(
            "Heater effectiveness is {:.1} % ({loss:.1} % below its baseline {:.1} %) and {why}: the heater is fouling{projection}. Plan an inspection or cleaning of {}.",
            eff * 100.0,
            m * 100.0,
            unit.tags.iter().find(|t| t.role == "heater duty").map_or("the heater", |t| t.name.as_str())
        );
        let mut evidence = ev(&[
            ("effectiveness", round(eff, 4)),
            ("baseline_effectiveness", round(m, 4)),
            ("loss_pct", round(loss, 2)),
            ("residual_k", round(last.residual, 3)),
            ("baseline_k", round(b.mu, 3)),
            ("z", round(last.z, 2)),
        ]);
        if let Some(t) = &self.trend {
            evidence.insert("trend_pct_per_day".into(), round(t.slope_per_day * 100.0, 3));
            evidence.insert("trend_t".into(), round(t.t, 2));
            evidence.insert("trend_model".into(), t.model.clone().into());
            if let Some(at) = t.limit_ms {
                evidence.insert("projected_limit_date".into(), day(at, unit).into());
            }
            if let Some((lo, hi)) = t.range_ms {
                evidence
                    .insert("projected_range".into(), format!("{}/{}", day(lo, unit), day(hi, unit)).into());
            }
        }
        let severity = match self.trend.as_ref().and_then(|t| t.limit_ms) {
            Some(at) if at - now < 7 * 86_400_000 => Severity::Medium,
            _ => Severity::Low,
        };
        self.raise(Cause::HeaterFouling, "heater", severity, message, loss, now, evidence);
    }

    fn raise_conversion(&mut self, unit: &UnitSpec, b: &Baseline, now: i64, dx: f64, why: &str, zx: f64) {
        let Some(last) = self.history.back().cloned() else { return };
        let key = unit
            .apparent_reaction
            .and_then(|r| unit.system.reactions.get(r))
            .map_or("key reactant".to_string(), |r| unit.system.components[r.key].id.clone());
        let base = b.conv.or(b.conv_measured).map_or(0.0, |c| c.0);
        let message = format!(
            "The {key} conversion has drifted by {dx:+.3} (from {base:.3}) and {why}: check the catalyst activity, residence time and reactor temperature profile; a lab analysis of the effluent would confirm.",
        );
        let evidence = ev(&[
            ("conversion_change", round(dx, 4)),
            ("baseline_conversion", round(base, 4)),
            ("z_conversion", round(zx, 2)),
            ("residual_k", round(last.residual, 3)),
            ("baseline_k", round(b.mu, 3)),
        ]);
        self.raise(Cause::ConversionDrift, &key, Severity::Medium, message, dx.abs(), now, evidence);
    }

    fn raise_undetermined(&mut self, unit: &UnitSpec, b: &Baseline, now: i64, dev_k: f64, why: &str) {
        let Some(last) = self.history.back().cloned() else { return };
        let dir = if dev_k < 0.0 { "cooler" } else { "hotter" };
        let message = format!(
            "The effluent runs {:.2} K {dir} than the model expects ({:+.1} σ), but {why}, so the data cannot tell heater fouling from a conversion change; a lab analysis of the effluent (conversion) would settle it.",
            dev_k.abs(),
            last.z
        );
        let evidence = ev(&[
            ("residual_k", round(last.residual, 3)),
            ("baseline_k", round(b.mu, 3)),
            ("z", round(last.z, 2)),
        ]);
        let _ = unit;
        self.raise(
            Cause::Undetermined,
            "energy balance",
            Severity::Medium,
            message,
            dev_k.abs(),
            now,
            evidence,
        );
    }

    /// Effectiveness trend on points spaced `trend_point_ms` over the trend window, from a day
    /// before the current episode began (the decline, not the flat baseline before it).
    fn fit_trend(&self, cfg: &MonitorConfig, now: i64) -> Option<Trend> {
        let since = self
            .episode_ms
            .map_or(now - cfg.trend_window_ms, |e| (e - 86_400_000).max(now - cfg.trend_window_ms));
        let recs: Vec<&BlockRecord> = self.history.iter().filter(|h| h.end_ms > since).collect();
        let mut points: Vec<(i64, f64)> = Vec::new();
        let mut cur: Option<(i64, f64, usize)> = None;
        for h in recs {
            let Some(e) = h.eff else { continue };
            let slot = h.end_ms.div_euclid(cfg.trend_point_ms);
            match &mut cur {
                Some((s, sum, n)) if *s == slot => {
                    *sum += e;
                    *n += 1;
                }
                _ => {
                    if let Some((s, sum, n)) = cur.take() {
                        points.push(((s + 1) * cfg.trend_point_ms, sum / n as f64));
                    }
                    cur = Some((slot, e, 1));
                }
            }
        }
        if let Some((s, sum, n)) = cur {
            points.push(((s + 1) * cfg.trend_point_ms, sum / n as f64));
        }
        if points.len() < 6 {
            return None;
        }
        let day_ms = 86_400_000.0;
        let t: Vec<f64> = points.iter().map(|p| p.0 as f64 / day_ms).collect();
        let y: Vec<f64> = points.iter().map(|p| p.1).collect();
        let line = LineFit::fit(&t, &y)?;
        let now_d = now as f64 / day_ms;
        let mut trend = Trend {
            slope_per_day: line.b,
            t: line.t_stat(),
            model: "linear".into(),
            now: line.predict(now_d).0,
            limit_ms: None,
            range_ms: None,
            points: points.clone(),
            asymptote: None,
        };
        // Prefer the asymptotic model when it fits much better and has levelled off within
        // the data (Kern & Seaton 1959; before ~one time constant it cannot be told from a line).
        let sse_line = line.s2 * (line.n - 2) as f64;
        if let Some(a) = AsymptoticFit::fit(&t, &y) {
            let span = t[t.len() - 1] - t[0];
            if a.sse < 0.5 * sse_line && a.tc < 0.6 * span && a.amplitude > 0.0 {
                trend.model = "asymptotic".into();
                trend.asymptote = Some(a.asymptote());
                if a.asymptote() > cfg.effectiveness_limit {
                    return Some(trend);
                }
            }
        }
        if line.b < 0.0
            && trend.t.abs() >= cfg.trend_t_min
            && let Some((dt, sd)) = line.time_to(cfg.effectiveness_limit, now_d)
        {
            let at = now + (dt * day_ms) as i64;
            trend.limit_ms = Some(at);
            let lo = now + ((dt - 2.0 * sd).max(0.0) * day_ms) as i64;
            let hi = now + ((dt + 2.0 * sd) * day_ms) as i64;
            trend.range_ms = Some((lo, hi));
        }
        Some(trend)
    }
}

fn day(ms: i64, unit: &UnitSpec) -> String {
    crate::core::calendar::day_of(ms + 1, &unit.time_zone)
}

/// What is left of `y` after a least-squares fit on `xs` (with an intercept).
fn partial_out(y: &[f64], xs: &[&[f64]]) -> Option<Vec<f64>> {
    ols_residuals(y, xs).map(|(_, r)| r)
}

/// Least squares of `y` on `xs` (with an intercept): the t-statistics of the coefficients and
/// the residuals.
fn ols_residuals(y: &[f64], xs: &[&[f64]]) -> Option<(Vec<f64>, Vec<f64>)> {
    let (coef, ts) = stats::ols(y, xs)?;
    let n = xs.iter().map(|x| x.len()).min().unwrap_or(0).min(y.len());
    let my = stats::mean(&y[..n]);
    let mx: Vec<f64> = xs.iter().map(|x| stats::mean(&x[..n])).collect();
    let resid = (0..n)
        .map(|i| y[i] - my - xs.iter().zip(&coef).zip(&mx).map(|((x, c), m)| c * (x[i] - m)).sum::<f64>())
        .collect();
    Some((ts, resid))
}

/// The t-statistic of `x`'s coefficient in the least-squares fit of `y` on `x` and `t` (with an
/// intercept), deflated by √((1 − ρ)/(1 + ρ)) for the lag-1 autocorrelation ρ of the fit
/// residuals (effective sample size of autocorrelated errors).
fn deflated_slope_t(y: &[f64], x: &[f64], t: &[f64]) -> Option<f64> {
    let (ts, resid) = ols_residuals(y, &[x, t])?;
    let rho = stats::acf1(&resid).clamp(0.0, 0.95);
    Some(ts[0] * ((1.0 - rho) / (1.0 + rho)).sqrt())
}

fn push_bounded<T>(q: &mut VecDeque<T>, v: T, n: usize) {
    q.push_back(v);
    while q.len() > n {
        q.pop_front();
    }
}
