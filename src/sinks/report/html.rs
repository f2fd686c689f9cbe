//! The HTML pages: the shift report (also the live view of a shift in progress) and the
//! service's overview of all units. Self-contained (inline CSS and SVG, no scripts, nothing
//! fetched), usable at 420 px and printable on A4 and Letter.
//!
//! The report reads in this order: the headline (state, active alerts with their cause and
//! action, the residual against the previous shift, the projected cleaning date), the plots
//! with what the monitor used written on them (its baseline and limits, its blocks, its
//! effectiveness trend and projection, its states shaded, gaps left open, the design
//! conversion), the inputs of the balance, the alerts of the shift in local time with their
//! evidence in words, the shelves and requests, the data read, and the model's validity.

use std::collections::BTreeMap;
use std::fmt::Write as _;

use super::data::{ReportData, state_of};
use super::svg::{
    Axis, BAND, FRAMES, Frame, INK, LIMIT, MARK, MEAS, PRED, Plot, SERIES, W, esc, fmt_num, hour_ticks,
    hours_of, local, push_esc,
};
use crate::core::alerts::EventKind;
use crate::core::monitor::stats::LineFit;
use crate::core::monitor::{MonitorState, Trend};
use crate::core::vocabulary::Severity;

const DAY_MS: f64 = 86_400_000.0;

/// The projected date the heater reaches its cleaning limit, as the monitor's trend gives it.
#[derive(Debug, Clone, PartialEq)]
pub struct Projection {
    /// Projected time, ms.
    pub at_ms: i64,
    /// Earliest and latest (±2σ), ms.
    pub range_ms: (i64, i64),
    /// The projected date (local), as the alert writes it.
    pub date: String,
    /// The range's dates (local).
    pub range: (String, String),
    /// The sentence the report, the live view and the text summary show.
    pub text: String,
}

/// The projection of the monitor's trend to the cleaning limit `limit`, with the dates written
/// as the alert writes them (the local day of the instant).
pub fn projection(trend: Option<&Trend>, limit: f64, tz: &jiff::tz::TimeZone) -> Option<Projection> {
    let t = trend?;
    let at = t.limit_ms?;
    let (lo, hi) = t.range_ms.unwrap_or((at, at));
    let date = crate::core::calendar::day_of(at + 1, tz);
    let range = crate::core::monitor::range_text(lo, hi, tz);
    let text = if lo == hi {
        format!("the fitted trend has reached the cleaning limit {:.0} % ({date})", limit * 100.0)
    } else {
        format!(
            "cleaning limit {:.0} % projected on {date} (between {} and {})",
            limit * 100.0,
            range.0,
            range.1
        )
    };
    Some(Projection { at_ms: at, range_ms: (lo, hi), date, range, text })
}

/// Fill colour and label of a monitor state's shading (watching is not shaded).
fn state_shade(s: MonitorState) -> Option<(&'static str, &'static str)> {
    match s {
        MonitorState::Watching => None,
        MonitorState::Learning => Some(("#e3edf9", "learning")),
        MonitorState::Unsteady => Some(("#fbecd0", "unsteady")),
        MonitorState::Settling => Some(("#fdf5e2", "settling")),
        MonitorState::Paused => Some(("#e4e4e4", "paused")),
    }
}

/// The spans of the shift with their state (None: no data), in hours since the shift start.
fn spans(d: &ReportData) -> Vec<(f64, f64, Option<MonitorState>)> {
    let gap = 1.5 * d.interval_ms as f64 / 3_600_000.0;
    let step = d.interval_ms as f64 / 3_600_000.0;
    let mut out: Vec<(f64, f64, Option<MonitorState>)> = Vec::new();
    let mut prev_end = hours_of(d.shift.start_ms, &d.shift);
    for r in &d.rows {
        let x = hours_of(r.t_ms, &d.shift);
        let start = (x - step).max(prev_end);
        if x - prev_end > gap {
            out.push((prev_end, start, None));
        }
        let s = Some(state_of(r));
        match out.last_mut() {
            Some(last) if last.2 == s && (start - last.1).abs() < 1e-9 => last.1 = x,
            _ => out.push((start, x, s)),
        }
        prev_end = x;
    }
    let end = d.live_until_ms.map_or(hours_of(d.shift.end_ms, &d.shift), |t| hours_of(t, &d.shift));
    if end - prev_end > gap {
        out.push((prev_end, end, None));
    }
    out
}

/// The time axis the in-shift plots share, for both drawings.
struct ShiftAxis {
    hours: Axis,
    /// Ticks of the wide drawing and of the narrow one.
    ticks: [Vec<(f64, String)>; 2],
    label: String,
    spans: Vec<(f64, f64, Option<MonitorState>)>,
    /// Alerts raised in the shift: (hours, label "A<number in the alert table>", tooltip).
    raised: Vec<(f64, String, String)>,
}

impl ShiftAxis {
    fn new(d: &ReportData) -> ShiftAxis {
        let (hours, ticks) = hour_ticks(&d.shift, &d.tz);
        // Every other hour in the narrow drawing: its labels would touch.
        let narrow = if ticks.len() > 6 { ticks.iter().step_by(2).cloned().collect() } else { ticks.clone() };
        let raised = d
            .lifecycles
            .iter()
            .enumerate()
            .filter(|(_, (first, _))| first.time_ms > d.shift.start_ms && first.time_ms <= d.shift.end_ms)
            .map(|(i, (first, _))| {
                (
                    hours_of(first.time_ms, &d.shift),
                    format!("A{}", i + 1),
                    format!("{} raised: {}", first.cause.as_str(), first.message),
                )
            })
            .collect();
        ShiftAxis {
            hours,
            ticks: [ticks, narrow],
            label: format!("local time ({})", d.tz.iana_name().unwrap_or("local")),
            spans: spans(d),
            raised,
        }
    }

    /// A plot on this axis in `frame`: shaded states and gaps, ticks, gaps in lines.
    #[allow(clippy::too_many_arguments)]
    fn plot(
        &self,
        d: &ReportData,
        frame: Frame,
        id: &str,
        title: &str,
        y: Axis,
        y_label: &str,
        h: f64,
    ) -> Plot {
        let narrow = frame == Frame::Narrow;
        let label = if narrow { "local time" } else { self.label.as_str() };
        let mut p = Plot::new(id, title, self.hours, y, y_label, label, h, frame);
        for (a, b, s) in &self.spans {
            match s {
                None => p.shade(*a, *b, "nodata", "no-data"),
                Some(s) => {
                    if let Some((fill, name)) = state_shade(*s) {
                        p.shade(*a, *b, fill, name);
                    }
                }
            }
        }
        p.x_ticks(&self.ticks[usize::from(narrow)]);
        p.gaps_over(1.5 * d.interval_ms as f64 / 3_600_000.0);
        p
    }

