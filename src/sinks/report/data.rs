//! What a shift report is made of: soft-tag rows and alert events read back from the unit's
//! output files, the ingest counters, and the figures derived from them (alert lifecycles, the
//! heater-effectiveness trend).

use std::collections::BTreeMap;
use std::path::Path;

use jiff::tz::TimeZone;

use super::ReportUnit;
use crate::core::alerts::AlertEvent;
use crate::core::calendar::Shift;
use crate::core::monitor::MonitorState;
use crate::core::monitor::stats::LineFit;
pub use crate::sinks::alert_log::load_events;
pub use crate::sinks::softtags::{Row, load_rows};

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
        .filter(|r| matches!(r.state, Some(MonitorState::Watching | MonitorState::Learning)))
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
    let steady: Vec<f64> = rows
        .iter()
        .chain(prev.iter())
        .filter(|r| r.state == Some(MonitorState::Watching))
        .filter_map(|r| r.residual)
        .collect();
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
pub(super) fn lifecycles(events: &[AlertEvent]) -> Vec<(AlertEvent, AlertEvent)> {
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
