//! The steady enthalpy balance over reactor plus heater, and its inversions.
//!
//! ```text
//! Σ_out ṅ_i H_i(T_out) = Σ_feeds Σ_i ṅ_i H_i(T_feed) + Q_heater − Q_loss
//! ```
//!
//! Reaction heat needs no separate term: it is in the formation enthalpies. The balance is
//! solved for the effluent temperature (Newton on the analytic derivative, Brent fallback), for
//! the duty (closed form) or for one reaction's key conversion (closed form: the balance is
//! linear in the extent at a fixed temperature).
//!
//! [`System`] holds the compiled component set; [`Inputs`] the measured or given quantities;
//! [`System::solve`] returns an [`Outcome`] with validity [`Flag`]s. Nothing here does I/O.

use std::fmt;
use std::sync::Arc;

use super::component::{Component, DEFAULT_WATSON_N};
use super::enthalpy::{EnthalpyPath, PureEnthalpy, T_REF};
use super::solver::{Method, RootError, Tolerance, newton_brent};
use super::vapor::{BubbleMemo, PsatModel};

/// How a component's enthalpy path is chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PathChoice {
    /// Liquid Cp where the component has liquid data, else ideal gas + Watson.
    Auto,
    /// Force one path (an error if the component lacks its data).
    Force(EnthalpyPath),
}

impl PathChoice {
    /// Parse `auto`, `ideal-gas-watson` or `liquid-cp`.
    pub fn parse(text: &str) -> Option<PathChoice> {
        match text.trim() {
            "auto" => Some(PathChoice::Auto),
            "ideal-gas-watson" => Some(PathChoice::Force(EnthalpyPath::IdealGasWatson)),
            "liquid-cp" => Some(PathChoice::Force(EnthalpyPath::LiquidCp)),
            _ => None,
        }
    }
}

/// A reaction by stoichiometry, with a key component for the conversion.
#[derive(Debug, Clone, PartialEq)]
pub struct Reaction {
    /// Label for messages, e.g. "methyl-acetate + water -> acetic-acid + methanol".
    pub label: String,
    /// Stoichiometric coefficient of each system component (negative for reactants).
    pub nu: Vec<f64>,
    /// Index of the key component (ν < 0).
    pub key: usize,
}

/// Problems that make a system impossible to build.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SystemError {
    /// A forced path lacks data.
    #[error("component `{component}` has no data for the {path} path (missing: {missing})")]
    MissingPathData {
        /// Component index.
        index: usize,
        /// Component id.
        component: String,
        /// The path.
        path: &'static str,
        /// Missing fields, comma-separated.
        missing: String,
    },
    /// A component has neither complete set.
    #[error(
        "component `{component}` has data for neither enthalpy path (ideal-gas-watson needs {ig}; liquid-cp needs {liq})"
    )]
    NoPath {
        /// Component index.
        index: usize,
        /// Component id.
        component: String,
        /// Missing ideal-gas fields.
        ig: String,
        /// Missing liquid fields.
        liq: String,
    },
    /// A reaction's key component is not consumed.
    #[error("reaction {}: key component `{component}` must be a reactant (negative coefficient)", .reaction + 1)]
    KeyNotReactant {
        /// Reaction index (0-based).
        reaction: usize,
        /// Key id.
        component: String,
    },
    /// A reaction does not conserve elements.
    #[error("reaction {} does not conserve elements ({detail})", .reaction + 1)]
    Unbalanced {
        /// Reaction index (0-based).
        reaction: usize,
        /// Per-element net change.
        detail: String,
    },
}

/// Compiled component set: data, chosen paths and enthalpy functions, and reactions.
#[derive(Debug, Clone)]
pub struct System {
    /// Components, in the case's order.
    pub components: Vec<Component>,
    /// Path per component.
    pub paths: Vec<EnthalpyPath>,
    /// Compiled liquid enthalpy per component.
    pub models: Vec<PureEnthalpy>,
    /// Vapour-pressure model per component, where data exist.
    pub psat: Vec<Option<PsatModel>>,
    /// `psat` with a placeholder where data are missing (for the bubble point, which is only
    /// computed when every present component has data).
    psat_filled: Vec<PsatModel>,
    /// Heat of reaction per mol of key converted at 298.15 K, per reaction, J/mol.
    hr_ref: Vec<f64>,
    /// Reactions.
    pub reactions: Vec<Reaction>,
    /// Search range for the effluent temperature, K.
    pub bounds: (f64, f64),
    /// Element symbols of the components' formulas, in order of first appearance.
    elements: Vec<Arc<str>>,
    /// Atoms of element `j` per molecule of component `i`, `atoms[i][j]`; `None` for a
    /// component without a formula.
    atoms: Vec<Option<Vec<f64>>>,
}

/// Components whose scratch flows the per-interval inversions keep on the stack.
const HELD: usize = 16;

/// Default search range for the effluent temperature, K.
pub const DEFAULT_BOUNDS: (f64, f64) = (200.0, 1000.0);

