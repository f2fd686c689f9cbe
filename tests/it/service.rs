//! The service end to end: configuration checks, replay, live-versus-replay equality,
//! restarts, crash (SIGKILL) recovery, rejected rows and DST timestamps.

use std::io::Write;
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::time::{Duration, Instant};

use assert_cmd::cargo::cargo_bin_cmd;
use efftemp::config::SiteConfig;
use efftemp::sinks::softtags::SOFT_TAG_HEADER;

use crate::util::{self, Running, TestPlant, http_get, rows_in, wait_for};

#[test]
fn check_accepts_the_example_site() {
    let out = cargo_bin_cmd!("efftemp")
        .args(["check", "--config"])
        .arg(util::root().join("config/example-site.toml"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).contains("configuration OK"));
}

#[test]
fn check_reports_every_problem_with_file_line_and_key() {
    let text = std::fs::read_to_string(util::root().join("config/example-site.toml")).unwrap();
    let bad = text
        .replace("unit = \"kmol/h\"", "unit = \"kmol/hr\"")
        .replace("interval = \"1m\"", "interval = \"7m\"")
        .replace("\"Europe/London\"          #", "\"Europe/Londn\" #")
        .replace("layout = \"wide\"", "layout = \"tall\"")
        .replace("design_conversion = 0.42", "design_conversion = 1.42");
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    std::fs::write(&path, bad).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&path).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    for (key, fragment) in [
        ("site.time_zone", "unknown time zone"),
        ("unit[1].input.layout", "unknown layout `tall`"),
        ("unit[1].timing.interval", "divide a day evenly"),
        ("unit[1].feed[1].flow.unit", "unknown unit `kmol/hr`"),
        ("unit[1].reaction[1].design_conversion", "within 0..1"),
        // The 10-minute monitor block is no longer a whole number of 7-minute intervals.
        ("unit[1].monitor.block", "whole number of intervals"),
    ] {
        let line = err
            .lines()
            .find(|l| l.contains(&format!("`{key}`")))
            .unwrap_or_else(|| panic!("no error for {key}:\n{err}"));
        assert!(line.contains("site.toml:") && line.contains(fragment), "{line}");
    }
    assert!(err.contains("6 problem(s)"), "{err}");
}

#[test]
fn export_directory_may_not_overlap_the_output_or_state_directory() {
    let plant = TestPlant::new("");
    let text = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("directory = \"exports\"", "directory = \"output/x\"");
    std::fs::write(&plant.config, text).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&plant.config).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("`unit[1].input.directory`") && err.contains("overlaps the output directory"),
        "{err}"
    );
}

/// A state directory others can write to (group or world, sticky bit included) is refused by
/// `check` and by `run`, located at `site.state_dir`, with exit 2 (systemd does not restart
/// it), before the service reads any request planted there.
#[cfg(unix)]
#[test]
fn a_state_directory_others_can_write_is_refused_by_check_and_run() {
    use std::os::unix::fs::PermissionsExt as _;
    let plant = TestPlant::new("");
    std::fs::create_dir_all(&plant.state).unwrap();
    for mode in [0o1777, 0o777, 0o770] {
        std::fs::set_permissions(&plant.state, std::fs::Permissions::from_mode(mode)).unwrap();
        for cmd in ["check", "run"] {
            let out = cargo_bin_cmd!("efftemp")
                .args([cmd, "--config"])
                .arg(&plant.config)
                .timeout(Duration::from_secs(20))
                .output()
                .unwrap();
            let err = String::from_utf8_lossy(&out.stderr);
            assert_eq!(out.status.code(), Some(2), "{cmd} with mode {mode:o}: {err}");
            assert!(
                err.contains("`site.state_dir`") && err.contains(&format!("mode {mode:04o}")),
                "{cmd}, mode {mode:o}: {err}"
            );
        }
    }
    std::fs::set_permissions(&plant.state, std::fs::Permissions::from_mode(0o750)).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&plant.config).output().unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
}

/// Settings a reviewer would never let through: outputs into a system directory, an empty file
/// pattern, a tag name with a line break (it would split every soft-tag row for line-based
/// shippers); and a health endpoint beyond loopback is pointed out, located, by `check`.
#[test]
fn check_refuses_system_output_folders_empty_patterns_and_control_characters_in_tags() {
    let plant = TestPlant::new("");
    let text = std::fs::read_to_string(&plant.config).unwrap();
    let bad = text
        .replace("output_dir = \"output\"", "output_dir = \"/etc\"")
        .replace("pattern = \"plant_*.csv\"", "pattern = \"\"")
        .replace("tag = \"TI-109\"", "tag = \"TI-\\n109\"");
    std::fs::write(&plant.config, &bad).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&plant.config).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    for (key, what) in [
        ("`site.output_dir`", "a system directory"),
        ("`unit[1].input.pattern`", "pattern is empty"),
        ("`unit[1].effluent.temperature.tag`", "control character"),
    ] {
        assert!(err.contains(key) && err.contains(what), "{key}: {err}");
    }
    let open = text.replace("[service]", "[service]\nhttp_address = \"0.0.0.0:9464\"");
    std::fs::write(&plant.config, open).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&plant.config).output().unwrap();
    let said = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(
        said.contains("`service.http_address`") && said.contains("reachable beyond this machine"),
        "{said}"
    );
}

/// Outputs past their retention are deleted as the data days go by (counted from the unit's
/// newest data day): with a week for soft tags and reports, 11 days of the demo plant leave the
/// last 8 days' soft-tag files and reports, and all alert logs (kept forever by default).
#[test]
fn outputs_past_their_retention_are_deleted() {
    let tmp = tempfile::tempdir().unwrap();
    let scenario = efftemp::app::sim::Scenario::demo(3, 11.0);
    efftemp::app::sim::write_exports(&scenario, &tmp.path().join("exports")).unwrap();
    let site = efftemp::app::sim::site_config("exports", "state", "output", false, "10m", 100)
        + "\n[service.retention]\nsoft_tags = \"7d\"\nreports = \"7d\"\n";
    std::fs::write(tmp.path().join("site.toml"), site).unwrap();
    let cfg = SiteConfig::load(&tmp.path().join("site.toml")).unwrap();
    efftemp::app::replay::replay(&cfg, None).unwrap();
    let dir = tmp.path().join("output/R-204");
    let names = |d: &Path, prefix: &str| -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(d)
            .unwrap()
            .flatten()
            .map(|e| e.file_name().into_string().unwrap())
            .filter(|n| n.starts_with(prefix))
            .collect();
        v.sort();
        v
    };
    let soft = names(&dir, "softtags-");
    // The data run 2026-11-21 .. 2026-12-01 (Europe/London); the newest day is 12-01 (or 12-02
    // for the interval ending at midnight), so 11-24 and later are within 7 days.
    assert!(soft.len() == 8 || soft.len() == 9, "{soft:?}");
    assert!(soft.iter().all(|n| n.as_str() >= "softtags-R-204-2026-11-24.csv"), "{soft:?}");
    let ingest = names(&dir, "ingest-");
    assert!(ingest.iter().all(|n| n.as_str() >= "ingest-R-204-2026-11-24.json"), "{ingest:?}");
    assert!(
        names(&dir, "alerts-").iter().any(|n| n.as_str() < "alerts-R-204-2026-11-24.jsonl"),
        "alerts kept"
    );
    let reports = names(&dir.join("reports"), "shift-");
    assert!(
        !reports.is_empty() && reports.iter().all(|n| n.as_str() >= "shift-R-204-20261124"),
        "{reports:?}"
    );
    // A retention shorter than a week, or not in whole days, is refused where it is written.
    std::fs::write(
        tmp.path().join("site.toml"),
        efftemp::app::sim::site_config("exports", "state", "output", false, "10m", 100)
            + "\n[service.retention]\nsoft_tags = \"3d\"\nalerts = \"36h\"\n",
    )
    .unwrap();
    let err = SiteConfig::load(&tmp.path().join("site.toml")).unwrap_err().to_string();
    assert!(err.contains("service.retention.soft_tags") && err.contains("service.retention.alerts"), "{err}");
}

