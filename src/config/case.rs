//! The `calc` case file: one steady-state balance for engineering what-ifs.
//!
//! Two stages: [`RawCase`] mirrors the TOML exactly (`deny_unknown_fields`), then
//! [`Case::check`] resolves components, units, compositions and the unknown into a
//! [`System`] plus [`Inputs`], reporting every problem with file, line and key. [`Case::run`]
//! solves and returns a [`Report`], which renders as JSON or as a short human summary.

use std::fmt::Write as _;
use std::path::Path;
use std::sync::Arc;

use indexmap::IndexMap;
use serde::{Deserialize, Serialize};

use crate::source::{KeyPath, LocatedError, LocatedErrors, SourceText};
use crate::thermo::Component;
use crate::thermo::balance::{
    Basis, DEFAULT_BOUNDS, Effluent, FeedInput, FlowValue, Inputs, Outcome, PathChoice, Reaction, SolveError,
    System, SystemError, Unknown,
};
use crate::thermo::component::{ComponentSpec, Library, Origin, normalize_id};
use crate::thermo::uncertainty::{InputRef, Uncertain, UncertaintyReport, propagate};
use crate::units::{Number, Quantity};

/// Default bubble-point margin, K: the ideal-solution bubble point of the aqueous mixtures in
/// the vetted reference data is 0.5–12.9 K above the measured one (common practice: keep a
/// margin of that size before calling a liquid safely sub-cooled).
pub const DEFAULT_BUBBLE_MARGIN: f64 = 10.0;

/// Tolerance on the sum of fractions.
pub const SUM_TOLERANCE: f64 = 1e-3;

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

/// How an input was written, for echoing.
#[derive(Debug, Clone, Default)]
pub struct Echo {
    /// Per feed: (flow as written, temperature as written).
    pub feeds: Vec<(String, String)>,
    /// Duty as written.
    pub duty: Option<String>,
    /// Heat loss as written.
    pub heat_loss: Option<String>,
    /// Measured effluent temperature as written.
    pub effluent_temperature: Option<String>,
    /// Pressure as written.
    pub pressure: Option<String>,
    /// Feed labels.
    pub feed_names: Vec<String>,
}

/// A checked case, ready to solve.
#[derive(Debug, Clone)]
pub struct Case {
    /// The case file.
    pub source: Arc<SourceText>,
    /// Components, paths, reactions.
    pub system: System,
    /// Inputs.
    pub inputs: Inputs,
    /// What to solve for.
    pub unknown: Unknown,
    /// Inputs with uncertainties.
    pub uncertain: Vec<Uncertain>,
    /// How inputs were written.
    pub echo: Echo,
    /// Notes raised while checking (e.g. a normalized composition).
    pub warnings: Vec<String>,
}

struct Checker<'a> {
    src: &'a SourceText,
    errors: Vec<LocatedError>,
}

impl Checker<'_> {
    fn err(&mut self, key: &KeyPath, message: impl Into<String>) {
        self.errors.push(self.src.error_at(key, message));
    }

    fn number(&mut self, key: &KeyPath, v: &Number, q: Quantity) -> Option<f64> {
        match v.si(q) {
            Ok(x) => Some(x),
            Err(e) => {
                self.err(key, e.to_string());
                None
            }
        }
    }

    fn temperature(&mut self, key: &KeyPath, v: &Number) -> Option<f64> {
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

    /// An uncertainty: `"x %"` of `value`, or an absolute value of quantity `q`.
    fn uncertainty(&mut self, key: &KeyPath, v: &Number, value: f64, q: &[Quantity]) -> Option<f64> {
        let u = match v {
            Number::Text(t) if t.trim().ends_with('%') => {
                match Number::Text(t.clone()).si(Quantity::Dimensionless) {
                    Ok(rel) => Some(rel * value.abs()),
                    Err(e) => {
                        self.err(key, e.to_string());
                        None
                    }
                }
            }
            _ => match v.si_any(q) {
                Ok((x, _)) => Some(x),
                Err(e) => {
                    self.err(key, e.to_string());
                    None
                }
            },
        }?;
        if u < 0.0 {
            self.err(key, format!("a standard uncertainty cannot be negative, got {u}"));
            return None;
        }
        Some(u)
    }

    fn basis(&mut self, key: &KeyPath, v: Option<&String>) -> Basis {
        match v.map(String::as_str).map(str::trim) {
            None | Some("mole") | Some("mol") => Basis::Mole,
            Some("mass") => Basis::Mass,
            Some(other) => {
                self.err(key, format!("unknown basis `{other}`; use \"mole\" or \"mass\""));
                Basis::Mole
            }
        }
    }
}

fn path_label(choice: PathChoice) -> &'static str {
    match choice {
        PathChoice::Auto => "auto",
        PathChoice::Force(p) => p.as_str(),
    }
}

impl Case {
    /// Read and check a case file.
    pub fn load(path: &Path) -> Result<Case, LocatedErrors> {
        let src = SourceText::read(path)?;
        Case::check(Arc::new(src))
    }