impl System {
    /// Compile a system. `choices[i]` selects component i's path; `watson_n` is the exponent
    /// for components that do not set their own (default 0.38).
    pub fn new(
        components: Vec<Component>,
        choices: &[PathChoice],
        watson_n: Option<f64>,
        reactions: Vec<Reaction>,
        bounds: (f64, f64),
    ) -> Result<System, SystemError> {
        let mut paths = Vec::with_capacity(components.len());
        let mut models = Vec::with_capacity(components.len());
        for (i, c) in components.iter().enumerate() {
            let choice = choices.get(i).copied().unwrap_or(PathChoice::Auto);
            let path = match choice {
                PathChoice::Force(p) => p,
                PathChoice::Auto if c.liquid.is_some() => EnthalpyPath::LiquidCp,
                PathChoice::Auto if c.ideal_gas.is_some() => EnthalpyPath::IdealGasWatson,
                PathChoice::Auto => {
                    return Err(SystemError::NoPath {
                        index: i,
                        component: c.id.clone(),
                        ig: c.ideal_gas_missing.join(", "),
                        liq: c.liquid_missing.join(", "),
                    });
                }
            };
            let model = match path {
                EnthalpyPath::LiquidCp => c.liquid.as_ref().map(PureEnthalpy::liquid),
                EnthalpyPath::IdealGasWatson => c.ideal_gas.as_ref().map(|d| {
                    let n = d.watson_n.or(watson_n).unwrap_or(DEFAULT_WATSON_N);
                    PureEnthalpy::ideal_gas_watson(d, c.tc, n)
                }),
            };
            let Some(model) = model else {
                let missing = match path {
                    EnthalpyPath::LiquidCp => &c.liquid_missing,
                    EnthalpyPath::IdealGasWatson => &c.ideal_gas_missing,
                };
                return Err(SystemError::MissingPathData {
                    index: i,
                    component: c.id.clone(),
                    path: path.as_str(),
                    missing: missing.join(", "),
                });
            };
            paths.push(path);
            models.push(model);
        }
        let mut elements: Vec<String> = Vec::new();
        for f in components.iter().filter_map(|c| c.formula.as_ref()) {
            for (el, _) in &f.0 {
                if !elements.contains(el) {
                    elements.push(el.clone());
                }
            }
        }
        let elements: Vec<Arc<str>> = elements.into_iter().map(Arc::from).collect();
        let atoms: Vec<Option<Vec<f64>>> = components
            .iter()
            .map(|c| {
                c.formula.as_ref().map(|f| {
                    elements
                        .iter()
                        .map(|el| f.0.iter().filter(|(e, _)| e.as_str() == &**el).map(|(_, k)| k).sum())
                        .collect()
                })
            })
            .collect();
        for (r, reaction) in reactions.iter().enumerate() {
            if reaction.nu.get(reaction.key).copied().unwrap_or(0.0) >= 0.0 {
                return Err(SystemError::KeyNotReactant {
                    reaction: r,
                    component: components.get(reaction.key).map(|c| c.id.clone()).unwrap_or_default(),
                });
            }
            // Element conservation, when every participant has a formula.
            let participants = || (0..components.len()).filter(|&i| reaction.nu[i] != 0.0);
            if participants().all(|i| atoms[i].is_some()) {
                let bad: Vec<String> = elements
                    .iter()
                    .enumerate()
                    .map(|(j, el)| {
                        let net: f64 = participants()
                            .map(|i| reaction.nu[i] * atoms[i].as_ref().map_or(0.0, |a: &Vec<f64>| a[j]))
                            .sum();
                        (el, net)
                    })
                    .filter(|(_, net)| net.abs() > 1e-9)
                    .map(|(el, net)| format!("{el} {net:+}"))
                    .collect();
                if !bad.is_empty() {
                    return Err(SystemError::Unbalanced { reaction: r, detail: bad.join(", ") });
                }
            }
        }
        let psat: Vec<Option<PsatModel>> = components.iter().map(PsatModel::for_component).collect();
        let psat_filled = psat.iter().map(|m| m.unwrap_or(PsatModel::Dippr101([0.0; 5]))).collect();
        let mut system = System {
            components,
            paths,
            models,
            psat,
            psat_filled,
            hr_ref: Vec::new(),
            reactions,
            bounds,
            elements,
            atoms,
        };
        system.hr_ref = (0..system.reactions.len()).map(|r| system.heat_of_reaction(r, T_REF)).collect();
        Ok(system)
    }

    /// Number of components.
    pub fn len(&self) -> usize {
        self.components.len()
    }

    /// Whether the system has no components.
    pub fn is_empty(&self) -> bool {
        self.components.is_empty()
    }

    /// Total enthalpy flow (W) of component flows (mol/s) at T.
    #[inline]
    pub fn stream_h(&self, flows: &[f64], t: f64) -> f64 {
        self.stream_h_cp(flows, t).0
    }

    /// Total enthalpy flow (W) and heat-capacity flow (W/K) at T.
    #[inline]
    pub fn stream_h_cp(&self, flows: &[f64], t: f64) -> (f64, f64) {
        let (mut h, mut c) = (0.0, 0.0);
        for (m, &n) in self.models.iter().zip(flows) {
            if n != 0.0 {
                let (hi, ci) = m.h_cp(t);
                h += n * hi;
                c += n * ci;
            }
        }
        (h, c)
    }

    /// Solve `H_out(T) = target` for T (the hot path: no allocation).
    pub fn solve_temperature(
        &self,
        out_flows: &[f64],
        target: f64,
        guess: f64,
    ) -> Result<(f64, Method), SolveError> {
        self.solve_temperature_from(out_flows, target, guess, None)
    }

    /// [`System::solve_temperature`] with the components' enthalpies at one temperature already
    /// known (`known`, the guess when it is a feed's temperature): the iteration uses them
    /// where it evaluates at that temperature (the same numbers, one evaluation less).
    fn solve_temperature_from(
        &self,
        out_flows: &[f64],
        target: f64,
        guess: f64,
        known: Option<&Enthalpies>,
    ) -> Result<(f64, Method), SolveError> {
        let (lo, hi) = self.bounds;
        // Residual tolerance: the enthalpy change of 1e-10 K, at least.
        let tol = Tolerance { xtol: 1e-10, ftol: 0.0, ..Tolerance::default() };
        let root = newton_brent(
            |t| {
                let (h, c) = match known {
                    Some(e) if e.t.to_bits() == t.to_bits() => e.stream_h_cp(out_flows),
                    _ => self.stream_h_cp(out_flows, t),
                };
                (h - target, c)
            },
            guess,
            lo,
            hi,
            tol,
        )
        .map_err(|e| SolveError::Temperature(e, target))?;
        Ok((root.x, root.method))
    }

    /// Heat of reaction per mol of key component converted, J/mol, at T.
    pub fn heat_of_reaction(&self, r: usize, t: f64) -> f64 {
        let reaction = &self.reactions[r];
        let per_extent = self.reaction_enthalpy(r, t);
        per_extent / -reaction.nu[reaction.key]
    }

    /// `Σ ν_i H_i(T)` for reaction r (per unit extent), J/mol.
    pub fn reaction_enthalpy(&self, r: usize, t: f64) -> f64 {
        self.reactions[r]
            .nu
            .iter()
            .zip(&self.models)
            .map(|(nu, m)| if *nu != 0.0 { nu * m.h(t) } else { 0.0 })
            .sum()
    }

    /// Mole fractions from fractions in a basis (normalized).
    pub fn mole_fractions(&self, fractions: &[f64], basis: Basis) -> Vec<f64> {
        let mut x: Vec<f64> = match basis {
            Basis::Mole => fractions.to_vec(),
            Basis::Mass => fractions.iter().zip(&self.components).map(|(w, c)| w / c.molar_mass).collect(),
        };
        let total: f64 = x.iter().sum();
        if total != 0.0 {
            for v in &mut x {
                *v /= total;
            }
        }
        x
    }

    /// Component molar flows (mol/s) of a feed.
    pub fn feed_flows(&self, feed: &FeedInput) -> Vec<f64> {
        let mut flows = self.mole_fractions(&feed.fractions, feed.basis);
        let total = match feed.flow {
            FlowValue::Molar(n) => n,
            FlowValue::Mass(m) => {
                let mw: f64 = flows.iter().zip(&self.components).map(|(x, c)| x * c.molar_mass).sum();
                if mw > 0.0 { m * 1000.0 / mw } else { 0.0 }
            }
        };
        for v in &mut flows {
            *v *= total;
        }
        flows
    }
}

