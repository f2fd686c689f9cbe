//! The per-interval unit model: from an assembled interval to the soft tags (predicted
//! effluent temperature with its uncertainty, residual, apparent conversion, heater
//! effectiveness), the validity flags, and the conditions the alert lifecycle acts on.
//!
//! Pure: the same interval and configuration always give the same result.

use serde::Serialize;

use crate::core::assembly::{Closed, TagStatus};
use crate::core::effluent::{AnalysisCheck, ExtentEstimate, take_in};
use crate::core::flags::Flag;
use crate::core::spec::{FeedConfig, Signal, UnitSpec};
use crate::core::vocabulary::{Cause, Condition, Severity, TagKind};
use crate::thermo::balance::{Effluent, FeedInput, FlowValue, Inputs, Unknown};
use crate::thermo::uncertainty::{InputRef, combined};
use crate::thermo::vapor::BubbleMemo;

/// Default tolerance on analyzer fractions summing to 1 (`[unit.model] analyzer_sum_tolerance`).
/// Common practice: analyzers that report each component separately sum to 98-102 % in normal
/// operation; within that the results are normalised without a word.
pub const ANALYZER_SUM_TOLERANCE: f64 = 0.02;

/// Process figures of the interval that the monitor uses besides the soft tags.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Signals {
    /// Reported duty, W.
    pub duty_w: Option<f64>,
    /// Duty needed to reach the measured temperature, W.
    pub needed_duty_w: Option<f64>,
    /// Total feed, mol/s.
    pub feed_mol_s: Option<f64>,
    /// Key-reactant feed of the apparent-conversion reaction, mol/s.
    pub key_feed_mol_s: Option<f64>,
    /// Feed temperatures, K.
    pub feed_temperatures_k: Vec<Option<f64>>,
    /// Ambient temperature, K.
    pub ambient_k: Option<f64>,
    /// Measured conversion (conversion tag), if mapped and fresh.
    pub measured_conversion: Option<f64>,
    /// Effluent heat-capacity flow, W/K.
    pub heat_capacity_w_k: Option<f64>,
    /// Per tag: value in SI (None when unusable), for flatline and spike checks.
    pub tag_values_si: Vec<Option<f64>>,
    /// Per tag: (min, max) of the interval's samples in SI.
    pub tag_ranges_si: Vec<Option<(f64, f64)>>,
    /// Per feed: the sum of its analyzer's fractions (`None` without an analyzer or when it
    /// is unusable).
    #[serde(skip)]
    pub feed_sums: Vec<Option<f64>>,
    /// The effluent analyzer's estimate of the conversions after this interval (the monitor
    /// keeps it for the next).
    #[serde(skip)]
    pub extent_estimate: Option<ExtentEstimate>,
    /// The check of a new effluent analysis taken in this interval.
    #[serde(skip)]
    pub effluent_check: Option<AnalysisCheck>,
}

/// Everything computed for one interval.
#[derive(Debug, Clone, PartialEq)]
pub struct Evaluation {
    /// Interval start, ms.
    pub start_ms: i64,
    /// Interval end, ms.
    pub end_ms: i64,
    /// Predicted effluent temperature, K.
    pub predicted_k: Option<f64>,
    /// Measured effluent temperature, K.
    pub measured_k: Option<f64>,
    /// Measured minus predicted, K.
    pub residual_k: Option<f64>,
    /// Standard uncertainty of the prediction, K.
    pub u_pred_k: Option<f64>,
    /// The input that dominates the uncertainty.
    pub dominant_input: Option<String>,
    /// Conversion that reproduces the measured temperature.
    pub apparent_conversion: Option<f64>,
    /// Duty needed / duty reported.
    pub effectiveness: Option<f64>,
    /// Validity and data-quality flags.
    pub flags: Vec<Flag>,
    /// Why the prediction could not be computed.
    pub reason: Option<String>,
    /// Conditions for the alert lifecycle.
    pub conditions: Vec<Condition>,
    /// Process figures for the monitor.
    pub signals: Signals,
}