    /// The markers of the alerts raised in the shift.
    fn markers(&self, p: &mut Plot) {
        for (x, label, tip) in &self.raised {
            p.marker(*x, label, tip);
        }
    }
}

/// Both drawings of a plot (wide, then narrow: the page's style shows the one for its
/// width), from what was computed once for the figure.
fn both(mut draw: impl FnMut(Frame) -> Plot) -> String {
    let mut svg = String::with_capacity(16 * 1024);
    for frame in FRAMES {
        draw(frame).finish_into(&mut svg);
    }
    svg
}

/// A figure: heading, legend, the SVG (both drawings) and a caption with the plot's numbers
/// in words.
struct Figure {
    id: &'static str,
    title: String,
    legend: Vec<(String, String, &'static str)>,
    svg: String,
    caption: String,
}

fn series<'a>(
    d: &'a ReportData,
    f: impl Fn(&super::data::Row) -> Option<f64> + 'a,
) -> Vec<(f64, Option<f64>)> {
    d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), f(r))).collect()
}

/// The effluent temperature: predicted (with its ±2u band) vs measured.
fn temperature_figure(d: &ReportData, x: &ShiftAxis) -> Figure {
    let temps = d.rows.iter().flat_map(|r| {
        let u = r.u.unwrap_or(0.0);
        [r.measured, r.predicted.map(|p| p - 2.0 * u), r.predicted.map(|p| p + 2.0 * u)]
    });
    let sym = d.unit_symbol();
    let y = Axis::of(temps.flatten(), 0.08);
    let y_label = format!("temperature / {sym}");
    let band: Vec<(f64, f64, f64)> = d
        .rows
        .iter()
        .filter_map(|r| {
            let u = r.u.unwrap_or(0.0);
            Some((hours_of(r.t_ms, &d.shift), r.predicted? - 2.0 * u, r.predicted? + 2.0 * u))
        })
        .collect();
    let predicted = series(d, |r| r.predicted);
    let measured = series(d, |r| r.measured);
    let svg = both(|frame| {
        let mut p = x.plot(d, frame, "temperature", "Effluent temperature", y, &y_label, 250.0);
        p.band(&band);
        p.line(&predicted, PRED, 1.6, None, "predicted");
        p.line(&measured, MEAS, 1.4, None, "measured");
        x.markers(&mut p);
        p
    });
    Figure {
        id: "temperature",
        title: format!("Effluent temperature, {sym}: predicted from the enthalpy balance and measured"),
        legend: vec![
            ("predicted".into(), PRED.into(), "line"),
            ("±2u of the prediction".into(), BAND.into(), "box"),
            ("measured".into(), MEAS.into(), "line"),
        ],
        svg,
        caption: String::new(),
    }
}

/// The residual with what the monitor judges it by: its baseline, its alert and gross limits,
/// and its block means.
fn residual_figure(d: &ReportData, x: &ShiftAxis) -> Figure {
    let ds = d.delta_symbol();
    let monitor = d.extra.monitor.as_ref();
    let baseline = monitor.and_then(|m| m.baseline);
    let limits = monitor.and_then(|m| m.limits);
    let blocks: Vec<(f64, f64)> = monitor
        .map(|m| m.blocks.iter().map(|b| (hours_of(b.end_ms, &d.shift), d.delta(b.residual_k))).collect())
        .unwrap_or_default();
    let mut lines: Vec<(f64, &str, &str, String, &str)> = Vec::new();
    let mut caption = format!("Residual = measured − predicted, in {ds}. ");
    match (baseline, limits) {
        (Some(b), Some(l)) => {
            let mu = d.delta(b.mu_k);
            let (sb, si) = (d.delta(b.sigma_block_k), d.delta(b.sigma_interval_k));
            let enter = l.enter_z * sb;
            let gross = l.gross_z * si;
            lines.push((mu, INK, "none", format!("baseline {}", signed(mu, 3)), "baseline"));
            lines.push((
                mu + enter,
                LIMIT,
                "6 4",
                format!("+{}σ {}", l.enter_z, signed(mu + enter, 2)),
                "alert-limit",
            ));
            lines.push((
                mu - enter,
                LIMIT,
                "6 4",
                format!("−{}σ {}", l.enter_z, signed(mu - enter, 2)),
                "alert-limit",
            ));
            lines.push((mu + gross, MARK, "2 3", format!("gross {}", signed(mu + gross, 2)), "gross-limit"));
            lines.push((mu - gross, MARK, "2 3", format!("gross {}", signed(mu - gross, 2)), "gross-limit"));
            let _ = write!(
                caption,
                "The monitor's baseline (learned {}): {} {ds}, block σ {} {ds} over blocks of {} intervals; \
                 a block mean beyond baseline ± {}σ = [{}, {}] {ds} enters a drift condition (it clears within ± {}σ); \
                 an interval beyond ± {}σ of the interval scatter ({} {ds}) is gross.",
                local(b.learned_ms, &d.tz, "%Y-%m-%d %H:%M"),
                signed(mu, 3),
                fmt_num(sb, 3),
                b.block,
                l.enter_z,
                signed(mu - enter, 2),
                signed(mu + enter, 2),
                l.clear_z,
                l.gross_z,
                fmt_num(si, 3),
            );
            if let Some(last) = monitor.and_then(|m| m.blocks.last()) {
                let _ = write!(
                    caption,
                    " Last block: {} {ds}, z = {}.",
                    signed(d.delta(last.residual_k), 3),
                    fmt_num(last.z, 1)
                );
            }
        }
        _ => caption.push_str(
            "No baseline yet: the monitor is learning what is normal for this unit, and no limits apply.",
        ),
    }
    let vals = d
        .rows
        .iter()
        .filter_map(|r| r.residual)
        .chain(lines.iter().filter(|l| l.4 != "gross-limit").map(|l| l.0))
        .chain(blocks.iter().map(|b| b.1));
    let mut ya = Axis::of(vals, 0.1);
    // The gross limits widen the axis only when the data come near them.
    for l in lines.iter().filter(|l| l.4 == "gross-limit") {
        if (l.0 - ya.lo).abs().min((l.0 - ya.hi).abs()) < 0.3 * (ya.hi - ya.lo) {
            ya = Axis { lo: ya.lo.min(l.0), hi: ya.hi.max(l.0) };
        }
    }
    let y_label = format!("residual / {ds}");
    let residuals = series(d, |r| r.residual);
    let svg = both(|frame| {
        let mut p = x.plot(d, frame, "residual", "Residual", ya, &y_label, 250.0);
        for (y, color, dash, label, class) in &lines {
            p.hline(*y, color, dash, label, class);
        }
        p.line(&residuals, MEAS, 1.1, None, "residual");
        p.dots(&blocks, INK, 2.6, "block");
        x.markers(&mut p);
        p
    });
    let mut legend =
        vec![("interval residual".into(), MEAS.into(), "line"), ("block mean".into(), INK.into(), "dot")];
    if baseline.is_some() {
        legend.push(("baseline".into(), INK.into(), "line"));
        legend.push(("alert limit".into(), LIMIT.into(), "dash"));
        legend.push(("gross limit".into(), MARK.into(), "dot-line"));
    }
    Figure {
        id: "residual",
        title: format!("Residual (measured − predicted), {ds}, against the monitor's baseline and limits"),
        legend,
        svg,
        caption,
    }
}

