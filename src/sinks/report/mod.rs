//! The shift report: one self-contained HTML file per unit per shift (inline SVG plots, no
//! scripts, no network resources, printable), and a plain-text summary for a quick look over
//! SSH. Built from the unit's outputs on disk (soft tags, alert events, ingest counters), so
//! it can be produced by the service at the end of each shift or on demand.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use jiff::Timestamp;
use jiff::tz::TimeZone;

use crate::core::alerts::{AlertEvent, EventKind};
use crate::core::calendar::Shift;
use crate::core::monitor::stats::LineFit;
use crate::core::spec::UnitSpec;
use crate::sinks::softtags::SOFT_TAG_HEADER;
use crate::units::Unit;

/// One soft-tag row.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// Interval end, ms.
    pub t_ms: i64,
    /// Predicted temperature (measured tag's unit).
    pub predicted: Option<f64>,
    /// Measured.
    pub measured: Option<f64>,
    /// Residual.
    pub residual: Option<f64>,
    /// Standard uncertainty of the prediction.
    pub u: Option<f64>,
    /// Apparent conversion.
    pub conversion: Option<f64>,
    /// Heater effectiveness.
    pub effectiveness: Option<f64>,
    /// Monitor state.
    pub state: String,
    /// Flags.
    pub flags: Vec<String>,
}