fn evidence(pairs: &[(&str, serde_json::Value)]) -> serde_json::Map<String, serde_json::Value> {
    pairs.iter().map(|(k, v)| ((*k).to_string(), v.clone())).collect()
}

struct Reader<'a> {
    unit: &'a UnitSpec,
    closed: &'a Closed,
}

impl Reader<'_> {
    /// SI value and standard uncertainty of a signal, or why it is unusable.
    fn get(&self, s: Signal) -> Result<(f64, f64), String> {
        match s {
            Signal::Fixed { si, u } => Ok((si, u)),
            Signal::Tag(i) => {
                let tag = &self.unit.tags[i];
                let tv = &self.closed.tags[i];
                match (tv.status, tv.value) {
                    (TagStatus::Ok, Some(v)) => {
                        let si = tag.unit.to_si(v);
                        let mut u = tag.uncertainty.at(si);
                        if tv.uncertain {
                            // Common practice: uncertain quality doubles the standard uncertainty.
                            u *= 2.0;
                        }
                        Ok((si, u))
                    }
                    (status, _) => Err(format!("{} ({}) is {}", tag.name, tag.role, status.as_str())),
                }
            }
        }
    }
}

/// How an uncertain input is named in the soft tags and alerts: its tag, else a description.
/// Kept unrendered per interval; only the dominant input's label is written out.
#[derive(Debug, Clone, Copy)]
struct Label {
    /// The input's signal: a tag names it `name (role)`.
    signal: Option<Signal>,
    /// The words for a fixed value.
    fallback: Fallback,
}

#[derive(Debug, Clone, Copy)]
enum Fallback {
    /// `<feed> <component> fraction`.
    FeedFraction(usize, usize),
    /// `<feed> flow`.
    FeedFlow(usize),
    /// `<feed> temperature`.
    FeedTemperature(usize),
    /// `heater duty`.
    Duty,
    /// `heat loss`.
    HeatLoss,
    /// `<reaction> conversion`.
    Conversion(usize),
    /// `<reaction> conversion (effluent analyzer)`.
    AnalyzerConversion(usize),
    /// Nothing (a fixed conversion signal).
    Empty,
}

impl Label {
    fn render(self, unit: &UnitSpec) -> String {
        if let Some(Signal::Tag(i)) = self.signal {
            return format!("{} ({})", unit.tags[i].name, unit.tags[i].role);
        }
        let sys = &unit.system;
        match self.fallback {
            Fallback::FeedFraction(j, i) => {
                format!("{} {} fraction", unit.feeds[j].name, sys.components[i].id)
            }
            Fallback::FeedFlow(j) => format!("{} flow", unit.feeds[j].name),
            Fallback::FeedTemperature(j) => format!("{} temperature", unit.feeds[j].name),
            Fallback::Duty => "heater duty".to_string(),
            Fallback::HeatLoss => "heat loss".to_string(),
            Fallback::Conversion(r) => format!("{} conversion", sys.reactions[r].label),
            Fallback::AnalyzerConversion(r) => {
                format!("{} conversion (effluent analyzer)", sys.reactions[r].label)
            }
            Fallback::Empty => String::new(),
        }
    }
}

/// Evaluate one closed interval of a unit. `estimate`: the effluent analyzer's estimate of
/// the conversions so far (kept by the monitor), if the unit has one.
pub fn evaluate(unit: &UnitSpec, closed: &Closed, estimate: Option<&ExtentEstimate>) -> Evaluation {
    evaluate_with(unit, closed, estimate, &mut BubbleMemo::default())
}

