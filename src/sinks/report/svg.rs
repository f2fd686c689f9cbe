//! SVG line charts, hand-built (a few line charts need no plotting library): axes with round
//! ticks printed to the decimals their step needs, series clipped to the frame and broken at
//! gaps, bands, shaded spans (monitor states, no data), dots, limit lines labelled in the right
//! margin (moved apart so that they never overlap), written annotations and alert markers.

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
pub(super) const PRED: &str = "#1f6f7a";
pub(super) const BAND: &str = "#cfe5e8";
pub(super) const MEAS: &str = "#b3471f";
pub(super) const MARK: &str = "#8a5a00";
pub(super) const LIMIT: &str = "#a3262a";
/// Colours of further series (inputs).
pub(super) const SERIES: [&str; 6] = ["#1f6f7a", "#b3471f", "#5a4a9c", "#3d7a2a", "#8a5a00", "#6b6b6b"];

/// The value range of a plot axis.
#[derive(Debug, Clone, Copy)]
pub(super) struct Axis {
    pub(super) lo: f64,
    pub(super) hi: f64,
}

impl Axis {
    /// The range of `values` widened by `pad` of its span on each side.
    pub(super) fn of(values: impl Iterator<Item = f64>, pad: f64) -> Axis {
        let (mut lo, mut hi) = (f64::MAX, f64::MIN);
        for v in values.filter(|v| v.is_finite()) {
            lo = lo.min(v);
            hi = hi.max(v);
        }
        if lo > hi {
            return Axis { lo: 0.0, hi: 1.0 };
        }
        let span = (hi - lo).max(1e-6 * hi.abs().max(1.0));
        Axis { lo: lo - pad * span, hi: hi + pad * span }
    }
}

/// About `n` round ticks (steps of 1, 2, 2.5 or 5 times a power of ten) within the axis, and
/// the decimals the step needs.
pub(super) fn nice_ticks(a: &Axis, n: usize) -> (Vec<f64>, usize) {
    let span = a.hi - a.lo;
    let raw = span / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let (m, step) = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| (*m, m * mag))
        .find(|(_, s)| *s >= raw)
        .unwrap_or((1.0, raw));
    let mut decimals = (-mag.log10().round()).max(0.0) as usize;
    if m == 2.5 {
        decimals += 1;
    }
    if m == 10.0 {
        decimals = decimals.saturating_sub(1);
    }
    let mut v = Vec::new();
    let mut k = (a.lo / step).ceil();
    while k * step <= a.hi + 1e-9 * step {
        v.push(k * step);
        k += 1.0;
    }
    (v, decimals.min(6))
}

/// A tick value with `decimals`, never "-0".
pub(super) fn fmt_num(v: f64, decimals: usize) -> String {
    let d = decimals.min(9);
    let scale = 10f64.powi(d as i32);
    let scaled = v * scale;
    if !scaled.is_finite() || scaled.abs() >= 9e15 {
        return format!("{v:.d$}").replace('-', "−");
    }
    let t = (scaled + 0.5f64.copysign(scaled)) as i64;
    let a = t.unsigned_abs();
    let p = 10u64.pow(d as u32);
    let mut s = String::with_capacity(16);
    if t < 0 {
        s.push('−');
    }
    let _ = write!(s, "{}", a / p);
    if d > 0 {
        let _ = write!(s, ".{:0d$}", a % p);
    }
    s
}

/// Append a coordinate to one decimal (integer arithmetic: float formatting is most of the
/// cost of a report).
pub(super) fn push_coord(out: &mut String, v: f64) {
    let mut buf = [0u8; 24];
    out.push_str(coord(v, &mut buf));
}

/// `v` to one decimal in `buf` (integer arithmetic; non-finite values are 0).
fn coord(v: f64, buf: &mut [u8; 24]) -> &str {
    let scaled = v * 10.0;
    // Round half away from zero by truncating (no libm call).
    let t = if scaled.is_finite() { (scaled + 0.5f64.copysign(scaled)).clamp(-1e15, 1e15) as i64 } else { 0 };
    let mut a = t.unsigned_abs();
    let mut i = buf.len();
    // The tenths digit, the point, then the integer part, then the sign.
    i -= 1;
    buf[i] = b'0' + (a % 10) as u8;
    a /= 10;
    i -= 1;
    buf[i] = b'.';
    loop {
        i -= 1;
        buf[i] = b'0' + (a % 10) as u8;
        a /= 10;
        if a == 0 {
            break;
        }
    }
    if t < 0 {
        i -= 1;
        buf[i] = b'-';
    }
    std::str::from_utf8(&buf[i..]).unwrap_or("0.0")
}

