//! Replay throughput against the bare `csv`-crate parse of the same files, measured in the same
//! run (DESIGN §5; issue #12): `replay` with default settings at one row per interval at ≥ 0.5
//! of the bare parse rate, at ten rows per interval ≥ 0.8; peak RSS flat in file size.
//!
//! Generates 1-minute wide exports with 20 tag columns (6 of them mapped; one file per day)
//! under `target/bench-data/`, then for 1 and 10 rows per interval, shift reports off and on,
//! alternates a bare parse of the files (the `csv` crate, every field after the timestamp as
//! f64) with an in-process `replay` of them, and prints a table of the rates and their ratio.
//! CPU time is this process's (every thread's scheduler run time, in ns).
//!
//! Run: `cargo bench --bench replay` (90 days, 3 repetitions, about a minute); options after
//! `--`: `--days 365` for the full year, `--interval 1m|10m`, `--reports on|off`, `--reps R`.

#![allow(missing_docs, clippy::unwrap_used)]

use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::time::Instant;

/// Days of data by default: small enough for a run of a few minutes.
const DEFAULT_DAYS: i64 = 90;

const TAGS: [&str; 20] = [
    "FI-101", "TI-102", "JI-103", "TI-109", "PI-110", "TI-001", "XX-201", "XX-202", "XX-203", "XX-204",
    "XX-205", "XX-206", "XX-207", "XX-208", "XX-209", "XX-210", "XX-211", "XX-212", "XX-213", "XX-214",
];

/// Tag columns the unit maps (the first six of `TAGS`).
const MAPPED: usize = 6;

fn vm(field: &str) -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with(field))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// CPU time of this process's threads so far, seconds: the sum of their scheduler run times
/// (`/proc/self/task/*/schedstat`, ns), or user + system ticks where that is unavailable.
fn cpu_seconds() -> f64 {
    let ns: Option<u64> = std::fs::read_dir("/proc/self/task").ok().map(|tasks| {
        tasks
            .flatten()
            .filter_map(|t| std::fs::read_to_string(t.path().join("schedstat")).ok())
            .filter_map(|s| s.split_whitespace().next().and_then(|v| v.parse::<u64>().ok()))
            .sum()
    });
    match ns {
        Some(ns) if ns > 0 => ns as f64 / 1e9,
        _ => {
            let s = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
            let after = s.rsplit_once(')').map_or("", |x| x.1);
            let f: Vec<&str> = after.split_whitespace().collect();
            let ticks = |i: usize| f.get(i).and_then(|v| v.parse::<f64>().ok()).unwrap_or(0.0);
            (ticks(11) + ticks(12)) / 100.0
        }
    }
}

fn generate(dir: &Path, days: i64) -> u64 {
    std::fs::create_dir_all(dir).unwrap();
    let base = 1_767_225_600_i64; // 2026-01-01T00:00:00Z
    let mut rows = 0;
    for d in 0..days {
        let t0 = base + d * 86_400;
        let name = jiff::Timestamp::from_second(t0).unwrap().strftime("plant_%Y%m%d.csv").to_string();
        let path = dir.join(name);
        if path.exists() {
            rows += 1440;
            continue;
        }
        let mut w = BufWriter::new(std::fs::File::create(&path).unwrap());
        writeln!(w, "Timestamp,{}", TAGS.join(",")).unwrap();
        for m in 0..1440 {
            let t = t0 + m * 60;
            let ts = jiff::Timestamp::from_second(t).unwrap().strftime("%Y-%m-%dT%H:%M:%SZ");
            let k = (t / 60) as f64;
            let f = 10.0 + 0.5 * (k / 300.0).sin();
            let tin = 30.0 + 0.2 * (k / 77.0).sin();
            let q = 30.0 + 1.0 * (k / 500.0).cos();
            let tout = tin + q * 1000.0 / (f * 75.4);
            write!(w, "{ts},{f:.4},{tin:.3},{q:.3},{tout:.3},2.5,12.0").unwrap();
            for j in 0..14 {
                write!(w, ",{:.3}", 100.0 + j as f64 + (k / (50.0 + j as f64)).sin()).unwrap();
            }
            writeln!(w).unwrap();
            rows += 1;
        }
        w.flush().unwrap();
    }
    rows
}

fn config(root: &Path, exports: &Path, interval: &str, reports: bool) -> PathBuf {
    let cfg = root.join("site.toml");
    let text = format!(
        r#"[site]
name = "bench"
time_zone = "UTC"
state_dir = "state"
output_dir = "output"
shift_reports = {reports}
[service]
watch = "off"
[[unit]]
name = "B-1"
[unit.input]
directory = "{}"
pattern = "plant_*.csv"
timestamp_column = "Timestamp"
unknown_tags = "ignore"
[unit.timing]
interval = "{interval}"
max_wait = "3m"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {{ water = 0.97, methanol = 0.03 }}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
[unit.model]
pressure = {{ tag = "PI-110", unit = "bar" }}
[unit.ambient]
temperature = {{ tag = "TI-001", unit = "degC" }}
"#,
        exports.display(),
    );
    std::fs::write(&cfg, text).unwrap();
    cfg
}