/// [`evaluate`] with the unit's memo of its last bubble point (the same evaluation; a unit
/// whose effluent composition and pressure did not change does not solve it again).
pub fn evaluate_with(
    unit: &UnitSpec,
    closed: &Closed,
    estimate: Option<&ExtentEstimate>,
    memo: &mut BubbleMemo,
) -> Evaluation {
    let rd = Reader { unit, closed };
    let mut flags: Vec<Flag> = Vec::new();
    let mut conditions: Vec<Condition> = Vec::new();
    let mut signals = Signals::default();
    signals.tag_values_si.reserve_exact(unit.tags.len());
    signals.tag_ranges_si.reserve_exact(unit.tags.len());

    // Data quality of every tag.
    for (i, (tag, tv)) in unit.tags.iter().zip(&closed.tags).enumerate() {
        signals.tag_values_si.push(match tv.status {
            TagStatus::Ok => tv.value.map(|v| tag.unit.to_si(v)),
            _ => None,
        });
        signals.tag_ranges_si.push(tv.min_max.map(|(a, b)| (tag.unit.to_si(a), tag.unit.to_si(b))));
        if tv.uncertain {
            flags.push(Flag::Uncertain(i));
        }
        if tv.out_of_range > 0 {
            flags.push(Flag::OutOfRange(i));
        }
        if tv.status == TagStatus::Ok {
            continue;
        }
        flags.push(Flag::Unusable(i, tv.status));
        if tag.info {
            // An informational tag is flagged (and its soft-tag cell left empty) but raises
            // no alert: nothing computed depends on it.
            continue;
        }
        let age = tv.age_ms.map(|a| a as f64 / 60_000.0);
        let what = if tag.kind == TagKind::Analyzer { "analyzer value" } else { "value" };
        let message = match (tv.status, age) {
            (TagStatus::Stale, Some(min)) => format!(
                "{} ({}) has sent no usable {what} for {min:.0} min; results that need it are suspended: check the instrument and the export link.",
                tag.name, tag.role
            ),
            (TagStatus::Bad, _) => format!(
                "{} ({}) reports only bad-quality or out-of-range values ({} bad, {} out of range); check the instrument.",
                tag.name, tag.role, tv.bad, tv.out_of_range
            ),
            _ => format!(
                "{} ({}) has no usable {what} in the export files; check the tag mapping and the export.",
                tag.name, tag.role
            ),
        };
        let severity = if tag.required { Severity::Medium } else { Severity::Low };
        conditions.push(Condition {
            cause: Cause::DataQuality,
            subject: tag.name.clone(),
            severity,
            message,
            evidence: evidence(&[
                ("tag", tag.name.clone().into()),
                ("status", tv.status.as_str().into()),
                ("age_min", age.map_or(serde_json::Value::Null, Into::into)),
                ("bad_samples", tv.bad.into()),
                ("out_of_range_samples", tv.out_of_range.into()),
            ]),
            magnitude: None,
        });
    }

    let measured = rd.get(Signal::Tag(unit.effluent_temperature)).ok();
    signals.ambient_k = unit.ambient.and_then(|a| rd.get(a).ok()).map(|x| x.0);
    let mut eval = Evaluation {
        start_ms: closed.start_ms,
        end_ms: closed.end_ms,
        predicted_k: None,
        measured_k: measured.map(|m| m.0),
        residual_k: None,
        u_pred_k: None,
        dominant_input: None,
        apparent_conversion: None,
        effectiveness: None,
        flags: Vec::new(),
        reason: None,
        conditions: Vec::new(),
        signals,
    };

    let prior = Prior { estimate, now_ms: closed.end_ms };
    match build_inputs(
        unit,
        &rd,
        measured.map(|m| m.0),
        prior,
        &mut flags,
        &mut conditions,
        &mut eval.signals,
    ) {
        Err(reason) => eval.reason = Some(reason),
        Ok((inputs, uncertain)) => {
            let found = (&mut eval, &mut flags, &mut conditions);
            solve_all(unit, &inputs, &uncertain, measured, found, memo)
        }
    }
    if eval.reason.is_some() {
        flags.push(Flag::NotComputed);
    }
    flags.dedup_by(|a, b| a.same_code(b));
    eval.flags = flags;
    eval.conditions = conditions;
    eval
}

