//! What a shift report is made of. The service builds it from what it holds in memory (the
//! shift's rows, the monitor's baseline, limits, blocks and trend, the alert book: see
//! `shift.rs`); `efftemp report` for a past shift builds it from the unit's files: the soft tags
//! and the alert log, plus the record the service wrote beside the report at the end of the
//! shift (`shift-<unit>-<slug>.json`: the monitor's figures, the inputs, the data read in the
//! shift), which the soft tags do not hold.

use std::collections::BTreeMap;
use std::path::Path;

use jiff::tz::TimeZone;
use serde::{Deserialize, Serialize};

use super::ReportUnit;
use crate::core::alerts::{AlertEvent, EventKind};
use crate::core::calendar::Shift;
use crate::core::monitor::{MonitorState, Trend};
pub use crate::sinks::alert_log::load_events;
pub use crate::sinks::softtags::{Row, load_rows};
use crate::units::Unit;

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

/// The monitor's learned reference, as the report shows it (temperatures in K).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BaselineView {
    /// Residual block mean, K.
    pub mu_k: f64,
    /// Residual block σ, K.
    pub sigma_block_k: f64,
    /// Residual interval σ, K.
    pub sigma_interval_k: f64,
    /// Intervals per block.
    pub block: usize,
    /// When it was learned, ms.
    pub learned_ms: i64,
    /// Effectiveness mean and σ.
    pub eff: Option<(f64, f64)>,
    /// Apparent conversion mean and σ.
    pub conv: Option<(f64, f64)>,
}

impl BaselineView {
    /// The view of a monitor's baseline.
    pub fn of(b: &crate::core::monitor::Baseline) -> BaselineView {
        BaselineView {
            mu_k: b.mu,
            sigma_block_k: b.sigma,
            sigma_interval_k: b.sigma_interval,
            block: b.block,
            learned_ms: b.learned_ms,
            eff: b.eff,
            conv: b.conv,
        }
    }
}

/// The z limits the monitor judges with (its settings).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Limits {
    /// |z| of a block that enters a drift condition.
    pub enter_z: f64,
    /// |z| below which a condition clears.
    pub clear_z: f64,
    /// |z| of an interval residual that is gross (while unsteady).
    pub gross_z: f64,
}

/// One completed block while watching.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BlockPoint {
    /// Block end, ms.
    pub end_ms: i64,
    /// Mean residual, K.
    pub residual_k: f64,
    /// Standardized residual.
    pub z: f64,
}

/// What the monitor used, at the end of the shift (or now, for a shift in progress).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct MonitorView {
    /// The baseline, once learned.
    pub baseline: Option<BaselineView>,
    /// Its z limits.
    pub limits: Option<Limits>,
    /// The blocks that ended in the shift.
    pub blocks: Vec<BlockPoint>,
    /// The heater-effectiveness trend the alerts use (fit points, slope, projection).
    pub trend: Option<Trend>,
    /// Block effectiveness over the trend window, in 4-hour means: (ms, value).
    pub effectiveness: Vec<(i64, f64)>,
    /// Trend window, ms.
    pub trend_window_ms: i64,
}

/// One input series of the balance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InputSeries {
    /// `duty`, `flow` or `temperature`.
    pub group: String,
    /// What it is, e.g. `feed ester: flow (FI-2011)`.
    pub label: String,
    /// The tag's unit symbol.
    pub unit: String,
}

/// The inputs that drive the balance, per interval, in their tags' units.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Inputs {
    /// The series.
    pub series: Vec<InputSeries>,
    /// Interval ends, ms.
    pub times: Vec<i64>,
    /// Per series, one value per interval end.
    pub values: Vec<Vec<Option<f32>>>,
}

/// What was read and computed in the shift, counted as it happened.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Quality {
    /// Intervals closed.
    pub intervals: u64,
    /// Intervals with a prediction.
    pub computed: u64,
    /// Records read while the shift's intervals closed (`None`: not recorded).
    pub records: Option<u64>,
    /// Late samples.
    pub late: Option<u64>,
    /// Rejected records and values by reason.
    pub rejected: BTreeMap<String, u64>,
    /// Interval flags and the number of intervals with each.
    pub flags: BTreeMap<String, u64>,
    /// Counting started after the shift began (a restart): from this time, ms.
    pub counted_from_ms: Option<i64>,
}

