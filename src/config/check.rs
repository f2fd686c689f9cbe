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
    if text.trim().parse::<f64>().is_ok() {
        return Err(format!("`{}` has no unit: a duration needs a unit, e.g. 8h or 30m", text.trim()));
    }
    let bad = || format!("`{text}` is not a duration (e.g. \"60s\", \"5m\", \"1h 30m\", \"7d\")");
    let span: jiff::Span = text.trim().parse().map_err(|_| bad())?;
    // Days (and weeks) are 24 h here: durations in the configuration are elapsed times.
    let ms = span
        .total((jiff::Unit::Millisecond, jiff::SpanRelativeTo::days_are_24_hours()))
        .map_err(|_| bad())?;
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

/// Whether `text` is a zero duration such as "0s", "0m" or "0".
fn is_zero_duration(text: &str) -> bool {
    let t = text.trim();
    t == "0"
        || t.parse::<jiff::Span>().is_ok_and(|s| {
            s.total((jiff::Unit::Millisecond, jiff::SpanRelativeTo::days_are_24_hours()))
                .is_ok_and(|ms| ms == 0.0)
        })
}

/// For a value outside 0..1 that reads as a percentage (2 <= x <= 100), the fraction it likely
/// means: " (did you mean 0.85? …)".
fn percent_hint(x: f64) -> String {
    if (2.0..=100.0).contains(&x) {
        format!(" (did you mean {}? the setting is a fraction: {x} % is {})", x / 100.0, x / 100.0)
    } else {
        String::new()
    }
}

/// An interval of allowed values for [`Checker::within`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Range {
    /// 0 < x < 1.
    OpenUnit,
    /// 0 < x <= 1.
    UnitClosedAbove,
    /// 0 <= x < 1.
    UnitClosedBelow,
    /// 0 < x (finite).
    Positive,
    /// 0 <= x (finite).
    NonNegative,
}

impl Range {
    fn contains(self, x: f64) -> bool {
        x.is_finite()
            && match self {
                Range::OpenUnit => x > 0.0 && x < 1.0,
                Range::UnitClosedAbove => x > 0.0 && x <= 1.0,
                Range::UnitClosedBelow => (0.0..1.0).contains(&x),
                Range::Positive => x > 0.0,
                Range::NonNegative => x >= 0.0,
            }
    }
}

impl std::fmt::Display for Range {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Range::OpenUnit => "a fraction in (0, 1)",
            Range::UnitClosedAbove => "a fraction in (0, 1]",
            Range::UnitClosedBelow => "a fraction in [0, 1)",
            Range::Positive => "positive",
            Range::NonNegative => "zero or positive",
        })
    }
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
    /// The site's atmospheric pressure, Pa, for gauge pressures (none in the case file,
    /// which refuses them).
    atmosphere_pa: Option<f64>,
    /// Whether `mol%` and `mass%` are read: only where the caller checks them against the
    /// stream's basis (the site file); elsewhere (the case file) they are refused.
    basis_units: bool,
}