fn parse_row(line: &str) -> Option<Row> {
    let mut cells = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for c in line.chars() {
        match c {
            '"' => quoted = !quoted,
            ',' if !quoted => cells.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    cells.push(cur);
    if cells.len() < 10 {
        return None;
    }
    let f = |i: usize| cells[i].trim().parse::<f64>().ok();
    Some(Row {
        t_ms: cells[0].parse::<Timestamp>().ok()?.as_millisecond(),
        predicted: f(2),
        measured: f(3),
        residual: f(4),
        u: f(5),
        conversion: f(6),
        effectiveness: f(7),
        state: cells[8].clone(),
        flags: cells[9].split(';').filter(|s| !s.is_empty()).map(str::to_string).collect(),
    })
}

/// Soft-tag rows of a unit in (from, to], from the daily files whose dates overlap.
pub fn load_rows(dir: &Path, unit: &str, from_ms: i64, to_ms: i64, tz: &TimeZone) -> Vec<Row> {
    let prefix = format!("softtags-{unit}-");
    let first = crate::core::calendar::day_of(from_ms.saturating_add(1), tz);
    let last = if to_ms >= i64::MAX / 2 {
        "9999-12-31".to_string()
    } else {
        crate::core::calendar::day_of(to_ms, tz)
    };
    let files: Vec<PathBuf> = crate::sinks::daily::dated_files(dir, &prefix, ".csv")
        .into_iter()
        .filter(|(d, _)| *d >= first && *d <= last)
        .map(|(_, p)| p)
        .collect();
    let mut rows: Vec<Row> = files
        .iter()
        .filter_map(|f| std::fs::read_to_string(f).ok())
        .flat_map(|text| {
            text.lines().filter(|l| *l != SOFT_TAG_HEADER).filter_map(parse_row).collect::<Vec<_>>()
        })
        .collect();
    rows.retain(|r| r.t_ms > from_ms && r.t_ms <= to_ms);
    rows.sort_by_key(|r| r.t_ms);
    rows.dedup_by_key(|r| r.t_ms);
    rows
}

/// Every alert event of a unit up to `to_ms` (all files: active alerts may be old).
pub fn load_events(dir: &Path, unit: &str, to_ms: i64) -> Vec<AlertEvent> {
    let files = crate::sinks::daily::dated_files(dir, &format!("alerts-{unit}-"), ".jsonl");
    let mut out = Vec::new();
    for (_, f) in files {
        for line in std::fs::read_to_string(&f).unwrap_or_default().lines() {
            if let Ok(mut e) = serde_json::from_str::<AlertEvent>(line) {
                e.time_ms = e.time.parse::<Timestamp>().map(|t| t.as_millisecond()).unwrap_or(0);
                if e.time_ms <= to_ms {
                    out.push(e);
                }
            }
        }
    }
    out.sort_by_key(|e| e.sequence);
    out
}

/// Ingest counters the service keeps per unit and day (`ingest-<unit>-<date>.json`).
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct IngestDay {
    /// Data records read.
    pub records: u64,
    /// Rejected records and values by reason.
    pub rejected: BTreeMap<String, u64>,
    /// Late samples.
    pub late: u64,
    /// Intervals closed.
    pub intervals: u64,
    /// Intervals not computed.
    pub not_computed: u64,
}

/// What a shift report needs to know about its unit.
#[derive(Debug, Clone)]
pub struct ReportUnit {
    /// Site name.
    pub site: String,
    /// Unit name.
    pub name: String,
    /// Unit description.
    pub description: String,
    /// Time zone of the shifts.
    pub time_zone: TimeZone,
    /// Window of the heater-effectiveness trend, ms.
    pub trend_window_ms: i64,
    /// Heater effectiveness at which cleaning is due.
    pub effectiveness_limit: f64,
    /// Unit of the measured effluent temperature.
    pub temperature_unit: &'static Unit,
}

impl ReportUnit {
    /// The report settings of a unit.
    pub fn new(site: &str, description: &str, spec: &UnitSpec) -> ReportUnit {
        ReportUnit {
            site: site.to_string(),
            name: spec.name.clone(),
            description: description.to_string(),
            time_zone: spec.time_zone.clone(),
            trend_window_ms: spec.monitor.trend_window_ms,
            effectiveness_limit: spec.monitor.effectiveness_limit,
            temperature_unit: spec.temperature_unit(),
        }
    }
}

/// Everything the report shows.
#[derive(Debug, Clone)]
pub struct ReportData {
    /// Site name.
    pub site: String,
    /// Unit name and description.
    pub unit: (String, String),
    /// The shift.
    pub shift: Shift,
    /// Rows of the shift.
    pub rows: Vec<Row>,
    /// Rows of the previous shift (for "what changed").
    pub previous: Vec<Row>,
    /// Effectiveness over the trend window: (ms, value) of watching intervals.
    pub effectiveness: Vec<(i64, f64)>,
    /// Alert events up to the shift end.
    pub events: Vec<AlertEvent>,
    /// Ingest counters of the days the shift touches.
    pub ingest: IngestDay,
    /// Temperature unit symbol.
    pub unit_symbol: String,
    /// Effectiveness limit for cleaning.
    pub effectiveness_limit: f64,
    /// Time zone.
    pub tz: TimeZone,
    /// Residual alert limits (centre, half-width) in the temperature unit, if known.
    pub residual_limits: Option<(f64, f64)>,
}

/// Load the report data of a unit for a shift.
pub fn load(unit: &ReportUnit, output_dir: &Path, shift: &Shift) -> ReportData {
    let dir = output_dir.join(&unit.name);
    let tz = unit.time_zone.clone();
    // One read covers the previous shift (same shift pattern), this shift and the trend window.
    let window_start = shift.end_ms - unit.trend_window_ms;
    let all = load_rows(&dir, &unit.name, shift.prev_start_ms.min(window_start), shift.end_ms, &tz);
    let effectiveness = all
        .iter()
        .filter(|r| r.t_ms > window_start)
        .filter(|r| r.state == "watching" || r.state == "learning")
        .filter_map(|r| r.effectiveness.map(|e| (r.t_ms, e)))
        .collect();
    let (prev, rows): (Vec<Row>, Vec<Row>) =
        all.into_iter().filter(|r| r.t_ms > shift.prev_start_ms).partition(|r| r.t_ms <= shift.start_ms);
    let events = load_events(&dir, &unit.name, shift.end_ms);
    let mut ingest = IngestDay::default();
    let mut days: Vec<String> = vec![
        crate::core::calendar::day_of(shift.start_ms + 1, &tz),
        crate::core::calendar::day_of(shift.end_ms, &tz),
    ];
    days.dedup();
    for d in days {
        if let Ok(text) = std::fs::read_to_string(dir.join(format!("ingest-{}-{d}.json", unit.name)))
            && let Ok(day) = serde_json::from_str::<IngestDay>(&text)
        {
            ingest.records += day.records;
            ingest.late += day.late;
            ingest.intervals += day.intervals;
            ingest.not_computed += day.not_computed;
            for (k, v) in day.rejected {
                *ingest.rejected.entry(k).or_default() += v;
            }
        }
    }
    // Residual limits from the watching rows of the window: the baseline centre and scatter
    // are not in the soft tags, so use the median and robust scale of steady residuals.
    let steady: Vec<f64> =
        rows.iter().chain(prev.iter()).filter(|r| r.state == "watching").filter_map(|r| r.residual).collect();
    let residual_limits = (steady.len() >= 30).then(|| {
        let m = crate::core::monitor::stats::median(&steady);
        let s = crate::core::monitor::stats::mad_sigma(&steady).max(0.01);
        (m, 3.0 * s)
    });
    ReportData {
        site: unit.site.clone(),
        unit: (unit.name.clone(), unit.description.clone()),
        shift: shift.clone(),
        rows,
        previous: prev,
        effectiveness,
        events,
        ingest,
        unit_symbol: match unit.temperature_unit.symbol {
            "degC" => "°C".to_string(),
            "degF" => "°F".to_string(),
            "degR" => "°R".to_string(),
            other => other.to_string(),
        },
        effectiveness_limit: unit.effectiveness_limit,
        tz,
        residual_limits,
    }
}

/// Alert lifecycles seen up to the shift end: (first event, last event).
fn lifecycles(events: &[AlertEvent]) -> Vec<(AlertEvent, AlertEvent)> {
    let mut by: BTreeMap<String, (AlertEvent, AlertEvent)> = BTreeMap::new();
    for e in events {
        by.entry(e.alert_id.clone())
            .and_modify(|x| x.1 = e.clone())
            .or_insert_with(|| (e.clone(), e.clone()));
    }
    let mut v: Vec<_> = by.into_values().collect();
    v.sort_by_key(|x| x.0.sequence);
    v
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// A projected date to the limit and its ±2σ range, ms.
pub type Projection = (i64, i64, i64);

/// The effectiveness trend with its projection to the limit (linear fit of 4-hour means;
/// reported only when the slope is negative with |t| ≥ 2).
pub fn effectiveness_trend(
    points: &[(i64, f64)],
    limit: f64,
    now_ms: i64,
) -> Option<(LineFit, Option<Projection>)> {
    let mut means: BTreeMap<i64, (f64, usize)> = BTreeMap::new();
    for (t, e) in points {
        let slot = t.div_euclid(4 * 3_600_000);
        let m = means.entry(slot).or_insert((0.0, 0));
        m.0 += e;
        m.1 += 1;
    }
    let t: Vec<f64> = means.keys().map(|s| (*s as f64 + 0.5) * 4.0 / 24.0).collect();
    let y: Vec<f64> = means.values().map(|(s, n)| s / *n as f64).collect();
    if t.len() < 6 {
        return None;
    }
    let fit = LineFit::fit(&t, &y)?;
    let now_d = now_ms as f64 / 86_400_000.0;
    let proj = (fit.b < 0.0 && fit.t_stat().abs() >= 2.0).then(|| fit.time_to(limit, now_d)).flatten().map(
        |(dt, sd)| {
            let d = |x: f64| now_ms + (x * 86_400_000.0) as i64;
            (d(dt), d((dt - 2.0 * sd).max(0.0)), d(dt + 2.0 * sd))
        },
    );
    Some((fit, proj))
}

// ----------------------------------------------------------------------------------------
// SVG plots (hand-built: a few line charts need no plotting library).

const INK: &str = "#24323d";
const GRID: &str = "#e3e7ea";
const PRED: &str = "#2f7a86";
const BAND: &str = "#cfe5e8";
const MEAS: &str = "#b3532e";
const MARK: &str = "#8a6a12";

struct Axis {
    lo: f64,
    hi: f64,
}

impl Axis {
    fn of(values: impl Iterator<Item = f64>, pad: f64) -> Axis {
        let (mut lo, mut hi) = (f64::MAX, f64::MIN);
        for v in values.filter(|v| v.is_finite()) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
        if lo > hi {
            return Axis { lo: 0.0, hi: 1.0 };
        }
        let span = (hi - lo).max(1e-9);
        Axis { lo: lo - pad * span, hi: hi + pad * span }
    }
}

fn nice_ticks(a: &Axis, n: usize) -> Vec<f64> {
    let span = a.hi - a.lo;
    let raw = span / n as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0].iter().map(|m| m * mag).find(|s| *s >= raw).unwrap_or(raw);
    let mut t = (a.lo / step).ceil() * step;
    let mut v = Vec::new();
    while t <= a.hi + 1e-9 * step {
        v.push(t);
        t += step;
    }
    v
}

struct Plot {
    w: f64,
    h: f64,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    x: Axis,
    y: Axis,
    svg: String,
}

impl Plot {
    fn new(title: &str, x: Axis, y: Axis, y_label: &str, x_label: &str) -> Plot {
        let mut p = Plot {
            w: 760.0,
            h: 250.0,
            left: 64.0,
            right: 16.0,
            top: 28.0,
            bottom: 44.0,
            x,
            y,
            svg: String::new(),
        };
        let _ = write!(
            p.svg,
            r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" aria-label="{t}"><title>{t}</title><rect x="0" y="0" width="{w}" height="{h}" fill="white"/><text x="{l}" y="18" font-size="13" font-weight="600" fill="{INK}">{t}</text>"#,
            w = p.w,
            h = p.h,
            l = p.left,
            t = esc(title)
        );
        let (x0, y0, x1, y1) = (p.left, p.top, p.w - p.right, p.h - p.bottom);
        for tv in nice_ticks(&p.y, 5) {
            let y = p.py(tv);
            let _ = write!(
                p.svg,
                r#"<line x1="{x0}" y1="{y:.1}" x2="{x1}" y2="{y:.1}" stroke="{GRID}"/><text x="{:.1}" y="{:.1}" font-size="10" text-anchor="end" fill="{INK}">{}</text>"#,
                x0 - 6.0,
                y + 3.5,
                fmt_tick(tv)
            );
        }
        let _ = write!(
            p.svg,
            r#"<line x1="{x0}" y1="{y1}" x2="{x1}" y2="{y1}" stroke="{INK}"/><line x1="{x0}" y1="{y0}" x2="{x0}" y2="{y1}" stroke="{INK}"/><text x="14" y="{:.1}" font-size="11" fill="{INK}" transform="rotate(-90 14 {:.1})" text-anchor="middle">{}</text><text x="{:.1}" y="{:.1}" font-size="11" fill="{INK}" text-anchor="middle">{}</text>"#,
            (y0 + y1) / 2.0,
            (y0 + y1) / 2.0,
            esc(y_label),
            (x0 + x1) / 2.0,
            p.h - 8.0,
            esc(x_label)
        );
        p
    }
    fn px(&self, v: f64) -> f64 {
        self.left + (v - self.x.lo) / (self.x.hi - self.x.lo) * (self.w - self.left - self.right)
    }
    fn py(&self, v: f64) -> f64 {
        self.h - self.bottom - (v - self.y.lo) / (self.y.hi - self.y.lo) * (self.h - self.top - self.bottom)
    }
    fn x_ticks(&mut self, ticks: &[(f64, String)]) {
        let y1 = self.h - self.bottom;
        for (v, label) in ticks {
            let x = self.px(*v);
            let _ = write!(
                self.svg,
                r#"<line x1="{x:.1}" y1="{y1}" x2="{x:.1}" y2="{:.1}" stroke="{INK}"/><text x="{x:.1}" y="{:.1}" font-size="10" text-anchor="middle" fill="{INK}">{}</text>"#,
                y1 + 4.0,
                y1 + 16.0,
                esc(label)
            );
        }
    }
    /// Polyline segments, broken at gaps (None).
    fn line(&mut self, pts: &[(f64, Option<f64>)], color: &str, width: f64, dash: Option<&str>, name: &str) {
        let mut seg: Vec<String> = Vec::new();
        let flush = |seg: &mut Vec<String>, svg: &mut String| {
            if seg.len() > 1 {
                let d = dash.map_or(String::new(), |d| format!(r#" stroke-dasharray="{d}""#));
                let _ = write!(
                    svg,
                    r#"<polyline class="series" data-series="{name}" fill="none" stroke="{color}" stroke-width="{width}"{d} points="{}"/>"#,
                    seg.join(" ")
                );
            }
            seg.clear();
        };
        for (x, y) in pts {
            match y {
                Some(y) if y.is_finite() => seg.push(format!("{:.1},{:.1}", self.px(*x), self.py(*y))),
                _ => flush(&mut seg, &mut self.svg),
            }
        }
        flush(&mut seg, &mut self.svg);
    }
    fn band(&mut self, pts: &[(f64, f64, f64)]) {
        if pts.len() < 2 {
            return;
        }
        let mut d = String::new();
        for (x, lo, _) in pts {
            let _ = write!(d, "{:.1},{:.1} ", self.px(*x), self.py(*lo));
        }
        for (x, _, hi) in pts.iter().rev() {
            let _ = write!(d, "{:.1},{:.1} ", self.px(*x), self.py(*hi));
        }
        let _ = write!(
            self.svg,
            r#"<polygon class="band" fill="{BAND}" stroke="none" points="{}"/>"#,
            d.trim_end()
        );
    }
    fn hline(&mut self, y: f64, color: &str, label: &str) {
        let yy = self.py(y);
        let _ = write!(
            self.svg,
            r#"<line x1="{}" y1="{yy:.1}" x2="{}" y2="{yy:.1}" stroke="{color}" stroke-dasharray="5 4"/><text x="{:.1}" y="{:.1}" font-size="10" text-anchor="end" fill="{color}">{}</text>"#,
            self.left,
            self.w - self.right,
            self.w - self.right - 2.0,
            yy - 3.0,
            esc(label)
        );
    }
    fn marker(&mut self, x: f64, label: &str) {
        let xx = self.px(x);
        let _ = write!(
            self.svg,
            r#"<g class="alert-marker"><line x1="{xx:.1}" y1="{}" x2="{xx:.1}" y2="{}" stroke="{MARK}" stroke-width="1.5" stroke-dasharray="2 3"/><polygon points="{:.1},{} {:.1},{} {:.1},{}" fill="{MARK}"/><title>{}</title></g>"#,
            self.top,
            self.h - self.bottom,
            xx - 5.0,
            self.top,
            xx + 5.0,
            self.top,
            xx,
            self.top + 8.0,
            esc(label)
        );
    }
    fn legend(&mut self, items: &[(&str, &str)]) {
        let mut x = self.w - self.right - 8.0;
        for (name, color) in items.iter().rev() {
            let wdt = 14.0 + 6.5 * name.len() as f64;
            x -= wdt;
            let _ = write!(
                self.svg,
                r#"<rect x="{x:.1}" y="9" width="10" height="10" fill="{color}"/><text x="{:.1}" y="18" font-size="10" fill="{INK}">{}</text>"#,
                x + 13.0,
                esc(name)
            );
            x -= 8.0;
        }
    }
    fn finish(mut self) -> String {
        self.svg.push_str("</svg>");
        self.svg
    }
}

fn fmt_tick(v: f64) -> String {
    if v.abs() >= 100.0 || v == v.round() {
        format!("{v:.0}")
    } else if v.abs() >= 1.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.3}")
    }
}

fn hour_ticks(shift: &Shift, tz: &TimeZone) -> (Axis, Vec<(f64, String)>) {
    let hours = (shift.end_ms - shift.start_ms) as f64 / 3_600_000.0;
    let ticks = (0..=hours.round() as i64)
        .step_by(if hours > 10.0 { 2 } else { 1 })
        .map(|h| {
            let ms = shift.start_ms + h * 3_600_000;
            let label = Timestamp::from_millisecond(ms)
                .map(|t| t.to_zoned_datetime(tz.clone()).strftime("%H:%M").to_string())
                .unwrap_or_default();
            (h as f64, label)
        })
        .collect();
    (Axis { lo: 0.0, hi: hours }, ticks)
}

fn hours_of(ms: i64, shift: &Shift) -> f64 {
    (ms - shift.start_ms) as f64 / 3_600_000.0
}

/// The plots of a report, as SVG strings: temperatures, residual, effectiveness, conversion.
pub fn plots(d: &ReportData) -> Vec<(String, String)> {
    let mut out = Vec::new();
    let (xa, xt) = hour_ticks(&d.shift, &d.tz);
    let raised: Vec<&AlertEvent> = d
        .events
        .iter()
        .filter(|e| {
            e.event == EventKind::Raised && e.time_ms > d.shift.start_ms && e.time_ms <= d.shift.end_ms
        })
        .collect();
    let x_label = format!("time in shift ({})", d.tz.iana_name().unwrap_or("local"));

    // 1. Predicted band vs measured.
    let temps = d.rows.iter().flat_map(|r| {
        let u = r.u.unwrap_or(0.0);
        [r.measured, r.predicted.map(|p| p - 2.0 * u), r.predicted.map(|p| p + 2.0 * u)]
    });
    let ya = Axis::of(temps.flatten(), 0.08);
    let mut p = Plot::new(
        "Effluent temperature: predicted (band ±2u) and measured",
        Axis { ..xa },
        ya,
        &format!("temperature / {}", d.unit_symbol),
        &x_label,
    );
    p.x_ticks(&xt);
    let band: Vec<(f64, f64, f64)> = d
        .rows
        .iter()
        .filter_map(|r| {
            Some((
                hours_of(r.t_ms, &d.shift),
                r.predicted? - 2.0 * r.u.unwrap_or(0.0),
                r.predicted? + 2.0 * r.u.unwrap_or(0.0),
            ))
        })
        .collect();
    p.band(&band);
    p.line(
        &d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), r.predicted)).collect::<Vec<_>>(),
        PRED,
        1.6,
        None,
        "predicted",
    );
    p.line(
        &d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), r.measured)).collect::<Vec<_>>(),
        MEAS,
        1.4,
        None,
        "measured",
    );
    for e in &raised {
        p.marker(hours_of(e.time_ms, &d.shift), &format!("{} raised: {}", e.cause.as_str(), e.message));
    }
    p.legend(&[("predicted", PRED), ("measured", MEAS), ("alert raised", MARK)]);
    out.push(("temperature".into(), p.finish()));

    // 2. Residual with limits.
    let mut vals: Vec<f64> = d.rows.iter().filter_map(|r| r.residual).collect();
    if let Some((m, hw)) = d.residual_limits {
        vals.extend([m - hw, m + hw]);
    }
    let ya = Axis::of(vals.into_iter(), 0.1);
    let mut p = Plot::new(
        "Residual (measured − predicted) with its alert limits",
        Axis { ..xa },
        ya,
        &format!("residual / {}", if d.unit_symbol == "°C" { "K" } else { d.unit_symbol.as_str() }),
        &x_label,
    );
    p.x_ticks(&xt);
    if let Some((m, hw)) = d.residual_limits {
        p.hline(m, INK, "baseline");
        p.hline(m + hw, MARK, "+3σ");
        p.hline(m - hw, MARK, "−3σ");
    }
    p.line(
        &d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), r.residual)).collect::<Vec<_>>(),
        MEAS,
        1.3,
        None,
        "residual",
    );
    for e in &raised {
        p.marker(hours_of(e.time_ms, &d.shift), &format!("{} raised", e.cause.as_str()));
    }
    out.push(("residual".into(), p.finish()));

    // 3. Heater effectiveness over the trend window with the fitted trend and projection.
    let eff = &d.effectiveness;
    let t0 = eff.first().map_or(d.shift.end_ms - 86_400_000, |e| e.0);
    let day = |ms: i64| (ms - t0) as f64 / 86_400_000.0;
    let trend = effectiveness_trend(eff, d.effectiveness_limit, d.shift.end_ms);
    let mut xs_hi = day(d.shift.end_ms);
    if let Some((_, Some((at, _, _)))) = &trend {
        xs_hi = xs_hi.max(day(*at).min(day(d.shift.end_ms) + 30.0));
    }
    let ya = Axis::of(eff.iter().map(|e| e.1).chain([d.effectiveness_limit, 1.0]), 0.05);
    let mut p = Plot::new(
        "Heater effectiveness (duty needed / duty reported), trend and cleaning limit",
        Axis { lo: 0.0, hi: xs_hi.max(1.0) },
        ya,
        "effectiveness",
        "days",
    );
    let dticks: Vec<(f64, String)> = (0..=(xs_hi.ceil() as i64))
        .step_by(((xs_hi / 8.0).ceil() as usize).max(1))
        .map(|k| {
            (
                k as f64,
                Timestamp::from_millisecond(t0 + k * 86_400_000)
                    .map(|t| t.to_zoned_datetime(d.tz.clone()).strftime("%m-%d").to_string())
                    .unwrap_or_default(),
            )
        })
        .collect();
    p.x_ticks(&dticks);
    p.hline(d.effectiveness_limit, MARK, "cleaning limit");
    p.line(
        &eff.iter().map(|(t, e)| (day(*t), Some(*e))).collect::<Vec<_>>(),
        PRED,
        1.0,
        None,
        "effectiveness",
    );
    if let Some((fit, proj)) = &trend {
        let to_days = |ms: i64| ms as f64 / 86_400_000.0;
        let end = proj.map_or(d.shift.end_ms, |p| p.0);
        let line: Vec<(f64, Option<f64>)> =
            [t0, end].iter().map(|ms| (day(*ms), Some(fit.a + fit.b * to_days(*ms)))).collect();
        p.line(&line, INK, 1.4, Some("6 4"), "trend");
        if let Some((at, lo, hi)) = proj {
            p.marker(
                day(*at),
                &format!(
                    "projected to reach the limit on {} ({} to {})",
                    crate::core::calendar::day_of(*at + 1, &d.tz),
                    crate::core::calendar::day_of(*lo + 1, &d.tz),
                    crate::core::calendar::day_of(*hi + 1, &d.tz)
                ),
            );
        }
    }
    out.push(("effectiveness".into(), p.finish()));

    // 4. Apparent conversion.
    let ya = Axis::of(d.rows.iter().filter_map(|r| r.conversion), 0.1);
    let mut p = Plot::new(
        "Apparent conversion (reproduces the measured temperature)",
        Axis { ..xa },
        ya,
        "conversion",
        &x_label,
    );
    p.x_ticks(&xt);
    p.line(
        &d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), r.conversion)).collect::<Vec<_>>(),
        PRED,
        1.3,
        None,
        "apparent conversion",
    );
    out.push(("conversion".into(), p.finish()));
    out
}

