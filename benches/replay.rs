//! Replay throughput and memory (DESIGN §5: `replay` ≥ 300 000 wide rows per second per core
//! end to end; peak RSS ≤ 64 MiB on a year of 1-minute data, flat in file size).
//!
//! Generates a year of 1-minute wide exports with 20 tag columns (525 600 rows, one file per
//! day) under `target/bench-data/`, replays them in-process, and prints rows/s and the peak
//! resident set size; also the bare `csv`-crate parse rate of the same files for comparison.
//!
//! Run: `cargo bench --bench replay` (add `-- --days N` for a shorter run, `-- --interval 10m`
//! for ten rows per interval instead of one).

#![allow(missing_docs, clippy::unwrap_used)]

use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::time::Instant;

const TAGS: [&str; 20] = [
    "FI-101", "TI-102", "JI-103", "TI-109", "PI-110", "TI-001", "XX-201", "XX-202", "XX-203", "XX-204",
    "XX-205", "XX-206", "XX-207", "XX-208", "XX-209", "XX-210", "XX-211", "XX-212", "XX-213", "XX-214",
];

fn vm(field: &str) -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with(field))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// CPU time (user + system) of this process so far, seconds.
fn cpu_seconds() -> f64 {
    let s = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    let after = s.rsplit_once(')').map_or("", |x| x.1);
    let f: Vec<&str> = after.split_whitespace().collect();
    let ticks = |i: usize| f.get(i).and_then(|v| v.parse::<f64>().ok()).unwrap_or(0.0);
    (ticks(11) + ticks(12)) / 100.0
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

fn config(root: &Path, exports: &Path, interval: &str) -> PathBuf {
    let cfg = root.join("site.toml");
    let text = format!(
        r#"[site]
name = "bench"
time_zone = "UTC"
state_dir = "state"
output_dir = "output"
shift_reports = false
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

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let days = args
        .iter()
        .position(|a| a == "--days")
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(365);
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/bench-data");
    let exports = root.join(format!("year-{days}"));
    let t = Instant::now();
    let rows = generate(&exports, days);
    let bytes: u64 =
        std::fs::read_dir(&exports).unwrap().flatten().map(|e| e.metadata().unwrap().len()).sum();
    println!(
        "data: {rows} rows, {:.1} MB in {days} daily files ({:.1} s to generate or find)",
        bytes as f64 / 1e6,
        t.elapsed().as_secs_f64()
    );

    // Bare csv-crate parse of the same files (records and float fields), for comparison.
    let t = Instant::now();
    let c = cpu_seconds();
    let mut n = 0u64;
    let mut sum = 0.0;
    let mut files: Vec<PathBuf> = std::fs::read_dir(&exports).unwrap().flatten().map(|e| e.path()).collect();
    files.sort();
    for f in &files {
        let mut rdr = csv::Reader::from_path(f).unwrap();
        let mut rec = csv::ByteRecord::new();
        while rdr.read_byte_record(&mut rec).unwrap() {
            for field in rec.iter().skip(1) {
                sum += std::str::from_utf8(field).unwrap().parse::<f64>().unwrap_or(0.0);
            }
            n += 1;
        }
    }
    let dt = t.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - c;
    println!(
        "csv crate alone: {n} rows in {dt:.2} s = {:.0} rows/s; {cpu:.2} CPU-s = {:.0} rows per CPU-second (checksum {sum:.0})",
        n as f64 / dt,
        n as f64 / cpu.max(0.01)
    );

    let work = tempfile::tempdir().unwrap();
    let interval = args
        .iter()
        .position(|a| a == "--interval")
        .and_then(|i| args.get(i + 1))
        .map_or("1m", String::as_str);
    println!(
        "interval {interval} (each 1-minute row {})",
        if interval == "1m" { "closes an interval: model-bound" } else { "is aggregated: ingest-bound" }
    );
    let cfg = config(work.path(), &exports, interval);
    let site = efftemp::config::SiteConfig::load(&cfg).unwrap();
    let before = vm("VmHWM:").unwrap_or(0);
    let t = Instant::now();
    let c = cpu_seconds();
    let sum = efftemp::app::replay::replay(&site, Some(work.path().join("output"))).unwrap();
    let dt = t.elapsed().as_secs_f64();
    let cpu = cpu_seconds() - c;
    let peak = vm("VmHWM:").unwrap_or(0);
    println!(
        "efftemp replay: {} rows, {} intervals in {dt:.2} s = {:.0} rows/s; {cpu:.2} CPU-s = {:.0} rows per CPU-second; peak RSS {:.1} MiB (before the replay {:.1} MiB)",
        sum.records,
        sum.intervals,
        sum.records as f64 / dt,
        sum.records as f64 / cpu.max(0.01),
        peak as f64 / 1024.0,
        before as f64 / 1024.0
    );
}
