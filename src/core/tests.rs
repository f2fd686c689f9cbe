//! [`UnitCore::step`] on a handful of hand-made intervals: what one interval in gives out.

#![allow(clippy::unwrap_used)]

use std::sync::Arc;

use super::alerts::{EventKind, Shelf};
use super::assembly::{Closed, TagStatus, TagValue};
use super::flags::Flag;
use super::monitor::MonitorState;
use super::spec::UnitSpec;
use super::vocabulary::Cause;
use super::{Outcome, UnitCore};
use crate::config::SiteConfig;

/// 2026-12-01T00:00:00Z.
const T0: i64 = 1_796_083_200_000;

/// One water feed heated by a duty tag; tags in table order: FI-101 (mol/s), TI-102 (degC),
/// JI-103 (kW), TI-109 (degC).
fn spec() -> Arc<UnitSpec> {
    Arc::new(unit_spec("{ water = 1.0 }", ""))
}

/// Unit `T-1` as the site loader builds it: one feed of `composition` (flow FI-101 in mol/s,
/// temperature TI-102 in degC) heated by a duty tag (JI-103, kW), an effluent thermometer
/// (TI-109, degC), one-minute intervals in UTC, and the unit tables in `extra` after these.
pub(super) fn unit_spec(composition: &str, extra: &str) -> UnitSpec {
    load(composition, extra).unwrap().units[0].spec.clone()
}

/// The site file of [`unit_spec`], loaded.
fn load(composition: &str, extra: &str) -> Result<SiteConfig, String> {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    std::fs::create_dir_all(dir.path().join("exports")).unwrap();
    let text = format!(
        r#"[site]
time_zone = "UTC"
[[unit]]
name = "T-1"
[unit.input]
directory = "exports"
[unit.timing]
interval = "1m"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {composition}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
{extra}"#
    );
    std::fs::write(&path, text).unwrap();
    SiteConfig::load(&path).map_err(|e| e.to_string())
}

fn good(v: f64) -> TagValue {
    TagValue {
        value: Some(v),
        status: TagStatus::Ok,
        uncertain: false,
        samples: 6,
        bad: 0,
        out_of_range: 0,
        age_ms: Some(0),
        min_max: Some((v, v)),
    }
}

fn unusable(status: TagStatus) -> TagValue {
    TagValue { value: None, status, samples: 0, age_ms: None, min_max: None, ..good(0.0) }
}

/// The `k`-th one-minute interval: 10 mol/s of water at 30 °C, 30 kW, measured `tout` °C.
fn interval(k: i64, tout: Option<f64>) -> Closed {
    let effluent = tout.map_or_else(|| unusable(TagStatus::Missing), good);
    Closed {
        start_ms: T0 + k * 60_000,
        end_ms: T0 + (k + 1) * 60_000,
        tags: vec![good(10.0), good(30.0), good(30.0), effluent],
        conflicting_duplicates: 0,
    }
}

/// Water heated from 30 °C by 30 kW at 10 mol/s: ΔT = Q / (F · Cp) with the mean liquid Cp of
/// water over 30–70 °C, about 75.3 J/(mol K). Source: IAPWS-95 (via the CoolProp values in
/// tests/fixtures/reference/checks.md), 75.3 J/(mol K) at 25 °C and 75.4 at 60–70 °C.
const T_OUT_C: f64 = 30.0 + 30_000.0 / (10.0 * 75.35);

fn run(core: &mut UnitCore, intervals: &[Closed]) -> Vec<Outcome> {
    intervals.iter().map(|c| core.step(c)).collect()
}

