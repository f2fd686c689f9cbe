//! The monitor of one unit as a state machine over the per-interval evaluations: it
//! compensates the prediction's dynamics, runs the instrument checks, detects steady state,
//! accumulates blocks, learns the baseline from the first steady ones and hands the later
//! ones to the attribution.
//!
//! States (shown in the soft-tag `monitor_state` column):
//! * `learning`: steady data are collected for the baseline;
//! * `watching`: charts run and alerts can be raised;
//! * `unsteady`: inputs are moving; statistics are frozen, only a gross check runs;
//! * `settling`: steady again, waiting dead time + 3 lag constants before resuming;
//! * `paused`: the unit is down, the feed is below its minimum, or a key input is unusable.

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

use super::active::Held;
use super::analyzers::Analyzers;
use super::attribution::{Attribution, BlockRecord, Charts, Watch};
use super::baseline::{Baseline, LearnRow};
use super::dynamics::Fopdt;
use super::instruments::{Instruments, PendingMeter, Reading, StepWindow};
use super::settings::MonitorConfig;
use super::ssd::{Floor, SteadyState};
use super::trend::Trend;
use crate::core::effluent::ExtentEstimate;
use crate::core::flags::Flag;
use crate::core::model::Evaluation;
use crate::core::spec::UnitSpec;
use crate::core::vocabulary::Condition;

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

    /// The state a soft-tag column names.
    pub fn parse(text: &str) -> Option<MonitorState> {
        [
            MonitorState::Learning,
            MonitorState::Watching,
            MonitorState::Unsteady,
            MonitorState::Settling,
            MonitorState::Paused,
        ]
        .into_iter()
        .find(|s| s.as_str() == text)
    }
}

/// The sums of the block being accumulated.
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

impl Acc {
    /// Add one steady interval with residual `r`.
    fn add(&mut self, e: &Evaluation, r: f64) {
        if self.start_ms.is_none() {
            self.start_ms = Some(e.start_ms);
            self.tags = vec![(0.0, 0); e.signals.tag_values_si.len()];
        }
        self.n += 1;
        self.residual += r;
        add(&mut self.eff, e.effectiveness);
        add(&mut self.conv, e.apparent_conversion);
        add(&mut self.conv_measured, e.signals.measured_conversion);
        add(&mut self.duty, e.signals.duty_w);
        add(&mut self.key_feed, e.signals.key_feed_mol_s);
        add(&mut self.heat_capacity, e.signals.heat_capacity_w_k);
        add(&mut self.ambient, e.signals.ambient_k);
        for (t, v) in self.tags.iter_mut().zip(&e.signals.tag_values_si) {
            add(t, *v);
        }
    }

    /// The completed block, ending at `end_ms`.
    fn record(&self, end_ms: i64) -> BlockRecord {
        let n = self.n as f64;
        BlockRecord {
            end_ms,
            residual: self.residual / n,
            z: 0.0,
            eff: avg(self.eff),
            conv: avg(self.conv),
            conv_measured: avg(self.conv_measured),
            duty: avg(self.duty),
            key_feed: avg(self.key_feed),
            heat_capacity: avg(self.heat_capacity),
            ambient: avg(self.ambient),
            tags: self.tags.iter().map(|t| avg(*t)).collect(),
        }
    }
}

/// A silence longer than this many intervals is a gap in the data.
const GAP_INTERVALS: i64 = 3;