/// Headline facts of the shift.
pub struct Headline {
    /// Last monitor state.
    pub state: String,
    /// Active alerts at the shift end: (id, cause, message).
    pub active: Vec<(String, String, String)>,
    /// Raised during the shift.
    pub raised: usize,
    /// Cleared during the shift.
    pub cleared: usize,
    /// Mean residual this shift and last.
    pub residual: (Option<f64>, Option<f64>),
}

fn mean(v: impl Iterator<Item = f64>) -> Option<f64> {
    let (s, n) = v.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    (n > 0).then(|| s / n as f64)
}

/// Compute the headline.
pub fn headline(d: &ReportData) -> Headline {
    let life = lifecycles(&d.events);
    let active = life
        .iter()
        .filter(|(_, last)| last.event != EventKind::Cleared)
        .map(|(first, last)| (first.alert_id.clone(), first.cause.as_str().to_string(), last.message.clone()))
        .collect();
    let in_shift = |e: &AlertEvent| e.time_ms > d.shift.start_ms && e.time_ms <= d.shift.end_ms;
    Headline {
        state: d.rows.last().map_or_else(|| "no data".into(), |r| r.state.clone()),
        active,
        raised: d.events.iter().filter(|e| in_shift(e) && e.event == EventKind::Raised).count(),
        cleared: d.events.iter().filter(|e| in_shift(e) && e.event == EventKind::Cleared).count(),
        residual: (
            mean(d.rows.iter().filter_map(|r| r.residual)),
            mean(d.previous.iter().filter_map(|r| r.residual)),
        ),
    }
}