    /// Check a parsed case file (stage two).
    pub fn check(src: Arc<SourceText>) -> Result<Case, LocatedErrors> {
        let raw: RawCase = src.deserialize()?;
        let mut ck = Checker { src: &src, errors: Vec::new() };
        let mut warnings = Vec::new();

        // --- component library: built-in, user files, inline definitions.
        let mut library = Library::builtin()?;
        let base_dir = src.path.parent().map(Path::to_path_buf).unwrap_or_default();
        for (i, lib) in raw.model.libraries.iter().enumerate() {
            let p = base_dir.join(lib);
            if let Err(e) = library.load(&p) {
                if e.0.iter().any(|le| le.location.line_col.is_none() && le.location.file == p) {
                    ck.err(
                        &KeyPath::keys("model.libraries").index(i),
                        format!("cannot load library `{lib}`: {e}"),
                    );
                } else {
                    ck.errors.extend(e.0);
                }
            }
        }
        for (id, spec) in &raw.components {
            let key = KeyPath::keys("components").key(id);
            library.add(id, spec.clone(), Origin { source: src.clone(), key });
        }

        // --- the system's components, in order of first use.
        let mut ids: Vec<String> = Vec::new();
        let mut first_use: Vec<KeyPath> = Vec::new();
        let mut note = |id: &str, key: KeyPath, ids: &mut Vec<String>| {
            if !ids.iter().any(|k| normalize_id(k) == normalize_id(id)) {
                ids.push(id.to_string());
                first_use.push(key);
            }
        };
        for (j, f) in raw.feed.iter().enumerate() {
            for id in f.composition.keys() {
                note(id, KeyPath::keys("feed").index(j).key("composition").key(id), &mut ids);
            }
        }
        for (r, re) in raw.reaction.iter().enumerate() {
            for id in re.stoichiometry.keys() {
                note(id, KeyPath::keys("reaction").index(r).key("stoichiometry").key(id), &mut ids);
            }
        }
        if let Some(comp) = raw.effluent.as_ref().and_then(|e| e.composition.as_ref()) {
            for id in comp.keys() {
                note(id, KeyPath::keys("effluent.composition").key(id), &mut ids);
            }
        }
        let index_of = |id: &str| ids.iter().position(|k| normalize_id(k) == normalize_id(id));
        let mut components: Vec<Component> = Vec::new();
        for (id, key) in ids.iter().zip(&first_use) {
            if !library.contains(id) {
                ck.errors.push(library.unknown(id, &src, key));
                continue;
            }
            match library.resolve(id) {
                Ok(c) => components.push(c),
                Err(e) => ck.errors.extend(e.0),
            }
        }
        for id in raw.components.keys() {
            if index_of(id).is_none() {
                // Check it anyway: a bad definition is an error even before it is used.
                match library.resolve(id) {
                    Ok(_) => warnings.push(format!("component `{id}` is defined but not used")),
                    Err(e) => ck.errors.extend(e.0),
                }
            }
        }
        if raw.feed.is_empty() {
            ck.err(&KeyPath::root(), "the case has no [[feed]] table: at least one feed is required");
        }

        // --- model settings.
        let global = match raw.model.enthalpy.as_deref() {
            None => PathChoice::Auto,
            Some(s) => PathChoice::parse(s).unwrap_or_else(|| {
                ck.err(
                    &KeyPath::keys("model.enthalpy"),
                    format!(
                        "unknown enthalpy path `{s}`; use \"auto\", \"ideal-gas-watson\" or \"liquid-cp\""
                    ),
                );
                PathChoice::Auto
            }),
        };
        let mut choices = vec![global; ids.len()];
        for (id, s) in &raw.model.component_enthalpy {
            let key = KeyPath::keys("model.component_enthalpy").key(id);
            match (index_of(id), PathChoice::parse(s)) {
                (Some(i), Some(c)) => choices[i] = c,
                (None, _) => ck.err(&key, format!("component `{id}` is not used in this case")),
                (_, None) => ck.err(
                    &key,
                    format!(
                        "unknown enthalpy path `{s}`; use \"auto\", \"ideal-gas-watson\" or \"liquid-cp\""
                    ),
                ),
            }
        }
        if let Some(n) = raw.model.watson_n
            && !(n > 0.0 && n <= 1.0)
        {
            ck.err(&KeyPath::keys("model.watson_n"), format!("Watson exponent must be in (0, 1], got {n}"));
        }
        let pressure = raw.model.pressure.as_ref().and_then(|p| {
            let key = KeyPath::keys("model.pressure");
            let v = ck.number(&key, p, Quantity::Pressure)?;
            if v <= 0.0 {
                ck.err(&key, format!("absolute pressure must be positive, got {v} Pa"));
                return None;
            }
            Some(v)
        });
        let bubble_margin = raw
            .model
            .bubble_margin
            .as_ref()
            .and_then(|m| {
                let key = KeyPath::keys("model.bubble_margin");
                let v = ck.number(&key, m, Quantity::TemperatureDifference)?;
                if v < 0.0 {
                    ck.err(
                        &key,
                        format!("margin must not be negative, got {v} K (0 warns only at the bubble point)"),
                    );
                    return None;
                }
                Some(v)
            })
            .unwrap_or(DEFAULT_BUBBLE_MARGIN);
        let bounds = match &raw.model.temperature_range {
            None => DEFAULT_BOUNDS,
            Some([lo, hi]) => {
                let key = KeyPath::keys("model.temperature_range");
                match (ck.temperature(&key.index(0), lo), ck.temperature(&key.index(1), hi)) {
                    (Some(lo), Some(hi)) if hi > lo => (lo, hi),
                    (Some(lo), Some(hi)) => {
                        ck.err(&key, format!("range must be [low, high] with low < high, got [{lo}, {hi}]"));
                        DEFAULT_BOUNDS
                    }
                    _ => DEFAULT_BOUNDS,
                }
            }
        };

        // --- feeds.
        let n = ids.len();
        let mut feeds = Vec::new();
        let mut echo = Echo::default();
        let mut uncertain = Vec::new();
        let mut labels: Vec<String> = Vec::new();
        for (j, f) in raw.feed.iter().enumerate() {
            let key = KeyPath::keys("feed").index(j);
            let label = f.name.clone().unwrap_or_else(|| format!("feed {}", j + 1));
            if let Some(first) = labels.iter().position(|l| l.trim() == label.trim()) {
                ck.err(
                    &key.key("name"),
                    format!("feed {} is also called `{label}`: give each feed its own name", first + 1),
                );
            }
            labels.push(label.clone());
            let flow = match &f.flow {
                None => {
                    ck.err(&key, "flow is required");
                    None
                }
                Some(v) => match v.si_any(&[Quantity::MolarFlow, Quantity::MassFlow]) {
                    Ok((x, q)) if x > 0.0 => {
                        Some(if q == Quantity::MassFlow { FlowValue::Mass(x) } else { FlowValue::Molar(x) })
                    }
                    Ok((x, q)) => {
                        let si = if q == Quantity::MassFlow { "kg/s" } else { "mol/s" };
                        ck.err(
                            &key.key("flow"),
                            format!("flow must be positive, got {x} {si} (given `{}`)", v.as_written()),
                        );
                        None
                    }
                    Err(e) => {
                        ck.err(&key.key("flow"), e.to_string());
                        None
                    }
                },
            };
            let temperature = match &f.temperature {
                None => {
                    ck.err(&key, "temperature is required");
                    None
                }
                Some(v) => ck.temperature(&key.key("temperature"), v),
            };
            let basis = ck.basis(&key.key("basis"), f.basis.as_ref());
            let fractions = composition(
                &mut ck,
                &key.key("composition"),
                &f.composition,
                f.normalize,
                n,
                &index_of,
                &mut warnings,
                &label,
            );
            if let (Some(flow), Some(temperature), Some(fractions)) = (flow, temperature, fractions) {
                if let Some(u) = &f.flow_uncertainty {
                    let (q, other) = match flow {
                        FlowValue::Molar(_) => (Quantity::MolarFlow, Quantity::MassFlow),
                        FlowValue::Mass(_) => (Quantity::MassFlow, Quantity::MolarFlow),
                    };
                    let ukey = key.key("flow_uncertainty");
                    if u.si(q).is_err() && u.si(other).is_ok() {
                        // Converting between the bases would need the composition: refuse it.
                        ck.err(
                            &ukey,
                            format!(
                                "`{}` is a {} but this feed's flow is a {}: give the uncertainty in a {} unit or as a percentage",
                                u.as_written(),
                                other.name(),
                                q.name(),
                                q.name()
                            ),
                        );
                    } else if let Some(u) = ck.uncertainty(&ukey, u, flow.value(), &[q]) {
                        uncertain.push(Uncertain {
                            input: InputRef::FeedFlow(j),
                            u,
                            label: format!("{label} flow"),
                        });
                    }
                }
                if let Some(u) = &f.temperature_uncertainty
                    && let Some(u) = ck.uncertainty(
                        &key.key("temperature_uncertainty"),
                        u,
                        temperature,
                        &[Quantity::TemperatureDifference],
                    )
                {
                    uncertain.push(Uncertain {
                        input: InputRef::FeedTemperature(j),
                        u,
                        label: format!("{label} temperature"),
                    });
                }
                if let Some(cu) = &f.composition_uncertainty {
                    for (i, u) in
                        composition_u(&mut ck, &key.key("composition_uncertainty"), cu, &fractions, &index_of)
                    {
                        uncertain.push(Uncertain {
                            input: InputRef::FeedFraction(j, i),
                            u,
                            label: format!("{label} {} fraction", ids[i]),
                        });
                    }
                }
                feeds.push(FeedInput { flow, temperature, fractions, basis });
                echo.feeds.push((
                    f.flow.as_ref().map(Number::as_written).unwrap_or_default(),
                    f.temperature.as_ref().map(Number::as_written).unwrap_or_default(),
                ));
                echo.feed_names.push(label);
            }
        }

        // --- reactions.
        let mut reactions = Vec::new();
        let mut conversions: Vec<Option<f64>> = Vec::new();
        for (r, re) in raw.reaction.iter().enumerate() {
            let key = KeyPath::keys("reaction").index(r);
            if re.stoichiometry.is_empty() {
                ck.err(&key, "stoichiometry is required, e.g. { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }");
                continue;
            }
            let mut nu = vec![0.0; n];
            refuse_repeated_ids(&mut ck, &key.key("stoichiometry"), re.stoichiometry.keys());
            for (id, coef) in &re.stoichiometry {
                if !coef.is_finite() {
                    ck.err(&key.key("stoichiometry").key(id), "coefficient is not finite");
                }
                if let Some(i) = index_of(id) {
                    nu[i] += coef;
                }
            }
            let key_idx = match &re.key {
                None => {
                    ck.err(&key, "key is required: the reactant whose conversion is given or solved for");
                    None
                }
                Some(k) => {
                    match (index_of(k), re.stoichiometry.keys().any(|s| normalize_id(s) == normalize_id(k))) {
                        (Some(i), true) => Some(i),
                        _ => {
                            ck.err(
                                &key.key("key"),
                                format!("key `{k}` is not in this reaction's stoichiometry"),
                            );
                            None
                        }
                    }
                }
            };
            let conversion = re
                .conversion
                .as_ref()
                .and_then(|c| ck.number(&key.key("conversion"), c, Quantity::Dimensionless));
            if let Some(u) = &re.conversion_uncertainty
                && let Some(u) = ck.uncertainty(
                    &key.key("conversion_uncertainty"),
                    u,
                    conversion.unwrap_or(0.0),
                    &[Quantity::Dimensionless],
                )
            {
                uncertain.push(Uncertain {
                    input: InputRef::Conversion(r),
                    u,
                    label: format!("reaction {} conversion", r + 1),
                });
            }
            let reactants: Vec<String> =
                re.stoichiometry.iter().filter(|(_, c)| **c < 0.0).map(|(id, c)| term(-c, id)).collect();
            let products: Vec<String> =
                re.stoichiometry.iter().filter(|(_, c)| **c > 0.0).map(|(id, c)| term(*c, id)).collect();
            let label = re
                .name
                .clone()
                .unwrap_or_else(|| format!("{} -> {}", reactants.join(" + "), products.join(" + ")));
            if let Some(k) = key_idx {
                reactions.push(Reaction { label, nu, key: k });
                conversions.push(conversion);
            }
        }

        // --- effluent, heater, unknown.
        let eff = raw.effluent.clone().unwrap_or_default();
        let effluent_temperature =
            eff.temperature.as_ref().and_then(|t| ck.temperature(&KeyPath::keys("effluent.temperature"), t));
        let heater = raw.heater.clone().unwrap_or_default();
        let duty =
            heater.duty.as_ref().and_then(|d| ck.number(&KeyPath::keys("heater.duty"), d, Quantity::Power));
        let heat_loss = heater
            .heat_loss
            .as_ref()
            .and_then(|d| ck.number(&KeyPath::keys("heater.heat_loss"), d, Quantity::Power))
            .unwrap_or(0.0);
        let unknown_text = raw.solve.unknown.clone().unwrap_or_else(|| "temperature".into());
        let solve_key = KeyPath::keys("solve.unknown");
        let missing_conv: Vec<usize> =
            conversions.iter().enumerate().filter(|(_, c)| c.is_none()).map(|(r, _)| r).collect();
        let unknown = match unknown_text.trim() {
            "temperature" => {
                if heater.duty.is_none() {
                    ck.err(
                        &KeyPath::keys("heater"),
                        "[heater] duty is required when solving for the temperature",
                    );
                }
                for &r in &missing_conv {
                    ck.err(
                        &KeyPath::keys("reaction").index(r),
                        "conversion is required when solving for the temperature",
                    );
                }
                Unknown::Temperature
            }
            "duty" => {
                if heater.duty.is_some() {
                    ck.err(&KeyPath::keys("heater.duty"), "remove the duty when solving for it");
                }
                if eff.temperature.is_none() {
                    ck.err(
                        &KeyPath::keys("effluent"),
                        "[effluent] temperature is required when solving for the duty",
                    );
                }
                for &r in &missing_conv {
                    ck.err(
                        &KeyPath::keys("reaction").index(r),
                        "conversion is required when solving for the duty",
                    );
                }
                Unknown::Duty
            }
            "conversion" => {
                if eff.temperature.is_none() {
                    ck.err(
                        &KeyPath::keys("effluent"),
                        "[effluent] temperature is required when solving for the conversion",
                    );
                }
                if heater.duty.is_none() {
                    ck.err(
                        &KeyPath::keys("heater"),
                        "[heater] duty is required when solving for the conversion",
                    );
                }
                if raw.reaction.is_empty() {
                    ck.err(&solve_key, "solving for the conversion needs a [[reaction]]");
                }
                match missing_conv.as_slice() {
                    [r] => Unknown::Conversion(*r),
                    [] => {
                        if !raw.reaction.is_empty() {
                            ck.err(
                                &solve_key,
                                "every reaction has a conversion: remove the one to solve for",
                            );
                        }
                        Unknown::Conversion(0)
                    }
                    _ => {
                        ck.err(&solve_key, "more than one reaction lacks a conversion: give all but one");
                        Unknown::Conversion(0)
                    }
                }
            }
            other => {
                ck.err(
                    &solve_key,
                    format!("unknown `{other}`; use \"temperature\", \"duty\" or \"conversion\""),
                );
                Unknown::Temperature
            }
        };
        if let Unknown::Conversion(r) = unknown
            && raw.reaction.get(r).is_some_and(|re| re.conversion_uncertainty.is_some())
        {
            ck.err(
                &KeyPath::keys("reaction").index(r).key("conversion_uncertainty"),
                "this conversion is the unknown: it has no input uncertainty",
            );
        }
        if let Some(u) = &heater.duty_uncertainty {
            if unknown == Unknown::Duty {
                ck.err(
                    &KeyPath::keys("heater.duty_uncertainty"),
                    "the duty is the unknown: it has no input uncertainty",
                );
            } else if let Some(u) = ck.uncertainty(
                &KeyPath::keys("heater.duty_uncertainty"),
                u,
                duty.unwrap_or(0.0),
                &[Quantity::Power],
            ) {
                uncertain.push(Uncertain { input: InputRef::Duty, u, label: "heater duty".into() });
            }
        }
        if let Some(u) = &heater.heat_loss_uncertainty
            && let Some(u) = ck.uncertainty(
                &KeyPath::keys("heater.heat_loss_uncertainty"),
                u,
                heat_loss,
                &[Quantity::Power],
            )
        {
            uncertain.push(Uncertain { input: InputRef::HeatLoss, u, label: "heat loss".into() });
        }
        if let Some(u) = &eff.temperature_uncertainty
            && let Some(u) = ck.uncertainty(
                &KeyPath::keys("effluent.temperature_uncertainty"),
                u,
                effluent_temperature.unwrap_or(0.0),
                &[Quantity::TemperatureDifference],
            )
            && unknown != Unknown::Temperature
        {
            uncertain.push(Uncertain {
                input: InputRef::EffluentTemperature,
                u,
                label: "effluent temperature".into(),
            });
        }
        let effluent = match (&eff.composition, reactions.is_empty() && raw.reaction.is_empty()) {
            (Some(_), false) => {
                ck.err(
                    &KeyPath::keys("effluent.composition"),
                    "give either reactions with conversions or a measured effluent composition, not both",
                );
                Effluent::Mixed
            }
            (Some(comp), true) => {
                let key = KeyPath::keys("effluent.composition");
                let basis = ck.basis(&KeyPath::keys("effluent.basis"), eff.basis.as_ref());
                match composition(&mut ck, &key, comp, eff.normalize, n, &index_of, &mut warnings, "effluent")
                {
                    Some(fractions) => {
                        if let Some(cu) = &eff.composition_uncertainty {
                            for (i, u) in composition_u(
                                &mut ck,
                                &KeyPath::keys("effluent.composition_uncertainty"),
                                cu,
                                &fractions,
                                &index_of,
                            ) {
                                uncertain.push(Uncertain {
                                    input: InputRef::EffluentFraction(i),
                                    u,
                                    label: format!("effluent {} fraction", ids[i]),
                                });
                            }
                        }
                        Effluent::Measured { fractions, basis }
                    }
                    None => Effluent::Mixed,
                }
            }
            (None, false) => Effluent::Reacted { conversions },
            (None, true) => Effluent::Mixed,
        };
        if matches!(effluent, Effluent::Measured { .. }) && matches!(unknown, Unknown::Conversion(_)) {
            ck.err(&solve_key, "a measured effluent composition leaves no conversion to solve for");
        }

        echo.duty = heater.duty.as_ref().map(Number::as_written);
        echo.heat_loss = heater.heat_loss.as_ref().map(Number::as_written);
        echo.effluent_temperature = eff.temperature.as_ref().map(Number::as_written);
        echo.pressure = raw.model.pressure.as_ref().map(Number::as_written);

        if !ck.errors.is_empty() {
            return Err(LocatedErrors(ck.errors));
        }
        let system =
            System::new(components, &choices, raw.model.watson_n, reactions, bounds).map_err(|e| {
                let key = match &e {
                    SystemError::MissingPathData { index, component, .. }
                    | SystemError::NoPath { index, component, .. } => {
                        if raw
                            .model
                            .component_enthalpy
                            .keys()
                            .any(|k| normalize_id(k) == normalize_id(component))
                        {
                            KeyPath::keys("model.component_enthalpy").key(component)
                        } else if raw.components.keys().any(|k| normalize_id(k) == normalize_id(component)) {
                            KeyPath::keys("components").key(component)
                        } else if raw.model.enthalpy.is_some() {
                            KeyPath::keys("model.enthalpy")
                        } else {
                            first_use[*index].clone()
                        }
                    }
                    SystemError::KeyNotReactant { reaction, .. } => {
                        KeyPath::keys("reaction").index(*reaction).key("key")
                    }
                    SystemError::Unbalanced { reaction, .. } => {
                        KeyPath::keys("reaction").index(*reaction).key("stoichiometry")
                    }
                };
                let note = match (&e, global) {
                    (SystemError::MissingPathData { .. }, PathChoice::Force(_)) => {
                        format!(" ([model] enthalpy = \"{}\")", path_label(global))
                    }
                    _ => String::new(),
                };
                LocatedErrors::from(src.error_at(&key, format!("{e}{note}")))
            })?;
        let inputs =
            Inputs { feeds, effluent, duty, heat_loss, effluent_temperature, pressure, bubble_margin };
        Ok(Case { source: src, system, inputs, unknown, uncertain, echo, warnings })
    }