/// A number with its sign.
fn signed(v: f64, decimals: usize) -> String {
    let s = fmt_num(v, decimals);
    if s.starts_with('−') || s.chars().all(|c| c == '0' || c == '.') { s } else { format!("+{s}") }
}

/// The projected date and range written on the effectiveness plot; for a narrow plot on two
/// lines, and the range without the date when it is the projected day.
fn projection_note(pr: &Projection, narrow: bool) -> String {
    fn same<'a>(r: &'a str, date: &str) -> Option<&'a str> {
        r.strip_prefix(date).map(str::trim).filter(|t| !t.is_empty())
    }
    if !narrow {
        return format!("limit reached {} ({} to {})", pr.date, pr.range.0, pr.range.1);
    }
    match (same(&pr.range.0, &pr.date), same(&pr.range.1, &pr.date)) {
        (Some(a), Some(b)) => format!("limit reached {}\n(between {a} and {b})", pr.date),
        _ => format!("limit reached {}\n({} to {})", pr.date, pr.range.0, pr.range.1),
    }
}

/// The day ticks of the effectiveness plot over `span` days from `t0`, labelled in local
/// dates: every day, or every 2nd, 3rd or 7th for longer spans (twice as far apart in the
/// narrow drawing).
fn day_ticks(d: &ReportData, t0: i64, span: f64, narrow: bool) -> Vec<(f64, String)> {
    let step = if narrow { 2 } else { 1 }
        * if span > 40.0 {
            7
        } else if span > 16.0 {
            3
        } else if span > 8.0 {
            2
        } else {
            1
        };
    (0..=(span.floor() as i64))
        .step_by(step)
        .map(|k| (k as f64, local(t0 + k * 86_400_000, &d.tz, "%m-%d")))
        .collect()
}

/// The effectiveness plot's caption: what it shows, the monitor's trend and its projection.
fn effectiveness_caption(trend: Option<&Trend>, proj: Option<&Projection>) -> String {
    let mut caption = String::from(
        "Effectiveness = duty the balance needs to reach the measured temperature ÷ duty reported; 4-hour means of the monitor's steady blocks. ",
    );
    if let Some(t) = trend {
        let _ = write!(
            caption,
            "The monitor's trend ({} model, fitted on {} points): {:+.2} %/day, t = {:.1}. ",
            t.model,
            t.points.len(),
            t.slope_per_day * 100.0,
            t.t
        );
        if t.limit_ms.is_none() {
            caption.push_str(if t.asymptote.is_some() {
                "The fouling is levelling off above the limit: no date projected."
            } else {
                "No significant decline: no date projected."
            });
        }
    } else {
        caption.push_str("No trend: the monitor fits one while the heater is in doubt (a heater alert or an effectiveness chart signal).");
    }
    if let Some(pr) = proj {
        let _ = write!(caption, "At the fitted rate the {}.", pr.text);
    }
    caption
}

/// Heater effectiveness over the trend window, the monitor's trend and its projection.
fn effectiveness_figure(d: &ReportData) -> Figure {
    let limit = d.extra.effectiveness_limit;
    let monitor = d.extra.monitor.as_ref();
    let end = d.live_until_ms.unwrap_or(d.shift.end_ms);
    let window = monitor.map_or(14 * 86_400_000, |m| m.trend_window_ms);
    let t0 = end - window;
    let day = |ms: i64| (ms - t0) as f64 / DAY_MS;
    let points: Vec<(f64, f64)> = monitor
        .map(|m| m.effectiveness.iter().filter(|p| p.0 > t0).map(|(t, e)| (day(*t), *e)).collect())
        .unwrap_or_default();
    let trend = monitor.and_then(|m| m.trend.as_ref());
    let proj = projection(trend, limit, &d.tz);
    let mut hi = day(end);
    if let Some(p) = &proj {
        hi = hi.max(day(p.range_ms.1).min(day(end) + 60.0)).max(day(p.at_ms).min(day(end) + 60.0));
    }
    let mut ys: Vec<f64> = points.iter().map(|p| p.1).collect();
    ys.push(limit);
    let baseline = monitor.and_then(|m| m.baseline).and_then(|b| b.eff);
    if let Some(b) = baseline {
        ys.push(b.0);
    }
    let ya = Axis::of(ys.into_iter(), 0.08);
    let span = hi.max(1.0);
    let line: Vec<(f64, Option<f64>)> = points.iter().map(|(x, y)| (*x, Some(*y))).collect();
    // The trend's fitted line, from its first point to the projected date (or the end).
    let fitted = trend.and_then(|t| {
        let fit_t: Vec<f64> = t.points.iter().map(|p| p.0 as f64 / DAY_MS).collect();
        let fit_y: Vec<f64> = t.points.iter().map(|p| p.1).collect();
        let line = LineFit::fit(&fit_t, &fit_y)?;
        let from = t.points.first().map_or(t0, |p| p.0);
        let to = proj.as_ref().map_or(end, |p| p.at_ms.max(end));
        let at = |ms: i64| line.a + line.b * ms as f64 / DAY_MS;
        Some([(day(from), Some(at(from))), (day(to), Some(at(to)))])
    });
    let baseline_label = baseline.map(|(m, _)| (m, format!("baseline {:.1} %", m * 100.0)));
    let svg = both(|frame| {
        let narrow = frame == Frame::Narrow;
        let mut p = Plot::new(
            "effectiveness",
            "Heater effectiveness",
            Axis { lo: 0.0, hi: span },
            ya,
            "effectiveness",
            "local date",
            250.0,
            frame,
        );
        p.x_ticks(&day_ticks(d, t0, span, narrow));
        p.shade(day(d.shift.start_ms), day(end), "#eef3f6", "this-shift");
        // A gap in the 4-hour means is a gap in the line.
        p.gaps_over(1.6 * 4.0 * 3_600_000.0 / DAY_MS);
        let limit_label = if narrow { "limit" } else { "cleaning limit" };
        p.hline(limit, LIMIT, "6 4", &format!("{limit_label} {:.0} %", limit * 100.0), "cleaning-limit");
        if let Some((m, label)) = &baseline_label {
            p.hline(*m, INK, "none", label, "baseline");
        }
        p.line(&line, PRED, 1.3, None, "effectiveness");
        p.dots(&points, PRED, 2.0, "eff-point");
        if let Some(f) = &fitted {
            p.gaps_over(f64::INFINITY);
            p.line(f, INK, 1.6, Some("7 4"), "trend");
        }
        if let Some(pr) = &proj {
            let (a, b) = (day(pr.range_ms.0), day(pr.range_ms.1));
            if b > a {
                p.hspan(a, b, limit, LIMIT, "projection-range");
            }
            p.vline(day(pr.at_ms), LIMIT, "3 3", "projection");
            p.note(
                day(pr.at_ms),
                limit + 0.09 * (ya.hi - ya.lo),
                &projection_note(pr, narrow),
                "projected-date",
            );
        }
        p
    });
    Figure {
        id: "effectiveness",
        title: "Heater effectiveness over the trend window, the monitor's trend and its projection".into(),
        legend: vec![
            ("4-hour mean".into(), PRED.into(), "line"),
            ("trend".into(), INK.into(), "dash"),
            ("cleaning limit".into(), LIMIT.into(), "dash"),
            ("this shift".into(), "#eef3f6".into(), "box"),
        ],
        svg,
        caption: effectiveness_caption(trend, proj.as_ref()),
    }
}

