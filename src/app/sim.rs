//! The embedded plant simulator: a scenario of our own invention, reactor R-204 of the
//! solvent recovery unit at the Larchmoor works, a liquid-phase methyl acetate hydrolysis
//! reactor heated by a steam heater.
//!
//! It produces historian-style wide CSV exports, deterministic from a seed: measurement noise
//! and quantization, dead time and lag of the effluent temperature, analyzer sample-and-hold,
//! normal operating changes (feed-rate steps, duty moves, feed temperature drift, a daily
//! ambient cycle) and injected events (heater fouling, a thermometer bias step, an analyzer
//! outage, a stuck transmitter, a conversion drift) whose truth is kept for scoring.
//!
//! The "true" plant is the liquid-Cp enthalpy balance with a slightly different heat loss
//! than the one configured, so the model has a small constant bias, as a real plant would.

use std::fmt::Write as _;

use serde::Serialize;

use crate::core::monitor::dynamics::Fopdt;
use crate::core::vocabulary::Cause;
use crate::rng::Rng;
use crate::thermo::balance::{
    Basis, Effluent, FeedInput, FlowValue, Inputs, PathChoice, Reaction, System, Unknown,
};
use crate::thermo::component::Library;

/// Sample period of the exports, s.
pub const SAMPLE_S: i64 = 10;
/// Start of the simulated time: 2026-11-21T00:00:00Z.
pub const START_S: i64 = 1_795_219_200;

/// Export columns, in order (after the timestamp).
pub const TAGS: [&str; 12] = [
    "FI-2011", "TI-2012", "AI-2013A", "AI-2013B", "AI-2013C", "FI-2021", "TI-2022", "JI-2040", "TI-2050",
    "PI-2041", "TI-0901", "AI-2060",
];

/// What kind of event is injected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum EventKind {
    /// The effluent thermometer reads high by a fixed amount.
    ThermometerBias,
    /// Heater effectiveness falls linearly.
    HeaterFouling,
    /// The feed analyzer stops updating (empty cells).
    AnalyzerOutage,
    /// A flow transmitter freezes at its last value.
    StuckTransmitter,
    /// The conversion falls linearly.
    ConversionDrift,
    /// Insulation damage: an extra heat loss UA·(T − T_ambient), ramped in over 6 h, so the
    /// residual follows the ambient temperature.
    HeatLoss,
}

impl EventKind {
    /// The alert cause that should be raised.
    pub fn expected_cause(self) -> Cause {
        match self {
            EventKind::ThermometerBias | EventKind::StuckTransmitter => Cause::InstrumentFault,
            EventKind::HeaterFouling => Cause::HeaterFouling,
            EventKind::AnalyzerOutage => Cause::DataQuality,
            EventKind::ConversionDrift => Cause::ConversionDrift,
            EventKind::HeatLoss => Cause::HeatLoss,
        }
    }
}

/// An injected event and its truth.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Event {
    /// Kind.
    pub kind: EventKind,
    /// Start, s since the epoch.
    pub start_s: i64,
    /// End, s since the epoch (the fault is removed then; fouling has no end).
    pub end_s: i64,
    /// Size: K for a bias, fraction per day for fouling, conversion change for a drift.
    pub magnitude: f64,
    /// The tag concerned, if any.
    pub tag: Option<String>,
    /// A one-line description.
    pub description: String,
}

/// A scenario: duration, events and options.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Scenario {
    /// Seed.
    pub seed: u64,
    /// Simulated days.
    pub days: f64,
    /// Events.
    pub events: Vec<Event>,
    /// Whether the plant has the conversion analyzer AI-2060 mapped.
    pub conversion_analyzer: bool,
    /// Normal operating changes (feed steps, duty moves).
    pub operating_changes: bool,
}

fn ev(kind: EventKind, day0: f64, hours: f64, magnitude: f64, tag: Option<&str>, description: &str) -> Event {
    let start_s = START_S + (day0 * 86_400.0) as i64;
    Event {
        kind,
        start_s,
        end_s: start_s + (hours * 3600.0) as i64,
        magnitude,
        tag: tag.map(str::to_string),
        description: description.to_string(),
    }
}

