//! Health and metrics over HTTP (loopback by default): `/healthz` (the process is alive),
//! `/readyz` (the pipeline has completed a pass recently and every unit can read its export
//! directory) and `/metrics` in the Prometheus text exposition format (version 0.0.4). With
//! [`Pages`], also the engineer's read-only pages: `/` (all units: state, active alerts, last
//! interval, data age, a residual sparkline), `/unit/{name}` (the shift so far, laid out as the
//! shift report), `/reports/` (the archive of shift reports) and `/alerts.json` (the alert
//! list). The pages carry no scripts and fetch nothing (a content security policy says so).
//!
//! The service publishes a [`Snapshot`] after every pass through a `watch` channel; the HTTP
//! side only renders the latest one, so scraping never touches the pipeline.

use std::fmt::Write as _;
use std::future::Future;

use axum::Router;
use axum::extract::State;
use axum::http::{StatusCode, header};
use axum::response::IntoResponse;
use axum::routing::get;
use tokio::net::TcpListener;
use tokio::sync::watch;

use crate::pipeline::UnitSnapshot;

/// Everything `/metrics` and `/readyz` show.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Snapshot {
    /// Per unit.
    pub units: Vec<UnitSnapshot>,
    /// Checkpoints written.
    pub checkpoint_writes: u64,
    /// Checkpoint writes that failed.
    pub checkpoint_failures: u64,
    /// `native`, `poll` or `off`.
    pub watch_mode: String,
    /// Rescan requests seen (event-queue overflows).
    pub rescans: u64,
    /// Watcher errors.
    pub watcher_errors: u64,
    /// The syslog forwarder's counters, when forwarding is configured.
    pub syslog: Option<crate::sinks::syslog::ForwardStats>,
    /// Passes completed.
    pub passes: u64,
    /// Wall time of the last pass, ms since the epoch.
    pub last_pass_ms: Option<i64>,
    /// A pass older than this (ms) makes `/readyz` fail.
    pub ready_within_ms: i64,
    /// Why the service runs degraded (outputs or the checkpoint cannot be written): `/healthz`
    /// and `/readyz` answer 503 with it.
    pub degraded: Option<String>,
    /// The last pass stopped at its read budget: the service is catching up on a backlog
    /// (`/readyz` answers 503 with how far behind each unit is).
    pub catching_up: bool,
}

/// `n` bytes for people: `512 B`, `3.4 KiB`, `12.0 MiB`, `1.50 GiB`.
pub fn human_bytes(n: u64) -> String {
    let f = n as f64;
    if n < 1 << 10 {
        format!("{n} B")
    } else if n < 1 << 20 {
        format!("{:.1} KiB", f / 1024.0)
    } else if n < 1 << 30 {
        format!("{:.1} MiB", f / 1_048_576.0)
    } else {
        format!("{:.2} GiB", f / 1_073_741_824.0)
    }
}

fn esc(v: &str) -> String {
    v.replace('\\', "\\\\").replace('"', "\\\"").replace('\n', "\\n")
}

