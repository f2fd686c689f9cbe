//! Engineering units: parse `"57 degC"`, `"12.5 t/h"`, `"3.2 MW"` into SI values and back.
//!
//! Every input number in a case or site file is either a bare number in SI (K, mol/s, kg/s, W,
//! Pa, J/mol, g/mol) or a string `"<number> <unit>"`. A unit belongs to one [`Quantity`]; asking
//! for a quantity with a unit of another kind is an error that lists the accepted units.
//!
//! Conversions are affine: `si = value * scale + offset` (the offset is only non-zero for the
//! temperature scales). Conversion factors:
//! * calorie: International Table calorie, 4.1868 J (the engineering convention for duties);
//! * Btu: International Table Btu, 1055.05585262 J;
//! * pound: 0.45359237 kg (exact); psi: 6894.757293168361 Pa; atm: 101325 Pa (exact);
//! * degF: T/K = (t/°F + 459.67) · 5/9; degR: T/K = 5/9 · T/°R;
//! * gauge pressures (`barg`, `psig`, `kPag`, `MPag`, also written `bar(g)` …): p = p_gauge +
//!   the site's atmospheric pressure, so they are read only where one is known
//!   ([`parse_any_at`] with `Some(atmosphere)`); elsewhere they are refused with a hint;
//! * compositions: `%`, `mol%`, `mass%` (also `wt%`) are 0.01, `ppm` is 1e-6 of a fraction;
//!   `mol%` and `mass%` also name a basis, which the configuration checks against the
//!   stream's `basis`.

use std::fmt;

/// The physical kind of a number, which decides the units it may carry.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Quantity {
    /// Absolute temperature (SI: K).
    Temperature,
    /// A temperature difference, e.g. an uncertainty or a margin (SI: K).
    TemperatureDifference,
    /// Amount-of-substance flow (SI: mol/s).
    MolarFlow,
    /// Mass flow (SI: kg/s).
    MassFlow,
    /// Heat flow / duty (SI: W).
    Power,
    /// Absolute pressure (SI: Pa).
    Pressure,
    /// Molar energy, e.g. enthalpy of formation or vaporization (SI: J/mol).
    MolarEnergy,
    /// Molar mass (SI: g/mol, the customary unit; not kg/mol).
    MolarMass,
    /// A pure number (mole or mass fraction, conversion): `%`, `mol%`, `mass%`, `ppm`.
    Dimensionless,
}

impl Quantity {
    /// The SI unit in which bare numbers of this quantity are read.
    pub fn si_symbol(self) -> &'static str {
        match self {
            Quantity::Temperature | Quantity::TemperatureDifference => "K",
            Quantity::MolarFlow => "mol/s",
            Quantity::MassFlow => "kg/s",
            Quantity::Power => "W",
            Quantity::Pressure => "Pa",
            Quantity::MolarEnergy => "J/mol",
            Quantity::MolarMass => "g/mol",
            Quantity::Dimensionless => "",
        }
    }

    /// A human name for messages.
    pub fn name(self) -> &'static str {
        match self {
            Quantity::Temperature => "temperature",
            Quantity::TemperatureDifference => "temperature difference",
            Quantity::MolarFlow => "molar flow",
            Quantity::MassFlow => "mass flow",
            Quantity::Power => "heat flow",
            Quantity::Pressure => "absolute pressure",
            Quantity::MolarEnergy => "molar energy",
            Quantity::MolarMass => "molar mass",
            Quantity::Dimensionless => "fraction",
        }
    }
}

/// One accepted unit symbol.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Unit {
    /// The canonical symbol, as written in files and messages.
    pub symbol: &'static str,
    /// The quantity the unit measures.
    pub quantity: Quantity,
    /// Multiply a value in this unit by `scale` (then add `offset`) to get SI.
    scale: f64,
    offset: f64,
}

impl Unit {
    /// Convert a value in this unit to SI.
    pub fn to_si(&self, value: f64) -> f64 {
        value * self.scale + self.offset
    }

    /// Convert an SI value to this unit.
    pub fn from_si(&self, si: f64) -> f64 {
        (si - self.offset) / self.scale
    }
}

impl fmt::Display for Unit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.symbol)
    }
}

const LB: f64 = 0.45359237;
const CAL_IT: f64 = 4.1868;
const BTU_IT: f64 = 1055.05585262;
const H: f64 = 3600.0;
const MIN: f64 = 60.0;