impl Scenario {
    /// The demo: 11 days; baseline learned in the first ~1.5 days, then one event at a time.
    pub fn demo(seed: u64, days: f64) -> Scenario {
        let mut events = vec![
            ev(
                EventKind::ThermometerBias,
                2.0,
                5.0,
                2.0,
                Some("TI-2050"),
                "effluent thermometer TI-2050 reads 2 K high (calibration shift), corrected after 5 h",
            ),
            ev(
                EventKind::AnalyzerOutage,
                2.6,
                2.0,
                0.0,
                Some("AI-2013A"),
                "feed analyzer AI-2013 out of service for 2 h",
            ),
            ev(
                EventKind::StuckTransmitter,
                3.0,
                3.0,
                0.0,
                Some("FI-2021"),
                "process-water flow transmitter FI-2021 frozen for 3 h",
            ),
            ev(
                EventKind::ConversionDrift,
                3.4,
                30.0,
                -0.05,
                None,
                "conversion falls by 0.05 over 12 h (catalyst activity), restored after 30 h",
            ),
            ev(
                EventKind::HeaterFouling,
                5.3,
                24.0 * 30.0,
                0.01,
                Some("JI-2040"),
                "steam heater fouling: effectiveness falls 1 % per day",
            ),
        ];
        events.retain(|e| e.start_s < START_S + (days * 86_400.0) as i64);
        Scenario { seed, days, events, conversion_analyzer: false, operating_changes: true }
    }

    /// Normal operation only.
    pub fn normal(seed: u64, days: f64) -> Scenario {
        Scenario { seed, days, events: Vec::new(), conversion_analyzer: false, operating_changes: true }
    }

    /// One event after a baseline period.
    pub fn single(seed: u64, days: f64, event: Event) -> Scenario {
        Scenario { seed, days, events: vec![event], conversion_analyzer: false, operating_changes: true }
    }

    /// Build an event at `day0` for `hours`.
    pub fn event(kind: EventKind, day0: f64, hours: f64, magnitude: f64, tag: Option<&str>) -> Event {
        ev(kind, day0, hours, magnitude, tag, "scenario event")
    }

    /// End of the simulated time, s.
    pub fn end_s(&self) -> i64 {
        START_S + (self.days * 86_400.0) as i64
    }
}

/// Operating point of one sample (true values).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Point {
    f1_kmol_h: f64,
    t1_c: f64,
    x: [f64; 3],
    f2_t_h: f64,
    t2_c: f64,
    duty_kw: f64,
    p_bar: f64,
    ambient_c: f64,
    conversion: f64,
    effectiveness: f64,
}

/// The simulated plant.
pub struct Plant {
    /// The scenario.
    pub scenario: Scenario,
    system: System,
    rng: Rng,
    t_s: i64,
    fopdt: Fopdt,
    slow: f64,
    f1_level: f64,
    f2_level: f64,
    duty_level: f64,
    next_f1_s: i64,
    next_f2_s: i64,
    next_duty_s: i64,
    analyzer: [f64; 3],
    analyzer_conv: f64,
    next_analyzer_s: i64,
    next_conv_s: i64,
    stuck: Option<f64>,
    /// The last true outlet temperature, K (for tests).
    pub last_true_k: f64,
    /// The last energy-balance closure of the truth, W (for tests).
    pub last_closure_w: f64,
}

/// Heat loss of the true plant, W (the example configuration says 6 kW).
pub const TRUE_HEAT_LOSS_W: f64 = 6_500.0;

