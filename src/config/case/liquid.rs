//! Refusing a given temperature at which a stream cannot be the liquid the balance assumes —
//! most often a unit slip (`temperature = 57` meant as °C is read as 57 K).
//!
//! The component data have no melting points. What they do have are the published ranges of
//! the correlations: the liquid ones (`cp_liq_range`, DIPPR-100; `psat_range`, DIPPR-101) start
//! at or near the triple point for every built-in component (shared reference
//! `components.md`: "triple point or lower limit"), and `cp_ig_range` with the critical
//! temperature bound everything the model can say from above. So:
//!
//! - a component's *liquid floor* is the lowest start of its liquid ranges, or
//!   [`SAFE_FLOOR_K`] when it has neither;
//! - a stream's floor is the lowest floor of the components in it (a mixture freezes below
//!   its components: freezing-point depression), and a temperature below it is refused;
//! - a stream's ceiling is the highest end of any correlation range, or critical temperature,
//!   of its components; above it no component can be liquid and no correlation applies, and
//!   the temperature is refused too.
//!
//! Between the two, the balance runs and the validity flags (outside a range, above Tc) say
//! what is extrapolated.

use super::Components;
use crate::config::check::Checker;
use crate::source::KeyPath;
use crate::thermo::Component;
use crate::units::Number;

/// The liquid floor of a component with no liquid range (`cp_liq_range`, `psat_range`), K:
/// below the triple point of practically every liquid a heated reactor is fed (the lowest
/// of the built-in library is 1-propanol's, 146.95 K, start of its `psat_range`; propane's
/// is about 85 K, from memory) and above it a bare °C value of a cold feed is still caught.
/// A component that is liquid lower gives its `psat_range` or `cp_liq_range`.
pub const SAFE_FLOOR_K: f64 = 100.0;

/// 0 °C in K.
const ZERO_DEGC_K: f64 = 273.15;

/// Where a component's data stop applying to a liquid, with the reason in words.
struct Limit {
    /// K.
    t: f64,
    /// e.g. "water: start of its cp_liq and psat ranges".
    why: String,
}

/// The lowest temperature at which a component's liquid data apply.
fn floor(c: &Component) -> Limit {
    let ranges = [
        ("cp_liq", c.liquid.as_ref().and_then(|l| l.cp_range)),
        ("psat", c.psat.as_ref().and_then(|p| p.range)),
    ];
    let low = ranges.iter().filter_map(|(_, r)| r.map(|r| r.0)).fold(f64::INFINITY, f64::min);
    if low.is_finite() {
        let names: Vec<&str> =
            ranges.iter().filter(|(_, r)| r.is_some_and(|r| r.0 == low)).map(|(n, _)| *n).collect();
        let s = if names.len() > 1 { "s" } else { "" };
        Limit { t: low, why: format!("{}: start of its {} range{s}", c.id, names.join(" and ")) }
    } else {
        Limit {
            t: SAFE_FLOOR_K,
            why: format!(
                "{}: no cp_liq_range or psat_range, so the floor for components without liquid ranges applies",
                c.id
            ),
        }
    }
}

/// The highest temperature any of a component's data reach.
fn ceiling(c: &Component) -> Limit {
    let ranges = [
        ("end of its cp_ig range", c.ideal_gas.as_ref().and_then(|g| g.cp_range).map(|r| r.1)),
        ("end of its cp_liq range", c.liquid.as_ref().and_then(|l| l.cp_range).map(|r| r.1)),
        ("end of its psat range", c.psat.as_ref().and_then(|p| p.range).map(|r| r.1)),
        ("its critical temperature", Some(c.tc)),
    ];
    let (what, t) = ranges
        .iter()
        .filter_map(|(w, t)| t.map(|t| (*w, t)))
        .fold(("its critical temperature", c.tc), |a, b| if b.1 > a.1 { b } else { a });
    Limit { t, why: format!("{}: {what}", c.id) }
}

/// The number of a temperature written in K (bare, or `"57 K"`), for a °C suggestion.
fn kelvin_number(v: &Number) -> Option<String> {
    match v {
        Number::Plain(x) => Some(x.to_string()),
        Number::Text(t) => {
            let n = t.trim().strip_suffix('K')?.trim();
            n.parse::<f64>().ok().map(|_| n.to_string())
        }
    }
}

/// The liquid floor of a stream made of the components with `present[i]`: (K, why); None
/// until every component is resolved, or for an empty stream.
pub(super) fn stream_floor(present: &[bool], comps: &Components) -> Option<(f64, String)> {
    if comps.resolved.len() != comps.len() {
        return None;
    }
    comps
        .resolved
        .iter()
        .zip(present)
        .filter(|(_, p)| **p)
        .map(|(c, _)| floor(c))
        .reduce(|a, b| if b.t < a.t { b } else { a })
        .map(|l| (l.t, l.why))
}

/// Refuse `t` (K, written `v` at `key`) for a liquid stream (`what`, e.g. "this feed") made of
/// the components with `present[i]`; nothing is checked until every component is resolved.
pub(super) fn check_liquid_temperature(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    v: &Number,
    t: f64,
    present: &[bool],
    comps: &Components,
    what: &str,
) {
    if comps.resolved.len() != comps.len() {
        return;
    }
    let inside: Vec<&Component> =
        comps.resolved.iter().zip(present).filter(|(_, p)| **p).map(|(c, _)| c).collect();
    let min = |a: Limit, b: Limit| if b.t < a.t { b } else { a };
    let max = |a: Limit, b: Limit| if b.t > a.t { b } else { a };
    let (Some(low), Some(high)) =
        (inside.iter().map(|c| floor(c)).reduce(min), inside.iter().map(|c| ceiling(c)).reduce(max))
    else {
        return;
    };
    let written = v.as_written();
    let given = match v {
        Number::Plain(_) => format!("given `{written}`; a bare number is in K"),
        Number::Text(_) => format!("given `{written}`"),
    };
    if t < low.t {
        // A °C slip: below 0 °C when read as K, and below a critical temperature as °C.
        let max_tc = inside.iter().map(|c| c.tc).fold(f64::NEG_INFINITY, f64::max);
        let hint = match kelvin_number(v) {
            Some(n) if t < ZERO_DEGC_K && (low.t..max_tc).contains(&(t + ZERO_DEGC_K)) => {
                format!("; did you mean \"{n} degC\"?")
            }
            _ => String::new(),
        };
        ck.err(
            key,
            format!(
                "{t:.2} K ({given}) is too cold for a liquid: the liquid data of {what} start at {:.2} K ({}); the component data have no melting points, and these ranges start at or near them{hint}",
                low.t, low.why
            ),
        );
    } else if t > high.t {
        ck.err(
            key,
            format!(
                "{t:.2} K ({given}) is above every correlation range and critical temperature of {what} (the highest is {:.2} K, {}): no component can be liquid there; check the value and its unit",
                high.t, high.why
            ),
        );
    }
}