/// Render the Prometheus text exposition format (0.0.4). `now_ms` is the wall time of the
/// scrape (for data ages).
pub fn render(s: &Snapshot, now_ms: i64) -> String {
    let mut o = String::new();
    let family = |o: &mut String, name: &str, kind: &str, help: &str| {
        let _ = writeln!(o, "# HELP {name} {help}");
        let _ = writeln!(o, "# TYPE {name} {kind}");
    };
    let names: Vec<String> = s.units.iter().map(|u| esc(&u.name)).collect();
    // Per-unit counters with the unit as their only label.
    type Counter = (&'static str, &'static str, fn(&UnitSnapshot) -> u64);
    let per_unit: [Counter; 6] = [
        ("efftemp_rows_read_total", "Data records read from export files.", |u| u.records),
        ("efftemp_late_samples_total", "Samples for intervals already closed (counted, not used).", |u| {
            u.late
        }),
        ("efftemp_intervals_closed_total", "Intervals closed and written.", |u| u.intervals),
        ("efftemp_intervals_not_computed_total", "Intervals whose prediction could not be computed.", |u| {
            u.not_computed
        }),
        ("efftemp_solver_failures_total", "Balance solves that failed.", |u| u.solver_failures),
        ("efftemp_export_bytes_read_total", "Bytes read from export files.", |u| u.bytes),
    ];
    for (name, help, value) in per_unit {
        family(&mut o, name, "counter", help);
        for (u, unit) in s.units.iter().zip(&names) {
            let _ = writeln!(o, "{name}{{unit=\"{unit}\"}} {}", value(u));
        }
    }
    family(&mut o, "efftemp_rows_rejected_total", "counter", "Records or values rejected, by reason.");
    for (u, unit) in s.units.iter().zip(&names) {
        for (reason, n) in &u.rejected {
            let _ =
                writeln!(o, "efftemp_rows_rejected_total{{unit=\"{unit}\",reason=\"{}\"}} {n}", esc(reason));
        }
    }
    family(&mut o, "efftemp_alert_events_total", "counter", "Alert events written, by cause and event.");
    for (u, unit) in s.units.iter().zip(&names) {
        for ((cause, event), n) in &u.alert_events {
            let _ = writeln!(
                o,
                "efftemp_alert_events_total{{unit=\"{unit}\",cause=\"{}\",event=\"{}\"}} {n}",
                esc(cause),
                esc(event)
            );
        }
    }
    family(&mut o, "efftemp_alerts_active", "gauge", "Active alerts, by cause.");
    for (u, unit) in s.units.iter().zip(&names) {
        for (cause, n) in &u.active_alerts {
            let _ = writeln!(o, "efftemp_alerts_active{{unit=\"{unit}\",cause=\"{}\"}} {n}", esc(cause));
        }
    }
    family(
        &mut o,
        "efftemp_last_data_age_seconds",
        "gauge",
        "Wall time since the newest data time of the unit.",
    );
    for (u, unit) in s.units.iter().zip(&names) {
        if let Some(t) = u.last_data_ms {
            let age = (now_ms - t) as f64 / 1000.0;
            let _ = writeln!(o, "efftemp_last_data_age_seconds{{unit=\"{unit}\"}} {age:.3}");
        }
    }
    readable(&mut o, s, &names);
    backlog(&mut o, s, &names);
    family(&mut o, "efftemp_monitor_state", "gauge", "1 for the unit's current monitor state.");
    for (u, unit) in s.units.iter().zip(&names) {
        let _ = writeln!(o, "efftemp_monitor_state{{unit=\"{unit}\",state=\"{}\"}} 1", esc(&u.monitor_state));
    }
    family(&mut o, "efftemp_checkpoint_writes_total", "counter", "Checkpoints written.");
    let _ = writeln!(o, "efftemp_checkpoint_writes_total {}", s.checkpoint_writes);
    family(&mut o, "efftemp_checkpoint_failures_total", "counter", "Checkpoint writes that failed.");
    let _ = writeln!(o, "efftemp_checkpoint_failures_total {}", s.checkpoint_failures);
    family(&mut o, "efftemp_watch_mode", "gauge", "1 for the file-watching mode in effect.");
    let _ = writeln!(o, "efftemp_watch_mode{{mode=\"{}\"}} 1", esc(&s.watch_mode));
    family(
        &mut o,
        "efftemp_watch_rescans_total",
        "counter",
        "Directory rescans requested by the watcher (event overflow).",
    );
    let _ = writeln!(o, "efftemp_watch_rescans_total {}", s.rescans);
    family(&mut o, "efftemp_watch_errors_total", "counter", "Watcher errors.");
    let _ = writeln!(o, "efftemp_watch_errors_total {}", s.watcher_errors);
    if let Some(f) = s.syslog {
        for (name, kind, help, value) in [
            (
                "efftemp_syslog_queue_depth",
                "gauge",
                "Alert events waiting for the syslog collector.",
                f.queued as u64,
            ),
            (
                "efftemp_syslog_sent_total",
                "counter",
                "Alert events delivered to the syslog collector.",
                f.sent,
            ),
            (
                "efftemp_syslog_dropped_total",
                "counter",
                "Alert events dropped by the syslog queue bound.",
                f.dropped,
            ),
        ] {
            family(&mut o, name, kind, help);
            let _ = writeln!(o, "{name} {value}");
        }
    }
    family(
        &mut o,
        "efftemp_degraded",
        "gauge",
        "1 while outputs or the checkpoint cannot be written (the service retries; /healthz says why).",
    );
    let _ = writeln!(o, "efftemp_degraded {}", u8::from(s.degraded.is_some()));
    family(&mut o, "efftemp_passes_total", "counter", "Pipeline passes completed.");
    let _ = writeln!(o, "efftemp_passes_total {}", s.passes);
    o
}

