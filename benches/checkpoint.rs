//! Checkpoint cost against history length and the number of units (DESIGN §5; issue #12):
//! the write time of a checkpoint after a live pass must stay flat as the block history grows
//! (target ≤ 20 ms per pass for 200 units at day 14 of history).
//!
//! For each unit count, writes 14 days of 1-minute exports ending now (one file per day, shared
//! by every unit), builds the live pipeline on a fresh state directory and reads the backlog in
//! bounded passes, timing the checkpoint after each pass against the days of history the units
//! hold by then. Then it appends one row per minute of data, as a live export would, and times
//! the checkpoint after each such pass (each unit closes one interval; every tenth closes a
//! block): these are the steady-state figures at day 14.
//!
//! Run: `cargo bench --bench checkpoint` (about two minutes); options after `--`:
//! `--units 50,200`, `--days 14`, `--live 30` (live passes), `--keep DIR` (keep the exports and
//! the state directory in `DIR/<units>-units` to look at).

#![allow(missing_docs, clippy::unwrap_used)]

use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

use efftemp::pipeline::{Mode, Pipeline, PollLimits};
use efftemp::rng::Rng;

mod common;
use common::{HEADER, unit_block};

struct Options {
    units: Vec<usize>,
    days: i64,
    live: usize,
    /// Keep the exports and the state here instead of a temporary directory.
    keep: Option<PathBuf>,
}

fn options() -> Options {
    let mut o = Options { units: vec![50, 200], days: 14, live: 30, keep: None };
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut i = 0;
    while i < args.len() {
        let next = args.get(i + 1).cloned().unwrap_or_default();
        match args[i].as_str() {
            "--units" => o.units = next.split(',').map(|v| v.parse().unwrap()).collect(),
            "--days" => o.days = next.parse().unwrap(),
            "--live" => o.live = next.parse().unwrap(),
            "--keep" => o.keep = Some(PathBuf::from(next)),
            _ => {
                i += 1;
                continue;
            }
        }
        i += 2;
    }
    o
}

/// One export row at `t` (s since the epoch): a water heater at steady state with normal noise.
fn row(t: i64, n: &mut Rng) -> String {
    let ts = jiff::Timestamp::from_second(t).unwrap().strftime("%Y-%m-%dT%H:%M:%SZ");
    // 10 mol/s of water heated by 30 kW from 30 °C: about 69.8 °C out.
    format!(
        "{ts},{:.3},{:.3},{:.3},{:.3}\n",
        10.0 + 0.02 * n.normal(),
        30.0 + 0.05 * n.normal(),
        30.0 + 0.06 * n.normal(),
        69.8 + 0.05 * n.normal()
    )
}

fn day_file(exports: &Path, t: i64) -> PathBuf {
    let d = jiff::Timestamp::from_second(t).unwrap().strftime("%Y%m%d");
    exports.join(format!("plant_{d}.csv"))
}

/// `days` of 1-minute rows ending at `end` (s), one file per UTC day. Returns the next minute.
fn generate(exports: &Path, end: i64, days: i64, n: &mut Rng) -> i64 {
    std::fs::create_dir_all(exports).unwrap();
    let mut t = end - days * 86_400;
    let mut out: Option<(PathBuf, std::io::BufWriter<std::fs::File>)> = None;
    while t < end {
        let path = day_file(exports, t);
        if out.as_ref().is_none_or(|(p, _)| *p != path) {
            let mut w = std::io::BufWriter::new(std::fs::File::create(&path).unwrap());
            writeln!(w, "{HEADER}").unwrap();
            out = Some((path, w));
        }
        out.as_mut().unwrap().1.write_all(row(t, n).as_bytes()).unwrap();
        t += 60;
    }
    t
}

fn dir_bytes(dir: &Path) -> u64 {
    std::fs::read_dir(dir)
        .into_iter()
        .flatten()
        .flatten()
        .filter_map(|e| e.metadata().ok())
        .map(|m| m.len())
        .sum()
}

fn ms(d: std::time::Duration) -> f64 {
    d.as_secs_f64() * 1000.0
}

fn percentile(v: &mut [f64], p: f64) -> f64 {
    v.sort_by(f64::total_cmp);
    v[((v.len() - 1) as f64 * p).round() as usize]
}

fn wall_ms() -> i64 {
    jiff::Timestamp::now().as_millisecond()
}

