//! What a new user meets first: a missing export directory (`check`, `replay`,
//! `identify`, `/readyz`), long exports beside wide ones, repeated rejections, rows out of
//! order, duplicates and empty fields, header names in another case.

use std::path::Path;
use std::sync::Arc;
use std::time::Duration;

use assert_cmd::cargo::cargo_bin_cmd;
use efftemp::config::SiteConfig;
use serde_json::Value;

use crate::util::{self, Running, TestPlant, http_get};

/// `efftemp replay` with JSON logs at warn level: (exit code, stdout, log records, stderr).
fn replay_cmd(config: &Path, out: &Path) -> (i32, String, Vec<Value>, String) {
    let res = cargo_bin_cmd!("efftemp")
        .args(["replay", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(config)
        .arg("--output")
        .arg(out)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&res.stderr).into_owned();
    let logs = stderr.lines().filter_map(|l| serde_json::from_str(l).ok()).collect();
    (res.status.code().unwrap_or(-1), String::from_utf8_lossy(&res.stdout).into_owned(), logs, stderr)
}

fn edit_config(plant: &TestPlant, from: &str, to: &str) {
    let text = std::fs::read_to_string(&plant.config).unwrap();
    assert!(text.contains(from), "{from}");
    std::fs::write(&plant.config, text.replacen(from, to, 1)).unwrap();
}

fn logs_with<'a>(logs: &'a [Value], reason: &str) -> Vec<&'a Value> {
    logs.iter().filter(|v| v["reason"] == reason).collect()
}

#[test]
fn check_warns_about_a_missing_export_directory_with_its_location() {
    let plant = TestPlant::new("");
    std::fs::remove_dir_all(&plant.exports).unwrap();
    let res = cargo_bin_cmd!("efftemp").arg("check").arg("--config").arg(&plant.config).output().unwrap();
    assert!(res.status.success(), "a site may create the folder later");
    let stdout = String::from_utf8_lossy(&res.stdout);
    let stderr = String::from_utf8_lossy(&res.stderr);
    assert!(stdout.contains("configuration OK"), "{stdout}");
    let line = stderr.lines().find(|l| l.starts_with("warning:")).unwrap_or_else(|| panic!("{stderr}"));
    // directory = "exports" is line 16 of the test plant's file, its value at column 13.
    assert!(line.contains("site.toml:16:13: `unit[1].input.directory`"), "{line}");
    assert!(line.contains("unit T-1") && line.contains("exports does not exist"), "{line}");
    // With the directory there, no warning.
    std::fs::create_dir_all(&plant.exports).unwrap();
    let res = cargo_bin_cmd!("efftemp").arg("check").arg("--config").arg(&plant.config).output().unwrap();
    assert!(!String::from_utf8_lossy(&res.stderr).contains("warning"));
}

#[test]
fn replay_fails_when_nothing_usable_was_read_and_says_why_once() {
    let plant = TestPlant::new("");
    let out = tempfile::tempdir().unwrap();
    // No export directory.
    std::fs::remove_dir_all(&plant.exports).unwrap();
    let (code, stdout, logs, stderr) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 1, "{stdout}{stderr}");
    assert!(
        stderr.contains("nothing usable was read") && stderr.contains("exports does not exist"),
        "{stderr}"
    );
    let dir_warnings =
        logs.iter().filter(|v| v["message"].as_str().is_some_and(|m| m.contains("does not exist")));
    assert_eq!(dir_warnings.count(), 1, "{logs:?}");
    // No matching file.
    std::fs::create_dir_all(&plant.exports).unwrap();
    std::fs::write(plant.exports.join("other.csv"), "x\n").unwrap();
    let (code, _, _, stderr) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 1);
    assert!(stderr.contains("no file in") && stderr.contains("matches `plant_*.csv`"), "{stderr}");
    // Every row rejected.
    let bad: String = (0..30).map(|k| format!("2026-13-01T00:00:{k:02}Z,10,30,30,70\n")).collect();
    plant.append("plant_20261201.csv", &bad);
    let (code, _, _, stderr) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 1);
    assert!(
        stderr.contains("every one of its 30 record(s) was rejected") && stderr.contains("bad_timestamp: 30"),
        "{stderr}"
    );
}