/// Unknown keys and wrongly typed values (stage one) are all reported, each located, not only
/// the first one.
#[test]
fn check_reports_every_unknown_key_not_only_the_first() {
    let plant = TestPlant::new("");
    let text = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("watch = \"off\"", "watch = \"off\"\nreconcile_intervall = \"1s\"")
        .replace("max_wait = \"3m\"", "max_wait = \"3m\"\nstale_afterr = \"5m\"\ninterval_ms = 60000");
    std::fs::write(&plant.config, text).unwrap();
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&plant.config).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    for key in ["reconcile_intervall", "stale_afterr", "interval_ms"] {
        assert!(err.contains(key), "{key}: {err}");
    }
    assert!(err.matches("site.toml:").count() >= 3, "{err}");
}

#[test]
fn includes_are_followed_and_located() {
    let dir = tempfile::tempdir().unwrap();
    let main = "include = [\"units.toml\"]\n[site]\ntime_zone = \"UTC\"\n";
    std::fs::write(dir.path().join("site.toml"), main).unwrap();
    std::fs::write(
        dir.path().join("units.toml"),
        "[[unit]]\nname = \"X-1\"\n[unit.input]\ndirectory = \"e\"\n",
    )
    .unwrap();
    let out = cargo_bin_cmd!("efftemp")
        .args(["check", "--config"])
        .arg(dir.path().join("site.toml"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("units.toml:1:1: `unit[1]`: at least one [[unit.feed]] is required"), "{err}");
}

fn replay(plant: &TestPlant, output: &Path) -> String {
    let site = SiteConfig::load(&plant.config).unwrap();
    efftemp::app::replay::replay(&site, Some(output.to_path_buf())).unwrap();
    TestPlant::soft_tags(output)
}

#[test]
fn replay_writes_one_row_per_interval() {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &TestPlant::rows(0, 1800));
    let out = tempfile::tempdir().unwrap();
    let text = replay(&plant, out.path());
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines[0], SOFT_TAG_HEADER);
    assert_eq!(lines.len(), 31, "{text}");
    assert!(lines[1].starts_with("2026-12-01T00:01:00+00:00,T-1,"), "{}", lines[1]);
    assert!(lines[30].starts_with("2026-12-01T00:30:00+00:00,T-1,"), "{}", lines[30]);
    for l in &lines[1..] {
        let cells: Vec<&str> = l.split(',').collect();
        assert_eq!(cells.len(), 10, "{l}");
        let residual: f64 = cells[4].parse().unwrap();
        assert!(residual.abs() < 0.5, "{l}");
        let u: f64 = cells[5].parse().unwrap();
        assert!(u > 0.05 && u < 2.0, "{l}");
        assert!(cells[6].is_empty() && !cells[7].is_empty(), "{l}");
    }
}

/// Live tailing with partial rows and a rotation gives byte-identical soft tags to a replay of
/// the same files; a restart in the middle resumes without duplicates.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn live_with_restart_equals_replay() {
    let plant = TestPlant::new("");
    let site = Arc::new(util::quick_site(&plant.config));
    let script: Vec<(&str, String)> = vec![
        ("plant_20261201.csv", TestPlant::rows(0, 600)),
        ("plant_20261201.csv", {
            let r = TestPlant::rows(600, 620);
            r[..r.len() - 7].to_string()
        }),
        ("plant_20261201.csv", {
            let r = TestPlant::rows(600, 620);
            r[r.len() - 7..].to_string()
        }),
        ("plant_20261201.csv", TestPlant::rows(620, 1200)),
        ("plant_20261202.csv", TestPlant::rows(1200, 1500)),
        ("plant_20261201.csv", TestPlant::rows(1200, 1210)),
        ("plant_20261202.csv", TestPlant::rows(1500, 2400)),
    ];
    let mut step = 0;
    for round in 0..2 {
        let svc = Running::start(site.clone(), false, None);
        let notify = svc.notify.clone();
        let stop_at = if round == 0 { 4 } else { script.len() };
        while step < stop_at {
            let (name, text) = &script[step];
            plant.append(name, text);
            notify.notify_one();
            tokio::time::sleep(Duration::from_millis(150)).await;
            step += 1;
        }
        if round == 0 {
            wait_for("first rows", Duration::from_secs(10), || {
                rows_in(&TestPlant::soft_tags(&plant.output)) >= 19
            })
            .await
            .unwrap();
        } else {
            // The stream goes quiet: the last interval closes after max_wait.
            wait_for("all rows", Duration::from_secs(15), || {
                rows_in(&TestPlant::soft_tags(&plant.output)) >= 40
            })
            .await
            .unwrap_or_else(|()| panic!("rows: {}", TestPlant::soft_tags(&plant.output)));
        }
        svc.stop().await;
    }
    let live = TestPlant::soft_tags(&plant.output);
    let out = tempfile::tempdir().unwrap();
    let batch = replay(&plant, out.path());
    assert_eq!(rows_in(&live), 40, "{live}");
    assert_eq!(live, batch);
}