/// Molar enthalpies and heat capacities of a system's components at one temperature
/// ([`System::enthalpies_at`]); sums over them are the same numbers as
/// [`System::stream_h_cp`] and [`System::reaction_enthalpy`] at that temperature.
#[derive(Debug, Clone)]
pub struct Enthalpies {
    /// The temperature, K.
    pub t: f64,
    n: usize,
    held: [(f64, f64); HELD],
    heap: Vec<(f64, f64)>,
}

impl Enthalpies {
    /// `(H_i, Cp_i)` per component.
    fn values(&self) -> &[(f64, f64)] {
        if self.heap.is_empty() { &self.held[..self.n] } else { &self.heap }
    }

    /// Total enthalpy flow (W) and heat-capacity flow (W/K) of component flows (mol/s).
    pub fn stream_h_cp(&self, flows: &[f64]) -> (f64, f64) {
        let (mut h, mut c) = (0.0, 0.0);
        for (&(hi, ci), &n) in self.values().iter().zip(flows) {
            if n != 0.0 {
                h += n * hi;
                c += n * ci;
            }
        }
        (h, c)
    }

    /// `Σ ν_i H_i` per unit extent of a reaction with coefficients `nu`, J/mol.
    pub fn reaction_enthalpy(&self, nu: &[f64]) -> f64 {
        nu.iter().zip(self.values()).map(|(nu, &(h, _))| if *nu != 0.0 { nu * h } else { 0.0 }).sum()
    }
}

/// Mole or mass basis for fractions.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Basis {
    /// Mole fractions.
    Mole,
    /// Mass fractions.
    Mass,
}

/// A flow as given: molar (mol/s) or mass (kg/s).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FlowValue {
    /// mol/s.
    Molar(f64),
    /// kg/s.
    Mass(f64),
}

impl FlowValue {
    /// The number, in its own SI unit.
    pub fn value(self) -> f64 {
        match self {
            FlowValue::Molar(v) | FlowValue::Mass(v) => v,
        }
    }

    /// Same kind, new value.
    pub fn with_value(self, v: f64) -> FlowValue {
        match self {
            FlowValue::Molar(_) => FlowValue::Molar(v),
            FlowValue::Mass(_) => FlowValue::Mass(v),
        }
    }
}

/// One feed stream.
#[derive(Debug, Clone, PartialEq)]
pub struct FeedInput {
    /// Total flow.
    pub flow: FlowValue,
    /// Temperature, K.
    pub temperature: f64,
    /// Fraction of each system component (zero for absent ones).
    pub fractions: Vec<f64>,
    /// Basis of `fractions`.
    pub basis: Basis,
}

/// How the effluent's composition is known.
#[derive(Debug, Clone, PartialEq)]
pub enum Effluent {
    /// No reaction: the effluent is the mixed feed.
    Mixed,
    /// Reactions with a conversion per reaction (`None` for the one solved for).
    Reacted {
        /// Key conversion of each reaction.
        conversions: Vec<Option<f64>>,
    },
    /// A measured composition; the effluent flow follows from the mass balance.
    Measured {
        /// Fractions per system component.
        fractions: Vec<f64>,
        /// Basis.
        basis: Basis,
    },
}

/// Everything the balance needs besides the system.
#[derive(Debug, Clone, PartialEq)]
pub struct Inputs {
    /// Feed streams.
    pub feeds: Vec<FeedInput>,
    /// Effluent specification.
    pub effluent: Effluent,
    /// Heater duty into the process, W (`None` when solving for it).
    pub duty: Option<f64>,
    /// Heat loss, W.
    pub heat_loss: f64,
    /// Measured effluent temperature, K (required when solving for duty or conversion).
    pub effluent_temperature: Option<f64>,
    /// Reactor pressure, Pa (for the bubble-point check).
    pub pressure: Option<f64>,
    /// Warn when the effluent is within this many kelvin of its ideal bubble point.
    pub bubble_margin: f64,
}

/// What to solve for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unknown {
    /// The effluent temperature.
    Temperature,
    /// The heater duty.
    Duty,
    /// The key conversion of reaction `r` (0-based).
    Conversion(usize),
}

impl Unknown {
    /// Name used in output.
    pub fn as_str(self) -> &'static str {
        match self {
            Unknown::Temperature => "temperature",
            Unknown::Duty => "duty",
            Unknown::Conversion(_) => "conversion",
        }
    }
}

/// Why a balance could not be solved. Never NaN: every failure is one of these.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SolveError {
    /// Root finding failed (target enthalpy flow in W attached).
    #[error("no effluent temperature closes the balance: {0}")]
    Temperature(RootError, f64),
    /// A required input is missing for this unknown.
    #[error("{0}")]
    MissingInput(String),
    /// An effluent flow would be negative.
    #[error(
        "effluent flow of `{component}` would be negative ({flow:.6e} mol/s): the conversion is too high for the feed"
    )]
    NegativeFlow {
        /// Component id.
        component: String,
        /// The flow, mol/s.
        flow: f64,
    },
    /// Solving for a conversion: the conversion that closes the balance is impossible.
    #[error(
        "the conversion of reaction {} that reproduces the effluent temperature would be {conversion:.4}, which makes the effluent flow of `{component}` negative ({flow:.6e} mol/s): no conversion explains this temperature; check the effluent temperature, the duty and the feeds",
        .reaction + 1
    )]
    ImpossibleConversion {
        /// Reaction index (0-based).
        reaction: usize,
        /// The conversion that would close the balance.
        conversion: f64,
        /// Component id.
        component: String,
        /// The flow, mol/s.
        flow: f64,
    },
    /// The key component of a reaction is absent from the feed.
    #[error(
        "reaction {}: key component `{component}` is not in any feed, so a conversion is undefined",
        .reaction + 1
    )]
    NoKeyFeed {
        /// Reaction index (0-based).
        reaction: usize,
        /// Key id.
        component: String,
    },
    /// The reaction is thermally neutral at T: temperature cannot reveal its conversion.
    #[error(
        "reaction {} is thermally neutral at {t:.2} K (heat of reaction {dh:.3} J/mol): its conversion cannot be inferred from temperature",
        .reaction + 1
    )]
    ThermallyNeutral {
        /// Reaction index (0-based).
        reaction: usize,
        /// Temperature, K.
        t: f64,
        /// Heat of reaction per mol of key, J/mol.
        dh: f64,
    },
    /// No feed, or zero total flow.
    #[error("the feeds carry no material (total flow is zero)")]
    NoFlow,
    /// A non-finite input value.
    #[error("input {0} is not finite")]
    NotFinite(&'static str),
}

/// Which correlation a range flag is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Correlation {
    /// Ideal-gas Cp polynomial.
    CpIdealGas,
    /// Liquid Cp (DIPPR-100).
    CpLiquid,
    /// Vapour pressure.
    VapourPressure,
}