#[test]
fn identify_says_that_the_export_directory_does_not_exist() {
    let plant = TestPlant::new("");
    std::fs::remove_dir_all(&plant.exports).unwrap();
    let res = cargo_bin_cmd!("efftemp")
        .args(["identify", "--unit", "T-1", "--config"])
        .arg(&plant.config)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&res.stderr);
    assert_eq!(res.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("export directory") && stderr.contains("exports does not exist"), "{stderr}");
    assert!(!stderr.contains("not enough contiguous data"), "{stderr}");
}

/// `/readyz` fails, with the reason, while a unit's export directory is missing, and passes
/// once it exists.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_service_is_not_ready_while_an_export_directory_is_missing() {
    let plant = TestPlant::new("");
    std::fs::remove_dir_all(&plant.exports).unwrap();
    let site = Arc::new(SiteConfig::load(&plant.config).unwrap());
    let (snap_tx, snap_rx) = tokio::sync::watch::channel(efftemp::app::http::Snapshot::default());
    let addr = util::serve_http(snap_rx).await;
    let svc = Running::start(site, false, Some(snap_tx));
    let notify = svc.notify.clone();
    let ready = |want: u16| async move {
        let mut last = (0, String::new());
        for _ in 0..100 {
            notify_and_wait().await;
            last = tokio::task::spawn_blocking(move || http_get(addr, "/readyz")).await.unwrap();
            if last.0 == want {
                break;
            }
        }
        last
    };
    async fn notify_and_wait() {
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
    notify.notify_one();
    let (code, body) = ready(503).await;
    assert_eq!(code, 503, "{body}");
    assert!(body.contains("unit T-1: export directory") && body.contains("does not exist"), "{body}");
    let (_, metrics) = tokio::task::spawn_blocking(move || http_get(addr, "/metrics")).await.unwrap();
    assert!(metrics.contains("efftemp_export_directory_readable{unit=\"T-1\"} 0"), "{metrics}");
    std::fs::create_dir_all(&plant.exports).unwrap();
    notify.notify_one();
    let (code, body) = ready(200).await;
    assert_eq!(code, 200, "{body}");
    svc.stop().await;
}

/// A long export whose name matches a wide unit's pattern is refused once (one located
/// warning and one count per pass), every row counted; `exclude` keeps it out.
#[test]
fn a_long_export_beside_wide_ones_is_refused_once_and_can_be_excluded() {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &TestPlant::rows(0, 600));
    let long: String = (0..500).map(|k| format!("2026-12-01T00:00:{:02}Z,FI-101,{k}\n", k % 60)).collect();
    std::fs::write(plant.exports.join("plant_20261201_long.csv"), format!("Timestamp,Tag,Value\n{long}"))
        .unwrap();
    let out = tempfile::tempdir().unwrap();
    let (code, stdout, logs, _) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0);
    assert!(stdout.contains(" 500 rejected"), "{stdout}");
    let of_long: Vec<&Value> =
        logs.iter().filter(|v| v["file"].as_str().is_some_and(|f| f.ends_with("_long.csv"))).collect();
    assert!(of_long.len() <= 3, "{of_long:#?}");
    let refused = of_long.iter().find(|v| v["reason"] == "wrong_layout" && v["line"] == 1).unwrap();
    let text = refused["message"].as_str().unwrap();
    assert!(text.contains("looks like a `long` export") && text.contains("exclude"), "{text}");
    let summary = of_long.iter().find(|v| v["count"] == 500).unwrap_or_else(|| panic!("{of_long:#?}"));
    assert_eq!((summary["line"].as_u64(), summary["last_line"].as_u64()), (Some(2), Some(501)));

    edit_config(&plant, "pattern = \"plant_*.csv\"", "pattern = \"plant_*.csv\"\nexclude = [\"*_long.csv\"]");
    let (code, stdout, logs, _) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0);
    assert!(stdout.contains(" 0 rejected"), "{stdout}");
    assert!(!logs.iter().any(|v| v["file"].as_str().is_some_and(|f| f.ends_with("_long.csv"))), "{logs:?}");
}