/// Outputs that cannot be written (here a folder sits where the new day's soft-tag file must go,
/// as a full or read-only file system would refuse it) do not
/// stop the service: it runs degraded, says why on `/healthz` and `/readyz`, retries from its
/// last checkpoint, and once the folder is back it writes every interval exactly once (the same
/// soft tags as a replay of the files).
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn outputs_that_cannot_be_written_degrade_the_service_and_lose_nothing() {
    let plant = TestPlant::new("");
    let site = Arc::new(util::quick_site(&plant.config));
    let (snap_tx, snap_rx) = tokio::sync::watch::channel(efftemp::app::http::Snapshot::default());
    let addr = util::serve_http(snap_rx.clone()).await;
    let svc = Running::start(site, false, Some(snap_tx));
    let notify = svc.notify.clone();
    // The last quarter hour of 1 December.
    plant.append("plant_20261201.csv", &TestPlant::rows(85_500, 86_400));
    notify.notify_one();
    wait_for("day 1 rows", Duration::from_secs(10), || rows_in(&TestPlant::soft_tags(&plant.output)) >= 14)
        .await
        .unwrap();
    // A folder sits where day 2's soft-tag file must go: it cannot be written (as on a full or
    // read-only file system).
    let blocker = plant.output.join("T-1").join("softtags-T-1-2026-12-02.csv");
    std::fs::create_dir(&blocker).unwrap();
    plant.append("plant_20261202.csv", &TestPlant::rows(86_400, 87_600));
    notify.notify_one();
    let degraded =
        |rx: &tokio::sync::watch::Receiver<efftemp::app::http::Snapshot>| rx.borrow().degraded.clone();
    wait_for("degraded", Duration::from_secs(10), || degraded(&snap_rx).is_some()).await.unwrap();
    let why = degraded(&snap_rx).unwrap();
    assert!(why.contains("outputs cannot be written"), "{why}");
    let (code, body) = tokio::task::spawn_blocking(move || http_get(addr, "/healthz")).await.unwrap();
    assert_eq!(code, 503, "{body}");
    assert!(body.contains("degraded: outputs cannot be written"), "{body}");
    let (code, body) = tokio::task::spawn_blocking(move || http_get(addr, "/readyz")).await.unwrap();
    assert_eq!(code, 503, "{body}");
    assert!(!svc.is_finished(), "the service must keep running");
    // Stay broken past the first retries (1 s, 2 s): the service must neither pretend to be
    // healthy nor stop trying.
    tokio::time::sleep(Duration::from_millis(2_500)).await;
    assert!(degraded(&snap_rx).is_some(), "still degraded while the folder is gone");

    // The fault clears: the service resumes from its checkpoint and catches up.
    std::fs::remove_dir(&blocker).unwrap();
    notify.notify_one();
    wait_for("recovered", Duration::from_secs(40), || {
        degraded(&snap_rx).is_none() && rows_in(&TestPlant::soft_tags(&plant.output)) >= 35
    })
    .await
    .unwrap_or_else(|()| panic!("{:?}\n{}", degraded(&snap_rx), TestPlant::soft_tags(&plant.output)));
    let (code, _) = tokio::task::spawn_blocking(move || http_get(addr, "/healthz")).await.unwrap();
    assert_eq!(code, 200);
    svc.stop().await;
    let live = TestPlant::soft_tags(&plant.output);
    let out = tempfile::tempdir().unwrap();
    assert_eq!(live, replay(&plant, out.path()), "nothing lost, nothing repeated");
}

