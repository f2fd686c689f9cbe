//! The syslog forwarder against a real collector: Debian's `rsyslogd`, run in the foreground
//! with its own configuration, work directory and pid file, listening on loopback only and
//! writing each raw message to a file (no other inputs, so the system log is not touched).
//!
//! Needs `rsyslogd` (`apt-get install rsyslog`), so every test here is `#[ignore]`d with that
//! reason: a plain `cargo test` on a machine with only the Rust toolchain lists them as ignored,
//! and `.ci/run` installs rsyslog and runs them with `--ignored` (a missing rsyslogd fails them
//! there; nothing is skipped silently).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use efftemp::config::SiteConfig;
use efftemp::core::alerts::{AlertEvent, EventKind};
use efftemp::core::vocabulary::{Cause, Severity};
use efftemp::sinks::syslog::{
    Forwarder, SD_ID_ALERT, SD_ID_EVIDENCE, SyslogConfig, Transport, UDP_MAX_BYTES, syslog_severity,
};
use serde_json::json;

#[path = "rfc5424.rs"]
mod rfc5424;

use rfc5424::{Parsed, parse};

/// Where rsyslogd is; a test that asked for it fails when it is not installed.
fn rsyslogd() -> PathBuf {
    let mut dirs: Vec<PathBuf> =
        ["/usr/sbin", "/sbin", "/usr/local/sbin"].iter().map(PathBuf::from).collect();
    dirs.extend(std::env::split_paths(&std::env::var_os("PATH").unwrap_or_default()));
    dirs.iter().map(|d| d.join("rsyslogd")).find(|p| p.is_file()).unwrap_or_else(|| {
        panic!(
            "rsyslogd not found: the syslog forwarding tests run against a real collector. \
             Install it with `apt-get install rsyslog` (Debian/Ubuntu); `.ci/run` does."
        )
    })
}

fn free_tcp_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

fn free_udp_port() -> u16 {
    std::net::UdpSocket::bind("127.0.0.1:0").unwrap().local_addr().unwrap().port()
}

/// One rsyslogd instance with a private configuration; restartable on the same ports.
struct Collector {
    bin: PathBuf,
    dir: PathBuf,
    tcp_port: u16,
    udp_port: u16,
    /// The RELP input's port, when the collector has one (needs `rsyslog-relp`).
    relp_port: Option<u16>,
    child: Option<Child>,
}

impl Collector {
    fn new(bin: PathBuf, dir: &Path) -> Collector {
        Collector::with_inputs(bin, dir, false)
    }

    /// A collector with a RELP input (`imrelp`) besides TCP and UDP.
    fn with_relp(bin: PathBuf, dir: &Path) -> Collector {
        Collector::with_inputs(bin, dir, true)
    }

    fn with_inputs(bin: PathBuf, dir: &Path, relp: bool) -> Collector {
        let dir = dir.join("collector");
        std::fs::create_dir_all(dir.join("work")).unwrap();
        let (tcp_port, udp_port) = (free_tcp_port(), free_udp_port());
        let relp_port = relp.then(free_tcp_port);
        let d = dir.display();
        let mut conf = format!(
            r#"global(workDirectory="{d}/work" maxMessageSize="64k")
module(load="imtcp")
module(load="imudp")
template(name="raw" type="string" string="%rawmsg%\n")
ruleset(name="efftemp-test") {{
  action(type="omfile" file="{d}/received.log" template="raw")
}}
input(type="imtcp" port="{tcp_port}" address="127.0.0.1" ruleset="efftemp-test")
input(type="imudp" port="{udp_port}" address="127.0.0.1" ruleset="efftemp-test")
"#
        );
        if let Some(p) = relp_port {
            conf.push_str(&format!(
                "module(load=\"imrelp\")\ninput(type=\"imrelp\" port=\"{p}\" address=\"127.0.0.1\" ruleset=\"efftemp-test\")\n"
            ));
        }
        std::fs::write(dir.join("rsyslog.conf"), conf).unwrap();
        Collector { bin, dir, tcp_port, udp_port, relp_port, child: None }
    }