/// The apparent conversion, with the design conversion and the monitor's baseline.
fn conversion_figure(d: &ReportData, x: &ShiftAxis) -> Figure {
    let design = d.extra.design_conversion;
    let base = d.extra.monitor.as_ref().and_then(|m| m.baseline).and_then(|b| b.conv).map(|c| c.0);
    let vals = d.rows.iter().filter_map(|r| r.conversion).chain(design).chain(base);
    let y = Axis::of(vals, 0.1);
    let design_label = design.map(|c| format!("design {}", fmt_num(c, 3)));
    let base_label = base.map(|c| format!("baseline {}", fmt_num(c, 3)));
    let conversions = series(d, |r| r.conversion);
    let svg = both(|frame| {
        let mut p = x.plot(d, frame, "conversion", "Apparent conversion", y, "conversion", 220.0);
        if let (Some(c), Some(label)) = (design, &design_label) {
            p.hline(c, MARK, "6 4", label, "design");
        }
        if let (Some(c), Some(label)) = (base, &base_label) {
            p.hline(c, INK, "none", label, "baseline");
        }
        p.line(&conversions, PRED, 1.3, None, "apparent conversion");
        x.markers(&mut p);
        p
    });
    let mut caption = String::from(
        "The conversion of the key reactant that makes the balance reproduce the measured temperature. ",
    );
    let now = super::data::mean(d.rows.iter().filter_map(|r| r.conversion));
    if let (Some(c), Some(b), Some(m)) = (design, base, now) {
        let _ = write!(
            caption,
            "It averaged {} this shift, against its baseline {} (learned in steady operation) and the design {}. \
             The baseline's offset from design absorbs the model's constant bias (heats of mixing, enthalpy path, meter bias), \
             so the monitor judges the change from the baseline; heat the heater does not deliver shows here too, \
             since the balance alone cannot tell it from a change of the reaction.",
            fmt_num(m, 3),
            fmt_num(b, 3),
            fmt_num(c, 3)
        );
    }
    Figure {
        id: "conversion",
        title: "Apparent conversion, with the design value and the monitor's baseline".into(),
        legend: vec![
            ("apparent conversion".into(), PRED.into(), "line"),
            ("design".into(), MARK.into(), "dash"),
            ("baseline".into(), INK.into(), "line"),
        ],
        svg,
        caption,
    }
}

/// A line's points: (x, y), `None` where there is no value.
type Points = Vec<(f64, Option<f64>)>;

/// The inputs of the balance, one plot per group and unit (duty, feed flows, feed
/// temperatures).
fn input_figures(d: &ReportData, x: &ShiftAxis) -> Vec<Figure> {
    let inputs = &d.extra.inputs;
    if inputs.times.is_empty() {
        return Vec::new();
    }
    let mut groups: Vec<(String, String, Vec<usize>)> = Vec::new();
    for (i, s) in inputs.series.iter().enumerate() {
        match groups.iter_mut().find(|g| g.0 == s.group && g.1 == s.unit) {
            Some(g) => g.2.push(i),
            None => groups.push((s.group.clone(), s.unit.clone(), vec![i])),
        }
    }
    let hours: Vec<f64> = inputs.times.iter().map(|t| hours_of(*t, &d.shift)).collect();
    let ids = ["input-duty", "input-flow", "input-temperature", "input-4", "input-5", "input-6"];
    let empty = Vec::new();
    groups
        .iter()
        .enumerate()
        .map(|(gi, (group, unit, members))| {
            let vals = members
                .iter()
                .filter_map(|m| inputs.values.get(*m))
                .flat_map(|v| v.iter().filter_map(|x| x.map(f64::from)));
            let y = Axis::of(vals, 0.1);
            let id = ids[gi.min(ids.len() - 1)];
            let what = match group.as_str() {
                "duty" => "Heater duty",
                "flow" => "Feed flows",
                _ => "Feed temperatures",
            };
            let members: Vec<(&str, &str, Points)> = members
                .iter()
                .enumerate()
                .map(|(k, m)| {
                    let values = inputs.values.get(*m).unwrap_or(&empty);
                    let pts = hours.iter().zip(values).map(|(h, v)| (*h, v.map(f64::from))).collect();
                    (SERIES[k % SERIES.len()], inputs.series[*m].label.as_str(), pts)
                })
                .collect();
            let svg = both(|frame| {
                let mut p = x.plot(d, frame, id, what, y, unit, 170.0);
                for (color, label, pts) in &members {
                    p.line(pts, color, 1.3, None, label);
                }
                p
            });
            let legend =
                members.iter().map(|(color, label, _)| ((*label).to_string(), (*color).to_string(), "line"));
            Figure {
                id,
                title: format!("{what}, {unit}"),
                legend: legend.collect(),
                svg,
                caption: String::new(),
            }
        })
        .collect()
}

/// The headline facts of a shift.
pub(super) struct Headline {
    /// Last monitor state.
    pub(super) state: MonitorState,
    /// Raised and cleared in the shift.
    pub(super) raised: usize,
    /// Cleared in the shift.
    pub(super) cleared: usize,
    /// Mean residual this shift and the previous one.
    pub(super) residual: (Option<f64>, Option<f64>),
    /// The cleaning projection.
    pub(super) projection: Option<Projection>,
}

/// The headline of a report.
pub(super) fn headline(d: &ReportData) -> Headline {
    let in_shift = |t: i64| t > d.shift.start_ms && t <= d.shift.end_ms;
    Headline {
        state: d.rows.last().map_or(MonitorState::Paused, state_of),
        raised: d
            .lifecycles
            .iter()
            .filter(|(f, _)| f.event == EventKind::Raised && in_shift(f.time_ms))
            .count(),
        cleared: d
            .lifecycles
            .iter()
            .filter(|(_, l)| l.event == EventKind::Cleared && in_shift(l.time_ms))
            .count(),
        residual: (
            super::data::mean(d.rows.iter().filter_map(|r| r.residual)),
            d.extra.previous_mean_residual,
        ),
        projection: projection(
            d.extra.monitor.as_ref().and_then(|m| m.trend.as_ref()),
            d.extra.effectiveness_limit,
            &d.tz,
        ),
    }
}