    /// Solve the case; a failure is located at the input most likely responsible.
    pub fn run(&self) -> Result<Report, LocatedErrors> {
        let outcome = self.system.solve(&self.inputs, self.unknown).map_err(|e| {
            let key = match &e {
                SolveError::Temperature(..) => KeyPath::keys("heater.duty"),
                SolveError::ImpossibleConversion { .. } => KeyPath::keys("effluent.temperature"),
                SolveError::NegativeFlow { component, .. } => self
                    .system
                    .reactions
                    .iter()
                    .enumerate()
                    .find(|(_, r)| {
                        self.system
                            .components
                            .iter()
                            .position(|c| c.id == *component)
                            .is_some_and(|i| r.nu[i] < 0.0)
                    })
                    .map_or(KeyPath::keys("reaction"), |(r, _)| {
                        KeyPath::keys("reaction").index(r).key("conversion")
                    }),
                SolveError::NoKeyFeed { reaction, .. } => {
                    KeyPath::keys("reaction").index(*reaction).key("key")
                }
                SolveError::ThermallyNeutral { reaction, .. } => KeyPath::keys("reaction").index(*reaction),
                SolveError::MissingInput(_) => KeyPath::keys("solve"),
                SolveError::NoFlow | SolveError::NotFinite(_) => KeyPath::keys("feed"),
            };
            let hint = match &e {
                SolveError::Temperature(..) => format!(
                    " (searched {:.0}-{:.0} K; check the duty, flows and [model] temperature_range)",
                    self.system.bounds.0, self.system.bounds.1
                ),
                _ => String::new(),
            };
            LocatedErrors::from(self.source.error_at(&key, format!("{e}{hint}")))
        })?;
        let uncertainty = if self.uncertain.is_empty() {
            None
        } else {
            let u = propagate(&self.system, &self.inputs, &outcome, &self.uncertain);
            // An absurd input uncertainty (e.g. `flow_uncertainty = "1e308 %"`) overflows the
            // propagation; the report must not carry infinities (JSON `null`): refuse it at the
            // input that contributes most.
            // (Contributions are in the order of `self.uncertain`.)
            if !u.u.is_finite()
                && let Some((c, item)) = u
                    .contributions
                    .iter()
                    .zip(&self.uncertain)
                    .max_by(|a, b| a.0.contribution.total_cmp(&b.0.contribution))
            {
                let msg = format!(
                    "the uncertainty of the result cannot be propagated: the standard uncertainty of {} ({:e}) is too large",
                    c.label, c.u
                );
                return Err(LocatedErrors::from(self.source.error_at(&uncertainty_key(item.input), msg)));
            }
            Some(u)
        };
        Ok(Report::new(self, &outcome, uncertainty.as_ref()))
    }
}

