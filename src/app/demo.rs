//! `efftemp demo`: the whole job in one command. The embedded simulator writes historian-style
//! exports into a fresh directory in accelerated time while the real service (the same code
//! path as `run`, watching the directory) processes them; alerts are printed as they happen,
//! and at the end a scorecard compares them with the injected events.

use std::fmt::Write as _;
use std::io::{IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicI64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use crate::app::logging::{err_line, err_text};
use crate::app::service::{self, Wake};
use crate::app::sim::{self, Event, Plant, Scenario};
use crate::config::SiteConfig;
use crate::core::alerts::{AlertEvent, EventKind as AlertKind};
use crate::core::vocabulary::Cause;

/// Demo options.
#[derive(Debug, Clone)]
pub struct DemoOptions {
    /// Simulator seed.
    pub seed: u64,
    /// Simulated days.
    pub days: f64,
    /// Simulated seconds per wall second (`None`: finish the writing in about 40 s).
    pub speed: Option<f64>,
    /// Directory for everything (default: a fresh directory under the system temp dir).
    pub out: Option<PathBuf>,
    /// Delete the directory at the end.
    pub discard: bool,
    /// Print alerts as they happen.
    pub verbose: bool,
}

/// One line of the scorecard.
#[derive(Debug, Clone, PartialEq)]
pub struct Score {
    /// The injected event.
    pub event: Event,
    /// The first alert raised after the event started (within its window), if any.
    pub first_alert: Option<AlertEvent>,
    /// Whether that alert's cause is the expected one.
    pub right_cause: bool,
    /// Detection delay, minutes.
    pub delay_min: Option<f64>,
    /// Minutes until an alert named the expected cause (it may first have been raised as
    /// `undetermined` and attributed later), if it did within the event's window.
    pub named_after_min: Option<f64>,
}

/// The demo's results.
#[derive(Debug, Clone)]
pub struct DemoResult {
    /// Directory with exports, state and outputs.
    pub dir: PathBuf,
    /// Per injected event.
    pub scores: Vec<Score>,
    /// Alerts raised outside every event window (false alerts).
    pub false_alerts: Vec<AlertEvent>,
    /// Soft-tag files.
    pub soft_tags: Vec<PathBuf>,
    /// Alert logs.
    pub alert_logs: Vec<PathBuf>,
    /// Shift reports.
    pub reports: Vec<PathBuf>,
    /// All alert events.
    pub events: Vec<AlertEvent>,
}

fn fresh_dir(opts: &DemoOptions) -> std::io::Result<PathBuf> {
    let dir = match &opts.out {
        Some(d) => d.clone(),
        None => {
            let nanos = std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_nanos());
            std::env::temp_dir().join(format!("efftemp-demo-{}-{nanos}", std::process::id()))
        }
    };
    if dir.exists() && std::fs::read_dir(&dir)?.next().is_some() {
        return Err(std::io::Error::other(format!(
            "{} is not empty; give an empty or new directory",
            dir.display()
        )));
    }
    std::fs::create_dir_all(dir.join("exports"))?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::create_dir_all(dir.join("state"))?;
        std::fs::set_permissions(dir.join("state"), std::fs::Permissions::from_mode(0o750))?;
    }
    Ok(dir)
}

/// How long after an event's start an alert still counts as its detection, ms.
fn window_ms(e: &Event) -> i64 {
    let after = match e.kind {
        sim::EventKind::HeaterFouling => 10 * 86_400_000,
        _ => 12 * 3_600_000,
    };
    (e.end_s - e.start_s) * 1000 + after
}