/// Wild timestamps in the export: a row dated a year ahead mid-file, and a first row dated
/// 2000. Replay writes the same soft tags as without them (no interval up to the far date is
/// closed, no file of 2000 or 2027 appears, nothing of the real data is late), and counts and
/// logs the samples of the two rows as `implausible_time`.
#[test]
fn rows_dated_far_from_the_data_close_nothing_and_are_counted() {
    let clean = TestPlant::new("");
    clean.append("plant_20261201.csv", &TestPlant::rows(0, 1800));
    let out_clean = tempfile::tempdir().unwrap();
    let want = replay(&clean, out_clean.path());

    let plant = TestPlant::new("");
    let mut text = String::from("2000-01-01T00:00:00Z,10,30,30,70\n");
    text.push_str(&TestPlant::rows(0, 900));
    text.push_str("2027-12-01T00:15:00Z,10,30,30,70\n");
    text.push_str(&TestPlant::rows(900, 1800));
    plant.append("plant_20261201.csv", &text);
    let out = tempfile::tempdir().unwrap();
    let res = cargo_bin_cmd!("efftemp")
        .args(["replay", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(&plant.config)
        .arg("--output")
        .arg(out.path())
        .output()
        .unwrap();
    assert!(res.status.success(), "{}", String::from_utf8_lossy(&res.stderr));
    assert_eq!(TestPlant::soft_tags(out.path()), want);
    let files: Vec<String> = std::fs::read_dir(out.path().join("T-1"))
        .unwrap()
        .flatten()
        .map(|e| e.file_name().into_string().unwrap())
        .collect();
    // (The ingest counts of the first row's day record that one row was read then.)
    let outputs = files.iter().filter(|f| f.starts_with("softtags-") || f.starts_with("alerts-"));
    assert!(outputs.clone().all(|f| !f.contains("2000-") && !f.contains("2027-")), "{files:?}");
    let log = String::from_utf8_lossy(&res.stderr);
    // Two rows of four tags: two warnings of four samples each.
    let warned = log.lines().filter(|l| l.contains("\"reason\":\"implausible_time\"")).count();
    assert!(warned == 2 && log.contains("\"samples\":4"), "{log}");
}

#[test]
fn rejected_rows_are_counted_and_logged_with_file_line_and_reason() {
    let plant = TestPlant::new("");
    let mut text = TestPlant::rows(0, 120);
    text.push_str("2026-12-01T00:02:00Z,10,abc,30,70\n"); // line 14: non-numeric
    text.push_str("2026-13-01T00:02:10Z,10,30,30,70\n"); // line 15: bad timestamp
    text.push_str("2026-12-01T00:02:20Z,10,30\n"); // line 16: short row
    text.push_str("2026-12-01T00:02:30Z,10,nan,30,70\n"); // line 17: not finite
    text.push_str(&TestPlant::rows(160, 300));
    plant.append("plant_20261201.csv", &text);
    let out = tempfile::tempdir().unwrap();
    let res = cargo_bin_cmd!("efftemp")
        .args(["replay", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(&plant.config)
        .arg("--output")
        .arg(out.path())
        .output()
        .unwrap();
    assert!(res.status.success());
    let stdout = String::from_utf8_lossy(&res.stdout);
    assert!(stdout.contains("4 rejected"), "{stdout}");
    let logs: Vec<serde_json::Value> =
        String::from_utf8_lossy(&res.stderr).lines().filter_map(|l| serde_json::from_str(l).ok()).collect();
    for (line, reason) in [(14, "non_numeric"), (15, "bad_timestamp"), (16, "short_row"), (17, "non_numeric")]
    {
        let hit = logs.iter().find(|v| v["line"] == line && v["reason"] == reason);
        let hit = hit.unwrap_or_else(|| panic!("no log for line {line} ({reason}): {logs:?}"));
        assert!(hit["file"].as_str().unwrap().ends_with("plant_20261201.csv"));
        assert_eq!(hit["level"], "WARN");
    }
}

/// Local timestamps across the October change in Europe/London: the repeated hour is read in
/// order and every UTC minute gets exactly one interval.
/// Source: IANA tz database: 2026-10-25 02:00 BST -> 01:00 GMT.
#[test]
fn local_timestamps_through_the_autumn_clock_change() {
    let plant = TestPlant::new("");
    let cfg = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("timestamp_column = \"Timestamp\"", "timestamp_column = \"Timestamp\"\ntimestamp_format = \"%Y-%m-%d %H:%M:%S\"\ntime_zone = \"Europe/London\"");
    std::fs::write(&plant.config, cfg).unwrap();
    // 00:00 BST (23:00 UTC on the 24th) to 03:00 GMT: four hours of data, local times.
    let tz = jiff::tz::TimeZone::get("Europe/London").unwrap();
    let start = "2026-10-24T23:00:00Z".parse::<jiff::Timestamp>().unwrap().as_second();
    let mut text = String::new();
    for k in 0..(4 * 360) {
        let t = start + k * 10;
        let local = jiff::Timestamp::from_second(t).unwrap().to_zoned_datetime(tz.clone());
        let row = TestPlant::row(k * 10);
        let rest = row.split_once(',').unwrap().1;
        text.push_str(&format!("{},{rest}\n", local.strftime("%Y-%m-%d %H:%M:%S")));
    }
    plant.append("plant_20261025.csv", &text);
    let out = tempfile::tempdir().unwrap();
    let site = SiteConfig::load(&plant.config).unwrap();
    let sum = efftemp::app::replay::replay(&site, Some(out.path().to_path_buf())).unwrap();
    assert_eq!((sum.rejected, sum.intervals), (0, 240));
}

/// Hourly export files named by local hour through the autumn clock change: the repeated hour
/// comes in a second file (`…01b.csv`). Its rows are the second 01:00–02:00, not late copies of
/// the first; and a service restarted in the middle of that second hour (a clean stop) goes on
/// with the right hour. Every interval is written once and nothing is rejected or late.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn hourly_files_through_the_repeated_autumn_hour_lose_nothing() {
    let plant = TestPlant::new("");
    let cfg = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("timestamp_column = \"Timestamp\"", "timestamp_column = \"Timestamp\"\ntimestamp_format = \"%Y-%m-%d %H:%M:%S\"\ntime_zone = \"Europe/London\"");
    std::fs::write(&plant.config, cfg).unwrap();
    let tz = jiff::tz::TimeZone::get("Europe/London").unwrap();
    let start = "2026-10-24T23:00:00Z".parse::<jiff::Timestamp>().unwrap().as_second();
    // (file, rows) in the order the exporter writes them: one file per local hour.
    let mut files: Vec<(String, String)> = Vec::new();
    for k in 0..(4 * 360) {
        let t = start + k * 10;
        let local = jiff::Timestamp::from_second(t).unwrap().to_zoned_datetime(tz.clone());
        let hour = local.strftime("%Y%m%d%H").to_string();
        let second_pass = local.offset().seconds() == 0 && local.hour() == 1;
        let name = format!("plant_{hour}{}.csv", if second_pass { "b" } else { "" });
        let row = TestPlant::row(k * 10);
        let line = format!("{},{}\n", local.strftime("%Y-%m-%d %H:%M:%S"), row.split_once(',').unwrap().1);
        match files.last_mut() {
            Some((n, text)) if *n == name => text.push_str(&line),
            _ => files.push((name, line)),
        }
    }
    assert_eq!(files.iter().map(|f| f.0.as_str()).collect::<Vec<_>>()[2], "plant_2026102501b.csv");
    let site = Arc::new(util::quick_site(&plant.config));
    // Run 1: the first two hours and half of the repeated one; stop; run 2: the rest.
    let (first_half, second_half) = files[2].1.split_at(files[2].1.len() / 2);
    let rounds: Vec<Vec<(String, String)>> = vec![
        vec![files[0].clone(), files[1].clone(), (files[2].0.clone(), first_half.to_string())],
        vec![(files[2].0.clone(), second_half.to_string()), files[3].clone()],
    ];
    for (i, round) in rounds.iter().enumerate() {
        let svc = Running::start(site.clone(), false, None);
        let notify = svc.notify.clone();
        for (name, text) in round {
            plant.append(name, text);
            notify.notify_one();
            tokio::time::sleep(Duration::from_millis(150)).await;
        }
        let want = if i == 0 { 150 } else { 240 };
        wait_for("rows", Duration::from_secs(20), || rows_in(&TestPlant::soft_tags(&plant.output)) >= want)
            .await
            .unwrap_or_else(|()| panic!("{} rows", rows_in(&TestPlant::soft_tags(&plant.output))));
        svc.stop().await;
    }
    let live = TestPlant::soft_tags(&plant.output);
    assert_eq!(rows_in(&live), 240, "four hours of 1-minute intervals, each once");
    let out = tempfile::tempdir().unwrap();
    let sum = efftemp::app::replay::replay(
        &SiteConfig::load(&plant.config).unwrap(),
        Some(out.path().to_path_buf()),
    )
    .unwrap();
    assert_eq!((sum.rejected, sum.intervals), (0, 240), "replay of the hourly files");
    assert_eq!(live, TestPlant::soft_tags(out.path()));
}

/// A header row again in the middle of an export file, with the columns in another order: the
/// rows after it are read by its columns (not by the first header's), also when the service is
/// stopped right after it and started again; the result equals the same data exported with one
/// header throughout, and the header line is counted and logged, not taken for data.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_header_again_mid_file_remaps_the_columns_across_a_restart() {
    let clean = TestPlant::new("");
    clean.append("plant_20261201.csv", &TestPlant::rows(0, 1800));
    let want = replay(&clean, tempfile::tempdir().unwrap().path());

    let reorder = |row: &str| {
        let c: Vec<&str> = row.trim_end().split(',').collect();
        format!("{},{},{},{},{}\n", c[0], c[4], c[3], c[2], c[1])
    };
    let plant = TestPlant::new("");
    let site = Arc::new(util::quick_site(&plant.config));
    let reordered =
        |a: i64, b: i64| -> String { (a..b).step_by(10).map(|t| reorder(&TestPlant::row(t))).collect() };
    let rounds = [
        format!("{}Timestamp,TI-109,JI-103,TI-102,FI-101\n{}", TestPlant::rows(0, 900), reordered(900, 1200)),
        reordered(1200, 1800),
    ];
    for (i, text) in rounds.iter().enumerate() {
        let svc = Running::start(site.clone(), false, None);
        let notify = svc.notify.clone();
        plant.append("plant_20261201.csv", text);
        notify.notify_one();
        let rows = if i == 0 { 19 } else { 30 };
        wait_for("rows", Duration::from_secs(15), || rows_in(&TestPlant::soft_tags(&plant.output)) >= rows)
            .await
            .unwrap_or_else(|()| panic!("{}", TestPlant::soft_tags(&plant.output)));
        // Let the checkpoint catch up with what was read before stopping.
        tokio::time::sleep(Duration::from_millis(300)).await;
        svc.stop().await;
        if i == 0 {
            // The checkpoint keeps the mid-file header: a restart resumes after it.
            let state = std::fs::read_to_string(plant.state.join("state.json")).unwrap();
            assert!(state.contains("\"TI-109\",\"JI-103\""), "{}", &state[..state.len().min(2000)]);
        }
    }
    assert_eq!(TestPlant::soft_tags(&plant.output), want);
    let out = tempfile::tempdir().unwrap();
    let res = cargo_bin_cmd!("efftemp")
        .args(["replay", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(&plant.config)
        .arg("--output")
        .arg(out.path())
        .output()
        .unwrap();
    assert!(res.status.success());
    assert_eq!(TestPlant::soft_tags(out.path()), want, "replay of the same file");
    let log = String::from_utf8_lossy(&res.stderr);
    assert!(log.contains("\"reason\":\"header_again\"") && log.contains("other columns"), "{log}");
}

fn spawn_run(config: &Path) -> Child {
    Command::new(assert_cmd::cargo::cargo_bin!("efftemp"))
        .args(["run", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(config)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap()
}

/// Kill the real binary with SIGKILL at pseudo-random moments while rows (with partial rows
/// and rotations) are appended; after the final restart the soft tags equal a clean replay.
/// CI runs 4 kills; the slow suite runs 100: `EFFTEMP_KILL_LOOPS=100 cargo test --release --test
/// integration sigkill` (about a minute on 2 cores; it passed with 100 kills).
#[test]
fn sigkill_at_random_moments_loses_and_duplicates_nothing() {
    let loops: usize = std::env::var("EFFTEMP_KILL_LOOPS").ok().and_then(|v| v.parse().ok()).unwrap_or(4);
    let plant = TestPlant::new("");
    let cfg =
        std::fs::read_to_string(&plant.config).unwrap().replace("max_wait = \"3m\"", "max_wait = \"3s\"");
    std::fs::write(&plant.config, cfg).unwrap();
    let mut seed: u64 = 0x5eed_1234;
    let mut rand = move |n: u64| {
        seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (seed >> 33) % n
    };
    let mut t = 0i64;
    let mut child = spawn_run(&plant.config);
    for k in 0..loops {
        // Names sort chronologically (a replay reads files in name order).
        let file = format!("plant_202612{:02}.csv", 1 + k / 2);
        for _ in 0..(3 + rand(5)) {
            let n = 6 + rand(12) as i64;
            let text = TestPlant::rows(t, t + 10 * n);
            t += 10 * n;
            // Sometimes split a row across two writes.
            let cut = if rand(3) == 0 { text.len() - 5 } else { text.len() };
            plant.append(&file, &text[..cut]);
            std::thread::sleep(Duration::from_millis(20 + rand(120)));
            plant.append(&file, &text[cut..]);
        }
        std::thread::sleep(Duration::from_millis(rand(400)));
        child.kill().unwrap();
        child.wait().unwrap();
        child = spawn_run(&plant.config);
    }
    // Let the last run catch up and flush the quiet stream, then stop it politely.
    let deadline = Instant::now() + Duration::from_secs(30);
    let expected = (t / 60) as usize + usize::from(t % 60 != 0);
    while rows_in(&TestPlant::soft_tags(&plant.output)) < expected && Instant::now() < deadline {
        std::thread::sleep(Duration::from_millis(100));
    }
    let _ = Command::new("kill").arg("-TERM").arg(child.id().to_string()).status();
    let status = child.wait().unwrap();
    assert!(status.success(), "{status:?}");
    let live = TestPlant::soft_tags(&plant.output);
    let out = tempfile::tempdir().unwrap();
    let batch = replay(&plant, out.path());
    assert_eq!(rows_in(&batch), expected);
    if live != batch && std::env::var_os("EFFTEMP_KEEP_FAILED").is_some() {
        let _ = Command::new("cp")
            .arg("-r")
            .arg(plant.exports.parent().unwrap())
            .arg("/tmp/efftemp-kill-failed")
            .status();
    }
    util::assert_same_lines(&live, &batch, &format!("live after {loops} kills vs replay"));
    let _ = std::io::stdout().flush();
}

/// Health and metrics are scraped over HTTP while the service runs.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn health_and_metrics_over_http() {
    let plant = TestPlant::new("");
    let mut text = TestPlant::rows(0, 600);
    text.push_str("2026-12-01T00:10:00Z,10,abc,30,70\n");
    plant.append("plant_20261201.csv", &text);
    let site = Arc::new(SiteConfig::load(&plant.config).unwrap());
    let (snap_tx, snap_rx) = tokio::sync::watch::channel(efftemp::app::http::Snapshot::default());
    let addr = util::serve_http(snap_rx).await;
    let svc = Running::start(site, false, Some(snap_tx));
    let notify = svc.notify.clone();
    let (code, _) = tokio::task::spawn_blocking(move || http_get(addr, "/healthz")).await.unwrap();
    assert_eq!(code, 200);
    notify.notify_one();
    let mut body = String::new();
    for _ in 0..100 {
        let (code, b) = tokio::task::spawn_blocking(move || http_get(addr, "/metrics")).await.unwrap();
        assert_eq!(code, 200);
        body = b;
        if body.contains("efftemp_rows_read_total{unit=\"T-1\"} 61") {
            break;
        }
        tokio::time::sleep(Duration::from_millis(100)).await;
    }
    assert!(body.contains("efftemp_rows_read_total{unit=\"T-1\"} 61"), "{body}");
    assert!(body.contains("efftemp_rows_rejected_total{unit=\"T-1\",reason=\"non_numeric\"} 1"), "{body}");
    // TI-102 runs to 00:09:50: intervals up to 00:08 are passed by the 1-minute reorder window.
    assert!(body.contains("efftemp_intervals_closed_total{unit=\"T-1\"} 8"), "{body}");
    assert!(body.contains("efftemp_watch_mode{mode=\"off\"} 1"), "{body}");
    let (code, ready) = tokio::task::spawn_blocking(move || http_get(addr, "/readyz")).await.unwrap();
    assert_eq!(code, 200, "{ready}");
    svc.stop().await;
}

fn soft_rows(plant: &TestPlant, unit: &str) -> usize {
    std::fs::read_dir(plant.output.join(unit))
        .map(|rd| {
            rd.flatten()
                .filter(|e| e.file_name().to_string_lossy().starts_with("softtags-"))
                .map(|e| rows_in(&std::fs::read_to_string(e.path()).unwrap_or_default()))
                .sum()
        })
        .unwrap_or(0)
}

/// SIGHUP reloads a validated configuration (a bad one is refused and the running one carries
/// on; an added unit starts), and SIGTERM stops within 5 s with outputs flushed.
#[test]
fn sighup_reload_and_sigterm() {
    let plant = TestPlant::new("");
    let cfg = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("max_wait = \"3m\"", "max_wait = \"2s\"")
        .replace("[service]", "[service]\nhttp_address = \"off\"");
    std::fs::write(&plant.config, &cfg).unwrap();
    plant.append("plant_20261201.csv", &TestPlant::rows(0, 300));
    let mut child = spawn_run(&plant.config);
    let wait = |pred: &dyn Fn() -> bool| {
        let t = Instant::now();
        while !pred() && t.elapsed() < Duration::from_secs(20) {
            std::thread::sleep(Duration::from_millis(100));
        }
        pred()
    };
    assert!(wait(&|| soft_rows(&plant, "T-1") >= 5), "first rows");
    let hup = |pid: u32| Command::new("kill").arg("-HUP").arg(pid.to_string()).status().unwrap();
    // A broken configuration is refused; the service keeps working.
    std::fs::write(&plant.config, cfg.replace("interval = \"1m\"", "interval = \"7m\"")).unwrap();
    hup(child.id());
    plant.append("plant_20261201.csv", &TestPlant::rows(300, 600));
    assert!(wait(&|| soft_rows(&plant, "T-1") >= 10), "still running after a refused reload");
    assert!(child.try_wait().unwrap().is_none());
    // A valid configuration with a second unit reading another directory.
    let second = cfg
        .split("[[unit]]")
        .nth(1)
        .unwrap()
        .replace("name = \"T-1\"", "name = \"T-2\"")
        .replace("directory = \"exports\"", "directory = \"exports2\"");
    std::fs::create_dir_all(plant.exports.parent().unwrap().join("exports2")).unwrap();
    std::fs::write(&plant.config, format!("{cfg}\n[[unit]]{second}")).unwrap();
    hup(child.id());
    let p2 = plant.exports.parent().unwrap().join("exports2").join("plant_20261201.csv");
    std::fs::write(&p2, format!("{}\n{}", util::PLANT_HEADER, TestPlant::rows(0, 300))).unwrap();
    assert!(wait(&|| soft_rows(&plant, "T-2") >= 5), "the added unit runs");
    // SIGTERM: flushed and stopped within 5 s.
    let t = Instant::now();
    Command::new("kill").arg("-TERM").arg(child.id().to_string()).status().unwrap();
    let status = child.wait().unwrap();
    assert!(status.success() && t.elapsed() < Duration::from_secs(5), "{status:?} after {:?}", t.elapsed());
    assert!(plant.state.join("state.json").exists());
}

/// No CPU without data: once a stalled stream has been flushed after `max_wait`, the service
/// has no deadline left to wake up for (only file events or the reconcile tick wake it).
#[test]
fn a_flushed_quiet_stream_leaves_no_timer_running() {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &TestPlant::rows(0, 125));
    let site = SiteConfig::load(&plant.config).unwrap();
    let mut p = efftemp::pipeline::Pipeline::new(&site, &efftemp::pipeline::Mode::Live).unwrap();
    p.pass(1_000, false).unwrap();
    // Data arrived: the quiet deadline is max_wait (3 min) after it.
    assert_eq!(p.next_quiet_deadline(), Some(1_000 + 180_000));
    p.pass(100_000, false).unwrap();
    assert_eq!(p.next_quiet_deadline(), Some(181_000), "no new data: same deadline");
    p.pass(181_000, false).unwrap();
    assert_eq!(p.next_quiet_deadline(), None, "flushed: nothing left to wait for");
    // New data re-arm it.
    plant.append("plant_20261201.csv", &TestPlant::rows(130, 200));
    p.pass(200_000, false).unwrap();
    assert_eq!(p.next_quiet_deadline(), Some(380_000));
}

/// How the live service is woken in [`live_file_scenarios_equal_replay`].
#[derive(Debug, Clone, Copy)]
enum Waker {
    /// The test notifies after each file operation (test-driven polling).
    Test,
    /// Native file events only; the reconcile tick is a minute away, so events must do it.
    Native,
    /// notify's polling watcher.
    Poll,
    /// No watcher: the periodic reconcile pass only.
    Off,
}

/// The file scenarios of a live export directory — appends, a row split across two writes, a
/// new daily file while the old one still gets a late row, copy-truncate rotation, atomic
/// replacement by a longer file — give byte-identical soft tags to a replay of the final files,
/// whichever way the service is woken.
async fn live_file_scenarios_equal_replay(waker: Waker) {
    use efftemp::ingest::settings::WatchMode;
    let plant = TestPlant::new("");
    let site = Arc::new({
        let mut s = util::quick_site(&plant.config);
        (s.service.watch, s.service.reconcile_ms) = match waker {
            Waker::Test | Waker::Off => (WatchMode::Off, 200),
            Waker::Native => (WatchMode::Native, 60_000),
            Waker::Poll => (WatchMode::Poll, 250),
        };
        s
    });
    let ex = plant.exports.clone();
    let split = TestPlant::rows(600, 620);
    let (head, tail) = split.split_at(split.len() - 7);
    let ops: Vec<Box<dyn Fn()>> = vec![
        Box::new(|| plant.append("plant_20261201.csv", &TestPlant::rows(0, 600))),
        Box::new(|| plant.append("plant_20261201.csv", head)),
        Box::new(|| plant.append("plant_20261201.csv", tail)),
        Box::new(|| plant.append("plant_20261201.csv", &TestPlant::rows(620, 1200))),
        Box::new(|| plant.append("plant_20261202.csv", &TestPlant::rows(1200, 1500))),
        Box::new(|| plant.append("plant_20261201.csv", &TestPlant::rows(1200, 1210))),
        // Copy-truncate: the rows so far go to a copy, the original restarts empty.
        Box::new(|| {
            std::fs::copy(ex.join("plant_20261202.csv"), ex.join("plant_20261202-a.csv")).unwrap();
            let f = std::fs::OpenOptions::new().write(true).open(ex.join("plant_20261202.csv")).unwrap();
            f.set_len(0).unwrap();
            f.sync_all().unwrap();
        }),
        Box::new(|| {
            let mut f = std::fs::OpenOptions::new().append(true).open(ex.join("plant_20261202.csv")).unwrap();
            write!(f, "{}\n{}", util::PLANT_HEADER, TestPlant::rows(1500, 1800)).unwrap();
        }),
        // Atomic replacement of the current file by a superset of it.
        Box::new(|| {
            let old = std::fs::read_to_string(ex.join("plant_20261202.csv")).unwrap();
            std::fs::write(ex.join("tmp-export.part"), old + &TestPlant::rows(1800, 2100)).unwrap();
            std::fs::rename(ex.join("tmp-export.part"), ex.join("plant_20261202.csv")).unwrap();
        }),
        Box::new(|| plant.append("plant_20261202.csv", &TestPlant::rows(2100, 2400))),
    ];
    let svc = Running::start(site.clone(), !matches!(waker, Waker::Test), None);
    let notify = svc.notify.clone();
    // Let the watcher start before the first write.
    tokio::time::sleep(Duration::from_millis(300)).await;
    for op in &ops {
        op();
        notify.notify_one();
        tokio::time::sleep(Duration::from_millis(150)).await;
    }
    let done =
        wait_for("all rows", Duration::from_secs(20), || rows_in(&TestPlant::soft_tags(&plant.output)) >= 40)
            .await;
    svc.stop().await;
    let live = TestPlant::soft_tags(&plant.output);
    assert!(done.is_ok(), "{waker:?}: rows {}:\n{live}", rows_in(&live));
    let out = tempfile::tempdir().unwrap();
    let batch = replay(&plant, out.path());
    assert_eq!(rows_in(&live), 40, "{waker:?}:\n{live}");
    assert_eq!(live, batch, "{waker:?}: live and replay differ");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn file_scenarios_with_test_driven_polling() {
    live_file_scenarios_equal_replay(Waker::Test).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn file_scenarios_with_the_native_watcher() {
    live_file_scenarios_equal_replay(Waker::Native).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn file_scenarios_with_the_polling_watcher() {
    live_file_scenarios_equal_replay(Waker::Poll).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn file_scenarios_with_no_watcher() {
    live_file_scenarios_equal_replay(Waker::Off).await;
}

/// An interval left open in the checkpoint (the service stopped before the wait for late data
/// ran out) is closed after `max_wait` from the restart even if no new data arrive.
#[test]
fn an_interval_open_at_restart_closes_without_new_data() {
    let plant = TestPlant::new("");
    plant.append("plant_20261201.csv", &TestPlant::rows(0, 125));
    let site = SiteConfig::load(&plant.config).unwrap();
    {
        let mut p = efftemp::pipeline::Pipeline::new(&site, &efftemp::pipeline::Mode::Live).unwrap();
        p.pass(1_000, false).unwrap();
        p.checkpoint().unwrap();
    }
    // Data to 00:02:00: only [00:00, 00:01) has been passed by the 1-minute reorder window.
    assert_eq!(rows_in(&TestPlant::soft_tags(&plant.output)), 1);
    let mut p = efftemp::pipeline::Pipeline::new(&site, &efftemp::pipeline::Mode::Live).unwrap();
    p.pass(5_000, false).unwrap();
    assert_eq!(p.next_quiet_deadline(), Some(5_000 + 180_000), "restored interval must arm the wait");
    p.pass(185_000, false).unwrap();
    assert_eq!(rows_in(&TestPlant::soft_tags(&plant.output)), 3, "the last intervals closed");
}

/// A correlation used beyond its published range is flagged on every row; an engineer who has
/// reviewed the extrapolation can accept that flag, which then stays in the soft tags but
/// raises no alert. Conditions that are never routine (two-phase risk) cannot be accepted.
#[test]
fn reviewed_range_flags_can_be_accepted_but_two_phase_risk_cannot() {
    // The test plant heats water from about 30 to 70 degC; narrowing the water liquid-Cp range
    // to 310 K makes every interval an extrapolation.
    let narrow = "[unit.components.water]\ncp_liq_range = [273.16, 310.0]\n";
    let alerts_of = |dir: &Path| -> String {
        let mut text = String::new();
        for e in std::fs::read_dir(dir.join("T-1")).unwrap().flatten() {
            if e.file_name().to_string_lossy().starts_with("alerts-") {
                text.push_str(&std::fs::read_to_string(e.path()).unwrap());
            }
        }
        text
    };
    let plain = TestPlant::new(narrow);
    plain.append("plant_20261201.csv", &TestPlant::rows(0, 1800));
    let out = tempfile::tempdir().unwrap();
    let soft = replay(&plain, out.path());
    assert!(soft.lines().skip(1).all(|l| l.contains("range_cp_liq:water")), "{soft}");
    assert!(alerts_of(out.path()).contains("\"model_validity\""), "no alert for the extrapolation");

    // Component ids ignore case (and `_` equals `-`) here as everywhere.
    for flag in ["range_cp_liq:water", "range_cp_liq:Water"] {
        let accepted = TestPlant::new(&format!("{narrow}[unit.model]\naccepted_flags = [\"{flag}\"]\n"));
        accepted.append("plant_20261201.csv", &TestPlant::rows(0, 1800));
        let out = tempfile::tempdir().unwrap();
        let soft = replay(&accepted, out.path());
        assert!(soft.lines().skip(1).all(|l| l.contains("range_cp_liq:water")), "{soft}");
        assert!(!alerts_of(out.path()).contains("\"model_validity\""), "{flag}: {}", alerts_of(out.path()));
    }

    let refused =
        TestPlant::new("[unit.model]\naccepted_flags = [\"two_phase_risk\", \"range_psat:benzene\"]\n");
    let out = cargo_bin_cmd!("efftemp").args(["check", "--config"]).arg(&refused.config).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("unit[1].model.accepted_flags[1]") && err.contains("cannot be accepted"), "{err}");
    assert!(
        err.contains("unit[1].model.accepted_flags[2]") && err.contains("`benzene` is not used"),
        "{err}"
    );
}

/// A backlog (three days of 10-s data written while the service was down) is read in bounded
/// passes: the first snapshot (systemd's READY) comes after one slice, snapshots say
/// "catching up" with the unread bytes going down, checkpoints are written during the catch-up,
/// a stop in the middle is prompt, and a restart finishes the backlog with the same soft tags
/// as a replay.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_backlog_is_read_in_bounded_passes_with_checkpoints_and_a_prompt_stop() {
    let plant = TestPlant::new("");
    for d in 0..3 {
        plant.append(&format!("plant_2026120{}.csv", d + 1), &TestPlant::rows(d * 86_400, (d + 1) * 86_400));
    }
    let mut site = util::quick_site(&plant.config);
    // Below what a site file may set (10 ms): slices of the smallest budget, 64 KiB.
    site.service.slice_ms = 1;
    let site = Arc::new(site);
    let (snap_tx, mut snap_rx) = tokio::sync::watch::channel(efftemp::app::http::Snapshot::default());
    let svc = Running::start(site.clone(), false, Some(snap_tx));
    svc.notify.notify_one();
    // Watch the catch-up for a few slices.
    let mut seen: Vec<(u64, bool, u64, u64)> = Vec::new();
    while seen.len() < 6 || seen[seen.len() - 1].3 == seen[0].3 {
        tokio::time::timeout(Duration::from_secs(20), snap_rx.changed()).await.expect("snapshots").unwrap();
        let s = snap_rx.borrow_and_update().clone();
        let unread = s.units.iter().filter_map(|u| u.backlog_bytes).sum::<u64>();
        seen.push((s.passes, s.catching_up, unread, s.checkpoint_writes));
        assert!(s.catching_up, "caught up before a checkpoint was written: {seen:?}");
    }
    let first = seen[0];
    let last = seen[seen.len() - 1];
    assert_eq!(first.0, 1, "{seen:?}");
    assert!(last.2 < first.2, "the backlog did not shrink: {seen:?}");
    assert!(last.3 > first.3, "no checkpoint during the catch-up: {seen:?}");
    let stopping = Instant::now();
    svc.stop().await;
    let stop_took = stopping.elapsed();
    assert!(stop_took < Duration::from_secs(2), "stop took {stop_took:?} during a catch-up");
    let partial = rows_in(&TestPlant::soft_tags(&plant.output));
    assert!(partial > 0 && partial < 3 * 1440 - 10, "{partial} rows before the stop; {seen:?}");
    // A restart goes on from the checkpoint and finishes the backlog.
    let svc = Running::start(site, false, None);
    svc.notify.notify_one();
    wait_for("the whole backlog", Duration::from_secs(120), || {
        rows_in(&TestPlant::soft_tags(&plant.output)) >= 3 * 1440
    })
    .await
    .unwrap_or_else(|()| panic!("rows: {}", rows_in(&TestPlant::soft_tags(&plant.output))));
    svc.stop().await;
    let out = tempfile::tempdir().unwrap();
    util::assert_same_lines(&TestPlant::soft_tags(&plant.output), &replay(&plant, out.path()), "soft tags");
}

/// The real binary under systemd's notification protocol, started on a backlog (30 days of
/// 10-s data): READY comes after the first slice, long before the backlog is read, with a
/// STATUS that says it is catching up; watchdog keep-alives keep coming while it catches up
/// (none is more than `WATCHDOG_USEC` after the previous one); SIGTERM in the middle stops it
/// within 2 s, and a restart finishes the backlog with the soft tags of a replay.
#[cfg(target_os = "linux")]
#[test]
fn a_backlog_under_systemd_keeps_the_watchdog_fed_and_stops_promptly() {
    use std::os::unix::net::UnixDatagram;
    let plant = TestPlant::new("");
    let cfg = std::fs::read_to_string(&plant.config)
        .unwrap()
        .replace("max_wait = \"3m\"", "max_wait = \"2s\"")
        .replace("[service]", "[service]\nhttp_address = \"off\"\ncatch_up_slice = \"50ms\"");
    std::fs::write(&plant.config, &cfg).unwrap();
    // Long enough that an idle machine is still catching up after three keep-alives (30 days
    // were read in 1.2 s).
    let days = 90;
    for d in 0..days {
        plant.append(&format!("plant_day{:03}.csv", d + 1), &TestPlant::rows(d * 86_400, (d + 1) * 86_400));
    }
    let sock_path = plant.state.parent().unwrap().join("notify.sock");
    let sock = UnixDatagram::bind(&sock_path).unwrap();
    sock.set_read_timeout(Some(Duration::from_millis(100))).unwrap();
    let watchdog = Duration::from_millis(800);
    let started = Instant::now();
    let mut child = Command::new(assert_cmd::cargo::cargo_bin!("efftemp"))
        .args(["run", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(&plant.config)
        .env("NOTIFY_SOCKET", &sock_path)
        .env("WATCHDOG_USEC", watchdog.as_micros().to_string())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut got: Vec<(Duration, String)> = Vec::new();
    let mut buf = [0u8; 4096];
    let pings = |got: &[(Duration, String)]| got.iter().filter(|m| m.1.contains("WATCHDOG=1")).count();
    while pings(&got) < 3 && started.elapsed() < Duration::from_secs(60) {
        if let Ok(n) = sock.recv(&mut buf) {
            got.push((started.elapsed(), String::from_utf8_lossy(&buf[..n]).into_owned()));
        }
    }
    // Datagrams queued while the test looked at the others.
    sock.set_nonblocking(true).unwrap();
    while let Ok(n) = sock.recv(&mut buf) {
        got.push((started.elapsed(), String::from_utf8_lossy(&buf[..n]).into_owned()));
    }
    let texts: Vec<&str> = got.iter().map(|m| m.1.as_str()).collect();
    let ready = got.iter().find(|m| m.1.contains("READY=1")).unwrap_or_else(|| panic!("no READY: {texts:?}"));
    assert!(ready.1.contains("STATUS=catching up: "), "{texts:?}");
    let ping_times: Vec<Duration> = got.iter().filter(|m| m.1.contains("WATCHDOG=1")).map(|m| m.0).collect();
    assert!(ping_times.len() >= 3, "{texts:?}");
    for w in ping_times.windows(2) {
        assert!(w[1] - w[0] <= watchdog, "keep-alives {:?} apart: {got:?}", w[1] - w[0]);
    }
    let status_now = got.iter().rev().find(|m| m.1.contains("STATUS=")).unwrap();
    assert!(status_now.1.contains("catching up"), "caught up before the test could stop it: {texts:?}");
    let stopping = Instant::now();
    Command::new("kill").arg("-TERM").arg(child.id().to_string()).status().unwrap();
    let status = child.wait().unwrap();
    let stop_took = stopping.elapsed();
    assert!(status.success(), "{status:?}");
    assert!(stop_took <= Duration::from_secs(2), "SIGTERM during the catch-up took {stop_took:?}");
    let total = usize::try_from(days).unwrap() * 1440;
    let partial = rows_in(&TestPlant::soft_tags(&plant.output));
    assert!(partial < total - 10, "the backlog was read before the stop ({partial} rows)");
    let mut child = spawn_run(&plant.config);
    let deadline = Instant::now() + Duration::from_secs(120);
    while rows_in(&TestPlant::soft_tags(&plant.output)) < total && Instant::now() < deadline {
        std::thread::sleep(Duration::from_millis(200));
    }
    Command::new("kill").arg("-TERM").arg(child.id().to_string()).status().unwrap();
    assert!(child.wait().unwrap().success());
    let out = tempfile::tempdir().unwrap();
    util::assert_same_lines(&TestPlant::soft_tags(&plant.output), &replay(&plant, out.path()), "soft tags");
    println!("READY after {:?}, keep-alives at {ping_times:?}, SIGTERM took {stop_took:?}", ready.0);
}