/// `efftemp_backlog_bytes` per unit and `efftemp_catching_up`.
fn backlog(o: &mut String, s: &Snapshot, names: &[String]) {
    let name = "efftemp_backlog_bytes";
    let _ =
        writeln!(o, "# HELP {name} Export bytes waiting beyond what the last pass read (0 when caught up).");
    let _ = writeln!(o, "# TYPE {name} gauge");
    for (u, unit) in s.units.iter().zip(names) {
        let _ = writeln!(o, "{name}{{unit=\"{unit}\"}} {}", u.backlog_bytes.unwrap_or(0));
    }
    let name = "efftemp_catching_up";
    let _ = writeln!(o, "# HELP {name} 1 while the service reads a backlog in bounded passes.");
    let _ = writeln!(o, "# TYPE {name} gauge");
    let _ = writeln!(o, "{name} {}", u8::from(s.catching_up));
}

/// `efftemp_export_directory_readable`: whether each unit could read its export directory.
fn readable(o: &mut String, s: &Snapshot, names: &[String]) {
    let name = "efftemp_export_directory_readable";
    let _ = writeln!(
        o,
        "# HELP {name} 1 when the unit's export directory could be read at the last pass, else 0."
    );
    let _ = writeln!(o, "# TYPE {name} gauge");
    for (u, unit) in s.units.iter().zip(names) {
        let _ = writeln!(o, "{name}{{unit=\"{unit}\"}} {}", u8::from(u.input_problem.is_none()));
    }
}

async fn healthz(State(rx): State<watch::Receiver<Snapshot>>) -> impl IntoResponse {
    match rx.borrow().degraded.clone() {
        None => (StatusCode::OK, "ok\n".to_string()),
        Some(why) => (StatusCode::SERVICE_UNAVAILABLE, format!("degraded: {why}\n")),
    }
}

async fn readyz(State(rx): State<watch::Receiver<Snapshot>>) -> impl IntoResponse {
    let s = rx.borrow().clone();
    readiness(&s, jiff::Timestamp::now().as_millisecond())
}

/// `/readyz`: ready when a pass ran recently and no unit is blind (an export directory that
/// cannot be read makes the service not ready, with the reason in the body).
fn readiness(s: &Snapshot, now: i64) -> (StatusCode, String) {
    if let Some(why) = &s.degraded {
        return (StatusCode::SERVICE_UNAVAILABLE, format!("not ready: degraded: {why}\n"));
    }
    let blind: Vec<&str> = s.units.iter().filter_map(|u| u.input_problem.as_deref()).collect();
    if s.last_pass_ms.is_some() && !blind.is_empty() {
        return (StatusCode::SERVICE_UNAVAILABLE, format!("not ready: {}\n", blind.join("; ")));
    }
    if s.catching_up {
        let mut behind: Vec<(i64, String)> = s
            .units
            .iter()
            .filter_map(|u| {
                let bytes = u.backlog_bytes?;
                let lag = u.last_data_ms.map_or(i64::MAX, |t| now - t);
                let data = u.last_data_ms.map_or_else(
                    || "no data yet".to_string(),
                    |t| format!("data up to {} ({} behind)", fmt_ms(t), crate::units::human_age(lag)),
                );
                Some((lag, format!("unit {}: {} unread, {data}", u.name, human_bytes(bytes))))
            })
            .collect();
        // The units furthest behind first, five of them.
        behind.sort_by_key(|(lag, _)| std::cmp::Reverse(*lag));
        let mut what: Vec<String> = behind.iter().take(5).map(|(_, text)| text.clone()).collect();
        match behind.len() {
            0 => what.push("units waiting for their turn".to_string()),
            n if n > 5 => what.push(format!("and {} more unit(s)", n - 5)),
            _ => {}
        }
        let what = what.join("; ");
        return (StatusCode::SERVICE_UNAVAILABLE, format!("not ready: catching up: {what}\n"));
    }
    match s.last_pass_ms {
        Some(t) if now - t <= s.ready_within_ms => {
            (StatusCode::OK, format!("ready: {} pass(es)\n", s.passes))
        }
        Some(t) => {
            (StatusCode::SERVICE_UNAVAILABLE, format!("not ready: last pass {} s ago\n", (now - t) / 1000))
        }
        None => (StatusCode::SERVICE_UNAVAILABLE, "not ready: starting\n".to_string()),
    }
}