impl Correlation {
    fn code(self) -> &'static str {
        match self {
            Correlation::CpIdealGas => "cp_ig",
            Correlation::CpLiquid => "cp_liq",
            Correlation::VapourPressure => "psat",
        }
    }
    fn name(self) -> &'static str {
        match self {
            Correlation::CpIdealGas => "ideal-gas Cp",
            Correlation::CpLiquid => "liquid Cp",
            Correlation::VapourPressure => "vapour-pressure",
        }
    }
}

/// A validity flag: the result is computed but should be read with care.
#[derive(Debug, Clone, PartialEq)]
pub enum Flag {
    /// A component is at or above its critical temperature: it cannot be a liquid.
    AboveCritical {
        /// Component id.
        component: String,
        /// Temperature, K.
        t: f64,
        /// Critical temperature, K.
        tc: f64,
    },
    /// A correlation is evaluated outside its published range.
    OutsideRange {
        /// Component id.
        component: String,
        /// Which correlation.
        correlation: Correlation,
        /// Temperature, K.
        t: f64,
        /// Published range, K.
        range: (f64, f64),
    },
    /// The effluent is at or above its (ideal) bubble point.
    TwoPhaseRisk {
        /// Effluent temperature, K.
        t_out: f64,
        /// Bubble point, K.
        t_bubble: f64,
    },
    /// The effluent is within the margin below its ideal bubble point.
    NearBubblePoint {
        /// Effluent temperature, K.
        t_out: f64,
        /// Bubble point, K.
        t_bubble: f64,
        /// The margin, K.
        margin: f64,
    },
    /// No bubble point could be computed.
    BubblePointUnavailable {
        /// Why.
        reason: String,
    },
    /// A conversion outside 0..1.
    ConversionOutOfRange {
        /// Reaction index (0-based).
        reaction: usize,
        /// The conversion.
        value: f64,
    },
    /// Feed and effluent element flows differ (measured effluent composition).
    ElementImbalance {
        /// Element symbol.
        element: String,
        /// (out − in)/in.
        relative: f64,
    },
}

impl Flag {
    /// Short code for CSV `flags` columns, e.g. `beyond_tc:water`.
    pub fn code(&self) -> String {
        match self {
            Flag::AboveCritical { component, .. } => format!("beyond_tc:{component}"),
            Flag::OutsideRange { component, correlation, .. } => {
                format!("range_{}:{component}", correlation.code())
            }
            Flag::TwoPhaseRisk { .. } => "two_phase_risk".into(),
            Flag::NearBubblePoint { .. } => "near_bubble_point".into(),
            Flag::BubblePointUnavailable { .. } => "no_bubble_point".into(),
            Flag::ConversionOutOfRange { .. } => "conversion_out_of_range".into(),
            Flag::ElementImbalance { element, .. } => format!("element_imbalance:{element}"),
        }
    }
}

impl fmt::Display for Flag {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Flag::AboveCritical { component, t, tc } => write!(
                f,
                "{component} is at {t:.2} K, at or above its critical temperature {tc:.2} K: it cannot be a liquid, the liquid-phase balance does not apply"
            ),
            Flag::OutsideRange { component, correlation, t, range } => write!(
                f,
                "{component}: {} correlation evaluated at {t:.2} K, outside its published range {:.2}-{:.2} K (extrapolated)",
                correlation.name(),
                range.0,
                range.1
            ),
            Flag::TwoPhaseRisk { t_out, t_bubble } => write!(
                f,
                "two-phase risk: effluent at {t_out:.2} K is at or above its ideal bubble point {t_bubble:.2} K; the liquid-only balance overstates the temperature"
            ),
            Flag::NearBubblePoint { t_out, t_bubble, margin } => write!(
                f,
                "effluent at {t_out:.2} K is within {margin:.1} K of its ideal (Raoult) bubble point {t_bubble:.2} K; real mixtures that deviate positively from Raoult's law boil lower"
            ),
            Flag::BubblePointUnavailable { reason } => {
                write!(f, "bubble point not computed: {reason}")
            }
            Flag::ConversionOutOfRange { reaction, value } => write!(
                f,
                "reaction {}: conversion {value:.4} is outside 0..1; check the inputs",
                reaction + 1
            ),
            Flag::ElementImbalance { element, relative } => write!(
                f,
                "element balance: {element} differs between feed and effluent by {:.3} %",
                relative * 100.0
            ),
        }
    }
}

/// Ideal-solution bubble point of the effluent.
#[derive(Debug, Clone, PartialEq)]
pub struct BubblePoint {
    /// Temperature, K.
    pub t: f64,
    /// Pressure, Pa.
    pub pressure: f64,
    /// Vapour mole fractions at the bubble point.
    pub y: Vec<f64>,
    /// `t − T_out`, K (positive: sub-cooled).
    pub margin: f64,
}

/// Everything computed for one balance.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// What was solved for.
    pub unknown: Unknown,
    /// Effluent temperature, K.
    pub t_out: f64,
    /// Heater duty, W.
    pub duty: f64,
    /// Heat loss, W.
    pub heat_loss: f64,
    /// Key conversion per reaction.
    pub conversions: Vec<f64>,
    /// Extent per reaction, mol/s.
    pub extents: Vec<f64>,
    /// Component flows per feed, mol/s.
    pub feed_flows: Vec<Vec<f64>>,
    /// Effluent component flows, mol/s.
    pub out_flows: Vec<f64>,
    /// Total effluent flow, mol/s.
    pub out_total: f64,
    /// Effluent mass flow, kg/s.
    pub out_mass: f64,
    /// Feed enthalpy flow, W.
    pub h_in: f64,
    /// Effluent enthalpy flow, W.
    pub h_out: f64,
    /// Effluent heat-capacity flow `∂H_out/∂T`, W/K.
    pub cp_out: f64,
    /// Heat of reaction per mol of key converted at 298.15 K and at T_out, J/mol.
    pub heats_of_reaction: Vec<(f64, f64)>,
    /// Element flows in and out (mol/s of atoms), when every component has a formula.
    pub elements: Vec<(Arc<str>, f64, f64)>,
    /// Ideal bubble point, when a pressure is given and data exist.
    pub bubble: Option<BubblePoint>,
    /// Validity flags.
    pub flags: Vec<Flag>,
    /// How T_out was found (`None` when it was given).
    pub method: Option<Method>,
}

/// The sum per component of several streams' molar flows.
fn total_of(flows: &[Vec<f64>], n: usize) -> Vec<f64> {
    let mut total = vec![0.0; n];
    for stream in flows {
        for (t, f) in total.iter_mut().zip(stream) {
            *t += f;
        }
    }
    total
}

impl Outcome {
    /// Effluent mole fractions.
    pub fn out_fractions(&self) -> Vec<f64> {
        self.out_flows.iter().map(|n| if self.out_total > 0.0 { n / self.out_total } else { 0.0 }).collect()
    }
}