/// The monitor of one unit.
///
/// Its serialized form is part of the checkpoint: the grouped parts are flattened, so that the
/// fields stand where and as they always did.
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
    #[serde(flatten)]
    charts: Charts,
    /// Completed blocks while watching (bounded). Not part of the monitor's serialized state:
    /// the service keeps it in a journal of its own (`sinks::journal`); a state written before
    /// that still carries it and is read with it.
    #[serde(default, skip_serializing)]
    pub history: VecDeque<BlockRecord>,
    active: Held,
    #[serde(flatten)]
    instruments: Instruments,
    #[serde(flatten)]
    attribution: Attribution,
    /// Recent intervals for the step test: (end, residual, predicted, measured, tag values).
    steps: StepWindow,
    /// The last computed effectiveness trend, for reports.
    pub trend: Option<Trend>,
    /// End of the last interval with a prediction, ms (a longer silence is a data gap).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    last_end_ms: Option<i64>,
    /// Update cadence and freezes of the unit's analyzers.
    #[serde(default, skip_serializing_if = "Analyzers::is_empty")]
    analyzers: Analyzers,
    /// The effluent analyzer's smoothed conversions.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    extent_estimate: Option<ExtentEstimate>,
    /// A meter step waiting for the plant's answer.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pending_meter: Option<PendingMeter>,
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
            charts: Charts::default(),
            history: VecDeque::new(),
            active: Held::default(),
            instruments: Instruments::default(),
            attribution: Attribution::default(),
            steps: StepWindow::default(),
            trend: None,
            last_end_ms: None,
            analyzers: Analyzers::default(),
            extent_estimate: None,
            pending_meter: None,
        }
    }

    /// The effluent analyzer's smoothed conversions, for the next interval's balance.
    pub fn extent_estimate(&self) -> Option<&ExtentEstimate> {
        self.extent_estimate.as_ref()
    }

    /// Forget the baseline and learn again (after maintenance); audited by the caller.
    pub fn rebaseline(&mut self) {
        self.baseline = None;
        self.learning.clear();
        self.charts = Charts::default();
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
        if let Some(estimate) = e.signals.extent_estimate.take() {
            self.extent_estimate = Some(estimate);
        }
        // An effluent analysis describes the reactor's contents, which lag the feed by the
        // residence time: it is tested against the current feed only at steady state.
        let steady = matches!(self.state, MonitorState::Learning | MonitorState::Watching);
        self.analyzers.fit(unit);
        self.analyzers.judge_results(unit, e, steady, &mut self.active);
        let (Some(pred_ss), Some(meas)) = (e.predicted_k, e.measured_k) else {
            self.pause();
            out.state = self.state;
            self.active.emit(&mut out.conditions);
            return out;
        };
        // After a gap in the data nothing carries across it: the lag filter, the instrument
        // windows and the charts start again from the first intervals after it, and the
        // monitor settles as after any other pause.
        if self.last_end_ms.is_some_and(|t| e.end_ms - t > GAP_INTERVALS * unit.interval_ms) {
            self.pause();
        }
        self.last_end_ms = Some(e.end_ms);
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
            // What was found before the unit went down still stands (a fouled heater, a
            // frozen analyzer): held, not cleared by the shutdown.
            self.active.emit(&mut out.conditions);
            return out;
        }
        let reading = Reading { end_ms: e.end_ms, pred: pred_ss, meas, r, tags: &e.signals.tag_values_si };
        let baseline = self.baseline.as_ref();
        self.instruments.check(cfg, unit, baseline, &reading, &mut self.active, &mut out.flags);
        self.steps.check(
            cfg,
            unit,
            baseline,
            self.fopdt.a,
            &reading,
            &mut self.pending_meter,
            &mut self.active,
        );
        self.analyzers.check(
            unit,
            e.end_ms,
            &e.signals.tag_values_si,
            &e.signals.tag_ranges_si,
            &mut self.active,
        );

        if !self.steady(cfg, e, meas, r) {
            // Statistics freeze; a partial block is kept (the residual of a good model is
            // stationary across operating changes) and completes with later steady intervals.
            self.state = MonitorState::Unsteady;
            self.settle_until_ms = None;
            out.flags.push(Flag::Unsteady);
            self.gross_check(cfg, r, &mut out);
            out.state = self.state;
            self.active.emit(&mut out.conditions);
            return out;
        }
        if self.settling(cfg, e.end_ms) {
            self.state = MonitorState::Settling;
            out.state = self.state;
            self.active.emit(&mut out.conditions);
            return out;
        }
        self.state = if self.baseline.is_some() { MonitorState::Watching } else { MonitorState::Learning };
        self.accumulate(cfg, unit, e, r, feed, &mut out);
        if e.u_pred_k.is_some_and(|u| u > cfg.max_prediction_uncertainty) {
            out.flags.push(Flag::UncertainInputs);
        }
        // Held conditions stand until their own checks clear them: an interval with too
        // uncertain inputs judges nothing new, but it does not end an alert either.
        self.active.emit(&mut out.conditions);
        out.state = self.state;
        out
    }

    /// Steady state on the key signals and the residual.
    fn steady(&mut self, cfg: &MonitorConfig, e: &Evaluation, meas: f64, r: f64) -> bool {
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
        self.ssd.step_floored(&xs, &floors, &cfg.ssd)
    }

    /// After an unsteady or paused spell, wait dead time + 3 lag constants; returns whether
    /// the monitor is still settling at `end_ms`. When the wait is over the charts resume with
    /// a head start: a shift that persisted through the transient shows fast.
    fn settling(&mut self, cfg: &MonitorConfig, end_ms: i64) -> bool {
        if matches!(self.state, MonitorState::Unsteady | MonitorState::Paused) {
            let settle = cfg.dead_time_ms + 3 * cfg.lag_ms;
            self.settle_until_ms = Some(end_ms + settle);
        }
        let Some(until) = self.settle_until_ms else { return false };
        if end_ms < until {
            return true;
        }
        self.settle_until_ms = None;
        self.charts.restart();
        false
    }

    /// Add a steady interval to the block (and, before the baseline, to the learning data);
    /// a completed block is handed on.
    fn accumulate(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        e: &Evaluation,
        r: f64,
        feed: f64,
        out: &mut MonitorOutput,
    ) {
        self.acc.add(e, r);
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
        if self.acc.n >= self.block_len(cfg) {
            let acc = std::mem::take(&mut self.acc);
            self.end_block(cfg, unit, &acc, e.end_ms, out);
        }
    }

    fn pause(&mut self) {
        self.state = MonitorState::Paused;
        self.acc = Acc::default();
        self.fopdt.reset();
        self.settle_until_ms = None;
        // The step and flatline windows compare intervals with each other: never across a
        // pause (the plant may come back at another operating point).
        self.steps = StepWindow::default();
        self.pending_meter = None;
        self.instruments.forget_windows();
        self.analyzers.forget_changes();
    }

    fn gross_check(&mut self, cfg: &MonitorConfig, r: f64, out: &mut MonitorOutput) {
        let Some(b) = &self.baseline else { return };
        let z = (r - b.mu) / b.sigma_interval.max(1e-3);
        if z.abs() > cfg.gross_z {
            out.flags.push(Flag::GrossResidual);
        }
    }

    /// A completed block: learning data until there are enough for the baseline, then a
    /// block for the attribution.
    fn end_block(
        &mut self,
        cfg: &MonitorConfig,
        unit: &UnitSpec,
        acc: &Acc,
        end_ms: i64,
        out: &mut MonitorOutput,
    ) {
        let Some(b) = &self.baseline else {
            let need = cfg.baseline_blocks * cfg.block_intervals;
            if self.learning.len() >= need {
                self.learn(cfg, unit, end_ms, out);
            }
            return;
        };
        let mut watch = Watch {
            cfg,
            unit,
            b,
            charts: &mut self.charts,
            history: &mut self.history,
            active: &mut self.active,
            attribution: &mut self.attribution,
            trend: &mut self.trend,
        };
        watch.watch_block(acc.record(end_ms));
    }

    fn learn(&mut self, cfg: &MonitorConfig, unit: &UnitSpec, now: i64, out: &mut MonitorOutput) {
        let baseline = Baseline::learn(cfg, unit, &self.learning, now);
        out.note = Some(baseline.note(cfg));
        self.charts = Charts::new(&baseline, cfg);
        self.baseline = Some(baseline);
        self.learning.clear();
        self.state = MonitorState::Watching;
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::core::monitor::tests::{MIN, Point, T0, evaluation, fixture_monitor, unit};
    use crate::rng::Rng;

    /// Dead time 2 min and lag 1 min: settling takes 2 + 3 × 1 = 5 one-minute intervals.
    fn cfg() -> MonitorConfig {
        MonitorConfig {
            block_intervals: 5,
            baseline_blocks: 12,
            dead_time_ms: 2 * MIN,
            lag_ms: MIN,
            ..MonitorConfig::default()
        }
    }

    /// A plant whose effluent answers the prediction with the configured dead time and lag,
    /// measured with noise: what the monitor saw, interval by interval.
    struct Plant {
        unit: UnitSpec,
        cfg: MonitorConfig,
        monitor: Monitor,
        dynamics: Fopdt,
        rng: Rng,
        k: i64,
    }

    impl Plant {
        fn new() -> Plant {
            let (unit, cfg) = (unit(), cfg());
            let monitor = Monitor::new(&cfg, unit.interval_ms);
            let dynamics = Fopdt::new(cfg.dead_time_ms, cfg.lag_ms, unit.interval_ms);
            Plant { unit, cfg, monitor, dynamics, rng: Rng::new(11), k: 0 }
        }

        /// One interval at `p` (its measurement follows the plant's dynamics).
        fn run(&mut self, p: Point) -> (Evaluation, MonitorOutput) {
            let p = Point { meas: self.dynamics.step(p.pred), ..p }.noisy(&mut self.rng);
            let mut e = evaluation(self.k, p);
            self.k += 1;
            let out = self.monitor.step(&self.cfg, &self.unit, &mut e);
            (e, out)
        }

        fn states(&mut self, p: Point, n: usize) -> Vec<MonitorState> {
            (0..n).map(|_| self.run(p).1.state).collect()
        }
    }

    /// Consecutive runs of equal states.
    fn runs(states: &[MonitorState]) -> Vec<(MonitorState, usize)> {
        let mut out: Vec<(MonitorState, usize)> = Vec::new();
        for s in states {
            match out.last_mut() {
                Some((last, n)) if last == s => *n += 1,
                _ => out.push((*s, 1)),
            }
        }
        out
    }

    #[test]
    fn unsteady_then_settling_for_the_dead_time_and_three_lags_then_learning_then_watching() {
        let mut plant = Plant::new();
        let nominal = Point::nominal();
        let states = plant.states(nominal, 100);
        let r = runs(&states);
        assert_eq!(r[0].0, MonitorState::Unsteady, "{r:?}");
        assert_eq!(r[1], (MonitorState::Settling, 5), "{r:?}");
        // The baseline needs 12 blocks of 5 steady intervals; it is learned at the 60th.
        assert_eq!(r[2], (MonitorState::Learning, 59), "{r:?}");
        assert_eq!(r[3].0, MonitorState::Watching, "{r:?}");
        assert_eq!(r.len(), 4, "{r:?}");
        let b = plant.monitor.baseline.as_ref().unwrap();
        assert_eq!(b.block, 5);

        // A feed step: the inputs move, the monitor waits for steady state and the dynamics.
        let stepped = Point { feed: 11.0, pred: nominal.feed_t + nominal.duty / (11.0 * 75.35), ..nominal };
        let (e, _) = plant.run(stepped);
        // The prediction is compensated: the dead time holds the old value for two intervals,
        // then the lag lets 1 − e^(−1) of the step through.
        assert!((e.predicted_k.unwrap() - nominal.pred).abs() < 1e-9);
        let (e, _) = plant.run(stepped);
        assert!((e.predicted_k.unwrap() - nominal.pred).abs() < 1e-9);
        let (e, _) = plant.run(stepped);
        let a = (-1.0f64).exp();
        let want = a * nominal.pred + (1.0 - a) * stepped.pred;
        assert!((e.predicted_k.unwrap() - want).abs() < 1e-9, "{:?} vs {want}", e.predicted_k);
        let states = plant.states(stepped, 200);
        let r = runs(&states);
        assert_eq!(r[0].0, MonitorState::Unsteady, "{r:?}");
        assert_eq!(r[1], (MonitorState::Settling, 5), "{r:?}");
        assert_eq!(r[2].0, MonitorState::Watching, "{r:?}");
        assert_eq!(r.len(), 3, "{r:?}");
    }

    /// A day without data: the plant came back at another operating point. The lag filter
    /// starts from the first prediction after the gap (not from the day before), the monitor
    /// settles, and nothing is compared across the gap: no false alert.
    #[test]
    fn after_a_day_without_data_the_monitor_restarts_without_a_false_alert() {
        let mut plant = Plant::new();
        let p0 = Point::nominal();
        let _ = plant.states(p0, 200);
        assert!(plant.monitor.baseline.is_some());
        let mut p1 = p0;
        p1.duty = 36_000.0;
        p1.pred = p1.feed_t + p1.duty / (p1.feed * super::super::tests::CP);
        plant.k += 1440;
        plant.dynamics = Fopdt::new(plant.cfg.dead_time_ms, plant.cfg.lag_ms, plant.unit.interval_ms);
        let _ = plant.dynamics.step(p1.pred);
        let (e, out) = plant.run(p1);
        assert!((e.predicted_k.unwrap() - p1.pred).abs() < 1e-9, "the filter restarted from the new point");
        assert_eq!(out.state, MonitorState::Settling);
        for _ in 0..600 {
            let (_, out) = plant.run(p1);
            assert!(out.conditions.is_empty(), "{:?}", out.conditions);
        }
    }

    #[test]
    fn no_prediction_or_a_feed_below_its_minimum_pauses_the_monitor() {
        let mut plant = Plant::new();
        let nominal = Point::nominal();
        plant.states(nominal, 100);
        assert_eq!(plant.monitor.state, MonitorState::Watching);
        // No prediction: paused, the block so far is dropped.
        let mut e = evaluation(plant.k, nominal);
        e.predicted_k = None;
        let out = plant.monitor.step(&plant.cfg, &plant.unit, &mut e);
        assert_eq!(out.state, MonitorState::Paused);
        assert_eq!(plant.monitor.acc, Acc::default());
        // A feed below 20 % of the baseline's: the unit is down.
        let down = Point { feed: 1.9, ..nominal };
        let (_, out) = plant.run(down);
        assert_eq!((out.state, out.flags), (MonitorState::Paused, vec![Flag::UnitDown]));
        let (_, out) = plant.run(Point { feed: 2.1, ..nominal });
        assert_ne!(out.state, MonitorState::Paused, "20 % and more is running");
    }

    #[test]
    fn a_held_alert_stands_through_uncertain_inputs_and_a_shutdown() {
        use crate::core::vocabulary::{Cause, Severity};
        let mut plant = Plant::new();
        let nominal = Point::nominal();
        plant.states(nominal, 100);
        let held = |out: &MonitorOutput| out.conditions.iter().any(|c| c.subject == "heater");
        plant.monitor.active.raise(
            Cause::HeaterFouling,
            "heater",
            Severity::Low,
            "fouling".into(),
            3.0,
            0,
            serde_json::Map::new(),
        );
        let (_, out) = plant.run(nominal);
        assert!(held(&out));
        // Inputs too uncertain to judge: flagged, but the alert is still held.
        let mut e = evaluation(plant.k, nominal);
        e.u_pred_k = Some(10.0 * plant.cfg.max_prediction_uncertainty);
        let out = plant.monitor.step(&plant.cfg, &plant.unit, &mut e);
        assert!(out.flags.contains(&Flag::UncertainInputs) && held(&out), "{out:?}");
        // The unit down: paused, and the alert still held.
        let (_, out) = plant.run(Point { feed: 1.0, ..nominal });
        assert!(out.flags.contains(&Flag::UnitDown) && held(&out), "{out:?}");
    }

    #[test]
    fn a_block_is_the_mean_of_its_intervals() {
        let mut acc = Acc::default();
        let mut rng = Rng::new(3);
        let points: Vec<Point> = (0..4).map(|_| Point::nominal().noisy(&mut rng)).collect();
        for (k, p) in points.iter().enumerate() {
            let mut e = evaluation(k as i64, *p);
            e.effectiveness = (k % 2 == 0).then_some(0.9 + k as f64 / 100.0);
            e.signals.ambient_k = None;
            acc.add(&e, p.meas - p.pred);
        }
        let rec = acc.record(T0 + 4 * MIN);
        assert_eq!((acc.n, acc.start_ms), (4, Some(T0)));
        let mean = |f: &dyn Fn(&Point) -> f64| points.iter().map(f).sum::<f64>() / 4.0;
        assert!((rec.residual - mean(&|p| p.meas - p.pred)).abs() < 1e-12);
        assert!((rec.duty.unwrap() - mean(&|p| p.duty)).abs() < 1e-9);
        assert!((rec.tags[0].unwrap() - mean(&|p| p.feed)).abs() < 1e-12);
        // Only the intervals that had an effectiveness count; none had an ambient.
        assert!((rec.eff.unwrap() - 0.91).abs() < 1e-12);
        assert_eq!((rec.ambient, rec.conv, rec.end_ms), (None, None, T0 + 4 * MIN));
    }

    /// The checkpoint fixture, as the build before the split wrote it.
    const FIXTURE: &str = include_str!("fixtures/monitor-before-split.json");

    #[test]
    fn a_checkpoint_of_the_build_before_the_split_loads_and_is_written_the_same() {
        let fixture = FIXTURE.trim_end();
        // The same intervals give a monitor with the same fields in the same order, plus the
        // ones added since at the end (the gap clock). The values may differ: the attribution
        // has changed since (ranked causes).
        let keys = |v: &serde_json::Value| -> Vec<String> {
            v.as_object().map(|o| o.keys().cloned().collect()).unwrap_or_default()
        };
        // The block history is no longer part of the serialized monitor (the service keeps it
        // in a journal of its own); a monitor written with it still reads it.
        let drop_history = |mut v: serde_json::Value| {
            v.as_object_mut().unwrap().shift_remove("history");
            v
        };
        let now = serde_json::to_value(fixture_monitor()).unwrap();
        let then: serde_json::Value = drop_history(serde_json::from_str(fixture).unwrap());
        let (now_keys, then_keys) = (keys(&now), keys(&then));
        assert_eq!(now_keys[..then_keys.len()], then_keys[..]);
        assert_eq!(now_keys[then_keys.len()..], ["last_end_ms".to_string()]);
        // What that build wrote loads, and is written back with the same fields in the same
        // order (compared through serde_json's own reading of the numbers, which is not exact
        // to the last bit for every decimal).
        let m: Monitor = serde_json::from_str(fixture).unwrap();
        let inline =
            serde_json::from_str::<serde_json::Value>(fixture).unwrap()["history"].as_array().unwrap().len();
        assert_eq!(m.history.len(), inline);
        let read: serde_json::Value = drop_history(serde_json::from_str(fixture).unwrap());
        assert_eq!(serde_json::to_string(&m).unwrap(), serde_json::to_string(&read).unwrap());
        assert_eq!(m.state, MonitorState::Settling);
        assert!(m.baseline.is_some() && m.trend.is_some() && !m.active.is_empty());
    }
}