/// Score the alert events against the injected events.
pub fn score(events: &[AlertEvent], injected: &[Event]) -> (Vec<Score>, Vec<AlertEvent>) {
    let raised: Vec<&AlertEvent> = events.iter().filter(|e| e.event == AlertKind::Raised).collect();
    let scores = injected
        .iter()
        .map(|inj| {
            let start = inj.start_s * 1000;
            let inside = |t_ms: i64| t_ms >= start && t_ms <= start + window_ms(inj);
            let expected = inj.kind.expected_cause();
            // An instrument fault must also name the instrument.
            let tag_ok = |a: &AlertEvent| {
                expected != Cause::InstrumentFault
                    || inj.tag.as_deref().is_none_or(|t| a.subject.split(':').next() == Some(t))
            };
            // The first alert in the window that could be about this event (validity notes and,
            // unless expected, data-quality alerts are not).
            let first = raised
                .iter()
                .filter(|a| inside(a.time_ms))
                .find(|a| match a.cause {
                    Cause::ModelValidity => false,
                    Cause::DataQuality => expected == Cause::DataQuality,
                    _ => true,
                })
                .copied();
            // Without an effluent analyzer, "undetermined" is the honest answer for a chemistry
            // or heater drift the data cannot separate.
            let acceptable = |a: &AlertEvent| {
                (a.cause == expected && tag_ok(a))
                    || (a.cause == Cause::Undetermined
                        && matches!(expected, Cause::ConversionDrift | Cause::HeaterFouling))
            };
            let named = events
                .iter()
                .filter(|a| a.event != AlertKind::Cleared && inside(a.time_ms))
                .find(|a| a.cause == expected && tag_ok(a));
            Score {
                event: inj.clone(),
                right_cause: first.is_some_and(acceptable),
                delay_min: first.map(|a| (a.time_ms - start) as f64 / 60_000.0),
                named_after_min: named.map(|a| (a.time_ms - start) as f64 / 60_000.0),
                first_alert: first.cloned(),
            }
        })
        .collect();
    let false_alerts = raised
        .iter()
        .filter(|a| {
            !injected.iter().any(|inj| {
                a.time_ms >= inj.start_s * 1000 && a.time_ms <= inj.start_s * 1000 + window_ms(inj)
            })
        })
        .map(|a| (*a).clone())
        .collect();
    (scores, false_alerts)
}

fn files(dir: &Path, prefix: &str) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .into_iter()
        .flatten()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.file_name().and_then(|n| n.to_str()).is_some_and(|n| n.starts_with(prefix)))
        .collect();
    v.sort();
    v
}

fn day_label(ms: i64) -> String {
    jiff::Timestamp::from_millisecond(ms)
        .map(|t| t.strftime("%Y-%m-%d %H:%M").to_string())
        .unwrap_or_default()
}

/// Write the demo's site file into `dir` and load it.
fn write_site(dir: &Path, scenario: &Scenario) -> anyhow::Result<Arc<SiteConfig>> {
    let cfg_path = dir.join("site.toml");
    std::fs::write(
        &cfg_path,
        sim::site_config("exports", "state", "output", scenario.conversion_analyzer, "10m", 100),
    )?;
    Ok(Arc::new(SiteConfig::load(&cfg_path).map_err(|e| anyhow::anyhow!("demo configuration: {e}"))?))
}

/// Say what the demo simulates and which events it injects.
fn announce(opts: &DemoOptions, scenario: &Scenario, speed: f64, dir: &Path) {
    err_line(format_args!(
        "efftemp demo: reactor R-204 of the (invented) Larchmoor works, {} simulated days from {} at {:.0}x; files in {}",
        opts.days,
        day_label(sim::START_S * 1000),
        speed,
        dir.display()
    ));
    err_line(format_args!("  injected events:"));
    for e in &scenario.events {
        err_line(format_args!("    {}  {}", day_label(e.start_s * 1000), e.description));
    }
    err_line(format_args!(
        "  the first ~1.5 days teach the monitor its baseline; alerts appear below as the service raises them.\n"
    ));
}

/// What the service's observer shares with the demo while it runs: how far the service has
/// processed, the alert events and the shift reports so far.
#[derive(Default)]
struct Seen {
    last_end: Arc<AtomicI64>,
    events: Arc<Mutex<Vec<AlertEvent>>>,
    reports: Arc<Mutex<Vec<PathBuf>>>,
}

impl Seen {
    /// The service's observer: records progress, events and reports, and prints each alert
    /// event when `verbose` (clearing a progress line first on a terminal).
    fn observer(&self, verbose: bool, tty: bool) -> service::Observer {
        let (le, ev, rp) = (self.last_end.clone(), self.events.clone(), self.reports.clone());
        Box::new(move |p| {
            for u in &p.units {
                if let Some(last) = &u.last {
                    le.store(last.end_ms, Ordering::Relaxed);
                }
                for e in &u.new_events {
                    if verbose {
                        print_event(e, tty);
                    }
                    if let Ok(mut v) = ev.lock() {
                        v.push(e.clone());
                    }
                }
                for (path, _) in &u.new_reports {
                    if let Ok(mut v) = rp.lock() {
                        v.push(path.clone());
                    }
                }
            }
        })
    }
}

/// One alert event as a line on standard error.
fn print_event(e: &AlertEvent, tty: bool) {
    let mark = match e.event {
        AlertKind::Raised => "RAISED ",
        AlertKind::Updated => "update ",
        AlertKind::Cleared => "cleared",
    };
    let head = format!(
        "[{}] {mark} {:<16} {:<6} {}: ",
        day_label(e.time_ms),
        e.cause.as_str(),
        e.severity.as_str(),
        e.subject
    );
    // Whole messages; on a terminal wrapped at word boundaries under the message column.
    let text =
        if tty { wrap_words(&head, &e.message, CONSOLE_WIDTH) } else { format!("{head}{}", e.message) };
    err_line(format_args!("{}{text}", if tty { "\r\x1b[K" } else { "" }));
}