/// A coordinate written to one decimal (integer arithmetic, see [`push_coord`]).
struct C(f64);

impl std::fmt::Display for C {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let mut buf = [0u8; 24];
        f.write_str(coord(self.0, &mut buf))
    }
}

/// Append the point "x,y ".
fn push_point(out: &mut String, x: f64, y: f64) {
    push_coord(out, x);
    out.push(',');
    push_coord(out, y);
    out.push(' ');
}

/// The points of a polyline (pixels) without those that lie within 0.35 px of the line
/// between their neighbours: the same picture with fewer numbers to write.
fn simplify(p: &[(f64, f64)], out: &mut Vec<(f64, f64)>) {
    out.clear();
    let n = p.len();
    if n < 3 {
        out.extend_from_slice(p);
        return;
    }
    out.push(p[0]);
    for i in 1..n - 1 {
        let a = out[out.len() - 1];
        let (b, c) = (p[i], p[i + 1]);
        let dx = c.0 - a.0;
        let on_line = if dx.abs() < 1e-9 { b.1 } else { a.1 + (c.1 - a.1) * (b.0 - a.0) / dx };
        if (b.1 - on_line).abs() > 0.35 || b.0 - a.0 > 40.0 {
            out.push(b);
        }
    }
    out.push(p[n - 1]);
}

/// A plot being drawn: its frame (size and margins), its axes and the SVG written so far.
pub(super) struct Plot {
    id: String,
    w: f64,
    h: f64,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    x: Axis,
    y: Axis,
    back: String,
    svg: String,
    /// Labels of limit lines: (y px, colour, text), placed in the right margin at the end.
    labels: Vec<(f64, String, String)>,
    /// Largest x step drawn as one line (longer is a gap).
    max_gap: f64,
}

/// The two drawings of every plot: wide (screens and paper) and narrow (phones; the page's
/// style shows one or the other), each at about its own pixel size so that text stays legible.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Frame {
    /// 720 units wide.
    Wide,
    /// 420 units wide, for viewports below 600 px.
    Narrow,
}

