//! Hostile inputs on stable Rust: the property-test counterparts of the fuzz targets in
//! `fuzz/` (which need nightly and are not run in CI).
//!
//! * the CSV splitter on arbitrary bytes in arbitrary chunks: no panic, and every chunking
//!   reports exactly the items of a one-shot feed;
//! * the row parser on arbitrary field bytes: no panic, every rejection has a reason code, and a
//!   row that yields nothing is one that carries nothing (blank cells, an ignored tag);
//! * `SiteConfig::load` on TOML-ish text and on mutations of `config/example-site.toml`: no
//!   panic, and every error has a file, a line and a message;
//! * `Case::check` and `Case::run` on mutations of the shipped example cases: no panic, located
//!   errors, and a solved report has finite results and no stray `null` in its JSON.
//!
//! Case counts are modest: the whole module runs in a few seconds in a debug build.

use std::path::Path;
use std::sync::Arc;

use efftemp::config::SiteConfig;
use efftemp::config::case::Case;
use efftemp::core::vocabulary::Quality;
use efftemp::ingest::rows::{HeaderInfo, Reject, RowParser};
use efftemp::ingest::settings::{Layout, TimestampFormat};
use efftemp::ingest::split::{Position, Splitter};
use efftemp::source::{LocatedErrors, SourceText};
use jiff::tz::TimeZone;
use proptest::prelude::*;
use proptest::sample::Index;
use serde_json::Value;

use crate::oracles::{Got, input_config, own, stray_null};
use crate::util;

// ---------------------------------------------------------------------------------------------
// Splitter

fn split(input: &[u8], cuts: &[usize], max: usize) -> (Vec<Got>, Position) {
    let mut s = Splitter::new(max);
    let mut got = Vec::new();
    let mut cuts: Vec<usize> = cuts.iter().map(|&c| c.min(input.len())).collect();
    cuts.sort_unstable();
    let mut at = 0;
    for c in cuts.into_iter().chain([input.len()]) {
        s.feed(&input[at..c], &mut |it| got.push(own(it)));
        at = c;
    }
    (got, s.position())
}

/// Bytes that matter to a CSV splitter, mixed with arbitrary ones.
fn hostile_byte() -> impl Strategy<Value = u8> {
    prop_oneof![
        3 => prop::sample::select(b",\"\r\n\0\xEF\xBB\xBFa7 ".to_vec()),
        1 => any::<u8>(),
    ]
}

// ---------------------------------------------------------------------------------------------
// Row parser

const TAGS: [&str; 4] = ["FI-2011", "TI-2012", "TI-2050", "AI-2013A"];

/// A header cell: a known column name (sometimes padded), or anything.
fn header_cell() -> impl Strategy<Value = String> {
    prop_oneof![
        4 => prop::sample::select(vec!["Timestamp", "FI-2011", "TI-2012", "TI-2050", "AI-2013A", "Tag", "Value", "Quality", " TI-2050 ", "XX-9"])
            .prop_map(str::to_owned),
        1 => "\\PC{0,6}",
    ]
}

/// A data cell: timestamps, numbers, quality words, tag names, or arbitrary bytes.
fn data_cell() -> impl Strategy<Value = Vec<u8>> {
    prop_oneof![
        2 => prop::sample::select(vec![
            "2026-12-01T10:00:00Z", "2026-12-01T10:00:00+01:00", "2026-13-01T00:00:00Z", "25.10.2026 01:30:00",
            "29.03.2026 01:30:00", "38.5", "-0", "1e400", "NaN", "inf", " 12 ", "", "good", "Bad", "uncertain",
            "dubious", "FI-2011", "TI-2050", "XX-9",
        ])
        .prop_map(|s| s.as_bytes().to_vec()),
        1 => prop::collection::vec(any::<u8>(), 0..12),
        1 => prop::collection::vec(prop::sample::select(b"0123456789.-+eE:TZ ".to_vec()), 0..24),
    ]
}

/// Whether a cell carries nothing: valid UTF-8 that is blank after trimming.
fn blank(cell: &[u8]) -> bool {
    std::str::from_utf8(cell).is_ok_and(|s| s.trim().is_empty())
}