/// The inputs with a standard uncertainty, in the order they are read, and their labels.
#[derive(Default)]
struct UncertainInputs {
    items: Vec<(InputRef, f64)>,
    labels: Vec<Label>,
}

type Built = (Inputs, UncertainInputs);

/// What the effluent analyzer's estimate starts the interval from.
#[derive(Clone, Copy)]
struct Prior<'a> {
    estimate: Option<&'a ExtentEstimate>,
    now_ms: i64,
}

fn build_inputs(
    unit: &UnitSpec,
    rd: &Reader<'_>,
    measured_k: Option<f64>,
    prior: Prior<'_>,
    flags: &mut Vec<Flag>,
    conditions: &mut Vec<Condition>,
    signals: &mut Signals,
) -> Result<Built, String> {
    let mut b = Builder { unit, rd, problems: Vec::new(), uncertain: UncertainInputs::default() };
    signals.feed_sums = vec![None; unit.feeds.len()];
    let mut feeds = Vec::new();
    for (j, f) in unit.feeds.iter().enumerate() {
        if let Some(feed) = b.feed(j, f, flags, conditions, signals) {
            feeds.push(feed);
        }
    }
    let (duty, heat_loss) = b.heater(signals);
    let effluent = b.effluent(signals, &feeds, prior);
    let Builder { mut problems, uncertain, .. } = b;
    if !problems.is_empty() {
        problems.dedup();
        return Err(problems.join("; "));
    }
    let pressure = unit.pressure.and_then(|p| rd.get(p).ok()).map(|p| p.0);
    if unit.pressure.is_some() && pressure.is_none() {
        flags.push(Flag::NoPressure);
    }
    Ok((
        Inputs {
            feeds,
            effluent,
            duty: duty.ok().map(|d| d.0),
            heat_loss: heat_loss.0,
            effluent_temperature: measured_k,
            pressure,
            bubble_margin: unit.bubble_margin,
        },
        uncertain,
    ))
}

/// Building the balance's inputs: what is unusable, and the inputs with an uncertainty, in
/// the order they are read.
struct Builder<'a, 'r> {
    unit: &'a UnitSpec,
    rd: &'a Reader<'r>,
    problems: Vec<String>,
    uncertain: UncertainInputs,
}

impl Builder<'_, '_> {
    /// An input with a standard uncertainty `u`, if it has one.
    fn uncertain(&mut self, input: InputRef, u: f64, signal: Option<Signal>, fallback: Fallback) {
        if u > 0.0 {
            self.uncertain.items.push((input, u));
            self.uncertain.labels.push(Label { signal, fallback });
        }
    }

    /// Feed `j`, if its flow, temperature and composition are usable (the composition
    /// normalized, its sum flagged when it is off).
    fn feed(
        &mut self,
        j: usize,
        f: &FeedConfig,
        flags: &mut Vec<Flag>,
        conditions: &mut Vec<Condition>,
        signals: &mut Signals,
    ) -> Option<FeedInput> {
        let (unit, rd) = (self.unit, self.rd);
        let flow = rd.get(f.flow);
        let temp = rd.get(f.temperature);
        signals.feed_temperatures_k.push(temp.as_ref().ok().map(|t| t.0));
        let mut fractions = Vec::with_capacity(f.composition.len());
        let mut comp_ok = true;
        for (i, s) in f.composition.iter().enumerate() {
            match rd.get(*s) {
                Ok((x, u)) => {
                    fractions.push(x);
                    self.uncertain(InputRef::FeedFraction(j, i), u, Some(*s), Fallback::FeedFraction(j, i));
                }
                Err(p) => {
                    self.problems.push(p);
                    comp_ok = false;
                }
            }
        }
        let (Ok((flow_si, flow_u)), Ok((t_si, t_u))) = (&flow, &temp) else {
            self.problems.extend(flow.err().into_iter().chain(temp.err()));
            return None;
        };
        if !comp_ok {
            return None;
        }
        let sum: f64 = fractions.iter().sum();
        if sum <= 0.0 {
            self.problems.push(format!("{} composition sums to zero", f.name));
            return None;
        }
        // An analyzer's sum is judged by the monitor over its updates (one alert for a
        // persistent error); a typed-in composition that does not sum to 1 is a condition.
        let analyzer = f.composition.iter().any(|s| matches!(s, Signal::Tag(_)));
        if analyzer && let Some(slot) = signals.feed_sums.get_mut(j) {
            *slot = Some(sum);
        }
        if (sum - 1.0).abs() > unit.analyzer_sum_tolerance {
            if analyzer {
                flags.push(Flag::CompositionSum(j));
            } else {
                flag_composition_sum(j, f, sum, flags, conditions);
            }
            if !f.normalize {
                self.problems.push(format!("{} fractions sum to {sum:.4} and normalize = false", f.name));
                return None;
            }
        }
        for x in &mut fractions {
            *x /= sum;
        }
        self.uncertain(InputRef::FeedFlow(j), *flow_u, Some(f.flow), Fallback::FeedFlow(j));
        self.uncertain(InputRef::FeedTemperature(j), *t_u, Some(f.temperature), Fallback::FeedTemperature(j));
        Some(FeedInput {
            flow: if f.mass_flow { FlowValue::Mass(*flow_si) } else { FlowValue::Molar(*flow_si) },
            temperature: *t_si,
            fractions,
            basis: f.basis,
        })
    }

