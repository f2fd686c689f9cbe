//! The commands. Each returns `Ok` or a [`Failure`]; [`crate::app::cli`] prints the failure and
//! maps it to the exit code. What a command prints on standard output goes through `say`,
//! so that a closed pipe ends it quietly.

use std::fmt::Display;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::app::logging::{LogFormat, err_line};
use crate::app::signals::{Control, signals};
use crate::config::case::Case;
use crate::config::{SiteConfig, UnitConfig};
use crate::requests::{Action, Request};
use crate::source::LocatedErrors;

/// Why a command did not succeed.
#[derive(Debug)]
pub enum Failure {
    /// A usage error (exit 2).
    Usage(String),
    /// The site configuration has problems (exit 2), each located.
    Site(LocatedErrors),
    /// The case file has problems (exit 2), each located.
    Case(LocatedErrors),
    /// The command failed while running (exit 1).
    Runtime(String),
    /// `calc --strict`: the result is outside the model's validity (exit 3).
    Invalid(String),
    /// Standard output was closed by its reader: stop quietly (exit 0).
    Closed,
}

/// Print a line on standard output.
fn say(text: impl Display) -> Result<(), Failure> {
    let mut out = std::io::stdout().lock();
    match writeln!(out, "{text}") {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Err(Failure::Closed),
        Err(e) => Err(Failure::Runtime(format!("cannot write to standard output: {e}"))),
    }
}

fn load_site(path: &Path) -> Result<SiteConfig, Failure> {
    SiteConfig::load(path).map_err(Failure::Site)
}

fn logging(format: LogFormat, level: &str) -> Result<(), Failure> {
    crate::app::logging::init(format, level).map_err(Failure::Usage)
}

fn unit<'a>(site: &'a SiteConfig, name: &str) -> Result<&'a UnitConfig, Failure> {
    site.units
        .iter()
        .find(|u| u.spec.name == name)
        .ok_or_else(|| Failure::Usage(format!("no unit `{name}` in the configuration")))
}

/// `efftemp calc`; with `strict`, a result with validity warnings is printed, then fails.
pub fn calc(path: &Path, json: bool, strict: bool) -> Result<(), Failure> {
    let report = Case::load(path).and_then(|case| case.run()).map_err(Failure::Case)?;
    say(if json { report.to_json() } else { report.to_text() })?;
    match report.validity_warnings() {
        n if strict && n > 0 => Err(Failure::Invalid(format!(
            "{}: the result has {n} validity warning(s) (listed with it); --strict treats it as outside the model's validity",
            path.display()
        ))),
        _ => Ok(()),
    }
}

/// `efftemp check`: the summary of a valid configuration, with its notes.
pub fn check(path: &Path) -> Result<(), Failure> {
    let site = load_site(path)?;
    say(format_args!("configuration OK: site \"{}\", {} unit(s)", site.name, site.units.len()))?;
    for note in &site.notes {
        say(format_args!("  note: {note}"))?;
    }
    for u in &site.units {
        say(unit_summary(u))?;
        for note in &u.notes {
            say(format_args!("  note: {note}"))?;
        }
    }
    say(format_args!("  state: {}; output: {}", site.state_dir.display(), site.output_dir.display()))?;
    warn_inputs(&site);
    Ok(())
}

/// Print a located warning for each unit whose export directory cannot be read now.
fn warn_inputs(site: &SiteConfig) {
    for w in site.units.iter().filter_map(UnitConfig::directory_warning) {
        eprintln!("warning: {w}");
    }
}

/// One unit's line in the `check` summary.
fn unit_summary(u: &UnitConfig) -> String {
    let comps: Vec<String> = u
        .spec
        .system
        .components
        .iter()
        .zip(&u.spec.system.paths)
        .map(|(c, p)| format!("{} ({})", c.id, p.as_str()))
        .collect();
    let info = u.spec.info.len();
    format!(
        "  {}: {} tag(s){}, interval {} s, input {}/{} ({}), components {}",
        u.spec.name,
        u.spec.tags.len(),
        if info > 0 { format!(" ({info} informational)") } else { String::new() },
        u.spec.interval_ms / 1000,
        u.input.directory.display(),
        u.input.pattern,
        layout_text(&u.input.layout),
        comps.join(", ")
    )
}

