//! The commands an engineer runs against a site file (`check`, `identify`, `shelve`), as a new
//! user meets them: closed pipes, pasting what `identify` prints, typos in selectors and
//! durations, out-of-range settings, plant units, informational tags and unset dynamics.

use std::path::Path;
use std::process::{Command, Stdio};

use assert_cmd::cargo::cargo_bin_cmd;
use efftemp::config::SiteConfig;
use efftemp::sinks::softtags::SOFT_TAG_HEADER;

use crate::util::{self, TestPlant};

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_efftemp"))
}

/// Run the binary with standard output (and, when `stderr_too`, standard error) on a pipe
/// whose reader is closed before the program starts, so every write to it fails with EPIPE.
fn with_closed_pipe(args: &[&str], stderr_too: bool) -> std::process::ExitStatus {
    let (reader, writer) = std::io::pipe().unwrap();
    drop(reader);
    let mut cmd = bin();
    cmd.args(args).stdin(Stdio::null());
    if stderr_too {
        cmd.stderr(writer.try_clone().unwrap());
    } else {
        cmd.stderr(Stdio::null());
    }
    cmd.stdout(writer).status().unwrap()
}

fn check(path: &Path) -> std::process::Output {
    cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(path).output().unwrap()
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

#[test]
fn no_command_panics_on_a_closed_pipe() {
    let example = util::root().join("config/example-site.toml");
    let example = example.to_str().unwrap();
    let case = util::root().join("config/examples/ester-watson-inline.toml");
    let case = case.to_str().unwrap();
    let bad = tempfile::tempdir().unwrap();
    let bad_site = bad.path().join("site.toml");
    let broken = std::fs::read_to_string(example).unwrap().replace("interval = \"1m\"", "interval = \"7m\"");
    std::fs::write(&bad_site, broken).unwrap();
    let bad_site = bad_site.to_str().unwrap();
    let plant = TestPlant::new("");
    let plant_cfg = plant.config.to_str().unwrap();
    // (arguments, the exit code the command has anyway)
    let runs: Vec<(Vec<&str>, i32)> = vec![
        (vec!["check", "--config", example], 0),
        (vec!["check", "--config", bad_site], 2),
        (vec!["calc", case], 0),
        (vec!["calc", case, "--json"], 0),
        (vec!["calc", "/nonexistent/case.toml"], 2),
        (vec!["--help"], 0),
        (vec!["check", "--help"], 0),
        // No data yet: the report says so and writes nothing (exit 2).
        (vec!["report", "--config", plant_cfg], 2),
        (vec!["identify", "--config", plant_cfg, "--unit", "T-1"], 1),
        (
            vec![
                "shelve",
                "--config",
                plant_cfg,
                "--unit",
                "T-1",
                "--selector",
                "x",
                "--for",
                "8h",
                "--reason",
                "r",
            ],
            2,
        ),
    ];
    for (args, code) in runs {
        // `| head -1`: standard output closed; `2>&1 | head -1`: both.
        for stderr_too in [false, true] {
            let status = with_closed_pipe(&args, stderr_too);
            assert_eq!(status.code(), Some(code), "{args:?} (stderr closed too: {stderr_too}): {status}");
        }
    }
}

/// Wide rows of the test plant every 10 s whose thermometer answers the balance 120 s late.
fn delayed_rows(t0: i64, t1: i64) -> String {
    let base = 1_796_083_200_i64; // 2026-12-01T00:00:00Z
    let steady = |t: i64| {
        let t = t.max(0);
        let f = 10.0 + 0.5 * ((t / 600) % 3) as f64;
        let tin = 30.0 + 0.1 * ((t / 10) % 7) as f64;
        (f, tin, tin + 30.0 * 1000.0 / (f * 75.4))
    };
    (t0..t1)
        .step_by(10)
        .map(|t| {
            let (f, tin, _) = steady(t);
            let (_, _, tout) = steady(t - 120);
            let ts = jiff::Timestamp::from_second(base + t).unwrap().strftime("%Y-%m-%dT%H:%M:%SZ");
            format!("{ts},{f:.3},{tin:.3},30.000,{tout:.3}\n")
        })
        .collect()
}

#[test]
fn the_lines_identify_prints_paste_into_a_site_file_that_check_accepts() {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &delayed_rows(0, 6 * 3600));
    let out = cargo_bin_cmd!("efftemp")
        .args(["identify", "--config"])
        .arg(&plant.config)
        .args(["--unit", "T-1"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    let paste: Vec<&str> =
        stdout.lines().skip_while(|l| !l.starts_with("# paste into [unit.monitor]")).collect();
    assert_eq!(paste.len(), 3, "{stdout}");
    assert_eq!(paste[1], "dead_time = \"120s\"", "{stdout}");
    assert!(paste[2].starts_with("lag = \""), "{stdout}");
    // Pasted under the table the comment names (the test plant's only unit has none yet).
    let mut site = std::fs::read_to_string(&plant.config).unwrap();
    site.push_str("[unit.monitor]\n");
    site.push_str(&paste.join("\n"));
    site.push('\n');
    std::fs::write(&plant.config, site).unwrap();
    let out = check(&plant.config);
    assert!(out.status.success(), "{}\n{}", text(&out.stdout), text(&out.stderr));
    let loaded = SiteConfig::load(&plant.config).unwrap();
    assert_eq!(loaded.units[0].spec.monitor.dead_time_ms, 120_000);
    // With both set, `check` has no note about them any more.
    assert!(!text(&out.stdout).contains("unset"), "{}", text(&out.stdout));
}

fn shelve(plant: &TestPlant, selector: &str, duration: &str) -> std::process::Output {
    cargo_bin_cmd!("efftemp")
        .args(["shelve", "--config"])
        .arg(&plant.config)
        .args(["--unit", "T-1", "--selector", selector, "--for", duration, "--reason", "analyzer work"])
        .env("SUDO_USER", "jdoe")
        .env("USER", "efftemp")
        .output()
        .unwrap()
}

#[test]
fn shelve_refuses_unknown_selectors_and_bare_durations_and_records_the_person() {
    let plant = TestPlant::new("");
    let out = shelve(&plant, "heater_fuoling", "8h");
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains("did you mean `heater_fouling`?"), "{err}");
    for cause in ["heater_fouling", "conversion_drift", "instrument_fault", "heat_loss", "data_quality"] {
        assert!(err.contains(cause), "{cause}: {err}");
    }
    let out = shelve(&plant, "data_quality", "8");
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains("a duration needs a unit, e.g. 8h or 30m"), "{err}");
    assert!(!err.contains("failed to parse"), "the parser's own wording leaks: {err}");
    assert!(!plant.state.join("requests").exists(), "nothing may be queued");

    let out = shelve(&plant, "data_quality/TI-109", "8h");
    assert!(out.status.success(), "{}", text(&out.stderr));
    let files: Vec<_> = std::fs::read_dir(plant.state.join("requests")).unwrap().flatten().collect();
    assert_eq!(files.len(), 1);
    let req: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(files[0].path()).unwrap()).unwrap();
    assert_eq!(req["selector"], "data_quality/TI-109");
    assert_eq!(req["by"], "jdoe", "the person behind sudo, not the service account: {req}");
}