impl Plant {
    /// A plant for a scenario.
    pub fn new(scenario: Scenario) -> Plant {
        let lib = Library::builtin().ok();
        let comps = ["water", "methyl-acetate", "methanol", "acetic-acid"]
            .iter()
            .filter_map(|id| lib.as_ref().and_then(|l| l.resolve(id).ok()))
            .collect::<Vec<_>>();
        let reaction = Reaction { label: "hydrolysis".into(), nu: vec![-1.0, -1.0, 1.0, 1.0], key: 1 };
        let system = System::new(comps, &[PathChoice::Auto; 4], None, vec![reaction], (250.0, 600.0))
            .unwrap_or_else(|e| panic!("the simulator's built-in system is valid: {e}"));
        let mut rng = Rng::new(scenario.seed);
        let first = |rng: &mut Rng, mean_h: f64| START_S + ((0.5 + rng.uniform()) * mean_h * 3600.0) as i64;
        let next_f1_s = first(&mut rng, 7.0);
        let next_f2_s = first(&mut rng, 9.0);
        let next_duty_s = first(&mut rng, 5.0);
        Plant {
            scenario,
            system,
            rng,
            t_s: START_S,
            // Dead time 2 min, lag 4 min at the 10-s sample period.
            fopdt: Fopdt::new(120_000, 240_000, SAMPLE_S * 1000),
            slow: 0.0,
            f1_level: 1.0,
            f2_level: 1.0,
            duty_level: 1.0,
            next_f1_s,
            next_f2_s,
            next_duty_s,
            analyzer: [64.0, 31.0, 5.0],
            analyzer_conv: 42.0,
            next_analyzer_s: START_S,
            next_conv_s: START_S,
            stuck: None,
            last_true_k: 0.0,
            last_closure_w: 0.0,
        }
    }

    /// The CSV header of the exports.
    pub fn header() -> String {
        let mut s = String::from("Timestamp");
        for t in TAGS {
            s.push(',');
            s.push_str(t);
        }
        s
    }

    fn active(&self, kind: EventKind) -> Option<&Event> {
        self.scenario.events.iter().find(|e| e.kind == kind && self.t_s >= e.start_s && self.t_s < e.end_s)
    }

    fn point(&mut self) -> Point {
        let t = self.t_s;
        let day = (t - START_S) as f64 / 86_400.0;
        if self.scenario.operating_changes {
            if t >= self.next_f1_s {
                // Feed-rate steps of 10-20 %, kept within 80-120 % of the design rate.
                let step =
                    (0.10 + 0.10 * self.rng.uniform()) * if self.rng.uniform() < 0.5 { -1.0 } else { 1.0 };
                self.f1_level = (self.f1_level * (1.0 + step)).clamp(0.8, 1.2);
                self.next_f1_s = t + ((4.0 + 6.0 * self.rng.uniform()) * 3600.0) as i64;
            }
            if t >= self.next_f2_s {
                self.f2_level = (self.f2_level * (1.0 + 0.15 * (self.rng.uniform() - 0.5))).clamp(0.85, 1.15);
                self.next_f2_s = t + ((5.0 + 8.0 * self.rng.uniform()) * 3600.0) as i64;
            }
            if t >= self.next_duty_s {
                // Duty moves of ±5-10 %, independent of the feed steps.
                let step =
                    (0.05 + 0.05 * self.rng.uniform()) * if self.rng.uniform() < 0.5 { -1.0 } else { 1.0 };
                self.duty_level = (self.duty_level * (1.0 + step)).clamp(0.85, 1.15);
                self.next_duty_s = t + ((2.0 + 3.0 * self.rng.uniform()) * 3600.0) as i64;
            }
        }
        let diurnal = (2.0 * std::f64::consts::PI * (day - 0.375)).sin();
        let ambient_c = 8.0 + 4.0 * diurnal;
        let conversion = match self.active(EventKind::ConversionDrift) {
            Some(e) => {
                let frac = ((t - e.start_s) as f64 / (12.0 * 3600.0)).min(1.0);
                0.42 + e.magnitude * frac
            }
            None => 0.42,
        };
        let effectiveness = match self.active(EventKind::HeaterFouling) {
            Some(e) => 1.0 - e.magnitude * (t - e.start_s) as f64 / 86_400.0,
            None => 1.0,
        };
        Point {
            f1_kmol_h: 38.5 * self.f1_level,
            t1_c: 46.5 + 1.2 * (2.0 * std::f64::consts::PI * day / 2.7).sin(),
            x: [0.64 + 0.004 * (day * 1.3).sin(), 0.31 - 0.004 * (day * 1.3).sin(), 0.05],
            f2_t_h: 2.6 * self.f2_level,
            t2_c: 22.0 + 0.4 * ambient_c,
            duty_kw: 145.0 * self.duty_level * (0.8 + 0.2 * self.f1_level),
            p_bar: 2.8,
            ambient_c,
            conversion,
            effectiveness,
        }
    }

