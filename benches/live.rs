//! Live service figures (DESIGN §5): latency from a row appended to an export file to its
//! soft-tag row on disk (p50/p99, target p99 ≤ 1 s), CPU used while no data arrives, and a
//! many-units load test (200 units at 1-s data for a simulated hour: backlog and memory).
//!
//! Runs the real binary (`efftemp run`, native file watcher) as a child process.
//! Run: `cargo bench --bench live` (or `-- latency`, `-- idle`, `-- load [UNITS] [SPEED]`).

#![allow(missing_docs, clippy::unwrap_used)]

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

mod common;
use common::{HEADER, unit_block};

const BASE: i64 = 1_796_083_200; // 2026-12-01T00:00:00Z

fn site(root: &Path, units: &str, watch: &str) -> PathBuf {
    let cfg = root.join("site.toml");
    let text = format!(
        "[site]\nname = \"bench\"\ntime_zone = \"UTC\"\nstate_dir = \"state\"\noutput_dir = \"output\"\nshift_reports = false\n[service]\nwatch = \"{watch}\"\nreconcile_interval = \"5s\"\ncheckpoint_interval = \"5s\"\nhttp_address = \"off\"\n{units}"
    );
    std::fs::write(&cfg, text).unwrap();
    cfg
}

fn row(t: i64) -> String {
    let ts = jiff::Timestamp::from_second(BASE + t).unwrap().strftime("%Y-%m-%dT%H:%M:%SZ");
    format!("{ts},10.000,30.000,30.000,69.800\n")
}

fn spawn(cfg: &Path) -> Child {
    Command::new(env!("CARGO_BIN_EXE_efftemp"))
        .args(["run", "--log-format", "json", "--log-level", "warn", "--config"])
        .arg(cfg)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap()
}

fn proc_field(pid: u32, file: &str, field: &str) -> Option<u64> {
    let s = std::fs::read_to_string(format!("/proc/{pid}/{file}")).ok()?;
    s.lines().find(|l| l.starts_with(field))?.split_whitespace().nth(1)?.parse().ok()
}

/// CPU time (user + system) of a process, in clock ticks.
fn cpu_ticks(pid: u32) -> u64 {
    let s = std::fs::read_to_string(format!("/proc/{pid}/stat")).unwrap_or_default();
    let after = s.rsplit_once(')').map_or("", |x| x.1);
    let f: Vec<&str> = after.split_whitespace().collect();
    f.get(11).and_then(|v| v.parse::<u64>().ok()).unwrap_or(0)
        + f.get(12).and_then(|v| v.parse::<u64>().ok()).unwrap_or(0)
}

/// Intervals (minutes) written by the slowest of the load test's units.
fn processed(root: &Path, units: usize) -> usize {
    (0..units)
        .map(|u| {
            count_lines(&root.join(format!("output/U-{u:03}/softtags-U-{u:03}-2026-12-01.csv")))
                .saturating_sub(1)
        })
        .min()
        .unwrap_or(0)
}

fn count_lines(path: &Path) -> usize {
    std::fs::read(path).map(|b| b.iter().filter(|c| **c == b'\n').count()).unwrap_or(0)
}

fn latency_and_idle() {
    let dir = tempfile::tempdir().unwrap();
    let exports = dir.path().join("exports");
    std::fs::create_dir_all(&exports).unwrap();
    let cfg = site(dir.path(), &unit_block("L-1", "exports", "1s"), "auto");
    let file = exports.join("plant_20261201.csv");
    let mut f = std::fs::OpenOptions::new().create(true).append(true).open(&file).unwrap();
    // With the default reorder window (one interval, 1 s here) a row closes the interval
    // before the previous one: start with two rows so that every appended row closes one.
    write!(f, "{HEADER}\n{}{}", row(0), row(1)).unwrap();
    let mut child = spawn(&cfg);
    let out = dir.path().join("output/L-1/softtags-L-1-2026-12-01.csv");
    std::thread::sleep(Duration::from_millis(500));
    let mut lat = Vec::new();
    for t in 2..=301 {
        // Each row closes the 1-s interval that ended a reorder window before it.
        let before = count_lines(&out);
        let start = Instant::now();
        f.write_all(row(t).as_bytes()).unwrap();
        f.flush().unwrap();
        while count_lines(&out) <= before && start.elapsed() < Duration::from_secs(5) {
            std::thread::sleep(Duration::from_micros(200));
        }
        lat.push(start.elapsed().as_secs_f64() * 1000.0);
        std::thread::sleep(Duration::from_millis(20));
    }
    lat.sort_by(f64::total_cmp);
    let p = |q: f64| lat[((lat.len() - 1) as f64 * q) as usize];
    println!(
        "latency append -> soft-tag row (native watcher, 300 rows): p50 {:.1} ms, p99 {:.1} ms, max {:.1} ms",
        p(0.5),
        p(0.99),
        p(1.0)
    );
    // Idle: no data for 20 s.
    std::thread::sleep(Duration::from_secs(2));
    let c0 = cpu_ticks(child.id());
    std::thread::sleep(Duration::from_secs(20));
    let c1 = cpu_ticks(child.id());
    println!(
        "idle CPU over 20 s without data: {} clock ticks ({:.2} % of one core)",
        c1 - c0,
        (c1 - c0) as f64 / 20.0
    );
    let _ = Command::new("kill").arg("-TERM").arg(child.id().to_string()).status();
    let _ = child.wait();
}

