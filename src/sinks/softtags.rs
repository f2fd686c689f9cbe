//! Output sinks: the soft-tag CSV (one file per unit per local day) and the alert JSON lines
//! (one file per unit per local day, optionally also standard output).
//!
//! Effects are idempotent by key: a soft-tag row by (unit, interval end), an alert event by its
//! per-unit sequence number. On start each writer reads the end of its newest file (repairing a
//! half-written last line left by a crash) and then skips whatever is already there, so
//! re-processing after a crash never writes an interval or an alert event twice.

use std::io::{self, Write};
use std::path::{Path, PathBuf};

use jiff::Timestamp;
use jiff::tz::TimeZone;

use crate::core::Outcome;
use crate::core::calendar::DayCache;
use crate::core::flags::{FlagNames, write_codes};
use crate::core::model::Evaluation;
use crate::core::monitor::MonitorState;
use crate::sinks::Sink;
use crate::sinks::daily::{DayFile, dated_files, day_file, flush_day, flush_day_into, last_complete_line};
use crate::sinks::durable::SyncSet;
use crate::units::{self, Quantity, Unit};

/// The soft-tag CSV header (stable; documented in docs/outputs.md). A unit with informational
/// tags (`[unit.info]`) has one more column per tag after these, named as configured.
pub const SOFT_TAG_HEADER: &str = "time,unit,predicted_temperature,measured_temperature,residual,prediction_uncertainty,apparent_conversion,heater_effectiveness,monitor_state,flags";

/// Whether a line is a soft-tag header (the documented columns, with or without the
/// informational ones after them).
fn is_header(line: &str) -> bool {
    line.strip_prefix(SOFT_TAG_HEADER).is_some_and(|rest| rest.is_empty() || rest.starts_with(','))
}

/// An informational tag's soft-tag column: its name, the tag's index and its unit (the value
/// is written in the tag's own unit).
#[derive(Debug, Clone)]
pub struct InfoColumn {
    /// Column name (the key in `[unit.info]`).
    pub name: String,
    /// Index of the tag in the unit's tag table.
    pub tag: usize,
    /// The tag's engineering unit.
    pub unit: Unit,
}

/// The informational columns of a unit, in configuration order.
pub fn info_columns(spec: &crate::core::spec::UnitSpec) -> Vec<InfoColumn> {
    spec.info_columns()
        .map(|(name, tag)| InfoColumn { name: name.to_string(), tag, unit: spec.tags[tag].unit })
        .collect()
}

/// Escape a text cell for CSV: quote when needed, and defuse cells a spreadsheet would execute
/// (leading `=`, `+`, `-`, `@`) with a leading apostrophe.
pub fn csv_text(text: &str) -> String {
    let mut out = String::new();
    csv_text_into(&mut out, text);
    out
}

/// [`csv_text`], appended to `out`.
fn csv_text_into(out: &mut String, text: &str) {
    let defuse = text.starts_with(['=', '+', '-', '@']);
    let quote = text.contains([',', '"', '\n', '\r']);
    if quote {
        out.push('"');
    }
    if defuse {
        out.push('\'');
    }
    if quote {
        out.push_str(&text.replace('"', "\"\""));
        out.push('"');
    } else {
        out.push_str(text);
    }
}

/// A number cell: fixed decimals, empty when absent or not finite.
fn num_into(out: &mut String, v: Option<f64>, decimals: usize) {
    if let Some(x) = v.filter(|x| x.is_finite()) {
        fixed_into(out, x, decimals);
    }
}

/// `x` with `decimals` digits after the point (rounded half away from zero; no negative
/// zero). Integer arithmetic where it is exact, which is much faster than the general float
/// formatter; the general formatter otherwise.
#[cfg(test)]
fn fixed(x: f64, decimals: usize) -> String {
    let mut out = String::new();
    fixed_into(&mut out, x, decimals);
    out
}

