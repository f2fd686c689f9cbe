//! The one checker of both configuration files (the site file and the `calc` case file): each
//! problem becomes an error located by file and key path, and checking goes on, so that every
//! problem of a file is reported at once. Values that do not check fall back to a default (or
//! `None`) so that the later checks still run.

use std::path::{Path, PathBuf};

use jiff::tz::TimeZone;

use crate::core::spec::Uncertainty;
use crate::source::{KeyPath, LocatedError, SourceText};
use crate::thermo::balance::Basis;
use crate::units::{Number, Quantity};

/// Parse a duration like "90s", "5m", "1h 30m" or "PT1M".
pub fn parse_duration_ms(text: &str) -> Result<i64, String> {
    let bad = |e: &dyn std::fmt::Display| {
        format!("`{text}` is not a duration (e.g. \"60s\", \"5m\", \"1h 30m\", \"7d\"): {e}")
    };
    let span: jiff::Span = text.trim().parse().map_err(|e| bad(&e))?;
    // Days (and weeks) are 24 h here: durations in the configuration are elapsed times.
    let ms = span
        .total((jiff::Unit::Millisecond, jiff::SpanRelativeTo::days_are_24_hours()))
        .map_err(|e| bad(&e))?;
    if !ms.is_finite() || ms.fract() != 0.0 {
        return Err(format!("duration `{text}` must be a whole number of milliseconds"));
    }
    #[allow(clippy::cast_possible_truncation)]
    let ms = ms as i128;
    if ms <= 0 {
        return Err(format!("duration `{text}` must be positive"));
    }
    i64::try_from(ms).map_err(|_| format!("duration `{text}` is too long"))
}

/// Resolve an IANA time-zone name.
pub fn parse_time_zone(name: &str) -> Result<TimeZone, String> {
    TimeZone::get(name.trim())
        .map_err(|e| format!("unknown time zone `{name}` (an IANA name like \"Europe/London\"): {e}"))
}

/// A path as written in a file: absolute, or relative to the file's directory `base`.
pub(crate) fn resolve_path(base: &Path, rel: &str) -> PathBuf {
    let p = Path::new(rel);
    if p.is_absolute() { p.to_path_buf() } else { base.join(p) }
}

/// How `"x %"` reads as the uncertainty of a dimensionless value (a fraction, a conversion).
/// For a value with a unit it is always a percentage of the value.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Percent {
    /// A percentage of the value: `"1 %"` of a conversion of 0.9 is 0.009.
    OfValue,
    /// An amount of the fraction itself: `"1 %"` is 0.01.
    Absolute,
}

/// Collects the located errors of one file (several checkers may share one list).
pub(crate) struct Checker<'a> {
    src: &'a SourceText,
    errors: &'a mut Vec<LocatedError>,
}

