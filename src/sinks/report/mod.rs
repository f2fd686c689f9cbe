//! The shift report: one self-contained HTML file per unit per shift (inline SVG plots, no
//! scripts, no network resources, printable), a plain-text summary for a quick look over SSH,
//! and the live pages of the running service (overview, a unit's shift so far).
//!
//! The service renders a report from what it holds in memory (`shift`: the shift's rows and
//! inputs, the monitor's baseline, limits, blocks and trend, the alert book), never by reading
//! the soft-tag history back; each report carries the figures the soft tags do not hold (an
//! inert `<template>` of JSON), so that `efftemp report` for a past shift can render the same
//! page from the files (`data::load`).
//!
//! `data` is what a report shows, `shift` gathers it in memory, `svg` draws the plots, `html`
//! lays out the pages, `text` writes the summary, `live` is the board the HTTP pages read, and
//! `sink` writes the reports as shifts end.

mod data;
mod html;
mod live;
mod shift;
mod sink;
mod svg;
mod text;

use jiff::civil::Time;
use jiff::tz::TimeZone;
use std::path::{Path, PathBuf};

pub use self::data::{
    AlertView, BaselineView, BlockPoint, Extra, IngestDay, InputSeries, Inputs, Limits, MonitorView,
    NoReport, Quality, ReportData, Row, ShelfView, load, load_events, load_rows, read_record,
};
pub use self::html::{OverviewUnit, Projection, overview_html, projection, render_html};
pub use self::live::{Board, SharedBook, board};
pub use self::shift::{ReadCounts, ShiftBook};
pub use self::sink::ShiftReports;
pub use self::text::render_text;
use crate::core::calendar::Shift;
use crate::core::flags::FlagNames;
use crate::core::spec::{Signal, UnitSpec};
use crate::units::Unit;

/// One input series of a unit: what it shows, and where its values come from.
#[derive(Debug, Clone)]
pub struct InputDef {
    /// Group, label and unit.
    pub series: InputSeries,
    /// Index of the tag.
    pub tag: usize,
    /// The tag's unit.
    pub unit: Unit,
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
    /// Shift starts (local times).
    pub shifts: Vec<Time>,
    /// Where the unit's outputs are (`<output_dir>/<unit>/`).
    pub output_dir: PathBuf,
    /// Interval, ms.
    pub interval_ms: i64,
    /// Window of the heater-effectiveness trend, ms.
    pub trend_window_ms: i64,
    /// Spacing of the trend's points, ms.
    pub trend_point_ms: i64,
    /// Heater effectiveness at which cleaning is due.
    pub effectiveness_limit: f64,
    /// Unit of the measured effluent temperature.
    pub temperature_unit: Unit,
    /// Design conversion of the apparent-conversion reaction.
    pub design_conversion: Option<f64>,
    /// The monitor's z limits.
    pub limits: Limits,
    /// The balance's inputs that are tags: duty, feed flows, feed temperatures.
    pub inputs: Vec<InputDef>,
    /// Names of the flags.
    pub flag_names: FlagNames,
}

impl ReportUnit {
    /// The report settings of a unit.
    pub fn new(site: &str, description: &str, spec: &UnitSpec) -> ReportUnit {
        let m = &spec.monitor;
        ReportUnit {
            site: site.to_string(),
            name: spec.name.clone(),
            description: description.to_string(),
            time_zone: spec.time_zone.clone(),
            shifts: Vec::new(),
            output_dir: PathBuf::new(),
            interval_ms: spec.interval_ms,
            trend_window_ms: m.trend_window_ms,
            trend_point_ms: m.trend_point_ms,
            effectiveness_limit: m.effectiveness_limit,
            temperature_unit: spec.temperature_unit(),
            design_conversion: spec.apparent_reaction.and_then(|r| spec.conversions.get(r)).map(|c| c.design),
            limits: Limits { enter_z: m.enter_z, clear_z: m.clear_z, gross_z: m.gross_z },
            inputs: inputs(spec),
            flag_names: FlagNames::new(spec),
        }
    }
}

/// The balance's inputs that are tags, in the order duty, feed flows, feed temperatures.
fn inputs(spec: &UnitSpec) -> Vec<InputDef> {
    let mut v = Vec::new();
    let mut add = |group: &str, label: String, s: Signal| {
        if let Signal::Tag(i) = s {
            let tag = &spec.tags[i];
            let unit = tag.unit;
            let shown = if unit.symbol.starts_with("deg") { data::symbol(unit.symbol) } else { unit.symbol };
            v.push(InputDef {
                series: InputSeries {
                    group: group.to_string(),
                    label: format!("{label} ({})", tag.name),
                    unit: shown.to_string(),
                },
                tag: i,
                unit,
            });
        }
    };
    add("duty", "heater duty".into(), spec.duty);
    for f in &spec.feeds {
        add("flow", format!("{} flow", f.name), f.flow);
    }
    for f in &spec.feeds {
        add("temperature", format!("{} temperature", f.name), f.temperature);
    }
    v
}

/// The report's file.
pub fn report_path(output_dir: &Path, unit: &str, shift: &Shift) -> PathBuf {
    output_dir.join(unit).join("reports").join(format!("shift-{unit}-{}.html", shift.slug))
}

/// Write a report (the HTML page, carrying the record of what the soft tags do not hold);
/// returns its path and the text summary.
pub fn write_report(data: &ReportData, output_dir: &Path) -> std::io::Result<(PathBuf, String)> {
    let path = report_path(output_dir, &data.unit.0, &data.shift);
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir)?;
    }
    atomic_write(&path, render_html(data).as_bytes())?;
    Ok((path, render_text(data)))
}

fn atomic_write(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let mut tmp = path.as_os_str().to_owned();
    tmp.push(".tmp");
    let tmp = PathBuf::from(tmp);
    std::fs::write(&tmp, bytes)?;
    std::fs::rename(&tmp, path)
}

/// Why `efftemp report` wrote nothing.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// The shift has no data.
    #[error(transparent)]
    NoData(#[from] NoReport),
    /// The file could not be written.
    #[error("cannot write the report: {0}")]
    Io(#[from] std::io::Error),
}

/// The report of a past shift from the unit's files (`efftemp report`): the soft tags, the
/// alert log and the service's record of the shift; nothing is written when the shift has no
/// data.
pub fn write_from_files(
    unit: &ReportUnit,
    output_dir: &Path,
    shift: &Shift,
) -> Result<(PathBuf, String), ReportError> {
    let data = load(unit, output_dir, shift)?;
    let path = report_path(output_dir, &unit.name, shift);
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir)?;
    }
    // The page carries the record it was rendered from (the service's, when it wrote one).
    atomic_write(&path, render_html(&data).as_bytes())?;
    Ok((path, render_text(&data)))
}