    /// Start and wait until the TCP input accepts connections.
    fn start(&mut self) {
        assert!(self.child.is_none());
        let child = Command::new(&self.bin)
            .arg("-n")
            .arg("-f")
            .arg(self.dir.join("rsyslog.conf"))
            .arg("-i")
            .arg(self.dir.join("rsyslogd.pid"))
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(std::fs::File::create(self.dir.join("stderr.log")).unwrap())
            .spawn()
            .unwrap();
        self.child = Some(child);
        let start = Instant::now();
        let port = self.relp_port.unwrap_or(self.tcp_port);
        while std::net::TcpStream::connect(("127.0.0.1", port)).is_err() {
            if let Some(status) = self.child.as_mut().unwrap().try_wait().unwrap() {
                panic!("rsyslogd exited ({status}): {}", self.stderr());
            }
            assert!(start.elapsed() < Duration::from_secs(10), "rsyslogd did not listen: {}", self.stderr());
            std::thread::sleep(Duration::from_millis(10));
        }
    }

    /// Stop gracefully (SIGTERM, as a service manager would) and wait for the exit.
    fn stop(&mut self) {
        let Some(mut child) = self.child.take() else { return };
        let _ = Command::new("kill").arg("-TERM").arg(child.id().to_string()).status();
        let start = Instant::now();
        while child.try_wait().unwrap().is_none() {
            if start.elapsed() > Duration::from_secs(10) {
                let _ = child.kill();
            }
            std::thread::sleep(Duration::from_millis(5));
        }
    }

    fn stderr(&self) -> String {
        std::fs::read_to_string(self.dir.join("stderr.log")).unwrap_or_default()
    }

    fn received(&self) -> Vec<String> {
        std::fs::read_to_string(self.dir.join("received.log"))
            .unwrap_or_default()
            .lines()
            .map(str::to_string)
            .collect()
    }
}

impl Drop for Collector {
    fn drop(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }
}

/// A varied alert: every severity, cause and kind, awkward evidence names and values, and
/// text that needs escaping (quotes, brackets, backslashes, non-ASCII).
fn alert(seq: u64) -> AlertEvent {
    let (severity, cause) = match seq % 4 {
        0 => (Severity::High, Cause::HeaterFouling),
        1 => (Severity::Medium, Cause::ConversionDrift),
        2 => (Severity::Low, Cause::HeatLoss),
        _ => (Severity::Medium, Cause::DataQuality),
    };
    let event = match seq % 3 {
        0 => EventKind::Raised,
        1 => EventKind::Updated,
        _ => EventKind::Cleared,
    };
    let mut evidence = serde_json::Map::new();
    evidence.insert("residual K".into(), json!(seq as f64 * 0.25));
    evidence.insert("ΔT=".into(), json!(format!("57 °C \"high\" ] \\{seq}")));
    evidence.insert("members".into(), json!(["TI-2050", "FI-2010"]));
    evidence.insert("steady".into(), json!(seq.is_multiple_of(2)));
    AlertEvent {
        time: format!("2026-12-01T06:{:02}:00+00:00", seq % 60),
        unit: "R-204".into(),
        alert_id: format!("R-204-{}-{:08x}", &cause.as_str()[..2], 0x3f9a_0000 + seq / 3),
        event,
        cause,
        severity,
        message: format!("Alert {seq}: heater \"E-204\" [bed 2] reads 57 °C; check TI-2050\\B."),
        subject: "TI-2050 [A]".into(),
        sequence: seq,
        evidence,
        time_ms: 0,
    }
}

