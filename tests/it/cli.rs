//! End-to-end tests of the `efftemp` binary: `calc` on the shipped examples and every error
//! path (a located message and exit code 2).

use assert_cmd::cargo::cargo_bin_cmd;
use serde_json::Value;

use crate::util;

fn examples() -> Vec<std::path::PathBuf> {
    let mut v: Vec<_> = std::fs::read_dir(util::root().join("config/examples"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    v.sort();
    assert!(v.len() >= 5, "{v:?}");
    v
}

#[test]
fn calc_runs_every_example_as_text_and_json() {
    for path in examples() {
        let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&path).output().unwrap();
        assert!(out.status.success(), "{}: {}", path.display(), String::from_utf8_lossy(&out.stderr));
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("effluent temperature:"), "{text}");
        assert!(text.contains("not a safety instrumented function"), "{text}");

        let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&path).arg("--json").output().unwrap();
        assert!(out.status.success(), "{}", path.display());
        let v: Value = serde_json::from_slice(&out.stdout).unwrap();
        for key in [
            "effluent_temperature_k",
            "duty_w",
            "conversion",
            "effluent_flow_mol_s",
            "effluent_composition",
            "enthalpy_path",
            "bubble_point_k",
            "warnings",
        ] {
            assert!(v.get(key).is_some(), "{}: missing {key}", path.display());
        }
        let t = v["effluent_temperature_k"].as_f64().unwrap();
        assert!(t.is_finite() && t > 250.0 && t < 600.0, "{}: {t}", path.display());
        let x: f64 =
            v["effluent_composition"].as_object().unwrap().values().map(|x| x.as_f64().unwrap()).sum();
        assert!((x - 1.0).abs() < 1e-12);
    }
}

#[test]
fn help_shows_the_cautions() {
    for args in [vec!["--help"], vec!["calc", "--help"]] {
        let out = cargo_bin_cmd!("efftemp").args(&args).output().unwrap();
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains("not a safety instrumented function"), "{args:?}: {text}");
        assert!(text.contains("must not be used for automatic control actions"));
    }
}

const GOOD_FEED: &str =
    "[[feed]]\nflow = 10.0\ntemperature = 330.0\ncomposition = { water = 0.7, methyl_acetate = 0.3 }\n";

