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
//! * degF: T/K = (t/°F + 459.67) · 5/9; degR: T/K = 5/9 · T/°R.

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
    /// A pure number (mole or mass fraction, conversion); only `%` is accepted as a unit.
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
    FRACTION,
];

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
];

/// Gauge-pressure spellings that are refused with a hint (the balance needs absolute pressure).
const GAUGE: &[&str] = &["barg", "psig", "kPag", "kPa(g)", "bar(g)", "psi(g)"];

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
    /// A gauge pressure was given.
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

/// Parse `text` as a value of one of the given quantities; returns the SI value and which
/// quantity matched (the first in `quantities` whose unit table contains the unit).
pub fn parse_any(text: &str, quantities: &[Quantity]) -> Result<(f64, Quantity), UnitError> {
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
    if GAUGE.iter().any(|g| g.eq_ignore_ascii_case(unit_text)) {
        return Err(UnitError::GaugePressure { unit: unit_text.to_string() });
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
                parse_any(t, quantities)
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
