//! The HTML shift report: one self-contained page (inline CSS and SVG, no scripts) with the
//! headline, the trend plots, the alerts, data quality and model validity.

use std::collections::BTreeMap;
use std::fmt::Write as _;

use jiff::Timestamp;

use super::data::{ReportData, Row, effectiveness_trend, lifecycles};
use super::svg::{Axis, INK, MARK, MEAS, PRED, Plot, esc, hour_ticks, hours_of};
use crate::core::alerts::{AlertEvent, EventKind};
use crate::core::monitor::MonitorState;

/// The time axis the in-shift plots share: hours since the shift start with local-time tick
/// labels, the axis label, and the alerts raised in the shift (marked on the plots).
struct ShiftAxis<'a> {
    hours: Axis,
    ticks: Vec<(f64, String)>,
    label: String,
    raised: Vec<&'a AlertEvent>,
}

/// The plots of a report, as SVG strings: temperatures, residual, effectiveness, conversion.
pub fn plots(d: &ReportData) -> Vec<(String, String)> {
    let (xa, xt) = hour_ticks(&d.shift, &d.tz);
    let raised: Vec<&AlertEvent> = d
        .events
        .iter()
        .filter(|e| {
            e.event == EventKind::Raised && e.time_ms > d.shift.start_ms && e.time_ms <= d.shift.end_ms
        })
        .collect();
    let x_label = format!("time in shift ({})", d.tz.iana_name().unwrap_or("local"));
    let x = ShiftAxis { hours: xa, ticks: xt, label: x_label, raised };
    vec![
        ("temperature".into(), temperature_plot(d, &x)),
        ("residual".into(), residual_plot(d, &x)),
        ("effectiveness".into(), effectiveness_plot(d)),
        ("conversion".into(), conversion_plot(d, &x)),
    ]
}

/// The effluent temperature: predicted (with its ±2u band) vs measured, alerts marked.
fn temperature_plot(d: &ReportData, x: &ShiftAxis<'_>) -> String {
    let temps = d.rows.iter().flat_map(|r| {
        let u = r.u.unwrap_or(0.0);
        [r.measured, r.predicted.map(|p| p - 2.0 * u), r.predicted.map(|p| p + 2.0 * u)]
    });
    let ya = Axis::of(temps.flatten(), 0.08);
    let mut p = Plot::new(
        "Effluent temperature: predicted (band ±2u) and measured",
        Axis { ..x.hours },
        ya,
        &format!("temperature / {}", d.unit_symbol),
        &x.label,
    );
    p.x_ticks(&x.ticks);
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
    for e in &x.raised {
        p.marker(hours_of(e.time_ms, &d.shift), &format!("{} raised: {}", e.cause.as_str(), e.message));
    }
    p.legend(&[("predicted", PRED), ("measured", MEAS), ("alert raised", MARK)]);
    p.finish()
}

/// The residual with its alert limits, alerts marked.
fn residual_plot(d: &ReportData, x: &ShiftAxis<'_>) -> String {
    let mut vals: Vec<f64> = d.rows.iter().filter_map(|r| r.residual).collect();
    if let Some((m, hw)) = d.residual_limits {
        vals.extend([m - hw, m + hw]);
    }
    let ya = Axis::of(vals.into_iter(), 0.1);
    let mut p = Plot::new(
        "Residual (measured − predicted) with its alert limits",
        Axis { ..x.hours },
        ya,
        &format!("residual / {}", if d.unit_symbol == "°C" { "K" } else { d.unit_symbol.as_str() }),
        &x.label,
    );
    p.x_ticks(&x.ticks);
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
    for e in &x.raised {
        p.marker(hours_of(e.time_ms, &d.shift), &format!("{} raised", e.cause.as_str()));
    }
    p.finish()
}

/// Heater effectiveness over the trend window with the fitted trend and its projection to the
/// cleaning limit.
fn effectiveness_plot(d: &ReportData) -> String {
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
    p.finish()
}