    /// The true steady-state outlet temperature of an operating point, K, and the closure of
    /// its energy balance (W; zero to round-off).
    fn truth(&self, p: &Point) -> (f64, f64) {
        // Extra loss through damaged insulation, evaluated at a representative outlet
        // temperature (an explicit heat-loss model, ramped in over 6 hours).
        let extra = match self.active(EventKind::HeatLoss) {
            Some(e) => {
                let ramp = ((self.t_s - e.start_s) as f64 / (6.0 * 3600.0)).min(1.0);
                e.magnitude * ramp * (335.0 - (p.ambient_c + 273.15))
            }
            None => 0.0,
        };
        let loss = TRUE_HEAT_LOSS_W + extra;
        let inputs = Inputs {
            feeds: vec![
                FeedInput {
                    flow: FlowValue::Molar(p.f1_kmol_h / 3.6),
                    temperature: p.t1_c + 273.15,
                    fractions: vec![p.x[0], p.x[1], p.x[2], 0.0],
                    basis: Basis::Mole,
                },
                FeedInput {
                    flow: FlowValue::Mass(p.f2_t_h / 3.6),
                    temperature: p.t2_c + 273.15,
                    fractions: vec![1.0, 0.0, 0.0, 0.0],
                    basis: Basis::Mole,
                },
            ],
            effluent: Effluent::Reacted { conversions: vec![Some(p.conversion)] },
            duty: Some(p.duty_kw * 1000.0 * p.effectiveness),
            heat_loss: loss,
            effluent_temperature: None,
            pressure: None,
            bubble_margin: 0.0,
        };
        match self.system.solve(&inputs, Unknown::Temperature) {
            Ok(o) => (o.t_out, o.h_out - o.h_in - p.duty_kw * 1000.0 * p.effectiveness + loss),
            Err(_) => (f64::NAN, f64::NAN),
        }
    }

    /// The next export row (timestamp and one cell per tag), advancing time by one sample.
    /// Returns `None` at the end of the scenario.
    pub fn next_row(&mut self) -> Option<String> {
        if self.t_s >= self.scenario.end_s() {
            return None;
        }
        let p = self.point();
        let (t_true, closure) = self.truth(&p);
        self.last_true_k = t_true;
        self.last_closure_w = closure;
        let t_dyn = self.fopdt.step(t_true);
        // Slow unmeasured disturbance (AR(1), ~0.05 K) plus white noise.
        self.slow = 0.995 * self.slow + 0.005 * self.rng.normal();
        let n = |rng: &mut Rng, s: f64| s * rng.normal();
        let mut t_meas_c = t_dyn - 273.15 + self.slow + n(&mut self.rng, 0.04);
        if let Some(e) = self.active(EventKind::ThermometerBias) {
            t_meas_c += e.magnitude;
        }
        // Analyzer: a new result every 10 minutes (sample-and-hold), unless out of service.
        let outage = self.active(EventKind::AnalyzerOutage).is_some();
        if self.t_s >= self.next_analyzer_s && !outage {
            for (a, x) in self.analyzer.iter_mut().zip(p.x) {
                *a = 100.0 * x + 0.1 * self.rng.normal();
            }
            self.next_analyzer_s = self.t_s + 600;
        }
        if self.t_s >= self.next_conv_s {
            self.analyzer_conv = 100.0 * p.conversion + 0.3 * self.rng.normal();
            self.next_conv_s = self.t_s + 900;
        }
        let mut f2 = p.f2_t_h * (1.0 + n(&mut self.rng, 0.003));
        match self.active(EventKind::StuckTransmitter) {
            Some(_) => f2 = *self.stuck.get_or_insert(f2),
            None => self.stuck = None,
        }
        let values: [Option<f64>; 12] = [
            Some(p.f1_kmol_h * (1.0 + n(&mut self.rng, 0.003))),
            Some(p.t1_c + n(&mut self.rng, 0.05)),
            (!outage).then_some(self.analyzer[0]),
            (!outage).then_some(self.analyzer[1]),
            (!outage).then_some(self.analyzer[2]),
            Some(f2),
            Some(p.t2_c + n(&mut self.rng, 0.05)),
            Some(p.duty_kw * (1.0 + n(&mut self.rng, 0.004))),
            Some(t_meas_c),
            Some(p.p_bar + n(&mut self.rng, 0.005)),
            Some(p.ambient_c + n(&mut self.rng, 0.1)),
            Some(self.analyzer_conv),
        ];
        let ts = jiff::Timestamp::from_second(self.t_s)
            .map(|t| t.strftime("%Y-%m-%dT%H:%M:%SZ").to_string())
            .unwrap_or_default();
        let mut row = ts;
        let decimals = [3, 2, 2, 2, 2, 3, 2, 2, 2, 3, 1, 2];
        for (v, d) in values.iter().zip(decimals) {
            row.push(',');
            if let Some(v) = v {
                let _ = write!(row, "{v:.d$}");
            }
        }
        self.t_s += SAMPLE_S;
        Some(row)
    }

