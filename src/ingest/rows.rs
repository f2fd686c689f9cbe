//! From CSV records to samples: column mapping from each file's header, timestamps (RFC 3339,
//! or local time in a named IANA zone with DST folds and gaps handled), numbers and quality
//! words. Every record that cannot be used is rejected with a reason; the caller counts and
//! logs it with the file and line.

use std::collections::HashMap;
use std::fmt;

use jiff::Timestamp;
use jiff::civil::DateTime;
use jiff::tz::{AmbiguousOffset, TimeZone};

use crate::core::vocabulary::{Quality, Sample, parse_quality};
use crate::ingest::settings::{InputConfig, Layout, TimestampFormat};

/// Why a record (or one value of it) was rejected.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Reject {
    /// Fewer fields than the header.
    ShortRow {
        /// Fields found.
        found: usize,
        /// Fields expected.
        expected: usize,
    },
    /// The timestamp could not be read.
    BadTimestamp(String),
    /// A local time that does not exist (skipped by a DST change).
    NonexistentLocalTime(String),
    /// A value is not a finite number.
    NonNumeric {
        /// Column or tag.
        column: String,
        /// The text.
        text: String,
    },
    /// A tag this unit does not map (long layout).
    UnknownTag(String),
    /// An unknown quality word.
    BadQuality(String),
    /// The file's header lacks a needed column.
    MissingColumn(String),
    /// The file's header names a mapped tag twice (which column is right is unknowable).
    DuplicateColumn(String),
    /// The file's header does not fit the unit's layout (a long export matched by a wide unit's
    /// pattern, or the reverse): the whole file is not used.
    WrongLayout {
        /// The unit's layout (`wide` or `long`).
        layout: &'static str,
        /// What the header lacks for that layout.
        lacks: String,
        /// The layout the header looks like, if any.
        looks_like: Option<&'static str>,
    },
    /// Fields of the row are empty: no value for them (the rest of the row is used).
    EmptyField {
        /// The first empty column (tag or column name).
        column: String,
        /// How many more fields of the row are empty.
        more: usize,
    },
    /// A header row again in the middle of the file: the columns are mapped from it for the
    /// rows that follow (the line itself is no data).
    HeaderAgain {
        /// Whether its columns differ from the header before it.
        changed: bool,
    },
    /// A record longer than the configured limit.
    TooLong,
    /// Not valid UTF-8.
    NotUtf8,
}

impl Reject {
    /// Short reason code for counters and metrics.
    pub fn code(&self) -> &'static str {
        match self {
            Reject::ShortRow { .. } => "short_row",
            Reject::BadTimestamp(_) => "bad_timestamp",
            Reject::NonexistentLocalTime(_) => "nonexistent_local_time",
            Reject::NonNumeric { .. } => "non_numeric",
            Reject::UnknownTag(_) => "unknown_tag",
            Reject::BadQuality(_) => "bad_quality",
            Reject::MissingColumn(_) => "missing_column",
            Reject::DuplicateColumn(_) => "duplicate_column",
            Reject::WrongLayout { .. } => "wrong_layout",
            Reject::EmptyField { .. } => "empty_field",
            Reject::HeaderAgain { .. } => "header_again",
            Reject::TooLong => "line_too_long",
            Reject::NotUtf8 => "not_utf8",
        }
    }
}

impl fmt::Display for Reject {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Reject::ShortRow { found, expected } => {
                write!(f, "short row: {found} fields, the header has {expected}")
            }
            Reject::BadTimestamp(t) => write!(f, "unreadable timestamp `{t}`"),
            Reject::NonexistentLocalTime(t) => {
                write!(f, "local time `{t}` does not exist (skipped by a daylight-saving change)")
            }
            Reject::NonNumeric { column, text } => {
                write!(f, "value `{text}` of `{column}` is not a finite number")
            }
            Reject::UnknownTag(t) => write!(f, "unknown tag `{t}`"),
            Reject::BadQuality(q) => write!(f, "unknown quality `{q}` (expected good, uncertain or bad)"),
            Reject::MissingColumn(c) => write!(f, "the file's header has no column `{c}`"),
            Reject::DuplicateColumn(c) => {
                write!(f, "the file's header has the column `{c}` twice; the file is not used")
            }
            Reject::WrongLayout { layout, lacks, looks_like } => {
                write!(f, "the file's header does not fit the unit's `{layout}` layout ({lacks})")?;
                match looks_like {
                    Some(other) => write!(
                        f,
                        "; it looks like a `{other}` export: set `layout = \"{other}\"` for it, or keep it out with `exclude` under [unit.input]; the file is not used"
                    ),
                    None => f.write_str("; the file is not used"),
                }
            }
            Reject::EmptyField { column, more: 0 } => {
                write!(f, "empty field `{column}`: no value in this row")
            }
            Reject::EmptyField { column, more } => {
                write!(f, "empty fields `{column}` and {more} more: no value for them in this row")
            }
            Reject::HeaderAgain { changed: true } => f.write_str(
                "a header row again, with other columns: the rows after it are read by its columns",
            ),
            Reject::HeaderAgain { changed: false } => f.write_str("the header row again (the same columns)"),
            Reject::TooLong => f.write_str("record longer than the configured limit"),
            Reject::NotUtf8 => f.write_str("record is not valid UTF-8"),
        }
    }
}

/// The column plan of one file, built from its header.
#[derive(Debug, Clone, PartialEq)]
enum Plan {
    Wide { ts: usize, cols: Vec<(usize, usize)>, width: usize },
    Long { ts: usize, tag: usize, value: usize, quality: Option<usize>, width: usize },
    Unusable(Reject),
}