/// Intermediate: the material side of the balance.
#[derive(Debug, Clone)]
pub(crate) struct Streams {
    pub(crate) feed_flows: Vec<Vec<f64>>,
    pub(crate) feed_total: Vec<f64>,
    pub(crate) out_flows: Vec<f64>,
    pub(crate) extents: Vec<f64>,
    pub(crate) conversions: Vec<f64>,
}

impl System {
    /// Key-component feed flow of reaction r, mol/s.
    fn key_feed(&self, feed_total: &[f64], r: usize) -> f64 {
        feed_total[self.reactions[r].key]
    }

    /// Material balance. With `check`, negative effluent flows are errors.
    pub(crate) fn streams(&self, inputs: &Inputs, check: bool) -> Result<Streams, SolveError> {
        self.streams_with(inputs, check, None)
    }

    /// Component molar flows (mol/s) of all feeds together.
    pub fn feed_total(&self, feeds: &[FeedInput]) -> Vec<f64> {
        let flows: Vec<Vec<f64>> = feeds.iter().map(|f| self.feed_flows(f)).collect();
        total_of(&flows, self.len())
    }

    /// [`System::streams`] with reaction `r`'s conversion replaced by `x` (`replace = Some((r, x))`).
    fn streams_with(
        &self,
        inputs: &Inputs,
        check: bool,
        replace: Option<(usize, f64)>,
    ) -> Result<Streams, SolveError> {
        let feed_flows: Vec<Vec<f64>> = inputs.feeds.iter().map(|f| self.feed_flows(f)).collect();
        let feed_total = total_of(&feed_flows, self.len());
        let mut extents = vec![0.0; self.reactions.len()];
        let mut conversions = vec![0.0; self.reactions.len()];
        let out_flows = match &inputs.effluent {
            Effluent::Mixed => feed_total.clone(),
            Effluent::Reacted { conversions: given } => {
                let mut out = feed_total.clone();
                for (r, reaction) in self.reactions.iter().enumerate() {
                    let x = match replace {
                        Some((rr, x)) if rr == r => x,
                        _ => given.get(r).copied().flatten().unwrap_or(0.0),
                    };
                    let key_in = self.key_feed(&feed_total, r);
                    if check && key_in <= 0.0 && x != 0.0 {
                        return Err(SolveError::NoKeyFeed {
                            reaction: r,
                            component: self.components[reaction.key].id.clone(),
                        });
                    }
                    let xi = x * key_in / -reaction.nu[reaction.key];
                    extents[r] = xi;
                    conversions[r] = x;
                    for (o, nu) in out.iter_mut().zip(&reaction.nu) {
                        *o += nu * xi;
                    }
                }
                out
            }
            Effluent::Measured { fractions, basis } => {
                let x = self.mole_fractions(fractions, *basis);
                let mass_in: f64 =
                    feed_total.iter().zip(&self.components).map(|(n, c)| n * c.molar_mass).sum();
                let mw_out: f64 = x.iter().zip(&self.components).map(|(x, c)| x * c.molar_mass).sum();
                let total = if mw_out > 0.0 { mass_in / mw_out } else { 0.0 };
                x.iter().map(|x| x * total).collect()
            }
        };
        if check {
            let scale: f64 = feed_total.iter().map(|f| f.abs()).sum();
            if scale <= 0.0 {
                return Err(SolveError::NoFlow);
            }
            for (i, &f) in out_flows.iter().enumerate() {
                if f < -1e-12 * scale {
                    return Err(SolveError::NegativeFlow {
                        component: self.components[i].id.clone(),
                        flow: f,
                    });
                }
            }
        }
        Ok(Streams { feed_flows, feed_total, out_flows, extents, conversions })
    }

    /// Inlet enthalpy flow, W.
    fn inlet_enthalpy(&self, inputs: &Inputs, streams: &Streams) -> f64 {
        self.inlet_enthalpy_with(inputs, streams, None)
    }

    /// [`System::inlet_enthalpy`], taking the enthalpies of the feeds at the temperature of
    /// `known` from it (the same numbers as evaluating them).
    fn inlet_enthalpy_with(&self, inputs: &Inputs, streams: &Streams, known: Option<&Enthalpies>) -> f64 {
        inputs
            .feeds
            .iter()
            .zip(&streams.feed_flows)
            .map(|(f, flows)| match known {
                Some(e) if e.t.to_bits() == f.temperature.to_bits() => e.stream_h_cp(flows).0,
                _ => self.stream_h(flows, f.temperature),
            })
            .sum()
    }

    /// Where solving for the temperature starts: the flow-weighted feed temperature.
    fn temperature_guess(inputs: &Inputs, streams: &Streams) -> f64 {
        let (mut wt, mut w) = (0.0, 0.0);
        for (f, flows) in inputs.feeds.iter().zip(&streams.feed_flows) {
            let n: f64 = flows.iter().sum();
            wt += n * f.temperature;
            w += n;
        }
        if w > 0.0 { wt / w } else { T_REF }
    }

    /// The balance residual `H_out(T) − H_in − Q + Q_loss` (W) with every quantity taken from
    /// `inputs` and the unknown set to `value`. No flow checks; the uncertainty tests
    /// differentiate it numerically as the reference for the analytic partials.
    pub fn residual(&self, inputs: &Inputs, unknown: Unknown, value: f64) -> f64 {
        let t_meas = inputs.effluent_temperature.unwrap_or(f64::NAN);
        let duty = inputs.duty.unwrap_or(0.0);
        let (t, duty, replace) = match unknown {
            Unknown::Temperature => (value, duty, None),
            Unknown::Duty => (t_meas, value, None),
            Unknown::Conversion(r) => (t_meas, duty, Some((r, value))),
        };
        match self.streams_with(inputs, false, replace) {
            Ok(s) => {
                self.stream_h(&s.out_flows, t) - self.inlet_enthalpy(inputs, &s) - duty + inputs.heat_loss
            }
            Err(_) => f64::NAN,
        }
    }

    /// `∂residual/∂unknown` at the solution (analytic).
    pub fn residual_slope(&self, outcome: &Outcome) -> f64 {
        match outcome.unknown {
            Unknown::Temperature => outcome.cp_out,
            Unknown::Duty => -1.0,
            Unknown::Conversion(r) => {
                let reaction = &self.reactions[r];
                let key_in: f64 = outcome.feed_flows.iter().map(|f| f[reaction.key]).sum();
                self.reaction_enthalpy(r, outcome.t_out) * key_in / -reaction.nu[reaction.key]
            }
        }
    }