fn flag_counts(rows: &[Row]) -> BTreeMap<String, usize> {
    let mut m = BTreeMap::new();
    for r in rows {
        for f in &r.flags {
            *m.entry(f.clone()).or_default() += 1;
        }
    }
    m
}

const CSS: &str = "body{font-family:'DejaVu Sans',Verdana,sans-serif;color:#24323d;background:#f6f7f5;margin:0}\
main{max-width:820px;margin:0 auto;padding:18px 24px;background:#fff}\
h1{font-size:20px;margin:4px 0}h2{font-size:15px;margin:22px 0 8px;border-bottom:1px solid #d5dbe0;padding-bottom:3px}\
.sub{color:#5b6b77;font-size:12px}.headline{display:flex;gap:12px;flex-wrap:wrap;margin:12px 0}\
.fact{border:1px solid #d5dbe0;border-radius:4px;padding:8px 12px;min-width:150px}.fact b{display:block;font-size:18px}\
table{border-collapse:collapse;width:100%;font-size:12px}th,td{border-bottom:1px solid #e3e7ea;padding:4px 6px;text-align:left;vertical-align:top}\
th{background:#eef1f0}figure{margin:10px 0}svg{max-width:100%;height:auto}footer{font-size:11px;color:#5b6b77;margin-top:24px;border-top:1px solid #d5dbe0;padding-top:8px}\
@media print{body{background:#fff}main{padding:0}figure{break-inside:avoid}}";

