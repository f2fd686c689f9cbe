//! Fuzz target: the row parser on arbitrary export bytes, in the wide and long layouts, with
//! RFC 3339 and local timestamps.
//!
//! The input is an export file (seeds are plain CSV): it is split into records, the first
//! record is the header, the rest are data rows given to four parsers. Properties:
//!
//! * no panic;
//! * every sample names a tag of the unit and has a finite value, except a `bad` sample of the
//!   long layout, which carries no value (NaN) by design;
//! * every rejection has a reason code and a message;
//! * a wide row yields at most one sample per column besides the timestamp, a long row at most
//!   one sample.
#![no_main]

use efftemp::ingest::settings::{Layout, TimestampFormat};
use efftemp::core::vocabulary::Quality;
use efftemp::ingest::rows::{HeaderInfo, Reject, RowParser};
use efftemp::ingest::split::{Item, Splitter};
use jiff::tz::TimeZone;
use libfuzzer_sys::fuzz_target;
use oracles::input_config;

#[path = "../../tests/shared/oracles.rs"]
mod oracles;

const TAGS: [&str; 5] = ["FI-2011", "TI-2012", "TI-2050", "AI-2013A", "JI-2040"];

fn check_reject(r: &Reject) {
    assert!(!r.code().is_empty());
    assert!(!r.to_string().is_empty());
}

fuzz_target!(|bytes: &[u8]| {
    let london = TimeZone::get("Europe/London").expect("the tz database has Europe/London");
    let long_q = Layout::Long { tag: "Tag".into(), value: "Value".into(), quality: Some("Quality".into()) };
    let long = Layout::Long { tag: "Tag".into(), value: "Value".into(), quality: None };
    let configs = [
        input_config(Layout::Wide, TimestampFormat::Rfc3339, TimeZone::UTC, true),
        input_config(Layout::Wide, TimestampFormat::Local("%d.%m.%Y %H:%M:%S".into()), london.clone(), true),
        input_config(long_q, TimestampFormat::Rfc3339, TimeZone::UTC, true),
        input_config(long, TimestampFormat::Local("%Y-%m-%d %H:%M".into()), london, false),
    ];
    let tags: Vec<String> = TAGS.iter().map(|s| s.to_string()).collect();
    let mut parsers: Vec<RowParser> = configs.iter().map(|c| RowParser::new(c, &tags)).collect();
    let wide = [true, true, false, false];

    let mut header: Option<Vec<String>> = None;
    let mut splitter = Splitter::new(1 << 16);
    splitter.feed(bytes, &mut |item| {
        let Item::Record(record) = item else { return };
        let Some(h) = header.as_ref() else {
            let fields: Vec<String> =
                record.iter().map(|f| String::from_utf8_lossy(f).into_owned()).collect();
            for p in parsers.iter_mut() {
                match p.header(1, &fields) {
                    HeaderInfo::Mapped { missing_tags, ignored_columns } => {
                        assert!(missing_tags.len() <= TAGS.len());
                        assert!(ignored_columns <= fields.len());
                    }
                    HeaderInfo::Unusable(r) => check_reject(&r),
                }
            }
            header = Some(fields);
            return;
        };
        for (k, p) in parsers.iter_mut().enumerate() {
            // The file with the header, and a file whose header was never seen.
            for file in [1u64, 2] {
                let mut samples = Vec::new();
                let mut rejects = Vec::new();
                p.record(file, record.len(), &|i| record.field(i), &mut |s| samples.push(s), &mut rejects);
                for s in &samples {
                    assert!(s.tag < TAGS.len());
                    assert!(s.value.is_finite() || (!wide[k] && s.quality == Quality::Bad), "{s:?}");
                }
                if wide[k] {
                    assert!(samples.len() < h.len());
                } else {
                    assert!(samples.len() <= 1);
                }
                if file == 2 {
                    assert!(samples.is_empty() && !rejects.is_empty());
                }
                rejects.iter().for_each(check_reject);
            }
        }
    });
});
