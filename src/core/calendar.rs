//! Time in the plant's own calendar: RFC 3339 text of instants in a unit's time zone, local
//! dates (one conversion per day through [`DayCache`]), and the shift pattern ([`Shift`]),
//! all across daylight-saving changes.

use jiff::civil::Time;
use jiff::tz::TimeZone;
use jiff::{Timestamp, ToSpan};

/// RFC 3339 time of an instant in a zone, e.g. `2026-12-01T10:05:00+00:00`.
pub fn rfc3339(ms: i64, tz: &TimeZone) -> String {
    match Timestamp::from_millisecond(ms) {
        Ok(ts) => ts.to_zoned_datetime(tz.clone()).strftime("%Y-%m-%dT%H:%M:%S%:z").to_string(),
        Err(_) => ms.to_string(),
    }
}

/// Local calendar date (YYYY-MM-DD) of the interval that ends at `end_ms` (an interval ending
/// at midnight belongs to the day before).
pub fn day_of(end_ms: i64, tz: &TimeZone) -> String {
    match Timestamp::from_millisecond(end_ms - 1) {
        Ok(ts) => ts.to_zoned_datetime(tz.clone()).strftime("%Y-%m-%d").to_string(),
        Err(_) => "invalid-date".into(),
    }
}

/// The local date of instants, cached for the day last asked about: one time-zone conversion
/// per day instead of one per record.
#[derive(Debug, Clone, Default)]
pub struct DayCache {
    /// `[start, end)` in ms of the cached day; empty when nothing is cached.
    span: (i64, i64),
    day: String,
    /// The UTC offset (s) when it is the same all day (a 24-hour day without a transition).
    offset_s: Option<i32>,
}

impl DayCache {
    /// Local calendar date (YYYY-MM-DD) of the instant `t_ms` (ms since the epoch).
    pub fn day_at(&mut self, t_ms: i64, tz: &TimeZone) -> &str {
        if !(self.span.0 <= t_ms && t_ms < self.span.1) {
            let zoned = Timestamp::from_millisecond(t_ms).map(|ts| ts.to_zoned_datetime(tz.clone()));
            match zoned {
                Ok(z) => {
                    self.day = z.strftime("%Y-%m-%d").to_string();
                    let start = z.start_of_day().map(|d| d.timestamp().as_millisecond());
                    let end =
                        z.tomorrow().and_then(|d| d.start_of_day()).map(|d| d.timestamp().as_millisecond());
                    // Without bounds, cache nothing: every call converts again.
                    self.span = match (start, end) {
                        (Ok(a), Ok(b)) if a <= t_ms && t_ms < b => (a, b),
                        _ => (0, 0),
                    };
                    let (a, b) = self.span;
                    let last_offset = Timestamp::from_millisecond(b - 1)
                        .map(|ts| ts.to_zoned_datetime(tz.clone()).offset().seconds());
                    self.offset_s = match last_offset {
                        Ok(o) if b - a == 86_400_000 && o == z.offset().seconds() => Some(o),
                        _ => None,
                    };
                }
                Err(_) => {
                    self.day = "invalid-date".into();
                    self.span = (0, 0);
                    self.offset_s = None;
                }
            }
        }
        &self.day
    }

    /// Append the RFC 3339 time of the instant `t_ms` (whole seconds, as [`rfc3339`] writes
    /// it) to `out`, from the cached day when its offset is fixed.
    pub fn rfc3339_into(&mut self, out: &mut String, t_ms: i64, tz: &TimeZone) {
        use std::fmt::Write as _;
        self.day_at(t_ms, tz);
        let Some(offset) = self.offset_s else {
            out.push_str(&rfc3339(t_ms, tz));
            return;
        };
        let secs = (t_ms - self.span.0).div_euclid(1000);
        let (h, m, sec) = (secs / 3600, secs / 60 % 60, secs % 60);
        let sign = if offset < 0 { '-' } else { '+' };
        let (oh, om) = (offset.unsigned_abs() / 3600, offset.unsigned_abs() / 60 % 60);
        // Digits by hand (this runs for every soft-tag row); the formatter for what is not two
        // digits.
        let two = |out: &mut String, v: i64| match u8::try_from(v) {
            Ok(v) if v < 100 => {
                out.push(char::from(b'0' + v / 10));
                out.push(char::from(b'0' + v % 10));
            }
            _ => {
                let _ = write!(out, "{v:02}");
            }
        };
        out.push_str(&self.day);
        out.push('T');
        two(out, h);
        out.push(':');
        two(out, m);
        out.push(':');
        two(out, sec);
        out.push(sign);
        two(out, i64::from(oh));
        out.push(':');
        two(out, i64::from(om));
    }