/// One header problem in a large file: the first row's rejection in full, then one summary,
/// while the counts stay exact.
#[test]
fn repeated_rejections_are_logged_once_then_summed_up() {
    let plant = TestPlant::new("");
    let rows: String =
        TestPlant::rows(0, 3000).lines().map(|l| format!("{}\n", l.replacen(",", ",x", 1))).collect();
    plant.append("plant_20261201.csv", &rows);
    plant.append("plant_20261201.csv", &TestPlant::rows(3000, 3600));
    let out = tempfile::tempdir().unwrap();
    let (code, stdout, logs, _) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0);
    assert!(stdout.contains(" 300 rejected"), "{stdout}");
    let nn = logs_with(&logs, "non_numeric");
    assert_eq!(nn.len(), 2, "{nn:#?}");
    assert_eq!(nn[0]["line"], 2);
    assert!(nn[0]["message"].as_str().unwrap().contains("value `x10.000` of `FI-101`"), "{}", nn[0]);
    assert_eq!(
        (nn[1]["count"].as_u64(), nn[1]["line"].as_u64(), nn[1]["last_line"].as_u64()),
        (Some(299), Some(3), Some(301))
    );
    assert!(nn[1]["message"].as_str().unwrap().contains("and 299 more rows"), "{}", nn[1]);
    assert!(nn[1]["file"].as_str().unwrap().ends_with("plant_20261201.csv"));
}

/// Soft tags of a replay of `text` (after the header) into a fresh output directory.
fn soft_tags_of(text: &str) -> String {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", text);
    let out = tempfile::tempdir().unwrap();
    let site = SiteConfig::load(&plant.config).unwrap();
    efftemp::app::replay::replay(&site, Some(out.path().to_path_buf())).unwrap();
    TestPlant::soft_tags(out.path())
}

/// A row one minute out of order is used, in replay and live alike (the reorder window);
/// a row later than that is counted and logged as late.
#[test]
fn a_row_a_minute_out_of_order_is_used_live_and_in_replay() {
    let rows: Vec<String> = TestPlant::rows(0, 900).lines().map(str::to_string).collect();
    let in_order = rows.join("\n") + "\n";
    // The row of 00:02:50 (index 17) written after the row of 00:03:50.
    let mut moved = rows.clone();
    let r = moved.remove(17);
    moved.insert(23, r);
    let shuffled = moved.join("\n") + "\n";
    let want = soft_tags_of(&in_order);
    util::assert_same_lines(&soft_tags_of(&shuffled), &want, "a row a minute late");

    // Live: the late row arrives in a later pass than the rows after it.
    let plant = TestPlant::new("");
    let site = SiteConfig::load(&plant.config).unwrap();
    let mut p = efftemp::pipeline::Pipeline::new(&site, &efftemp::pipeline::Mode::Live).unwrap();
    for (k, chunk) in moved.chunks(19).enumerate() {
        plant.append("plant_20261201.csv", &(chunk.join("\n") + "\n"));
        p.pass(1_000 + k as u64, false).unwrap();
    }
    p.pass(10_000_000, false).unwrap();
    assert_eq!(p.units[0].counters.late, 0);
    util::assert_same_lines(&TestPlant::soft_tags(&plant.output), &want, "live with a row a minute late");

    // Three minutes out of order: late, counted and logged with its line.
    let mut late = rows.clone();
    let r = late.remove(17);
    late.insert(36, r);
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &(late.join("\n") + "\n"));
    let out = tempfile::tempdir().unwrap();
    let (code, _, logs, _) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0);
    let l = logs_with(&logs, "late");
    assert_eq!(l.len(), 1, "{logs:?}");
    assert_eq!(l[0]["line"], 38);
    assert!(l[0]["message"].as_str().unwrap().contains("4 sample(s)"), "{}", l[0]);
}