/// [`fixed`], appended to `out`.
fn fixed_into(out: &mut String, x: f64, decimals: usize) {
    use std::fmt::Write as _;
    const POW10: [f64; 7] = [1.0, 10.0, 100.0, 1e3, 1e4, 1e5, 1e6];
    let scaled = POW10.get(decimals).map(|scale| (x * scale).round());
    let Some(scaled) = scaled.filter(|v| v.abs() < 9.0e15) else {
        let _ = write!(out, "{x:.decimals$}");
        return;
    };
    #[allow(clippy::cast_possible_truncation)]
    let n = scaled as i64;
    let mut buf = [0u8; 20];
    let mut len = 0;
    let mut v = n.unsigned_abs();
    loop {
        #[allow(clippy::cast_possible_truncation)]
        let digit = (v % 10) as u8;
        buf[len] = b'0' + digit;
        len += 1;
        v /= 10;
        if v == 0 {
            break;
        }
    }
    // At least one digit before the point.
    while len <= decimals {
        buf[len] = b'0';
        len += 1;
    }
    if n < 0 {
        out.push('-');
    }
    for k in (0..len).rev() {
        if k + 1 == decimals {
            out.push('.');
        }
        out.push(char::from(buf[k]));
    }
}

/// End (ms) of the newest interval in a unit's soft-tag files in `dir`: the last row of the
/// newest file that has one (files holding only the header are skipped). `repair` as in
/// [`last_complete_line`].
pub(crate) fn newest_soft_tag_ms(dir: &Path, unit: &str, repair: bool) -> io::Result<Option<i64>> {
    for (_, path) in dated_files(dir, &format!("softtags-{unit}-"), ".csv").into_iter().rev() {
        let Some(line) = last_complete_line(&path, repair)? else { continue };
        if is_header(&line) {
            continue;
        }
        let time = line.split(',').next().unwrap_or_default();
        if let Ok(ts) = time.parse::<Timestamp>() {
            return Ok(Some(ts.as_millisecond()));
        }
    }
    Ok(None)
}

/// Soft-tag CSV writer of one unit.
pub struct SoftTagWriter {
    dir: PathBuf,
    unit: String,
    /// File-name prefix, `softtags-<unit>-`.
    prefix: String,
    tz: TimeZone,
    temperature: Unit,
    difference: Unit,
    /// Informational columns after the documented ones, and the header that names them.
    info: Vec<InfoColumn>,
    header: String,
    current: Option<DayFile>,
    /// Local dates of interval ends (for the file) and of instants (for the time column).
    days: DayCache,
    times: DayCache,
    /// Tag and feed names of the flags.
    names: FlagNames,
    /// The row being formatted (reused).
    row: String,
    /// The flags cell being formatted (reused).
    flags: String,
    /// End (ms) of the last interval on disk.
    pub last_written_end: Option<i64>,
}

impl SoftTagWriter {
    /// Open the writer; finds what is already on disk.
    pub fn open(
        dir: &Path,
        unit: &str,
        tz: TimeZone,
        temperature: Unit,
        names: FlagNames,
    ) -> io::Result<SoftTagWriter> {
        let prefix = format!("softtags-{unit}-");
        let last = newest_soft_tag_ms(dir, unit, true)?;
        let difference = units::lookup(Quantity::TemperatureDifference, temperature.symbol)
            .copied()
            .unwrap_or(temperature);
        Ok(SoftTagWriter {
            dir: dir.to_path_buf(),
            unit: unit.to_string(),
            prefix,
            tz,
            temperature,
            difference,
            info: Vec::new(),
            header: SOFT_TAG_HEADER.to_string(),
            current: None,
            days: DayCache::default(),
            times: DayCache::default(),
            names,
            row: String::with_capacity(256),
            flags: String::with_capacity(64),
            last_written_end: last,
        })
    }

    /// Write these informational columns after the documented ones (a new day file's header
    /// names them; a file begun before they were configured keeps its header until the day ends).
    pub fn with_info(mut self, info: Vec<InfoColumn>) -> SoftTagWriter {
        self.header = SOFT_TAG_HEADER.to_string();
        for c in &info {
            self.header.push(',');
            csv_text_into(&mut self.header, &c.name);
        }
        self.info = info;
        self
    }

