//! Shared helpers for the integration tests: fixture paths, reference data, case files.

use std::path::{Path, PathBuf};

use serde_json::Value;

/// The repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A file under `tests/fixtures/`.
pub fn fixture(rel: &str) -> PathBuf {
    root().join("tests/fixtures").join(rel)
}

/// A JSON fixture.
pub fn json(rel: &str) -> Value {
    let text = std::fs::read_to_string(fixture(rel)).expect("fixture readable");
    serde_json::from_str(&text).expect("fixture is JSON")
}

/// Read the reference check table (`checks.csv`) as rows of strings keyed by column.
pub fn checks() -> Vec<std::collections::HashMap<String, String>> {
    let mut rdr = csv_rows(&fixture("reference/checks.csv"));
    rdr.retain(|r| !r.is_empty());
    rdr
}

/// Minimal CSV reader (quoted fields, commas) for the reference tables.
pub fn csv_rows(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let text = std::fs::read_to_string(path).expect("csv readable");
    let mut lines = text.lines();
    let header = split_csv(lines.next().unwrap_or_default());
    lines
        .filter(|l| !l.trim().is_empty())
        .map(|l| header.iter().cloned().zip(split_csv(l)).collect())
        .collect()
}

fn split_csv(line: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '"' if quoted && chars.peek() == Some(&'"') => {
                cur.push('"');
                chars.next();
            }
            '"' => quoted = !quoted,
            ',' if !quoted => out.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    out.push(cur);
    out
}

/// A TOML case that reproduces a reference balance case: one feed with the case's molar
/// flows, and (when the effluent differs from the feed) one reaction derived from the change.
pub fn reference_case_toml(case: &Value, path: &str, pressure: Option<f64>) -> String {
    let feed = case["feed_mol_s"].as_object().expect("feed");
    let eff = case["effluent_mol_s"].as_object().expect("effluent");
    let total: f64 = feed.values().map(|v| v.as_f64().unwrap_or(0.0)).sum();
    let mut s = String::new();
    s.push_str("[model]\n");
    s.push_str(&format!("enthalpy = \"{path}\"\n"));
    if let Some(n) = case.get("watson_exponent").and_then(Value::as_f64) {
        s.push_str(&format!("watson_n = {n:?}\n"));
    }
    if let Some(p) = pressure {
        s.push_str(&format!("pressure = {p:?}\n"));
    }
    s.push_str("\n[[feed]]\n");
    s.push_str(&format!("flow = {total:?}\n"));
    s.push_str(&format!("temperature = {:?}\n", case["T_in_K"].as_f64().unwrap_or_default()));
    let comp: Vec<String> =
        feed.iter().map(|(k, v)| format!("\"{k}\" = {:?}", v.as_f64().unwrap_or(0.0) / total)).collect();
    s.push_str(&format!("composition = {{ {} }}\n", comp.join(", ")));
    // Reaction from the change in flows.
    let mut diff: Vec<(String, f64)> = Vec::new();
    for (k, v) in eff {
        let f = feed.get(k).and_then(Value::as_f64).unwrap_or(0.0);
        let d = v.as_f64().unwrap_or(0.0) - f;
        if d.abs() > 1e-12 {
            diff.push((k.clone(), d));
        }
    }
    for (k, v) in feed {
        if !eff.contains_key(k) {
            diff.push((k.clone(), -v.as_f64().unwrap_or(0.0)));
        }
    }
    if let Some((key, dk)) = diff.iter().find(|(_, d)| *d < 0.0).cloned() {
        let extent = -dk;
        let key_feed = feed.get(&key).and_then(Value::as_f64).unwrap_or(0.0);
        let stoich: Vec<String> = diff.iter().map(|(k, d)| format!("\"{k}\" = {:?}", d / extent)).collect();
        s.push_str("\n[[reaction]]\n");
        s.push_str(&format!("stoichiometry = {{ {} }}\n", stoich.join(", ")));
        s.push_str(&format!("key = \"{key}\"\n"));
        s.push_str(&format!("conversion = {:?}\n", extent / key_feed));
    }
    s.push_str("\n[heater]\n");
    s.push_str(&format!("duty = {:?}\n", case["Q_W"].as_f64().unwrap_or_default()));
    s
}

/// Write `text` to a fresh temp dir and return (dir guard, path).
pub fn temp_file(name: &str, text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = dir.path().join(name);
    std::fs::write(&path, text).expect("write temp file");
    (dir, path)
}