/// An alert active at the end of the shift, as the alert book holds it (its latest message).
pub use crate::core::alerts::ActiveAlert as AlertView;

/// A shelf in force during the shift.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShelfView {
    /// Alert id, cause or cause/subject.
    pub selector: String,
    /// Until, ms.
    pub until_ms: i64,
    /// Why.
    pub reason: String,
    /// Who.
    pub by: String,
}

/// Everything the soft tags and the alert log do not hold: what the service writes beside
/// each report (`shift-<unit>-<slug>.json`).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Extra {
    /// The monitor's figures (`None`: not recorded, e.g. a report of files only).
    pub monitor: Option<MonitorView>,
    /// Design conversion of the apparent-conversion reaction.
    pub design_conversion: Option<f64>,
    /// Heater effectiveness at which cleaning is due.
    pub effectiveness_limit: f64,
    /// The balance's inputs.
    pub inputs: Inputs,
    /// What was read in the shift.
    pub quality: Quality,
    /// Alerts active at the shift end, with their latest message.
    pub active: Vec<AlertView>,
    /// Shelves in force during the shift.
    pub shelves: Vec<ShelfView>,
    /// Engineers' requests and other audited changes seen in the shift: (ms, sentence).
    pub requests: Vec<(i64, String)>,
    /// Mean residual of the previous shift, in the temperature unit's degrees.
    pub previous_mean_residual: Option<f64>,
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
    /// Time zone.
    pub tz: TimeZone,
    /// The measured temperature's unit (rows are in it).
    pub temperature_unit: Unit,
    /// Rows of the shift (interval ends in the shift), in the temperature unit.
    pub rows: Vec<Row>,
    /// Interval length, ms (gaps longer than 1.5 of it break the lines).
    pub interval_ms: i64,
    /// Alert lifecycles that touch the shift: (first event, last event), in raise order.
    pub lifecycles: Vec<(AlertEvent, AlertEvent)>,
    /// What the soft tags do not hold.
    pub extra: Extra,
    /// The shift is still in progress (the live view): data up to this time, ms.
    pub live_until_ms: Option<i64>,
}

impl ReportData {
    /// The symbol of absolute temperatures (°C, K, °F).
    pub fn unit_symbol(&self) -> &'static str {
        symbol(self.temperature_unit.symbol)
    }

    /// The symbol of temperature differences (K for °C and K, °F and °R for themselves).
    pub fn delta_symbol(&self) -> &'static str {
        match self.temperature_unit.symbol {
            "degF" => "°F",
            "degR" => "°R",
            _ => "K",
        }
    }

    /// A temperature difference in K in the unit's degrees.
    pub fn delta(&self, k: f64) -> f64 {
        self.temperature_unit.from_si(k) - self.temperature_unit.from_si(0.0)
    }
}

/// The display symbol of a temperature unit.
pub(super) fn symbol(unit: &str) -> &'static str {
    match unit {
        "degC" => "°C",
        "degF" => "°F",
        "degR" => "°R",
        _ => "K",
    }
}

/// Why no report is written.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum NoReport {
    /// No interval of the unit ends in the shift.
    #[error("no data for unit {unit} in the shift {shift}: no soft-tag row in {dir}; no report written")]
    NoData {
        /// Unit.
        unit: String,
        /// Shift label.
        shift: String,
        /// Where the rows were looked for.
        dir: String,
    },
}

/// Where a report carries the service's record of its shift (an inert `<template>`, never
/// rendered or printed): the figures the soft tags do not hold, as JSON.
pub(super) const RECORD_OPEN: &str = "<template id=\"efftemp-record\">";

/// The service's record of a shift, read from its report file (`None`: none there).
pub fn read_record(report: &Path) -> Option<Extra> {
    let html = std::fs::read_to_string(report).ok()?;
    let start = html.find(RECORD_OPEN)? + RECORD_OPEN.len();
    let end = start + html[start..].find("</template>")?;
    let json = html[start..end]
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&quot;", "\"")
        .replace("&amp;", "&");
    serde_json::from_str(&json).ok()
}