/// (name, case text, expected line, expected message fragment)
fn error_cases() -> Vec<(&'static str, String, usize, &'static str)> {
    let reaction = "[[reaction]]\nstoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }\nkey = \"methyl_acetate\"\n";
    vec![
        ("syntax", "[[feed]\nflow = 1\n".into(), 1, "unclosed array table"),
        ("unknown key", format!("{GOOD_FEED}flw = 3\n[heater]\nduty = 1.0\n"), 5, "unknown field `flw`"),
        (
            "unknown component",
            "[[feed]]\nflow = 1.0\ntemperature = 300.0\ncomposition = { watr = 1.0 }\n[heater]\nduty = 0.0\n".into(),
            4,
            "unknown component `watr`: did you mean water",
        ),
        ("unknown unit", format!("{GOOD_FEED}[heater]\nduty = \"3 furlongs\"\n"), 6, "unknown unit `furlongs`"),
        (
            "composition sum",
            "[[feed]]\nflow = 1.0\ntemperature = 300.0\ncomposition = { water = 0.7, methanol = 0.2 }\n[heater]\nduty = 0.0\n".into(),
            4,
            "fractions sum to 0.900000",
        ),
        ("missing duty", GOOD_FEED.to_string(), 1, "duty is required"),
        ("negative temperature", format!("{GOOD_FEED}[heater]\nduty = 1.0\n").replace("330.0", "\"-300 degC\""), 3, "above absolute zero"),
        (
            "non-physical component",
            format!("[components.water]\ntc = 300.0\n{GOOD_FEED}[heater]\nduty = 1.0\n"),
            2,
            "must be above the boiling point",
        ),
        (
            "negative molar mass",
            format!("[components.mystery]\nmolar_mass = -5.0\ntc = 500.0\n{GOOD_FEED}[heater]\nduty = 1.0\n"),
            2,
            "molar mass must be positive",
        ),
        (
            "missing data for the chosen path",
            "[components.solvent_x]\nmolar_mass = 100.0\ntc = 550.0\ntb = 400.0\nhvap_tb = 35000.0\nhf_ig = -200000.0\ncp_ig = [50.0, 0.3]\n[model]\nenthalpy = \"liquid-cp\"\n[[feed]]\nflow = 1.0\ntemperature = 300.0\ncomposition = { solvent_x = 1.0 }\n[heater]\nduty = 1.0\n".into(),
            1,
            "no data for the liquid-cp path (missing: hf_liq, cp_liq)",
        ),
        ("bad path name", format!("[model]\nenthalpy = \"magic\"\n{GOOD_FEED}[heater]\nduty = 1.0\n"), 2, "unknown enthalpy path"),
        (
            "conversion too high",
            format!("{GOOD_FEED}{reaction}conversion = 2.5\n[heater]\nduty = 1.0\n"),
            8,
            "`reaction[1].conversion`: conversion must be within 0..1 (0 <= X <= 1",
        ),
        ("no root in range", format!("{GOOD_FEED}[heater]\nduty = \"900 MW\"\n"), 6, "no effluent temperature closes the balance"),
        (
            "duty given when solving for it",
            format!("{GOOD_FEED}[heater]\nduty = 1.0\n[effluent]\ntemperature = 340.0\n[solve]\nunknown = \"duty\"\n"),
            6,
            "remove the duty",
        ),
        (
            "negative conversion",
            format!("{GOOD_FEED}{reaction}conversion = -0.1\n[heater]\nduty = 1.0\n"),
            8,
            "`reaction[1].conversion`: conversion must be within 0..1 (0 <= X <= 1",
        ),
        (
            "degC written as K",
            format!("{GOOD_FEED}[heater]\nduty = 1.0\n").replace("330.0", "57"),
            3,
            "`feed[1].temperature`: 57.00 K (given `57`; a bare number is in K) is too cold for a liquid",
        ),
        ("unknown unknown", format!("{GOOD_FEED}[heater]\nduty = 1.0\n[solve]\nunknown = \"pressure\"\n"), 8, "unknown `pressure`"),
        (
            "key not in reaction",
            format!("{GOOD_FEED}[[reaction]]\nstoichiometry = {{ methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }}\nkey = \"ethanol\"\nconversion = 0.3\n[heater]\nduty = 1.0\n"),
            7,
            "key `ethanol` is not in this reaction",
        ),
        (
            "unbalanced reaction",
            format!("{GOOD_FEED}[[reaction]]\nstoichiometry = {{ methyl_acetate = -1, acetic_acid = 1, methanol = 1 }}\nkey = \"methyl_acetate\"\nconversion = 0.3\n[heater]\nduty = 1.0\n"),
            6,
            "reaction 1 does not conserve elements",
        ),
        (
            // Heating to 400 degC with 1 W would need the endothermic hydrolysis to run backwards.
            "no conversion explains the temperature",
            format!("{GOOD_FEED}{reaction}[heater]\nduty = 1.0\n[effluent]\ntemperature = \"400 degC\"\n[solve]\nunknown = \"conversion\"\n"),
            11,
            "the conversion of reaction 1 that reproduces the effluent temperature would be -",
        ),
        (
            "one component named twice",
            "[[feed]]\nflow = 1.0\ntemperature = 300.0\ncomposition = { water = 0.5, Water = 0.5 }\n[heater]\nduty = 0.0\n".into(),
            4,
            "`Water` names the same component as `water`",
        ),
        (
            "negative bubble margin",
            format!("[model]\npressure = \"3 bar\"\nbubble_margin = \"-5 K\"\n{GOOD_FEED}[heater]\nduty = 1.0\n"),
            3,
            "margin must not be negative",
        ),
        (
            "two feeds with one name",
            format!("{GOOD_FEED}name = \"recycle\"\n{GOOD_FEED}name = \"recycle\"\n[heater]\nduty = 1.0\n"),
            10,
            "feed 1 is also called `recycle`",
        ),
        (
            "uncertainty of the conversion being solved for",
            format!("{GOOD_FEED}{reaction}conversion_uncertainty = 0.02\n[heater]\nduty = 1.0\n[effluent]\ntemperature = 340.0\n[solve]\nunknown = \"conversion\"\n"),
            8,
            "this conversion is the unknown",
        ),
        (
            "molar uncertainty on a mass flow",
            "[[feed]]\nflow = \"2 t/h\"\ntemperature = 300.0\ncomposition = { water = 1.0 }\nflow_uncertainty = \"1 kmol/h\"\n[heater]\nduty = 0.0\n".into(),
            5,
            "`1 kmol/h` is a molar flow but this feed's flow is a mass flow",
        ),
        ("gauge pressure", format!("[model]\npressure = \"3 barg\"\n{GOOD_FEED}[heater]\nduty = 1.0\n"), 2, "gauge pressure"),
        (
            "conversion with nothing to solve",
            format!("{GOOD_FEED}{reaction}conversion = 0.3\n[heater]\nduty = 1.0\n[effluent]\ntemperature = 340.0\n[solve]\nunknown = \"conversion\"\n"),
            14,
            "every reaction has a conversion",
        ),
    ]
}

