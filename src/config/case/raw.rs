//! Stage one of the `calc` case file: a serde mirror of the TOML as written
//! (`deny_unknown_fields`), checked by [`super::Case::check`].

use indexmap::IndexMap;
use serde::Deserialize;

use crate::thermo::component::ComponentSpec;
use crate::units::Number;

/// `[model]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawModel {
    /// `auto` | `ideal-gas-watson` | `liquid-cp`.
    pub enthalpy: Option<String>,
    /// Per-component path, overriding `enthalpy`.
    #[serde(default)]
    pub component_enthalpy: IndexMap<String, String>,
    /// Watson exponent for components that do not set their own.
    pub watson_n: Option<f64>,
    /// Reactor pressure (absolute) for the bubble-point check.
    pub pressure: Option<Number>,
    /// Warn when the effluent is within this temperature difference of its bubble point.
    pub bubble_margin: Option<Number>,
    /// Extra component library files (relative to the case file).
    #[serde(default)]
    pub libraries: Vec<String>,
    /// Search range for the effluent temperature.
    pub temperature_range: Option<[Number; 2]>,
}

/// A composition uncertainty: one value for every component, or one per component.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum RawCompositionU {
    /// The same absolute uncertainty for each fraction.
    All(Number),
    /// Per component.
    Each(IndexMap<String, Number>),
}

/// `[[feed]]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFeed {
    /// Label.
    pub name: Option<String>,
    /// Total flow: mol/s, or a string with a molar or mass flow unit.
    pub flow: Option<Number>,
    /// Temperature.
    pub temperature: Option<Number>,
    /// Fractions by component id.
    #[serde(default)]
    pub composition: IndexMap<String, Number>,
    /// `mole` (default) or `mass`.
    pub basis: Option<String>,
    /// Rescale fractions that do not sum to 1.
    #[serde(default)]
    pub normalize: bool,
    /// Standard uncertainty of the flow (`"1 %"` or a flow).
    pub flow_uncertainty: Option<Number>,
    /// Standard uncertainty of the temperature (a temperature difference).
    pub temperature_uncertainty: Option<Number>,
    /// Standard uncertainty of the fractions (absolute; `"0.5 %"` = 0.005).
    pub composition_uncertainty: Option<RawCompositionU>,
}

/// `[[reaction]]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawReaction {
    /// Label.
    pub name: Option<String>,
    /// Coefficients by component id (negative for reactants).
    #[serde(default)]
    pub stoichiometry: IndexMap<String, f64>,
    /// Key component (a reactant).
    pub key: Option<String>,
    /// Key conversion, 0..1 (absent when solving for it).
    pub conversion: Option<Number>,
    /// Standard uncertainty of the conversion (absolute).
    pub conversion_uncertainty: Option<Number>,
}

/// `[effluent]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawEffluent {
    /// Measured composition (instead of reactions).
    pub composition: Option<IndexMap<String, Number>>,
    /// `mole` (default) or `mass`.
    pub basis: Option<String>,
    /// Rescale fractions that do not sum to 1.
    #[serde(default)]
    pub normalize: bool,
    /// Measured effluent temperature.
    pub temperature: Option<Number>,
    /// Its standard uncertainty.
    pub temperature_uncertainty: Option<Number>,
    /// Standard uncertainty of the measured fractions.
    pub composition_uncertainty: Option<RawCompositionU>,
}

/// `[heater]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawHeater {
    /// Duty into the process.
    pub duty: Option<Number>,
    /// Heat loss.
    pub heat_loss: Option<Number>,
    /// Standard uncertainty of the duty (`"2 %"` or a heat flow).
    pub duty_uncertainty: Option<Number>,
    /// Standard uncertainty of the heat loss.
    pub heat_loss_uncertainty: Option<Number>,
}

/// `[solve]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSolve {
    /// `temperature` (default) | `duty` | `conversion`.
    pub unknown: Option<String>,
}

/// The case file as written.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCase {
    /// Inline components (new, or overriding library fields).
    #[serde(default)]
    pub components: IndexMap<String, ComponentSpec>,
    /// Model settings.
    #[serde(default)]
    pub model: RawModel,
    /// Feeds.
    #[serde(default)]
    pub feed: Vec<RawFeed>,
    /// Reactions.
    #[serde(default)]
    pub reaction: Vec<RawReaction>,
    /// Effluent.
    pub effluent: Option<RawEffluent>,
    /// Heater.
    pub heater: Option<RawHeater>,
    /// What to solve for.
    #[serde(default)]
    pub solve: RawSolve,
}