/// The apparent conversion.
fn conversion_plot(d: &ReportData, x: &ShiftAxis<'_>) -> String {
    let ya = Axis::of(d.rows.iter().filter_map(|r| r.conversion), 0.1);
    let mut p = Plot::new(
        "Apparent conversion (reproduces the measured temperature)",
        Axis { ..x.hours },
        ya,
        "conversion",
        &x.label,
    );
    p.x_ticks(&x.ticks);
    p.line(
        &d.rows.iter().map(|r| (hours_of(r.t_ms, &d.shift), r.conversion)).collect::<Vec<_>>(),
        PRED,
        1.3,
        None,
        "apparent conversion",
    );
    p.finish()
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
        state: d.rows.last().map_or("no data", |r| r.state.map_or("", MonitorState::as_str)).to_string(),
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
    write_title(&mut s, d);
    write_headline(&mut s, d, &h);
    write_plots(&mut s, d);
    write_alerts(&mut s, d);
    let flags = flag_counts(&d.rows);
    let dq = data_quality_flags(&flags);
    write_data_quality(&mut s, d, &dq);
    write_validity(&mut s, &flags, &dq);
    write_footer(&mut s);
    s
}

/// The document head and the title lines.
fn write_title(s: &mut String, d: &ReportData) {
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
}

/// The headline section: monitor state, alert counts, mean residuals, active alerts.
fn write_headline(s: &mut String, d: &ReportData, h: &Headline) {
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
    s.push_str("</section>");
}

/// The trend plots.
fn write_plots(s: &mut String, d: &ReportData) {
    s.push_str("<section id=\"plots\"><h2>Trends</h2>");
    for (id, svg) in plots(d) {
        let _ = write!(s, "<figure id=\"plot-{id}\">{svg}</figure>");
    }
    s.push_str("</section>");
}

/// The alerts that touch the shift: raised, cleared, cause, priority, message, evidence.
fn write_alerts(s: &mut String, d: &ReportData) {
    s.push_str("<section id=\"alerts\"><h2>Alerts</h2><table><thead><tr><th>raised</th><th>cleared</th><th>cause</th><th>priority</th><th>message</th><th>evidence</th></tr></thead><tbody>");
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
}

/// The data-quality flags (stale, bad, missing, uncertain, out of range, not computed) and
/// their interval counts.
fn data_quality_flags(flags: &BTreeMap<String, usize>) -> Vec<(&String, &usize)> {
    flags
        .iter()
        .filter(|(k, _)| {
            ["stale:", "bad:", "missing:", "uncertain:", "range:"].iter().any(|p| k.starts_with(p))
                || *k == "not_computed"
        })
        .collect()
}

/// The data-quality section: ingest counters and data-quality flags.
fn write_data_quality(s: &mut String, d: &ReportData, dq: &[(&String, &usize)]) {
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
    for (k, v) in dq {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    s.push_str("</tbody></table></section>");
}

/// The model-validity section: every flag that is not about data quality.
fn write_validity(s: &mut String, flags: &BTreeMap<String, usize>, dq: &[(&String, &usize)]) {
    s.push_str("<section id=\"validity\"><h2>Model validity</h2><table><tbody>");
    let mv: Vec<(&String, &usize)> = flags.iter().filter(|(k, _)| !dq.iter().any(|(d, _)| d == k)).collect();
    if mv.is_empty() {
        s.push_str("<tr><td>No validity flags this shift.</td></tr>");
    }
    for (k, v) in mv {
        let _ = write!(s, "<tr><th>{}</th><td>{} interval(s)</td></tr>", esc(k), v);
    }
    s.push_str("</tbody></table></section>");
}

/// The caution and the method note, and the end of the document.
fn write_footer(s: &mut String) {
    let _ = writeln!(
        s,
        "<footer><p><b>Caution.</b> {}</p><p>Predicted temperatures come from an ideal-solution, liquid-only enthalpy balance; the residual is judged against a baseline learned on this unit's own steady operation.</p></footer></main></body></html>",
        esc(crate::CAUTION)
    );
}
