//! The words every stage shares: what an alert is about ([`Cause`]), how urgent it is
//! ([`Severity`]), a [`Condition`] seen in one interval, how a tag is aggregated ([`TagKind`]),
//! and one [`Sample`] of a tag with its [`Quality`].

use std::fmt;

use serde::Serialize;

/// What an alert is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Cause {
    /// Less heat reaches the process than the duty says.
    HeaterFouling,
    /// The conversion (heat of reaction) drifts.
    ConversionDrift,
    /// A measurement is wrong.
    InstrumentFault,
    /// Heat is lost to the surroundings.
    HeatLoss,
    /// Stale, bad or missing inputs.
    DataQuality,
    /// The model is used outside its validity.
    ModelValidity,
    /// A mismatch the data cannot attribute.
    Undetermined,
}

impl Cause {
    /// Every cause, in the order of the documentation.
    pub const ALL: [Cause; 7] = [
        Cause::HeaterFouling,
        Cause::ConversionDrift,
        Cause::InstrumentFault,
        Cause::HeatLoss,
        Cause::DataQuality,
        Cause::ModelValidity,
        Cause::Undetermined,
    ];

    /// The two-letter code of the cause inside alert ids (`R-204-hf-1a2b3c4d`).
    pub fn code(self) -> &'static str {
        match self {
            Cause::HeaterFouling => "hf",
            Cause::ConversionDrift => "cd",
            Cause::InstrumentFault => "if",
            Cause::HeatLoss => "hl",
            Cause::DataQuality => "dq",
            Cause::ModelValidity => "mv",
            Cause::Undetermined => "ud",
        }
    }

    /// The cause of a name used in alert events.
    pub fn from_name(name: &str) -> Option<Cause> {
        Cause::ALL.into_iter().find(|c| c.as_str() == name)
    }

    /// The name used in alert events.
    pub fn as_str(self) -> &'static str {
        match self {
            Cause::HeaterFouling => "heater_fouling",
            Cause::ConversionDrift => "conversion_drift",
            Cause::InstrumentFault => "instrument_fault",
            Cause::HeatLoss => "heat_loss",
            Cause::DataQuality => "data_quality",
            Cause::ModelValidity => "model_validity",
            Cause::Undetermined => "undetermined",
        }
    }
}

impl fmt::Display for Cause {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Alert priority (ISA-18.2 style: high, medium, low).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// Informational; no prompt action expected.
    Low,
    /// Act within the shift.
    Medium,
    /// Act promptly.
    High,
}

impl Severity {
    /// Lower-case name.
    pub fn as_str(self) -> &'static str {
        match self {
            Severity::Low => "low",
            Severity::Medium => "medium",
            Severity::High => "high",
        }
    }
}

/// A condition present in one interval; the alert lifecycle turns persistent ones into alerts.
#[derive(Debug, Clone, PartialEq, Serialize, serde::Deserialize)]
pub struct Condition {
    /// Cause.
    pub cause: Cause,
    /// What it is about (a tag, a flag code, a chart).
    pub subject: String,
    /// Priority.
    pub severity: Severity,
    /// One sentence an engineer can act on.
    pub message: String,
    /// Supporting figures.
    pub evidence: serde_json::Map<String, serde_json::Value>,
    /// Size of the deviation in the condition's own unit (for re-raise suppression).
    #[serde(default)]
    pub magnitude: Option<f64>,
}

/// How a tag's samples are aggregated over an interval.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TagKind {
    /// Time-weighted mean (sample-and-hold between samples).
    Continuous,
    /// Last value (analyzers update every few minutes).
    Analyzer,
}

/// Quality of a sample (the OPC UA status severities).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Quality {
    /// Good.
    Good,
    /// Uncertain: used, with a doubled uncertainty and a flag.
    Uncertain,
    /// Bad: not used.
    Bad,
}

/// One value of one tag at one time, in the tag's own engineering unit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sample {
    /// Index of the tag in the unit's tag table.
    pub tag: usize,
    /// Event time, ms since the Unix epoch.
    pub t_ms: i64,
    /// Value in the tag's unit.
    pub value: f64,
    /// Quality.
    pub quality: Quality,
}

/// Parse a quality word (case-insensitive; empty means good).
pub fn parse_quality(text: &str) -> Option<Quality> {
    let t = text.trim();
    if t.is_empty() || t.eq_ignore_ascii_case("good") {
        Some(Quality::Good)
    } else if t.eq_ignore_ascii_case("uncertain") {
        Some(Quality::Uncertain)
    } else if t.eq_ignore_ascii_case("bad") {
        Some(Quality::Bad)
    } else {
        None
    }
}