const CSS: &str = "*{box-sizing:border-box}\
body{font-family:'DejaVu Sans',Verdana,Arial,sans-serif;color:#24323d;background:#f3f4f2;margin:0;font-size:14px;line-height:1.4}\
main{max-width:980px;margin:0 auto;padding:16px 20px;background:#fff}\
h1{font-size:21px;margin:2px 0}h2{font-size:16px;margin:22px 0 8px;border-bottom:1px solid #d5dbe0;padding-bottom:3px}\
h3{font-size:14px;margin:14px 0 2px}\
.sub{color:#4f5f6b;font-size:13px}.advisory{font-size:12.5px;background:#fff7e0;border:1px solid #ecd9a0;padding:5px 8px;border-radius:3px;margin:8px 0}\
.cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(170px,1fr));gap:10px;margin:10px 0}\
.card{border:1px solid #d5dbe0;border-radius:4px;padding:7px 10px;break-inside:avoid}.card .k{font-size:12px;color:#4f5f6b}.card .v{display:block;font-size:18px;font-weight:700}.card .n{font-size:12px;color:#4f5f6b}\
.state{display:inline-block;padding:0 6px;border-radius:3px}.state-watching{background:#dff0e3}.state-learning{background:#e3edf9}.state-unsteady,.state-settling{background:#fbecd0}.state-paused{background:#e4e4e4}\
.alert{border-left:5px solid #8a5a00;background:#fbf8f1;padding:6px 10px;margin:8px 0;break-inside:avoid}.alert.sev-high{border-color:#a3262a}.alert.sev-medium{border-color:#c46b00}.alert.sev-low{border-color:#8a8a3a}\
.alert .what{font-weight:700}.badge{font-size:11.5px;border:1px solid #999;border-radius:3px;padding:0 4px;margin-right:4px;text-transform:uppercase}\
table{border-collapse:collapse;width:100%;font-size:12.5px;table-layout:fixed}th,td{border-bottom:1px solid #e3e7ea;padding:4px 5px;text-align:left;vertical-align:top;overflow-wrap:anywhere}\
th{background:#eef1f0}thead{display:table-header-group}tr{break-inside:avoid}\
table.kv th{width:40%}div.ev{margin:0 0 2px}\
figure{margin:8px 0 14px;break-inside:avoid}figure svg{width:100%;height:auto;display:block}figcaption{font-size:12.5px;color:#33434f}\
.legend{font-size:12px;display:flex;flex-wrap:wrap;gap:2px 12px;margin:2px 0}.legend i{display:inline-block;width:16px;height:0;border-top:3px solid;vertical-align:middle;margin-right:4px}\
.legend i.dash{border-top-style:dashed}.legend i.dot-line{border-top-style:dotted}.legend i.box{height:10px;border:0}.legend i.dot{width:8px;height:8px;border-radius:4px;border:0}\
.states{font-size:12px}.states span{display:inline-block;padding:0 6px;margin-right:6px;border:1px solid #ccc}\
footer{font-size:12px;color:#4f5f6b;margin-top:24px;border-top:1px solid #d5dbe0;padding-top:8px}\
.spark{width:100%;max-width:160px;height:auto;display:block}\
svg.plot.narrow{display:none}\
@media (max-width:600px){main{padding:10px}svg.plot.wide{display:none}svg.plot.narrow{display:block}h1{font-size:18px}.cards{grid-template-columns:1fr 1fr}table.alerts col.ev{width:34%}\
table.alerts th:nth-child(1),table.alerts td:nth-child(1){width:2em}\
table.units,table.units tbody{display:block}table.units thead,table.units colgroup{display:none}table.units tr{display:block;border-bottom:1px solid #d5dbe0;padding:6px 0}table.units td{display:block;width:auto;border:0;padding:2px 0}\
table.units td[data-k]::before{content:attr(data-k) ': ';color:#4f5f6b;font-size:12px}}\
@page{margin:12mm 10mm}\
@media print{body{background:#fff;font-size:11.5px}main{max-width:none;padding:0}h2{break-after:avoid}figure,.card,.alert,tr{break-inside:avoid}.advisory{background:none}}";

/// The HTML report (self-contained); the live view when `d.live_until_ms` is set.
pub fn render_html(d: &ReportData) -> String {
    let h = headline(d);
    let mut s = String::with_capacity(96 * 1024);
    write_head(&mut s, d);
    write_headline(&mut s, d, &h);
    write_plots(&mut s, d);
    write_alerts(&mut s, d);
    write_requests(&mut s, d);
    write_data_quality(&mut s, d);
    write_validity(&mut s, d);
    write_footer(&mut s, d);
    // The record the page was drawn from, for `efftemp report` (inert: never rendered).
    if d.live_until_ms.is_none()
        && let Ok(json) = serde_json::to_string(&d.extra)
    {
        s.push_str(super::data::RECORD_OPEN);
        push_esc(&mut s, &json);
        s.push_str("</template>");
    }
    s.push_str("</body></html>");
    s
}

fn page_start(s: &mut String, title: &str) {
    let _ = write!(
        s,
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{}</title><style>{CSS}</style></head><body><main>",
        esc(title)
    );
}

/// The document head and the title lines.
fn write_head(s: &mut String, d: &ReportData) {
    let title = match d.live_until_ms {
        Some(_) => format!("{} live: shift {}", d.unit.0, d.shift.label),
        None => format!("Shift report {} {}", d.unit.0, d.shift.label),
    };
    page_start(s, &title);
    let status = match d.live_until_ms {
        Some(t) => format!("shift in progress, data to {}", local(t, &d.tz, "%H:%M")),
        None => "shift report".to_string(),
    };
    let _ = write!(
        s,
        "<header><h1>{} <span class=\"sub\">{}</span></h1><div class=\"sub\">{} &middot; shift {} &middot; {} &middot; efftemp {}</div><p class=\"advisory\">Advisory only: not a safety function and not for automatic control; the cautions are at the end of this page.</p></header>",
        esc(&d.unit.0),
        esc(&d.unit.1),
        esc(&d.site),
        esc(&d.shift.label),
        esc(&status),
        env!("CARGO_PKG_VERSION")
    );
}

fn severity_word(s: Severity) -> &'static str {
    s.as_str()
}

