//! Command-line interface: argument definitions and the commands. Exit codes: 0 success,
//! 1 runtime failure, 2 usage or configuration error.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use crate::app::logging::LogFormat;
use crate::config::SiteConfig;
use crate::config::case::Case;

const AFTER_HELP: &str = concat!(
    "CAUTION: efftemp is advisory. It is not a safety instrumented function, must not be used for ",
    "automatic control actions, and its alerts do not replace the site's alarm system, operating ",
    "procedures, management of change, or the judgement of qualified engineers under local codes ",
    "and regulations."
);

/// efftemp: predicted reactor effluent temperature from an enthalpy balance, compared with the
/// thermometer.
#[derive(Debug, Parser)]
#[command(name = "efftemp", version, about, after_help = AFTER_HELP)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// Subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Solve one steady-state balance from a case file (engineering what-ifs).
    #[command(after_help = AFTER_HELP)]
    Calc {
        /// The case file (TOML).
        case: PathBuf,
        /// Print one JSON object instead of the human summary.
        #[arg(long)]
        json: bool,
    },
    /// The service: tail the export files, compute each interval, alert, write back.
    #[command(after_help = AFTER_HELP)]
    Run {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Log format: text on a terminal, JSON lines otherwise.
        #[arg(long, value_enum, default_value = "auto")]
        log_format: LogFormat,
        /// Log filter (tracing directives), e.g. `info` or `efftemp=debug`.
        #[arg(long, default_value = "info")]
        log_level: String,
    },
    /// Validate a site configuration; every problem names its file, line and key.
    #[command(after_help = AFTER_HELP)]
    Check {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
    },
    /// Process existing export files as a batch, with the same outputs as `run`.
    #[command(after_help = AFTER_HELP)]
    Replay {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Export directories to read instead of each unit's configured directory (every unit
        /// whose file pattern matches files there reads them).
        paths: Vec<PathBuf>,
        /// Write outputs here instead of the site's output directory.
        #[arg(long)]
        output: Option<PathBuf>,
        /// Log format.
        #[arg(long, value_enum, default_value = "auto")]
        log_format: LogFormat,
        /// Log filter.
        #[arg(long, default_value = "warn")]
        log_level: String,
    },
    /// Run the embedded demo plant end to end: simulated exports with injected faults,
    /// processed live by the real service, with a scorecard at the end.
    #[command(after_help = AFTER_HELP)]
    Demo {
        /// Simulator seed (same seed, same data).
        #[arg(long, default_value_t = 2026)]
        seed: u64,
        /// Simulated days.
        #[arg(long, default_value_t = 11.0)]
        days: f64,
        /// Simulated seconds per wall second (default: finish writing in about 40 s).
        #[arg(long)]
        speed: Option<f64>,
        /// Directory for exports, state and outputs (must be empty or new).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Delete the files at the end (by default they are kept for inspection).
        #[arg(long)]
        discard: bool,
    },
    /// Write the shift report (HTML) of a unit and print a text summary.
    #[command(after_help = AFTER_HELP)]
    Report {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit (default: every unit).
        #[arg(long)]
        unit: Option<String>,
        /// The shift that contains this time (RFC 3339, or local `YYYY-MM-DDTHH:MM`).
        #[arg(long, conflicts_with = "last")]
        shift: Option<String>,
        /// The last completed shift (the default).
        #[arg(long)]
        last: bool,
    },
    /// Ask the service to learn a new baseline for a unit (after maintenance); audited.
    #[command(after_help = AFTER_HELP)]
    Rebaseline {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// Why (recorded in the audit log).
        #[arg(long)]
        reason: String,
        /// Who (default: the login name).
        #[arg(long)]
        by: Option<String>,
    },
    /// Shelve alerts of a unit for a while: tracked but not announced; audited.
    #[command(after_help = AFTER_HELP)]
    Shelve {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// An alert id, a cause (e.g. `data_quality`) or `cause/subject`.
        #[arg(long)]
        selector: String,
        /// How long, e.g. "8h" (at most the configured `shelve_max`).
        #[arg(long = "for")]
        duration: String,
        /// Why (recorded in the audit log).
        #[arg(long)]
        reason: String,
        /// Who (default: the login name).
        #[arg(long)]
        by: Option<String>,
    },
    /// Remove a shelf before it expires; audited.
    #[command(after_help = AFTER_HELP)]
    Unshelve {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// The selector that was shelved.
        #[arg(long)]
        selector: String,
        /// Why.
        #[arg(long)]
        reason: String,
        /// Who.
        #[arg(long)]
        by: Option<String>,
    },
    /// Estimate the dead time and lag of the effluent temperature from existing export files.
    #[command(after_help = AFTER_HELP)]
    Identify {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// Longest dead time to consider, e.g. "30m".
        #[arg(long, default_value = "30m")]
        max_dead_time: String,
    },
}