/// A wall time in ms as RFC 3339 (UTC, to the second).
fn fmt_ms(ms: i64) -> String {
    jiff::Timestamp::from_millisecond(ms).map_or_else(|_| ms.to_string(), |t| format!("{t:.0}"))
}

async fn metrics(State(rx): State<watch::Receiver<Snapshot>>) -> impl IntoResponse {
    let s = rx.borrow().clone();
    let body = render(&s, jiff::Timestamp::now().as_millisecond());
    ([(header::CONTENT_TYPE, "text/plain; version=0.0.4; charset=utf-8")], body)
}

/// Bounds on what HTTP clients can hold: any local user can connect to a loopback address, and
/// the endpoints must neither starve the service of file descriptors nor stop answering.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HttpLimits {
    /// Connections served at once; a connection beyond this is closed at once.
    pub max_connections: usize,
    /// Time a client has to send a request's headers.
    pub header_timeout: std::time::Duration,
    /// Longest life of a connection (keep-alive included): an idle client is closed after it.
    pub connection_lifetime: std::time::Duration,
}

impl Default for HttpLimits {
    /// 64 connections (a scraper and a few people), 5 s for the headers, 30 s per connection.
    fn default() -> Self {
        HttpLimits {
            max_connections: 64,
            header_timeout: std::time::Duration::from_secs(5),
            connection_lifetime: std::time::Duration::from_secs(30),
        }
    }
}

/// Serve the endpoints on `listener` until `shutdown` completes, within `limits`.
pub async fn serve(
    listener: TcpListener,
    rx: watch::Receiver<Snapshot>,
    shutdown: impl Future<Output = ()> + Send + 'static,
    limits: HttpLimits,
) -> std::io::Result<()> {
    serve_with_pages(listener, rx, None, shutdown, limits).await
}

/// [`serve`], with the engineer's pages when `pages` is given.
pub async fn serve_with_pages(
    listener: TcpListener,
    rx: watch::Receiver<Snapshot>,
    pages: Option<Pages>,
    shutdown: impl Future<Output = ()> + Send + 'static,
    limits: HttpLimits,
) -> std::io::Result<()> {
    let mut app = Router::new()
        .route("/healthz", get(healthz))
        .route("/readyz", get(readyz))
        .route("/metrics", get(metrics))
        .with_state(rx.clone());
    if let Some(p) = pages {
        app = app.merge(pages::router(std::sync::Arc::new(pages::State { pages: p, rx })));
    }
    let permits = std::sync::Arc::new(tokio::sync::Semaphore::new(limits.max_connections.max(1)));
    let mut connections = tokio::task::JoinSet::new();
    tokio::pin!(shutdown);
    loop {
        let accepted = tokio::select! {
            () = &mut shutdown => break,
            a = listener.accept() => a,
            // Reap finished connections so the set stays small.
            Some(_) = connections.join_next(), if !connections.is_empty() => continue,
        };
        let stream = match accepted {
            Ok((stream, _)) => stream,
            Err(e) => {
                // Out of descriptors or a reset before accept: back off a little, keep serving.
                tracing::warn!(error = %e, "HTTP accept failed");
                tokio::time::sleep(std::time::Duration::from_millis(100)).await;
                continue;
            }
        };
        let Ok(permit) = permits.clone().try_acquire_owned() else {
            tracing::debug!(limit = limits.max_connections, "HTTP connection refused: at the limit");
            drop(stream);
            continue;
        };
        let service = hyper_util::service::TowerToHyperService::new(app.clone());
        connections.spawn(async move {
            let conn = hyper::server::conn::http1::Builder::new()
                .timer(hyper_util::rt::TokioTimer::new())
                .header_read_timeout(limits.header_timeout)
                .max_buf_size(16 * 1024)
                .serve_connection(hyper_util::rt::TokioIo::new(stream), service);
            let _ = tokio::time::timeout(limits.connection_lifetime, conn).await;
            drop(permit);
        });
    }
    connections.abort_all();
    Ok(())
}