/// The HTML report (self-contained).
pub fn render_html(d: &ReportData) -> String {
    let h = headline(d);
    let mut s = String::new();
    let _ = write!(
        s,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>Shift report {} {}</title><style>{CSS}</style></head><body><main>",
        esc(&d.unit.0),
        esc(&d.shift.label)
    );
    let _ = write!(
        s,
        "<h1>Shift report: {} <span class=\"sub\">{}</span></h1><div class=\"sub\">{} &middot; shift {} &middot; efftemp {}</div>",
        esc(&d.unit.0),
        esc(&d.unit.1),
        esc(&d.site),
        esc(&d.shift.label),
        env!("CARGO_PKG_VERSION")
    );
    let fmt_k = |v: Option<f64>| v.map_or("n/a".to_string(), |x| format!("{x:+.2} {}", d.unit_symbol));
    let _ = write!(
        s,
        "<section id=\"headline\"><h2>Headline</h2><div class=\"headline\"><div class=\"fact\">monitor state<b>{}</b></div><div class=\"fact\">active alerts<b>{}</b></div><div class=\"fact\">raised / cleared this shift<b>{} / {}</b></div><div class=\"fact\">mean residual (previous shift)<b>{}</b><span class=\"sub\">{}</span></div></div>",
        esc(&h.state),
        h.active.len(),
        h.raised,
        h.cleared,
        fmt_k(h.residual.0),
        fmt_k(h.residual.1)
    );
    if !h.active.is_empty() {
        s.push_str("<ul>");
        for (id, cause, msg) in &h.active {
            let _ = write!(s, "<li><b>{}</b> ({}): {}</li>", esc(cause), esc(id), esc(msg));
        }
        s.push_str("</ul>");
    }
    s.push_str("</section><section id=\"plots\"><h2>Trends</h2>");
    for (id, svg) in plots(d) {
        let _ = write!(s, "<figure id=\"plot-{id}\">{svg}</figure>");
    }
    s.push_str("</section><section id=\"alerts\"><h2>Alerts</h2><table><thead><tr><th>raised</th><th>cleared</th><th>cause</th><th>priority</th><th>message</th><th>evidence</th></tr></thead><tbody>");
    let life = lifecycles(&d.events);
    let mut any = false;
    for (first, last) in &life {
        let touches = last.time_ms > d.shift.start_ms || last.event != EventKind::Cleared;
        if !touches {
            continue;
        }
        any = true;
        let cleared = if last.event == EventKind::Cleared { last.time.clone() } else { "active".into() };
        let evidence: Vec<String> = last.evidence.iter().map(|(k, v)| format!("{k}: {v}")).collect();
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(&first.time),
            esc(&cleared),
            esc(first.cause.as_str()),
            esc(first.severity.as_str()),
            esc(if last.event == EventKind::Cleared { &first.message } else { &last.message }),
            esc(&evidence.join("; "))
        );
    }
    if !any {
        s.push_str("<tr><td colspan=\"6\">No alerts this shift.</td></tr>");
    }
    s.push_str("</tbody></table></section>");
    let flags = flag_counts(&d.rows);
    let dq: Vec<(&String, &usize)> = flags
        .iter()
        .filter(|(k, _)| {
            ["stale:", "bad:", "missing:", "uncertain:", "range:"].iter().any(|p| k.starts_with(p))
                || *k == "not_computed"
        })
        .collect();
    let _ = write!(
        s,
        "<section id=\"data-quality\"><h2>Data quality</h2><table><tbody><tr><th>intervals in the shift</th><td>{}</td></tr><tr><th>records read (days of the shift)</th><td>{}</td></tr><tr><th>rejected</th><td>{}</td></tr><tr><th>late samples</th><td>{}</td></tr>",
        d.rows.len(),
        d.ingest.records,
        if d.ingest.rejected.is_empty() {
            "none".to_string()
        } else {
            d.ingest.rejected.iter().map(|(k, v)| format!("{k}: {v}")).collect::<Vec<_>>().join(", ")
        },
        d.ingest.late
    );
    for (k, v) in &dq {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    s.push_str("</tbody></table></section><section id=\"validity\"><h2>Model validity</h2><table><tbody>");
    let mv: Vec<(&String, &usize)> = flags.iter().filter(|(k, _)| !dq.iter().any(|(d, _)| d == k)).collect();
    if mv.is_empty() {
        s.push_str("<tr><td>No validity flags this shift.</td></tr>");
    }
    for (k, v) in mv {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    let _ = writeln!(
        s,
        "</tbody></table></section><footer><p><b>Caution.</b> {}</p><p>Predicted temperatures come from an ideal-solution, liquid-only enthalpy balance; the residual is judged against a baseline learned on this unit's own steady operation.</p></footer></main></body></html>",
        esc(crate::CAUTION)
    );
    s
}

/// The plain-text summary.
pub fn render_text(d: &ReportData) -> String {
    let h = headline(d);
    let mut s = String::new();
    let _ = writeln!(s, "{} {} - shift {}", d.site, d.unit.0, d.shift.label);
    let _ = writeln!(
        s,
        "  state: {}; intervals: {}; alerts raised {} / cleared {} this shift; active {}",
        h.state,
        d.rows.len(),
        h.raised,
        h.cleared,
        h.active.len()
    );
    if let (Some(a), b) = h.residual {
        let _ = writeln!(
            s,
            "  mean residual {a:+.2} {} (previous shift {})",
            d.unit_symbol,
            b.map_or("n/a".into(), |b| format!("{b:+.2}"))
        );
    }
    for (id, cause, msg) in &h.active {
        let _ = writeln!(s, "  ACTIVE {cause} [{id}]: {msg}");
    }
    if let Some((fit, proj)) = effectiveness_trend(&d.effectiveness, d.effectiveness_limit, d.shift.end_ms) {
        let _ =
            write!(s, "  heater effectiveness trend {:+.2} %/day (t = {:.1})", fit.b * 100.0, fit.t_stat());
        match proj {
            Some((at, lo, hi)) => {
                let _ = writeln!(
                    s,
                    "; cleaning limit {:.0} % projected {} ({} to {})",
                    d.effectiveness_limit * 100.0,
                    crate::core::calendar::day_of(at + 1, &d.tz),
                    crate::core::calendar::day_of(lo + 1, &d.tz),
                    crate::core::calendar::day_of(hi + 1, &d.tz)
                );
            }
            None => {
                let _ = writeln!(s, "; no significant decline");
            }
        }
    }
    let rejected: u64 = d.ingest.rejected.values().sum();
    let _ =
        writeln!(s, "  data: {} records read, {rejected} rejected, {} late", d.ingest.records, d.ingest.late);
    let _ = writeln!(s, "  {}", crate::CAUTION);
    s
}

/// Write the HTML report of a unit for a shift; returns its path.
pub fn write(unit: &ReportUnit, output_dir: &Path, shift: &Shift) -> std::io::Result<(PathBuf, String)> {
    let data = load(unit, output_dir, shift);
    let html = render_html(&data);
    let dir = output_dir.join(&unit.name).join("reports");
    std::fs::create_dir_all(&dir)?;
    let path = dir.join(format!("shift-{}-{}.html", unit.name, shift.slug));
    let tmp = path.with_extension("html.tmp");
    std::fs::write(&tmp, html)?;
    std::fs::rename(&tmp, &path)?;
    Ok((path, render_text(&data)))
}