/// The key of the case file that sets an input's uncertainty.
fn uncertainty_key(input: InputRef) -> KeyPath {
    match input {
        InputRef::FeedFlow(j) => KeyPath::keys("feed").index(j).key("flow_uncertainty"),
        InputRef::FeedTemperature(j) => KeyPath::keys("feed").index(j).key("temperature_uncertainty"),
        InputRef::FeedFraction(j, _) => KeyPath::keys("feed").index(j).key("composition_uncertainty"),
        InputRef::Duty => KeyPath::keys("heater.duty_uncertainty"),
        InputRef::HeatLoss => KeyPath::keys("heater.heat_loss_uncertainty"),
        InputRef::Conversion(r) => KeyPath::keys("reaction").index(r).key("conversion_uncertainty"),
        InputRef::EffluentFraction(_) => KeyPath::keys("effluent.composition_uncertainty"),
        InputRef::EffluentTemperature => KeyPath::keys("effluent.temperature_uncertainty"),
    }
}

/// Refuse a table that names one component twice (ids ignore case, and `_` equals `-`): the
/// two entries would otherwise be added together without a word.
fn refuse_repeated_ids<'a>(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    ids: impl Iterator<Item = &'a String>,
) -> bool {
    let mut seen: Vec<(String, &str)> = Vec::new();
    let mut ok = true;
    for id in ids {
        let norm = normalize_id(id);
        if let Some((_, first)) = seen.iter().find(|(n, _)| *n == norm) {
            ck.err(
                &key.key(id),
                format!("`{id}` names the same component as `{first}` (ids ignore case, and `_` equals `-`); list it once"),
            );
            ok = false;
        } else {
            seen.push((norm, id));
        }
    }
    ok
}