/// The headline: state, active alerts with cause and action, residual, projection, data.
fn write_headline(s: &mut String, d: &ReportData, h: &Headline) {
    let ds = d.delta_symbol();
    let fmt = |v: Option<f64>| v.map_or("n/a".to_string(), |x| format!("{} {ds}", signed(x, 2)));
    let top = d.extra.active.iter().map(|a| a.severity).max();
    let _ = write!(
        s,
        "<section id=\"headline\"><h2>Headline</h2><div class=\"cards\"><div class=\"card\"><span class=\"k\">monitor state</span><span class=\"v\"><span class=\"state state-{st}\">{st}</span></span><span class=\"n\">at {}</span></div><div class=\"card\"><span class=\"k\">active alerts</span><span class=\"v\">{}</span><span class=\"n\">{}; raised {} / cleared {} this shift</span></div><div class=\"card\"><span class=\"k\">mean residual (measured − predicted)</span><span class=\"v\">{}</span><span class=\"n\">previous shift {}</span></div>",
        d.rows.last().map_or(String::new(), |r| local(r.t_ms, &d.tz, "%H:%M")),
        d.extra.active.len(),
        top.map_or("none".to_string(), |t| format!("highest severity {}", severity_word(t))),
        h.raised,
        h.cleared,
        fmt(h.residual.0),
        fmt(h.residual.1),
        st = h.state.as_str(),
    );
    match &h.projection {
        Some(p) => {
            let _ = write!(s, "<div class=\"card\" id=\"card-projection\"><span class=\"k\">heater cleaning limit</span><span class=\"v projected-date\">{}</span><span class=\"n\">between {} and {}</span></div>", esc(&p.date), esc(&p.range.0), esc(&p.range.1));
        }
        None => s.push_str("<div class=\"card\"><span class=\"k\">heater cleaning limit</span><span class=\"v\">no projection</span><span class=\"n\">no significant decline of the effectiveness</span></div>"),
    }
    let q = &d.extra.quality;
    let expected = (d.live_until_ms.unwrap_or(d.shift.end_ms) - d.shift.start_ms) / d.interval_ms.max(1);
    let _ = write!(
        s,
        "<div class=\"card\"><span class=\"k\">intervals computed</span><span class=\"v\">{} / {}</span><span class=\"n\">{} closed</span></div></div>",
        q.computed, expected, q.intervals
    );
    if d.extra.active.is_empty() {
        s.push_str("<p>No active alerts.</p>");
    }
    for a in &d.extra.active {
        let sev = severity_word(a.severity);
        let _ = write!(
            s,
            "<div class=\"alert sev-{sev}\"><span class=\"badge\">{sev}</span><span class=\"what\">{}</span> &middot; {} &middot; raised {}{}<br><span class=\"msg\">{}</span></div>",
            esc(a.cause.as_str()),
            esc(&a.subject),
            esc(&local(a.raised_ms, &d.tz, "%Y-%m-%d %H:%M")),
            if a.shelved { " &middot; <b>shelved</b>" } else { "" },
            esc(&a.message)
        );
    }
    s.push_str("</section>");
}