    /// Local date of the interval that ends at `end_ms` (see [`day_of`]).
    pub fn day_of_interval(&mut self, end_ms: i64, tz: &TimeZone) -> &str {
        self.day_at(end_ms - 1, tz)
    }
}

/// A shift: [start, end) in ms, with a label in local time.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Shift {
    /// Start, ms.
    pub start_ms: i64,
    /// End, ms.
    pub end_ms: i64,
    /// Start of the shift before this one, ms (the same shift pattern).
    pub prev_start_ms: i64,
    /// E.g. `2026-11-20 06:00 to 14:00 (Europe/London)`.
    pub label: String,
    /// For file names, e.g. `20261120-0600`.
    pub slug: String,
}

/// Default shift starts (three 8-hour shifts).
pub const DEFAULT_SHIFTS: [&str; 3] = ["06:00", "14:00", "22:00"];

fn start_instants(day: jiff::civil::Date, starts: &[Time], tz: &TimeZone) -> Vec<i64> {
    starts
        .iter()
        .filter_map(|t| day.to_datetime(*t).to_zoned_datetime(tz.clone()).ok())
        .map(|z| z.timestamp().as_millisecond())
        .collect()
}

/// The shift containing instant `t_ms` (DST-aware: shift starts are local wall times, so a
/// night shift is 7 or 9 hours long on the nights the clocks change).
pub fn shift_containing(t_ms: i64, starts: &[Time], tz: &TimeZone) -> Option<Shift> {
    let ts = Timestamp::from_millisecond(t_ms).ok()?;
    let date = ts.to_zoned_datetime(tz.clone()).date();
    let mut all: Vec<i64> = Vec::new();
    for d in [-2i64, -1, 0, 1, 2] {
        let day = date.checked_add(d.days()).ok()?;
        all.extend(start_instants(day, starts, tz));
    }
    all.sort_unstable();
    all.dedup();
    let start = *all.iter().rev().find(|s| **s <= t_ms)?;
    let end = *all.iter().find(|s| **s > start)?;
    let prev_start = *all.iter().rev().find(|s| **s < start)?;
    let fmt = |ms: i64, f: &str| {
        Timestamp::from_millisecond(ms)
            .map(|t| t.to_zoned_datetime(tz.clone()).strftime(f).to_string())
            .unwrap_or_default()
    };
    Some(Shift {
        start_ms: start,
        end_ms: end,
        prev_start_ms: prev_start,
        label: format!(
            "{} to {} ({})",
            fmt(start, "%Y-%m-%d %H:%M"),
            fmt(end, "%H:%M"),
            tz.iana_name().unwrap_or("local time")
        ),
        slug: fmt(start, "%Y%m%d-%H%M"),
    })
}

/// The last shift that ended at or before `t_ms`.
pub fn last_completed(t_ms: i64, starts: &[Time], tz: &TimeZone) -> Option<Shift> {
    let cur = shift_containing(t_ms, starts, tz)?;
    shift_containing(cur.start_ms - 1, starts, tz)
}