fn term(c: f64, id: &str) -> String {
    if (c - 1.0).abs() < 1e-12 { id.to_string() } else { format!("{c} {id}") }
}

/// Check a composition table; returns fractions per system component.
#[allow(clippy::too_many_arguments)]
fn composition(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    comp: &IndexMap<String, Number>,
    normalize: bool,
    n: usize,
    index_of: &dyn Fn(&str) -> Option<usize>,
    warnings: &mut Vec<String>,
    label: &str,
) -> Option<Vec<f64>> {
    if comp.is_empty() {
        ck.err(key, "composition is required, e.g. { water = 0.7, methanol = 0.3 }");
        return None;
    }
    let mut fractions = vec![0.0; n];
    let mut ok = refuse_repeated_ids(ck, key, comp.keys());
    for (id, v) in comp {
        let k = key.key(id);
        match ck.number(&k, v, Quantity::Dimensionless) {
            Some(x) if x < 0.0 => {
                ck.err(&k, format!("fraction must not be negative, got {x}"));
                ok = false;
            }
            Some(x) => {
                if let Some(i) = index_of(id) {
                    fractions[i] += x;
                }
            }
            None => ok = false,
        }
    }
    if !ok {
        return None;
    }
    let sum: f64 = fractions.iter().sum();
    if sum <= 0.0 {
        ck.err(key, "fractions sum to zero");
        return None;
    }
    if (sum - 1.0).abs() > SUM_TOLERANCE {
        if normalize {
            warnings
                .push(format!("{label} composition summed to {sum:.6}; rescaled to 1 (normalize = true)"));
        } else {
            ck.err(key, format!("fractions sum to {sum:.6}, not 1 within {SUM_TOLERANCE}; fix them or set normalize = true"));
            return None;
        }
    }
    Some(fractions.iter().map(|x| x / sum).collect())
}