/// Timestamp reader with the state needed to resolve DST folds in file order.
#[derive(Debug, Clone)]
struct Clock {
    format: TimestampFormat,
    tz: TimeZone,
    last_text: String,
    last_ms: i64,
    /// Latest instant read from this file (for folds).
    latest_ms: Option<i64>,
    /// The unit's newest data time when this file was (re)attached: a file that starts inside
    /// a repeated local hour (the second hourly file of it, or a restart) takes the right one.
    unit_hint: Option<i64>,
}

/// How long after a repeated local hour the unit's data time still decides it for a file that
/// starts there (a file of an earlier day read late decides by its own rows).
const FOLD_HINT_MS: i64 = 2 * 3_600_000;

/// Out-of-order tolerance when choosing between the two instants of a repeated local time.
const FOLD_TOLERANCE_MS: i64 = 15 * 60_000;

impl Clock {
    /// The timestamp field of column `column` (an empty one is an empty field).
    fn read_field(&mut self, text: &str, column: &str) -> Result<i64, Reject> {
        if text.trim().is_empty() {
            return Err(Reject::EmptyField { column: column.to_string(), more: 0 });
        }
        self.read(text)
    }

    fn read(&mut self, text: &str) -> Result<i64, Reject> {
        let text = text.trim();
        if text == self.last_text && !text.is_empty() {
            return Ok(self.last_ms);
        }
        let ms = match &self.format {
            TimestampFormat::Rfc3339 => match plain_rfc3339_ms(text.as_bytes()) {
                Some(ms) => ms,
                None => {
                    let ts: Timestamp = text.parse().map_err(|_| Reject::BadTimestamp(text.to_string()))?;
                    ts.as_millisecond()
                }
            },
            TimestampFormat::Local(fmt) => {
                let dt = DateTime::strptime(fmt, text).map_err(|_| Reject::BadTimestamp(text.to_string()))?;
                let amb = self.tz.to_ambiguous_timestamp(dt);
                match amb.offset() {
                    AmbiguousOffset::Unambiguous { offset } => offset
                        .to_timestamp(dt)
                        .map_err(|_| Reject::BadTimestamp(text.to_string()))?
                        .as_millisecond(),
                    AmbiguousOffset::Gap { .. } => {
                        return Err(Reject::NonexistentLocalTime(text.to_string()));
                    }
                    AmbiguousOffset::Fold { before, after } => {
                        let early =
                            before.to_timestamp(dt).map_err(|_| Reject::BadTimestamp(text.to_string()))?;
                        let late =
                            after.to_timestamp(dt).map_err(|_| Reject::BadTimestamp(text.to_string()))?;
                        let (early, late) = (early.as_millisecond(), late.as_millisecond());
                        // The repeated hour: rows are in time order in the export, so once the
                        // file has passed the first occurrence, the same wall time is the second.
                        let hint = self.unit_hint.filter(|u| *u <= late + FOLD_HINT_MS);
                        match self.latest_ms.or(hint) {
                            Some(latest) if early < latest - FOLD_TOLERANCE_MS => late,
                            _ => early,
                        }
                    }
                }
            }
        };
        self.last_text.clear();
        self.last_text.push_str(text);
        self.last_ms = ms;
        self.latest_ms = Some(self.latest_ms.map_or(ms, |l| l.max(ms)));
        Ok(ms)
    }
}