impl<'a> Checker<'a> {
    /// A checker of `src` that adds its errors to `errors`.
    pub(crate) fn new(src: &'a SourceText, errors: &'a mut Vec<LocatedError>) -> Checker<'a> {
        Checker { src, errors, atmosphere_pa: None, basis_units: false }
    }

    /// This checker, reading gauge pressures as absolute at `atmosphere_pa`.
    pub(crate) fn with_atmosphere(mut self, atmosphere_pa: f64) -> Checker<'a> {
        self.atmosphere_pa = Some(atmosphere_pa);
        self
    }

    /// This checker, reading `mol%` and `mass%` (the caller checks their basis).
    pub(crate) fn with_basis_units(mut self) -> Checker<'a> {
        self.basis_units = true;
        self
    }

    /// The atmospheric pressure gauge pressures are read at, if any.
    pub(crate) fn atmosphere(&self) -> Option<f64> {
        self.atmosphere_pa
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
        if !self.basis_units
            && let Number::Text(t) = v
            && let Some(unit) = crate::units::unit_part(t)
            && let Some(u) = crate::units::lookup(Quantity::Dimensionless, unit)
            && matches!(u.symbol, "mol%" | "mass%")
        {
            self.err(
                key,
                format!(
                    "`{}` names a basis: write the fraction or % and give the stream's `basis`",
                    t.trim()
                ),
            );
            return None;
        }
        match v.si_any_at(quantities, self.atmosphere_pa) {
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

    /// Whether `x`, a fraction of `what` (a conversion, a mole fraction), is within 0..1.
    pub(crate) fn fraction(&mut self, key: &KeyPath, what: &str, x: f64) -> bool {
        let ok = (0.0..=1.0).contains(&x);
        if !ok {
            self.err(key, format!("{what} must be within 0..1, got {x}{}", percent_hint(x)));
        }
        ok
    }

    /// `x` when it lies in `range` (a fraction-like setting such as a filter constant or an
    /// effectiveness), else an error that states the range and, for a value that looks like a
    /// percentage, the fraction meant.
    pub(crate) fn within(&mut self, key: &KeyPath, x: f64, range: Range) -> Option<f64> {
        if range.contains(x) {
            Some(x)
        } else {
            self.err(key, format!("must be {range}, got {x}{}", percent_hint(x)));
            None
        }
    }

    /// `n` when it is at least `min`, else an error.
    pub(crate) fn at_least<T: PartialOrd + std::fmt::Display>(
        &mut self,
        key: &KeyPath,
        n: T,
        min: T,
    ) -> Option<T> {
        if n >= min {
            Some(n)
        } else {
            self.err(key, format!("must be at least {min}, got {n}"));
            None
        }
    }

    /// A duration that may be zero ("0s" switches a setting off), else as [`Checker::duration`].
    pub(crate) fn duration_or_zero(&mut self, key: &KeyPath, v: Option<&String>, default_ms: i64) -> i64 {
        match v {
            Some(t) if is_zero_duration(t) => 0,
            _ => self.duration(key, v, default_ms),
        }
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
        let bare = parse_duration_ms("8").unwrap_err();
        assert!(bare.contains("a duration needs a unit, e.g. 8h or 30m"), "{bare}");
        // The parser's own wording stays inside.
        assert_eq!(
            parse_duration_ms("soon").unwrap_err(),
            "`soon` is not a duration (e.g. \"60s\", \"5m\", \"1h 30m\", \"7d\")"
        );
        assert!(parse_duration_ms("0s").is_err());
        assert!(is_zero_duration("0s") && is_zero_duration(" 0m ") && is_zero_duration("0"));
        assert!(!is_zero_duration("1s") && !is_zero_duration("soon"));
    }

    #[test]
    fn basis_units_are_read_only_where_their_basis_is_checked() {
        let src = SourceText::new("c.toml", "x = \"30 mol%\"\n");
        let (k, q) = (KeyPath::keys("x"), Quantity::Dimensionless);
        let mut errors = Vec::new();
        let mut ck = Checker::new(&src, &mut errors);
        assert_eq!(ck.number(&k, &Number::Text("30 mol%".into()), q), None);
        assert_eq!(ck.number(&k, &Number::Text("30 %".into()), q), Some(0.3));
        assert_eq!(ck.number(&k, &Number::Text("300 ppm".into()), q), Some(3e-4));
        let mut ck = Checker::new(&src, &mut errors).with_basis_units();
        assert_eq!(ck.number(&k, &Number::Text("30 mass%".into()), q), Some(0.3));
        assert_eq!(errors.len(), 1);
        assert!(errors[0].message.contains("names a basis"), "{}", errors[0]);
    }

    #[test]
    fn ranges_and_percent_hints() {
        let src = SourceText::new("s.toml", "[m]\nx = 85\n");
        let mut errors = Vec::new();
        let mut ck = Checker::new(&src, &mut errors);
        let k = KeyPath::keys("m.x");
        assert_eq!(ck.within(&k, 0.85, Range::OpenUnit), Some(0.85));
        assert_eq!(ck.within(&k, 85.0, Range::OpenUnit), None);
        assert_eq!(ck.within(&k, 1.0, Range::OpenUnit), None);
        assert_eq!(ck.within(&k, 1.0, Range::UnitClosedAbove), Some(1.0));
        assert_eq!(ck.within(&k, 0.0, Range::UnitClosedBelow), Some(0.0));
        assert_eq!(ck.within(&k, -1.0, Range::Positive), None);
        assert_eq!(ck.within(&k, f64::INFINITY, Range::NonNegative), None);
        assert_eq!(ck.at_least(&k, 0_u32, 1), None);
        assert_eq!(ck.at_least(&k, 3_u32, 1), Some(3));
        let text: Vec<String> = errors.iter().map(ToString::to_string).collect();
        assert_eq!(text.len(), 5, "{text:?}");
        assert!(
            text[0].contains("s.toml:2:5") && text[0].contains("a fraction in (0, 1), got 85"),
            "{text:?}"
        );
        assert!(text[0].contains("did you mean 0.85?") && text[0].contains("85 % is 0.85"), "{}", text[0]);
        assert!(!text[1].contains("% is"), "{}", text[1]);
        assert!(text[4].contains("must be at least 1, got 0"), "{}", text[4]);
    }
}