    /// Current simulated time, s.
    pub fn time_s(&self) -> i64 {
        self.t_s
    }

    /// The export file a sample time belongs to (one per UTC day).
    pub fn file_name(t_s: i64) -> String {
        jiff::Timestamp::from_second(t_s)
            .map(|t| format!("sru-r204_{}.csv", t.strftime("%Y%m%d")))
            .unwrap_or_default()
    }
}

/// Write a whole scenario's exports into `dir` (one file per UTC day, with headers).
pub fn write_exports(scenario: &Scenario, dir: &std::path::Path) -> std::io::Result<u64> {
    use std::io::Write as _;
    std::fs::create_dir_all(dir)?;
    let mut plant = Plant::new(scenario.clone());
    let mut current: Option<(String, std::io::BufWriter<std::fs::File>)> = None;
    let mut rows = 0;
    loop {
        let t = plant.time_s();
        let Some(row) = plant.next_row() else { break };
        let name = Plant::file_name(t);
        if current.as_ref().is_none_or(|(n, _)| *n != name) {
            if let Some((_, mut w)) = current.take() {
                w.flush()?;
            }
            let mut w = std::io::BufWriter::new(std::fs::File::create(dir.join(&name))?);
            writeln!(w, "{}", Plant::header())?;
            current = Some((name, w));
        }
        if let Some((_, w)) = current.as_mut() {
            writeln!(w, "{row}")?;
        }
        rows += 1;
    }
    if let Some((_, mut w)) = current {
        w.flush()?;
    }
    Ok(rows)
}