const fn u(symbol: &'static str, quantity: Quantity, scale: f64, offset: f64) -> Unit {
    Unit { symbol, quantity, scale, offset }
}

/// Every accepted unit, canonical symbols first within each quantity.
const UNITS: &[Unit] = &[
    // temperature
    u("K", Quantity::Temperature, 1.0, 0.0),
    u("degC", Quantity::Temperature, 1.0, 273.15),
    u("degF", Quantity::Temperature, 5.0 / 9.0, 459.67 * 5.0 / 9.0),
    u("degR", Quantity::Temperature, 5.0 / 9.0, 0.0),
    // temperature difference
    u("K", Quantity::TemperatureDifference, 1.0, 0.0),
    u("degC", Quantity::TemperatureDifference, 1.0, 0.0),
    u("degF", Quantity::TemperatureDifference, 5.0 / 9.0, 0.0),
    u("degR", Quantity::TemperatureDifference, 5.0 / 9.0, 0.0),
    // molar flow
    u("mol/s", Quantity::MolarFlow, 1.0, 0.0),
    u("mol/min", Quantity::MolarFlow, 1.0 / MIN, 0.0),
    u("mol/h", Quantity::MolarFlow, 1.0 / H, 0.0),
    u("kmol/s", Quantity::MolarFlow, 1000.0, 0.0),
    u("kmol/min", Quantity::MolarFlow, 1000.0 / MIN, 0.0),
    u("kmol/h", Quantity::MolarFlow, 1000.0 / H, 0.0),
    u("lbmol/h", Quantity::MolarFlow, 1000.0 * LB / H, 0.0),
    // mass flow
    u("kg/s", Quantity::MassFlow, 1.0, 0.0),
    u("kg/min", Quantity::MassFlow, 1.0 / MIN, 0.0),
    u("kg/h", Quantity::MassFlow, 1.0 / H, 0.0),
    u("g/s", Quantity::MassFlow, 1e-3, 0.0),
    u("t/h", Quantity::MassFlow, 1000.0 / H, 0.0),
    u("t/d", Quantity::MassFlow, 1000.0 / (24.0 * H), 0.0),
    u("lb/h", Quantity::MassFlow, LB / H, 0.0),
    u("klb/h", Quantity::MassFlow, 1000.0 * LB / H, 0.0),
    // power
    u("W", Quantity::Power, 1.0, 0.0),
    u("kW", Quantity::Power, 1e3, 0.0),
    u("MW", Quantity::Power, 1e6, 0.0),
    u("J/s", Quantity::Power, 1.0, 0.0),
    u("kJ/h", Quantity::Power, 1e3 / H, 0.0),
    u("MJ/h", Quantity::Power, 1e6 / H, 0.0),
    u("GJ/h", Quantity::Power, 1e9 / H, 0.0),
    u("kcal/h", Quantity::Power, 1e3 * CAL_IT / H, 0.0),
    u("Mcal/h", Quantity::Power, 1e6 * CAL_IT / H, 0.0),
    u("Gcal/h", Quantity::Power, 1e9 * CAL_IT / H, 0.0),
    u("Btu/h", Quantity::Power, BTU_IT / H, 0.0),
    u("kBtu/h", Quantity::Power, 1e3 * BTU_IT / H, 0.0),
    u("MMBtu/h", Quantity::Power, 1e6 * BTU_IT / H, 0.0),
    // pressure (absolute)
    u("Pa", Quantity::Pressure, 1.0, 0.0),
    u("kPa", Quantity::Pressure, 1e3, 0.0),
    u("MPa", Quantity::Pressure, 1e6, 0.0),
    u("bar", Quantity::Pressure, 1e5, 0.0),
    u("mbar", Quantity::Pressure, 1e2, 0.0),
    u("atm", Quantity::Pressure, 101_325.0, 0.0),
    u("psi", Quantity::Pressure, LB * 9.80665 / (0.0254 * 0.0254), 0.0),
    u("mmHg", Quantity::Pressure, 101_325.0 / 760.0, 0.0),
    // molar energy
    u("J/mol", Quantity::MolarEnergy, 1.0, 0.0),
    u("kJ/mol", Quantity::MolarEnergy, 1e3, 0.0),
    u("kJ/kmol", Quantity::MolarEnergy, 1.0, 0.0),
    u("MJ/kmol", Quantity::MolarEnergy, 1e3, 0.0),
    // molar mass
    u("g/mol", Quantity::MolarMass, 1.0, 0.0),
    u("kg/kmol", Quantity::MolarMass, 1.0, 0.0),
    u("kg/mol", Quantity::MolarMass, 1e3, 0.0),
    // dimensionless
    u("%", Quantity::Dimensionless, 0.01, 0.0),
    u("mol%", Quantity::Dimensionless, 0.01, 0.0),
    u("mass%", Quantity::Dimensionless, 0.01, 0.0),
    u("ppm", Quantity::Dimensionless, 1e-6, 0.0),
    FRACTION,
];