fn composition_u(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    cu: &RawCompositionU,
    fractions: &[f64],
    index_of: &dyn Fn(&str) -> Option<usize>,
) -> Vec<(usize, f64)> {
    let mut out = Vec::new();
    match cu {
        RawCompositionU::All(v) => {
            if let Some(u) = ck.number(key, v, Quantity::Dimensionless) {
                for (i, x) in fractions.iter().enumerate() {
                    if *x > 0.0 && *x < 1.0 {
                        out.push((i, u));
                    }
                }
            }
        }
        RawCompositionU::Each(map) => {
            refuse_repeated_ids(ck, key, map.keys());
            for (id, v) in map {
                let k = key.key(id);
                match (index_of(id), ck.number(&k, v, Quantity::Dimensionless)) {
                    (Some(i), Some(u)) => out.push((i, u)),
                    (None, _) => ck.err(&k, format!("component `{id}` is not in this composition")),
                    _ => {}
                }
            }
        }
    }
    out
}

/// One reaction in the report.
#[derive(Debug, Clone, Serialize)]
pub struct ReactionReport {
    /// Label.
    pub reaction: String,
    /// Key component.
    pub key: String,
    /// Key conversion.
    pub conversion: f64,
    /// Extent, mol/s.
    pub extent_mol_s: f64,
    /// Heat of reaction per mol of key converted at 298.15 K, J/mol.
    pub heat_of_reaction_298_j_mol: f64,
    /// The same at the effluent temperature, J/mol.
    pub heat_of_reaction_outlet_j_mol: f64,
}

/// Element flows.
#[derive(Debug, Clone, Serialize)]
pub struct ElementReport {
    /// Into the reactor, mol/s of atoms.
    pub feed_mol_s: f64,
    /// Out of the reactor.
    pub effluent_mol_s: f64,
    /// (out − in)/in.
    pub relative_closure: f64,
}

/// One input's share of the uncertainty.
#[derive(Debug, Clone, Serialize)]
pub struct ContributionReport {
    /// Input label.
    pub input: String,
    /// Its value (SI).
    pub value: f64,
    /// Its standard uncertainty (SI).
    pub standard_uncertainty: f64,
    /// ∂(unknown)/∂(input).
    pub sensitivity: f64,
    /// |sensitivity|·u, in the unknown's unit.
    pub contribution: f64,
    /// Share of the variance, 0..1.
    pub share: f64,
}

/// Uncertainty of the solved quantity.
#[derive(Debug, Clone, Serialize)]
pub struct UncertaintyJson {
    /// Which quantity (`effluent_temperature_k`, `duty_w`, `conversion`).
    pub quantity: &'static str,
    /// Combined standard uncertainty.
    pub standard_uncertainty: f64,
    /// The input with the largest share.
    pub dominant_input: Option<String>,
    /// Per input.
    pub contributions: Vec<ContributionReport>,
}

/// The result of `calc`, serialized as the `--json` object.
#[derive(Debug, Clone, Serialize)]
pub struct Report {
    /// Case file.
    pub case: String,
    /// `temperature` | `duty` | `conversion`.
    pub solved_for: &'static str,
    /// Effluent temperature, K.
    pub effluent_temperature_k: f64,
    /// Effluent temperature, °C.
    pub effluent_temperature_degc: f64,
    /// Measured effluent temperature (when given and not used as an input), K.
    pub measured_temperature_k: Option<f64>,
    /// Predicted minus measured, K.
    pub residual_k: Option<f64>,
    /// Heater duty, W.
    pub duty_w: f64,
    /// Heat loss, W.
    pub heat_loss_w: f64,
    /// Conversion of the reaction solved for, else of the first reaction.
    pub conversion: Option<f64>,
    /// Per reaction.
    pub reactions: Vec<ReactionReport>,
    /// Total effluent flow, mol/s.
    pub effluent_flow_mol_s: f64,
    /// Effluent mass flow, kg/s.
    pub effluent_mass_flow_kg_s: f64,
    /// Effluent mole fractions.
    pub effluent_composition: IndexMap<String, f64>,
    /// Enthalpy path per component.
    pub enthalpy_path: IndexMap<String, &'static str>,
    /// Feed enthalpy flow, W.
    pub feed_enthalpy_w: f64,
    /// Effluent enthalpy flow, W.
    pub effluent_enthalpy_w: f64,
    /// Effluent heat-capacity flow, W/K.
    pub effluent_heat_capacity_w_k: f64,
    /// Ideal (Raoult) bubble point of the effluent, K.
    pub bubble_point_k: Option<f64>,
    /// Pressure of the bubble point, Pa.
    pub pressure_pa: Option<f64>,
    /// Bubble point minus effluent temperature, K.
    pub bubble_margin_k: Option<f64>,
    /// Element balance.
    pub element_balance: Option<IndexMap<String, ElementReport>>,
    /// `newton` or `brent` when the temperature was solved.
    pub solver: Option<&'static str>,
    /// Machine-readable validity flags.
    pub flags: Vec<String>,
    /// Human-readable warnings.
    pub warnings: Vec<String>,
    /// Caveats of the components used.
    pub component_notes: IndexMap<String, String>,
    /// Standard uncertainty of the effluent temperature, K (temperature solves).
    pub temperature_uncertainty_k: Option<f64>,
    /// Uncertainty of the solved quantity.
    pub uncertainty: Option<UncertaintyJson>,
    /// The cautions.
    pub caution: &'static str,
    #[serde(skip)]
    echo: Echo,
    #[serde(skip)]
    feeds: Vec<(f64, f64, Vec<f64>)>,
}