/// A small test plant: one water feed with a flow (mol/s), a feed temperature and a duty
/// (kW), and the measured effluent temperature; data every 10 s. The "true" outlet is
/// T_in + Q/(F·75.4 J/(mol K)), close to the liquid-path balance (for plumbing tests only).
pub struct TestPlant {
    /// Export directory.
    pub exports: PathBuf,
    /// Config file.
    pub config: PathBuf,
    /// Output directory.
    pub output: PathBuf,
    /// State directory.
    pub state: PathBuf,
    _dir: tempfile::TempDir,
}

/// Header of the test plant's wide files.
pub const PLANT_HEADER: &str = "Timestamp,FI-101,TI-102,JI-103,TI-109";

impl TestPlant {
    /// A test plant with extra `[service]` / unit lines appended to the config.
    pub fn new(extra_unit: &str) -> TestPlant {
        let dir = tempfile::tempdir().expect("tempdir");
        let root = dir.path().to_path_buf();
        let exports = root.join("exports");
        std::fs::create_dir_all(&exports).expect("exports dir");
        let config = root.join("site.toml");
        let text = format!(
            r#"[site]
name = "test works"
time_zone = "UTC"
state_dir = "state"
output_dir = "output"

[service]
watch = "off"
reconcile_interval = "200ms"
checkpoint_interval = "100ms"
seal_after = "1h"

[[unit]]
name = "T-1"
[unit.input]
directory = "exports"
pattern = "plant_*.csv"
timestamp_column = "Timestamp"
[unit.timing]
interval = "1m"
max_wait = "3m"
[[unit.feed]]
flow = {{ tag = "FI-101", unit = "mol/s", uncertainty = "1 %" }}
temperature = {{ tag = "TI-102", unit = "degC", uncertainty = "0.5 K" }}
composition = {{ water = 1.0 }}
[unit.heater]
duty = {{ tag = "JI-103", unit = "kW", uncertainty = "2 %" }}
[unit.effluent]
temperature = {{ tag = "TI-109", unit = "degC", uncertainty = "0.3 K" }}
{extra_unit}
"#
        );
        std::fs::write(&config, text).expect("config");
        TestPlant { exports, output: root.join("output"), state: root.join("state"), config, _dir: dir }
    }

    /// One data row at `t` seconds after 2026-12-01T00:00:00Z.
    pub fn row(t: i64) -> String {
        let base = 1_796_083_200_i64; // 2026-12-01T00:00:00Z
        let ts = jiff::Timestamp::from_second(base + t).expect("timestamp");
        let f = 10.0 + 0.5 * ((t / 600) % 3) as f64;
        let tin = 30.0 + 0.1 * ((t / 10) % 7) as f64;
        let q = 30.0;
        let tout = tin + q * 1000.0 / (f * 75.4);
        format!("{},{f:.3},{tin:.3},{q:.3},{tout:.3}", ts.strftime("%Y-%m-%dT%H:%M:%SZ"))
    }

    /// Rows from `t0` (inclusive) to `t1` (exclusive) every 10 s, each ending in a newline.
    pub fn rows(t0: i64, t1: i64) -> String {
        (t0..t1).step_by(10).map(|t| Self::row(t) + "\n").collect()
    }

    /// Append text to an export file (created with the header if new).
    pub fn append(&self, name: &str, text: &str) {
        use std::io::Write;
        let path = self.exports.join(name);
        let fresh = !path.exists();
        let mut f = std::fs::OpenOptions::new().create(true).append(true).open(&path).expect("open export");
        if fresh {
            writeln!(f, "{PLANT_HEADER}").expect("header");
        }
        f.write_all(text.as_bytes()).expect("append");
        f.sync_all().expect("sync");
    }

    /// All soft-tag files of the unit, concatenated in name order.
    pub fn soft_tags(dir: &Path) -> String {
        let mut names: Vec<PathBuf> = std::fs::read_dir(dir.join("T-1"))
            .map(|rd| {
                rd.flatten().map(|e| e.path()).filter(|p| p.to_string_lossy().contains("softtags-")).collect()
            })
            .unwrap_or_default();
        names.sort();
        names.iter().map(|p| std::fs::read_to_string(p).expect("read soft tags")).collect()
    }
}