fn load(units: usize, speed: f64) {
    let dir = tempfile::tempdir().unwrap();
    let mut blocks = String::new();
    for u in 0..units {
        std::fs::create_dir_all(dir.path().join(format!("exports/u{u:03}"))).unwrap();
        blocks.push_str(&unit_block(&format!("U-{u:03}"), &format!("exports/u{u:03}"), "1m"));
    }
    let cfg = site(dir.path(), &blocks, "auto");
    let mut files: Vec<std::fs::File> = (0..units)
        .map(|u| {
            let p = dir.path().join(format!("exports/u{u:03}/plant_20261201.csv"));
            let mut f = std::fs::OpenOptions::new().create(true).append(true).open(p).unwrap();
            writeln!(f, "{HEADER}").unwrap();
            f
        })
        .collect();
    let mut child = spawn(&cfg);
    let pid = child.id();
    let started = Instant::now();
    let mut peak_rss = 0;
    let mut max_lag = 0.0f64;
    let sim_seconds = 3600;
    let mut last_report = Instant::now();
    for t in 0..=sim_seconds {
        let r = row(t);
        for f in &mut files {
            f.write_all(r.as_bytes()).unwrap();
        }
        let target = Duration::from_secs_f64(t as f64 / speed);
        if let Some(wait) = target.checked_sub(started.elapsed()) {
            std::thread::sleep(wait);
        }
        if last_report.elapsed() > Duration::from_secs(2) || t == sim_seconds {
            peak_rss = peak_rss.max(proc_field(pid, "status", "VmRSS:").unwrap_or(0));
            // Backlog: simulated minutes written minus minutes processed by the slowest unit.
            let done = processed(dir.path(), units);
            let lag = t as f64 / 60.0 - done as f64;
            max_lag = max_lag.max(lag);
            println!(
                "  sim {:>4} s  wall {:>5.1} s  processed {done:>3} min  backlog {lag:>5.1} min  RSS {:.1} MiB",
                t,
                started.elapsed().as_secs_f64(),
                proc_field(pid, "status", "VmRSS:").unwrap_or(0) as f64 / 1024.0
            );
            last_report = Instant::now();
        }
    }
    // Drain.
    let drain = Instant::now();
    loop {
        let done = processed(dir.path(), units);
        if done >= 59 || drain.elapsed() > Duration::from_secs(60) {
            println!(
                "load: {units} units, 1-s data, simulated hour at {speed}x: drained to minute {done} {:.1} s after the writer stopped; max backlog {max_lag:.1} simulated min; peak RSS {:.1} MiB; CPU {:.1} s",
                drain.elapsed().as_secs_f64(),
                peak_rss as f64 / 1024.0,
                cpu_ticks(pid) as f64 / 100.0
            );
            break;
        }
        std::thread::sleep(Duration::from_millis(200));
    }
    let _ = Command::new("kill").arg("-TERM").arg(pid.to_string()).status();
    let _ = child.wait();
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).filter(|a| !a.starts_with("--")).collect();
    let what = args.first().map_or("all", String::as_str);
    if matches!(what, "all" | "latency" | "idle") {
        latency_and_idle();
    }
    if matches!(what, "all" | "load") {
        let units = args.get(1).and_then(|v| v.parse().ok()).unwrap_or(200);
        let speed = args.get(2).and_then(|v| v.parse().ok()).unwrap_or(60.0);
        load(units, speed);
    }
}