/// Parse shift start times ("06:00"); the defaults when empty or invalid.
pub fn shift_starts(texts: &[String]) -> Vec<Time> {
    let parse = |s: &str| s.parse::<Time>().ok();
    let mut v: Vec<Time> = texts.iter().filter_map(|s| parse(s)).collect();
    if v.is_empty() {
        v = DEFAULT_SHIFTS.iter().filter_map(|s| parse(s)).collect();
    }
    v.sort();
    v
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn ms(s: &str) -> i64 {
        s.parse::<Timestamp>().unwrap().as_millisecond()
    }

    /// Source: IANA tz database, Europe/Berlin: clocks go forward at 02:00 on 2026-03-29 and
    /// back at 03:00 on 2026-10-25, so the 22:00-06:00 night shift lasts 7 h and 9 h.
    #[test]
    fn night_shifts_across_daylight_saving_changes() {
        let tz = TimeZone::get("Europe/Berlin").unwrap();
        let starts = shift_starts(&[]);
        let spring = shift_containing(ms("2026-03-29T01:30:00Z"), &starts, &tz).unwrap();
        assert_eq!((spring.end_ms - spring.start_ms) / 3_600_000, 7, "{spring:?}");
        let autumn = shift_containing(ms("2026-10-25T02:30:00Z"), &starts, &tz).unwrap();
        assert_eq!((autumn.end_ms - autumn.start_ms) / 3_600_000, 9, "{autumn:?}");
        let day = shift_containing(ms("2026-11-20T10:00:00Z"), &starts, &tz).unwrap();
        assert_eq!(day.label, "2026-11-20 06:00 to 14:00 (Europe/Berlin)");
        let last = last_completed(ms("2026-11-20T10:00:00Z"), &starts, &tz).unwrap();
        assert_eq!(last.end_ms, day.start_ms);
    }

    /// The previous shift follows the site's own pattern (two 12-hour shifts here), not the
    /// default three.
    #[test]
    fn the_previous_shift_uses_the_configured_pattern() {
        let tz = TimeZone::get("Europe/London").unwrap();
        let starts = shift_starts(&["07:00".into(), "19:00".into()]);
        let day = shift_containing(ms("2026-11-20T10:00:00Z"), &starts, &tz).unwrap();
        assert_eq!(day.start_ms, ms("2026-11-20T07:00:00Z"));
        assert_eq!(day.prev_start_ms, ms("2026-11-19T19:00:00Z"));
        let last = last_completed(ms("2026-11-20T10:00:00Z"), &starts, &tz).unwrap();
        assert_eq!(last.start_ms, day.prev_start_ms);
    }

    #[test]
    fn every_instant_belongs_to_exactly_one_shift() {
        let tz = TimeZone::get("Europe/London").unwrap();
        let starts = shift_starts(&["07:00".into(), "19:00".into()]);
        let mut t = ms("2026-10-24T00:00:00Z");
        while t < ms("2026-10-27T00:00:00Z") {
            let s = shift_containing(t, &starts, &tz).unwrap();
            assert!(s.start_ms <= t && t < s.end_ms);
            let next = shift_containing(s.end_ms, &starts, &tz).unwrap();
            assert_eq!(next.start_ms, s.end_ms);
            t += 17 * 60_000;
        }
    }

    #[test]
    fn days_in_the_unit_time_zone() {
        let tz = TimeZone::get("Europe/Berlin").unwrap();
        let midnight = "2026-12-01T23:00:00Z".parse::<Timestamp>().unwrap().as_millisecond();
        assert_eq!(day_of(midnight, &tz), "2026-12-01", "the interval ending at local midnight");
        assert_eq!(rfc3339(midnight, &tz), "2026-12-02T00:00:00+01:00");
    }

    /// The cached date equals the direct conversion for every 7-minute instant over the
    /// spring-forward (23 h) and fall-back (25 h) days, walked forward and then backward.
    #[test]
    fn the_day_cache_agrees_with_the_direct_conversion_across_dst() {
        let tz = TimeZone::get("Europe/Berlin").unwrap();
        let mut cache = DayCache::default();
        for (from, to) in [
            ("2026-03-27T00:00:00Z", "2026-03-31T00:00:00Z"),
            ("2026-10-23T00:00:00Z", "2026-10-27T00:00:00Z"),
        ] {
            let a = from.parse::<Timestamp>().unwrap().as_millisecond();
            let b = to.parse::<Timestamp>().unwrap().as_millisecond();
            let steps: Vec<i64> = (a..b).step_by(7 * 60_000).collect();
            for &t in steps.iter().chain(steps.iter().rev()) {
                assert_eq!(cache.day_at(t, &tz), day_of(t + 1, &tz), "{t}");
                assert_eq!(cache.day_of_interval(t, &tz), day_of(t, &tz), "{t}");
            }
        }
    }

    /// The cached RFC 3339 times equal the direct formatting: fixed-offset days, both DST days
    /// (where the cache falls back), a half-hour negative offset, UTC, and instants with
    /// milliseconds (truncated to the second, as the formatter does).
    #[test]
    fn cached_rfc3339_times_agree_with_the_formatter() {
        for zone in ["Europe/Berlin", "America/St_Johns", "UTC"] {
            let tz = TimeZone::get(zone).unwrap();
            let mut cache = DayCache::default();
            for (from, to) in [
                ("2026-03-07T00:00:00Z", "2026-03-10T00:00:00Z"),
                ("2026-03-27T00:00:00Z", "2026-03-31T00:00:00Z"),
                ("2026-10-30T00:00:00Z", "2026-11-03T00:00:00Z"),
            ] {
                let a = from.parse::<Timestamp>().unwrap().as_millisecond();
                let b = to.parse::<Timestamp>().unwrap().as_millisecond();
                for t in (a..b).step_by(7 * 60_000 + 1) {
                    let mut out = String::new();
                    cache.rfc3339_into(&mut out, t, &tz);
                    assert_eq!(out, rfc3339(t, &tz), "{zone} {t}");
                }
            }
        }
    }
}