#[test]
fn a_steady_interval_is_predicted_from_the_enthalpy_balance() {
    let mut core = UnitCore::new(spec(), None, Default::default());
    let out = run(&mut core, &(0..30).map(|k| interval(k, Some(70.0))).collect::<Vec<_>>());
    // One interval tells nothing about steadiness; thirty identical ones do.
    assert_eq!(out[0].evaluation.flags, vec![Flag::Unsteady]);
    assert_eq!(out[0].state, MonitorState::Unsteady);
    let o = &out[29];
    let e = &o.evaluation;
    let predicted_c = e.predicted_k.unwrap() - 273.15;
    assert!((predicted_c - T_OUT_C).abs() < 0.3, "predicted {predicted_c} °C, hand balance {T_OUT_C} °C");
    // The residual is measured minus predicted.
    assert!((e.residual_k.unwrap() - (70.0 - predicted_c)).abs() < 1e-9);
    // First-order propagation of 1 % flow, 2 % duty and 0.5 K feed temperature: the duty and
    // the flow give about 0.8 K and 0.4 K of the 39.8 K rise.
    let u = e.u_pred_k.unwrap();
    assert!(u > 0.8 && u < 1.2, "u(T_pred) = {u}");
    assert!(e.effectiveness.is_some_and(|x| (x - 1.0).abs() < 0.02), "{:?}", e.effectiveness);
    assert!(e.flags.is_empty(), "{:?}", e.flags);
    assert_eq!(o.state, MonitorState::Learning);
    assert!(out.iter().all(|o| o.events.is_empty() && o.notes.is_empty()));
}

#[test]
fn a_missing_thermometer_raises_a_data_quality_alert_that_clears_when_it_is_back() {
    let mut core = UnitCore::new(spec(), None, Default::default());
    let tout = Some(T_OUT_C);
    let seq: Vec<Closed> =
        (0..12).map(|k| interval(k, if (3..6).contains(&k) { None } else { tout })).collect();
    let out = run(&mut core, &seq);
    // The thermometer's intervals are flagged; the prediction does not need it.
    assert_eq!(out[3].evaluation.flags, vec![Flag::Unusable(3, TagStatus::Missing)]);
    assert!(out[3].evaluation.predicted_k.is_some() && out[3].evaluation.residual_k.is_none());
    // Raised after the on-delay (2 intervals), cleared after the off-delay (3 clean ones).
    let events: Vec<(usize, EventKind)> =
        out.iter().enumerate().flat_map(|(i, o)| o.events.iter().map(move |e| (i, e.event))).collect();
    assert_eq!(events, vec![(4, EventKind::Raised), (8, EventKind::Cleared)]);
    let (raised, cleared) = (&out[4].events[0], &out[8].events[0]);
    assert_eq!((raised.cause, raised.subject.as_str()), (Cause::DataQuality, "TI-109"));
    assert_eq!(raised.alert_id, cleared.alert_id);
    assert!(cleared.sequence > raised.sequence);
    assert_eq!(raised.time, "2026-12-01T00:05:00+00:00", "the data time of the interval end");
}

#[test]
fn the_same_intervals_give_the_same_outcomes() {
    let seq: Vec<Closed> =
        (0..10).map(|k| interval(k, if k == 4 || k == 5 { None } else { Some(70.0) })).collect();
    let a = run(&mut UnitCore::new(spec(), None, Default::default()), &seq);
    let b = run(&mut UnitCore::new(spec(), None, Default::default()), &seq);
    assert_eq!(a, b);
    assert!(a.iter().any(|o| !o.events.is_empty()), "the sequence raises an alert");
}

#[test]
fn a_shelved_cause_is_tracked_but_not_announced() {
    let mut core = UnitCore::new(spec(), None, Default::default());
    let note = core.shelve(Shelf {
        selector: "data_quality".into(),
        until_ms: T0 + 3_600_000,
        reason: "thermometer replaced".into(),
        by: "jdoe".into(),
    });
    assert!(note.contains("data_quality") && note.contains("jdoe"), "{note}");
    let out = run(&mut core, &(0..6).map(|k| interval(k, None)).collect::<Vec<_>>());
    assert!(out.iter().all(|o| o.events.is_empty()), "shelved: no events");
    assert_eq!(core.alerts().active().len(), 1, "but tracked");
    assert!(core.alerts().active()[0].shelved);
    assert!(core.unshelve("data_quality"));
}