/// The instant (ms) of the commonest RFC 3339 form, `YYYY-MM-DDTHH:MM:SSZ` or with a
/// `±HH:MM` offset, read without the general parser (this runs for every row); `None` for
/// anything else (fractions of a second, other separators, out-of-range fields, `-00:00`),
/// which the general parser then reads or rejects.
fn plain_rfc3339_ms(b: &[u8]) -> Option<i64> {
    let digits = |range: std::ops::Range<usize>| -> Option<i64> {
        let mut v = 0i64;
        for &c in b.get(range)? {
            if !c.is_ascii_digit() {
                return None;
            }
            v = v * 10 + i64::from(c - b'0');
        }
        Some(v)
    };
    let sep = |i: usize, c: u8| b.get(i) == Some(&c);
    if !(sep(4, b'-') && sep(7, b'-') && sep(10, b'T') && sep(13, b':') && sep(16, b':')) {
        return None;
    }
    let (y, mo, d) = (digits(0..4)?, digits(5..7)?, digits(8..10)?);
    let (h, mi, sec) = (digits(11..13)?, digits(14..16)?, digits(17..19)?);
    let offset_s = match &b[19..] {
        b"Z" => 0,
        [sign @ (b'+' | b'-'), _, _, b':', _, _] => {
            let (oh, om) = (digits(20..22)?, digits(23..25)?);
            if oh > 23 || om > 59 || (*sign == b'-' && oh == 0 && om == 0) {
                return None;
            }
            let s = oh * 3600 + om * 60;
            if *sign == b'-' { -s } else { s }
        }
        _ => return None,
    };
    let leap = y % 4 == 0 && (y % 100 != 0 || y % 400 == 0);
    let month_days = [31, if leap { 29 } else { 28 }, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];
    let valid = (1900..=9999).contains(&y)
        && (1..=12).contains(&mo)
        && d >= 1
        && d <= month_days[usize::try_from(mo - 1).ok()?]
        && h <= 23
        && mi <= 59
        && sec <= 59;
    if !valid {
        return None;
    }
    // Days since 1970-01-01 of a proleptic Gregorian date (the civil-from-days inverse).
    let (y, m) = if mo <= 2 { (y - 1, mo + 9) } else { (y, mo - 3) };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let doy = (153 * m + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    let days = era * 146_097 + doe - 719_468;
    Some(((days * 86_400 + h * 3600 + mi * 60 + sec) - offset_s) * 1000)
}

/// The column `name` of a header: the exact (trimmed) match, else the one column whose name
/// differs only in case. Two columns that both differ only in case are ambiguous.
fn find_column(fields: &[String], name: &str) -> Result<Option<usize>, Reject> {
    let name = name.trim();
    if let Some(i) = fields.iter().position(|f| f.trim() == name) {
        return Ok(Some(i));
    }
    let folded = name.to_lowercase();
    let mut hits = fields.iter().enumerate().filter(|(_, f)| f.trim().to_lowercase() == folded);
    match (hits.next(), hits.next()) {
        (None, _) => Ok(None),
        (Some((i, _)), None) => Ok(Some(i)),
        (Some(_), Some(_)) => Err(Reject::DuplicateColumn(name.to_string())),
    }
}

/// Whether a header looks like a long export: it has `tag` and `value` columns (any case).
fn looks_long(fields: &[String]) -> bool {
    let has = |n: &str| fields.iter().any(|f| f.trim().eq_ignore_ascii_case(n));
    has("tag") && has("value")
}

/// Turns records of the files of one unit into samples.
#[derive(Debug, Clone)]
pub struct RowParser {
    layout: Layout,
    ts_column: String,
    reject_unknown: bool,
    tags: HashMap<String, usize>,
    /// Tags by lower-case name (only names that stay distinct), for headers in another case.
    tags_folded: HashMap<String, usize>,
    tag_names: Vec<String>,
    /// Per file id: the plan and the clock.
    files: HashMap<u64, (Plan, Clock)>,
    format: TimestampFormat,
    tz: TimeZone,
    /// The unit's newest data time as the pipeline last said (restored from the checkpoint).
    data_clock: Option<i64>,
    /// Per file id: the header row found again in the middle of the file, which maps the rows
    /// after it (kept in the checkpoint: a restart resumes after it).
    overrides: std::collections::BTreeMap<u64, Vec<String>>,
}

/// What a header said about a file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum HeaderInfo {
    /// Columns mapped; lists tags of the unit the file does not carry (wide layout).
    Mapped {
        /// Tags the unit expects that are absent from this file.
        missing_tags: Vec<String>,
        /// Columns the unit does not use.
        ignored_columns: usize,
    },
    /// The file cannot be used; every record will be rejected with this reason.
    Unusable(Reject),
}

impl RowParser {
    /// A parser for a unit's input settings and tag names.
    pub fn new(input: &InputConfig, tag_names: &[String]) -> RowParser {
        let mut tags_folded: HashMap<String, usize> = HashMap::new();
        let mut clash = Vec::new();
        for (i, n) in tag_names.iter().enumerate() {
            if tags_folded.insert(n.trim().to_lowercase(), i).is_some() {
                clash.push(n.trim().to_lowercase());
            }
        }
        for c in clash {
            tags_folded.remove(&c);
        }
        RowParser {
            tags_folded,
            layout: input.layout.clone(),
            ts_column: input.timestamp_column.clone(),
            reject_unknown: input.reject_unknown_tags,
            tags: tag_names.iter().enumerate().map(|(i, n)| (n.clone(), i)).collect(),
            tag_names: tag_names.to_vec(),
            files: HashMap::new(),
            format: input.timestamp_format.clone(),
            tz: input.time_zone.clone(),
            data_clock: None,
            overrides: std::collections::BTreeMap::new(),
        }
    }

    /// The header rows found again mid-file, by file id (for the checkpoint).
    pub fn overrides(&self) -> &std::collections::BTreeMap<u64, Vec<String>> {
        &self.overrides
    }

    /// Restore the mid-file headers of a checkpoint.
    pub fn restore_overrides(&mut self, saved: std::collections::BTreeMap<u64, Vec<String>>) {
        self.overrides = saved;
    }

    /// The unit's newest data time (the assembler's, kept in the checkpoint): files attached
    /// from now on resolve a repeated local hour against it.
    pub fn note_data_time(&mut self, ms: Option<i64>) {
        self.data_clock = self.data_clock.max(ms);
    }

    /// Forget a file (it was finished or replaced).
    pub fn forget(&mut self, file: u64) {
        self.files.remove(&file);
        self.overrides.remove(&file);
    }

    /// Read a file's header row and build its column plan. Column names are compared trimmed
    /// and without regard to case (an exact match wins over one that differs only in case).
    pub fn header(&mut self, file: u64, fields: &[String]) -> HeaderInfo {
        // The tailer sends a file's header again when it re-attaches to the same file (a
        // continuation): its clock keeps where the file had got to in a repeated local hour.
        let unit_hint = self.files.values().filter_map(|(_, c)| c.latest_ms).max().max(self.data_clock);
        let clock = self.files.remove(&file).map(|(_, c)| c).unwrap_or_else(|| Clock {
            format: self.format.clone(),
            tz: self.tz.clone(),
            last_text: String::new(),
            last_ms: 0,
            latest_ms: None,
            unit_hint,
        });
        // A header found again mid-file maps the rows after it, where a re-attach resumes.
        let fields = self.overrides.get(&file).cloned().unwrap_or_else(|| fields.to_vec());
        let (plan, info) = match self.plan(&fields) {
            Ok(x) => x,
            Err(r) => (Plan::Unusable(r.clone()), HeaderInfo::Unusable(r)),
        };
        self.files.insert(file, (plan, clock));
        info
    }