/// What the engineer's pages read: the site's name and output directory (the live board of
/// its units' shift books is found by it, and the report archive is under it).
#[derive(Debug, Clone)]
pub struct Pages {
    /// Site name.
    pub site: String,
    /// The site's output directory.
    pub output_dir: std::path::PathBuf,
}

mod pages;

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn exposition_format_is_well_formed() {
        let mut u = UnitSnapshot { name: "R-\"204\"".into(), records: 5, ..Default::default() };
        u.rejected.insert("non_numeric".into(), 2);
        u.last_data_ms = Some(1_000);
        let s = Snapshot { units: vec![u], watch_mode: "native".into(), ..Default::default() };
        let text = render(&s, 3_500);
        assert!(text.contains("efftemp_rows_read_total{unit=\"R-\\\"204\\\"\"} 5"), "{text}");
        assert!(
            text.contains("efftemp_rows_rejected_total{unit=\"R-\\\"204\\\"\",reason=\"non_numeric\"} 2")
        );
        assert!(text.contains("efftemp_last_data_age_seconds{unit=\"R-\\\"204\\\"\"} 2.500"));
        // Every sample line belongs to a family declared before it.
        let mut declared = Vec::new();
        for line in text.lines() {
            if let Some(rest) = line.strip_prefix("# TYPE ") {
                declared.push(rest.split(' ').next().unwrap().to_string());
            } else if !line.starts_with('#') {
                let name = line.split(['{', ' ']).next().unwrap();
                assert!(declared.iter().any(|d| d == name), "{line}");
            }
        }
    }

    #[test]
    fn a_service_catching_up_is_not_ready_and_says_how_far_behind() {
        let day = 86_400_000;
        let now = 40 * day;
        let behind = UnitSnapshot {
            name: "R-204".into(),
            last_data_ms: Some(now - 36 * day - 4 * 3_600_000),
            backlog_bytes: Some(12 << 20),
            ..Default::default()
        };
        let current =
            UnitSnapshot { name: "R-205".into(), last_data_ms: Some(now - 5_000), ..Default::default() };
        let mut s = Snapshot {
            units: vec![behind, current],
            passes: 3,
            last_pass_ms: Some(now),
            ready_within_ms: 6_000,
            catching_up: true,
            ..Default::default()
        };
        let (code, body) = readiness(&s, now);
        assert_eq!(code, StatusCode::SERVICE_UNAVAILABLE);
        assert_eq!(
            body,
            "not ready: catching up: unit R-204: 12.0 MiB unread, data up to 1970-01-04T20:00:00Z (36.2 d behind)\n"
        );
        let text = render(&s, now);
        assert!(text.contains("efftemp_backlog_bytes{unit=\"R-204\"} 12582912\n"), "{text}");
        assert!(text.contains("efftemp_backlog_bytes{unit=\"R-205\"} 0\n"), "{text}");
        assert!(text.contains("efftemp_catching_up 1\n"), "{text}");
        // Many units behind: the five furthest behind, and how many more.
        let mut many = s.clone();
        many.units = (0..7)
            .map(|k| UnitSnapshot {
                name: format!("U-{k}"),
                last_data_ms: Some(now - (k + 1) * day),
                backlog_bytes: Some(1 << 20),
                ..Default::default()
            })
            .collect();
        let body = readiness(&many, now).1;
        assert!(body.starts_with("not ready: catching up: unit U-6: 1.0 MiB unread"), "{body}");
        assert!(body.ends_with("unit U-2: 1.0 MiB unread, data up to 1970-02-07T00:00:00Z (3.0 d behind); and 2 more unit(s)\n"), "{body}");
        s.catching_up = false;
        s.units[0].backlog_bytes = None;
        assert_eq!(readiness(&s, now).0, StatusCode::OK);
        assert!(render(&s, now).contains("efftemp_catching_up 0\n"));
    }

    /// Whether the server closes `stream` within `within` (a read returns end of file or a
    /// reset) while the client sends nothing more.
    async fn closed_within(stream: &mut tokio::net::TcpStream, within: std::time::Duration) -> bool {
        use tokio::io::AsyncReadExt as _;
        let mut buf = [0u8; 256];
        loop {
            match tokio::time::timeout(within, stream.read(&mut buf)).await {
                Err(_) => return false,
                Ok(Ok(0) | Err(_)) => return true,
                Ok(Ok(_)) => {}
            }
        }
    }

    async fn get(addr: std::net::SocketAddr, path: &str) -> String {
        use tokio::io::{AsyncReadExt as _, AsyncWriteExt as _};
        let mut s = tokio::net::TcpStream::connect(addr).await.unwrap();
        let req = format!("GET {path} HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n");
        s.write_all(req.as_bytes()).await.unwrap();
        let mut out = String::new();
        let _ = tokio::time::timeout(std::time::Duration::from_secs(5), s.read_to_string(&mut out)).await;
        out
    }

    /// Idle and half-sent connections (any local user can open them) are bounded in number and
    /// closed after the header timeout; the health endpoint answers again once they are gone,
    /// and answers throughout when they stay under the limit.
    #[tokio::test]
    async fn idle_and_slow_clients_cannot_hold_the_endpoints() {
        use tokio::io::AsyncWriteExt as _;
        let listener = TcpListener::bind("127.0.0.1:0").await.unwrap();
        let addr = listener.local_addr().unwrap();
        let (_tx, rx) = watch::channel(Snapshot::default());
        let limits = HttpLimits {
            max_connections: 4,
            header_timeout: std::time::Duration::from_millis(300),
            connection_lifetime: std::time::Duration::from_secs(2),
        };
        let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
        let server = tokio::spawn(serve(listener, rx, async move { drop(stop_rx.await) }, limits));

        // Ten idle connections: four get a slot, the other six are closed at once.
        let mut idle = Vec::new();
        for _ in 0..10 {
            idle.push(tokio::net::TcpStream::connect(addr).await.unwrap());
            tokio::time::sleep(std::time::Duration::from_millis(20)).await;
        }
        let short = std::time::Duration::from_millis(150);
        let mut closed_at_once = 0;
        for s in idle.iter_mut().skip(4) {
            closed_at_once += usize::from(closed_within(s, short).await);
        }
        assert_eq!(closed_at_once, 6, "connections beyond the limit are closed at once");
        // The four in the slots send nothing: the header timeout closes them.
        for s in idle.iter_mut().take(4) {
            assert!(closed_within(s, std::time::Duration::from_secs(3)).await, "idle client kept");
        }
        assert!(get(addr, "/healthz").await.starts_with("HTTP/1.1 200"), "healthz after the idle clients");

        // A slow client that sends half a request line is closed by the header timeout too.
        let mut slow = tokio::net::TcpStream::connect(addr).await.unwrap();
        slow.write_all(b"GET /metr").await.unwrap();
        assert!(closed_within(&mut slow, std::time::Duration::from_secs(3)).await, "slow client kept");

        // Under the limit, the endpoints answer while other clients sit idle.
        let _a = tokio::net::TcpStream::connect(addr).await.unwrap();
        let _b = tokio::net::TcpStream::connect(addr).await.unwrap();
        let ready = get(addr, "/readyz").await;
        assert!(ready.starts_with("HTTP/1.1 503") && ready.contains("not ready"), "{ready}");
        let _ = stop_tx.send(());
        server.await.unwrap().unwrap();
    }

    /// A unit whose export directory cannot be read makes the service not ready, with the reason.
    #[test]
    fn a_blind_unit_makes_the_service_not_ready() {
        let mut u = UnitSnapshot { name: "R-204".into(), ..Default::default() };
        u.input_problem = Some("unit R-204: export directory /x does not exist".into());
        let mut s = Snapshot {
            units: vec![u],
            last_pass_ms: Some(1_000),
            ready_within_ms: 5_000,
            ..Default::default()
        };
        let (code, body) = readiness(&s, 2_000);
        assert_eq!(code, StatusCode::SERVICE_UNAVAILABLE);
        assert!(body.contains("export directory /x does not exist"), "{body}");
        assert!(render(&s, 2_000).contains("efftemp_export_directory_readable{unit=\"R-204\"} 0"));
        s.units[0].input_problem = None;
        assert_eq!(readiness(&s, 2_000).0, StatusCode::OK);
    }
}