    /// The reported duty (or why it is unusable) and the heat loss.
    fn heater(&mut self, signals: &mut Signals) -> (Result<(f64, f64), String>, (f64, f64)) {
        let (unit, rd) = (self.unit, self.rd);
        let duty = rd.get(unit.duty);
        let heat_loss = rd.get(unit.heat_loss).unwrap_or((0.0, 0.0));
        if let Ok((d, u)) = duty {
            signals.duty_w = Some(d);
            self.uncertain(InputRef::Duty, u, Some(unit.duty), Fallback::Duty);
        } else if let Err(p) = &duty {
            self.problems.push(p.clone());
        }
        self.uncertain(InputRef::HeatLoss, heat_loss.1, Some(unit.heat_loss), Fallback::HeatLoss);
        (duty, heat_loss)
    }

    /// The effluent: mixed without reactions, or reacted at the conversions the effluent
    /// analyzer measures (reconciled and smoothed), or at the measured or design conversions.
    fn effluent(&mut self, signals: &mut Signals, feeds: &[FeedInput], prior: Prior<'_>) -> Effluent {
        let (unit, rd) = (self.unit, self.rd);
        if let Some((sigs, basis)) = &unit.effluent_composition {
            self.analyzed(signals, feeds, prior, sigs, *basis)
        } else if unit.system.reactions.is_empty() {
            Effluent::Mixed
        } else {
            let mut conversions = Vec::new();
            for (r, c) in unit.conversions.iter().enumerate() {
                let measured = c.tag.and_then(|t| rd.get(t).ok());
                if r == unit.apparent_reaction.unwrap_or(usize::MAX) {
                    signals.measured_conversion = measured.map(|m| m.0);
                }
                let (x, u) = measured.unwrap_or((c.design, c.u));
                conversions.push(Some(x));
                let fallback = if c.tag.is_some() { Fallback::Empty } else { Fallback::Conversion(r) };
                self.uncertain(InputRef::Conversion(r), u, c.tag, fallback);
            }
            Effluent::Reacted { conversions }
        }
    }