/// Assert two texts are equal; on failure show the line counts and the first differing lines
/// instead of both texts whole.
pub fn assert_same_lines(got: &str, want: &str, what: &str) {
    if got == want {
        return;
    }
    let (g, w): (Vec<&str>, Vec<&str>) = (got.lines().collect(), want.lines().collect());
    let i = g.iter().zip(&w).position(|(a, b)| a != b).unwrap_or(g.len().min(w.len()));
    let show =
        |v: &[&str]| v.iter().skip(i.saturating_sub(1)).take(4).copied().collect::<Vec<_>>().join("\n    ");
    panic!(
        "{what}: {} lines vs {} expected; first difference at line {}:\n  got:\n    {}\n  expected:\n    {}",
        g.len(),
        w.len(),
        i + 1,
        show(&g),
        show(&w)
    );
}

// --- The service running in-process (live tests) ---------------------------------------------

/// The site of `config` with a 1.5 s wait for late data, so that a live test does not wait
/// minutes for the last interval of a quiet stream.
pub fn quick_site(config: &Path) -> efftemp::config::SiteConfig {
    let mut s = efftemp::config::SiteConfig::load(config).expect("site loads");
    for u in &mut s.units {
        u.spec.max_wait_ms = 1_500;
    }
    s
}

/// `efftemp run` in-process: woken by `notify` (or by its own watchers), stopped by [`Running::stop`].
pub struct Running {
    /// Wakes the service (with `Wake::External`).
    pub notify: std::sync::Arc<tokio::sync::Notify>,
    stop: tokio::sync::oneshot::Sender<()>,
    handle: tokio::task::JoinHandle<Result<(), efftemp::app::service::ServiceError>>,
}

impl Running {
    /// Start the service on `site`, woken by the test (`watchers` false) or by its own file
    /// watchers, publishing snapshots to `snapshots` if given.
    pub fn start(
        site: std::sync::Arc<efftemp::config::SiteConfig>,
        watchers: bool,
        snapshots: Option<tokio::sync::watch::Sender<efftemp::app::http::Snapshot>>,
    ) -> Running {
        use efftemp::app::service::{self, Wake};
        let notify = std::sync::Arc::new(tokio::sync::Notify::new());
        let (stop, rx) = tokio::sync::oneshot::channel::<()>();
        let wake = if watchers { Wake::Watchers } else { Wake::External(notify.clone()) };
        let handle = tokio::spawn(service::run(
            site,
            wake,
            async move {
                let _ = rx.await;
            },
            None,
            snapshots,
        ));
        Running { notify, stop, handle }
    }

    /// Whether the service has stopped by itself.
    pub fn is_finished(&self) -> bool {
        self.handle.is_finished()
    }

    /// Stop it and wait for a clean exit.
    pub async fn stop(self) {
        let _ = self.stop.send(());
        self.handle.await.expect("service task").expect("service stops cleanly");
    }
}

/// Serve health and metrics of `snapshots` on a free loopback port; its address.
pub async fn serve_http(
    snapshots: tokio::sync::watch::Receiver<efftemp::app::http::Snapshot>,
) -> std::net::SocketAddr {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind");
    let addr = listener.local_addr().expect("address");
    let limits = efftemp::app::http::HttpLimits::default();
    tokio::spawn(efftemp::app::http::serve(listener, snapshots, std::future::pending(), limits));
    addr
}

/// `GET path` on the health endpoint: status and body (blocking; call from `spawn_blocking`).
pub fn http_get(addr: std::net::SocketAddr, path: &str) -> (u16, String) {
    use std::io::{Read, Write};
    let mut s = std::net::TcpStream::connect(addr).expect("connect");
    s.set_read_timeout(Some(std::time::Duration::from_secs(5))).expect("timeout");
    write!(s, "GET {path} HTTP/1.1\r\nHost: localhost\r\nConnection: close\r\n\r\n").expect("request");
    let mut buf = String::new();
    s.read_to_string(&mut buf).expect("response");
    let status = buf.split(' ').nth(1).and_then(|c| c.parse().ok()).unwrap_or(0);
    let body = buf.split_once("\r\n\r\n").map(|x| x.1.to_string()).unwrap_or_default();
    (status, body)
}

/// Wait until `pred` holds, up to `timeout` (`Err` after saying what timed out).
pub async fn wait_for(
    what: &str,
    timeout: std::time::Duration,
    mut pred: impl FnMut() -> bool,
) -> Result<(), ()> {
    let start = std::time::Instant::now();
    while !pred() {
        if start.elapsed() > timeout {
            eprintln!("timed out waiting for {what}");
            return Err(());
        }
        tokio::time::sleep(std::time::Duration::from_millis(50)).await;
    }
    Ok(())
}

/// Data rows of soft-tag text (header lines left out).
pub fn rows_in(text: &str) -> usize {
    text.lines().filter(|l| !l.starts_with("time,")).count()
}