/// The example site with `edits` (old, new) applied, checked; its standard error.
fn check_example_with(edits: &[(&str, &str)]) -> (Option<i32>, String) {
    let mut site = std::fs::read_to_string(util::root().join("config/example-site.toml")).unwrap();
    for (old, new) in edits {
        assert!(site.contains(old), "{old}");
        site = site.replacen(old, new, 1);
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    std::fs::write(&path, site).unwrap();
    let out = check(&path);
    (out.status.code(), text(&out.stderr))
}

fn error_for<'a>(err: &'a str, key: &str) -> &'a str {
    err.lines()
        .find(|l| l.contains(&format!("`{key}`")))
        .unwrap_or_else(|| panic!("no error for {key}:\n{err}"))
}

#[test]
fn fraction_and_positive_settings_are_range_checked_where_they_are_written() {
    let (code, err) = check_example_with(&[
        ("effectiveness_limit = 0.85", "effectiveness_limit = 85"),
        ("min_feed_fraction = 0.2", "min_feed_fraction = 1.5"),
        ("enter_z = 3.5", "enter_z = 3.5\newma_lambda = 0.0\ncusum_k = -0.5\nclear_blocks = 0"),
        ("r_high = 3.0", "r_high = -3.0"),
        ("steady_count = 10", "steady_count = 0"),
        ("on_delay = 2", "on_delay = 0"),
        ("flood_count = 10", "flood_count = 1"),
        ("conversion_uncertainty = 0.02", "conversion_uncertainty = 2"),
        ("bubble_margin = \"10 K\"", "bubble_margin = \"-10 K\""),
        (
            "flow = { tag = \"FI-2021\", unit = \"t/h\", uncertainty = \"1.5 %\", range = [0.0, 10.0] }",
            "flow = { value = \"-2 t/h\" }",
        ),
    ]);
    assert_eq!(code, Some(2), "{err}");
    let m = "unit[1].monitor";
    let line = error_for(&err, &format!("{m}.effectiveness_limit"));
    assert!(line.contains("site.toml:") && line.contains("a fraction in (0, 1), got 85"), "{line}");
    assert!(line.contains("did you mean 0.85?"), "{line}");
    assert!(error_for(&err, &format!("{m}.min_feed_fraction")).contains("a fraction in (0, 1), got 1.5"));
    assert!(error_for(&err, &format!("{m}.ewma_lambda")).contains("a fraction in (0, 1], got 0"));
    assert!(error_for(&err, &format!("{m}.cusum_k")).contains("must be positive, got -0.5"));
    assert!(error_for(&err, &format!("{m}.clear_blocks")).contains("at least 1, got 0"));
    assert!(error_for(&err, &format!("{m}.steady_state.r_high")).contains("positive"));
    assert!(error_for(&err, &format!("{m}.steady_state.steady_count")).contains("at least 1"));
    assert!(error_for(&err, "unit[1].alerts.on_delay").contains("at least 1, got 0"));
    assert!(error_for(&err, "unit[1].alerts.flood_count").contains("at least 2, got 1"));
    assert!(error_for(&err, "unit[1].reaction[1].conversion_uncertainty").contains("[0, 1), got 2"));
    assert!(error_for(&err, "unit[1].model.bubble_margin").contains("zero or positive"));
    assert!(error_for(&err, "unit[1].feed[2].flow").contains("must be positive"));
    assert!(err.contains("12 problem(s)"), "{err}");

    let (code, err) = check_example_with(&[("effectiveness_limit = 0.85", "effectiveness_limit = 1.5")]);
    assert_eq!(code, Some(2));
    let line = error_for(&err, "unit[1].monitor.effectiveness_limit");
    assert!(line.contains("a fraction in (0, 1), got 1.5") && !line.contains("did you mean"), "{line}");
}