/// Duplicate rows and empty fields are counted (metrics reasons and the day's ingest file)
/// and logged with file and line.
#[test]
fn duplicates_and_empty_fields_are_counted_and_logged() {
    let plant = TestPlant::new("");
    let mut text = TestPlant::rows(0, 300);
    text.push_str(&(TestPlant::row(250) + "\n")); // line 32: a duplicate of line 27
    text.push_str(&TestPlant::rows(300, 600));
    let row = TestPlant::row(600);
    let mut cells: Vec<&str> = row.split(',').collect();
    cells[1] = "";
    let empty = cells.join(",");
    text.push_str(&format!("{empty}\n")); // line 63: FI-101 empty
    text.push_str(&TestPlant::rows(610, 900));
    plant.append("plant_20261201.csv", &text);
    let out = tempfile::tempdir().unwrap();
    let (code, stdout, logs, _) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0);
    assert!(stdout.contains(" 5 rejected"), "{stdout}");
    let d = logs_with(&logs, "duplicate");
    assert_eq!((d.len(), &d[0]["line"]), (1, &Value::from(32)), "{logs:?}");
    assert!(d[0]["file"].as_str().unwrap().ends_with("plant_20261201.csv"));
    let e = logs_with(&logs, "empty_field");
    assert_eq!((e.len(), &e[0]["line"]), (1, &Value::from(63)), "{logs:?}");
    assert!(e[0]["message"].as_str().unwrap().contains("`FI-101`"), "{}", e[0]);
    let day: Value = serde_json::from_str(
        &std::fs::read_to_string(out.path().join("T-1/ingest-T-1-2026-12-01.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(day["rejected"]["duplicate"], 4, "{day}");
    assert_eq!(day["rejected"]["empty_field"], 1, "{day}");
}

/// The long layout's default column names match headers in another case.
#[test]
fn long_layout_columns_match_in_any_case() {
    let plant = TestPlant::new("");
    edit_config(
        &plant,
        "timestamp_column = \"Timestamp\"",
        "timestamp_column = \"Timestamp\"\nlayout = \"long\"",
    );
    let mut text = String::from(" TIMESTAMP ,TAG,Value\n");
    for line in TestPlant::rows(0, 600).lines() {
        let cells: Vec<&str> = line.split(',').collect();
        for (tag, v) in ["FI-101", "TI-102", "JI-103", "TI-109"].iter().zip(&cells[1..]) {
            text.push_str(&format!("{},{tag},{v}\n", cells[0]));
        }
    }
    std::fs::write(plant.exports.join("plant_20261201.csv"), text).unwrap();
    let out = tempfile::tempdir().unwrap();
    let (code, stdout, _, stderr) = replay_cmd(&plant.config, out.path());
    assert_eq!(code, 0, "{stderr}");
    assert!(stdout.contains("10 interval(s) written, 0 rejected"), "{stdout}");
}

#[test]
fn exclude_and_reorder_window_are_checked_with_their_location() {
    let plant = TestPlant::new("");
    edit_config(
        &plant,
        "pattern = \"plant_*.csv\"",
        "pattern = \"plant_*.csv\"\nexclude = [\"old/*.csv\", \"\", \"*\"]",
    );
    edit_config(&plant, "max_wait = \"3m\"", "max_wait = \"3m\"\nreorder_window = \"5m\"");
    let res = cargo_bin_cmd!("efftemp").arg("check").arg("--config").arg(&plant.config).output().unwrap();
    assert_eq!(res.status.code(), Some(2));
    let err = String::from_utf8_lossy(&res.stderr);
    assert!(err.contains("`unit[1].input.exclude[1]`: exclude patterns match file names only"), "{err}");
    assert!(err.contains("`unit[1].input.exclude[2]`: an empty pattern"), "{err}");
    assert!(err.contains("`unit[1].input.exclude[3]`: `*` excludes every file"), "{err}");
    assert!(
        err.contains("`unit[1].timing.reorder_window`: reorder_window `5m` is longer than max_wait"),
        "{err}"
    );
}