/// Exit code for usage and configuration errors.
pub const EXIT_CONFIG: u8 = 2;
/// Exit code for runtime failures.
pub const EXIT_RUNTIME: u8 = 1;

/// Parse arguments and run.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Calc { case, json } => calc(&case, json),
        Command::Check { config } => check(&config),
        Command::Run { config, log_format, log_level } => run(&config, log_format, &log_level),
        Command::Replay { config, paths, output, log_format, log_level } => {
            replay(&config, &paths, output, log_format, &log_level)
        }
        Command::Demo { seed, days, speed, out, discard } => demo(seed, days, speed, out, discard),
        Command::Report { config, unit, shift, last: _ } => {
            report(&config, unit.as_deref(), shift.as_deref())
        }
        Command::Rebaseline { config, unit, reason, by } => {
            request(&config, &unit, "rebaseline", None, None, &reason, by)
        }
        Command::Shelve { config, unit, selector, duration, reason, by } => {
            request(&config, &unit, "shelve", Some(selector), Some(duration), &reason, by)
        }
        Command::Unshelve { config, unit, selector, reason, by } => {
            request(&config, &unit, "unshelve", Some(selector), None, &reason, by)
        }
        Command::Identify { config, unit, max_dead_time } => identify(&config, &unit, &max_dead_time),
    }
}

fn load_site(path: &std::path::Path) -> Result<SiteConfig, ExitCode> {
    SiteConfig::load(path).map_err(|errors| {
        for e in &errors.0 {
            eprintln!("error: {e}");
        }
        eprintln!("{} problem(s) in the configuration", errors.0.len());
        ExitCode::from(EXIT_CONFIG)
    })
}

fn check(path: &std::path::Path) -> ExitCode {
    let site = match load_site(path) {
        Ok(s) => s,
        Err(code) => return code,
    };
    println!("configuration OK: site \"{}\", {} unit(s)", site.name, site.units.len());
    for u in &site.units {
        let comps: Vec<String> = u
            .spec
            .system
            .components
            .iter()
            .zip(&u.spec.system.paths)
            .map(|(c, p)| format!("{} ({})", c.id, p.as_str()))
            .collect();
        println!(
            "  {}: {} tag(s), interval {} s, input {}/{} ({:?}), components {}",
            u.spec.name,
            u.spec.tags.len(),
            u.spec.interval_ms / 1000,
            u.input.directory.display(),
            u.input.pattern,
            u.input.layout,
            comps.join(", ")
        );
    }
    println!("  state: {}; output: {}", site.state_dir.display(), site.output_dir.display());
    ExitCode::SUCCESS
}