/// Gauge-pressure units: their offset is the atmospheric pressure, which is a site setting, so
/// the table holds the scale only ([`gauge`] gives the unit at an atmospheric pressure).
const GAUGE_UNITS: &[Unit] = &[
    u("barg", Quantity::Pressure, 1e5, 0.0),
    u("kPag", Quantity::Pressure, 1e3, 0.0),
    u("MPag", Quantity::Pressure, 1e6, 0.0),
    u("psig", Quantity::Pressure, LB * 9.80665 / (0.0254 * 0.0254), 0.0),
];

/// Other spellings of the gauge units (matched without regard to case, like the canonical ones).
const GAUGE_ALIASES: &[(&str, &str)] =
    &[("bar(g)", "barg"), ("kPa(g)", "kPag"), ("MPa(g)", "MPag"), ("psi(g)", "psig")];

/// The canonical gauge unit that `symbol` spells (any case), if it is one.
fn gauge_unit(symbol: &str) -> Option<&'static Unit> {
    let canonical = GAUGE_ALIASES
        .iter()
        .find(|(alias, _)| alias.eq_ignore_ascii_case(symbol))
        .map_or(symbol, |(_, canonical)| canonical);
    GAUGE_UNITS.iter().find(|g| g.symbol.eq_ignore_ascii_case(canonical))
}

/// Whether `symbol` spells a gauge pressure.
pub fn is_gauge(symbol: &str) -> bool {
    gauge_unit(symbol).is_some()
}

/// A gauge-pressure unit read as absolute pressure at `atmosphere_pa`
/// (p = p_gauge · scale + atmosphere); `None` when `symbol` is not a gauge unit.
pub fn gauge(symbol: &str, atmosphere_pa: f64) -> Option<Unit> {
    gauge_unit(symbol).map(|g| Unit { offset: atmosphere_pa, ..*g })
}

/// The canonical gauge symbols (for messages).
pub fn gauge_symbols() -> Vec<&'static str> {
    GAUGE_UNITS.iter().map(|g| g.symbol).collect()
}

/// A plain fraction (0..1): the unit of analyzer tags written without `%`.
pub const FRACTION: Unit = u("fraction", Quantity::Dimensionless, 1.0, 0.0);

/// Alternative spellings accepted on input, mapped to canonical symbols.
const ALIASES: &[(&str, &str)] = &[
    ("°C", "degC"),
    ("deg C", "degC"),
    ("°F", "degF"),
    ("deg F", "degF"),
    ("°R", "degR"),
    ("kelvin", "K"),
    ("psia", "psi"),
    ("bara", "bar"),
    ("torr", "mmHg"),
    ("tonne/h", "t/h"),
    ("te/h", "t/h"),
    ("mole%", "mol%"),
    ("mol %", "mol%"),
    ("wt%", "mass%"),
    ("wt %", "mass%"),
    ("mass %", "mass%"),
];

/// Look up a unit by symbol (or alias) for a quantity.
pub fn lookup(quantity: Quantity, symbol: &str) -> Option<&'static Unit> {
    let canonical =
        ALIASES.iter().find(|(alias, _)| *alias == symbol).map_or(symbol, |(_, canonical)| canonical);
    UNITS.iter().find(|unit| unit.quantity == quantity && unit.symbol == canonical)
}

/// The canonical symbols accepted for a quantity, in table order.
pub fn accepted(quantity: Quantity) -> Vec<&'static str> {
    UNITS.iter().filter(|unit| unit.quantity == quantity).map(|unit| unit.symbol).collect()
}

