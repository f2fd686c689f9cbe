//! The plain-text shift summary, for a quick look over SSH.

use std::fmt::Write as _;

use super::data::ReportData;
use super::html::headline;

/// The plain-text summary.
pub fn render_text(d: &ReportData) -> String {
    let h = headline(d);
    let ds = d.delta_symbol();
    let mut s = String::new();
    let _ = writeln!(s, "{} {} - shift {}", d.site, d.unit.0, d.shift.label);
    let _ = writeln!(
        s,
        "  state: {}; intervals: {}; alerts raised {} / cleared {} this shift; active {}",
        h.state.as_str(),
        d.extra.quality.intervals,
        h.raised,
        h.cleared,
        d.extra.active.len()
    );
    if let (Some(a), b) = h.residual {
        let _ = writeln!(
            s,
            "  mean residual (measured - predicted) {a:+.2} {ds} (previous shift {})",
            b.map_or("n/a".into(), |b| format!("{b:+.2} {ds}"))
        );
    }
    if let Some(b) = d.extra.monitor.as_ref().and_then(|m| m.baseline) {
        let _ = writeln!(
            s,
            "  baseline {:+.3} {ds}, block sigma {:.3} {ds}",
            d.delta(b.mu_k),
            d.delta(b.sigma_block_k)
        );
    }
    for a in &d.extra.active {
        let _ = writeln!(
            s,
            "  ACTIVE {} {} [{}]: {}",
            a.severity.as_str(),
            a.cause.as_str(),
            a.alert_id,
            a.message
        );
    }
    if let Some(t) = d.extra.monitor.as_ref().and_then(|m| m.trend.as_ref()) {
        let _ =
            write!(s, "  heater effectiveness trend {:+.2} %/day (t = {:.1})", t.slope_per_day * 100.0, t.t);
        match &h.projection {
            Some(p) => {
                let _ = writeln!(s, "; {}", p.text);
            }
            None => {
                let _ = writeln!(s, "; no date projected");
            }
        }
    }
    let q = &d.extra.quality;
    let rejected: u64 = q.rejected.values().sum();
    match q.records {
        Some(r) => {
            let _ =
                writeln!(s, "  data: {r} records read, {rejected} rejected, {} late", q.late.unwrap_or(0));
        }
        None => {
            let _ = writeln!(
                s,
                "  data: {} intervals ({} computed); records read not recorded",
                q.intervals, q.computed
            );
        }
    }
    let _ = writeln!(s, "  {}", crate::CAUTION);
    s
}