impl Plot {
    /// A plot with the id `id` (unique in the page for its frame) and `title` (for screen
    /// readers), drawn in `frame`.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn new(
        id: &str,
        title: &str,
        x: Axis,
        y: Axis,
        y_label: &str,
        x_label: &str,
        h: f64,
        frame: Frame,
    ) -> Plot {
        let narrow = frame == Frame::Narrow;
        let mut p = Plot {
            id: if narrow { format!("{id}-n") } else { id.to_string() },
            w: if narrow { 420.0 } else { 720.0 },
            h,
            left: if narrow { 54.0 } else { 62.0 },
            right: if narrow { 104.0 } else { 132.0 },
            top: 10.0,
            bottom: 42.0,
            x,
            y,
            back: String::new(),
            svg: String::new(),
            labels: Vec::new(),
            max_gap: f64::INFINITY,
        };
        let _ = write!(
            p.back,
            r##"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" role="img" aria-label="{t}" class="plot {fc}" id="svg-{id}"><title>{t}</title><defs><clipPath id="clip-{id}"><rect x="{l}" y="{tp}" width="{cw}" height="{ch}"/></clipPath><pattern id="nodata-{id}" width="8" height="8" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="8" height="8" fill="#f4f4f4"/><line x1="0" y1="0" x2="0" y2="8" stroke="#c8c8c8" stroke-width="2"/></pattern></defs><rect x="0" y="0" width="{w}" height="{h}" fill="white"/>"##,
            w = p.w,
            h = p.h,
            l = p.left,
            tp = p.top,
            cw = p.w - p.left - p.right,
            ch = p.h - p.top - p.bottom,
            t = esc(title),
            id = p.id,
            fc = if narrow { "narrow" } else { "wide" }
        );
        p.axes(y_label, x_label);
        p
    }

    fn axes(&mut self, y_label: &str, x_label: &str) {
        let (x0, y0, x1, y1) = (self.left, self.top, self.w - self.right, self.h - self.bottom);
        let (ticks, dec) = nice_ticks(&self.y, if self.h < 200.0 { 3 } else { 5 });
        for tv in ticks {
            let yv = self.py(tv);
            let y = C(yv);
            let _ = write!(
                self.svg,
                r#"<line x1="{x0}" y1="{y}" x2="{x1}" y2="{y}" stroke="{GRID}"/><text x="{}" y="{}" font-size="12" text-anchor="end" fill="{INK}">{}</text>"#,
                C(x0 - 6.0),
                C(yv + 4.0),
                fmt_num(tv, dec)
            );
        }
        let _ = write!(
            self.svg,
            r#"<line x1="{x0}" y1="{y1}" x2="{x1}" y2="{y1}" stroke="{INK}"/><line x1="{x0}" y1="{y0}" x2="{x0}" y2="{y1}" stroke="{INK}"/><line x1="{x1}" y1="{y0}" x2="{x1}" y2="{y1}" stroke="{GRID}"/><text x="13" y="{}" font-size="12" fill="{INK}" transform="rotate(-90 13 {})" text-anchor="middle">{}</text><text x="{}" y="{}" font-size="12" fill="{INK}" text-anchor="middle">{}</text>"#,
            C((y0 + y1) / 2.0),
            C((y0 + y1) / 2.0),
            esc(y_label),
            C((x0 + x1) / 2.0),
            C(self.h - 6.0),
            esc(x_label)
        );
    }

    /// Lines are broken where successive x values are more than `gap` apart.
    pub(super) fn gaps_over(&mut self, gap: f64) {
        self.max_gap = gap;
    }

    pub(super) fn px(&self, v: f64) -> f64 {
        self.left + (v - self.x.lo) / (self.x.hi - self.x.lo) * (self.w - self.left - self.right)
    }

    pub(super) fn py(&self, v: f64) -> f64 {
        self.h - self.bottom - (v - self.y.lo) / (self.y.hi - self.y.lo) * (self.h - self.top - self.bottom)
    }

    fn clip(&self) -> String {
        format!(r#" clip-path="url(#clip-{})""#, self.id)
    }

    /// Tick marks and labels on the x axis.
    pub(super) fn x_ticks(&mut self, ticks: &[(f64, String)]) {
        let y1 = self.h - self.bottom;
        for (v, label) in ticks {
            if *v < self.x.lo - 1e-9 || *v > self.x.hi + 1e-9 {
                continue;
            }
            let x = self.px(*v);
            let _ = write!(
                self.svg,
                r#"<line x1="{x_c}" y1="{y1}" x2="{x_c}" y2="{}" stroke="{INK}"/><text x="{x_c}" y="{}" font-size="12" text-anchor="middle" fill="{INK}">{}</text>"#,
                C(y1 + 4.0),
                C(y1 + 17.0),
                esc(label),
                x_c = C(x)
            );
        }
    }

    /// A shaded span of x (behind everything), e.g. a monitor state; `fill` may be `nodata`.
    pub(super) fn shade(&mut self, x0: f64, x1: f64, fill: &str, class: &str) {
        let (a, b) = (self.px(x0.max(self.x.lo)), self.px(x1.min(self.x.hi)));
        if b <= a {
            return;
        }
        let fill = if fill == "nodata" { format!("url(#nodata-{})", self.id) } else { fill.to_string() };
        let _ = write!(
            self.back,
            r#"<rect class="shade {class}" x="{a_c}" y="{}" width="{}" height="{}" fill="{fill}"/>"#,
            self.top,
            C(b - a),
            self.h - self.top - self.bottom,
            a_c = C(a)
        );
    }

    /// Polyline segments, broken at gaps (None, or a step longer than the gap).
    pub(super) fn line(
        &mut self,
        pts: &[(f64, Option<f64>)],
        color: &str,
        width: f64,
        dash: Option<&str>,
        name: &str,
    ) {
        let mut seg: Vec<(f64, f64)> = Vec::with_capacity(pts.len());
        let mut kept: Vec<(f64, f64)> = Vec::with_capacity(pts.len());
        let mut last_x = f64::NEG_INFINITY;
        let clip = self.clip();
        let dash = dash.map_or(String::new(), |d| format!(r#" stroke-dasharray="{d}""#));
        let name = esc(name);
        let flush = |seg: &mut Vec<(f64, f64)>, kept: &mut Vec<(f64, f64)>, svg: &mut String| {
            if seg.len() > 1 {
                let _ = write!(
                    svg,
                    r#"<polyline class="series" data-series="{name}" fill="none" stroke="{color}" stroke-width="{width}"{dash}{clip} points=""#
                );
                simplify(seg, kept);
                for (x, y) in kept.iter() {
                    push_point(svg, *x, *y);
                }
                svg.pop();
                svg.push_str("\"/>");
            } else if let Some((x, y)) = seg.first() {
                // A lone point between gaps is drawn as a dot.
                let _ =
                    write!(svg, r#"<circle cx="{}" cy="{}" r="1.8" fill="{color}"{clip}/>"#, C(*x), C(*y));
            }
            seg.clear();
        };
        for (x, y) in pts {
            if x - last_x > self.max_gap {
                flush(&mut seg, &mut kept, &mut self.svg);
            }
            last_x = *x;
            match y {
                Some(y) if y.is_finite() => seg.push((self.px(*x), self.py(*y))),
                _ => flush(&mut seg, &mut kept, &mut self.svg),
            }
        }
        flush(&mut seg, &mut kept, &mut self.svg);
    }

    /// Dots at the points.
    pub(super) fn dots(&mut self, pts: &[(f64, f64)], color: &str, r: f64, class: &str) {
        let clip = self.clip();
        for (x, y) in pts {
            let _ = write!(
                self.svg,
                r#"<circle class="{class}" cx="{}" cy="{}" r="{r}" fill="{color}"{clip}/>"#,
                C(self.px(*x)),
                C(self.py(*y))
            );
        }
    }

    /// A band between lo and hi, broken at gaps.
    pub(super) fn band(&mut self, pts: &[(f64, f64, f64)]) {
        let mut start = 0;
        for i in 1..=pts.len() {
            if i == pts.len() || pts[i].0 - pts[i - 1].0 > self.max_gap {
                self.band_part(&pts[start..i]);
                start = i;
            }
        }
    }

    fn band_part(&mut self, pts: &[(f64, f64, f64)]) {
        if pts.len() < 2 {
            return;
        }
        let lo: Vec<(f64, f64)> = pts.iter().map(|(x, lo, _)| (self.px(*x), self.py(*lo))).collect();
        let hi: Vec<(f64, f64)> = pts.iter().rev().map(|(x, _, hi)| (self.px(*x), self.py(*hi))).collect();
        let clip = self.clip();
        let _ = write!(self.svg, r#"<polygon class="band" fill="{BAND}" stroke="none"{clip} points=""#);
        let mut kept = Vec::with_capacity(pts.len());
        for edge in [&lo, &hi] {
            simplify(edge, &mut kept);
            for (x, y) in &kept {
                push_point(&mut self.svg, *x, *y);
            }
        }
        self.svg.pop();
        self.svg.push_str("\"/>");
    }

    /// A horizontal limit line across the frame, labelled in the right margin.
    pub(super) fn hline(&mut self, y: f64, color: &str, dash: &str, label: &str, class: &str) {
        let yy = self.py(y);
        if !(self.top - 0.5..=self.h - self.bottom + 0.5).contains(&yy) {
            return;
        }
        let _ = write!(
            self.svg,
            r#"<line class="limit {class}" data-value="{y}" x1="{}" y1="{yy_c}" x2="{}" y2="{yy_c}" stroke="{color}" stroke-width="1.3" stroke-dasharray="{dash}"/>"#,
            self.left,
            self.w - self.right,
            yy_c = C(yy)
        );
        self.labels.push((yy, color.to_string(), label.to_string()));
    }

    /// A vertical line at x within the frame.
    pub(super) fn vline(&mut self, x: f64, color: &str, dash: &str, class: &str) {
        let xx = self.px(x);
        if xx < self.left - 0.5 || xx > self.w - self.right + 0.5 {
            return;
        }
        let _ = write!(
            self.svg,
            r#"<line class="{class}" x1="{xx_c}" y1="{}" x2="{xx_c}" y2="{}" stroke="{color}" stroke-width="1.3" stroke-dasharray="{dash}"/>"#,
            self.top,
            self.h - self.bottom,
            xx_c = C(xx)
        );
    }

    /// A thick translucent bar from x0 to x1 at y (a range).
    pub(super) fn hspan(&mut self, x0: f64, x1: f64, y: f64, color: &str, class: &str) {
        let (a, b) = (self.px(x0).max(self.left), self.px(x1).min(self.w - self.right));
        let yy = self.py(y);
        let _ = write!(
            self.svg,
            r#"<rect class="{class}" x="{a_c}" y="{}" width="{}" height="8" fill="{color}" fill-opacity="0.35"/>"#,
            C(yy - 4.0),
            C((b - a).max(2.0)),
            a_c = C(a)
        );
    }

    /// Text written on the plot (with a white halo), anchored at (x, y) in data units; kept
    /// inside the frame.
    pub(super) fn note(&mut self, x: f64, y: f64, text: &str, class: &str) {
        // One line per `\n`, the lines of a note stacked downwards from `y`.
        let lines: Vec<&str> = text.split('\n').collect();
        let widest = lines.iter().map(|l| l.chars().count()).max().unwrap_or(0);
        let approx_w = 7.2 * widest as f64;
        let (x0, x1) = (self.left + 4.0, self.w - self.right - 4.0);
        let xx = self.px(x);
        let (anchor, xx) = if xx + approx_w / 2.0 > x1 {
            ("end", x1)
        } else if xx - approx_w / 2.0 < x0 {
            ("start", x0)
        } else {
            ("middle", xx)
        };
        // The last line at `y`, the others above it.
        let above = 15.0 * lines.len().saturating_sub(1) as f64;
        let yy = (self.py(y) - above)
            .clamp(self.top + 14.0, (self.h - self.bottom - 6.0 - above).max(self.top + 14.0));
        let _ = write!(
            self.svg,
            r#"<text class="note {class}" x="{xx_c}" y="{yy_c}" font-size="12.5" font-weight="600" text-anchor="{anchor}" fill="{INK}" stroke="white" stroke-width="4" paint-order="stroke">"#,
            xx_c = C(xx),
            yy_c = C(yy)
        );
        for (i, line) in lines.iter().enumerate() {
            let dy = if i == 0 { "0" } else { "15" };
            let _ = write!(self.svg, r#"<tspan x="{}" dy="{dy}">{}</tspan>"#, C(xx), esc(line));
        }
        self.svg.push_str("</text>");
    }

    /// An alert marker at x: a dotted vertical line with a triangle, its label at the top.
    pub(super) fn marker(&mut self, x: f64, label: &str, tooltip: &str) {
        let xx = self.px(x);
        if xx < self.left || xx > self.w - self.right {
            return;
        }
        let _ = write!(
            self.svg,
            r#"<g class="alert-marker"><line x1="{xx_c}" y1="{}" x2="{xx_c}" y2="{}" stroke="{MARK}" stroke-width="1.5" stroke-dasharray="2 3"/><polygon points="{},{} {},{} {xx_c},{}" fill="{MARK}"/><text x="{}" y="{}" font-size="11" fill="{MARK}">{}</text><title>{}</title></g>"#,
            self.top,
            self.h - self.bottom,
            C(xx - 5.0),
            self.top,
            C(xx + 5.0),
            self.top,
            self.top + 8.0,
            C(xx + 6.0),
            self.top + 10.0,
            esc(label),
            esc(tooltip),
            xx_c = C(xx)
        );
    }

    /// The finished SVG: the labels of the limit lines in the right margin, moved apart.
    pub(super) fn finish(mut self) -> String {
        self.labels.sort_by(|a, b| a.0.total_cmp(&b.0));
        let gap = 13.0;
        let mut ys: Vec<f64> = self.labels.iter().map(|l| l.0 + 4.0).collect();
        for i in 1..ys.len() {
            if ys[i] - ys[i - 1] < gap {
                ys[i] = ys[i - 1] + gap;
            }
        }
        // Pushed below the frame: shift the whole stack up.
        if let Some(last) = ys.last().copied() {
            let over = last - (self.h - 4.0);
            if over > 0.0 {
                for y in &mut ys {
                    *y -= over;
                }
            }
        }
        let x = self.w - self.right + 6.0;
        for ((_, color, text), y) in self.labels.iter().zip(&ys) {
            let _ = write!(
                self.svg,
                r#"<text class="limit-label" x="{x_c}" y="{y_c}" font-size="11.5" fill="{color}">{}</text>"#,
                esc(text),
                x_c = C(x),
                y_c = C(*y)
            );
        }
        self.back.push_str(&self.svg);
        self.back.push_str("</svg>");
        self.back
    }
}

/// The in-shift time axis (hours since the shift start) and its ticks, labelled in local time.
pub(super) fn hour_ticks(shift: &Shift, tz: &TimeZone) -> (Axis, Vec<(f64, String)>) {
    let hours = (shift.end_ms - shift.start_ms) as f64 / 3_600_000.0;
    let ticks = (0..=hours.round() as i64)
        .step_by(if hours > 10.0 { 2 } else { 1 })
        .map(|h| {
            let ms = shift.start_ms + h * 3_600_000;
            (h as f64, local(ms, tz, "%H:%M"))
        })
        .collect();
    (Axis { lo: 0.0, hi: hours }, ticks)
}

/// Local time of `ms` in `format`.
pub(super) fn local(ms: i64, tz: &TimeZone, format: &str) -> String {
    Timestamp::from_millisecond(ms)
        .map(|t| t.to_zoned_datetime(tz.clone()).strftime(format).to_string())
        .unwrap_or_default()
}

/// Hours from the shift start to `ms`.
pub(super) fn hours_of(ms: i64, shift: &Shift) -> f64 {
    (ms - shift.start_ms) as f64 / 3_600_000.0
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_printed_with_the_decimals_of_their_step_and_never_as_minus_zero() {
        let (t, d) = nice_ticks(&Axis { lo: -2.6, hi: -1.4 }, 5);
        let labels: Vec<String> = t.iter().map(|v| fmt_num(*v, d)).collect();
        assert_eq!(labels, ["−2.50", "−2.25", "−2.00", "−1.75", "−1.50"]);
        let (t, d) = nice_ticks(&Axis { lo: -0.3, hi: 0.3 }, 5);
        let labels: Vec<String> = t.iter().map(|v| fmt_num(*v, d)).collect();
        assert!(labels.contains(&"0.0".to_string()), "{labels:?}");
        assert!(
            !labels
                .iter()
                .any(|l| l.starts_with("−0.0") && l.trim_start_matches("−0.").chars().all(|c| c == '0'))
        );
        let (t, d) = nice_ticks(&Axis { lo: 0.0, hi: 100.0 }, 5);
        assert_eq!((t.len(), d), (6, 0));
    }

    #[test]
    fn a_simplified_line_keeps_its_corners_and_drops_points_on_straight_runs() {
        let p: Vec<(f64, f64)> =
            (0..100).map(|i| (f64::from(i), if i < 50 { 10.0 } else { 10.0 + f64::from(i - 50) })).collect();
        let mut out = Vec::new();
        simplify(&p, &mut out);
        assert!(out.len() < 10, "{out:?}");
        assert!(out.contains(&(0.0, 10.0)) && out.contains(&(99.0, 59.0)), "{out:?}");
        assert!(out.iter().any(|q| (q.0 - 50.0).abs() <= 1.0), "the corner is kept: {out:?}");
        // Every dropped point lies within 0.5 px of the simplified line.
        for q in &p {
            let w = out.windows(2).find(|w| w[0].0 <= q.0 && q.0 <= w[1].0).unwrap();
            let y = w[0].1 + (w[1].1 - w[0].1) * (q.0 - w[0].0) / (w[1].0 - w[0].0).max(1e-9);
            assert!((y - q.1).abs() < 0.5, "{q:?} vs {y}");
        }
    }

    #[test]
    fn coordinates_are_written_to_one_decimal() {
        let mut s = String::new();
        for v in [0.0, 1.25, -0.04, -3.96, 123.449, 1e300] {
            push_coord(&mut s, v);
            s.push(' ');
        }
        assert_eq!(s, "0.0 1.3 0.0 -4.0 123.4 100000000000000.0 ");
    }

    #[test]
    fn limit_labels_never_overlap() {
        let mut p = Plot::new(
            "t",
            "t",
            Axis { lo: 0.0, hi: 1.0 },
            Axis { lo: 0.0, hi: 1.0 },
            "y",
            "x",
            250.0,
            Frame::Wide,
        );
        for y in [0.50, 0.51, 0.52, 0.9] {
            p.hline(y, INK, "4 3", "label", "x");
        }
        let svg = p.finish();
        let ys: Vec<f64> = svg
            .split("class=\"limit-label\"")
            .skip(1)
            .map(|s| s.split("y=\"").nth(1).unwrap().split('"').next().unwrap().parse().unwrap())
            .collect();
        assert_eq!(ys.len(), 4);
        for w in ys.windows(2) {
            assert!(w[1] - w[0] >= 12.9, "{ys:?}");
        }
    }
}