    /// The duty (W) that gives the effluent temperature `t` with the streams of `solved` (a
    /// solve of `inputs` for the temperature): the same number as [`System::solve`] for
    /// [`Unknown::Duty`] at `t`, by one enthalpy evaluation instead of a second solve. `None`
    /// where that solve fails (a result that is not finite).
    pub fn needed_duty(&self, inputs: &Inputs, solved: &Outcome, at: &Enthalpies) -> Option<f64> {
        let t = at.t;
        let (h_out, cp_out) = at.stream_h_cp(&solved.out_flows);
        let duty = h_out - solved.h_in + inputs.heat_loss;
        [t, duty, h_out, cp_out].iter().all(|x| x.is_finite()).then_some(duty)
    }

    /// The key conversion of reaction `r` that gives the effluent temperature `t` at the
    /// reported duty, from `solved` (a solve of `inputs` for the temperature): the same number
    /// and the same errors as [`System::solve`] for [`Unknown::Conversion`] with that reaction's
    /// conversion left open, without a second solve. At a fixed temperature the balance is
    /// linear in the extent, so the conversion is one division.
    pub fn apparent_conversion(
        &self,
        inputs: &Inputs,
        solved: &Outcome,
        r: usize,
        at: &Enthalpies,
    ) -> Result<f64, SolveError> {
        let t = at.t;
        let Some(reaction) = self.reactions.get(r) else {
            return Err(SolveError::MissingInput(format!("no reaction {}", r + 1)));
        };
        let duty = inputs.duty.ok_or_else(|| {
            SolveError::MissingInput("solving for the conversion needs the heater duty".into())
        })?;
        let n = self.len();
        let mut held = [[0.0; HELD]; 2];
        let mut heap = Vec::new();
        let (feed_total, out) = if n <= HELD {
            let [a, b] = &mut held;
            (&mut a[..n], &mut b[..n])
        } else {
            heap.resize(2 * n, 0.0);
            heap.split_at_mut(n)
        };
        // The streams with reaction r at zero conversion, summed as `streams` sums them.
        for flows in &solved.feed_flows {
            for (total, f) in feed_total.iter_mut().zip(flows) {
                *total += f;
            }
        }
        out.copy_from_slice(feed_total);
        let given = match &inputs.effluent {
            Effluent::Reacted { conversions } => conversions.as_slice(),
            _ => &[],
        };
        let mut extents_finite = true;
        for (q, other) in self.reactions.iter().enumerate() {
            let x = if q == r { 0.0 } else { given.get(q).copied().flatten().unwrap_or(0.0) };
            let xi = x * feed_total[other.key] / -other.nu[other.key];
            extents_finite &= xi.is_finite() && x.is_finite();
            for (o, nu) in out.iter_mut().zip(&other.nu) {
                *o += nu * xi;
            }
        }
        let scale: f64 = feed_total.iter().map(|f| f.abs()).sum();
        for (i, &f) in out.iter().enumerate() {
            if f < -1e-12 * scale {
                return Err(SolveError::NegativeFlow { component: self.components[i].id.clone(), flow: f });
            }
        }
        let key_in = feed_total[reaction.key];
        if key_in <= 0.0 {
            return Err(SolveError::NoKeyFeed {
                reaction: r,
                component: self.components[reaction.key].id.clone(),
            });
        }
        let f0 = at.stream_h_cp(out).0 - (solved.h_in + duty - inputs.heat_loss);
        let dh = at.reaction_enthalpy(&reaction.nu);
        let per_key = dh / -reaction.nu[reaction.key];
        if per_key.abs() < 1.0 {
            return Err(SolveError::ThermallyNeutral { reaction: r, t, dh: per_key });
        }
        let xi = -f0 / dh;
        let x = xi * -reaction.nu[reaction.key] / key_in;
        for (o, nu) in out.iter_mut().zip(&reaction.nu) {
            *o += nu * xi;
        }
        let scale: f64 = feed_total.iter().sum();
        for (i, &f) in out.iter().enumerate() {
            if f < -1e-12 * scale {
                return Err(SolveError::ImpossibleConversion {
                    reaction: r,
                    conversion: x,
                    component: self.components[i].id.clone(),
                    flow: f,
                });
            }
        }
        // What the solve's outcome checks besides: every figure finite.
        let (h_out, cp_out) = at.stream_h_cp(out);
        let out_total: f64 = out.iter().sum();
        let out_mass = out.iter().zip(&self.components).map(|(n, c)| n * c.molar_mass).sum::<f64>() / 1000.0;
        if ![t, duty, h_out, cp_out, out_total, out_mass, x, xi].iter().all(|v| v.is_finite())
            || !extents_finite
        {
            return Err(SolveError::NotFinite("result (an input is too large)"));
        }
        Ok(x)
    }

    /// Every component's molar enthalpy and heat capacity at `t`, for several evaluations at
    /// one temperature (one Watson power per component).
    pub fn enthalpies_at(&self, t: f64) -> Enthalpies {
        let n = self.len();
        let mut e = Enthalpies { t, n, held: [(0.0, 0.0); HELD], heap: Vec::new() };
        if n > HELD {
            e.heap = self.models.iter().map(|m| m.h_cp(t)).collect();
        } else {
            for (slot, m) in e.held.iter_mut().zip(&self.models) {
                *slot = m.h_cp(t);
            }
        }
        e
    }

    /// Solve the balance for `unknown` and compute every reported figure.
    pub fn solve(&self, inputs: &Inputs, unknown: Unknown) -> Result<Outcome, SolveError> {
        self.solve_with(inputs, unknown, &mut BubbleMemo::default())
    }

    /// [`System::solve`] with the caller's memo of the last bubble point (the same result;
    /// an effluent whose composition and pressure did not change is not solved again).
    pub fn solve_with(
        &self,
        inputs: &Inputs,
        unknown: Unknown,
        memo: &mut BubbleMemo,
    ) -> Result<Outcome, SolveError> {
        check_feeds_finite(inputs)?;
        let mut streams = self.streams(inputs, true)?;
        // Finite inputs can still overflow on the way (a flow of 1e308 t/h is about 1e309
        // mol/s of water): never go on with infinities, which would end as a NaN result.
        if streams.feed_flows.iter().flatten().any(|n| !n.is_finite()) {
            return Err(SolveError::NotFinite("feed flow (in mol/s)"));
        }
        // Solving for the temperature starts at the flow-weighted feed temperature, which with
        // one feed (or feeds at one temperature) is a feed's temperature: the components'
        // enthalpies there serve both the inlet and the first step.
        let guess = Self::temperature_guess(inputs, &streams);
        let known = (unknown == Unknown::Temperature
            && inputs.feeds.iter().any(|f| f.temperature.to_bits() == guess.to_bits()))
        .then(|| self.enthalpies_at(guess));
        let h_in = self.inlet_enthalpy_with(inputs, &streams, known.as_ref());
        if !h_in.is_finite() {
            return Err(SolveError::NotFinite("feed enthalpy flow"));
        }
        let solution = match unknown {
            Unknown::Temperature => {
                self.solve_for_temperature(inputs, &streams, h_in, guess, known.as_ref())?
            }
            Unknown::Duty => self.solve_for_duty(inputs, &streams, h_in)?,
            Unknown::Conversion(r) => self.solve_for_conversion(inputs, &mut streams, h_in, r)?,
        };
        self.outcome(inputs, unknown, streams, h_in, solution, memo)
    }