/// Width the demo's console lines are wrapped to on a terminal.
const CONSOLE_WIDTH: usize = 120;

/// `head` followed by `text` wrapped at word boundaries to `width` columns, continuation lines
/// indented to where the text starts (or by 4 when the head is too wide). No word is cut; a
/// word longer than a line stands alone on its line.
fn wrap_words(head: &str, text: &str, width: usize) -> String {
    let start = head.chars().count();
    let indent = if start + 20 <= width { start } else { 4 };
    let mut out = head.to_string();
    let mut col = start;
    let mut first = true;
    for word in text.split_whitespace() {
        let n = word.chars().count();
        if !first && col + 1 + n > width {
            out.push('\n');
            out.extend(std::iter::repeat_n(' ', indent));
            col = indent;
            first = true;
        }
        if !first {
            out.push(' ');
            col += 1;
        }
        out.push_str(word);
        col += n;
        first = false;
    }
    out
}

/// Append the plant's rows up to simulated time `target` to the export files (one file per
/// day, a header first in a new file).
fn append_rows(plant: &mut Plant, target: i64, exports: &Path) -> std::io::Result<()> {
    let mut chunks: Vec<(String, String)> = Vec::new();
    while plant.time_s() <= target {
        let t = plant.time_s();
        let Some(row) = plant.next_row() else { break };
        let name = Plant::file_name(t);
        match chunks.last_mut() {
            Some((n, text)) if *n == name => {
                text.push_str(&row);
                text.push('\n');
            }
            _ => chunks.push((name, format!("{row}\n"))),
        }
    }
    for (name, text) in chunks {
        let path = exports.join(&name);
        let fresh = !path.exists();
        let mut f = std::fs::OpenOptions::new().create(true).append(true).open(&path)?;
        if fresh {
            writeln!(f, "{}", Plant::header())?;
        }
        f.write_all(text.as_bytes())?;
    }
    Ok(())
}

/// The writer: the plant in accelerated time, writing into the export directory.
struct Writer<'a> {
    scenario: &'a Scenario,
    exports: PathBuf,
    /// Simulated seconds per wall second.
    speed: f64,
    /// Simulated seconds from the start to the end of the scenario.
    total_s: i64,
    /// Redraw a progress line (verbose, on a terminal).
    progress: bool,
    seen: &'a Seen,
}