    /// Whether a record is the header row again: its timestamp field holds the timestamp
    /// column's name. If so, the file's columns are mapped from it from here on.
    fn header_again<'a>(
        &mut self,
        file: u64,
        n_fields: usize,
        field: &dyn Fn(usize) -> &'a [u8],
    ) -> Option<Reject> {
        let (plan, _) = self.files.get(&file)?;
        let ts = match plan {
            Plan::Wide { ts, .. } | Plan::Long { ts, .. } => *ts,
            Plan::Unusable(_) => return None,
        };
        let name = self.ts_column.trim();
        // Cheap first (this runs for every record): a field shorter than the name, or whose
        // first character after leading ASCII white space is ASCII and not the name's first
        // letter in either case (a digit of a timestamp), cannot be the name once trimmed.
        let first_differs =
            |f: &[u8]| match (f.iter().find(|b| !b" \t\n\x0b\x0c\r".contains(b)), name.as_bytes().first()) {
                (Some(b), Some(n)) => b.is_ascii() && !b.eq_ignore_ascii_case(n),
                _ => false,
            };
        let is_header = ts < n_fields
            && field(ts).len() >= name.len()
            && !first_differs(field(ts))
            && std::str::from_utf8(field(ts)).is_ok_and(|t| t.trim().eq_ignore_ascii_case(name));
        if !is_header {
            return None;
        }
        let fields: Vec<String> =
            (0..n_fields).map(|i| String::from_utf8_lossy(field(i)).trim().to_string()).collect();
        let before = self.overrides.get(&file).cloned();
        let (plan, _) = match self.plan(&fields) {
            Ok(x) => x,
            Err(r) => (Plan::Unusable(r.clone()), HeaderInfo::Unusable(r)),
        };
        let changed = match &before {
            Some(b) => *b != fields,
            None => self.files.get(&file).is_none_or(|(p, _)| *p != plan),
        };
        if let Some((p, _)) = self.files.get_mut(&file) {
            *p = plan;
        }
        self.overrides.insert(file, fields);
        Some(Reject::HeaderAgain { changed })
    }

    /// The unit's tag a header field names (exactly, else ignoring case).
    fn tag_of(&self, field: &str) -> Option<usize> {
        let f = field.trim();
        self.tags.get(f).or_else(|| self.tags_folded.get(&f.to_lowercase())).copied()
    }

    /// The column plan of a header, or why the file cannot be used.
    fn plan(&self, fields: &[String]) -> Result<(Plan, HeaderInfo), Reject> {
        let ts = find_column(fields, &self.ts_column)?;
        let width = fields.len();
        let mapped = HeaderInfo::Mapped { missing_tags: Vec::new(), ignored_columns: 0 };
        match &self.layout {
            Layout::Wide => {
                let Some(ts) = ts else {
                    return Err(self.wrong_or_missing(fields, &self.ts_column));
                };
                let mut cols = Vec::new();
                let mut ignored = 0;
                for (i, f) in fields.iter().enumerate().filter(|(i, _)| *i != ts) {
                    match self.tag_of(f) {
                        Some(t) => cols.push((i, t)),
                        None => ignored += 1,
                    }
                }
                if cols.is_empty() {
                    return Err(Reject::WrongLayout {
                        layout: "wide",
                        lacks: format!("no column names one of the unit's {} tags", self.tag_names.len()),
                        looks_like: looks_long(fields).then_some("long"),
                    });
                }
                if let Some((_, (_, t))) =
                    cols.iter().enumerate().find(|(k, (_, t))| cols[..*k].iter().any(|(_, u)| u == t))
                {
                    return Err(Reject::DuplicateColumn(self.tag_names[*t].clone()));
                }
                let missing_tags: Vec<String> = (0..self.tag_names.len())
                    .filter(|t| !cols.iter().any(|(_, c)| c == t))
                    .map(|t| self.tag_names[t].clone())
                    .collect();
                let info = HeaderInfo::Mapped { missing_tags, ignored_columns: ignored };
                Ok((Plan::Wide { ts, cols, width }, info))
            }
            Layout::Long { tag, value, quality } => {
                let (tc, vc) = (find_column(fields, tag)?, find_column(fields, value)?);
                let qc = match quality {
                    Some(q) => Some(find_column(fields, q)?.ok_or_else(|| Reject::MissingColumn(q.clone()))?),
                    None => None,
                };
                match (ts, tc, vc) {
                    (Some(ts), Some(tag), Some(value)) => {
                        Ok((Plan::Long { ts, tag, value, quality: qc, width }, mapped))
                    }
                    (None, _, _) => Err(self.wrong_or_missing(fields, &self.ts_column)),
                    (_, None, _) => Err(self.wrong_or_missing(fields, tag)),
                    (_, _, None) => Err(self.wrong_or_missing(fields, value)),
                }
            }
        }
    }

    /// A header without the column `name`: the wrong layout if it looks like the other one.
    fn wrong_or_missing(&self, fields: &[String], name: &str) -> Reject {
        let (layout, other) = match self.layout {
            Layout::Wide => ("wide", looks_long(fields)),
            Layout::Long { .. } => ("long", fields.iter().any(|f| self.tag_of(f).is_some())),
        };
        if !other {
            return Reject::MissingColumn(name.to_string());
        }
        Reject::WrongLayout {
            layout,
            lacks: format!("no column `{name}`"),
            looks_like: Some(if layout == "wide" { "long" } else { "wide" }),
        }
    }

    /// Parse one record. Samples go to `out`; the returned list holds the rejections (a wide
    /// row can yield samples and still reject one non-numeric cell). A record of a file whose
    /// header was never seen is rejected as unusable.
    pub fn record<'a>(
        &mut self,
        file: u64,
        n_fields: usize,
        field: &dyn Fn(usize) -> &'a [u8],
        out: &mut dyn FnMut(Sample),
        rejects: &mut Vec<Reject>,
    ) {
        if let Some(r) = self.header_again(file, n_fields, field) {
            rejects.push(r);
            return;
        }
        let Some((plan, clock)) = self.files.get_mut(&file) else {
            rejects.push(Reject::MissingColumn(self.ts_column.clone()));
            return;
        };
        let text = |i: usize| std::str::from_utf8(field(i)).map_err(|_| Reject::NotUtf8);
        let ts_column = self.ts_column.as_str();
        match plan {
            Plan::Unusable(r) => rejects.push(r.clone()),
            Plan::Wide { ts, cols, width } => {
                let (ts, width) = (*ts, *width);
                wide_record(
                    clock,
                    ts_column,
                    &self.tag_names,
                    (ts, cols, width),
                    n_fields,
                    &text,
                    out,
                    rejects,
                );
            }
            Plan::Long { ts, tag, value, quality, width } => {
                if n_fields < *width {
                    rejects.push(Reject::ShortRow { found: n_fields, expected: *width });
                    return;
                }
                let name = match text(*tag) {
                    Ok(t) => t.trim(),
                    Err(r) => {
                        rejects.push(r);
                        return;
                    }
                };
                if name.is_empty() {
                    let column = match &self.layout {
                        Layout::Long { tag, .. } => tag.clone(),
                        Layout::Wide => String::new(),
                    };
                    rejects.push(Reject::EmptyField { column, more: 0 });
                    return;
                }
                let Some(&tag_idx) = self.tags.get(name) else {
                    if self.reject_unknown {
                        rejects.push(Reject::UnknownTag(name.chars().take(60).collect()));
                    }
                    return;
                };
                let t_ms = match text(*ts).and_then(|t| clock.read_field(t, ts_column)) {
                    Ok(t) => t,
                    Err(r) => {
                        rejects.push(r);
                        return;
                    }
                };
                let q = match quality.map(text) {
                    None => Quality::Good,
                    Some(Ok(w)) => match parse_quality(w) {
                        Some(q) => q,
                        None => {
                            rejects.push(Reject::BadQuality(w.chars().take(40).collect()));
                            return;
                        }
                    },
                    Some(Err(r)) => {
                        rejects.push(r);
                        return;
                    }
                };
                let raw = match text(*value) {
                    Ok(t) => t.trim(),
                    Err(r) => {
                        rejects.push(r);
                        return;
                    }
                };
                if raw.is_empty() && q == Quality::Bad {
                    out(Sample { tag: tag_idx, t_ms, value: f64::NAN, quality: Quality::Bad });
                    return;
                }
                if raw.is_empty() {
                    rejects.push(Reject::EmptyField { column: name.to_string(), more: 0 });
                    return;
                }
                match raw.parse::<f64>() {
                    Ok(v) if v.is_finite() => out(Sample { tag: tag_idx, t_ms, value: v, quality: q }),
                    _ => rejects.push(Reject::NonNumeric {
                        column: name.to_string(),
                        text: raw.chars().take(40).collect(),
                    }),
                }
            }
        }
    }
}