/// Why a value with a unit could not be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum UnitError {
    /// The text does not start with a number.
    #[error("`{text}` is not a number with a unit (expected e.g. \"57 degC\")")]
    NotANumber {
        /// The offending text.
        text: String,
    },
    /// A number in a string without a unit.
    #[error("`{text}` has no unit: write a bare number for SI ({si}) or add a unit ({accepted})")]
    MissingUnit {
        /// The offending text.
        text: String,
        /// The SI unit of bare numbers.
        si: &'static str,
        /// Accepted units, comma-separated.
        accepted: String,
    },
    /// The unit is not known for the requested quantity.
    #[error("unknown unit `{unit}` for {quantity}; accepted: {accepted}")]
    UnknownUnit {
        /// The unit as written.
        unit: String,
        /// The quantities that were expected ("molar flow or mass flow").
        quantity: String,
        /// Accepted units, comma-separated.
        accepted: String,
    },
    /// A gauge pressure where no atmospheric pressure is known (the `calc` case file).
    #[error("`{unit}` is a gauge pressure; give the absolute pressure (e.g. \"3.0 bar\")")]
    GaugePressure {
        /// The unit as written.
        unit: String,
    },
    /// NaN or infinity.
    #[error("`{text}` is not a finite number")]
    NotFinite {
        /// The offending text.
        text: String,
    },
}

/// Split `"12.5 t/h"` into the number and the trimmed unit text (which may be empty).
fn split_number(text: &str) -> Option<(f64, &str)> {
    let text = text.trim();
    // Longest prefix that parses as a float; scanning at char boundaries keeps this simple and
    // correct for exponents ("1e5 Pa") and for units that begin with 'e' (none do today).
    let mut best = None;
    for (i, _) in text.char_indices().skip(1).chain(std::iter::once((text.len(), ' '))) {
        let head = &text[..i];
        if let Ok(v) = head.trim_end().parse::<f64>() {
            best = Some((v, text[i..].trim()));
        }
    }
    best
}

/// The unit part of `"<number> <unit>"` (trimmed; empty when there is none), or `None` when
/// the text does not start with a number.
pub fn unit_part(text: &str) -> Option<&str> {
    split_number(text).map(|(_, unit)| unit)
}

/// Parse `text` as a value of one of the given quantities; returns the SI value and which
/// quantity matched (the first in `quantities` whose unit table contains the unit). Gauge
/// pressures are refused: see [`parse_any_at`].
pub fn parse_any(text: &str, quantities: &[Quantity]) -> Result<(f64, Quantity), UnitError> {
    parse_any_at(text, quantities, None)
}

/// [`parse_any`], reading gauge pressures as absolute at `atmosphere_pa` when it is given.
pub fn parse_any_at(
    text: &str,
    quantities: &[Quantity],
    atmosphere_pa: Option<f64>,
) -> Result<(f64, Quantity), UnitError> {
    let Some((value, unit_text)) = split_number(text) else {
        return Err(UnitError::NotANumber { text: text.trim().to_string() });
    };
    if !value.is_finite() {
        return Err(UnitError::NotFinite { text: text.trim().to_string() });
    }
    let list = || {
        let symbols: Vec<&str> = quantities.iter().flat_map(|q| accepted(*q)).collect();
        let aliases: Vec<&str> = ALIASES
            .iter()
            .filter(|(_, canonical)| symbols.contains(canonical))
            .map(|(alias, _)| *alias)
            .collect();
        if aliases.is_empty() {
            symbols.join(", ")
        } else {
            format!("{} (also written {})", symbols.join(", "), aliases.join(", "))
        }
    };
    if unit_text.is_empty() {
        return Err(UnitError::MissingUnit {
            text: text.trim().to_string(),
            si: quantities.first().map_or("", |q| q.si_symbol()),
            accepted: list(),
        });
    }
    if quantities.contains(&Quantity::Pressure)
        && let Some(g) = gauge_unit(unit_text)
    {
        return match atmosphere_pa {
            Some(atm) => Ok((Unit { offset: atm, ..*g }.to_si(value), Quantity::Pressure)),
            None => Err(UnitError::GaugePressure { unit: unit_text.to_string() }),
        };
    }
    for &quantity in quantities {
        if let Some(unit) = lookup(quantity, unit_text) {
            return Ok((unit.to_si(value), quantity));
        }
    }
    Err(UnitError::UnknownUnit {
        unit: unit_text.to_string(),
        quantity: if quantities.is_empty() {
            "this value".to_string()
        } else {
            quantities.iter().map(|q| q.name()).collect::<Vec<_>>().join(" or ")
        },
        accepted: list(),
    })
}

/// Parse `text` as one quantity and return the SI value.
pub fn parse(text: &str, quantity: Quantity) -> Result<f64, UnitError> {
    parse_any(text, &[quantity]).map(|(v, _)| v)
}

