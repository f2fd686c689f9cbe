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
    let mut out = String::with_capacity(s.len() + 8);
    push_esc(&mut out, s);
    out
}

/// Append `s` escaped for HTML and SVG (`&`, `<`, `>`, `"`), in one pass.
pub(super) fn push_esc(out: &mut String, s: &str) {
    let mut from = 0;
    for (i, b) in s.bytes().enumerate() {
        let rep = match b {
            b'&' => "&amp;",
            b'<' => "&lt;",
            b'>' => "&gt;",
            b'"' => "&quot;",
            _ => continue,
        };
        out.push_str(&s[from..i]);
        out.push_str(rep);
        from = i + 1;
    }
    out.push_str(&s[from..]);
}

/// Append `v` as `{v}` (`Display`) writes it: whole numbers by integer arithmetic, others
/// through the formatter (the plots' sizes, margins and widths are mostly whole).
pub(super) fn push_num(out: &mut String, v: f64) {
    if v.is_finite() && v == v.trunc() && v.abs() < 1e15 && !(v == 0.0 && v.is_sign_negative()) {
        push_int(out, v as i64);
    } else {
        let _ = write!(out, "{v}");
    }
}

/// Append an integer in decimal.
pub(super) fn push_int(out: &mut String, v: i64) {
    let mut buf = [0u8; 20];
    let mut i = buf.len();
    let mut a = v.unsigned_abs();
    loop {
        i -= 1;
        buf[i] = b'0' + (a % 10) as u8;
        a /= 10;
        if a == 0 {
            break;
        }
    }
    if v < 0 {
        out.push('-');
    }
    out.push_str(std::str::from_utf8(&buf[i..]).unwrap_or("0"));
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
    push_int(&mut s, (a / p) as i64);
    if d > 0 {
        s.push('.');
        // The fraction's digits, zero-padded to `d`.
        let mut digits = [b'0'; 9];
        let mut f = a % p;
        for k in (0..d).rev() {
            digits[k] = b'0' + (f % 10) as u8;
            f /= 10;
        }
        s.push_str(std::str::from_utf8(&digits[..d]).unwrap_or(""));
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

/// Appends to an SVG being written: text, escaped text, numbers as `Display` writes them and
/// coordinates to one decimal, without the formatting machinery (a report writes thousands).
pub(super) struct W<'a>(pub(super) &'a mut String);

impl W<'_> {
    /// Text as it is.
    pub(super) fn s(&mut self, s: &str) -> &mut Self {
        self.0.push_str(s);
        self
    }

    /// Text escaped for HTML and SVG.
    pub(super) fn e(&mut self, s: &str) -> &mut Self {
        push_esc(self.0, s);
        self
    }

    /// A number as `{v}` writes it.
    pub(super) fn n(&mut self, v: f64) -> &mut Self {
        push_num(self.0, v);
        self
    }

    /// A coordinate to one decimal.
    pub(super) fn c(&mut self, v: f64) -> &mut Self {
        push_coord(self.0, v);
        self
    }
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
    /// ` clip-path="url(#clip-<id>)"`, written on everything clipped to the frame.
    clip: String,
    /// Labels of limit lines: (y px, colour, text), placed in the right margin at the end.
    labels: Vec<(f64, String, String)>,
    /// Largest x step drawn as one line (longer is a gap).
    max_gap: f64,
    /// Scratch buffers of the lines: a segment's points and those kept by `simplify`.
    seg: Vec<(f64, f64)>,
    kept: Vec<(f64, f64)>,
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

/// Both drawings, in the order the page carries them.
pub(super) const FRAMES: [Frame; 2] = [Frame::Wide, Frame::Narrow];

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
        let id = if narrow { format!("{id}-n") } else { id.to_string() };
        let mut clip = String::with_capacity(id.len() + 24);
        W(&mut clip).s(r#" clip-path="url(#clip-"#).s(&id).s(r#")""#);
        let mut p = Plot {
            id,
            w: if narrow { 420.0 } else { 720.0 },
            h,
            left: if narrow { 54.0 } else { 62.0 },
            right: if narrow { 104.0 } else { 132.0 },
            top: 10.0,
            bottom: 42.0,
            x,
            y,
            back: String::with_capacity(2048),
            svg: String::with_capacity(8192),
            clip,
            labels: Vec::new(),
            max_gap: f64::INFINITY,
            seg: Vec::new(),
            kept: Vec::new(),
        };
        let (w, h, l, tp) = (p.w, p.h, p.left, p.top);
        let (cw, ch) = (p.w - p.left - p.right, p.h - p.top - p.bottom);
        W(&mut p.back)
            .s(r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 "#)
            .n(w)
            .s(" ")
            .n(h)
            .s(r#"" role="img" aria-label=""#)
            .e(title)
            .s(r#"" class="plot "#)
            .s(if narrow { "narrow" } else { "wide" })
            .s(r#"" id="svg-"#)
            .s(&p.id)
            .s(r#""><title>"#)
            .e(title)
            .s(r#"</title><defs><clipPath id="clip-"#)
            .s(&p.id)
            .s(r#""><rect x=""#)
            .n(l)
            .s(r#"" y=""#)
            .n(tp)
            .s(r#"" width=""#)
            .n(cw)
            .s(r#"" height=""#)
            .n(ch)
            .s(r#""/></clipPath><pattern id="nodata-"#)
            .s(&p.id)
            .s(r##"" width="8" height="8" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><rect width="8" height="8" fill="#f4f4f4"/><line x1="0" y1="0" x2="0" y2="8" stroke="#c8c8c8" stroke-width="2"/></pattern></defs><rect x="0" y="0" width=""##)
            .n(w)
            .s(r#"" height=""#)
            .n(h)
            .s(r#"" fill="white"/>"#);
        p.axes(y_label, x_label);
        p
    }

    fn axes(&mut self, y_label: &str, x_label: &str) {
        let (x0, y0, x1, y1) = (self.left, self.top, self.w - self.right, self.h - self.bottom);
        let (ticks, dec) = nice_ticks(&self.y, if self.h < 200.0 { 3 } else { 5 });
        for tv in ticks {
            let yv = self.py(tv);
            W(&mut self.svg)
                .s(r#"<line x1=""#)
                .n(x0)
                .s(r#"" y1=""#)
                .c(yv)
                .s(r#"" x2=""#)
                .n(x1)
                .s(r#"" y2=""#)
                .c(yv)
                .s(r#"" stroke=""#)
                .s(GRID)
                .s(r#""/><text x=""#)
                .c(x0 - 6.0)
                .s(r#"" y=""#)
                .c(yv + 4.0)
                .s(r#"" font-size="12" text-anchor="end" fill=""#)
                .s(INK)
                .s(r#"">"#)
                .s(&fmt_num(tv, dec))
                .s("</text>");
        }
        let (ym, xm) = ((y0 + y1) / 2.0, (x0 + x1) / 2.0);
        W(&mut self.svg)
            .s(r#"<line x1=""#)
            .n(x0)
            .s(r#"" y1=""#)
            .n(y1)
            .s(r#"" x2=""#)
            .n(x1)
            .s(r#"" y2=""#)
            .n(y1)
            .s(r#"" stroke=""#)
            .s(INK)
            .s(r#""/><line x1=""#)
            .n(x0)
            .s(r#"" y1=""#)
            .n(y0)
            .s(r#"" x2=""#)
            .n(x0)
            .s(r#"" y2=""#)
            .n(y1)
            .s(r#"" stroke=""#)
            .s(INK)
            .s(r#""/><line x1=""#)
            .n(x1)
            .s(r#"" y1=""#)
            .n(y0)
            .s(r#"" x2=""#)
            .n(x1)
            .s(r#"" y2=""#)
            .n(y1)
            .s(r#"" stroke=""#)
            .s(GRID)
            .s(r#""/><text x="13" y=""#)
            .c(ym)
            .s(r#"" font-size="12" fill=""#)
            .s(INK)
            .s(r#"" transform="rotate(-90 13 "#)
            .c(ym)
            .s(r#")" text-anchor="middle">"#)
            .e(y_label)
            .s(r#"</text><text x=""#)
            .c(xm)
            .s(r#"" y=""#)
            .c(self.h - 6.0)
            .s(r#"" font-size="12" fill=""#)
            .s(INK)
            .s(r#"" text-anchor="middle">"#)
            .e(x_label)
            .s("</text>");
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

    /// Tick marks and labels on the x axis.
    pub(super) fn x_ticks(&mut self, ticks: &[(f64, String)]) {
        let y1 = self.h - self.bottom;
        for (v, label) in ticks {
            if *v < self.x.lo - 1e-9 || *v > self.x.hi + 1e-9 {
                continue;
            }
            let x = self.px(*v);
            W(&mut self.svg)
                .s(r#"<line x1=""#)
                .c(x)
                .s(r#"" y1=""#)
                .n(y1)
                .s(r#"" x2=""#)
                .c(x)
                .s(r#"" y2=""#)
                .c(y1 + 4.0)
                .s(r#"" stroke=""#)
                .s(INK)
                .s(r#""/><text x=""#)
                .c(x)
                .s(r#"" y=""#)
                .c(y1 + 17.0)
                .s(r#"" font-size="12" text-anchor="middle" fill=""#)
                .s(INK)
                .s(r#"">"#)
                .e(label)
                .s("</text>");
        }
    }

    /// A shaded span of x (behind everything), e.g. a monitor state; `fill` may be `nodata`.
    pub(super) fn shade(&mut self, x0: f64, x1: f64, fill: &str, class: &str) {
        let (a, b) = (self.px(x0.max(self.x.lo)), self.px(x1.min(self.x.hi)));
        if b <= a {
            return;
        }
        let (top, ch) = (self.top, self.h - self.top - self.bottom);
        let mut w = W(&mut self.back);
        w.s(r#"<rect class="shade "#)
            .s(class)
            .s(r#"" x=""#)
            .c(a)
            .s(r#"" y=""#)
            .n(top)
            .s(r#"" width=""#)
            .c(b - a)
            .s(r#"" height=""#)
            .n(ch)
            .s(r#"" fill=""#);
        if fill == "nodata" {
            w.s("url(#nodata-").s(&self.id).s(")");
        } else {
            w.s(fill);
        }
        w.s(r#""/>"#);
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
        // What every segment of the line starts with, and its dots' attributes.
        let mut head = String::with_capacity(160);
        let mut w = W(&mut head);
        w.s(r#"<polyline class="series" data-series=""#)
            .e(name)
            .s(r#"" fill="none" stroke=""#)
            .s(color)
            .s(r#"" stroke-width=""#)
            .n(width)
            .s("\"");
        if let Some(d) = dash {
            w.s(r#" stroke-dasharray=""#).s(d).s("\"");
        }
        w.s(&self.clip).s(r#" points=""#);
        let mut dot = String::with_capacity(64);
        W(&mut dot).s(r#"" r="1.8" fill=""#).s(color).s("\"").s(&self.clip).s("/>");
        let mut seg = std::mem::take(&mut self.seg);
        let mut kept = std::mem::take(&mut self.kept);
        seg.clear();
        let mut last_x = f64::NEG_INFINITY;
        for (x, y) in pts {
            if x - last_x > self.max_gap {
                self.flush_segment(&mut seg, &mut kept, &head, &dot);
            }
            last_x = *x;
            match y {
                Some(y) if y.is_finite() => seg.push((self.px(*x), self.py(*y))),
                _ => self.flush_segment(&mut seg, &mut kept, &head, &dot),
            }
        }
        self.flush_segment(&mut seg, &mut kept, &head, &dot);
        self.seg = seg;
        self.kept = kept;
    }

    /// Write a segment of a line (a lone point between gaps as a dot) and empty it.
    fn flush_segment(
        &mut self,
        seg: &mut Vec<(f64, f64)>,
        kept: &mut Vec<(f64, f64)>,
        head: &str,
        dot: &str,
    ) {
        if seg.len() > 1 {
            self.svg.push_str(head);
            simplify(seg, kept);
            self.svg.reserve(kept.len() * 12);
            for (x, y) in kept.iter() {
                push_point(&mut self.svg, *x, *y);
            }
            self.svg.pop();
            self.svg.push_str("\"/>");
        } else if let Some((x, y)) = seg.first() {
            // A lone point between gaps is drawn as a dot.
            W(&mut self.svg).s(r#"<circle cx=""#).c(*x).s(r#"" cy=""#).c(*y).s(dot);
        }
        seg.clear();
    }

    /// Dots at the points.
    pub(super) fn dots(&mut self, pts: &[(f64, f64)], color: &str, r: f64, class: &str) {
        let mut head = String::with_capacity(32);
        W(&mut head).s(r#"<circle class=""#).s(class).s(r#"" cx=""#);
        let mut tail = String::with_capacity(64);
        W(&mut tail).s(r#"" r=""#).n(r).s(r#"" fill=""#).s(color).s("\"").s(&self.clip).s("/>");
        for (x, y) in pts {
            let (px, py) = (self.px(*x), self.py(*y));
            W(&mut self.svg).s(&head).c(px).s(r#"" cy=""#).c(py).s(&tail);
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
        let mut edge = std::mem::take(&mut self.seg);
        let mut kept = std::mem::take(&mut self.kept);
        W(&mut self.svg)
            .s(r#"<polygon class="band" fill=""#)
            .s(BAND)
            .s(r#"" stroke="none""#)
            .s(&self.clip)
            .s(r#" points=""#);
        for upper in [false, true] {
            edge.clear();
            if upper {
                edge.extend(pts.iter().rev().map(|(x, _, hi)| (self.px(*x), self.py(*hi))));
            } else {
                edge.extend(pts.iter().map(|(x, lo, _)| (self.px(*x), self.py(*lo))));
            }
            simplify(&edge, &mut kept);
            for (x, y) in &kept {
                push_point(&mut self.svg, *x, *y);
            }
        }
        self.svg.pop();
        self.svg.push_str("\"/>");
        self.seg = edge;
        self.kept = kept;
    }

    /// A horizontal limit line across the frame, labelled in the right margin.
    pub(super) fn hline(&mut self, y: f64, color: &str, dash: &str, label: &str, class: &str) {
        let yy = self.py(y);
        if !(self.top - 0.5..=self.h - self.bottom + 0.5).contains(&yy) {
            return;
        }
        W(&mut self.svg)
            .s(r#"<line class="limit "#)
            .s(class)
            .s(r#"" data-value=""#)
            .n(y)
            .s(r#"" x1=""#)
            .n(self.left)
            .s(r#"" y1=""#)
            .c(yy)
            .s(r#"" x2=""#)
            .n(self.w - self.right)
            .s(r#"" y2=""#)
            .c(yy)
            .s(r#"" stroke=""#)
            .s(color)
            .s(r#"" stroke-width="1.3" stroke-dasharray=""#)
            .s(dash)
            .s(r#""/>"#);
        self.labels.push((yy, color.to_string(), label.to_string()));
    }

    /// A vertical line at x within the frame.
    pub(super) fn vline(&mut self, x: f64, color: &str, dash: &str, class: &str) {
        let xx = self.px(x);
        if xx < self.left - 0.5 || xx > self.w - self.right + 0.5 {
            return;
        }
        W(&mut self.svg)
            .s(r#"<line class=""#)
            .s(class)
            .s(r#"" x1=""#)
            .c(xx)
            .s(r#"" y1=""#)
            .n(self.top)
            .s(r#"" x2=""#)
            .c(xx)
            .s(r#"" y2=""#)
            .n(self.h - self.bottom)
            .s(r#"" stroke=""#)
            .s(color)
            .s(r#"" stroke-width="1.3" stroke-dasharray=""#)
            .s(dash)
            .s(r#""/>"#);
    }

    /// A thick translucent bar from x0 to x1 at y (a range).
    pub(super) fn hspan(&mut self, x0: f64, x1: f64, y: f64, color: &str, class: &str) {
        let (a, b) = (self.px(x0).max(self.left), self.px(x1).min(self.w - self.right));
        let yy = self.py(y);
        W(&mut self.svg)
            .s(r#"<rect class=""#)
            .s(class)
            .s(r#"" x=""#)
            .c(a)
            .s(r#"" y=""#)
            .c(yy - 4.0)
            .s(r#"" width=""#)
            .c((b - a).max(2.0))
            .s(r#"" height="8" fill=""#)
            .s(color)
            .s(r#"" fill-opacity="0.35"/>"#);
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
        W(&mut self.svg)
            .s(r#"<text class="note "#)
            .s(class)
            .s(r#"" x=""#)
            .c(xx)
            .s(r#"" y=""#)
            .c(yy)
            .s(r#"" font-size="12.5" font-weight="600" text-anchor=""#)
            .s(anchor)
            .s(r#"" fill=""#)
            .s(INK)
            .s(r#"" stroke="white" stroke-width="4" paint-order="stroke">"#);
        for (i, line) in lines.iter().enumerate() {
            let dy = if i == 0 { "0" } else { "15" };
            W(&mut self.svg).s(r#"<tspan x=""#).c(xx).s(r#"" dy=""#).s(dy).s(r#"">"#).e(line).s("</tspan>");
        }
        self.svg.push_str("</text>");
    }

    /// An alert marker at x: a dotted vertical line with a triangle, its label at the top.
    pub(super) fn marker(&mut self, x: f64, label: &str, tooltip: &str) {
        let xx = self.px(x);
        if xx < self.left || xx > self.w - self.right {
            return;
        }
        let (top, y1) = (self.top, self.h - self.bottom);
        W(&mut self.svg)
            .s(r#"<g class="alert-marker"><line x1=""#)
            .c(xx)
            .s(r#"" y1=""#)
            .n(top)
            .s(r#"" x2=""#)
            .c(xx)
            .s(r#"" y2=""#)
            .n(y1)
            .s(r#"" stroke=""#)
            .s(MARK)
            .s(r#"" stroke-width="1.5" stroke-dasharray="2 3"/><polygon points=""#)
            .c(xx - 5.0)
            .s(",")
            .n(top)
            .s(" ")
            .c(xx + 5.0)
            .s(",")
            .n(top)
            .s(" ")
            .c(xx)
            .s(",")
            .n(top + 8.0)
            .s(r#"" fill=""#)
            .s(MARK)
            .s(r#""/><text x=""#)
            .c(xx + 6.0)
            .s(r#"" y=""#)
            .n(top + 10.0)
            .s(r#"" font-size="11" fill=""#)
            .s(MARK)
            .s(r#"">"#)
            .e(label)
            .s("</text><title>")
            .e(tooltip)
            .s("</title></g>");
    }

    /// The finished SVG: the labels of the limit lines in the right margin, moved apart.
    #[cfg(test)]
    pub(super) fn finish(self) -> String {
        let mut out = String::new();
        self.finish_into(&mut out);
        out
    }

    /// [`Plot::finish`], appended to `out`.
    pub(super) fn finish_into(mut self, out: &mut String) {
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
            W(&mut self.svg)
                .s(r#"<text class="limit-label" x=""#)
                .c(x)
                .s(r#"" y=""#)
                .c(*y)
                .s(r#"" font-size="11.5" fill=""#)
                .s(color)
                .s(r#"">"#)
                .e(text)
                .s("</text>");
        }
        out.reserve(self.back.len() + self.svg.len() + 6);
        out.push_str(&self.back);
        out.push_str(&self.svg);
        out.push_str("</svg>");
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