/// The site configuration of the simulated plant.
pub fn site_config(
    exports: &str,
    state: &str,
    output: &str,
    conversion_analyzer: bool,
    block: &str,
    baseline_blocks: usize,
) -> String {
    let conv = if conversion_analyzer {
        "conversion = { tag = \"AI-2060\", unit = \"%\", kind = \"analyzer\" }\n"
    } else {
        ""
    };
    format!(
        r#"# The simulated plant: reactor R-204, solvent recovery unit, Larchmoor works (invented).
[site]
name = "Larchmoor works (simulated)"
time_zone = "Europe/London"
state_dir = "{state}"
output_dir = "{output}"

[service]
watch = "auto"
reconcile_interval = "1s"
checkpoint_interval = "2s"
seal_after = "10m"

[[unit]]
name = "R-204"
description = "methyl acetate hydrolysis reactor, solvent recovery unit"

[unit.input]
directory = "{exports}"
pattern = "sru-r204_*.csv"
timestamp_column = "Timestamp"

[unit.timing]
interval = "1m"
max_wait = "5m"
stale_after = "3m"
analyzer_stale_after = "25m"

[unit.model]
pressure = {{ tag = "PI-2041", unit = "bar" }}

[[unit.feed]]
name = "ester recycle"
flow = {{ tag = "FI-2011", unit = "kmol/h", uncertainty = "1 %" }}
temperature = {{ tag = "TI-2012", unit = "degC", uncertainty = "0.3 K" }}
[unit.feed.composition]
water = {{ tag = "AI-2013A", unit = "%", uncertainty = "0.2 %" }}
methyl_acetate = {{ tag = "AI-2013B", unit = "%", uncertainty = "0.2 %" }}
methanol = {{ tag = "AI-2013C", unit = "%", uncertainty = "0.1 %" }}

[[unit.feed]]
name = "process water"
flow = {{ tag = "FI-2021", unit = "t/h", uncertainty = "1.5 %" }}
temperature = {{ tag = "TI-2022", unit = "degC", uncertainty = "0.3 K" }}
composition = {{ water = 1.0 }}

[unit.heater]
duty = {{ tag = "JI-2040", unit = "kW", uncertainty = "2 %" }}
heat_loss = {{ value = "6 kW", uncertainty = "2 kW" }}

[unit.effluent]
temperature = {{ tag = "TI-2050", unit = "degC", uncertainty = "0.3 K" }}

[[unit.reaction]]
name = "methyl acetate hydrolysis"
stoichiometry = {{ methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }}
key = "methyl_acetate"
design_conversion = 0.42
conversion_uncertainty = 0.02
{conv}
[unit.ambient]
temperature = {{ tag = "TI-0901", unit = "degC" }}

[unit.monitor]
block = "{block}"
baseline_blocks = {baseline_blocks}
dead_time = "2m"
lag = "4m"
"#
    )
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn deterministic_and_energy_balance_closes() {
        let mut a = Plant::new(Scenario::demo(7, 0.2));
        let mut b = Plant::new(Scenario::demo(7, 0.2));
        let mut n = 0;
        while let Some(row) = a.next_row() {
            assert_eq!(Some(row), b.next_row());
            // Energy balance of the simulated truth: H_out − H_in − ηQ + Q_loss = 0.
            assert!(a.last_closure_w.abs() < 1e-3, "{}", a.last_closure_w);
            assert!((320.0..360.0).contains(&a.last_true_k), "{}", a.last_true_k);
            n += 1;
        }
        assert_eq!(n, (0.2 * 86_400.0 / 10.0) as usize);
    }

    #[test]
    fn injected_faults_have_the_stated_magnitudes() {
        let bias = Scenario::event(EventKind::ThermometerBias, 0.01, 1.0, 2.0, Some("TI-2050"));
        let mut with = Plant::new(Scenario { operating_changes: false, ..Scenario::single(3, 0.05, bias) });
        let mut without = Plant::new(Scenario { operating_changes: false, ..Scenario::normal(3, 0.05) });
        let col = 1 + TAGS.iter().position(|t| *t == "TI-2050").unwrap();
        let mut diffs = Vec::new();
        while let (Some(a), Some(b)) = (with.next_row(), without.next_row()) {
            let va: f64 = a.split(',').nth(col).unwrap().parse().unwrap();
            let vb: f64 = b.split(',').nth(col).unwrap().parse().unwrap();
            diffs.push(va - vb);
        }
        // Same seed, same noise: the difference is the bias while active, zero otherwise.
        let active: Vec<f64> = diffs[90..400].to_vec();
        assert!(active.iter().all(|d| (d - 2.0).abs() < 0.011), "{active:?}");
        assert!(diffs[..80].iter().all(|d| d.abs() < 0.011));
        // Fouling: effectiveness falls 1 %/day.
        let foul = Scenario::event(EventKind::HeaterFouling, 0.0, 240.0, 0.01, None);
        let mut p = Plant::new(Scenario::single(3, 3.0, foul));
        p.t_s = START_S + 2 * 86_400;
        assert!((p.point().effectiveness - 0.98).abs() < 1e-9);
    }
}