/// Format an SI value in a unit with a sensible number of digits (for human output).
pub fn format_in(si: f64, unit: &Unit, decimals: usize) -> String {
    format!("{:.*} {}", decimals, unit.from_si(si), unit.symbol)
}

/// An age or a lag in ms for people: `45 s`, `12 min`, `5.2 h`, `36.1 d`.
pub fn human_age(ms: i64) -> String {
    let s = ms as f64 / 1000.0;
    if s < 120.0 {
        format!("{s:.0} s")
    } else if s < 7_200.0 {
        format!("{:.0} min", s / 60.0)
    } else if s < 172_800.0 {
        format!("{:.1} h", s / 3_600.0)
    } else {
        format!("{:.1} d", s / 86_400.0)
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1.0)
    }

    #[test]
    fn temperatures() {
        assert!(close(parse("57 degC", Quantity::Temperature).unwrap(), 330.15));
        assert!(close(parse("57degC", Quantity::Temperature).unwrap(), 330.15));
        assert!(close(parse("57 °C", Quantity::Temperature).unwrap(), 330.15));
        // Source: definition of the Fahrenheit scale (32 °F = 273.15 K, 212 °F = 373.15 K).
        assert!(close(parse("32 degF", Quantity::Temperature).unwrap(), 273.15));
        assert!(close(parse("212 degF", Quantity::Temperature).unwrap(), 373.15));
        assert!(close(parse("1.8 degF", Quantity::TemperatureDifference).unwrap(), 1.0));
    }

    #[test]
    fn flows_and_duties() {
        assert!(close(parse("3.6 kmol/h", Quantity::MolarFlow).unwrap(), 1.0));
        assert!(close(parse("3.6 t/h", Quantity::MassFlow).unwrap(), 1.0));
        assert!(close(parse("3.2 MW", Quantity::Power).unwrap(), 3.2e6));
        // Source: 1 Btu(IT) = 1055.05585262 J (ISO 31-4 / NIST SP 811 appendix B).
        assert!(close(parse("1 MMBtu/h", Quantity::Power).unwrap(), 1.05505585262e9 / 3600.0));
        // Source: 1 cal(IT) = 4.1868 J (NIST SP 811 appendix B).
        assert!(close(parse("1 Gcal/h", Quantity::Power).unwrap(), 4.1868e9 / 3600.0));
        // Source: NIST SP 811 appendix B: 1 psi = 6894.757 Pa; 1 bar = 1e5 Pa.
        assert!((parse("1 psi", Quantity::Pressure).unwrap() - 6894.757).abs() < 1e-3);
        assert!(close(parse("2.5 bar", Quantity::Pressure).unwrap(), 2.5e5));
        assert!(close(parse("1e5 Pa", Quantity::Pressure).unwrap(), 1e5));
    }

    #[test]
    fn errors_list_accepted_units() {
        let err = parse("3 furlongs", Quantity::Power).unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("unknown unit `furlongs`"), "{msg}");
        assert!(msg.contains("MMBtu/h"), "{msg}");
        assert!(matches!(parse("3 barg", Quantity::Pressure), Err(UnitError::GaugePressure { .. })));
        assert!(matches!(parse("abc", Quantity::Power), Err(UnitError::NotANumber { .. })));
        assert!(matches!(parse("12", Quantity::Power), Err(UnitError::MissingUnit { .. })));
        assert!(matches!(parse("inf W", Quantity::Power), Err(UnitError::NotFinite { .. })));
    }

    #[test]
    fn composition_units() {
        let x = |t: &str| parse(t, Quantity::Dimensionless).unwrap();
        // Source: definitions (1 % = 1e-2, 1 ppm = 1e-6 of the fraction).
        assert!(close(x("12.5 mol%"), 0.125));
        assert!(close(x("12.5 mole%"), 0.125));
        assert!(close(x("40 mass%"), 0.4));
        assert!(close(x("40 wt%"), 0.4));
        assert!(close(x("250 ppm"), 2.5e-4));
        assert_eq!(lookup(Quantity::Dimensionless, "wt%").unwrap().symbol, "mass%");
        let msg = parse("3 vol%", Quantity::Dimensionless).unwrap_err().to_string();
        assert!(msg.contains("mol%") && msg.contains("mass%") && msg.contains("ppm"), "{msg}");
    }

    #[test]
    fn gauge_pressures_need_the_atmosphere() {
        let p = Quantity::Pressure;
        // Source: NIST SP 811 appendix B (1 bar = 1e5 Pa, 1 psi = 6894.757 Pa, standard
        // atmosphere 101325 Pa); absolute = gauge + atmospheric pressure by definition.
        assert!(close(parse_any_at("2.5 barg", &[p], Some(101_325.0)).unwrap().0, 351_325.0));
        assert!(close(parse_any_at("2.5 bar(g)", &[p], Some(95_000.0)).unwrap().0, 345_000.0));
        assert!(close(parse_any_at("150 kPa(g)", &[p], Some(100_000.0)).unwrap().0, 250_000.0));
        assert!(close(parse_any_at("0 BARG", &[p], Some(98_000.0)).unwrap().0, 98_000.0));
        let psig = parse_any_at("30 psig", &[p], Some(101_325.0)).unwrap().0;
        assert!((psig - (30.0 * 6894.757 + 101_325.0)).abs() < 0.05, "{psig}");
        // Without an atmospheric pressure (the case file) they stay refused.
        assert!(matches!(parse("2.5 bar(g)", p), Err(UnitError::GaugePressure { .. })));
        let u = gauge("kPa(g)", 100_000.0).unwrap();
        assert_eq!(u.symbol, "kPag");
        assert!(close(u.to_si(50.0), 150_000.0) && close(u.from_si(150_000.0), 50.0));
        assert!(gauge("bar", 100_000.0).is_none() && is_gauge("psi(g)") && !is_gauge("psia"));
    }

    #[test]
    fn flow_picks_molar_or_mass() {
        let both = [Quantity::MolarFlow, Quantity::MassFlow];
        assert_eq!(parse_any("850 kmol/h", &both).unwrap().1, Quantity::MolarFlow);
        assert_eq!(parse_any("12.5 t/h", &both).unwrap().1, Quantity::MassFlow);
    }
}