fn legend_html(s: &mut String, items: &[(String, String, &'static str)]) {
    s.push_str("<div class=\"legend\">");
    for (name, color, kind) in items {
        let what = match *kind {
            "box" | "dot" => "background:",
            _ => "border-color:",
        };
        W(s).s("<span><i class=\"")
            .s(kind)
            .s("\" style=\"")
            .s(what)
            .s(color)
            .s("\"></i>")
            .e(name)
            .s("</span>");
    }
    s.push_str("</div>");
}

/// The plots, the inputs and the state legend.
fn write_plots(s: &mut String, d: &ReportData) {
    let x = ShiftAxis::new(d);
    s.push_str("<section id=\"plots\"><h2>Trends</h2><div class=\"states\">monitor state shading: <span style=\"background:#fff\">watching</span>");
    for st in [MonitorState::Learning, MonitorState::Unsteady, MonitorState::Settling, MonitorState::Paused] {
        if let Some((fill, name)) = state_shade(st) {
            let _ = write!(s, "<span style=\"background:{fill}\">{name}</span>");
        }
    }
    s.push_str("<span style=\"background:repeating-linear-gradient(45deg,#f4f4f4 0 4px,#c8c8c8 4px 6px)\">no data</span> &middot; A1, A2 …: alerts raised (numbers of the alert table)</div>");
    // Each figure computed once, drawn in both frames (see `both`).
    let figures = [
        temperature_figure(d, &x),
        residual_figure(d, &x),
        effectiveness_figure(d),
        conversion_figure(d, &x),
    ];
    for f in &figures {
        write_figure(s, f);
    }
    let inputs = input_figures(d, &x);
    s.push_str("<h2 id=\"inputs\">Inputs of the balance</h2>");
    if inputs.is_empty() {
        s.push_str(
            "<p>The inputs are not recorded for this shift (the service records them with its report).</p>",
        );
    }
    for f in &inputs {
        write_figure(s, f);
    }
    s.push_str("</section>");
}

fn write_figure(s: &mut String, f: &Figure) {
    s.reserve(f.svg.len() + 1024);
    W(s).s("<figure id=\"plot-").s(f.id).s("\"><h3>").e(&f.title).s("</h3>");
    legend_html(s, &f.legend);
    W(s).s("<div class=\"plotwrap\">").s(&f.svg).s("</div>");
    if !f.caption.is_empty() {
        W(s).s("<figcaption>").e(&f.caption).s("</figcaption>");
    }
    s.push_str("</figure>");
}

/// Local time of an alert event: the time in the shift, with the date when it is not the
/// shift's day.
fn when(ms: i64, d: &ReportData) -> String {
    let same_day = local(ms, &d.tz, "%Y-%m-%d") == local(d.shift.start_ms, &d.tz, "%Y-%m-%d");
    local(ms, &d.tz, if same_day { "%H:%M" } else { "%m-%d %H:%M" })
}

/// An evidence key in words with its unit.
fn evidence_label(k: &str) -> (String, &'static str) {
    let (name, unit) = match k {
        "residual_k" => ("residual (measured − predicted)", " K"),
        "baseline_k" => ("baseline residual", " K"),
        "step_k" => ("step", " K"),
        "z" => ("z (block, vs baseline)", ""),
        "effectiveness" => ("heater effectiveness", ""),
        "baseline_effectiveness" => ("baseline effectiveness", ""),
        "loss_pct" => ("effectiveness loss", " %"),
        "trend_pct_per_day" => ("trend", " %/day"),
        "trend_t" => ("trend t-statistic", ""),
        "trend_model" => ("trend model", ""),
        "projected_limit_date" => ("cleaning limit projected", ""),
        "projected_range" => ("projected between", ""),
        "magnitude" => ("magnitude", ""),
        other => return (other.replace('_', " "), if other.ends_with("_k") { " K" } else { "" }),
    };
    (name.to_string(), unit)
}

fn evidence_html(ev: &serde_json::Map<String, serde_json::Value>) -> String {
    let mut s = String::new();
    for (k, v) in ev {
        if k == "reminder" || k == "active_h" {
            continue;
        }
        let (name, unit) = evidence_label(k);
        let value = match v {
            serde_json::Value::String(t) => t.replace('/', " to "),
            serde_json::Value::Number(n) => n.as_f64().map_or(n.to_string(), |x| {
                if k == "effectiveness" || k == "baseline_effectiveness" {
                    format!("{:.1} %", x * 100.0)
                } else {
                    format!(
                        "{}{unit}",
                        fmt_num(
                            x,
                            if x.abs() >= 100.0 {
                                0
                            } else if x.abs() >= 10.0 {
                                1
                            } else {
                                3
                            }
                        )
                        .trim_end_matches('0')
                        .trim_end_matches('.')
                    )
                }
            }),
            // Probabilities by cause, the likeliest first.
            serde_json::Value::Object(m) => {
                let mut p: Vec<(&String, f64)> =
                    m.iter().filter_map(|(c, v)| Some((c, v.as_f64()?))).collect();
                p.sort_by(|a, b| b.1.total_cmp(&a.1));
                p.iter()
                    .map(|(c, v)| format!("{} {}", c.replace('_', " "), fmt_num(*v, 2)))
                    .collect::<Vec<_>>()
                    .join(", ")
            }
            other => other.to_string(),
        };
        let _ =
            write!(s, "<div class=\"ev\"><span class=\"sub\">{}:</span> {}</div>", esc(&name), esc(&value));
    }
    s
}

/// The alerts that touch the shift, in local time.
fn write_alerts(s: &mut String, d: &ReportData) {
    let _ = write!(
        s,
        "<section id=\"alerts\"><h2>Alerts of the shift</h2><p class=\"sub\">Times are local ({}). Active alerts show their latest message.</p><table class=\"alerts\"><colgroup><col style=\"width:2.2em\"><col style=\"width:11%\"><col style=\"width:11%\"><col style=\"width:15%\"><col style=\"width:9%\"><col><col class=\"ev\" style=\"width:25%\"></colgroup><thead><tr><th>#</th><th>raised</th><th>cleared</th><th>cause, subject</th><th>severity</th><th>message</th><th>evidence</th></tr></thead><tbody>",
        esc(d.tz.iana_name().unwrap_or("local"))
    );
    if d.lifecycles.is_empty() {
        s.push_str("<tr><td colspan=\"7\">No alerts this shift.</td></tr>");
    }
    for (i, (first, last)) in d.lifecycles.iter().enumerate() {
        let active = d.extra.active.iter().find(|a| a.alert_id == first.alert_id);
        let cleared = if last.event == EventKind::Cleared { when(last.time_ms, d) } else { "active".into() };
        // An active alert's latest message and its evidence (the alert book's: a message
        // updated without an event, such as a refitted projection, is not in the log).
        let (message, evidence) = match (active, last.event) {
            (Some(a), _) if !a.evidence.is_empty() => (a.message.as_str(), &a.evidence),
            (Some(a), _) => (a.message.as_str(), &last.evidence),
            (None, EventKind::Cleared) => (first.message.as_str(), &last.evidence),
            (None, _) => (last.message.as_str(), &last.evidence),
        };
        let _ = write!(
            s,
            "<tr id=\"alert-{}\"><td>A{}</td><td>{}</td><td>{}</td><td>{}<br><span class=\"sub\">{}</span></td><td>{}</td><td class=\"msg\">{}</td><td>{}</td></tr>",
            esc(&first.alert_id),
            i + 1,
            esc(&when(first.time_ms, d)),
            esc(&cleared),
            esc(first.cause.as_str()),
            esc(&first.subject),
            esc(last.severity.as_str()),
            esc(message),
            evidence_html(evidence)
        );
    }
    s.push_str("</tbody></table></section>");
}

/// Shelves in force and requests seen in the shift.
fn write_requests(s: &mut String, d: &ReportData) {
    s.push_str("<section id=\"requests\"><h2>Shelves and requests</h2><table class=\"kv\"><tbody>");
    if d.extra.shelves.is_empty() && d.extra.requests.is_empty() {
        s.push_str("<tr><td>No shelves in force and no requests this shift.</td></tr>");
    }
    for sh in &d.extra.shelves {
        let _ = write!(
            s,
            "<tr><th>shelved: {}</th><td>until {}; by {}: {}</td></tr>",
            esc(&sh.selector),
            esc(&local(sh.until_ms, &d.tz, "%Y-%m-%d %H:%M")),
            esc(&sh.by),
            esc(&sh.reason)
        );
    }
    for (t, text) in &d.extra.requests {
        let _ = write!(s, "<tr><th>{}</th><td>{}</td></tr>", esc(&when(*t, d)), esc(text));
    }
    s.push_str("</tbody></table></section>");
}

fn is_data_quality(k: &str) -> bool {
    ["stale:", "bad:", "missing:", "uncertain:", "range:", "spike:", "composition_sum:"]
        .iter()
        .any(|p| k.starts_with(p))
        || k == "not_computed"
}

/// What was read and computed in the shift.
fn write_data_quality(s: &mut String, d: &ReportData) {
    let q = &d.extra.quality;
    let opt = |v: Option<u64>| v.map_or("not recorded".to_string(), |n| n.to_string());
    let _ = write!(
        s,
        "<section id=\"data-quality\"><h2>Data quality</h2><table class=\"kv\"><tbody><tr><th>intervals closed in the shift</th><td>{}</td></tr><tr><th>intervals with a prediction</th><td>{}</td></tr><tr><th>records read while the shift's intervals closed</th><td>{}</td></tr><tr><th>late samples</th><td>{}</td></tr><tr><th>rejected</th><td>{}</td></tr>",
        q.intervals,
        q.computed,
        opt(q.records),
        opt(q.late),
        if q.rejected.is_empty() {
            if q.records.is_some() { "none".to_string() } else { "not recorded".to_string() }
        } else {
            q.rejected.iter().map(|(k, v)| format!("{k}: {v}")).collect::<Vec<_>>().join(", ")
        },
    );
    if let Some(t) = q.counted_from_ms {
        let _ = write!(
            s,
            "<tr><th>counted from</th><td>{} (the service restarted during the shift)</td></tr>",
            esc(&when(t, d))
        );
    }
    for (k, v) in q.flags.iter().filter(|(k, _)| is_data_quality(k)) {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    s.push_str("</tbody></table></section>");
}

/// Every flag that is not about data quality.
fn write_validity(s: &mut String, d: &ReportData) {
    s.push_str(
        "<section id=\"validity\"><h2>Model validity and monitor flags</h2><table class=\"kv\"><tbody>",
    );
    let mv: BTreeMap<&String, &u64> =
        d.extra.quality.flags.iter().filter(|(k, _)| !is_data_quality(k)).collect();
    if mv.is_empty() {
        s.push_str("<tr><td>No validity flags this shift.</td></tr>");
    }
    for (k, v) in mv {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    s.push_str("</tbody></table></section>");
}

/// The conventions, the caution and the end of the document.
fn write_footer(s: &mut String, d: &ReportData) {
    let _ = writeln!(
        s,
        "<footer><p><b>Conventions.</b> Residual = measured − predicted (positive: the effluent is hotter than the balance says), as in the soft tags, the alerts and <code>efftemp calc</code>. Temperatures in {}, temperature differences in {}. Times in local time ({}).</p><p><b>Caution.</b> {}</p><p>Predicted temperatures come from an ideal-solution, liquid-only enthalpy balance; the residual is judged against a baseline learned on this unit's own steady operation.</p></footer></main>",
        d.unit_symbol(),
        d.delta_symbol(),
        esc(d.tz.iana_name().unwrap_or("local")),
        esc(crate::CAUTION)
    );
}

/// One unit on the overview page.
pub struct OverviewUnit {
    /// Name.
    pub name: String,
    /// Description.
    pub description: String,
    /// Monitor state after the last interval.
    pub state: Option<MonitorState>,
    /// Active alerts: (severity, cause, subject, message).
    pub active: Vec<(Severity, String, String, String)>,
    /// End of the last interval, ms.
    pub last_ms: Option<i64>,
    /// Time zone.
    pub tz: jiff::tz::TimeZone,
    /// Recent residuals (ms, value) for the sparkline, in the delta unit.
    pub recent: Vec<(i64, Option<f64>)>,
    /// Symbol of temperature differences.
    pub delta_symbol: &'static str,
    /// Why the unit cannot read its inputs, if so.
    pub problem: Option<String>,
}

/// The overview of all units (the service's `/`): state, active alerts, last interval, data
/// age and a residual sparkline per unit; `now_ms` is the wall time for the data ages.
pub fn overview_html(site: &str, units: &[OverviewUnit], now_ms: i64) -> String {
    let mut s = String::with_capacity(16 * 1024);
    page_start(&mut s, &format!("efftemp: {site}"));
    let _ = write!(
        s,
        "<header><h1>{} <span class=\"sub\">efftemp {}</span></h1><p class=\"advisory\"><b>Caution.</b> {}</p><div class=\"sub\"><a href=\"/reports/\">shift reports</a> &middot; <a href=\"/alerts.json\">alerts (JSON)</a> &middot; <a href=\"/metrics\">metrics</a></div></header><section id=\"units\"><h2>Units</h2><table class=\"units\"><colgroup><col style=\"width:17%\"><col style=\"width:14%\"><col><col style=\"width:17%\"><col style=\"width:24%\"></colgroup><thead><tr><th>unit</th><th>state</th><th>active alerts</th><th>last interval (data age)</th><th>residual, last hours</th></tr></thead><tbody>",
        esc(site),
        env!("CARGO_PKG_VERSION"),
        esc(crate::CAUTION)
    );
    if units.is_empty() {
        s.push_str("<tr><td colspan=\"5\">No unit has data yet (shift reports must be on for the live view).</td></tr>");
    }
    for u in units {
        let state = u.state.map_or("no data", MonitorState::as_str);
        let alerts = if u.active.is_empty() {
            "none".to_string()
        } else {
            u.active
                .iter()
                .map(|(sev, cause, subject, msg)| format!("<div class=\"alert sev-{0}\" title=\"{3}\"><span class=\"badge\">{0}</span>{1} &middot; {2}</div>", sev.as_str(), esc(cause), esc(subject), esc(msg)))
                .collect::<String>()
        };
        let last = u.last_ms.map_or("none".to_string(), |t| {
            format!(
                "{}<br><span class=\"sub\">{} ago</span>",
                local(t, &u.tz, "%Y-%m-%d %H:%M"),
                crate::units::human_age((now_ms - t).max(0))
            )
        });
        let problem = u
            .problem
            .as_ref()
            .map_or(String::new(), |p| format!("<br><span class=\"sub\">{}</span>", esc(p)));
        let _ = write!(
            s,
            "<tr class=\"unit\" id=\"unit-{n}\"><td><a href=\"/unit/{n}\">{n}</a><br><span class=\"sub\">{}</span>{problem}</td><td><span class=\"state state-{state}\">{state}</span></td><td>{alerts}</td><td data-k=\"last interval\">{last}</td><td data-k=\"residual, last hours\">{}</td></tr>",
            esc(&u.description),
            sparkline(&u.recent, u.delta_symbol),
            n = esc(&u.name),
        );
    }
    s.push_str("</tbody></table></section><footer><p>Residual = measured − predicted. Read-only pages of the running service; the alert list is at <code>/alerts.json</code>.</p></footer></main></body></html>");
    s
}

/// A small residual sparkline with its last value.
fn sparkline(pts: &[(i64, Option<f64>)], unit: &str) -> String {
    let vals: Vec<f64> = pts.iter().filter_map(|p| p.1).collect();
    if vals.len() < 2 {
        return "no data".into();
    }
    let (t0, t1) = (pts[0].0, pts[pts.len() - 1].0.max(pts[0].0 + 1));
    let a = Axis::of(vals.iter().copied(), 0.1);
    let mut d = String::new();
    for (t, v) in pts {
        if let Some(v) = v {
            let x = 2.0 + (t - t0) as f64 / (t1 - t0) as f64 * 116.0;
            let y = 22.0 - (v - a.lo) / (a.hi - a.lo) * 20.0;
            let _ = write!(d, "{x:.1},{y:.1} ");
        }
    }
    format!(
        "<svg class=\"spark\" viewBox=\"0 0 120 24\" role=\"img\" aria-label=\"residual sparkline\"><polyline fill=\"none\" stroke=\"{MEAS}\" stroke-width=\"1.2\" points=\"{}\"/></svg><br><span class=\"sub\">last {} {unit}</span>",
        d.trim_end(),
        signed(*vals.last().unwrap_or(&0.0), 2)
    )
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn a_projection_with_a_range_says_both_dates_and_one_that_has_reached_the_limit_says_so() {
        let tz = jiff::tz::TimeZone::UTC;
        let day = 86_400_000;
        let t0 = 1_796_000_000_000 - 1_796_000_000_000 % day;
        let mut t = Trend {
            slope_per_day: -0.01,
            t: -9.0,
            model: crate::core::monitor::TrendModel::Linear,
            now: 0.9,
            limit_ms: Some(t0 + 5 * day),
            range_ms: Some((t0 + 3 * day, t0 + 8 * day)),
            points: Vec::new(),
            asymptote: None,
        };
        let p = projection(Some(&t), 0.85, &tz).unwrap();
        assert_eq!(p.date, crate::core::calendar::day_of(t0 + 5 * day + 1, &tz));
        assert!(p.text.contains("between") && p.range.0 != p.range.1, "{}", p.text);
        t.range_ms = Some((t0, t0));
        t.limit_ms = Some(t0);
        assert!(projection(Some(&t), 0.85, &tz).unwrap().text.contains("has reached"));
        t.limit_ms = None;
        assert_eq!(projection(Some(&t), 0.85, &tz), None);
    }
}