#[test]
fn the_check_summary_is_human_text() {
    let plant = TestPlant::new("");
    let site = std::fs::read_to_string(&plant.config).unwrap().replace(
        "timestamp_column = \"Timestamp\"",
        "timestamp_column = \"Timestamp\"\nlayout = \"long\"\nquality_column = \"Quality\"",
    );
    std::fs::write(&plant.config, site).unwrap();
    let out = check(&plant.config);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    assert!(stdout.contains("(long: columns tag, value, Quality)"), "{stdout}");
    for debug in ["Long {", "Some(", "\"tag\""] {
        assert!(!stdout.contains(debug), "debug text `{debug}` in:\n{stdout}");
    }
}

/// The test plant with a pressure tag and analyzer tags in plant units.
fn plant_with_units(pressure_unit: &str, fraction_unit: &str, basis: &str, site_extra: &str) -> TestPlant {
    let plant = TestPlant::new(&format!(
        "[unit.model]\npressure = {{ tag = \"PI-111\", unit = \"{pressure_unit}\" }}\n\
         [[unit.feed]]\nname = \"brine\"\nflow = {{ tag = \"FI-201\", unit = \"mol/s\" }}\n\
         temperature = {{ tag = \"TI-202\", unit = \"degC\" }}\nbasis = \"{basis}\"\n\
         composition = {{ water = {{ tag = \"AI-203\", unit = \"{fraction_unit}\" }}, methanol = \"0.5 {fraction_unit}\" }}\n"
    ));
    let site = std::fs::read_to_string(&plant.config).unwrap();
    let site = site.replace("output_dir = \"output\"", &format!("output_dir = \"output\"\n{site_extra}"));
    std::fs::write(&plant.config, site).unwrap();
    plant
}