    /// Append one interval, unless it is already on disk. Returns whether it was written.
    pub fn write_row(&mut self, ev: &Evaluation, monitor_state: &str) -> io::Result<bool> {
        if self.last_written_end.is_some_and(|l| ev.end_ms <= l) {
            return Ok(false);
        }
        let day = self.days.day_of_interval(ev.end_ms, &self.tz);
        let header = Some(self.header.as_str());
        let file = day_file(&mut self.current, &self.dir, &self.prefix, ".csv", day, header)?;
        let (t, d) = (self.temperature, self.difference);
        let row = &mut self.row;
        row.clear();
        self.times.rfc3339_into(row, ev.end_ms, &self.tz);
        row.push(',');
        csv_text_into(row, &self.unit);
        for (v, decimals) in [
            (ev.predicted_k.map(|k| t.from_si(k)), 3),
            (ev.measured_k.map(|k| t.from_si(k)), 3),
            (ev.residual_k.map(|k| d.from_si(k)), 3),
            (ev.u_pred_k.map(|k| d.from_si(k)), 3),
            (ev.apparent_conversion, 4),
            (ev.effectiveness, 4),
        ] {
            row.push(',');
            num_into(row, v, decimals);
        }
        row.push(',');
        csv_text_into(row, monitor_state);
        row.push(',');
        self.flags.clear();
        write_codes(&mut self.flags, &ev.flags, &self.names);
        csv_text_into(row, &self.flags);
        for c in &self.info {
            // A usable interval value in the tag's unit; empty when stale, bad or missing
            // (the flags name the tag then).
            let si = ev.signals.tag_values_si.get(c.tag).copied().flatten();
            row.push(',');
            num_into(row, si.map(|v| c.unit.from_si(v)), 4);
        }
        row.push('\n');
        file.out.write_all(self.row.as_bytes())?;
        self.last_written_end = Some(ev.end_ms);
        Ok(true)
    }
}

impl Sink for SoftTagWriter {
    fn write(&mut self, outcome: &Outcome) -> io::Result<()> {
        self.write_row(&outcome.evaluation, outcome.state.as_str()).map(drop)
    }

    fn flush(&mut self) -> io::Result<()> {
        flush_day(&mut self.current, false)
    }

    fn sync_into(&mut self, set: &mut SyncSet) -> io::Result<()> {
        flush_day_into(&mut self.current, set)
    }
}

// Reading the soft tags back (reports, `identify`).

/// One soft-tag row.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// Interval end, ms.
    pub t_ms: i64,
    /// Predicted temperature (measured tag's unit).
    pub predicted: Option<f64>,
    /// Measured.
    pub measured: Option<f64>,
    /// Residual.
    pub residual: Option<f64>,
    /// Standard uncertainty of the prediction.
    pub u: Option<f64>,
    /// Apparent conversion.
    pub conversion: Option<f64>,
    /// Heater effectiveness.
    pub effectiveness: Option<f64>,
    /// Monitor state (`None` when the cell names none).
    pub state: Option<MonitorState>,
    /// Flags.
    pub flags: Vec<String>,
}