impl Report {
    fn new(case: &Case, o: &Outcome, u: Option<&UncertaintyReport>) -> Report {
        let sys = &case.system;
        let ids: Vec<String> = sys.components.iter().map(|c| c.id.clone()).collect();
        let x = o.out_fractions();
        let measured = match case.unknown {
            Unknown::Temperature => case.inputs.effluent_temperature,
            _ => None,
        };
        let conversion = match case.unknown {
            Unknown::Conversion(r) => o.conversions.get(r).copied(),
            _ => o.conversions.first().copied(),
        };
        let reactions = sys
            .reactions
            .iter()
            .enumerate()
            .map(|(r, re)| ReactionReport {
                reaction: re.label.clone(),
                key: ids[re.key].clone(),
                conversion: o.conversions[r],
                extent_mol_s: o.extents[r],
                heat_of_reaction_298_j_mol: o.heats_of_reaction[r].0,
                heat_of_reaction_outlet_j_mol: o.heats_of_reaction[r].1,
            })
            .collect();
        let element_balance = if o.elements.is_empty() {
            None
        } else {
            Some(
                o.elements
                    .iter()
                    .map(|(e, a, b)| {
                        (
                            e.clone(),
                            ElementReport {
                                feed_mol_s: *a,
                                effluent_mol_s: *b,
                                relative_closure: if *a != 0.0 { (b - a) / a } else { 0.0 },
                            },
                        )
                    })
                    .collect(),
            )
        };
        let quantity = match case.unknown {
            Unknown::Temperature => "effluent_temperature_k",
            Unknown::Duty => "duty_w",
            Unknown::Conversion(_) => "conversion",
        };
        let uncertainty = u.map(|u| UncertaintyJson {
            quantity,
            standard_uncertainty: u.u,
            dominant_input: u.dominant().map(|c| c.label.clone()),
            contributions: u
                .contributions
                .iter()
                .map(|c| ContributionReport {
                    input: c.label.clone(),
                    value: c.value,
                    standard_uncertainty: c.u,
                    sensitivity: c.sensitivity,
                    contribution: c.contribution,
                    share: c.share,
                })
                .collect(),
        });
        let mut warnings = case.warnings.clone();
        warnings.extend(o.flags.iter().map(ToString::to_string));
        Report {
            case: case.source.path.display().to_string(),
            solved_for: case.unknown.as_str(),
            effluent_temperature_k: o.t_out,
            effluent_temperature_degc: o.t_out - 273.15,
            measured_temperature_k: measured,
            residual_k: measured.map(|m| o.t_out - m),
            duty_w: o.duty,
            heat_loss_w: o.heat_loss,
            conversion,
            reactions,
            effluent_flow_mol_s: o.out_total,
            effluent_mass_flow_kg_s: o.out_mass,
            effluent_composition: ids.iter().cloned().zip(x.iter().copied()).collect(),
            enthalpy_path: ids.iter().cloned().zip(sys.paths.iter().map(|p| p.as_str())).collect(),
            feed_enthalpy_w: o.h_in,
            effluent_enthalpy_w: o.h_out,
            effluent_heat_capacity_w_k: o.cp_out,
            bubble_point_k: o.bubble.as_ref().map(|b| b.t),
            pressure_pa: case.inputs.pressure,
            bubble_margin_k: o.bubble.as_ref().map(|b| b.margin),
            element_balance,
            solver: o.method.map(|m| match m {
                crate::thermo::solver::Method::Newton => "newton",
                crate::thermo::solver::Method::Brent => "brent",
            }),
            flags: o.flags.iter().map(|f| f.code()).collect(),
            warnings,
            component_notes: sys
                .components
                .iter()
                .filter_map(|c| c.note.clone().map(|n| (c.id.clone(), n)))
                .collect(),
            temperature_uncertainty_k: match case.unknown {
                Unknown::Temperature => u.map(|u| u.u),
                _ => None,
            },
            uncertainty,
            caution: crate::CAUTION,
            echo: case.echo.clone(),
            feeds: case
                .inputs
                .feeds
                .iter()
                .zip(&o.feed_flows)
                .map(|(f, flows)| (flows.iter().sum(), f.temperature, sys.mole_fractions(flows, Basis::Mole)))
                .collect(),
        }
    }

    /// The JSON object.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }

    /// A short human-readable summary.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let k = |t: f64| format!("{t:.3} K ({:.2} degC)", t - 273.15);
        let given = |g: &str, si: String| {
            if g.is_empty() || g == si { si } else { format!("{si} (given \"{g}\")") }
        };
        let frac = |m: &[(String, f64)]| {
            m.iter()
                .filter(|(_, x)| *x > 0.0)
                .map(|(id, x)| format!("{id} {x:.4}"))
                .collect::<Vec<_>>()
                .join(", ")
        };
        let ids: Vec<String> = self.enthalpy_path.keys().cloned().collect();
        let _ = write!(s, "efftemp calc: {}\n\n", self.case);
        s.push_str("Inputs\n");
        let _ = writeln!(
            s,
            "  components (enthalpy path): {}",
            self.enthalpy_path.iter().map(|(id, p)| format!("{id} ({p})")).collect::<Vec<_>>().join(", ")
        );
        for (j, (flow, t, x)) in self.feeds.iter().enumerate() {
            let (gf, gt) = self.echo.feeds.get(j).cloned().unwrap_or_default();
            let name = self.echo.feed_names.get(j).cloned().unwrap_or_else(|| format!("feed {}", j + 1));
            let pairs: Vec<(String, f64)> = ids.iter().cloned().zip(x.iter().copied()).collect();
            let _ = writeln!(
                s,
                "  {name}: {} at {}; mole fractions {}",
                given(&gf, format!("{flow:.6} mol/s")),
                given(&gt, k(*t)),
                frac(&pairs)
            );
        }
        let duty_line = match self.solved_for {
            "duty" => "solved for".to_string(),
            _ => given(self.echo.duty.as_deref().unwrap_or(""), format!("{:.3} W", self.duty_w)),
        };
        let _ = writeln!(
            s,
            "  heater duty: {duty_line}; heat loss: {}",
            given(self.echo.heat_loss.as_deref().unwrap_or(""), format!("{:.3} W", self.heat_loss_w))
        );
        for r in &self.reactions {
            let conv = if self.solved_for == "conversion" && Some(r.conversion) == self.conversion {
                "solved for".to_string()
            } else {
                format!("{:.4}", r.conversion)
            };
            let _ = writeln!(s, "  reaction {}: key {}, conversion {conv}", r.reaction, r.key);
        }
        if let Some(t) = self.echo.effluent_temperature.as_deref() {
            let _ = writeln!(s, "  measured effluent temperature: \"{t}\"");
        }
        if let Some(p) = self.pressure_pa {
            let _ = writeln!(
                s,
                "  pressure: {}",
                given(self.echo.pressure.as_deref().unwrap_or(""), format!("{p:.1} Pa"))
            );
        }
        s.push_str("\nResult\n");
        let _ = writeln!(s, "  solved for: {}", self.solved_for);
        let _ = writeln!(s, "  effluent temperature: {}", k(self.effluent_temperature_k));
        if let (Some(m), Some(r)) = (self.measured_temperature_k, self.residual_k) {
            let _ = writeln!(s, "  measured: {}; predicted - measured: {r:+.3} K", k(m));
        }
        let _ = writeln!(s, "  heater duty: {:.3} W ({:.4} MW)", self.duty_w, self.duty_w / 1e6);
        for r in &self.reactions {
            let _ = writeln!(
                s,
                "  reaction {}: conversion {:.6}, extent {:.6} mol/s, heat of reaction {:.3} kJ/mol at 298.15 K, {:.3} kJ/mol at outlet ({})",
                r.reaction,
                r.conversion,
                r.extent_mol_s,
                r.heat_of_reaction_298_j_mol / 1e3,
                r.heat_of_reaction_outlet_j_mol / 1e3,
                if r.heat_of_reaction_outlet_j_mol > 0.0 { "endothermic" } else { "exothermic" }
            );
        }
        let pairs: Vec<(String, f64)> =
            self.effluent_composition.iter().map(|(k, v)| (k.clone(), *v)).collect();
        let _ = writeln!(
            s,
            "  effluent: {:.6} mol/s ({:.6} kg/s); mole fractions {}",
            self.effluent_flow_mol_s,
            self.effluent_mass_flow_kg_s,
            frac(&pairs)
        );
        if let (Some(b), Some(p), Some(m)) = (self.bubble_point_k, self.pressure_pa, self.bubble_margin_k) {
            let _ = writeln!(
                s,
                "  bubble point (ideal solution, Raoult's law) at {p:.0} Pa: {}; margin {m:+.2} K",
                k(b)
            );
        }
        if let Some(eb) = &self.element_balance {
            let worst = eb.values().map(|e| e.relative_closure.abs()).fold(0.0, f64::max);
            let _ = writeln!(s, "  element balance closure: max |out - in|/in = {worst:.2e}");
        }
        if let Some(u) = &self.uncertainty {
            let unit = match u.quantity {
                "effluent_temperature_k" => "K",
                "duty_w" => "W",
                _ => "",
            };
            let _ = write!(
                s,
                "\nUncertainty (first order, inputs uncorrelated)\n  u = {:.4} {unit}",
                u.standard_uncertainty
            );
            if let Some(d) = &u.dominant_input {
                let _ = write!(s, "; dominated by {d}");
            }
            s.push('\n');
            let width = u.contributions.iter().map(|c| c.input.chars().count()).max().unwrap_or(0);
            for c in &u.contributions {
                let _ = writeln!(
                    s,
                    "  {:<width$} u(x) = {:<12.5e} contributes {:.4} {unit} ({:.1} %)",
                    c.input,
                    c.standard_uncertainty,
                    c.contribution,
                    c.share * 100.0
                );
            }
        }
        if !self.warnings.is_empty() {
            s.push_str("\nWarnings\n");
            for w in &self.warnings {
                let _ = writeln!(s, "  - {w}");
            }
        }
        if !self.component_notes.is_empty() {
            s.push_str("\nComponent notes\n");
            for (id, n) in &self.component_notes {
                let _ = writeln!(s, "  - {id}: {n}");
            }
        }
        let _ = write!(s, "\nCaution: {}\n", self.caution);
        s
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn run(text: &str) -> Result<Report, LocatedErrors> {
        Case::check(Arc::new(SourceText::new("case.toml", text)))?.run()
    }

    /// Found by the hostile-input property test (tests/it/hostile.rs): an absurd relative
    /// uncertainty overflowed the propagation and the JSON report carried `null` for the
    /// combined uncertainty. It is now an error located at the input.
    #[test]
    fn overflowing_uncertainty_is_a_located_error() {
        let case = |u: &str| {
            format!(
                "[[feed]]\nflow = \"38.5 kmol/h\"\ntemperature = \"46.5 degC\"\ncomposition = {{ water = 1.0 }}\nflow_uncertainty = \"{u}\"\n[effluent]\ntemperature = \"63.4 degC\"\n[heater]\nheat_loss = \"6 kW\"\n[solve]\nunknown = \"duty\"\n"
            )
        };
        let ok = run(&case("1 %")).unwrap();
        assert!(ok.uncertainty.as_ref().is_some_and(|u| u.standard_uncertainty.is_finite()));
        let err = run(&case("1e308 %")).unwrap_err();
        assert_eq!(err.0.len(), 1);
        let e = &err.0[0];
        assert_eq!(
            e.location.key.as_ref().map(ToString::to_string).as_deref(),
            Some("feed[1].flow_uncertainty")
        );
        assert_eq!(e.location.line_col.map(|(l, _)| l), Some(5));
        assert!(e.message.contains("too large"), "{e}");
    }
}