    /// The effluent temperature for a given duty: `H_out(T) = H_in + Q − Q_loss`, solved from
    /// the flow-weighted feed temperature.
    fn solve_for_temperature(
        &self,
        inputs: &Inputs,
        streams: &Streams,
        h_in: f64,
        guess: f64,
        known: Option<&Enthalpies>,
    ) -> Result<(f64, f64, Option<Method>), SolveError> {
        let duty = inputs.duty.ok_or_else(|| {
            SolveError::MissingInput("solving for the temperature needs the heater duty".into())
        })?;
        let target = h_in + duty - inputs.heat_loss;
        let (t, method) = self.solve_temperature_from(&streams.out_flows, target, guess, known)?;
        Ok((t, duty, Some(method)))
    }

    /// The duty that gives the measured effluent temperature.
    fn solve_for_duty(
        &self,
        inputs: &Inputs,
        streams: &Streams,
        h_in: f64,
    ) -> Result<(f64, f64, Option<Method>), SolveError> {
        let t = effluent_temperature(inputs, "duty")?;
        let duty = self.stream_h(&streams.out_flows, t) - h_in + inputs.heat_loss;
        Ok((t, duty, None))
    }

    /// The conversion of reaction `r` that gives the measured effluent temperature at the given
    /// duty; `streams` (built with that reaction at zero conversion) get its extent.
    fn solve_for_conversion(
        &self,
        inputs: &Inputs,
        streams: &mut Streams,
        h_in: f64,
        r: usize,
    ) -> Result<(f64, f64, Option<Method>), SolveError> {
        let t = effluent_temperature(inputs, "conversion")?;
        let duty = inputs.duty.ok_or_else(|| {
            SolveError::MissingInput("solving for the conversion needs the heater duty".into())
        })?;
        let reaction = &self.reactions[r];
        let key_in = self.key_feed(&streams.feed_total, r);
        if key_in <= 0.0 {
            return Err(SolveError::NoKeyFeed {
                reaction: r,
                component: self.components[reaction.key].id.clone(),
            });
        }
        // Streams were built with this reaction at zero conversion.
        let f0 = self.stream_h(&streams.out_flows, t) - (h_in + duty - inputs.heat_loss);
        let dh = self.reaction_enthalpy(r, t);
        let per_key = dh / -reaction.nu[reaction.key];
        if per_key.abs() < 1.0 {
            return Err(SolveError::ThermallyNeutral { reaction: r, t, dh: per_key });
        }
        let xi = -f0 / dh;
        let x = xi * -reaction.nu[reaction.key] / key_in;
        streams.extents[r] = xi;
        streams.conversions[r] = x;
        for (o, nu) in streams.out_flows.iter_mut().zip(&reaction.nu) {
            *o += nu * xi;
        }
        let scale: f64 = streams.feed_total.iter().sum();
        for (i, &f) in streams.out_flows.iter().enumerate() {
            if f < -1e-12 * scale {
                return Err(SolveError::ImpossibleConversion {
                    reaction: r,
                    conversion: x,
                    component: self.components[i].id.clone(),
                    flow: f,
                });
            }
        }
        Ok((t, duty, None))
    }

    /// Every reported figure of a solved balance (`solution` = effluent temperature, duty and
    /// how the temperature was found), with the element balance and the validity flags.
    fn outcome(
        &self,
        inputs: &Inputs,
        unknown: Unknown,
        streams: Streams,
        h_in: f64,
        solution: (f64, f64, Option<Method>),
        memo: &mut BubbleMemo,
    ) -> Result<Outcome, SolveError> {
        let (t_out, duty, method) = solution;
        let at = self.enthalpies_at(t_out);
        let (h_out, cp_out) = at.stream_h_cp(&streams.out_flows);
        let out_total: f64 = streams.out_flows.iter().sum();
        let out_mass =
            streams.out_flows.iter().zip(&self.components).map(|(n, c)| n * c.molar_mass).sum::<f64>()
                / 1000.0;
        if ![t_out, duty, h_out, cp_out, out_total, out_mass].iter().all(|x| x.is_finite())
            || !streams.conversions.iter().chain(&streams.extents).all(|x| x.is_finite())
        {
            return Err(SolveError::NotFinite("result (an input is too large)"));
        }
        let heats_of_reaction = self
            .reactions
            .iter()
            .zip(&self.hr_ref)
            .map(|(reaction, &at_ref)| {
                (at_ref, at.reaction_enthalpy(&reaction.nu) / -reaction.nu[reaction.key])
            })
            .collect();

        let mut outcome = Outcome {
            unknown,
            t_out,
            duty,
            heat_loss: inputs.heat_loss,
            conversions: streams.conversions,
            extents: streams.extents,
            feed_flows: streams.feed_flows,
            out_flows: streams.out_flows,
            out_total,
            out_mass,
            h_in,
            h_out,
            cp_out,
            heats_of_reaction,
            elements: Vec::new(),
            bubble: None,
            flags: Vec::new(),
            method,
        };
        self.element_balance(&mut outcome);
        self.validity(inputs, &mut outcome, memo);
        Ok(outcome)
    }

    fn element_balance(&self, outcome: &mut Outcome) {
        let present =
            |i: usize| outcome.out_flows[i] != 0.0 || outcome.feed_flows.iter().any(|f| f[i] != 0.0);
        if (0..self.len()).any(|i| self.atoms[i].is_none() && present(i)) {
            return;
        }
        let mut elements = Vec::new();
        for (j, el) in self.elements.iter().enumerate() {
            let (mut a_in, mut a_out) = (0.0, 0.0);
            for (i, atoms) in self.atoms.iter().enumerate() {
                let Some(atoms) = atoms else { continue };
                let k = atoms[j];
                if k != 0.0 {
                    a_in += k * outcome.feed_flows.iter().map(|f| f[i]).sum::<f64>();
                    a_out += k * outcome.out_flows[i];
                }
            }
            if a_in == 0.0 && a_out == 0.0 {
                continue;
            }
            let rel = if a_in != 0.0 { (a_out - a_in) / a_in } else { 0.0 };
            if rel.abs() > 1e-3 {
                outcome.flags.push(Flag::ElementImbalance { element: el.to_string(), relative: rel });
            }
            elements.push((el.clone(), a_in, a_out));
        }
        outcome.elements = elements;
    }

