//! What the monitor's unit tests share: a small unit (built through the site loader, as the
//! service builds it) and hand-made evaluations around it.

#![allow(clippy::unwrap_used)]

use super::charts::{cusum_h_for, ewma_l_for};
use super::settings::MonitorConfig;
use super::{Baseline, Monitor};
use crate::core::model::{Evaluation, Signals};
use crate::core::spec::UnitSpec;
use crate::rng::Rng;

/// 2026-12-01T00:00:00Z.
pub(super) const T0: i64 = 1_796_083_200_000;

/// One minute, the unit's interval.
pub(super) const MIN: i64 = 60_000;

/// Index of the feed flow tag (FI-101).
pub(super) const FLOW: usize = 0;
/// Index of the duty tag (JI-103).
pub(super) const DUTY: usize = 2;
/// Index of the effluent thermometer (TI-109).
pub(super) const TOUT: usize = 3;
/// Index of the ambient thermometer (TI-001).
pub(super) const AMBIENT: usize = 4;

/// Mean molar heat capacity of the liquid feed used by the hand-made intervals, J/(mol K).
pub(super) const CP: f64 = 75.35;

/// A unit with one feed of water and methyl acetate heated by a duty tag, the hydrolysis as
/// its reaction (key reactant methyl acetate), an effluent thermometer and an ambient one; one-
/// minute intervals in UTC. Tags in table order: FI-101, TI-102, JI-103, TI-109, TI-001.
pub(super) fn unit() -> UnitSpec {
    crate::core::tests::unit_spec(
        "{ water = 0.9, methyl_acetate = 0.1 }",
        r#"[[unit.reaction]]
name = "hydrolysis"
stoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }
key = "methyl_acetate"
design_conversion = 0.4
[unit.ambient]
temperature = { tag = "TI-001", unit = "degC" }
"#,
    )
}

/// One operating point of the hand-made plant (SI): feed, feed temperature, duty, measured
/// effluent temperature, ambient; the prediction is what an exact model gives for it.
#[derive(Debug, Clone, Copy)]
pub(super) struct Point {
    /// Total feed, mol/s.
    pub(super) feed: f64,
    /// Feed temperature, K.
    pub(super) feed_t: f64,
    /// Reported duty, W.
    pub(super) duty: f64,
    /// Measured effluent temperature, K.
    pub(super) meas: f64,
    /// Steady-state prediction, K.
    pub(super) pred: f64,
    /// Ambient temperature, K.
    pub(super) ambient: f64,
}

impl Point {
    /// 10 mol/s at 30 °C heated by 30 kW, measured where the model predicts, 10 °C outside.
    pub(super) fn nominal() -> Point {
        let (feed, feed_t, duty) = (10.0, 303.15, 30_000.0);
        let pred = feed_t + duty / (feed * CP);
        Point { feed, feed_t, duty, meas: pred, pred, ambient: 283.15 }
    }

    /// The same point with the feed, the feed temperature, the duty and the thermometer each
    /// carrying white noise (σ 0.02 mol/s, 0.05 K, 50 W, 0.05 K).
    pub(super) fn noisy(self, rng: &mut Rng) -> Point {
        Point {
            feed: self.feed + 0.02 * rng.normal(),
            feed_t: self.feed_t + 0.05 * rng.normal(),
            duty: self.duty + 50.0 * rng.normal(),
            meas: self.meas + 0.05 * rng.normal(),
            ..self
        }
    }
}

/// The evaluation of the `k`-th one-minute interval at a point.
pub(super) fn evaluation(k: i64, p: Point) -> Evaluation {
    Evaluation {
        start_ms: T0 + k * MIN,
        end_ms: T0 + (k + 1) * MIN,
        predicted_k: Some(p.pred),
        measured_k: Some(p.meas),
        residual_k: Some(p.meas - p.pred),
        u_pred_k: Some(0.8),
        dominant_input: None,
        apparent_conversion: None,
        effectiveness: Some(1.0),
        flags: Vec::new(),
        reason: None,
        conditions: Vec::new(),
        signals: Signals {
            duty_w: Some(p.duty),
            needed_duty_w: Some(p.duty),
            feed_mol_s: Some(p.feed),
            key_feed_mol_s: Some(0.1 * p.feed),
            feed_temperatures_k: vec![Some(p.feed_t)],
            ambient_k: Some(p.ambient),
            measured_conversion: None,
            heat_capacity_w_k: Some(p.feed * CP),
            tag_values_si: vec![Some(p.feed), Some(p.feed_t), Some(p.duty), Some(p.meas), Some(p.ambient)],
            tag_ranges_si: Vec::new(),
            ..Signals::default()
        },
    }
}

/// The monitor behind the checkpoint fixture `fixtures/monitor-before-split.json` (written by
/// the build before the monitor was split into parts): 200 steady intervals with noise (the
/// baseline is learned on blocks of 5), then a heater losing 5 % of its effectiveness over 400
/// intervals while the feed steps between four rates every hour, and a spike near the end.
pub(super) fn fixture_monitor() -> Monitor {
    let unit = unit();
    let cfg = MonitorConfig {
        block_intervals: 5,
        baseline_blocks: 30,
        trend_point_ms: 20 * 60_000,
        dead_time_ms: 60_000,
        lag_ms: 120_000,
        ..MonitorConfig::default()
    };
    let mut m = Monitor::new(&cfg, unit.interval_ms);
    let mut rng = Rng::new(7);
    for k in 0..800 {
        let mut p = Point::nominal();
        let mut eff = 1.0;
        if k >= 200 {
            let f = ((k - 200) as f64 / 400.0).min(1.0);
            eff = 1.0 - 0.05 * f;
            p.feed = [10.0, 11.0, 9.5, 10.5][((k - 200) / 60 % 4) as usize];
            p.pred = p.feed_t + p.duty / (p.feed * CP);
            p.meas = p.pred - 0.05 * p.duty / (p.feed * CP) * f;
        }
        let mut p = p.noisy(&mut rng);
        if k == 790 {
            p.meas += 3.0;
        }
        let mut e = evaluation(k, p);
        e.effectiveness = Some(eff + 0.002 * rng.normal());
        m.step(&cfg, &unit, &mut e);
    }
    m
}

/// A baseline as learning at the nominal point gives it, made by hand: blocks of `block`
/// intervals, residual 0 ± 0.05 K (block and interval σ), effectiveness 1 ± 0.002, the tags'
/// noise of [`Point::noisy`] (none known for the ambient), a feed of 10 mol/s, and charts
/// designed for `cfg`'s false-alert rate.
pub(super) fn baseline(cfg: &MonitorConfig, block: usize) -> Baseline {
    let arl0 = cfg.false_alert_days * 86_400_000.0 / (block as f64 * MIN as f64);
    Baseline {
        block,
        mu: 0.0,
        sigma: 0.05,
        sigma_interval: 0.05,
        eff: Some((1.0, 0.002)),
        conv: None,
        conv_measured: None,
        feed: 10.0,
        tag_sigma: vec![Some(0.01), Some(0.02), Some(20.0), Some(0.02), None],
        tag_noise: vec![Some(0.02), Some(0.05), Some(50.0), Some(0.05), None],
        learned_ms: T0,
        blocks: 200,
        step_sigma: 0.05,
        acf1: 0.0,
        h: cusum_h_for(cfg.cusum_k, arl0),
        l: ewma_l_for(cfg.ewma_lambda, arl0),
    }
}