// ---------------------------------------------------------------------------------------------
// Located errors and reports

fn assert_located(errors: &LocatedErrors, text: &str) -> Result<(), TestCaseError> {
    prop_assert!(!errors.0.is_empty(), "an empty error list for\n{}", text);
    for e in &errors.0 {
        prop_assert!(!e.location.file.as_os_str().is_empty(), "no file: {}\n{}", e, text);
        prop_assert!(e.location.line_col.is_some(), "no line: {}\n{}", e, text);
        prop_assert!(!e.message.trim().is_empty(), "no message: {:?}", e);
    }
    Ok(())
}

/// A mutation of a TOML text, applied line-wise so that the result stays valid UTF-8.
#[derive(Clone, Debug)]
enum Mutation {
    DeleteLine(Index),
    DuplicateLine(Index),
    /// Replace the value after the first `=` of a line.
    ReplaceValue(Index, &'static str),
    /// Replace one number (a run of digits and dots, in a value or inside a string such as
    /// `"46.5 degC"`) with another: keeps the syntax, reaches the checks behind it.
    ReplaceNumber(Index, &'static str),
    /// Insert a line before a line.
    InsertLine(Index, &'static str),
    /// Cut the text at a character.
    Truncate(Index),
}

/// Values and lines a careless or hostile editor might write.
const VALUES: &[&str] = &[
    "0",
    "-1",
    "1e308",
    "-1e308",
    "5e-324",
    "nan",
    "inf",
    "-inf",
    "\"\"",
    "\"0 kmol/h\"",
    "\"-300 degC\"",
    "\"1e30 MW\"",
    "\"2.5 barg\"",
    "\"57 furlongs\"",
    "\"NaN K\"",
    "\"1e400 K\"",
    "\"0 K\"",
    "\"abc\"",
    "true",
    "[]",
    "[1.0]",
    "{}",
    "{ water = 1.0 }",
    "{ water = nan }",
    "{ tag = \"XX-1\" }",
    "{ value = \"6 kW\", uncertainty = \"-3 kW\" }",
    "{ tag = \"FI-2011\", unit = \"degC\" }",
    "\"Mars/Olympus\"",
    "\"0s\"",
    "\"-5m\"",
    "\"99999999999h\"",
    "4294967296",
    "-9223372036854775808",
    "\"\\u0000\"",
    "\"temperature\"",
    "\"duty\"",
    "\"conversion\"",
    "\"liquid-cp\"",
    "\"ideal-gas-watson\"",
];

const LINES: &[&str] = &[
    "[site]",
    "[service]",
    "[[unit]]",
    "[unit.input]",
    "[[unit.feed]]",
    "[unit.heater]",
    "[unit.effluent]",
    "[[unit.reaction]]",
    "[unit.monitor]",
    "[model]",
    "[[feed]]",
    "[[reaction]]",
    "[heater]",
    "[effluent]",
    "[solve]",
    "[components.water]",
    "[components.unobtainium]",
    "include = [\"other.toml\"]",
    "include = [\"missing.toml\"]",
    "include = [\"site.toml\"]",
    "libraries = [\"missing-lib.toml\"]",
    "name = \"R-204\"",
    "key = \"water\"",
    "key = \"nothing\"",
    "stoichiometry = { water = -1, methanol = 1 }",
    "stoichiometry = { water = 0 }",
    "composition = { water = 0.5, methanol = 0.5 }",
    "composition = { water = 0.0 }",
    "flow = 0",
    "flow = -1",
    "temperature = \"-500 degC\"",
    "duty = 1e300",
    "conversion = 1.5",
    "conversion = -0.5",
    "unknown = \"conversion\"",
    "tc = 1.0",
    "molar_mass = -18.0",
    "x = = 1",
    "\"unterminated",
    "[[unit]",
    "a.b.c = 1",
    "",
];

/// Numbers a careless or hostile editor might write.
const NUMBERS: &[&str] = &[
    "0", "-0", "1", "-1", "0.5", "2", "1e308", "-1e308", "1e-300", "5e-324", "nan", "inf", "-inf", "1e9",
    "273.15", "-273.15", "99999",
];

/// Mostly syntax-preserving mutations (so that most mutants reach the checks behind the parser),
/// with some that break the syntax.
fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        6 => (any::<Index>(), prop::sample::select(NUMBERS)).prop_map(|(i, v)| Mutation::ReplaceNumber(i, v)),
        3 => (any::<Index>(), prop::sample::select(VALUES)).prop_map(|(i, v)| Mutation::ReplaceValue(i, v)),
        2 => any::<Index>().prop_map(Mutation::DeleteLine),
        1 => (any::<Index>(), prop::sample::select(LINES)).prop_map(|(i, l)| Mutation::InsertLine(i, l)),
        1 => any::<Index>().prop_map(Mutation::DuplicateLine),
        1 => any::<Index>().prop_map(Mutation::Truncate),
    ]
}

/// Byte ranges of the numbers in a line: runs of digits and dots that start with a digit.
fn numbers(line: &str) -> Vec<(usize, usize)> {
    let b = line.as_bytes();
    let mut out = Vec::new();
    let mut i = 0;
    while i < b.len() {
        if b[i].is_ascii_digit() {
            let start = i;
            while i < b.len() && (b[i].is_ascii_digit() || b[i] == b'.') {
                i += 1;
            }
            out.push((start, i));
        } else {
            i += 1;
        }
    }
    out
}

fn mutate(text: &str, mutations: &[Mutation]) -> String {
    let mut lines: Vec<String> = text.lines().map(str::to_owned).collect();
    for m in mutations {
        if lines.is_empty() {
            lines.push(String::new());
        }
        match m {
            Mutation::DeleteLine(i) => {
                lines.remove(i.index(lines.len()));
            }
            Mutation::DuplicateLine(i) => {
                let k = i.index(lines.len());
                lines.insert(k, lines[k].clone());
            }
            Mutation::ReplaceValue(i, v) => {
                // The first line at or after the index that has a value.
                let n = lines.len();
                let start = i.index(n);
                if let Some(k) = (0..n).map(|d| (start + d) % n).find(|&k| lines[k].contains('=')) {
                    let key = lines[k].split('=').next().unwrap_or_default().to_owned();
                    lines[k] = format!("{key}= {v}");
                }
            }
            Mutation::ReplaceNumber(i, v) => {
                // Skip comment lines; pick among the numbers of the other lines.
                let all: Vec<(usize, usize, usize)> = lines
                    .iter()
                    .enumerate()
                    .filter(|(_, l)| !l.trim_start().starts_with('#'))
                    .flat_map(|(k, l)| numbers(l).into_iter().map(move |(a, b)| (k, a, b)))
                    .collect();
                if !all.is_empty() {
                    let (k, a, b) = all[i.index(all.len())];
                    lines[k].replace_range(a..b, v);
                }
            }
            Mutation::InsertLine(i, l) => {
                let k = i.index(lines.len() + 1);
                lines.insert(k, (*l).to_owned());
            }
            Mutation::Truncate(i) => {
                let joined = lines.join("\n");
                let chars: Vec<char> = joined.chars().collect();
                let cut: String = chars[..i.index(chars.len() + 1)].iter().collect();
                lines = cut.lines().map(str::to_owned).collect();
            }
        }
    }
    lines.join("\n") + "\n"
}

/// Load a site configuration text from a temporary directory that also holds an include.
fn load_site(text: &str) -> Result<(), TestCaseError> {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    std::fs::write(&path, text).unwrap();
    std::fs::write(
        dir.path().join("other.toml"),
        "[[unit]]\nname = \"R-9\"\n[unit.input]\ndirectory = \"x\"\npattern = \"*.csv\"\n",
    )
    .unwrap();
    match SiteConfig::load(&path) {
        Ok(cfg) => prop_assert!(!cfg.units.is_empty()),
        Err(e) => assert_located(&e, text)?,
    }
    Ok(())
}

fn example_cases() -> Vec<(String, String)> {
    let dir = util::root().join("config/examples");
    let mut v: Vec<(String, String)> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .map(|p| (p.display().to_string(), std::fs::read_to_string(&p).unwrap()))
        .collect();
    v.sort();
    v
}

/// Check and run a case text; assert the error and report properties.
fn run_case(path: &Path, text: &str) -> Result<(), TestCaseError> {
    let src = Arc::new(SourceText::new(path, text));
    let case = match Case::check(src) {
        Ok(c) => c,
        Err(e) => return assert_located(&e, text),
    };
    let report = match case.run() {
        Ok(r) => r,
        Err(e) => return assert_located(&e, text),
    };
    for (name, x) in [
        ("effluent_temperature_k", report.effluent_temperature_k),
        ("effluent_temperature_degc", report.effluent_temperature_degc),
        ("duty_w", report.duty_w),
        ("heat_loss_w", report.heat_loss_w),
        ("effluent_flow_mol_s", report.effluent_flow_mol_s),
    ] {
        prop_assert!(x.is_finite(), "{} = {} for\n{}", name, x, text);
    }
    let json = report.to_json();
    let v: Value = serde_json::from_str(&json).unwrap();
    for key in ["effluent_temperature_k", "duty_w", "effluent_flow_mol_s"] {
        prop_assert!(v[key].is_number(), "{} is {} for\n{}", key, v[key], text);
    }
    if let Some(at) = stray_null(&v, &mut Vec::new()) {
        prop_assert!(false, "non-finite number at `{}` in\n{}\nfor\n{}", at, json, text);
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 128, ..ProptestConfig::default() })]

    /// Arbitrary bytes, arbitrary chunks, a large and a tiny record limit: the items and the
    /// checkpoint never depend on the chunking, and records respect the limit.
    #[test]
    fn splitter_any_bytes_any_chunking(
        input in prop::collection::vec(hostile_byte(), 0..300),
        cuts in prop::collection::vec(any::<Index>(), 0..12),
        max in prop_oneof![Just(1usize << 20), 1usize..40],
    ) {
        let cuts: Vec<usize> = cuts.iter().map(|c| c.index(input.len() + 1)).collect();
        let (whole, pos) = split(&input, &[], max);
        let (chunked, pos2) = split(&input, &cuts, max);
        prop_assert_eq!(&chunked, &whole);
        prop_assert_eq!(pos, pos2);
        let bytewise: Vec<usize> = (1..input.len()).collect();
        prop_assert_eq!(split(&input, &bytewise, max).0, whole.clone());
        let mut last = 0;
        for g in &whole {
            let (start, end) = match g {
                Got::Record { start, end, fields, .. } => {
                    prop_assert!(end - start <= max as u64);
                    prop_assert!(!fields.is_empty());
                    (*start, *end)
                }
                Got::TooLong { start, end, .. } | Got::Nul { start, end, .. } => (*start, *end),
            };
            prop_assert!(start >= last && end > start && end <= input.len() as u64);
            last = end;
        }
        prop_assert!(pos.offset >= last && pos.offset <= input.len() as u64);
    }

    /// Arbitrary header and field bytes through the four parser set-ups.
    #[test]
    fn row_parser_rejections_have_reasons(
        header in prop::collection::vec(header_cell(), 0..7),
        rows in prop::collection::vec(prop::collection::vec(data_cell(), 0..8), 1..8),
    ) {
        let long_q = Layout::Long { tag: "Tag".into(), value: "Value".into(), quality: Some("Quality".into()) };
        let long = Layout::Long { tag: "Tag".into(), value: "Value".into(), quality: None };
        let setups = [
            (input_config(Layout::Wide, TimestampFormat::Rfc3339, TimeZone::UTC, true), true),
            (input_config(Layout::Wide, TimestampFormat::Local("%d.%m.%Y %H:%M:%S".into()), TimeZone::get("Europe/London").unwrap(), true), true),
            (input_config(long_q, TimestampFormat::Rfc3339, TimeZone::UTC, true), false),
            (input_config(long, TimestampFormat::Local("%d.%m.%Y %H:%M:%S".into()), TimeZone::get("Europe/London").unwrap(), false), false),
        ];
        let tags: Vec<String> = TAGS.iter().map(|s| s.to_string()).collect();
        let ts_col = header.iter().position(|h| h.trim() == "Timestamp");
        for (cfg, wide) in &setups {
            let mut p = RowParser::new(cfg, &tags);
            let usable = match p.header(1, &header) {
                HeaderInfo::Mapped { .. } => true,
                HeaderInfo::Unusable(r) => {
                    prop_assert!(!r.code().is_empty());
                    false
                }
            };
            for row in &rows {
                let mut samples = Vec::new();
                let mut rejects: Vec<Reject> = Vec::new();
                p.record(1, row.len(), &|i| row.get(i).map_or(&[][..], Vec::as_slice), &mut |s| samples.push(s), &mut rejects);
                for r in &rejects {
                    prop_assert!(!r.code().is_empty() && !r.to_string().is_empty());
                }
                for s in &samples {
                    prop_assert!(s.tag < TAGS.len());
                    prop_assert!(s.value.is_finite() || (!*wide && s.quality == Quality::Bad), "{:?}", s);
                }
                // Nothing out means nothing in: a usable row that yields neither a sample nor a
                // rejection carries no value (blank cells) or an ignored tag.
                if usable && samples.is_empty() && rejects.is_empty() {
                    let ts = ts_col.unwrap();
                    if *wide {
                        for (i, h) in header.iter().enumerate() {
                            if i != ts && TAGS.contains(&h.trim()) {
                                prop_assert!(blank(&row[i]), "cell {} of {:?} dropped silently", i, row);
                            }
                        }
                    } else {
                        let tag_col = header.iter().position(|h| h.trim() == "Tag").unwrap();
                        let tag = std::str::from_utf8(&row[tag_col]).unwrap().trim();
                        prop_assert!(!cfg.reject_unknown_tags && !TAGS.contains(&tag), "row {:?} dropped silently", row);
                    }
                }
            }
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 96, ..ProptestConfig::default() })]

    /// TOML-ish text built from the configuration's own vocabulary.
    #[test]
    fn site_config_tomlish_text_errors_are_located(
        lines in prop::collection::vec(
            prop_oneof![
                2 => prop::sample::select(LINES).prop_map(str::to_owned),
                3 => (
                    prop::sample::select(vec![
                        "name", "time_zone", "state_dir", "directory", "pattern", "layout", "timestamp_column",
                        "timestamp_format", "interval", "max_wait", "flow", "temperature", "duty", "heat_loss",
                        "max_record_bytes", "seal_after", "watch", "shifts", "on_delay", "block", "enthalpy",
                    ]),
                    prop::sample::select(VALUES),
                ).prop_map(|(k, v)| format!("{k} = {v}")),
                1 => "\\PC{0,20}",
            ],
            0..30,
        ),
    ) {
        load_site(&lines.join("\n"))?;
    }

    /// Mutations of the shipped example site configuration.
    #[test]
    fn site_config_mutated_example_errors_are_located(
        mutations in prop::collection::vec(mutation(), 1..5),
    ) {
        let text = std::fs::read_to_string(util::root().join("config/example-site.toml")).unwrap();
        load_site(&mutate(&text, &mutations))?;
    }

    /// Mutations of the shipped example cases: located errors, or a finite solved report.
    #[test]
    fn calc_case_mutated_examples_never_give_nan(
        which in any::<Index>(),
        mutations in prop::collection::vec(mutation(), 1..4),
    ) {
        let cases = example_cases();
        let (path, text) = &cases[which.index(cases.len())];
        run_case(Path::new(path), &mutate(text, &mutations))?;
    }
}

/// The unmutated inputs pass the same checks (so the properties above test the mutations).
#[test]
fn unmutated_examples_load_and_solve() {
    let text = std::fs::read_to_string(util::root().join("config/example-site.toml")).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("site.toml");
    std::fs::write(&path, &text).unwrap();
    SiteConfig::load(&path).unwrap_or_else(|e| panic!("{e}"));
    for (path, text) in example_cases() {
        let case = Case::check(Arc::new(SourceText::new(&path, text))).unwrap_or_else(|e| panic!("{e}"));
        let report = case.run().unwrap_or_else(|e| panic!("{path}: {e}"));
        assert!(report.effluent_temperature_k.is_finite(), "{path}");
    }
}
