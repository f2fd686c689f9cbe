//! The shift report: one self-contained HTML file per unit per shift (inline SVG plots, no
//! scripts, no network resources, printable), and a plain-text summary for a quick look over
//! SSH. Built from the unit's outputs on disk (soft tags, alert events, ingest counters), so
//! it can be produced by the service at the end of each shift or on demand.
//!
//! `data` reads what the report shows, `svg` draws the plots, `html` lays out the page and
//! `text` writes the summary; this file has the unit's report settings and [`write()`].

mod data;
mod html;
mod sink;
mod svg;
mod text;

use std::path::{Path, PathBuf};

use jiff::tz::TimeZone;

pub use self::data::{
    IngestDay, Projection, ReportData, Row, effectiveness_trend, load, load_events, load_rows,
};
pub use self::html::{Headline, headline, plots, render_html};
pub use self::sink::ShiftReports;
pub use self::text::render_text;
use crate::core::calendar::Shift;
use crate::core::spec::UnitSpec;
use crate::units::Unit;

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
    /// Window of the heater-effectiveness trend, ms.
    pub trend_window_ms: i64,
    /// Heater effectiveness at which cleaning is due.
    pub effectiveness_limit: f64,
    /// Unit of the measured effluent temperature.
    pub temperature_unit: Unit,
}

impl ReportUnit {
    /// The report settings of a unit.
    pub fn new(site: &str, description: &str, spec: &UnitSpec) -> ReportUnit {
        ReportUnit {
            site: site.to_string(),
            name: spec.name.clone(),
            description: description.to_string(),
            time_zone: spec.time_zone.clone(),
            trend_window_ms: spec.monitor.trend_window_ms,
            effectiveness_limit: spec.monitor.effectiveness_limit,
            temperature_unit: spec.temperature_unit(),
        }
    }
}

/// Write the HTML report of a unit for a shift; returns its path.
pub fn write(unit: &ReportUnit, output_dir: &Path, shift: &Shift) -> std::io::Result<(PathBuf, String)> {
    let data = load(unit, output_dir, shift);
    let html = render_html(&data);
    let dir = output_dir.join(&unit.name).join("reports");
    std::fs::create_dir_all(&dir)?;
    let path = dir.join(format!("shift-{}-{}.html", unit.name, shift.slug));
    let tmp = path.with_extension("html.tmp");
    std::fs::write(&tmp, html)?;
    std::fs::rename(&tmp, &path)?;
    Ok((path, render_text(&data)))
}