fn run(path: &std::path::Path, format: LogFormat, level: &str) -> ExitCode {
    if let Err(e) = crate::app::logging::init(format, level) {
        eprintln!("error: {e}");
        return ExitCode::from(EXIT_CONFIG);
    }
    let site = match load_site(path) {
        Ok(s) => std::sync::Arc::new(s),
        Err(code) => return code,
    };
    let rt = match tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build() {
        Ok(rt) => rt,
        Err(e) => {
            eprintln!("error: cannot start the runtime: {e}");
            return ExitCode::from(EXIT_RUNTIME);
        }
    };
    let config_path = path.to_path_buf();
    let result = rt.block_on(async move {
        // Signals: TERM/INT stop; HUP reloads after validating the new configuration (a bad
        // one is reported with its locations and the running one carries on).
        let (tx, mut rx) = tokio::sync::mpsc::channel::<Control>(4);
        tokio::spawn(signals(config_path, tx));
        // Health and metrics outlive reloads.
        let (snap_tx, snap_rx) = tokio::sync::watch::channel(crate::app::http::Snapshot::default());
        if let Some(addr) = site.service.http_address {
            match tokio::net::TcpListener::bind(addr).await {
                Ok(listener) => {
                    tracing::info!(address = %addr, "health and metrics at /healthz, /readyz, /metrics");
                    tokio::spawn(crate::app::http::serve(listener, snap_rx, std::future::pending()));
                }
                Err(e) => tracing::warn!(address = %addr, error = %e, "cannot serve health and metrics"),
            }
        }
        let mut site = site;
        loop {
            let mut next: Option<Control> = None;
            let stop = async {
                next = rx.recv().await;
            };
            crate::app::service::run(site.clone(), crate::app::service::Wake::Watchers, stop, None, Some(snap_tx.clone())).await?;
            match next {
                Some(Control::Reload(new)) => {
                    tracing::info!(target: "efftemp::audit", units = new.units.len(), "configuration reloaded");
                    site = new;
                }
                _ => return Ok::<(), crate::app::service::ServiceError>(()),
            }
        }
    });
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            tracing::error!(error = %e, "service failed");
            eprintln!("error: {e}");
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

fn replay(
    path: &std::path::Path,
    paths: &[PathBuf],
    output: Option<PathBuf>,
    format: LogFormat,
    level: &str,
) -> ExitCode {
    if let Err(e) = crate::app::logging::init(format, level) {
        eprintln!("error: {e}");
        return ExitCode::from(EXIT_CONFIG);
    }
    let mut site = match load_site(path) {
        Ok(s) => s,
        Err(code) => return code,
    };
    for p in paths {
        if !p.is_dir() {
            eprintln!("error: {}: not a directory (give export directories)", p.display());
            return ExitCode::from(EXIT_CONFIG);
        }
    }
    if !paths.is_empty() {
        for u in &mut site.units {
            let hit = paths.iter().find(|p| {
                std::fs::read_dir(p).into_iter().flatten().flatten().any(|e| {
                    e.file_name()
                        .to_str()
                        .is_some_and(|n| crate::ingest::glob::name_matches(&u.input.pattern, n))
                })
            });
            match hit {
                Some(p) => u.input.directory = p.clone(),
                None => {
                    eprintln!(
                        "warning: no file for unit {} ({}) in the given paths; it reads nothing",
                        u.spec.name, u.input.pattern
                    );
                    u.input.directory = p_nowhere();
                }
            }
        }
    }
    match crate::app::service::replay(&site, output) {
        Ok(s) => {
            println!(
                "replay: {} record(s), {} interval(s) written, {} rejected, {} alert event(s)",
                s.records, s.intervals, s.rejected, s.alert_events
            );
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

fn demo(seed: u64, days: f64, speed: Option<f64>, out: Option<PathBuf>, discard: bool) -> ExitCode {
    if !(days > 0.0 && days <= 60.0) {
        eprintln!("error: --days must be within (0, 60]");
        return ExitCode::from(EXIT_CONFIG);
    }
    let _ = crate::app::logging::init(LogFormat::Text, "warn");
    let opts = crate::app::demo::DemoOptions { seed, days, speed, out, discard, verbose: true };
    match crate::app::demo::run(&opts) {
        Ok(r) => {
            println!("{}", crate::app::demo::scorecard(&r));
            if !discard {
                println!("Files (kept in {}):", r.dir.display());
                if let (Some(a), Some(b)) = (r.soft_tags.first(), r.soft_tags.last()) {
                    println!(
                        "  soft tags:     {} files, {} .. {}",
                        r.soft_tags.len(),
                        a.display(),
                        b.display()
                    );
                }
                if let Some(a) = r.alert_logs.first() {
                    println!("  alert log:     {} files, e.g. {}", r.alert_logs.len(), a.display());
                }
                if let Some(last) = r.reports.last() {
                    println!("  shift reports: {} files, latest {}", r.reports.len(), last.display());
                }
                println!("  configuration: {}", r.dir.join("site.toml").display());
                println!("  (try: efftemp report --config {} --last)", r.dir.join("site.toml").display());
            }
            println!("\n{}", crate::CAUTION);
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: demo failed: {e:#}");
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

fn report(path: &std::path::Path, unit: Option<&str>, shift: Option<&str>) -> ExitCode {
    let site = match load_site(path) {
        Ok(s) => s,
        Err(code) => return code,
    };
    let units: Vec<&crate::config::UnitConfig> =
        site.units.iter().filter(|u| unit.is_none_or(|n| n == u.spec.name)).collect();
    if units.is_empty() {
        eprintln!("error: no unit `{}` in the configuration", unit.unwrap_or(""));
        return ExitCode::from(EXIT_CONFIG);
    }
    for u in units {
        let at = match shift {
            None => None,
            Some(text) => {
                let parsed = text.parse::<jiff::Timestamp>().map(|t| t.as_millisecond()).or_else(|_| {
                    text.parse::<jiff::civil::DateTime>()
                        .map_err(|e| e.to_string())
                        .and_then(|dt| {
                            dt.to_zoned_datetime(u.spec.time_zone.clone()).map_err(|e| e.to_string())
                        })
                        .map(|z| z.timestamp().as_millisecond())
                });
                match parsed {
                    Ok(ms) => Some(ms),
                    Err(_) => {
                        eprintln!("error: --shift `{text}` is not a time (RFC 3339 or YYYY-MM-DDTHH:MM)");
                        return ExitCode::from(EXIT_CONFIG);
                    }
                }
            }
        };
        let shift = match at {
            Some(ms) => crate::core::calendar::shift_containing(ms, &site.shifts, &u.spec.time_zone),
            // Without --shift: the last completed shift before the newest data on disk (the
            // last row of the newest soft-tag file), or before now.
            None => {
                let newest = crate::sinks::softtags::newest_soft_tag_ms(
                    &site.output_dir.join(&u.spec.name),
                    &u.spec.name,
                    false,
                )
                .ok()
                .flatten();
                crate::core::calendar::last_completed(
                    newest.unwrap_or_else(|| jiff::Timestamp::now().as_millisecond()),
                    &site.shifts,
                    &u.spec.time_zone,
                )
            }
        };
        let Some(shift) = shift else {
            eprintln!("error: cannot determine the shift");
            return ExitCode::from(EXIT_RUNTIME);
        };
        match crate::sinks::report::write(
            &crate::sinks::report::ReportUnit::new(&site.name, &u.description, &u.spec),
            &site.output_dir,
            &shift,
        ) {
            Ok((path, text)) => {
                print!("{text}");
                println!("  report: {}", path.display());
            }
            Err(e) => {
                eprintln!("error: cannot write the report: {e}");
                return ExitCode::from(EXIT_RUNTIME);
            }
        }
    }
    ExitCode::SUCCESS
}

fn request(
    path: &std::path::Path,
    unit: &str,
    action: &str,
    selector: Option<String>,
    duration: Option<String>,
    reason: &str,
    by: Option<String>,
) -> ExitCode {
    let site = match load_site(path) {
        Ok(s) => s,
        Err(code) => return code,
    };
    let Some(u) = site.units.iter().find(|u| u.spec.name == unit) else {
        eprintln!("error: no unit `{unit}` in the configuration");
        return ExitCode::from(EXIT_CONFIG);
    };
    if reason.trim().is_empty() {
        eprintln!("error: --reason is required for the audit trail");
        return ExitCode::from(EXIT_CONFIG);
    }
    let until = match duration {
        None => None,
        Some(d) => match crate::config::parse_duration_ms(&d) {
            Ok(ms) if ms <= u.spec.alerts.shelve_max_ms => jiff::Timestamp::now()
                .checked_add(jiff::SignedDuration::from_millis(ms))
                .ok()
                .map(|t| t.to_string()),
            Ok(_) => {
                eprintln!(
                    "error: shelving is limited to {} h for this unit",
                    u.spec.alerts.shelve_max_ms / 3_600_000
                );
                return ExitCode::from(EXIT_CONFIG);
            }
            Err(e) => {
                eprintln!("error: --for: {e}");
                return ExitCode::from(EXIT_CONFIG);
            }
        },
    };
    let by = by.or_else(|| std::env::var("USER").ok()).unwrap_or_else(|| "unknown".into());
    let req = crate::pipeline::Request {
        unit: unit.to_string(),
        action: action.to_string(),
        selector,
        until,
        reason: reason.to_string(),
        by,
    };
    let dir = site.state_dir.join("requests");
    let nanos =
        std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_nanos());
    let path = dir.join(format!("{nanos}-{unit}-{action}.json"));
    let res = std::fs::create_dir_all(&dir)
        .and_then(|()| serde_json::to_string_pretty(&req).map_err(std::io::Error::other))
        .and_then(|text| {
            let tmp = path.with_extension("tmp");
            std::fs::write(&tmp, text).and_then(|()| std::fs::rename(&tmp, &path))
        });
    match res {
        Ok(()) => {
            println!(
                "{action} request for {unit} queued ({}); the service applies it at its next pass and logs it",
                path.display()
            );
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: cannot queue the request: {e}");
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

fn identify(path: &std::path::Path, unit: &str, max_dead_time: &str) -> ExitCode {
    let mut site = match load_site(path) {
        Ok(s) => s,
        Err(code) => return code,
    };
    site.units.retain(|u| u.spec.name == unit);
    let Some(u) = site.units.first_mut() else {
        eprintln!("error: no unit `{unit}` in the configuration");
        return ExitCode::from(EXIT_CONFIG);
    };
    // Replay without compensation into a scratch directory, then fit the dynamics.
    u.spec.monitor.dead_time_ms = 0;
    u.spec.monitor.lag_ms = 0;
    let interval = u.spec.interval_ms;
    let tz = u.spec.time_zone.clone();
    let max_delay = match crate::config::parse_duration_ms(max_dead_time) {
        Ok(ms) => usize::try_from(ms / interval).unwrap_or(30).max(1),
        Err(e) => {
            eprintln!("error: --max-dead-time: {e}");
            return ExitCode::from(EXIT_CONFIG);
        }
    };
    site.shift_reports = false;
    let scratch = std::env::temp_dir().join(format!("efftemp-identify-{}", std::process::id()));
    if let Err(e) = crate::app::service::replay(&site, Some(scratch.clone())) {
        eprintln!("error: {e}");
        return ExitCode::from(EXIT_RUNTIME);
    }
    let rows = crate::sinks::report::load_rows(&scratch.join(unit), unit, 0, i64::MAX, &tz);
    let _ = std::fs::remove_dir_all(&scratch);
    // The longest stretch without gaps.
    let mut best: (usize, usize) = (0, 0);
    let mut start = 0;
    for i in 0..rows.len() {
        let ok = rows[i].predicted.is_some() && rows[i].measured.is_some();
        let contiguous = i > 0 && rows[i].t_ms - rows[i - 1].t_ms == interval;
        if !ok || (i > start && !contiguous) {
            start = if ok { i } else { i + 1 };
        }
        if ok && i + 1 - start > best.1 - best.0 {
            best = (start, i + 1);
        }
    }
    let seg = &rows[best.0..best.1];
    let pred: Vec<f64> = seg.iter().filter_map(|r| r.predicted).collect();
    let meas: Vec<f64> = seg.iter().filter_map(|r| r.measured).collect();
    match crate::core::monitor::dynamics::identify(&pred, &meas, max_delay) {
        Some(id) => {
            let s = interval as f64 / 1000.0;
            println!(
                "{unit}: dead time ~ {:.0} s, lag ~ {:.0} s (from {} contiguous intervals; peak correlation of the differenced series {:.2}, fit residual {:.3})",
                id.delay as f64 * s,
                id.tau * s,
                pred.len(),
                id.correlation,
                id.fit_sd
            );
            println!(
                "dead time consistent with the data: {:.0}-{:.0} s; the fitted dynamics remove {:.0} % of the squared error of the uncompensated prediction",
                id.delay_range.0 as f64 * s,
                id.delay_range.1 as f64 * s,
                100.0 * id.improvement
            );
            if id.trustworthy {
                println!(
                    "put into [unit.monitor]: dead_time = \"{:.0}s\", lag = \"{:.0}s\"",
                    id.delay as f64 * s,
                    id.tau * s
                );
            } else {
                eprintln!(
                    "warning: weak estimate (the peak correlation is not clearly above chance or several dead times fit about as well): keep the configured values, or run this on a period with clear duty or feed-rate moves"
                );
            }
            ExitCode::SUCCESS
        }
        None => {
            eprintln!(
                "error: not enough contiguous data with moves in the prediction to identify the dynamics"
            );
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

/// What the signal task asks the service loop to do.
enum Control {
    /// Stop (SIGTERM, SIGINT, or the signal task ended).
    Stop,
    /// Restart with a validated new configuration (SIGHUP).
    Reload(std::sync::Arc<SiteConfig>),
}

async fn signals(path: PathBuf, tx: tokio::sync::mpsc::Sender<Control>) {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{SignalKind, signal};
        let (Ok(mut term), Ok(mut int), Ok(mut hup)) =
            (signal(SignalKind::terminate()), signal(SignalKind::interrupt()), signal(SignalKind::hangup()))
        else {
            let _ = tokio::signal::ctrl_c().await;
            let _ = tx.send(Control::Stop).await;
            return;
        };
        loop {
            tokio::select! {
                _ = term.recv() => break,
                _ = int.recv() => break,
                _ = hup.recv() => {
                    match SiteConfig::load(&path) {
                        Ok(site) => {
                            if tx.send(Control::Reload(std::sync::Arc::new(site))).await.is_err() {
                                return;
                            }
                        }
                        Err(errors) => {
                            for e in &errors.0 {
                                tracing::error!(error = %e, "reload refused: the new configuration has a problem; the running one stays in force");
                            }
                        }
                    }
                }
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = path;
        let _ = tokio::signal::ctrl_c().await;
    }
    let _ = tx.send(Control::Stop).await;
}

/// A directory that does not exist (a unit with nothing to replay).
fn p_nowhere() -> PathBuf {
    PathBuf::from("/nonexistent/efftemp-replay")
}

fn calc(path: &std::path::Path, json: bool) -> ExitCode {
    let report = match Case::load(path).and_then(|case| case.run()) {
        Ok(r) => r,
        Err(errors) => {
            for e in &errors.0 {
                eprintln!("error: {e}");
            }
            return ExitCode::from(EXIT_CONFIG);
        }
    };
    let text = if json { report.to_json() } else { report.to_text() };
    let mut out = std::io::stdout().lock();
    match writeln!(out, "{text}") {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: cannot write the report: {e}");
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use clap::CommandFactory;

    #[test]
    fn cli_definition_is_consistent() {
        super::Cli::command().debug_assert();
    }
}
