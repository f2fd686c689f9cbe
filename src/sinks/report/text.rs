//! The plain-text shift summary, for a quick look over SSH.

use std::fmt::Write as _;

use super::data::{ReportData, effectiveness_trend};
use super::html::headline;

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