/// Load the report data of a unit for a past shift from its files; `NoReport` when the shift
/// has no data.
pub fn load(unit: &ReportUnit, output_dir: &Path, shift: &Shift) -> Result<ReportData, NoReport> {
    let dir = output_dir.join(&unit.name);
    let tz = unit.time_zone.clone();
    let rows = load_rows(&dir, &unit.name, shift.start_ms, shift.end_ms, &tz);
    if rows.is_empty() {
        return Err(NoReport::NoData {
            unit: unit.name.clone(),
            shift: shift.label.clone(),
            dir: dir.display().to_string(),
        });
    }
    let events = load_events(&dir, &unit.name, shift.end_ms);
    let lifecycles = touching(lifecycles(&events), shift);
    let recorded = read_record(&super::report_path(output_dir, &unit.name, shift));
    let extra = recorded.unwrap_or_else(|| {
        let previous = load_rows(&dir, &unit.name, shift.prev_start_ms, shift.start_ms, &tz);
        from_files(unit, &rows, &previous, &lifecycles)
    });
    Ok(ReportData {
        site: unit.site.clone(),
        unit: (unit.name.clone(), unit.description.clone()),
        shift: shift.clone(),
        tz,
        temperature_unit: unit.temperature_unit,
        rows,
        interval_ms: unit.interval_ms,
        lifecycles,
        extra,
        live_until_ms: None,
    })
}

/// What the files alone say when the service's record of the shift is missing: the flags
/// from the rows, the active alerts from their last events; no monitor figures.
fn from_files(
    unit: &ReportUnit,
    rows: &[Row],
    previous: &[Row],
    lifecycles: &[(AlertEvent, AlertEvent)],
) -> Extra {
    let mut flags: BTreeMap<String, u64> = BTreeMap::new();
    for r in rows {
        for f in &r.flags {
            *flags.entry(f.clone()).or_default() += 1;
        }
    }
    let quality = Quality {
        intervals: rows.len() as u64,
        computed: rows.iter().filter(|r| r.predicted.is_some()).count() as u64,
        flags,
        ..Quality::default()
    };
    let active = lifecycles
        .iter()
        .filter(|(_, last)| last.event != EventKind::Cleared)
        .map(|(first, last)| AlertView {
            alert_id: first.alert_id.clone(),
            cause: first.cause,
            subject: first.subject.clone(),
            raised_ms: first.time_ms,
            severity: last.severity,
            message: last.message.clone(),
            evidence: last.evidence.clone(),
            shelved: false,
        })
        .collect();
    Extra {
        monitor: None,
        design_conversion: unit.design_conversion,
        effectiveness_limit: unit.effectiveness_limit,
        inputs: Inputs::default(),
        quality,
        active,
        shelves: Vec::new(),
        requests: Vec::new(),
        previous_mean_residual: mean(previous.iter().filter_map(|r| r.residual)),
    }
}

/// The mean of some values.
pub(super) fn mean(v: impl Iterator<Item = f64>) -> Option<f64> {
    let (s, n) = v.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    (n > 0).then(|| s / n as f64)
}

/// Alert lifecycles seen in `events`: (first event, last event), in raise order.
pub(super) fn lifecycles(events: &[AlertEvent]) -> Vec<(AlertEvent, AlertEvent)> {
    let mut by: BTreeMap<&str, (&AlertEvent, &AlertEvent)> = BTreeMap::new();
    for e in events {
        by.entry(e.alert_id.as_str()).and_modify(|x| x.1 = e).or_insert((e, e));
    }
    let mut v: Vec<(AlertEvent, AlertEvent)> =
        by.into_values().map(|(a, b)| (a.clone(), b.clone())).collect();
    v.sort_by_key(|x| x.0.sequence);
    v
}

/// The lifecycles that touch the shift: active at its end, or with an event in it.
pub(super) fn touching(v: Vec<(AlertEvent, AlertEvent)>, shift: &Shift) -> Vec<(AlertEvent, AlertEvent)> {
    v.into_iter()
        .filter(|(_, last)| last.time_ms > shift.start_ms || last.event != EventKind::Cleared)
        .collect()
}

/// A row's monitor state, with the rows without one as paused.
pub(super) fn state_of(r: &Row) -> MonitorState {
    r.state.unwrap_or(MonitorState::Paused)
}