/// A number as written in a TOML input: bare (SI) or a string with a unit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
#[serde(untagged)]
pub enum Number {
    /// A bare number, read in the quantity's SI unit.
    Plain(f64),
    /// `"<number> <unit>"`.
    Text(String),
}

impl Number {
    /// The SI value for a quantity.
    pub fn si(&self, quantity: Quantity) -> Result<f64, UnitError> {
        self.si_any(&[quantity]).map(|(v, _)| v)
    }

    /// The SI value and the matching quantity, trying each quantity in turn.
    pub fn si_any(&self, quantities: &[Quantity]) -> Result<(f64, Quantity), UnitError> {
        self.si_any_at(quantities, None)
    }

    /// [`Number::si_any`], reading gauge pressures as absolute at `atmosphere_pa` when given.
    pub fn si_any_at(
        &self,
        quantities: &[Quantity],
        atmosphere_pa: Option<f64>,
    ) -> Result<(f64, Quantity), UnitError> {
        match self {
            Number::Plain(v) if v.is_finite() => {
                Ok((*v, quantities.first().copied().unwrap_or(Quantity::Dimensionless)))
            }
            Number::Plain(v) => Err(UnitError::NotFinite { text: v.to_string() }),
            Number::Text(t) => {
                // A fraction may be written as a bare number inside a string ("0.3").
                if quantities == [Quantity::Dimensionless]
                    && let Ok(v) = t.trim().parse::<f64>()
                {
                    return if v.is_finite() {
                        Ok((v, Quantity::Dimensionless))
                    } else {
                        Err(UnitError::NotFinite { text: t.clone() })
                    };
                }
                parse_any_at(t, quantities, atmosphere_pa)
            }
        }
    }

    /// The text as written (for echoing inputs).
    pub fn as_written(&self) -> String {
        match self {
            Number::Plain(v) => v.to_string(),
            Number::Text(t) => t.trim().to_string(),
        }
    }
}

impl<'de> serde::Deserialize<'de> for Number {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl serde::de::Visitor<'_> for V {
            type Value = Number;
            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a number (SI) or a string with a unit, e.g. \"57 degC\"")
            }
            fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<Number, E> {
                Ok(Number::Plain(v))
            }
            fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<Number, E> {
                Ok(Number::Plain(v as f64))
            }
            fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<Number, E> {
                Ok(Number::Plain(v as f64))
            }
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<Number, E> {
                Ok(Number::Text(v.to_string()))
            }
        }
        d.deserialize_any(V)
    }
}