    /// The conversions from the effluent analyzer: a new analysis is reconciled and taken
    /// into the estimate; a held one, or an unusable analyzer, leaves the estimate as it is.
    fn analyzed(
        &mut self,
        signals: &mut Signals,
        feeds: &[FeedInput],
        prior: Prior<'_>,
        sigs: &[Signal],
        basis: crate::thermo::Basis,
    ) -> Effluent {
        let (unit, rd) = (self.unit, self.rd);
        let sys = &unit.system;
        let mut reported = Vec::with_capacity(sigs.len());
        let mut usable = true;
        for s in sigs {
            match (s, rd.get(*s)) {
                (Signal::Fixed { .. }, _) => reported.push(None),
                (Signal::Tag(_), Ok((x, u))) => {
                    // Common practice: an online analyzer repeats to a few tenths of a mol%;
                    // 0.3 % absolute is assumed when the configuration states nothing.
                    reported.push(Some((x, if u > 0.0 { u } else { 0.003 })));
                }
                (Signal::Tag(_), Err(p)) => {
                    usable = false;
                    if prior.estimate.is_none() {
                        self.problems.push(p);
                    }
                }
            }
        }
        let estimate = if usable && feeds.len() == unit.feeds.len() {
            match take_in(
                sys,
                || (sys.feed_total(feeds), self.feed_sigma(feeds)),
                &reported,
                basis,
                prior.estimate,
                prior.now_ms,
                unit.effluent_smoothing_ms,
            ) {
                Ok((e, check)) => {
                    signals.effluent_check = check;
                    Some(e)
                }
                Err(why) => {
                    if prior.estimate.is_none() {
                        self.problems.push(format!("the effluent analysis cannot be reconciled: {why}"));
                    }
                    prior.estimate.cloned()
                }
            }
        } else {
            prior.estimate.cloned()
        };
        let Some(estimate) = estimate else { return Effluent::Reacted { conversions: Vec::new() } };
        let mut conversions = Vec::with_capacity(estimate.conversions.len());
        for (r, x) in estimate.conversions.iter().enumerate() {
            conversions.push(Some(*x));
            let measured = unit.conversions.get(r).and_then(|c| c.tag).and_then(|t| rd.get(t).ok());
            if Some(r) == unit.apparent_reaction {
                signals.measured_conversion = Some(measured.map_or(*x, |m| m.0));
            }
            self.uncertain(InputRef::Conversion(r), estimate.u(r), None, Fallback::AnalyzerConversion(r));
        }
        signals.extent_estimate = Some(estimate);
        Effluent::Reacted { conversions }
    }
}

impl Builder<'_, '_> {
    /// The standard uncertainty of each component's feed, mol/s, for the reconciliation of the
    /// effluent analyzer: a fraction's own stated uncertainty, else (a typed-in fraction) the
    /// feed's `composition_uncertainty` for components that are neither absent nor the whole
    /// feed, else (a feed analyzer) 0.3 % absolute. Flow meter errors are left out: they
    /// scale every component alike, which the analyzer's fractions cannot see.
    fn feed_sigma(&self, feeds: &[FeedInput]) -> Vec<f64> {
        let (unit, rd) = (self.unit, self.rd);
        let sys = &unit.system;
        let mut var = vec![0.0; sys.len()];
        for (f, fc) in feeds.iter().zip(&unit.feeds) {
            let flows = sys.feed_flows(f);
            let total: f64 = flows.iter().sum();
            let mass: f64 = flows.iter().zip(&sys.components).map(|(n, c)| n * c.molar_mass).sum::<f64>();
            for (i, (v, s)) in var.iter_mut().zip(&fc.composition).enumerate() {
                let u = match (*s, rd.get(*s)) {
                    (Signal::Fixed { u, .. }, _) if u > 0.0 => u,
                    (Signal::Fixed { si, .. }, _) if si > 0.0 && si < 1.0 => fc.composition_uncertainty,
                    (Signal::Fixed { .. }, _) => 0.0,
                    (Signal::Tag(_), Ok((_, u))) if u > 0.0 => u,
                    (Signal::Tag(_), _) => 0.003,
                };
                let scale = match f.basis {
                    crate::thermo::Basis::Mole => total,
                    crate::thermo::Basis::Mass => mass / sys.components[i].molar_mass.max(1e-9),
                };
                *v += (u * scale).powi(2);
            }
        }
        var.into_iter().map(f64::sqrt).collect()
    }
}