#[test]
fn an_interval_without_a_usable_duty_is_not_computed() {
    let mut core = UnitCore::new(spec(), None, Default::default());
    let mut c = interval(0, Some(70.0));
    c.tags[2] = unusable(TagStatus::Bad);
    let o = core.step(&c);
    let e = &o.evaluation;
    assert_eq!(e.predicted_k, None);
    assert_eq!(e.flags, vec![Flag::Unusable(2, TagStatus::Bad), Flag::NotComputed]);
    assert!(e.reason.as_deref().is_some_and(|r| r.contains("JI-103")), "{:?}", e.reason);
    let c = &e.conditions[0];
    assert_eq!((c.cause, c.subject.as_str()), (Cause::DataQuality, "JI-103"));
    assert_eq!(o.state, MonitorState::Paused, "no prediction: the monitor pauses");
}

#[test]
fn a_rebaseline_starts_learning_again() {
    let mut core = UnitCore::new(spec(), None, Default::default());
    let mut c = interval(0, Some(70.0));
    c.tags[2] = unusable(TagStatus::Bad);
    assert_eq!(core.step(&c).state, MonitorState::Paused);
    core.rebaseline();
    assert_eq!(core.monitor().state, MonitorState::Learning);
    assert!(core.monitor().baseline.is_none());
}

/// Methyl acetate hydrolysis with an effluent analyzer (tags AI-110A..D after the four of
/// [`unit_spec`]).
const ANALYZED: &str = r#"
[unit.effluent.composition]
methyl_acetate = { tag = "AI-110A", unit = "%", kind = "analyzer", uncertainty = "0.3 %" }
water = { tag = "AI-110B", unit = "%", kind = "analyzer", uncertainty = "0.3 %" }
acetic_acid = { tag = "AI-110C", unit = "%", kind = "analyzer", uncertainty = "0.3 %" }
methanol = { tag = "AI-110D", unit = "%", kind = "analyzer", uncertainty = "0.3 %" }
"#;
const REACTION: &str = r#"
[[unit.reaction]]
name = "hydrolysis"
stoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }
key = "methyl_acetate"
design_conversion = 0.4
conversion_uncertainty = 0.02
"#;

#[test]
fn an_effluent_analyzer_needs_the_reactions_it_measures() {
    let err = load("{ methyl_acetate = 0.25, water = 0.75 }", ANALYZED).unwrap_err();
    assert!(
        err.contains("effluent.composition") && err.contains("add their [[unit.reaction]] entries"),
        "{err}"
    );
    assert!(load("{ methyl_acetate = 0.25, water = 0.75 }", &format!("{ANALYZED}{REACTION}")).is_ok());
}

#[test]
fn analyzer_noise_adds_no_more_than_the_thermometers_own_to_the_prediction() {
    // 10 mol/s of 25 % methyl acetate at 30 °C, 30 kW, conversion 0.5; an analyzer result
    // every 10 min with 0.3 mol% absolute noise on each component (summing to 99-101 %), held
    // in the export in between; a thermometer with 0.05 K of noise.
    let spec =
        Arc::new(unit_spec("{ methyl_acetate = 0.25, water = 0.75 }", &format!("{ANALYZED}{REACTION}")));
    let mut core = UnitCore::new(spec, None, Default::default());
    let mut rng = crate::rng::Rng::new(11);
    let x = 0.5;
    let truth = [2.5 * (1.0 - x), 7.5 - 2.5 * x, 2.5 * x, 2.5 * x].map(|n| 100.0 * n / 10.0);
    let mut held = truth;
    let (mut pred, mut meas) = (Vec::new(), Vec::new());
    for k in 0..2000 {
        if k % 10 == 0 {
            held = truth.map(|v| v + 0.3 * rng.normal());
        }
        let t_meas = 65.0 + 0.05 * rng.normal();
        let mut c = interval(k, Some(t_meas));
        c.tags.extend(held.iter().map(|v| good(*v)));
        let o = core.step(&c);
        if k >= 300 {
            pred.push(o.evaluation.predicted_k.unwrap());
            meas.push(t_meas);
        }
        assert!(o.events.is_empty(), "interval {k}: {:?}", o.events);
    }
    let sd = |v: &[f64]| {
        let m = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    };
    let (sp, sm) = (sd(&pred), sd(&meas));
    // Measured when written: 0.032 K against the thermometer's 0.050 K.
    assert!(sp <= 1.0 * sm, "predicted scatters by {sp:.3} K, the thermometer by {sm:.3} K");
}