/// A layout in words: "wide", or "long: columns tag, value, quality".
fn layout_text(layout: &crate::ingest::settings::Layout) -> String {
    use crate::ingest::settings::Layout;
    match layout {
        Layout::Wide => "wide".to_string(),
        Layout::Long { tag, value, quality } => {
            let q = quality.as_ref().map_or(String::new(), |q| format!(", {q}"));
            format!("long: columns {tag}, {value}{q}")
        }
    }
}

/// `efftemp run`: the service until SIGTERM/SIGINT; SIGHUP reloads a validated configuration.
pub fn run(path: &Path, format: LogFormat, level: &str) -> Result<(), Failure> {
    logging(format, level)?;
    let site = Arc::new(load_site(path)?);
    for note in &site.notes {
        tracing::warn!(note = %note, "configuration note");
    }
    for note in site.units.iter().flat_map(|u| &u.notes) {
        tracing::info!(note = %note, "configuration note");
    }
    let rt = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .build()
        .map_err(|e| Failure::Runtime(format!("cannot start the runtime: {e}")))?;
    let config_path = path.to_path_buf();
    let result = rt.block_on(async move {
        let (tx, mut rx) = tokio::sync::mpsc::channel::<Control>(4);
        tokio::spawn(signals(config_path, tx));
        // Health and metrics outlive reloads.
        let (snap_tx, snap_rx) = tokio::sync::watch::channel(crate::app::http::Snapshot::default());
        if let Some(addr) = site.service.http_address {
            match tokio::net::TcpListener::bind(addr).await {
                Ok(listener) => {
                    tracing::info!(address = %addr, "health and metrics at /healthz, /readyz, /metrics; pages at /, /unit/<name>, /reports/, /alerts.json");
                    let pages = crate::app::http::Pages { site: site.name.clone(), output_dir: site.output_dir.clone() };
                    tokio::spawn(crate::app::http::serve_with_pages(
                        listener,
                        snap_rx,
                        Some(pages),
                        std::future::pending(),
                        crate::app::http::HttpLimits::default(),
                    ));
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
            let wake = crate::app::service::Wake::Watchers;
            crate::app::service::run(site.clone(), wake, stop, None, Some(snap_tx.clone())).await?;
            match next {
                Some(Control::Reload(new)) => {
                    tracing::info!(target: "efftemp::audit", units = new.units.len(), "configuration reloaded");
                    site = new;
                }
                _ => return Ok::<(), crate::app::service::ServiceError>(()),
            }
        }
    });
    result.map_err(|e| {
        tracing::error!(error = %e, "service failed");
        Failure::Runtime(e.to_string())
    })
}

/// `efftemp replay`.
pub fn replay(
    path: &Path,
    paths: &[PathBuf],
    output: Option<PathBuf>,
    format: LogFormat,
    level: &str,
) -> Result<(), Failure> {
    logging(format, level)?;
    let mut site = load_site(path)?;
    if let Some(p) = paths.iter().find(|p| !p.is_dir()) {
        return Err(Failure::Usage(format!("{}: not a directory (give export directories)", p.display())));
    }
    if !paths.is_empty() {
        redirect_inputs(&mut site, paths);
    }
    let s = crate::app::replay::replay(&site, output).map_err(|e| Failure::Runtime(e.to_string()))?;
    say(format_args!(
        "replay: {} record(s), {} interval(s) written, {} rejected, {} alert event(s)",
        s.records, s.intervals, s.rejected, s.alert_events
    ))
}

/// Point every unit at the first of `paths` holding files of its pattern.
fn redirect_inputs(site: &mut SiteConfig, paths: &[PathBuf]) {
    for u in &mut site.units {
        let hit = paths.iter().find(|p| {
            std::fs::read_dir(p)
                .into_iter()
                .flatten()
                .flatten()
                .any(|e| e.file_name().to_str().is_some_and(|n| u.input.selects(n)))
        });
        match hit {
            Some(p) => u.input.directory = p.clone(),
            None => {
                err_line(format_args!(
                    "warning: no file for unit {} ({}) in the given paths; it reads nothing",
                    u.spec.name, u.input.pattern
                ));
                u.input.directory = PathBuf::from("/nonexistent/efftemp-replay");
            }
        }
    }
}

/// `efftemp demo`.
pub fn demo(
    seed: u64,
    days: f64,
    speed: Option<f64>,
    out: Option<PathBuf>,
    discard: bool,
) -> Result<(), Failure> {
    demo_days(days)?;
    let _ = crate::app::logging::init(LogFormat::Text, "warn");
    let opts = crate::app::demo::DemoOptions { seed, days, speed, out, discard, verbose: true };
    let r = crate::app::demo::run(&opts).map_err(|e| Failure::Runtime(format!("demo failed: {e:#}")))?;
    say(crate::app::demo::scorecard(&r))?;
    if !discard {
        say(format_args!("Files (kept in {}):", r.dir.display()))?;
        if let (Some(a), Some(b)) = (r.soft_tags.first(), r.soft_tags.last()) {
            say(format_args!(
                "  soft tags:     {} files, {} .. {}",
                r.soft_tags.len(),
                a.display(),
                b.display()
            ))?;
        }
        if let Some(a) = r.alert_logs.first() {
            say(format_args!("  alert log:     {} files, e.g. {}", r.alert_logs.len(), a.display()))?;
        }
        if let Some(last) = r.reports.last() {
            say(format_args!("  shift reports: {} files, latest {}", r.reports.len(), last.display()))?;
        }
        let site = r.dir.join("site.toml");
        say(format_args!("  configuration: {}", site.display()))?;
        say(format_args!("  (try: {} report --config {} --last)", own_command(), site.display()))?;
    }
    say(format_args!("\n{}", crate::CAUTION))
}

/// How the user can call this binary again: `efftemp` when that name on the PATH is this very
/// binary (after `cargo install`), else its full path (e.g. under `cargo run`).
fn own_command() -> String {
    own_command_in(std::env::current_exe().ok(), std::env::var_os("PATH"))
}

/// [`own_command`] for a given executable and PATH.
fn own_command_in(exe: Option<PathBuf>, path: Option<std::ffi::OsString>) -> String {
    let me = exe.and_then(|p| std::fs::canonicalize(p).ok());
    let on_path = path.and_then(|paths| {
        std::env::split_paths(&paths)
            .map(|d| d.join("efftemp"))
            .find(|p| p.is_file())
            .and_then(|p| std::fs::canonicalize(p).ok())
    });
    match (me, on_path) {
        (Some(me), Some(found)) if me == found => "efftemp".into(),
        (Some(me), _) => me.display().to_string(),
        (None, _) => "efftemp".into(),
    }
}

/// The demo's `--days`: within (0, 60].
fn demo_days(days: f64) -> Result<(), Failure> {
    if days > 0.0 && days <= 60.0 {
        Ok(())
    } else {
        Err(Failure::Usage("--days must be within (0, 60]".into()))
    }
}

/// `efftemp demo --export-only DIR`: the demo plant's export files, without the service.
pub fn demo_exports(seed: u64, days: f64, dir: &Path) -> Result<(), Failure> {
    demo_days(days)?;
    if std::fs::read_dir(dir).is_ok_and(|mut d| d.next().is_some()) {
        return Err(Failure::Usage(format!(
            "{} is not empty: --export-only writes into a new or empty folder",
            dir.display()
        )));
    }
    let scenario = crate::app::sim::Scenario::demo(seed, days);
    let rows = crate::app::sim::write_exports(&scenario, dir)
        .map_err(|e| Failure::Runtime(format!("cannot write the exports into {}: {e}", dir.display())))?;
    let files = std::fs::read_dir(dir).map(|d| d.count()).unwrap_or(0);
    say(format_args!(
        "wrote {rows} rows of reactor R-204 (invented Larchmoor works, seed {seed}, {days} simulated days) \
         in {files} daily files to {}",
        dir.display()
    ))?;
    say("injected events (what the alerts should find):")?;
    for e in &scenario.events {
        let day = jiff::Timestamp::from_second(e.start_s)
            .map(|t| t.strftime("%Y-%m-%d %H:%M UTC").to_string())
            .unwrap_or_default();
        say(format_args!("  {day}  {}", e.description))?;
    }
    say(format_args!(
        "next: {} replay --config config/example-site.toml   (it reads var/exports/sru)",
        own_command()
    ))
}

/// `efftemp report`.
pub fn report(path: &Path, unit: Option<&str>, shift: Option<&str>) -> Result<(), Failure> {
    let site = load_site(path)?;
    let units: Vec<&UnitConfig> =
        site.units.iter().filter(|u| unit.is_none_or(|n| n == u.spec.name)).collect();
    if units.is_empty() {
        return Err(Failure::Usage(format!("no unit `{}` in the configuration", unit.unwrap_or(""))));
    }
    for u in units {
        let tz = &u.spec.time_zone;
        let shift = match shift {
            Some(text) => crate::core::calendar::shift_containing(shift_time(text, tz)?, &site.shifts, tz),
            // Without --shift: the last completed shift before the newest data on disk (the
            // last row of the newest soft-tag file), or before now.
            None => {
                let dir = site.output_dir.join(&u.spec.name);
                let newest =
                    crate::sinks::softtags::newest_soft_tag_ms(&dir, &u.spec.name, false).ok().flatten();
                let at = newest.unwrap_or_else(|| jiff::Timestamp::now().as_millisecond());
                crate::core::calendar::last_completed(at, &site.shifts, tz)
            }
        };
        let shift = shift.ok_or_else(|| Failure::Runtime("cannot determine the shift".into()))?;
        let unit = crate::sinks::report::ReportUnit::new(&site.name, &u.description, &u.spec);
        // A shift without data writes nothing (and creates no folder): exit 2 with the reason.
        let (path, text) =
            crate::sinks::report::write_from_files(&unit, &site.output_dir, &shift).map_err(|e| match e {
                crate::sinks::report::ReportError::NoData(e) => Failure::Usage(e.to_string()),
                e @ crate::sinks::report::ReportError::Io(_) => Failure::Runtime(e.to_string()),
            })?;
        say(text.trim_end_matches('\n'))?;
        say(format_args!("  report: {}", path.display()))?;
    }
    Ok(())
}

/// The instant `--shift` names: RFC 3339, or a local `YYYY-MM-DDTHH:MM` in the unit's zone.
fn shift_time(text: &str, tz: &jiff::tz::TimeZone) -> Result<i64, Failure> {
    text.parse::<jiff::Timestamp>()
        .map(|t| t.as_millisecond())
        .or_else(|_| {
            text.parse::<jiff::civil::DateTime>()
                .map_err(|e| e.to_string())
                .and_then(|dt| dt.to_zoned_datetime(tz.clone()).map_err(|e| e.to_string()))
                .map(|z| z.timestamp().as_millisecond())
        })
        .map_err(|_| Failure::Usage(format!("--shift `{text}` is not a time (RFC 3339 or YYYY-MM-DDTHH:MM)")))
}

/// What an engineer asks for on the command line.
pub enum Asked {
    /// `rebaseline`.
    Rebaseline,
    /// `shelve --selector S --for D`.
    Shelve {
        /// Selector.
        selector: String,
        /// Duration text.
        duration: String,
    },
    /// Any action that needs no checking.
    Action(Action),
}

/// `efftemp rebaseline|shelve|unshelve`: queue a request for the running service.
pub fn request(
    path: &Path,
    unit_name: &str,
    asked: Asked,
    reason: &str,
    by: Option<String>,
) -> Result<(), Failure> {
    let site = load_site(path)?;
    let u = unit(&site, unit_name)?;
    if reason.trim().is_empty() {
        return Err(Failure::Usage("--reason is required for the audit trail".into()));
    }
    let action = match asked {
        Asked::Rebaseline => Action::Rebaseline,
        Asked::Action(a) => {
            if let Action::Unshelve { selector } = &a {
                crate::requests::check_selector(selector, unit_name).map_err(Failure::Usage)?;
            }
            a
        }
        Asked::Shelve { selector, duration } => {
            crate::requests::check_selector(&selector, unit_name).map_err(Failure::Usage)?;
            let selector = selector.trim().to_string();
            let ms = crate::config::parse_duration_ms(&duration)
                .map_err(|e| Failure::Usage(format!("--for: {e}")))?;
            let max = u.spec.alerts.shelve_max_ms;
            if ms > max {
                return Err(Failure::Usage(format!(
                    "shelving is limited to {} h for this unit",
                    max / 3_600_000
                )));
            }
            let until = jiff::Timestamp::now()
                .checked_add(jiff::SignedDuration::from_millis(ms))
                .map_err(|e| Failure::Usage(format!("--for: {e}")))?;
            Action::Shelve { selector, until, duration_ms: Some(ms) }
        }
    };
    let by = by.unwrap_or_else(|| crate::app::audit::invoking_person(&crate::app::audit::from_environment()));
    let req = Request { unit: unit_name.to_string(), action, reason: reason.to_string(), by };
    let file = crate::requests::submit(&site.state_dir, &req)
        .map_err(|e| Failure::Runtime(format!("cannot queue the request: {e}")))?;
    say(format_args!(
        "{} request for {unit_name} queued ({}); the service applies it at its next pass and logs it",
        req.action_name(),
        file.display()
    ))
}

/// `efftemp identify`: replay without dynamic compensation, then fit dead time and lag.
pub fn identify(path: &Path, unit_name: &str, max_dead_time: &str) -> Result<(), Failure> {
    let mut site = load_site(path)?;
    site.units.retain(|u| u.spec.name == unit_name);
    let Some(u) = site.units.first_mut() else {
        return Err(Failure::Usage(format!("no unit `{unit_name}` in the configuration")));
    };
    u.spec.monitor.dead_time_ms = 0;
    u.spec.monitor.lag_ms = 0;
    let interval = u.spec.interval_ms;
    let tz = u.spec.time_zone.clone();
    let ms = crate::config::parse_duration_ms(max_dead_time)
        .map_err(|e| Failure::Usage(format!("--max-dead-time: {e}")))?;
    let max_delay = usize::try_from(ms / interval).unwrap_or(30).max(1);
    site.shift_reports = false;
    let scratch = std::env::temp_dir().join(format!("efftemp-identify-{}", std::process::id()));
    // Nothing read (no export directory, no files, every row rejected) says why.
    if let Err(e) = crate::app::replay::replay(&site, Some(scratch.clone())) {
        let _ = std::fs::remove_dir_all(&scratch);
        return Err(Failure::Runtime(e.to_string()));
    }
    let rows = crate::sinks::report::load_rows(&scratch.join(unit_name), unit_name, 0, i64::MAX, &tz);
    let _ = std::fs::remove_dir_all(&scratch);
    let (pred, meas) = longest_contiguous(&rows, interval);
    let id = crate::core::monitor::dynamics::identify(&pred, &meas, max_delay).ok_or_else(|| {
        Failure::Runtime(
            "not enough contiguous data with moves in the prediction to identify the dynamics".into(),
        )
    })?;
    let s = interval as f64 / 1000.0;
    say(format_args!(
        "{unit_name}: dead time ~ {:.0} s, lag ~ {:.0} s (from {} contiguous intervals; peak correlation of the differenced series {:.2}, fit residual {:.3})",
        id.delay as f64 * s,
        id.tau * s,
        pred.len(),
        id.correlation,
        id.fit_sd
    ))?;
    say(format_args!(
        "dead time consistent with the data: {:.0}-{:.0} s; the fitted dynamics remove {:.0} % of the squared error of the uncompensated prediction",
        id.delay_range.0 as f64 * s,
        id.delay_range.1 as f64 * s,
        100.0 * id.improvement
    ))?;
    if id.trustworthy {
        say(paste_lines(unit_name, id.delay as f64 * s, id.tau * s))
    } else {
        err_line(format_args!(
            "warning: weak estimate (the peak correlation is not clearly above chance or several dead times fit about as well): keep the configured values, or run this on a period with clear duty or feed-rate moves"
        ));
        Ok(())
    }
}

/// The lines `identify` prints for the site file: a comment naming the table, then `dead_time`
/// and `lag` in whole seconds, exactly as `[unit.monitor]` takes them.
fn paste_lines(unit: &str, dead_time_s: f64, lag_s: f64) -> String {
    format!(
        "# paste into [unit.monitor] of the [[unit]] named \"{unit}\":\ndead_time = \"{:.0}s\"\nlag = \"{:.0}s\"",
        dead_time_s.max(0.0),
        lag_s.max(0.0)
    )
}

/// Predicted and measured temperatures of the longest stretch of rows without gaps.
fn longest_contiguous(rows: &[crate::sinks::report::Row], interval: i64) -> (Vec<f64>, Vec<f64>) {
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
    (seg.iter().filter_map(|r| r.predicted).collect(), seg.iter().filter_map(|r| r.measured).collect())
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn the_pasted_lines_are_toml_of_the_monitor_table() {
        let text = paste_lines("R-204", 120.4, 239.6);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(
            lines,
            [
                "# paste into [unit.monitor] of the [[unit]] named \"R-204\":",
                "dead_time = \"120s\"",
                "lag = \"240s\""
            ]
        );
        let parsed: crate::config::RawMonitor = toml::from_str(&text).unwrap();
        assert_eq!(parsed.dead_time.as_deref(), Some("120s"));
        assert_eq!(parsed.lag.as_deref(), Some("240s"));
    }

    #[test]
    fn layouts_read_as_words() {
        use crate::ingest::settings::Layout;
        assert_eq!(layout_text(&Layout::Wide), "wide");
        let long = Layout::Long { tag: "tag".into(), value: "value".into(), quality: Some("q".into()) };
        assert_eq!(layout_text(&long), "long: columns tag, value, q");
    }

    /// The demo tells the user how to call the binary again: the bare name only when `efftemp`
    /// on the PATH is this binary, else its full path (nothing put it on the PATH yet).
    #[test]
    fn the_demo_names_the_binary_as_the_user_can_call_it() {
        let dir = tempfile::tempdir().unwrap();
        let bin = dir.path().join("efftemp");
        std::fs::write(&bin, "").unwrap();
        let other = tempfile::tempdir().unwrap();
        std::fs::write(other.path().join("efftemp"), "").unwrap();
        let path = |d: &Path| Some(std::ffi::OsString::from(d));
        assert_eq!(own_command_in(Some(bin.clone()), path(dir.path())), "efftemp");
        let full = std::fs::canonicalize(&bin).unwrap().display().to_string();
        assert_eq!(own_command_in(Some(bin.clone()), path(other.path())), full);
        assert_eq!(own_command_in(Some(bin), None), full);
    }
}