#[test]
fn plant_units_gauge_pressures_and_composition_percentages_are_read() {
    let plant = plant_with_units("bar(g)", "mol%", "mole", "atmospheric_pressure = \"980 mbar\"");
    let out = check(&plant.config);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let site = SiteConfig::load(&plant.config).unwrap();
    assert_eq!(site.atmospheric_pressure_pa, 98_000.0);
    let spec = &site.units[0].spec;
    let p = &spec.tags[spec.tag_index("PI-111").unwrap()];
    // Source: absolute = gauge + atmospheric pressure (definition); 1 bar = 1e5 Pa, 1 mbar = 100 Pa
    // (NIST SP 811 appendix B).
    assert_eq!(p.unit.symbol, "barg");
    assert!((p.unit.to_si(2.0) - 298_000.0).abs() < 1e-6, "{}", p.unit.to_si(2.0));
    let a = &spec.tags[spec.tag_index("AI-203").unwrap()];
    // Source: 1 mol% = 0.01 mole fraction (definition).
    assert_eq!(a.unit.symbol, "mol%");
    assert!((a.unit.to_si(99.5) - 0.995).abs() < 1e-12);

    // The default atmosphere is the standard one, 101325 Pa (ISO 2533, from memory).
    let plant = plant_with_units("psig", "mass%", "mass", "");
    let site = SiteConfig::load(&plant.config).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(site.atmospheric_pressure_pa, 101_325.0);
    let spec = &site.units[0].spec;
    let p = &spec.tags[spec.tag_index("PI-111").unwrap()];
    // Source: 1 psi = 6894.757 Pa (NIST SP 811 appendix B).
    assert!((p.unit.to_si(10.0) - (68_947.57 + 101_325.0)).abs() < 0.01, "{}", p.unit.to_si(10.0));

    // A percentage of the other basis, or a pressure no site has, is refused where written.
    let plant = plant_with_units("kPa(g)", "mass%", "mole", "atmospheric_pressure = \"2 bar\"");
    let out = check(&plant.config);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(error_for(&err, "site.atmospheric_pressure").contains("within 50 to 110 kPa"), "{err}");
    let line = error_for(&err, "unit[1].feed[2].composition.water");
    assert!(line.contains("given in mass%, but the basis of brine is \"mole\""), "{line}");
    let line = error_for(&err, "unit[1].feed[2].composition.methanol");
    assert!(line.contains("mass%"), "{line}");
}

const INFO_HEADER: &str = "Timestamp,FI-101,TI-102,JI-103,TI-109,PI-120,LI-121";

fn info_rows(t0: i64, t1: i64) -> String {
    (t0..t1)
        .step_by(10)
        .map(|t| {
            let level = if t < 600 { "62.5" } else { "" };
            format!("{},1.25,{level}\n", TestPlant::row(t))
        })
        .collect()
}