/// One record of a wide file: a sample per mapped column, empty cells counted once per row.
#[allow(clippy::too_many_arguments)]
fn wide_record<'a>(
    clock: &mut Clock,
    ts_column: &str,
    tag_names: &[String],
    (ts, cols, width): (usize, &[(usize, usize)], usize),
    n_fields: usize,
    text: &dyn Fn(usize) -> Result<&'a str, Reject>,
    out: &mut dyn FnMut(Sample),
    rejects: &mut Vec<Reject>,
) {
    if n_fields <= ts || n_fields < width {
        rejects.push(Reject::ShortRow { found: n_fields, expected: width });
        return;
    }
    let t_ms = match text(ts).and_then(|t| clock.read_field(t, ts_column)) {
        Ok(t) => t,
        Err(r) => {
            rejects.push(r);
            return;
        }
    };
    let mut empty: Option<(usize, usize)> = None;
    for &(col, tag) in cols.iter() {
        let raw = match text(col) {
            Ok(t) => t.trim(),
            Err(r) => {
                rejects.push(r);
                continue;
            }
        };
        if raw.is_empty() {
            // Counted once per row, naming the first empty column.
            empty = Some(empty.map_or((tag, 0), |(first, more)| (first, more + 1)));
            continue;
        }
        match raw.parse::<f64>() {
            Ok(v) if v.is_finite() => out(Sample { tag, t_ms, value: v, quality: Quality::Good }),
            _ => rejects.push(Reject::NonNumeric {
                column: tag_names[tag].clone(),
                text: raw.chars().take(40).collect(),
            }),
        }
    }
    if let Some((first, more)) = empty {
        rejects.push(Reject::EmptyField { column: tag_names[first].clone(), more });
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn input(layout: Layout, format: TimestampFormat, tz: &str) -> InputConfig {
        InputConfig {
            directory: ".".into(),
            pattern: "*.csv".into(),
            exclude: Vec::new(),
            layout,
            timestamp_column: "time".into(),
            timestamp_format: format,
            time_zone: TimeZone::get(tz).unwrap(),
            reject_unknown_tags: true,
            links_outside: false,
        }
    }

    fn parse(p: &mut RowParser, file: u64, line: &str) -> (Vec<Sample>, Vec<Reject>) {
        let fields: Vec<&str> = line.split(',').collect();
        let mut samples = Vec::new();
        let mut rejects = Vec::new();
        p.record(file, fields.len(), &|i| fields[i].as_bytes(), &mut |s| samples.push(s), &mut rejects);
        (samples, rejects)
    }

    /// The hand-read common form gives the general parser's instant, and leaves every other
    /// form (and every invalid one) to it.
    #[test]
    fn plain_rfc3339_matches_the_general_parser() {
        let mut rng = crate::rng::Rng::new(12);
        for _ in 0..20_000 {
            let pick = |rng: &mut crate::rng::Rng, n: u64| (rng.uniform() * n as f64) as u64;
            let y = 1900 + pick(&mut rng, 8100);
            let (mo, d) = (1 + pick(&mut rng, 13), 1 + pick(&mut rng, 31));
            let (h, mi, s) = (pick(&mut rng, 25), pick(&mut rng, 61), pick(&mut rng, 61));
            let zone = match pick(&mut rng, 4) {
                0 => "Z".to_string(),
                1 => "+00:00".to_string(),
                2 => format!("+{:02}:{:02}", pick(&mut rng, 25), pick(&mut rng, 61)),
                _ => format!("-{:02}:{:02}", pick(&mut rng, 25), pick(&mut rng, 61)),
            };
            let text = format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}{zone}");
            let general = text.parse::<Timestamp>().ok().map(|t| t.as_millisecond());
            if let Some(ms) = plain_rfc3339_ms(text.as_bytes()) {
                assert_eq!(Some(ms), general, "{text}");
            }
        }
        // Both kinds of offset and the epoch; other forms go to the general parser.
        assert_eq!(plain_rfc3339_ms(b"1970-01-01T00:00:00Z"), Some(0));
        assert_eq!(plain_rfc3339_ms(b"2026-12-01T10:00:00Z"), Some(1_796_119_200_000));
        assert_eq!(plain_rfc3339_ms(b"2026-12-01T11:30:00+01:30"), Some(1_796_119_200_000));
        assert_eq!(plain_rfc3339_ms(b"2026-12-01T08:00:00-02:00"), Some(1_796_119_200_000));
        assert_eq!(plain_rfc3339_ms(b"2024-02-29T00:00:00Z"), Some(1_709_164_800_000));
        for other in [
            "2026-12-01T10:00:00.5Z",
            "2026-12-01 10:00:00Z",
            "2026-12-01t10:00:00z",
            "2025-02-29T00:00:00Z",
            "2026-12-01T10:00:60Z",
            "2026-12-01T10:00:00-00:00",
            "2026-12-01T10:00:00",
            "",
        ] {
            assert_eq!(plain_rfc3339_ms(other.as_bytes()), None, "{other}");
        }
    }

    #[test]
    fn wide_rows_map_columns_by_header() {
        let tags = vec!["FI-1".to_string(), "TI-2".to_string()];
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        let header: Vec<String> = ["TI-2", "time", "XX-9", "FI-1"].iter().map(|s| s.to_string()).collect();
        assert_eq!(p.header(1, &header), HeaderInfo::Mapped { missing_tags: vec![], ignored_columns: 1 });
        let (s, r) = parse(&mut p, 1, "351.2,2026-12-01T10:00:00Z,7,12.5");
        assert!(r.is_empty());
        assert_eq!(s.len(), 2);
        assert_eq!((s[0].tag, s[0].value), (1, 351.2));
        assert_eq!(s[1].t_ms, 1_796_119_200_000);
        let (s, r) = parse(&mut p, 1, "abc,2026-12-01T10:01:00+01:00,7,");
        assert!(s.is_empty());
        assert_eq!(r[0].code(), "non_numeric");
        let (_, r) = parse(&mut p, 1, "1,2026-13-01T10:00:00Z,7,1");
        assert_eq!(r[0].code(), "bad_timestamp");
        let (_, r) = parse(&mut p, 1, "1,2026-12-01T10:00:00Z");
        assert_eq!(r[0].code(), "short_row");
    }

    /// Columns the unit does not map are never decoded: text, empty cells or bytes that are
    /// not UTF-8 there neither reject the row nor cost a number parse.
    #[test]
    fn unmapped_wide_columns_are_not_parsed() {
        let tags = vec!["FI-1".to_string(), "TI-2".to_string()];
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        let header: Vec<String> =
            ["time", "XX-9", "FI-1", "XX-10", "TI-2", "XX-11"].iter().map(|s| s.to_string()).collect();
        assert_eq!(p.header(1, &header), HeaderInfo::Mapped { missing_tags: vec![], ignored_columns: 3 });
        let fields: [&[u8]; 6] = [b"2026-12-01T10:00:00Z", b"n/a", b"12.5", b"", b"351.2", b"\xff\xfe"];
        let (mut samples, mut rejects) = (Vec::new(), Vec::new());
        p.record(1, fields.len(), &|i| fields[i], &mut |s| samples.push(s), &mut rejects);
        assert!(rejects.is_empty(), "{rejects:?}");
        assert_eq!(samples.iter().map(|s| (s.tag, s.value)).collect::<Vec<_>>(), vec![(0, 12.5), (1, 351.2)]);
    }

    /// The header row again mid-file is known by its timestamp field holding the column's
    /// name, trimmed and in any case; a timestamp (or anything else) is a row.
    #[test]
    fn a_header_row_again_is_recognised_in_any_case_and_padding() {
        let tags = vec!["FI-1".to_string()];
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        p.header(1, &["time".to_string(), "FI-1".to_string()]);
        for again in ["time,FI-1", " TIME ,FI-1", "\tTime,FI-1", "\u{a0}time,FI-1"] {
            let (s, r) = parse(&mut p, 1, again);
            assert!(s.is_empty(), "{again}");
            assert_eq!(r.iter().map(Reject::code).collect::<Vec<_>>(), ["header_again"], "{again:?}");
        }
        for row in ["2026-12-01T10:00:00Z,1.5", "timer,1.5", " xtime,1.5"] {
            let (_, r) = parse(&mut p, 1, row);
            assert!(r.iter().all(|r| r.code() != "header_again"), "{row:?}: {r:?}");
        }
    }

    #[test]
    fn a_wide_header_naming_a_tag_twice_makes_the_file_unusable() {
        let tags = vec!["FI-1".to_string(), "TI-2".to_string()];
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        let header: Vec<String> = ["time", "FI-1", "TI-2", "FI-1"].iter().map(|s| s.to_string()).collect();
        assert_eq!(p.header(1, &header), HeaderInfo::Unusable(Reject::DuplicateColumn("FI-1".into())));
        let (s, r) = parse(&mut p, 1, "2026-12-01T10:00:00Z,1,2,3");
        assert!(s.is_empty());
        assert_eq!(r[0].code(), "duplicate_column");
        assert!(r[0].to_string().contains("`FI-1` twice"), "{}", r[0]);
    }

    #[test]
    fn long_rows_with_quality() {
        let tags = vec!["FI-1".to_string()];
        let layout =
            Layout::Long { tag: "tag".into(), value: "value".into(), quality: Some("quality".into()) };
        let mut p = RowParser::new(&input(layout, TimestampFormat::Rfc3339, "UTC"), &tags);
        let header: Vec<String> = ["time", "tag", "value", "quality"].iter().map(|s| s.to_string()).collect();
        p.header(7, &header);
        let (s, _) = parse(&mut p, 7, "2026-12-01T10:00:00Z,FI-1,3.5,Uncertain");
        assert_eq!(s[0].quality, Quality::Uncertain);
        let (_, r) = parse(&mut p, 7, "2026-12-01T10:00:00Z,FI-9,3.5,good");
        assert_eq!(r, vec![Reject::UnknownTag("FI-9".into())]);
        let (_, r) = parse(&mut p, 7, "2026-12-01T10:00:00Z,FI-1,3.5,dubious");
        assert_eq!(r[0].code(), "bad_quality");
    }

    /// Source: IANA tz database, Europe/London: clocks go back from 02:00 BST to 01:00 GMT on
    /// 2026-10-25 and forward from 01:00 GMT to 02:00 BST on 2026-03-29.
    #[test]
    fn local_times_across_daylight_saving_changes() {
        let tags = vec!["TI-2".to_string()];
        let fmt = TimestampFormat::Local("%Y-%m-%d %H:%M".into());
        let mut p = RowParser::new(&input(Layout::Wide, fmt, "Europe/London"), &tags);
        p.header(1, &["time".to_string(), "TI-2".to_string()]);
        let times = [
            "2026-10-25 00:30",
            "2026-10-25 01:00",
            "2026-10-25 01:30",
            "2026-10-25 01:00",
            "2026-10-25 01:30",
            "2026-10-25 02:00",
        ];
        let got: Vec<i64> = times.iter().map(|t| parse(&mut p, 1, &format!("{t},1")).0[0].t_ms).collect();
        let utc = |s: &str| s.parse::<Timestamp>().unwrap().as_millisecond();
        assert_eq!(
            got,
            vec![
                utc("2026-10-24T23:30:00Z"),
                utc("2026-10-25T00:00:00Z"),
                utc("2026-10-25T00:30:00Z"),
                utc("2026-10-25T01:00:00Z"),
                utc("2026-10-25T01:30:00Z"),
                utc("2026-10-25T02:00:00Z"),
            ]
        );
        let (_, r) = parse(&mut p, 1, "2026-03-29 01:30,1");
        assert_eq!(r[0].code(), "nonexistent_local_time");
    }

    /// The header of a file sent again in the repeated hour (the tailer re-attached to the
    /// same file) does not make the next row's wall time read as the first occurrence.
    #[test]
    fn a_repeated_header_keeps_the_position_in_the_repeated_hour() {
        let tags = vec!["TI-2".to_string()];
        let fmt = TimestampFormat::Local("%Y-%m-%d %H:%M".into());
        let mut p = RowParser::new(&input(Layout::Wide, fmt, "Europe/London"), &tags);
        let header = ["time".to_string(), "TI-2".to_string()];
        p.header(1, &header);
        for t in ["2026-10-25 01:00", "2026-10-25 01:30", "2026-10-25 01:00"] {
            parse(&mut p, 1, &format!("{t},1"));
        }
        p.header(1, &header);
        let got = parse(&mut p, 1, "2026-10-25 01:30,1").0[0].t_ms;
        // Source: IANA tz database, Europe/London: BST ends at 02:00 BST = 01:00 GMT on
        // 2026-10-25, so the second 01:30 is 01:30 UTC.
        assert_eq!(got, "2026-10-25T01:30:00Z".parse::<Timestamp>().unwrap().as_millisecond());
    }

    fn strings(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| s.to_string()).collect()
    }

    /// Header names match trimmed and in any case: the default `tag`/`value` columns of a long
    /// export that writes `Tag`, `VALUE`, and the timestamp column in another case.
    #[test]
    fn header_names_match_in_any_case_and_trimmed() {
        let tags = strings(&["FI-1"]);
        let layout =
            Layout::Long { tag: "tag".into(), value: "value".into(), quality: Some("quality".into()) };
        let mut p = RowParser::new(&input(layout, TimestampFormat::Rfc3339, "UTC"), &tags);
        let info = p.header(1, &strings(&[" TIME ", "Tag", "VALUE", "Quality "]));
        assert!(matches!(info, HeaderInfo::Mapped { .. }), "{info:?}");
        let (s, r) = parse(&mut p, 1, "2026-12-01T10:00:00Z,FI-1,3.5,good");
        assert!(r.is_empty(), "{r:?}");
        assert_eq!(s.len(), 1);
        // Wide: tag columns in another case are the unit's tags.
        let tags = strings(&["FI-1", "TI-2"]);
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        let info = p.header(2, &strings(&["Time", "fi-1", " ti-2 "]));
        assert_eq!(info, HeaderInfo::Mapped { missing_tags: vec![], ignored_columns: 0 });
        // Two columns that differ only in case from the name are ambiguous.
        let info = p.header(3, &strings(&["TIME", "Time", "FI-1"]));
        assert_eq!(info, HeaderInfo::Unusable(Reject::DuplicateColumn("time".into())));
    }

    /// A long export matched by a wide unit (and the reverse) is refused as a whole, with a
    /// reason that names the layout it looks like.
    #[test]
    fn a_header_of_the_other_layout_makes_the_file_unusable() {
        let tags = strings(&["FI-1", "TI-2"]);
        let mut wide = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        let HeaderInfo::Unusable(r) = wide.header(1, &strings(&["time", "tag", "value", "quality"])) else {
            panic!("a long header was accepted by a wide unit");
        };
        assert_eq!(r.code(), "wrong_layout");
        assert!(r.to_string().contains("looks like a `long` export"), "{r}");
        let (s, rj) = parse(&mut wide, 1, "2026-12-01T10:00:00Z,FI-1,3.5,good");
        assert!(s.is_empty());
        assert_eq!(rj, vec![r]);
        // Without the timestamp column as well.
        let HeaderInfo::Unusable(r) = wide.header(2, &strings(&["Timestamp", "Tag", "Value"])) else {
            panic!()
        };
        assert!(r.to_string().contains("no column `time`") && r.to_string().contains("`long`"), "{r}");
        // A wide header naming none of the unit's tags is not used either.
        let HeaderInfo::Unusable(r) = wide.header(3, &strings(&["time", "XX-1"])) else { panic!() };
        assert_eq!(r.code(), "wrong_layout");
        let layout = Layout::Long { tag: "tag".into(), value: "value".into(), quality: None };
        let mut long = RowParser::new(&input(layout, TimestampFormat::Rfc3339, "UTC"), &tags);
        let HeaderInfo::Unusable(r) = long.header(1, &strings(&["time", "FI-1", "TI-2"])) else { panic!() };
        assert!(r.to_string().contains("`long` layout (no column `tag`)"), "{r}");
        assert!(r.to_string().contains("looks like a `wide` export"), "{r}");
        // A long header that merely lacks its value column is a missing column.
        let HeaderInfo::Unusable(r) = long.header(2, &strings(&["time", "tag", "val"])) else { panic!() };
        assert_eq!(r, Reject::MissingColumn("value".into()));
    }

    /// Empty fields are counted (once per row, naming the first) and the rest of the row used.
    #[test]
    fn empty_fields_are_reported() {
        let tags = strings(&["FI-1", "TI-2", "AI-3"]);
        let mut p = RowParser::new(&input(Layout::Wide, TimestampFormat::Rfc3339, "UTC"), &tags);
        p.header(1, &strings(&["time", "FI-1", "TI-2", "AI-3"]));
        let (s, r) = parse(&mut p, 1, "2026-12-01T10:00:00Z,1.5,,");
        assert_eq!(s.len(), 1);
        assert_eq!(r, vec![Reject::EmptyField { column: "TI-2".into(), more: 1 }]);
        assert_eq!(r[0].code(), "empty_field");
        assert!(r[0].to_string().contains("`TI-2` and 1 more"), "{}", r[0]);
        let (s, r) = parse(&mut p, 1, " ,1,2,3");
        assert!(s.is_empty());
        assert_eq!(r, vec![Reject::EmptyField { column: "time".into(), more: 0 }]);
        let layout = Layout::Long { tag: "tag".into(), value: "value".into(), quality: None };
        let mut p = RowParser::new(&input(layout, TimestampFormat::Rfc3339, "UTC"), &tags);
        p.header(2, &strings(&["time", "tag", "value"]));
        let (_, r) = parse(&mut p, 2, "2026-12-01T10:00:00Z,FI-1,");
        assert_eq!(r, vec![Reject::EmptyField { column: "FI-1".into(), more: 0 }]);
        let (_, r) = parse(&mut p, 2, "2026-12-01T10:00:00Z,,1");
        assert_eq!(r, vec![Reject::EmptyField { column: "tag".into(), more: 0 }]);
    }
}