impl Writer<'_> {
    /// Write the plant's rows as their simulated time comes (from `started`) until the scenario
    /// ends, then give the service up to 2 minutes to process the last complete interval.
    async fn run(&self, started: Instant) -> anyhow::Result<()> {
        let mut plant = Plant::new(self.scenario.clone());
        let mut last_draw = Instant::now();
        loop {
            let target = sim::START_S + (started.elapsed().as_secs_f64() * self.speed) as i64;
            append_rows(&mut plant, target, &self.exports)?;
            if self.progress && last_draw.elapsed() > Duration::from_millis(250) {
                self.draw_progress(&plant);
                last_draw = Instant::now();
            }
            if plant.time_s() >= self.scenario.end_s() {
                break;
            }
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
        // Let the service catch up with the last complete interval.
        let goal = (self.scenario.end_s() - 120) * 1000;
        let deadline = Instant::now() + Duration::from_secs(120);
        while self.seen.last_end.load(Ordering::Relaxed) < goal && Instant::now() < deadline {
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
        Ok(())
    }

    /// The progress line: simulated time, how far the service has processed, alerts raised.
    fn draw_progress(&self, plant: &Plant) {
        let done = (plant.time_s() - sim::START_S) as f64 / self.total_s as f64;
        let n = self
            .seen
            .events
            .lock()
            .map(|v| v.iter().filter(|e| e.event == AlertKind::Raised).count())
            .unwrap_or(0);
        err_text(format_args!(
            "\r\x1b[K  simulated {} ({:.0} %), processed to {}, {n} alert(s) raised ",
            day_label(plant.time_s() * 1000),
            done * 100.0,
            day_label(self.seen.last_end.load(Ordering::Relaxed))
        ));
        let _ = std::io::stderr().flush();
    }
}

/// What the demo left in `dir`: the unit's alert events scored against the injected events,
/// and its output files.
fn results(dir: &Path, scenario: &Scenario) -> DemoResult {
    let out = dir.join("output").join("R-204");
    let all = crate::sinks::report::load_events(&out, "R-204", i64::MAX);
    let (scores, false_alerts) = score(&all, &scenario.events);
    DemoResult {
        dir: dir.to_path_buf(),
        scores,
        false_alerts,
        soft_tags: files(&out, "softtags-"),
        alert_logs: files(&out, "alerts-"),
        reports: files(&out.join("reports"), "shift-"),
        events: all,
    }
}

/// Run the demo.
pub fn run(opts: &DemoOptions) -> anyhow::Result<DemoResult> {
    let dir = fresh_dir(opts)?;
    let scenario = Scenario::demo(opts.seed, opts.days);
    let total_s = scenario.end_s() - sim::START_S;
    let speed = opts.speed.unwrap_or(total_s as f64 / 40.0).max(1.0);
    let site = write_site(&dir, &scenario)?;
    let tty = std::io::stderr().is_terminal();
    if opts.verbose {
        announce(opts, &scenario, speed, &dir);
    }
    let rt = tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build()?;
    let seen = Seen::default();
    let observer = seen.observer(opts.verbose, tty);
    let writer = Writer {
        scenario: &scenario,
        exports: dir.join("exports"),
        speed,
        total_s,
        progress: tty && opts.verbose,
        seen: &seen,
    };
    let started = Instant::now();
    let result: anyhow::Result<()> = rt.block_on(async {
        let (tx, rx) = tokio::sync::oneshot::channel::<()>();
        let svc = tokio::spawn(service::run(
            site.clone(),
            Wake::Watchers,
            async move {
                let _ = rx.await;
            },
            Some(observer),
            None,
        ));
        writer.run(started).await?;
        let _ = tx.send(());
        svc.await??;
        Ok(())
    });
    result?;
    if tty && opts.verbose {
        err_text(format_args!("\r\x1b[K"));
    }
    let res = results(&dir, &scenario);
    if opts.discard {
        std::fs::remove_dir_all(&dir)?;
    }
    Ok(res)
}

/// The scorecard as text.
pub fn scorecard(r: &DemoResult) -> String {
    let mut s = String::from("\nScorecard (injected event -> first alert)\n");
    for sc in &r.scores {
        let verdict = match (&sc.first_alert, sc.right_cause) {
            (Some(a), true) if a.cause == Cause::Undetermined => format!(
                "detected after {:.0} min as undetermined (no effluent analyzer){}",
                sc.delay_min.unwrap_or(0.0),
                match sc.named_after_min {
                    Some(m) => format!("; named {} after {:.1} h", sc.event.kind.expected_cause(), m / 60.0),
                    None => format!("; not yet separable as {}", sc.event.kind.expected_cause()),
                }
            ),
            (Some(a), true) => format!(
                "detected after {:.0} min as {} ({})",
                sc.delay_min.unwrap_or(0.0),
                a.cause.as_str(),
                a.subject
            ),
            (Some(a), false) => format!(
                "alert after {:.0} min but as {} ({}) (expected {}{})",
                sc.delay_min.unwrap_or(0.0),
                a.cause.as_str(),
                a.subject,
                sc.event.kind.expected_cause(),
                sc.event.tag.as_deref().map(|t| format!(" on {t}")).unwrap_or_default()
            ),
            (None, _) => "NOT detected".to_string(),
        };
        let _ = writeln!(
            s,
            "  {}  {}\n      -> {verdict}",
            day_label(sc.event.start_s * 1000),
            sc.event.description
        );
    }
    let _ = writeln!(s, "  alerts outside the event windows (false alerts): {}", r.false_alerts.len());
    for a in &r.false_alerts {
        let _ = writeln!(
            s,
            "    {} {} {}: {}",
            day_label(a.time_ms),
            a.cause.as_str(),
            a.subject,
            a.message.chars().take(100).collect::<String>()
        );
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Console messages are printed whole and wrapped only between words.
    #[test]
    fn long_messages_are_wrapped_at_word_boundaries_not_cut() {
        let head = "[day  3 14:20] RAISED  fouling          warning R-204: ";
        let msg = "heater effectiveness fell from 0.93 to 0.87 over 6 days (trend -0.010/day); at this rate the cleaning limit 0.85 is reached in about 2 days; check the heater and plan a cleaning before the next campaign";
        let text = wrap_words(head, msg, 100);
        let words: Vec<&str> = text.split_whitespace().collect();
        let want: Vec<&str> = head.split_whitespace().chain(msg.split_whitespace()).collect();
        assert_eq!(words, want, "every word, whole and in order");
        let lines: Vec<&str> = text.lines().collect();
        assert!(lines.len() > 1);
        for l in &lines {
            assert!(l.chars().count() <= 100, "{l:?}");
        }
        for l in &lines[1..] {
            assert!(l.starts_with(&" ".repeat(head.len())) && !l[head.len()..].starts_with(' '), "{l:?}");
        }
        assert_eq!(wrap_words("a: ", "short", 100), "a: short");
    }
}