#[test]
fn informational_tags_are_checked_and_written_after_the_documented_columns() {
    let info = "[unit.info]\njacket_pressure = { tag = \"PI-120\", unit = \"barg\", range = [0.0, 6.0] }\n\
                drum_level = { tag = \"LI-121\", unit = \"%\", stale_after = \"2m\" }\n";
    let plant = TestPlant::new(info);
    let mut site = std::fs::read_to_string(&plant.config).unwrap();
    site = site.replace("pattern = \"plant_*.csv\"", "pattern = \"info_*.csv\"");
    std::fs::write(&plant.config, &site).unwrap();
    std::fs::write(plant.exports.join("info_20261201.csv"), format!("{INFO_HEADER}\n{}", info_rows(0, 1800)))
        .unwrap();
    let out = check(&plant.config);
    assert!(out.status.success(), "{}", text(&out.stderr));
    assert!(text(&out.stdout).contains("6 tag(s) (2 informational)"), "{}", text(&out.stdout));

    let loaded = SiteConfig::load(&plant.config).unwrap();
    let output = tempfile::tempdir().unwrap();
    efftemp::app::replay::replay(&loaded, Some(output.path().to_path_buf())).unwrap();
    let soft = TestPlant::soft_tags(output.path());
    let lines: Vec<&str> = soft.lines().collect();
    assert_eq!(lines[0], format!("{SOFT_TAG_HEADER},jacket_pressure,drum_level"));
    assert_eq!(lines.len(), 31, "{soft}");
    for (i, l) in lines[1..].iter().enumerate() {
        let cells: Vec<&str> = l.split(',').collect();
        assert_eq!(cells.len(), 12, "{l}");
        // The balance is untouched: the residual is as small as without the extra tags.
        assert!(cells[4].parse::<f64>().unwrap().abs() < 0.5, "{l}");
        // Written in the tag's own unit, as read.
        assert_eq!(cells[10], "1.2500", "{l}");
        if i < 10 {
            assert_eq!(cells[11], "62.5000", "{l}");
        }
    }
    // The level stops at 10 min and is stale 2 min later: an empty cell and a flag, no alert.
    let late: Vec<&str> = lines[20].split(',').collect();
    assert_eq!(late[11], "", "{}", lines[20]);
    assert!(late[9].contains("stale:LI-121"), "{}", lines[20]);
    let alerts: String = std::fs::read_dir(output.path().join("T-1"))
        .unwrap()
        .flatten()
        .filter(|e| e.file_name().to_string_lossy().starts_with("alerts-"))
        .map(|e| std::fs::read_to_string(e.path()).unwrap())
        .collect();
    assert!(!alerts.contains("LI-121"), "an informational tag raised an alert:\n{alerts}");

    // Validated like the other tags.
    let bad = "[unit.info]\nresidual = { tag = \"PI-120\", unit = \"barg\", uncertainty = \"1 %\" }\n\
               speed = { tag = \"SI-122\", unit = \"furlongs\" }\nfixed = 3.0\n";
    let plant = TestPlant::new(bad);
    let out = check(&plant.config);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(error_for(&err, "unit[1].info.residual").contains("already a soft-tag column"), "{err}");
    assert!(error_for(&err, "unit[1].info.residual.uncertainty").contains("no use"), "{err}");
    assert!(error_for(&err, "unit[1].info.speed.unit").contains("unknown unit `furlongs`"), "{err}");
    assert!(error_for(&err, "unit[1].info.fixed").contains("is a table"), "{err}");
}

#[test]
fn check_notes_unset_dynamics_and_suggests_identify() {
    let plant = TestPlant::new("[unit.monitor]\nlag = \"4m\"\n");
    let out = check(&plant.config);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let stdout = text(&out.stdout);
    let note =
        stdout.lines().find(|l| l.trim_start().starts_with("note:")).unwrap_or_else(|| panic!("{stdout}"));
    assert!(note.contains("`unit[1].monitor`") && note.contains("dead_time is unset, so 0 s"), "{note}");
    assert!(note.contains("efftemp identify --config") && note.contains("--unit T-1"), "{note}");
    let plant = TestPlant::new("");
    let stdout = text(&check(&plant.config).stdout);
    assert!(stdout.contains("dead_time and lag are unset"), "{stdout}");
    // The documented default is the real one.
    let docs = std::fs::read_to_string(util::root().join("docs/configuration.md")).unwrap();
    // The reference block of `[unit.monitor]` (the first `dead_time`/`lag` lines; the later
    // ones are an example of what `identify` prints).
    let documented: Vec<&str> =
        docs.lines().filter(|l| l.starts_with("dead_time =") || l.starts_with("lag =")).take(2).collect();
    assert_eq!(documented.len(), 2, "{documented:?}");
    for l in documented {
        assert!(l.contains("\"0s\""), "docs/configuration.md shows a default that is not the real one: {l}");
    }
    assert_eq!(SiteConfig::load(&plant.config).unwrap().units[0].spec.monitor.dead_time_ms, 0);
}