/// Options of the run (`-- --days N --interval 1m|10m --reports on|off --reps R`).
struct Options {
    days: i64,
    intervals: Vec<&'static str>,
    reports: Vec<bool>,
    reps: usize,
}

fn options() -> Options {
    let args: Vec<String> = std::env::args().collect();
    let value = |name: &str| args.iter().position(|a| a == name).and_then(|i| args.get(i + 1)).cloned();
    let days = value("--days").and_then(|v| v.parse().ok()).unwrap_or(DEFAULT_DAYS);
    let intervals = match value("--interval").as_deref() {
        Some("1m") => vec!["1m"],
        Some("10m") => vec!["10m"],
        _ => vec!["1m", "10m"],
    };
    let reports = match value("--reports").as_deref() {
        Some("on") => vec![true],
        Some("off") => vec![false],
        _ => vec![false, true],
    };
    let reps = value("--reps").and_then(|v| v.parse().ok()).unwrap_or(3).max(1);
    Options { days, intervals, reports, reps }
}

/// One measured workload: rows and CPU seconds.
#[derive(Clone, Copy)]
struct Measured {
    rows: u64,
    cpu: f64,
    wall: f64,
}

impl Measured {
    fn rate(self) -> f64 {
        self.rows as f64 / self.cpu.max(1e-6)
    }
}

fn measure<F: FnOnce() -> u64>(f: F) -> Measured {
    let (t, c) = (Instant::now(), cpu_seconds());
    let rows = f();
    Measured { rows, cpu: cpu_seconds() - c, wall: t.elapsed().as_secs_f64() }
}

/// Bare `csv`-crate parse of the files: every record, every field after the timestamp as f64.
fn bare_parse(files: &[PathBuf]) -> u64 {
    let mut n = 0u64;
    let mut sum = 0.0;
    for f in files {
        let mut rdr = csv::Reader::from_path(f).unwrap();
        let mut rec = csv::ByteRecord::new();
        while rdr.read_byte_record(&mut rec).unwrap() {
            for field in rec.iter().skip(1) {
                sum += std::str::from_utf8(field).unwrap().parse::<f64>().unwrap_or(0.0);
            }
            n += 1;
        }
    }
    std::hint::black_box(sum);
    n
}

/// One `replay` of the exports in this process; the peak RSS is reset before it.
fn replay_once(exports: &Path, interval: &str, reports: bool) -> (Measured, u64, f64) {
    let work = tempfile::tempdir().unwrap();
    let cfg = config(work.path(), exports, interval, reports);
    let site = efftemp::config::SiteConfig::load(&cfg).unwrap();
    // Writing 5 to clear_refs resets VmHWM (Linux), so that each replay has its own peak.
    let _ = std::fs::write("/proc/self/clear_refs", "5");
    let mut intervals = 0;
    let m = measure(|| {
        let sum = efftemp::app::replay::replay(&site, Some(work.path().join("output"))).unwrap();
        intervals = sum.intervals;
        sum.records
    });
    let peak = vm("VmHWM:").unwrap_or(0) as f64 / 1024.0;
    (m, intervals, peak)
}

fn main() {
    let opts = options();
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/bench-data");
    let exports = root.join(format!("year-{}", opts.days));
    let t = Instant::now();
    let rows = generate(&exports, opts.days);
    let mut files: Vec<PathBuf> = std::fs::read_dir(&exports).unwrap().flatten().map(|e| e.path()).collect();
    files.sort();
    let bytes: u64 = files.iter().map(|f| f.metadata().unwrap().len()).sum();
    println!(
        "data: {rows} rows of 1-minute data, {} columns ({} mapped), {:.1} MB in {} daily files ({:.1} s to generate or find)",
        TAGS.len() + 1,
        MAPPED + 1,
        bytes as f64 / 1e6,
        opts.days,
        t.elapsed().as_secs_f64()
    );
    println!(
        "each row: the bare parse and the replay alternate, {} time(s) each; rates are rows per CPU-second of this process",
        opts.reps
    );
    println!();
    println!(
        "| rows/interval | shift reports | bare csv parse, rows/CPU-s | replay, rows/CPU-s | replay CPU-s | peak RSS MiB | ratio (replay/bare) | target |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    for interval in &opts.intervals {
        for &reports in &opts.reports {
            let (mut bare, mut rep, mut peak) = (Vec::new(), Vec::new(), 0.0f64);
            for _ in 0..opts.reps {
                bare.push(measure(|| bare_parse(&files)));
                let (m, _, p) = replay_once(&exports, interval, reports);
                rep.push(m);
                peak = peak.max(p);
            }
            // The best of the repetitions of each (least disturbed by the other processes).
            let best = |v: &[Measured]| *v.iter().max_by(|a, b| a.rate().total_cmp(&b.rate())).unwrap();
            let (b, r) = (best(&bare), best(&rep));
            let per = if *interval == "1m" { 1 } else { 10 };
            let target = if per == 1 { 0.5 } else { 0.8 };
            println!(
                "| {per} | {} | {:.0} | {:.0} | {:.2} | {peak:.1} | {:.3} | ≥ {target} |",
                if reports { "on" } else { "off" },
                b.rate(),
                r.rate(),
                r.cpu,
                r.rate() / b.rate(),
            );
            let _ = (b.wall, r.wall);
        }
    }
}