/// A typed-in composition of feed `j` that does not sum to 1: flagged, with a model-validity
/// condition.
fn flag_composition_sum(
    j: usize,
    f: &FeedConfig,
    sum: f64,
    flags: &mut Vec<Flag>,
    conditions: &mut Vec<Condition>,
) {
    let code = format!("composition_sum:{}", f.name.replace(' ', "_"));
    flags.push(Flag::CompositionSum(j));
    conditions.push(Condition {
        cause: Cause::ModelValidity,
        subject: code,
        severity: Severity::Low,
        message: format!(
            "{} fractions sum to {sum:.4}, not 1; they are rescaled, but check the analyzer calibration.",
            f.name
        ),
        evidence: evidence(&[("sum", sum.into())]),
        magnitude: None,
    });
}

fn solve_all(
    unit: &UnitSpec,
    inputs: &Inputs,
    uncertain: &UncertainInputs,
    measured: Option<(f64, f64)>,
    (eval, flags, conditions): (&mut Evaluation, &mut Vec<Flag>, &mut Vec<Condition>),
    memo: &mut BubbleMemo,
) {
    let sys = &unit.system;
    let outcome = match sys.solve_with(inputs, Unknown::Temperature, memo) {
        Ok(o) => o,
        Err(e) => {
            eval.reason = Some(e.to_string());
            flags.push(Flag::SolverFailed);
            return;
        }
    };
    eval.predicted_k = Some(outcome.t_out);
    eval.signals.heat_capacity_w_k = Some(outcome.cp_out);
    eval.signals.feed_mol_s = Some(outcome.feed_flows.iter().flatten().sum());
    if let Some(r) = unit.apparent_reaction.filter(|r| *r < sys.reactions.len()) {
        let key = sys.reactions[r].key;
        eval.signals.key_feed_mol_s = Some(outcome.feed_flows.iter().map(|f| f[key]).sum());
    }
    if !uncertain.items.is_empty() {
        let (u, dominant) = combined(sys, inputs, &outcome, &uncertain.items);
        eval.u_pred_k = Some(u);
        eval.dominant_input = dominant.map(|k| uncertain.labels[k].render(unit));
    }
    for f in &outcome.flags {
        let code = f.code();
        if unit.accepted_flags.contains(&code) {
            flags.push(Flag::Model(f.clone()));
            continue;
        }
        let severity = match f {
            crate::thermo::Flag::TwoPhaseRisk { .. } | crate::thermo::Flag::AboveCritical { .. } => {
                Severity::Medium
            }
            _ => Severity::Low,
        };
        conditions.push(Condition {
            cause: Cause::ModelValidity,
            subject: code.clone(),
            severity,
            message: format!("{f}."),
            evidence: evidence(&[("flag", code.clone().into()), ("predicted_k", outcome.t_out.into())]),
            magnitude: None,
        });
        flags.push(Flag::Model(f.clone()));
    }
    let Some((t_meas, _)) = measured else { return };
    eval.residual_k = Some(t_meas - outcome.t_out);
    // At the measured temperature the balance needs no solve: the streams are those of the
    // prediction, the component enthalpies are evaluated once.
    let at = sys.enthalpies_at(t_meas);
    // Heater effectiveness: the duty needed to reach the measured temperature / reported duty.
    if let (Some(needed), Some(reported)) = (sys.needed_duty(inputs, &outcome, &at), inputs.duty) {
        eval.signals.needed_duty_w = Some(needed);
        if reported.abs() > 1.0 {
            eval.effectiveness = Some(needed / reported);
        }
    }
    // Apparent conversion: the conversion that reproduces the measured temperature.
    if let (Some(r), Effluent::Reacted { conversions }) = (unit.apparent_reaction, &inputs.effluent)
        && r < conversions.len()
    {
        match sys.apparent_conversion(inputs, &outcome, r, &at) {
            Ok(x) => eval.apparent_conversion = Some(x),
            Err(_) => flags.push(Flag::ApparentConversionUnavailable),
        }
    }
}