impl<'a> Checker<'a> {
    /// A checker of `src` that adds its errors to `errors`.
    pub(crate) fn new(src: &'a SourceText, errors: &'a mut Vec<LocatedError>) -> Checker<'a> {
        Checker { src, errors }
    }

    /// Report a problem at `key`.
    pub(crate) fn err(&mut self, key: &KeyPath, message: impl Into<String>) {
        self.errors.push(self.src.error_at(key, message));
    }

    /// Add an error located elsewhere (an unknown component of the library).
    pub(crate) fn push(&mut self, error: LocatedError) {
        self.errors.push(error);
    }

    /// Add errors located elsewhere (a component library, an included file).
    pub(crate) fn extend(&mut self, errors: impl IntoIterator<Item = LocatedError>) {
        self.errors.extend(errors);
    }

    /// How many errors have been collected so far (of every file sharing the list).
    pub(crate) fn count(&self) -> usize {
        self.errors.len()
    }

    /// A duration in ms, or `default_ms` when it is absent or does not check.
    pub(crate) fn duration(&mut self, key: &KeyPath, v: Option<&String>, default_ms: i64) -> i64 {
        match v {
            None => default_ms,
            Some(t) => parse_duration_ms(t).unwrap_or_else(|e| {
                self.err(key, e);
                default_ms
            }),
        }
    }

    /// A value of quantity `q` in SI (always finite).
    pub(crate) fn number(&mut self, key: &KeyPath, v: &Number, q: Quantity) -> Option<f64> {
        self.number_any(key, v, &[q]).map(|(x, _)| x)
    }

    /// A value of one of `quantities` (the first that matches) in SI, with its quantity.
    pub(crate) fn number_any(
        &mut self,
        key: &KeyPath,
        v: &Number,
        quantities: &[Quantity],
    ) -> Option<(f64, Quantity)> {
        match v.si_any(quantities) {
            Ok(x) => Some(x),
            Err(e) => {
                self.err(key, e.to_string());
                None
            }
        }
    }

    /// An absolute temperature, K (above absolute zero).
    pub(crate) fn temperature(&mut self, key: &KeyPath, v: &Number) -> Option<f64> {
        let t = self.number(key, v, Quantity::Temperature)?;
        if t <= 0.0 {
            let written = v.as_written();
            self.err(
                key,
                format!("temperature must be above absolute zero, got {t:.3} K (given `{written}`)"),
            );
            return None;
        }
        Some(t)
    }

    /// A positive, finite number.
    pub(crate) fn positive(&mut self, key: &KeyPath, x: f64) -> Option<f64> {
        if x > 0.0 && x.is_finite() {
            Some(x)
        } else {
            self.err(key, format!("must be positive, got {x}"));
            None
        }
    }

    /// Whether `x`, a fraction of `what` (a conversion, a mole fraction), is within 0..1.
    pub(crate) fn fraction(&mut self, key: &KeyPath, what: &str, x: f64) -> bool {
        let ok = (0.0..=1.0).contains(&x);
        if !ok {
            self.err(key, format!("{what} must be within 0..1, got {x}"));
        }
        ok
    }

    /// A range `[low, high]` of finite numbers with low < high.
    pub(crate) fn range(&mut self, key: &KeyPath, lo: f64, hi: f64) -> Option<(f64, f64)> {
        if lo < hi && lo.is_finite() && hi.is_finite() {
            Some((lo, hi))
        } else {
            self.err(key, format!("range must be [low, high] with low < high, got [{lo}, {hi}]"));
            None
        }
    }

    /// A standard uncertainty of a value of quantity `q`: `"x %"` of the value, or an absolute
    /// amount (of a temperature: a temperature difference). Never negative.
    pub(crate) fn uncertainty(
        &mut self,
        key: &KeyPath,
        v: &Number,
        q: Quantity,
        percent: Percent,
    ) -> Option<Uncertainty> {
        let q = if q == Quantity::Temperature { Quantity::TemperatureDifference } else { q };
        let relative = matches!(v, Number::Text(t) if t.trim().ends_with('%'))
            && (q != Quantity::Dimensionless || percent == Percent::OfValue);
        let u = self.number(key, v, if relative { Quantity::Dimensionless } else { q })?;
        if u < 0.0 {
            let written = v.as_written();
            self.err(key, format!("a standard uncertainty cannot be negative, got `{written}`"));
            return None;
        }
        Some(if relative { Uncertainty::Relative(u) } else { Uncertainty::Absolute(u) })
    }

    /// A composition basis: `mole` (the default; also `mol`) or `mass`, around spaces ignored.
    pub(crate) fn basis(&mut self, key: &KeyPath, v: Option<&String>) -> Basis {
        match v.map(|s| s.trim()) {
            None | Some("mole" | "mol") => Basis::Mole,
            Some("mass") => Basis::Mass,
            Some(other) => {
                self.err(key, format!("unknown basis `{other}`; use \"mole\" or \"mass\""));
                Basis::Mole
            }
        }
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn durations() {
        assert_eq!(parse_duration_ms("90s"), Ok(90_000));
        assert_eq!(parse_duration_ms("5m"), Ok(300_000));
        assert_eq!(parse_duration_ms("1h 30m"), Ok(5_400_000));
        assert!(parse_duration_ms("soon").is_err());
        assert_eq!(parse_duration_ms("7d"), Ok(7 * 86_400_000));
        assert_eq!(parse_duration_ms("2w"), Ok(14 * 86_400_000));
        assert!(parse_duration_ms("1 month").is_err());
        assert!(parse_duration_ms("0s").is_err());
    }
}