    fn validity(&self, inputs: &Inputs, outcome: &mut Outcome, memo: &mut BubbleMemo) {
        // Pushed after the element balance's flags, in this order.
        let mut flags = std::mem::take(&mut outcome.flags);
        // Lowest and highest temperature each component is present at (feeds and effluent).
        let empty = (f64::INFINITY, f64::NEG_INFINITY);
        let mut held = [empty; HELD];
        let mut heap = Vec::new();
        let span: &mut [(f64, f64)] = if self.len() <= HELD {
            &mut held[..self.len()]
        } else {
            heap.resize(self.len(), empty);
            &mut heap
        };
        let streams = inputs
            .feeds
            .iter()
            .map(|f| f.temperature)
            .zip(outcome.feed_flows.iter().map(Vec::as_slice))
            .chain(std::iter::once((outcome.t_out, outcome.out_flows.as_slice())));
        for (t, flows) in streams {
            for ((lo, hi), &n) in span.iter_mut().zip(flows) {
                if n > 0.0 {
                    *lo = lo.min(t);
                    *hi = hi.max(t);
                }
            }
        }
        for ((i, c), &(t_lo, t_hi)) in self.components.iter().enumerate().zip(&*span) {
            if t_lo > t_hi {
                continue; // absent everywhere
            }
            if t_hi >= c.tc {
                flags.push(Flag::AboveCritical { component: c.id.clone(), t: t_hi, tc: c.tc });
            }
            let (correlation, range) = match self.paths[i] {
                EnthalpyPath::LiquidCp => (Correlation::CpLiquid, c.liquid.as_ref().and_then(|l| l.cp_range)),
                EnthalpyPath::IdealGasWatson => {
                    (Correlation::CpIdealGas, c.ideal_gas.as_ref().and_then(|g| g.cp_range))
                }
            };
            if let Some((lo, hi)) = range {
                // Each integral runs from 298.15 K to T: both ends must be inside the range.
                let (a, b) = (t_lo.min(T_REF), t_hi.max(T_REF));
                if a < lo || b > hi {
                    let t = if b > hi { b } else { a };
                    flags.push(Flag::OutsideRange {
                        component: c.id.clone(),
                        correlation,
                        t,
                        range: (lo, hi),
                    });
                }
            }
        }
        for (r, &x) in outcome.conversions.iter().enumerate() {
            if !(0.0..=1.0).contains(&x) {
                flags.push(Flag::ConversionOutOfRange { reaction: r, value: x });
            }
        }
        if let Some(p) = inputs.pressure {
            let x = outcome.out_fractions();
            let lacks = |((x, m), _): &((&f64, &Option<PsatModel>), &Component)| **x > 0.0 && m.is_none();
            let present = || x.iter().zip(&self.psat).zip(&self.components);
            if !present().any(|c| lacks(&c)) {
                match memo.bubble_point(&self.psat_filled, &x, p) {
                    Ok((t_b, y)) => {
                        for (i, c) in self.components.iter().enumerate() {
                            if x[i] > 0.0
                                && let Some((lo, hi)) = c.psat.as_ref().and_then(|d| d.range)
                                && (t_b < lo || t_b > hi)
                            {
                                flags.push(Flag::OutsideRange {
                                    component: c.id.clone(),
                                    correlation: Correlation::VapourPressure,
                                    t: t_b,
                                    range: (lo, hi),
                                });
                            }
                        }
                        let margin = t_b - outcome.t_out;
                        if margin <= 0.0 {
                            flags.push(Flag::TwoPhaseRisk { t_out: outcome.t_out, t_bubble: t_b });
                        } else if margin < inputs.bubble_margin {
                            flags.push(Flag::NearBubblePoint {
                                t_out: outcome.t_out,
                                t_bubble: t_b,
                                margin: inputs.bubble_margin,
                            });
                        }
                        outcome.bubble = Some(BubblePoint { t: t_b, pressure: p, y, margin });
                    }
                    Err(e) => flags.push(Flag::BubblePointUnavailable { reason: e.to_string() }),
                }
            } else {
                let missing: Vec<&str> = present().filter(lacks).map(|(_, c)| c.id.as_str()).collect();
                flags.push(Flag::BubblePointUnavailable {
                    reason: format!(
                        "no vapour-pressure data (psat, or pc and omega) for {}",
                        missing.join(", ")
                    ),
                });
            }
        }
        outcome.flags = flags;
    }
}

/// Feed temperatures and flows must be finite numbers.
fn check_feeds_finite(inputs: &Inputs) -> Result<(), SolveError> {
    for f in &inputs.feeds {
        if !f.temperature.is_finite() {
            return Err(SolveError::NotFinite("feed temperature"));
        }
        if !f.flow.value().is_finite() {
            return Err(SolveError::NotFinite("feed flow"));
        }
    }
    Ok(())
}

/// The measured effluent temperature, which solving for `what` needs.
fn effluent_temperature(inputs: &Inputs, what: &str) -> Result<f64, SolveError> {
    inputs.effluent_temperature.ok_or_else(|| {
        SolveError::MissingInput(format!("solving for the {what} needs the effluent temperature"))
    })
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::thermo::component::Library;

    fn water() -> System {
        let water = Library::builtin().unwrap().resolve("water").unwrap();
        System::new(vec![water], &[PathChoice::Auto], None, Vec::new(), DEFAULT_BOUNDS).unwrap()
    }

    fn inputs(flow: FlowValue, duty: Option<f64>) -> Inputs {
        Inputs {
            feeds: vec![FeedInput { flow, temperature: 301.15, fractions: vec![1.0], basis: Basis::Mole }],
            effluent: Effluent::Mixed,
            duty,
            heat_loss: 6000.0,
            effluent_temperature: Some(336.55),
            pressure: None,
            bubble_margin: 10.0,
        }
    }

    /// Found by the hostile-input property test (tests/it/hostile.rs): a feed of `1e308 t/h`
    /// is finite in kg/s but not in mol/s, and solving for the duty returned Ok with a NaN
    /// duty. It is now an error.
    #[test]
    fn overflowing_flows_are_errors_not_nan() {
        let sys = water();
        let ok = sys.solve(&inputs(FlowValue::Mass(0.72), None), Unknown::Duty).unwrap();
        assert!(ok.duty.is_finite() && ok.duty > 0.0);
        let huge = 1e308 * 1000.0 / 3600.0;
        for unknown in [Unknown::Duty, Unknown::Temperature] {
            let r = sys.solve(&inputs(FlowValue::Mass(huge), Some(1e5)), unknown);
            assert!(matches!(r, Err(SolveError::NotFinite(_))), "{unknown:?}: {r:?}");
        }
        let r = sys.solve(&inputs(FlowValue::Molar(1e308), Some(f64::MAX)), Unknown::Temperature);
        assert!(r.is_err(), "{r:?}");
    }
}