fn run(units: usize, days: i64, live: usize, keep: Option<&Path>) {
    let tmp = tempfile::tempdir().unwrap();
    let dir = keep.map_or_else(|| tmp.path().to_path_buf(), |k| k.join(format!("{units}-units")));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let exports = dir.join("exports");
    let mut noise = Rng::new(0x9e37_79b9_7f4a_7c15);
    let end = wall_ms() / 60_000 * 60 - 60;
    let mut next = generate(&exports, end, days, &mut noise);
    let blocks: String = (0..units).map(|u| unit_block(&format!("U-{u:03}"), "exports", "1m")).collect();
    let cfg = dir.join("site.toml");
    std::fs::write(
        &cfg,
        format!(
            "[site]\nname = \"bench\"\ntime_zone = \"UTC\"\nstate_dir = \"state\"\noutput_dir = \"output\"\nshift_reports = false\n[service]\nhttp_address = \"off\"\n{blocks}"
        ),
    )
    .unwrap();
    let site = efftemp::config::SiteConfig::load(&cfg).unwrap();
    let mut p = Pipeline::new(&site, &Mode::Live).unwrap();
    let start = Instant::now();
    let mono = || u64::try_from(start.elapsed().as_millis()).unwrap();
    let first = end - days * 86_400;
    // Catch-up: bounded passes (the service's largest slice), a checkpoint after each.
    let mut catch_up: Vec<(f64, f64)> = Vec::new();
    loop {
        let limits = PollLimits { now_ms: mono(), wall_ms: Some(wall_ms()), budget_bytes: 16 << 20 };
        let s = p.pass_within(&limits, false).unwrap();
        let t0 = Instant::now();
        p.checkpoint_at(mono()).unwrap();
        let t_ck = ms(t0.elapsed());
        // Days of history the units hold on average (the shared budget moves them in turn).
        let ends: Vec<f64> = p
            .units
            .iter()
            .map(|u| {
                u.monitor()
                    .history
                    .back()
                    .map_or(0.0, |b| (b.end_ms as f64 / 1000.0 - first as f64) / 86_400.0)
            })
            .collect();
        let held = ends.iter().sum::<f64>() / ends.len().max(1) as f64;
        catch_up.push((held, t_ck));
        if !s.more {
            break;
        }
    }
    let catch_up_s = start.elapsed().as_secs_f64();
    // Live: one new minute per pass, every unit closes one interval.
    let mut live_ms = Vec::new();
    for _ in 0..live {
        let path = day_file(&exports, next);
        let fresh = !path.exists();
        let mut f = std::fs::OpenOptions::new().create(true).append(true).open(&path).unwrap();
        if fresh {
            writeln!(f, "{HEADER}").unwrap();
        }
        f.write_all(row(next, &mut noise).as_bytes()).unwrap();
        drop(f);
        next += 60;
        let limits = PollLimits { now_ms: mono(), wall_ms: Some(wall_ms()), budget_bytes: u64::MAX };
        p.pass_within(&limits, false).unwrap();
        let t0 = Instant::now();
        p.checkpoint_at(mono()).unwrap();
        live_ms.push(ms(t0.elapsed()));
    }
    let history: usize = p.units.iter().map(|u| u.monitor().history.len()).sum::<usize>() / units.max(1);
    let state = dir.join("state");
    let ck = std::fs::metadata(state.join("state.json")).map(|m| m.len()).unwrap_or(0);
    let journal = dir_bytes(&state.join("history"));
    println!(
        "\n{units} units, {days} days of 1-minute data: caught up in {catch_up_s:.1} s; {history} blocks of history per unit; checkpoint file {:.1} KiB ({:.2} KiB per unit); journals {:.1} MiB",
        ck as f64 / 1024.0,
        ck as f64 / 1024.0 / units as f64,
        journal as f64 / (1 << 20) as f64
    );
    println!("| history held (mean over units), days | checkpoint after the pass, ms |\n|---|---|");
    let step = (catch_up.len() / 8).max(1);
    for (i, (d, t)) in catch_up.iter().enumerate() {
        if i % step == 0 || i + 1 == catch_up.len() {
            println!("| {d:.1} | {t:.1} |");
        }
    }
    if !live_ms.is_empty() {
        let (p50, p95, max) =
            (percentile(&mut live_ms, 0.5), percentile(&mut live_ms, 0.95), percentile(&mut live_ms, 1.0));
        println!(
            "live passes at day {days} (one interval per unit): checkpoint p50 {p50:.1} ms, p95 {p95:.1} ms, max {max:.1} ms ({:.3} ms per unit at p50); target ≤ 20 ms for 200 units",
            p50 / units as f64
        );
    }
}

fn main() {
    let o = options();
    for &u in &o.units {
        run(u, o.days, o.live, o.keep.as_deref());
    }
}
