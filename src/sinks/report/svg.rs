//! SVG line charts, hand-built (a few line charts need no plotting library): axes with round
//! ticks, polylines broken at gaps, uncertainty bands, limit lines, alert markers, legends.

use std::fmt::Write as _;

use jiff::Timestamp;
use jiff::tz::TimeZone;

use crate::core::calendar::Shift;

/// Text escaped for HTML and SVG (element content and attribute values).
pub(super) fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

// Colours: ink (text and axes), grid, predicted, uncertainty band, measured, alert marks.
pub(super) const INK: &str = "#24323d";
const GRID: &str = "#e3e7ea";
pub(super) const PRED: &str = "#2f7a86";
const BAND: &str = "#cfe5e8";
pub(super) const MEAS: &str = "#b3532e";
pub(super) const MARK: &str = "#8a6a12";

/// The value range of a plot axis.
pub(super) struct Axis {
    pub(super) lo: f64,
    pub(super) hi: f64,
}

impl Axis {
    pub(super) fn of(values: impl Iterator<Item = f64>, pad: f64) -> Axis {
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

/// About `n` round tick values (steps of 1, 2, 2.5 or 5 times a power of ten) within the axis.
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

/// A plot being drawn: its frame (size and margins), its axes and the SVG written so far.
pub(super) struct Plot {
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
    pub(super) fn new(title: &str, x: Axis, y: Axis, y_label: &str, x_label: &str) -> Plot {
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
    pub(super) fn x_ticks(&mut self, ticks: &[(f64, String)]) {
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
    pub(super) fn line(
        &mut self,
        pts: &[(f64, Option<f64>)],
        color: &str,
        width: f64,
        dash: Option<&str>,
        name: &str,
    ) {
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
    pub(super) fn band(&mut self, pts: &[(f64, f64, f64)]) {
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
    pub(super) fn hline(&mut self, y: f64, color: &str, label: &str) {
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
    pub(super) fn marker(&mut self, x: f64, label: &str) {
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
    pub(super) fn legend(&mut self, items: &[(&str, &str)]) {
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
    pub(super) fn finish(mut self) -> String {
        self.svg.push_str("</svg>");
        self.svg
    }
}

/// A tick label with as many decimals as its size needs.
fn fmt_tick(v: f64) -> String {
    if v.abs() >= 100.0 || v == v.round() {
        format!("{v:.0}")
    } else if v.abs() >= 1.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.3}")
    }
}

/// The in-shift time axis (hours since the shift start) and its ticks, labelled in local time.
pub(super) fn hour_ticks(shift: &Shift, tz: &TimeZone) -> (Axis, Vec<(f64, String)>) {
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

/// Hours from the shift start to `ms`.
pub(super) fn hours_of(ms: i64, shift: &Shift) -> f64 {
    (ms - shift.start_ms) as f64 / 3_600_000.0
}