fn parse_row(line: &str) -> Option<Row> {
    let mut cells = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    for c in line.chars() {
        match c {
            '"' => quoted = !quoted,
            ',' if !quoted => cells.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    cells.push(cur);
    if cells.len() < 10 {
        return None;
    }
    let f = |i: usize| cells[i].trim().parse::<f64>().ok();
    Some(Row {
        t_ms: cells[0].parse::<Timestamp>().ok()?.as_millisecond(),
        predicted: f(2),
        measured: f(3),
        residual: f(4),
        u: f(5),
        conversion: f(6),
        effectiveness: f(7),
        state: MonitorState::parse(&cells[8]),
        flags: cells[9].split(';').filter(|s| !s.is_empty()).map(str::to_string).collect(),
    })
}

/// Soft-tag rows of a unit in (from, to], from the daily files whose dates overlap.
pub fn load_rows(dir: &Path, unit: &str, from_ms: i64, to_ms: i64, tz: &TimeZone) -> Vec<Row> {
    let prefix = format!("softtags-{unit}-");
    let first = crate::core::calendar::day_of(from_ms.saturating_add(1), tz);
    let last = if to_ms >= i64::MAX / 2 {
        "9999-12-31".to_string()
    } else {
        crate::core::calendar::day_of(to_ms, tz)
    };
    let files: Vec<PathBuf> = crate::sinks::daily::dated_files(dir, &prefix, ".csv")
        .into_iter()
        .filter(|(d, _)| *d >= first && *d <= last)
        .map(|(_, p)| p)
        .collect();
    let mut rows: Vec<Row> = files
        .iter()
        .filter_map(|f| std::fs::read_to_string(f).ok())
        .flat_map(|text| text.lines().filter(|l| !is_header(l)).filter_map(parse_row).collect::<Vec<_>>())
        .collect();
    rows.retain(|r| r.t_ms > from_ms && r.t_ms <= to_ms);
    rows.sort_by_key(|r| r.t_ms);
    rows.dedup_by_key(|r| r.t_ms);
    rows
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use std::fs;

    use super::*;

    #[test]
    fn fixed_point_numbers_match_the_general_formatter() {
        assert_eq!(fixed(52.9544, 3), "52.954");
        assert_eq!(fixed(-0.1094, 3), "-0.109");
        assert_eq!(fixed(0.00049, 3), "0.000");
        assert_eq!(fixed(-0.00049, 3), "0.000");
        assert_eq!(fixed(0.4599, 4), "0.4599");
        assert_eq!(fixed(7.0, 0), "7");
        assert_eq!(fixed(-12.5, 1), "-12.5");
        assert_eq!(fixed(1e300, 3), format!("{:.3}", 1e300));
        // Away from exact ties the two agree everywhere.
        let mut x = -1234.5678_f64;
        while x < 1234.0 {
            let want = format!("{x:.3}");
            let want = if want == "-0.000" { "0.000".to_string() } else { want };
            assert_eq!(fixed(x, 3), want, "{x}");
            x += 0.123_456_7;
        }
    }

    #[test]
    fn spreadsheet_formulas_are_defused_and_cells_quoted() {
        assert_eq!(csv_text("=1+2"), "'=1+2");
        assert_eq!(csv_text("-x"), "'-x");
        assert_eq!(csv_text("@SUM(A1)"), "'@SUM(A1)");
        assert_eq!(csv_text("a,b"), "\"a,b\"");
        assert_eq!(csv_text("=HYPERLINK(\"x\",1)"), "\"'=HYPERLINK(\"\"x\"\",1)\"");
        assert_eq!(csv_text("stale:TI-1;bad:FI-2"), "stale:TI-1;bad:FI-2");
    }

    /// The report's read-only look-up of the newest row: a newest file holding only its header
    /// is skipped, a half-written tail is skipped but left on disk.
    #[test]
    fn newest_row_without_repair_skips_header_only_files_and_partial_tails() {
        let dir = tempfile::tempdir().unwrap();
        let older = dir.path().join("softtags-R-1-2026-12-01.csv");
        let partial = format!(
            "{SOFT_TAG_HEADER}\n2026-12-01T23:59:00+00:00,R-1,1,2,3,4,,,watching,\n2026-12-02T00:00:00+00:00,R-1,5"
        );
        fs::write(&older, &partial).unwrap();
        fs::write(dir.path().join("softtags-R-1-2026-12-02.csv"), format!("{SOFT_TAG_HEADER}\n")).unwrap();
        let expected = "2026-12-01T23:59:00Z".parse::<Timestamp>().unwrap().as_millisecond();
        assert_eq!(newest_soft_tag_ms(dir.path(), "R-1", false).unwrap(), Some(expected));
        assert_eq!(fs::read_to_string(&older).unwrap(), partial, "read-only");
        assert_eq!(newest_soft_tag_ms(dir.path(), "R-2", false).unwrap(), None);
    }

    #[test]
    fn a_half_written_row_is_repaired_and_rows_are_not_written_twice() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("softtags-R-1-2026-12-01.csv");
        fs::write(&path, format!("{SOFT_TAG_HEADER}\n2026-12-01T10:01:00+00:00,R-1,1,2,3,4,,,learning,\n2026-12-01T10:02:00+00:00,R-1,5")).unwrap();
        let w = SoftTagWriter::open(
            dir.path(),
            "R-1",
            TimeZone::UTC,
            *units::lookup(Quantity::Temperature, "K").unwrap(),
            FlagNames::default(),
        )
        .unwrap();
        let expected = "2026-12-01T10:01:00Z".parse::<Timestamp>().unwrap().as_millisecond();
        assert_eq!(w.last_written_end, Some(expected));
        assert!(fs::read_to_string(&path).unwrap().ends_with("learning,\n"));
    }
}
