//! Oracles shared by the hostile-input property tests (`tests/it/hostile.rs`, run in CI) and
//! the cargo-fuzz targets (`fuzz/fuzz_targets/`, which include this file by path): the same
//! properties are checked on stable and under the fuzzer.
#![allow(dead_code)]

use efftemp::ingest::settings::{InputConfig, Layout, TimestampFormat};
use efftemp::ingest::split::{Item, Position};
use jiff::tz::TimeZone;
use serde_json::Value;

/// An owned copy of a splitter item, for comparisons between chunkings.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Got {
    Record { start: u64, end: u64, line: u64, next: Position, fields: Vec<Vec<u8>> },
    TooLong { start: u64, end: u64, line: u64, next: Position },
    Nul { start: u64, end: u64, line: u64, next: Position },
}

impl Got {
    /// Byte span of the item.
    pub fn span(&self) -> (u64, u64) {
        match self {
            Got::Record { start, end, .. }
            | Got::TooLong { start, end, .. }
            | Got::Nul { start, end, .. } => (*start, *end),
        }
    }

    /// The resumable position after the item.
    pub fn next(&self) -> Position {
        match self {
            Got::Record { next, .. } | Got::TooLong { next, .. } | Got::Nul { next, .. } => *next,
        }
    }
}

/// Copy an item out of the splitter's buffer.
pub fn own(item: Item<'_>) -> Got {
    match item {
        Item::Record(r) => Got::Record {
            start: r.start,
            end: r.end,
            line: r.line,
            next: r.next_position(),
            fields: r.iter().map(<[u8]>::to_vec).collect(),
        },
        Item::TooLong(s) => {
            Got::TooLong { start: s.start, end: s.end, line: s.line, next: s.next_position() }
        }
        Item::NulRun(s) => Got::Nul { start: s.start, end: s.end, line: s.line, next: s.next_position() },
    }
}

/// The input section the row-parser oracles use: `Timestamp` column, `*.csv`.
pub fn input_config(
    layout: Layout,
    format: TimestampFormat,
    tz: TimeZone,
    reject_unknown: bool,
) -> InputConfig {
    InputConfig {
        directory: ".".into(),
        pattern: "*.csv".into(),
        exclude: Vec::new(),
        layout,
        timestamp_column: "Timestamp".into(),
        timestamp_format: format,
        time_zone: tz,
        reject_unknown_tags: reject_unknown,
        links_outside: false,
    }
}

/// Keys whose value may be `null` in a solved `calc` report (optional by design).
pub const OPTIONAL: &[&str] = &[
    "measured_temperature_k",
    "residual_k",
    "conversion",
    "bubble_point_k",
    "pressure_pa",
    "bubble_margin_k",
    "element_balance",
    "solver",
    "temperature_uncertainty_k",
    "uncertainty",
    "dominant_input",
];

/// The path of a `null` under a key that is not optional (serde_json writes NaN and infinities
/// as `null`, so a `null` anywhere else is a non-finite number that escaped).
pub fn stray_null(v: &Value, path: &mut Vec<String>) -> Option<String> {
    match v {
        Value::Null => {
            let key = path.last().map(String::as_str).unwrap_or("");
            (!OPTIONAL.contains(&key)).then(|| path.join("."))
        }
        Value::Array(items) => items.iter().enumerate().find_map(|(i, x)| {
            path.push(i.to_string());
            let r = stray_null(x, path);
            path.pop();
            r
        }),
        Value::Object(map) => map.iter().find_map(|(k, x)| {
            path.push(k.clone());
            let r = stray_null(x, path);
            path.pop();
            r
        }),
        _ => None,
    }
}
