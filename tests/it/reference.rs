//! Reproduce the vetted reference cases (generated with chemicals/CoolProp/iapws and scipy;
//! see tests/fixtures/reference/checks.md) through the full `calc` case pipeline.

use std::sync::Arc;

use efftemp::config::case::Case;
use efftemp::source::SourceText;
use serde_json::Value;

use crate::util;

fn run(text: &str) -> efftemp::config::case::Report {
    let case = Case::check(Arc::new(SourceText::new("reference.toml", text)))
        .unwrap_or_else(|e| panic!("{e}\n{text}"));
    case.run().unwrap_or_else(|e| panic!("{e}\n{text}"))
}

/// Source: tests/fixtures/reference/balance_cases.json (group d of checks.md): ideal-gas +
/// Watson path, expected T_out from scipy brentq (xtol 1e-12 K), re-solved with 40-digit
/// mpmath; target 1e-6 K.
#[test]
fn watson_path_balance_cases() {
    let data = util::json("reference/balance_cases.json");
    for case in data["cases"].as_array().unwrap() {
        let text = util::reference_case_toml(case, "ideal-gas-watson", None);
        let report = run(&text);
        let expected = case["expected"]["T_out_K"].as_f64().unwrap();
        let got = report.effluent_temperature_k;
        assert!((got - expected).abs() < 1e-6, "{}: {got} vs {expected}", case["id"]);
        let h_in = case["expected"]["H_feed_total_W"].as_f64().unwrap();
        assert!((report.feed_enthalpy_w - h_in).abs() <= 1e-9 * h_in.abs(), "{}: H_in", case["id"]);
    }
}

/// Source: tests/fixtures/reference/liquid_path_cases.json (group m of checks.md): liquid-Cp
/// path and ideal Raoult bubble point; target 1e-6 K on T_out and T_bubble.
#[test]
fn liquid_path_balance_cases_and_bubble_points() {
    let data = util::json("reference/liquid_path_cases.json");
    for case in data["cases"].as_array().unwrap() {
        let p = case["P_Pa"].as_f64();
        let text = util::reference_case_toml(case, "liquid-cp", p);
        let report = run(&text);
        let e = &case["expected"];
        let id = &case["id"];
        let t = e["T_out_K"].as_f64().unwrap();
        assert!(
            (report.effluent_temperature_k - t).abs() < 1e-6,
            "{id}: {} vs {t}",
            report.effluent_temperature_k
        );
        let tb = e["T_bubble_effluent_K"].as_f64().unwrap();
        let got_tb = report.bubble_point_k.unwrap();
        assert!((got_tb - tb).abs() < 1e-6, "{id}: bubble {got_tb} vs {tb}");
        let boils = e["effluent_boils"].as_bool().unwrap();
        assert_eq!(report.flags.iter().any(|f| f == "two_phase_risk"), boils, "{id}: two-phase flag");
        // Every component the reference lists as extrapolated is flagged.
        for c in case["cp_liq_extrapolated_components"].as_array().unwrap() {
            let code = format!("range_cp_liq:{}", c.as_str().unwrap());
            assert!(report.flags.contains(&code), "{id}: missing {code} in {:?}", report.flags);
        }
    }
}

/// Source: liquid_path_cases.json `bubble_points` (ideal Raoult's law with the DIPPR-101
/// correlations of Perry's Table 2-8): T_bubble and vapour composition.
#[test]
fn raoult_bubble_points() {
    let data = util::json("reference/liquid_path_cases.json");
    for bp in data["bubble_points"].as_array().unwrap() {
        let x = bp["x"].as_object().unwrap();
        let comp: Vec<String> =
            x.iter().map(|(k, v)| format!("\"{k}\" = {:?}", v.as_f64().unwrap())).collect();
        let text = format!(
            "[model]\npressure = {:?}\n[[feed]]\nflow = 1.0\ntemperature = 300.0\ncomposition = {{ {} }}\n[heater]\nduty = 0.0\n",
            bp["P_Pa"].as_f64().unwrap(),
            comp.join(", ")
        );
        let report = run(&text);
        let want = bp["expected"]["T_bubble_K"].as_f64().unwrap();
        let got = report.bubble_point_k.unwrap();
        assert!((got - want).abs() < 1e-6, "{}: {got} vs {want}", bp["id"]);
    }
}

#[allow(dead_code)]
fn number(v: &Value) -> f64 {
    v.as_f64().unwrap()
}