/// Whether a received message carries the event intact.
fn check_intact(p: &Parsed, ev: &AlertEvent, line: &str) {
    assert_eq!(p.pri, 16 * 8 + u16::from(syslog_severity(ev)), "{line}");
    assert_eq!((p.hostname.as_str(), p.app_name.as_str()), ("test-host", "efftemp"), "{line}");
    assert_eq!(p.procid, std::process::id().to_string(), "{line}");
    let kind = serde_json::to_value(ev.event).unwrap().as_str().unwrap().to_string();
    assert_eq!(p.msgid, kind.to_uppercase(), "{line}");
    let a = p.element(SD_ID_ALERT).unwrap_or_else(|| panic!("no alert element: {line}"));
    let seq = ev.sequence.to_string();
    for (k, v) in [
        ("unit", ev.unit.as_str()),
        ("alert_id", ev.alert_id.as_str()),
        ("event", kind.as_str()),
        ("cause", ev.cause.as_str()),
        ("severity", ev.severity.as_str()),
        ("subject", ev.subject.as_str()),
        ("sequence", seq.as_str()),
        ("data_time", ev.time.as_str()),
    ] {
        assert_eq!(a.get(k), Some(v), "{k}: {line}");
    }
    let e = p.element(SD_ID_EVIDENCE).unwrap_or_else(|| panic!("no evidence element: {line}"));
    let expected: Vec<(String, String)> = vec![
        ("residual_K".into(), json!(ev.sequence as f64 * 0.25).to_string()),
        ("_T_".into(), ev.evidence["ΔT="].as_str().unwrap().to_string()),
        ("members".into(), r#"["TI-2050","FI-2010"]"#.into()),
        ("steady".into(), ev.sequence.is_multiple_of(2).to_string()),
    ];
    assert_eq!(e.params, expected, "{line}");
    assert!(p.bom, "{line}");
    assert_eq!(p.msg, ev.message, "{line}");
}

/// Received messages by sequence number; every line must parse.
fn by_sequence(lines: &[String]) -> BTreeMap<u64, Vec<(Parsed, String)>> {
    let mut out: BTreeMap<u64, Vec<(Parsed, String)>> = BTreeMap::new();
    for line in lines {
        let p = parse(line).unwrap_or_else(|e| panic!("unparsable message ({e}): {line}"));
        let seq: u64 = p.element(SD_ID_ALERT).and_then(|a| a.get("sequence")).unwrap().parse().unwrap();
        out.entry(seq).or_default().push((p, line.clone()));
    }
    out
}

fn wait_until(what: &str, timeout: Duration, mut done: impl FnMut() -> bool) {
    let start = Instant::now();
    while !done() {
        assert!(start.elapsed() < timeout, "timed out waiting for {what}");
        std::thread::sleep(Duration::from_millis(10));
    }
}

fn config(port: u16, transport: Transport, queue: &Path) -> SyslogConfig {
    SyslogConfig {
        hostname: Some("test-host".into()),
        reconnect_min_ms: 20,
        reconnect_max_ms: 200,
        confirm_ms: 10,
        ..SyslogConfig::new(format!("127.0.0.1:{port}"), transport, queue)
    }
}

/// TCP with octet counting: the collector is stopped in the middle of a stream of alerts and
/// started again, then stopped while the forwarder itself restarts. Every alert arrives intact;
/// the only duplicates allowed are the one event in flight at each stop.
#[test]
#[ignore = "needs rsyslogd (apt-get install rsyslog); .ci/run runs it"]
fn tcp_survives_collector_and_forwarder_restarts() {
    let bin = rsyslogd();
    let t0 = Instant::now();
    let tmp = tempfile::tempdir().unwrap();
    let mut col = Collector::new(bin, tmp.path());
    col.start();
    let queue = tmp.path().join("queue");
    let cfg = config(col.tcp_port, Transport::Tcp, &queue);

    // Phase 1: a steady stream; the collector goes away after 20 events and returns after 30.
    let f = Forwarder::start(cfg.clone()).unwrap();
    for seq in 1..=40 {
        f.send(&alert(seq));
        std::thread::sleep(Duration::from_millis(5));
        if seq == 20 {
            col.stop();
        }
        if seq == 30 {
            assert!(f.stats().queued > 0, "events queue while the collector is down: {:?}", f.stats());
            col.start();
        }
    }
    wait_until("the first forwarder to drain", Duration::from_secs(10), || f.stats().queued == 0);
    let s1 = f.stats();
    assert!(s1.connected && s1.reconnects >= 1 && s1.dropped == 0 && s1.sent >= 40, "{s1:?}");

    // Phase 2: the collector is down while the forwarder shuts down with events queued; they
    // are sent by the next forwarder on the same queue directory.
    col.stop();
    for seq in 41..=50 {
        f.send(&alert(seq));
    }
    f.shutdown(Duration::from_millis(100));
    let left = std::fs::read_dir(&queue)
        .unwrap()
        .filter(|e| e.as_ref().unwrap().path().extension().is_some_and(|x| x == "evt"))
        .count();
    assert_eq!(left, 10, "undelivered events stay on disk");
    let f = Forwarder::start(cfg).unwrap();
    assert_eq!(f.stats().queued, 10);
    col.start();
    for seq in 51..=60 {
        f.send(&alert(seq));
    }
    wait_until("the second forwarder to drain", Duration::from_secs(10), || f.stats().queued == 0);
    let s2 = f.stats();
    assert!(s2.sent >= 20 && s2.dropped == 0, "{s2:?}");
    f.shutdown(Duration::from_secs(1));
    col.stop();

    let lines = col.received();
    let got = by_sequence(&lines);
    let missing: Vec<u64> = (1..=60).filter(|s| !got.contains_key(s)).collect();
    assert!(missing.is_empty(), "lost: {missing:?}\n{}", lines.join("\n"));
    assert_eq!(got.len(), 60, "unexpected sequences: {:?}", got.keys().collect::<Vec<_>>());
    let mut duplicates = 0;
    for (seq, copies) in &got {
        let ev = alert(*seq);
        for (p, line) in copies {
            check_intact(p, &ev, line);
        }
        assert!(copies.len() <= 2, "sequence {seq} arrived {} times", copies.len());
        duplicates += copies.len() - 1;
    }
    // Two stops of the collector, at most one event in flight at each.
    assert!(duplicates <= 2, "{duplicates} duplicates");
    // Order: the first copy of each event arrives in sequence order.
    let first_seen: Vec<u64> = {
        let mut seen = Vec::new();
        for l in &lines {
            let seq = by_sequence(std::slice::from_ref(l)).into_keys().next().unwrap();
            if !seen.contains(&seq) {
                seen.push(seq);
            }
        }
        seen
    };
    assert_eq!(first_seen, (1..=60).collect::<Vec<_>>());
    eprintln!(
        "tcp restart test: {} messages for 60 events ({duplicates} duplicates), {:.2} s",
        lines.len(),
        t0.elapsed().as_secs_f64()
    );
}

/// UDP: each event is one datagram; an oversized one is cut to [`UDP_MAX_BYTES`] and still
/// parses, with the cut named in `truncated`.
#[test]
#[ignore = "needs rsyslogd (apt-get install rsyslog); .ci/run runs it"]
fn udp_smoke() {
    let bin = rsyslogd();
    let tmp = tempfile::tempdir().unwrap();
    let mut col = Collector::new(bin, tmp.path());
    col.start();
    let f = Forwarder::start(config(col.udp_port, Transport::Udp, &tmp.path().join("queue"))).unwrap();
    for seq in 1..=5 {
        f.send(&alert(seq));
    }
    let mut big = alert(6);
    let members: Vec<String> = (0..300).map(|i| format!("data_quality/TI-{i:04}")).collect();
    big.evidence.insert("members".into(), members.into());
    f.send(&big);
    wait_until("six datagrams", Duration::from_secs(10), || col.received().len() >= 6);
    f.shutdown(Duration::from_secs(1));
    col.stop();
    let lines = col.received();
    let got = by_sequence(&lines);
    assert_eq!(got.keys().copied().collect::<Vec<_>>(), (1..=6).collect::<Vec<_>>(), "{lines:?}");
    for seq in 1..=5 {
        let (p, line) = &got[&seq][0];
        check_intact(p, &alert(seq), line);
    }
    let (p, line) = &got[&6][0];
    assert!(line.len() <= UDP_MAX_BYTES, "{} bytes", line.len());
    assert_eq!(p.element(SD_ID_ALERT).unwrap().get("truncated"), Some("evidence"), "{line}");
    assert!(p.element(SD_ID_EVIDENCE).is_none());
    assert_eq!(p.msg, big.message);
}

/// RELP against rsyslogd's `imrelp`: every event is acknowledged by the collector before it
/// leaves the queue, so events sent while the collector is stopped wait, and after its restart
/// all arrive intact, in order, and the queue is empty.
#[test]
#[ignore = "needs rsyslogd and its RELP input (apt-get install rsyslog rsyslog-relp); .ci/run runs it"]
fn relp_delivers_every_event_acknowledged_across_a_collector_restart() {
    let bin = rsyslogd();
    let tmp = tempfile::tempdir().unwrap();
    let mut col = Collector::with_relp(bin, tmp.path());
    col.start();
    let port = col.relp_port.unwrap();
    let f = Forwarder::start(config(port, Transport::Relp, &tmp.path().join("queue"))).unwrap();
    for seq in 1..=10 {
        f.send(&alert(seq));
    }
    wait_until("ten acknowledged", Duration::from_secs(20), || f.stats().sent >= 10);
    col.stop();
    for seq in 11..=20 {
        f.send(&alert(seq));
    }
    std::thread::sleep(Duration::from_millis(500));
    assert!(f.stats().queued >= 9, "unacknowledged events stay queued: {:?}", f.stats());
    col.start();
    wait_until("all acknowledged", Duration::from_secs(30), || f.stats().queued == 0);
    let s = f.stats();
    f.shutdown(Duration::from_secs(1));
    col.stop();
    let lines = col.received();
    let got = by_sequence(&lines);
    assert_eq!(got.keys().copied().collect::<Vec<_>>(), (1..=20).collect::<Vec<_>>(), "{lines:?}");
    for (seq, copies) in &got {
        let (p, line) = &copies[0];
        check_intact(p, &alert(*seq), line);
    }
    assert_eq!(s.dropped, 0, "{s:?}");
}

/// `[forward.syslog]` in the site configuration: defaults, names, and located errors.
#[test]
fn site_configuration_section() {
    let example = std::fs::read_to_string(crate::util::root().join("config/example-site.toml")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    let load = |section: &str| {
        std::fs::write(&path, format!("{example}\n{section}")).unwrap();
        SiteConfig::load(&path)
    };
    assert!(load("").unwrap().syslog.is_none());
    let site = load(
        "[forward.syslog]\naddress = \"logs.example:6514\"\ntransport = \"udp\"\nfacility = \"local3\"\nreconnect_min = \"250ms\"\n",
    )
    .unwrap();
    let s = site.syslog.unwrap();
    assert_eq!(s.transport, Transport::Udp);
    assert_eq!((s.facility, s.reconnect_min_ms, s.reconnect_max_ms, s.queue_max), (19, 250, 60_000, 10_000));
    assert_eq!(s.queue_dir, site.state_dir.join("syslog-queue"));
    assert_eq!(s.app_name, "efftemp");

    let bad = "[forward.syslog]\naddress = \"logs.example\"\ntransport = \"tls\"\nfacility = 24\nreconnect_min = \"2m\"\n";
    let err = load(bad).unwrap_err().to_string();
    let text = std::fs::read_to_string(&path).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    let line_of = |start: &str| lines.iter().rposition(|l| l.starts_with(start)).unwrap() + 1;
    for (start, key, what) in [
        ("address", "forward.syslog.address", "no `:port`"),
        ("transport", "forward.syslog.transport", "unknown transport `tls`"),
        ("facility", "forward.syslog.facility", "out of range"),
        ("reconnect_min", "forward.syslog.reconnect_min", "above reconnect_max"),
    ] {
        let at = format!("site.toml:{}:", line_of(start));
        assert!(
            err.lines().any(|l| l.contains(&at) && l.contains(key) && l.contains(what)),
            "{at} {key} {what}: {err}"
        );
    }
    let err = load("[forward.syslog]\naddress = \"a:1\"\nport = 514\n").unwrap_err().to_string();
    assert!(err.contains("port"), "{err}");
}

/// The running service forwards its alert events: the simulated plant (a thermometer bias
/// step) is processed by `efftemp run` with `[forward.syslog]` pointing at rsyslogd over TCP;
/// the collector is down for part of the run. Every event of the alert files arrives, intact
/// in its identifying fields, and the metrics endpoint shows the queue drained.
#[test]
#[ignore = "needs rsyslogd (apt-get install rsyslog); .ci/run runs it"]
fn the_service_forwards_every_alert_event_of_its_alert_files() {
    let bin = rsyslogd();
    let dir = tempfile::tempdir().unwrap();
    let mut collector = Collector::new(bin, dir.path());
    let ev = efftemp::app::sim::Scenario::event(
        efftemp::app::sim::EventKind::ThermometerBias,
        1.2,
        4.0,
        2.0,
        Some("TI-2050"),
    );
    let scenario = efftemp::app::sim::Scenario::single(3, 1.8, ev);
    efftemp::app::sim::write_exports(&scenario, &dir.path().join("exports")).unwrap();
    let cfg = dir.path().join("site.toml");
    let text = efftemp::app::sim::site_config("exports", "state", "output", false, "10m", 60)
        .replace("watch = \"auto\"", "watch = \"off\"\nhttp_address = \"off\"")
        + &format!(
            "\n[forward.syslog]\naddress = \"127.0.0.1:{}\"\ntransport = \"tcp\"\nhostname = \"test-host\"\nreconnect_min = \"50ms\"\nreconnect_max = \"200ms\"\n",
            collector.tcp_port
        );
    std::fs::write(&cfg, text).unwrap();
    // The collector is down when the service starts: events wait in the disk queue.
    let mut child = Command::new(env!("CARGO_BIN_EXE_efftemp"))
        .args(["run", "--log-format", "json", "--config"])
        .arg(&cfg)
        .stdout(Stdio::null())
        .stderr(std::fs::File::create(dir.path().join("service.log")).unwrap())
        .spawn()
        .unwrap();
    let out = dir.path().join("output/R-204");
    let expected = || -> Vec<AlertEvent> { efftemp::sinks::report::load_events(&out, "R-204", i64::MAX) };
    wait_until("the backlog to be processed", Duration::from_secs(120), || {
        std::fs::read_dir(&out)
            .map(|rd| {
                rd.flatten().any(|e| e.file_name().to_string_lossy().contains("2026-11-22"))
                    && expected()
                        .iter()
                        .any(|e| e.event == EventKind::Raised && e.cause == Cause::InstrumentFault)
            })
            .unwrap_or(false)
    });
    collector.start();
    // Let the service finish the backlog, then wait for the collector to have everything.
    std::thread::sleep(Duration::from_secs(3));
    let want = expected();
    // Raised and cleared at least.
    assert!(want.len() >= 2, "too few alert events to test with: {want:?}");
    wait_until("every alert event at the collector", Duration::from_secs(60), || {
        let got = by_sequence(&collector.received());
        want.iter().all(|e| got.contains_key(&e.sequence))
    });
    let _ = Command::new("kill").arg("-TERM").arg(child.id().to_string()).status();
    assert!(child.wait().unwrap().success());
    let got = by_sequence(&collector.received());
    for e in &want {
        let copies = &got[&e.sequence];
        let (p, line) = &copies[0];
        let a = p.element(SD_ID_ALERT).unwrap();
        assert_eq!(a.get("alert_id"), Some(e.alert_id.as_str()), "{line}");
        assert_eq!(a.get("cause"), Some(e.cause.as_str()), "{line}");
        assert_eq!(a.get("data_time"), Some(e.time.as_str()), "{line}");
        assert_eq!(p.msg, e.message, "{line}");
    }
    // Nothing was forwarded that is not in the alert files.
    assert!(got.keys().all(|s| want.iter().any(|e| e.sequence == *s)), "unexpected events at the collector");
}