#[test]
fn calc_error_paths_are_located_and_exit_2() {
    let mut failures = Vec::new();
    for (name, text, line, fragment) in error_cases() {
        let (_dir, path) = util::temp_file("case.toml", &text);
        let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&path).output().unwrap();
        let stderr = String::from_utf8(out.stderr).unwrap();
        let located = format!("case.toml:{line}:");
        if out.status.code() != Some(2)
            || !stderr.contains(fragment)
            || !stderr.contains(&located)
            || !out.stdout.is_empty()
        {
            failures.push(format!(
                "{name}: want exit 2, `{located}` and `{fragment}`; got {:?}:\n{stderr}",
                out.status.code()
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// `--strict` turns a validity warning into exit 3, after the result (warnings first) is
/// printed; without a warning it changes nothing. Source of the warning: water boils at
/// 373.12 K at 101325 Pa (CRC Handbook 95th ed., via config/components.toml); 10 mol/s of
/// water heated from 330 K by 60 kW would reach about 410 K (liquid Cp about 75.3 J/(mol K), CRC).
#[test]
fn calc_strict_fails_a_result_outside_validity_with_exit_3() {
    let boiling = "[model]\npressure = \"1 atm\"\n[[feed]]\nflow = 10.0\ntemperature = 330.0\ncomposition = { water = 1.0 }\n[heater]\nduty = \"60 kW\"\n";
    let (_dir, path) = util::temp_file("case.toml", boiling);
    let calc = |args: &[&str]| cargo_bin_cmd!("efftemp").arg("calc").arg(&path).args(args).output().unwrap();

    let out = calc(&[]);
    assert_eq!(out.status.code(), Some(0));
    let text = String::from_utf8(out.stdout).unwrap();
    let (w, r) = (text.find("two-phase risk").unwrap(), text.find("\nResult").unwrap());
    assert!(w < r, "warnings must come before the result:\n{text}");

    let out = calc(&["--strict"]);
    assert_eq!(out.status.code(), Some(3));
    assert!(String::from_utf8(out.stdout).unwrap().contains("two-phase risk"));
    let stderr = String::from_utf8(out.stderr).unwrap();
    assert!(
        stderr.contains("case.toml: the result has 1 validity warning(s)") && stderr.contains("--strict"),
        "{stderr}"
    );

    let out = calc(&["--json", "--strict"]);
    assert_eq!(out.status.code(), Some(3));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(
        v["warnings"].as_array().unwrap().iter().any(|w| w.as_str().unwrap().starts_with("two-phase risk"))
    );
    assert_eq!(v["flags"], serde_json::json!(["two_phase_risk"]));

    let (_dir2, fine) = util::temp_file("case.toml", &boiling.replace("60 kW", "10 kW"));
    let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&fine).arg("--strict").output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stdout));

    let help = cargo_bin_cmd!("efftemp").args(["calc", "--help"]).output().unwrap();
    let help = String::from_utf8(help.stdout).unwrap();
    assert!(help.contains("--strict") && help.contains("exit 3"), "{help}");
}

#[test]
fn calc_missing_file_is_a_usage_error() {
    let out = cargo_bin_cmd!("efftemp").args(["calc", "/nonexistent/case.toml"]).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("cannot read the file"));
}

/// A user library file adds a component; a bad value in it is located in that file.
#[test]
fn calc_uses_user_library_files() {
    let dir = tempfile::tempdir().unwrap();
    // Source: an invented solvent for this test only (values in the range of a C5 ester).
    let lib = "[sources]\nTEST = \"invented for a test\"\n\n[components.solvent-q]\nformula = \"C5H10O2\"\nmolar_mass = 102.13\ntb = 372.0\ntc = 560.0\nhvap_tb = 34000.0\nhf_ig = -470000.0\ncp_ig = [60.0, 0.3]\nhf_liq = -510000.0\ncp_liq = [200.0]\nsource = \"TEST\"\n";
    std::fs::write(dir.path().join("mylib.toml"), lib).unwrap();
    let case = "[model]\nlibraries = [\"mylib.toml\"]\n[[feed]]\nflow = 2.0\ntemperature = 300.0\ncomposition = { solvent_q = 0.5, water = 0.5 }\n[heater]\nduty = \"10 kW\"\n";
    let path = dir.path().join("case.toml");
    std::fs::write(&path, case).unwrap();
    let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&path).arg("--json").output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    // Constant Cp: 2 mol/s × ½(200 + 75.3) J/(mol K) ≈ 275 W/K, so 10 kW heats by about 36 K.
    let dt = v["effluent_temperature_k"].as_f64().unwrap() - 300.0;
    assert!((dt - 36.3).abs() < 0.5, "{dt}");
    assert_eq!(v["enthalpy_path"]["solvent_q"], "liquid-cp");

    std::fs::write(dir.path().join("mylib.toml"), lib.replace("tc = 560.0", "tc = 350.0")).unwrap();
    let out = cargo_bin_cmd!("efftemp").arg("calc").arg(&path).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr.contains("mylib.toml:8:6: `components.solvent-q.tc`"), "{stderr}");
}
