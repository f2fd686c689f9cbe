//! The `calc` case file: one steady-state balance for engineering what-ifs.
//!
//! Two stages: [`RawCase`] mirrors the TOML exactly (`deny_unknown_fields`, in `raw.rs`), then
//! [`Case::check`] resolves components, units, compositions and the unknown into a
//! [`System`] plus [`Inputs`], reporting every problem with file, line and key (here, section
//! by section, through the one checker of the configuration files). [`Case::run`] solves and
//! returns a [`Report`] (in `report.rs`), which renders as JSON or as a short human summary.

use std::path::Path;
use std::sync::Arc;

use indexmap::IndexMap;

use super::check::{Checker, Percent};
use crate::source::{KeyPath, LocatedErrors, SourceText};
use crate::thermo::Component;
use crate::thermo::balance::{
    DEFAULT_BOUNDS, Effluent, FeedInput, FlowValue, Inputs, PathChoice, Reaction, System, SystemError,
    Unknown,
};
use crate::thermo::component::{Library, Origin, normalize_id};
use crate::thermo::uncertainty::{InputRef, Uncertain};
use crate::units::{Number, Quantity};

mod liquid;
mod raw;
mod report;

pub use liquid::SAFE_FLOOR_K;

pub use raw::*;
pub use report::*;

/// Default bubble-point margin, K: the ideal-solution bubble point of the aqueous mixtures in
/// the vetted reference data is 0.5–12.9 K above the measured one (common practice: keep a
/// margin of that size before calling a liquid safely sub-cooled).
pub const DEFAULT_BUBBLE_MARGIN: f64 = 10.0;

/// Tolerance on the sum of fractions.
pub const SUM_TOLERANCE: f64 = 1e-3;

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
    /// The effluent's liquid floor, K, and what sets it (see [`SAFE_FLOOR_K`]): a solved
    /// effluent temperature below it is flagged.
    pub effluent_floor: Option<(f64, String)>,
}

/// What the checks of the sections add to as they go.
#[derive(Default)]
struct Collected {
    /// Inputs with uncertainties.
    uncertain: Vec<Uncertain>,
    /// How inputs were written.
    echo: Echo,
    /// Notes for the report.
    warnings: Vec<String>,
}

/// The components of the case, in order of first use.
struct Components {
    /// Ids as first written.
    ids: Vec<String>,
    /// The key of each id's first use.
    first_use: Vec<KeyPath>,
    /// The resolved components (all of them only when no id had an error).
    resolved: Vec<Component>,
}

impl Components {
    fn index_of(&self, id: &str) -> Option<usize> {
        self.ids.iter().position(|k| normalize_id(k) == normalize_id(id))
    }

    fn len(&self) -> usize {
        self.ids.len()
    }
}

/// `[model]`, checked.
struct ModelSettings {
    global: PathChoice,
    choices: Vec<PathChoice>,
    pressure: Option<f64>,
    bubble_margin: f64,
    bounds: (f64, f64),
}

/// The given values of `[heater]` and `[effluent]`, SI.
struct Given {
    duty: Option<f64>,
    heat_loss: f64,
    effluent_temperature: Option<f64>,
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
        let mut errors = Vec::new();
        let mut ck = Checker::new(&src, &mut errors);
        let mut out = Collected::default();
        let library = library(&mut ck, &raw, &src)?;
        let comps = components(&mut ck, &raw, &library, &src, &mut out.warnings);
        if raw.feed.is_empty() {
            ck.err(&KeyPath::root(), "the case has no [[feed]] table: at least one feed is required");
        }
        let model = model(&mut ck, &raw.model, &comps);
        let feeds = feeds(&mut ck, &raw.feed, &comps, &mut out);
        let (reactions, conversions) = reactions(&mut ck, &raw.reaction, &comps, &mut out.uncertain);

        let eff = raw.effluent.clone().unwrap_or_default();
        let heater = raw.heater.clone().unwrap_or_default();
        let given = Given {
            effluent_temperature: eff
                .temperature
                .as_ref()
                .and_then(|t| ck.temperature(&KeyPath::keys("effluent.temperature"), t)),
            duty: heater
                .duty
                .as_ref()
                .and_then(|d| ck.number(&KeyPath::keys("heater.duty"), d, Quantity::Power)),
            heat_loss: heater
                .heat_loss
                .as_ref()
                .and_then(|d| ck.number(&KeyPath::keys("heater.heat_loss"), d, Quantity::Power))
                .unwrap_or(0.0),
        };
        let unknown = unknown(&mut ck, &raw, &conversions);
        given_uncertainties(&mut ck, &raw, unknown, &given, &mut out.uncertain);
        let no_reactions = reactions.is_empty() && raw.reaction.is_empty();
        let effluent = effluent(&mut ck, &eff, no_reactions, conversions, &comps, &mut out);
        let present = effluent_components(&effluent, &feeds, &reactions, comps.len());
        let effluent_floor = liquid::stream_floor(&present, &comps);
        if let (Some(v), Some(t)) = (&eff.temperature, given.effluent_temperature) {
            let key = KeyPath::keys("effluent.temperature");
            liquid::check_liquid_temperature(
                &mut ck,
                &key,
                v,
                t,
                &present,
                &comps,
                "the effluent's components",
            );
        }
        if matches!(effluent, Effluent::Measured { .. }) && matches!(unknown, Unknown::Conversion(_)) {
            ck.err(
                &KeyPath::keys("solve.unknown"),
                "a measured effluent composition leaves no conversion to solve for",
            );
        }

        out.echo.duty = heater.duty.as_ref().map(Number::as_written);
        out.echo.heat_loss = heater.heat_loss.as_ref().map(Number::as_written);
        out.echo.effluent_temperature = eff.temperature.as_ref().map(Number::as_written);
        out.echo.pressure = raw.model.pressure.as_ref().map(Number::as_written);

        if !errors.is_empty() {
            return Err(LocatedErrors(errors));
        }
        let system = System::new(comps.resolved, &model.choices, raw.model.watson_n, reactions, model.bounds)
            .map_err(|e| {
                let key = system_error_key(&raw, &comps.first_use, &e);
                let note = match (&e, model.global) {
                    (SystemError::MissingPathData { .. }, PathChoice::Force(_)) => {
                        format!(" ([model] enthalpy = \"{}\")", path_label(model.global))
                    }
                    _ => String::new(),
                };
                LocatedErrors::from(src.error_at(&key, format!("{e}{note}")))
            })?;
        let inputs = Inputs {
            feeds,
            effluent,
            duty: given.duty,
            heat_loss: given.heat_loss,
            effluent_temperature: given.effluent_temperature,
            pressure: model.pressure,
            bubble_margin: model.bubble_margin,
        };
        let Collected { uncertain, echo, warnings } = out;
        Ok(Case { source: src, system, inputs, unknown, uncertain, echo, warnings, effluent_floor })
    }
}

/// The component library: built-in, `[model] libraries` (relative to the case file), then the
/// inline `[components]`.
fn library(ck: &mut Checker<'_>, raw: &RawCase, src: &Arc<SourceText>) -> Result<Library, LocatedErrors> {
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
                ck.extend(e.0);
            }
        }
    }
    for (id, spec) in &raw.components {
        let key = KeyPath::keys("components").key(id);
        library.add(id, spec.clone(), Origin { source: src.clone(), key });
    }
    Ok(library)
}

/// The system's components (feeds, then reactions, then the effluent), resolved; an inline
/// component that is not used is checked too, and noted.
fn components(
    ck: &mut Checker<'_>,
    raw: &RawCase,
    library: &Library,
    src: &SourceText,
    warnings: &mut Vec<String>,
) -> Components {
    let mut comps = Components { ids: Vec::new(), first_use: Vec::new(), resolved: Vec::new() };
    let mut note = |id: &str, key: KeyPath| {
        if comps.index_of(id).is_none() {
            comps.ids.push(id.to_string());
            comps.first_use.push(key);
        }
    };
    for (j, f) in raw.feed.iter().enumerate() {
        for id in f.composition.keys() {
            note(id, KeyPath::keys("feed").index(j).key("composition").key(id));
        }
    }
    for (r, re) in raw.reaction.iter().enumerate() {
        for id in re.stoichiometry.keys() {
            note(id, KeyPath::keys("reaction").index(r).key("stoichiometry").key(id));
        }
    }
    if let Some(comp) = raw.effluent.as_ref().and_then(|e| e.composition.as_ref()) {
        for id in comp.keys() {
            note(id, KeyPath::keys("effluent.composition").key(id));
        }
    }
    for (id, key) in comps.ids.iter().zip(&comps.first_use) {
        if !library.contains(id) {
            ck.push(library.unknown(id, src, key));
            continue;
        }
        match library.resolve(id) {
            Ok(c) => comps.resolved.push(c),
            Err(e) => ck.extend(e.0),
        }
    }
    for id in raw.components.keys() {
        if comps.index_of(id).is_none() {
            // Check it anyway: a bad definition is an error even before it is used.
            match library.resolve(id) {
                Ok(_) => warnings.push(format!("component `{id}` is defined but not used")),
                Err(e) => ck.extend(e.0),
            }
        }
    }
    comps
}

/// `[model]`: enthalpy paths, Watson exponent, pressure, bubble margin, temperature range.
fn model(ck: &mut Checker<'_>, m: &RawModel, comps: &Components) -> ModelSettings {
    let global = match m.enthalpy.as_deref() {
        None => PathChoice::Auto,
        Some(s) => PathChoice::parse(s).unwrap_or_else(|| {
            ck.err(
                &KeyPath::keys("model.enthalpy"),
                format!("unknown enthalpy path `{s}`; use \"auto\", \"ideal-gas-watson\" or \"liquid-cp\""),
            );
            PathChoice::Auto
        }),
    };
    let mut choices = vec![global; comps.len()];
    for (id, s) in &m.component_enthalpy {
        let key = KeyPath::keys("model.component_enthalpy").key(id);
        match (comps.index_of(id), PathChoice::parse(s)) {
            (Some(i), Some(c)) => choices[i] = c,
            (None, _) => ck.err(&key, format!("component `{id}` is not used in this case")),
            (_, None) => ck.err(
                &key,
                format!("unknown enthalpy path `{s}`; use \"auto\", \"ideal-gas-watson\" or \"liquid-cp\""),
            ),
        }
    }
    if let Some(n) = m.watson_n
        && !(n > 0.0 && n <= 1.0)
    {
        ck.err(&KeyPath::keys("model.watson_n"), format!("Watson exponent must be in (0, 1], got {n}"));
    }
    let pressure = m.pressure.as_ref().and_then(|p| {
        let key = KeyPath::keys("model.pressure");
        let v = ck.number(&key, p, Quantity::Pressure)?;
        if v <= 0.0 {
            ck.err(&key, format!("absolute pressure must be positive, got {v} Pa"));
            return None;
        }
        Some(v)
    });
    let bubble_margin = m
        .bubble_margin
        .as_ref()
        .and_then(|b| {
            let key = KeyPath::keys("model.bubble_margin");
            let v = ck.number(&key, b, Quantity::TemperatureDifference)?;
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
    let bounds = match &m.temperature_range {
        None => DEFAULT_BOUNDS,
        Some([lo, hi]) => {
            let key = KeyPath::keys("model.temperature_range");
            match (ck.temperature(&key.index(0), lo), ck.temperature(&key.index(1), hi)) {
                (Some(lo), Some(hi)) => ck.range(&key, lo, hi).unwrap_or(DEFAULT_BOUNDS),
                _ => DEFAULT_BOUNDS,
            }
        }
    };
    ModelSettings { global, choices, pressure, bubble_margin, bounds }
}

/// `[[feed]]`: every feed, each with its own name.
fn feeds(ck: &mut Checker<'_>, raw: &[RawFeed], comps: &Components, out: &mut Collected) -> Vec<FeedInput> {
    let mut feeds = Vec::new();
    let mut labels: Vec<String> = Vec::new();
    for (j, f) in raw.iter().enumerate() {
        let key = KeyPath::keys("feed").index(j);
        let label = f.name.clone().unwrap_or_else(|| format!("feed {}", j + 1));
        if let Some(first) = labels.iter().position(|l| l.trim() == label.trim()) {
            ck.err(
                &key.key("name"),
                format!("feed {} is also called `{label}`: give each feed its own name", first + 1),
            );
        }
        labels.push(label.clone());
        let flow = feed_flow(ck, &key, f.flow.as_ref());
        let temperature = match &f.temperature {
            None => {
                ck.err(&key, "temperature is required");
                None
            }
            Some(v) => ck.temperature(&key.key("temperature"), v),
        };
        let basis = ck.basis(&key.key("basis"), f.basis.as_ref());
        let fractions = composition(
            ck,
            &key.key("composition"),
            &f.composition,
            f.normalize,
            comps,
            &mut out.warnings,
            &label,
        );
        let (Some(flow), Some(temperature), Some(fractions)) = (flow, temperature, fractions) else {
            continue;
        };
        if let Some(v) = &f.temperature {
            let present: Vec<bool> = fractions.iter().map(|x| *x > 0.0).collect();
            let what = format!("{label}'s components");
            liquid::check_liquid_temperature(
                ck,
                &key.key("temperature"),
                v,
                temperature,
                &present,
                comps,
                &what,
            );
        }
        feed_uncertainties(
            ck,
            &key,
            j,
            f,
            (flow, temperature, &fractions),
            comps,
            &label,
            &mut out.uncertain,
        );
        feeds.push(FeedInput { flow, temperature, fractions, basis });
        out.echo.feeds.push((
            f.flow.as_ref().map(Number::as_written).unwrap_or_default(),
            f.temperature.as_ref().map(Number::as_written).unwrap_or_default(),
        ));
        out.echo.feed_names.push(label);
    }
    feeds
}

/// A feed's total flow: positive, molar or mass.
fn feed_flow(ck: &mut Checker<'_>, key: &KeyPath, flow: Option<&Number>) -> Option<FlowValue> {
    let Some(v) = flow else {
        ck.err(key, "flow is required");
        return None;
    };
    let (x, q) = ck.number_any(&key.key("flow"), v, &[Quantity::MolarFlow, Quantity::MassFlow])?;
    if x > 0.0 {
        return Some(if q == Quantity::MassFlow { FlowValue::Mass(x) } else { FlowValue::Molar(x) });
    }
    let si = if q == Quantity::MassFlow { "kg/s" } else { "mol/s" };
    ck.err(&key.key("flow"), format!("flow must be positive, got {x} {si} (given `{}`)", v.as_written()));
    None
}

/// An input's standard uncertainty at its value (`"x %"` is a percentage of the value).
fn input_u(ck: &mut Checker<'_>, key: &KeyPath, u: &Number, value: f64, q: Quantity) -> Option<f64> {
    ck.uncertainty(key, u, q, Percent::OfValue).map(|u| u.at(value))
}

/// The uncertainties of a checked feed's flow, temperature and fractions.
#[allow(clippy::too_many_arguments)]
fn feed_uncertainties(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    j: usize,
    f: &RawFeed,
    (flow, temperature, fractions): (FlowValue, f64, &[f64]),
    comps: &Components,
    label: &str,
    uncertain: &mut Vec<Uncertain>,
) {
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
        } else if let Some(u) = input_u(ck, &ukey, u, flow.value(), q) {
            uncertain.push(Uncertain { input: InputRef::FeedFlow(j), u, label: format!("{label} flow") });
        }
    }
    if let Some(u) = &f.temperature_uncertainty
        && let Some(u) =
            input_u(ck, &key.key("temperature_uncertainty"), u, temperature, Quantity::TemperatureDifference)
    {
        uncertain.push(Uncertain {
            input: InputRef::FeedTemperature(j),
            u,
            label: format!("{label} temperature"),
        });
    }
    if let Some(cu) = &f.composition_uncertainty {
        for (i, u) in composition_u(ck, &key.key("composition_uncertainty"), cu, fractions, comps) {
            uncertain.push(Uncertain {
                input: InputRef::FeedFraction(j, i),
                u,
                label: format!("{label} {} fraction", comps.ids[i]),
            });
        }
    }
}

/// `[[reaction]]`: the reactions with a valid key, and their conversions (None when not
/// given: the unknown, or an error).
fn reactions(
    ck: &mut Checker<'_>,
    raw: &[RawReaction],
    comps: &Components,
    uncertain: &mut Vec<Uncertain>,
) -> (Vec<Reaction>, Vec<Option<f64>>) {
    let mut reactions = Vec::new();
    let mut conversions: Vec<Option<f64>> = Vec::new();
    for (r, re) in raw.iter().enumerate() {
        let key = KeyPath::keys("reaction").index(r);
        if re.stoichiometry.is_empty() {
            ck.err(&key, "stoichiometry is required, e.g. { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }");
            continue;
        }
        let nu = stoichiometry(ck, &key.key("stoichiometry"), re, comps);
        let key_idx = match &re.key {
            None => {
                ck.err(&key, "key is required: the reactant whose conversion is given or solved for");
                None
            }
            Some(k) => {
                match (comps.index_of(k), re.stoichiometry.keys().any(|s| normalize_id(s) == normalize_id(k)))
                {
                    (Some(i), true) => Some(i),
                    _ => {
                        ck.err(&key.key("key"), format!("key `{k}` is not in this reaction's stoichiometry"));
                        None
                    }
                }
            }
        };
        let conversion = re.conversion.as_ref().and_then(|c| {
            let x = ck.number(&key.key("conversion"), c, Quantity::Dimensionless)?;
            if !(0.0..=1.0).contains(&x) {
                // Kept as given, so that no second error says it is missing.
                ck.err(
                    &key.key("conversion"),
                    format!(
                        "conversion must be within 0..1 (0 <= X <= 1, the fraction of the key fed that reacts), got {x} (given `{}`)",
                        c.as_written()
                    ),
                );
            }
            Some(x)
        });
        if let Some(u) = &re.conversion_uncertainty
            && let Some(u) = input_u(
                ck,
                &key.key("conversion_uncertainty"),
                u,
                conversion.unwrap_or(0.0),
                Quantity::Dimensionless,
            )
        {
            uncertain.push(Uncertain {
                input: InputRef::Conversion(r),
                u,
                label: format!("reaction {} conversion", r + 1),
            });
        }
        if let Some(k) = key_idx {
            reactions.push(Reaction { label: reaction_label(re), nu, key: k });
            conversions.push(conversion);
        }
    }
    (reactions, conversions)
}

/// The coefficients of a reaction per system component.
fn stoichiometry(ck: &mut Checker<'_>, key: &KeyPath, re: &RawReaction, comps: &Components) -> Vec<f64> {
    let mut nu = vec![0.0; comps.len()];
    refuse_repeated_ids(ck, key, re.stoichiometry.keys());
    for (id, coef) in &re.stoichiometry {
        if !coef.is_finite() {
            ck.err(&key.key(id), "coefficient is not finite");
        }
        if let Some(i) = comps.index_of(id) {
            nu[i] += coef;
        }
    }
    nu
}

/// A reaction's name, or its equation (`a + 2 b -> c`).
fn reaction_label(re: &RawReaction) -> String {
    let reactants: Vec<String> =
        re.stoichiometry.iter().filter(|(_, c)| **c < 0.0).map(|(id, c)| term(-c, id)).collect();
    let products: Vec<String> =
        re.stoichiometry.iter().filter(|(_, c)| **c > 0.0).map(|(id, c)| term(*c, id)).collect();
    re.name.clone().unwrap_or_else(|| format!("{} -> {}", reactants.join(" + "), products.join(" + ")))
}

/// `[solve] unknown`, with the inputs each choice needs and must not have.
fn unknown(ck: &mut Checker<'_>, raw: &RawCase, conversions: &[Option<f64>]) -> Unknown {
    let has_duty = raw.heater.as_ref().is_some_and(|h| h.duty.is_some());
    let has_temperature = raw.effluent.as_ref().is_some_and(|e| e.temperature.is_some());
    let solve_key = KeyPath::keys("solve.unknown");
    let missing_conv: Vec<usize> =
        conversions.iter().enumerate().filter(|(_, c)| c.is_none()).map(|(r, _)| r).collect();
    let need_conversions = |ck: &mut Checker<'_>, what: &str| {
        for &r in &missing_conv {
            ck.err(
                &KeyPath::keys("reaction").index(r),
                format!("conversion is required when solving for the {what}"),
            );
        }
    };
    let unknown = match raw.solve.unknown.as_deref().unwrap_or("temperature").trim() {
        "temperature" => {
            if !has_duty {
                ck.err(
                    &KeyPath::keys("heater"),
                    "[heater] duty is required when solving for the temperature",
                );
            }
            need_conversions(ck, "temperature");
            Unknown::Temperature
        }
        "duty" => {
            if has_duty {
                ck.err(&KeyPath::keys("heater.duty"), "remove the duty when solving for it");
            }
            if !has_temperature {
                ck.err(
                    &KeyPath::keys("effluent"),
                    "[effluent] temperature is required when solving for the duty",
                );
            }
            need_conversions(ck, "duty");
            Unknown::Duty
        }
        "conversion" => solve_for_conversion(ck, raw, has_duty, has_temperature, &missing_conv),
        other => {
            ck.err(&solve_key, format!("unknown `{other}`; use \"temperature\", \"duty\" or \"conversion\""));
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
    unknown
}

/// `[solve] unknown = "conversion"`: the one reaction without a conversion.
fn solve_for_conversion(
    ck: &mut Checker<'_>,
    raw: &RawCase,
    has_duty: bool,
    has_temperature: bool,
    missing_conv: &[usize],
) -> Unknown {
    let solve_key = KeyPath::keys("solve.unknown");
    if !has_temperature {
        ck.err(
            &KeyPath::keys("effluent"),
            "[effluent] temperature is required when solving for the conversion",
        );
    }
    if !has_duty {
        ck.err(&KeyPath::keys("heater"), "[heater] duty is required when solving for the conversion");
    }
    if raw.reaction.is_empty() {
        ck.err(&solve_key, "solving for the conversion needs a [[reaction]]");
    }
    match missing_conv {
        [r] => Unknown::Conversion(*r),
        [] => {
            if !raw.reaction.is_empty() {
                ck.err(&solve_key, "every reaction has a conversion: remove the one to solve for");
            }
            Unknown::Conversion(0)
        }
        _ => {
            ck.err(&solve_key, "more than one reaction lacks a conversion: give all but one");
            Unknown::Conversion(0)
        }
    }
}

/// The uncertainties of the duty, the heat loss and the measured effluent temperature (the
/// unknown has none; a measured temperature is an input only when it is not solved for).
fn given_uncertainties(
    ck: &mut Checker<'_>,
    raw: &RawCase,
    unknown: Unknown,
    given: &Given,
    uncertain: &mut Vec<Uncertain>,
) {
    let heater = raw.heater.clone().unwrap_or_default();
    if let Some(u) = &heater.duty_uncertainty {
        let key = KeyPath::keys("heater.duty_uncertainty");
        if unknown == Unknown::Duty {
            ck.err(&key, "the duty is the unknown: it has no input uncertainty");
        } else if let Some(u) = input_u(ck, &key, u, given.duty.unwrap_or(0.0), Quantity::Power) {
            uncertain.push(Uncertain { input: InputRef::Duty, u, label: "heater duty".into() });
        }
    }
    if let Some(u) = &heater.heat_loss_uncertainty
        && let Some(u) =
            input_u(ck, &KeyPath::keys("heater.heat_loss_uncertainty"), u, given.heat_loss, Quantity::Power)
    {
        uncertain.push(Uncertain { input: InputRef::HeatLoss, u, label: "heat loss".into() });
    }
    if let Some(u) = raw.effluent.as_ref().and_then(|e| e.temperature_uncertainty.as_ref())
        && let Some(u) = input_u(
            ck,
            &KeyPath::keys("effluent.temperature_uncertainty"),
            u,
            given.effluent_temperature.unwrap_or(0.0),
            Quantity::TemperatureDifference,
        )
        && unknown != Unknown::Temperature
    {
        uncertain.push(Uncertain {
            input: InputRef::EffluentTemperature,
            u,
            label: "effluent temperature".into(),
        });
    }
}

/// The effluent: measured (`[effluent] composition`, only without reactions), reacted, or
/// the feeds mixed.
fn effluent(
    ck: &mut Checker<'_>,
    eff: &RawEffluent,
    no_reactions: bool,
    conversions: Vec<Option<f64>>,
    comps: &Components,
    out: &mut Collected,
) -> Effluent {
    let comp = match (&eff.composition, no_reactions) {
        (Some(_), false) => {
            ck.err(
                &KeyPath::keys("effluent.composition"),
                "give either reactions with conversions or a measured effluent composition, not both",
            );
            return Effluent::Mixed;
        }
        (Some(comp), true) => comp,
        (None, false) => return Effluent::Reacted { conversions },
        (None, true) => return Effluent::Mixed,
    };
    let key = KeyPath::keys("effluent.composition");
    let basis = ck.basis(&KeyPath::keys("effluent.basis"), eff.basis.as_ref());
    let Some(fractions) = composition(ck, &key, comp, eff.normalize, comps, &mut out.warnings, "effluent")
    else {
        return Effluent::Mixed;
    };
    if let Some(cu) = &eff.composition_uncertainty {
        let ukey = KeyPath::keys("effluent.composition_uncertainty");
        for (i, u) in composition_u(ck, &ukey, cu, &fractions, comps) {
            out.uncertain.push(Uncertain {
                input: InputRef::EffluentFraction(i),
                u,
                label: format!("effluent {} fraction", comps.ids[i]),
            });
        }
    }
    Effluent::Measured { fractions, basis }
}

/// The components that can be in the effluent: those of a measured composition, else those
/// fed and those a reaction makes.
fn effluent_components(
    effluent: &Effluent,
    feeds: &[FeedInput],
    reactions: &[Reaction],
    n: usize,
) -> Vec<bool> {
    match effluent {
        Effluent::Measured { fractions, .. } => fractions.iter().map(|x| *x > 0.0).collect(),
        _ => (0..n)
            .map(|i| {
                feeds.iter().any(|f| f.fractions.get(i).is_some_and(|x| *x > 0.0))
                    || reactions.iter().any(|r| r.nu.get(i).is_some_and(|nu| *nu > 0.0))
            })
            .collect(),
    }
}

/// Where a system error is best reported: the key that chose the path, defined the
/// component or wrote the reaction.
fn system_error_key(raw: &RawCase, first_use: &[KeyPath], e: &SystemError) -> KeyPath {
    match e {
        SystemError::MissingPathData { index, component, .. }
        | SystemError::NoPath { index, component, .. } => {
            if raw.model.component_enthalpy.keys().any(|k| normalize_id(k) == normalize_id(component)) {
                KeyPath::keys("model.component_enthalpy").key(component)
            } else if raw.components.keys().any(|k| normalize_id(k) == normalize_id(component)) {
                KeyPath::keys("components").key(component)
            } else if raw.model.enthalpy.is_some() {
                KeyPath::keys("model.enthalpy")
            } else {
                first_use[*index].clone()
            }
        }
        SystemError::KeyNotReactant { reaction, .. } => KeyPath::keys("reaction").index(*reaction).key("key"),
        SystemError::Unbalanced { reaction, .. } => {
            KeyPath::keys("reaction").index(*reaction).key("stoichiometry")
        }
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
fn composition(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    comp: &IndexMap<String, Number>,
    normalize: bool,
    comps: &Components,
    warnings: &mut Vec<String>,
    label: &str,
) -> Option<Vec<f64>> {
    if comp.is_empty() {
        ck.err(key, "composition is required, e.g. { water = 0.7, methanol = 0.3 }");
        return None;
    }
    let mut fractions = vec![0.0; comps.len()];
    let mut ok = refuse_repeated_ids(ck, key, comp.keys());
    for (id, v) in comp {
        let k = key.key(id);
        match ck.number(&k, v, Quantity::Dimensionless) {
            Some(x) if x < 0.0 => {
                ck.err(&k, format!("fraction must not be negative, got {x}"));
                ok = false;
            }
            Some(x) => {
                if let Some(i) = comps.index_of(id) {
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

/// The uncertainties of a composition's fractions (absolute: `"0.5 %"` is 0.005): one for every
/// fraction strictly between 0 and 1, or one per component.
fn composition_u(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    cu: &RawCompositionU,
    fractions: &[f64],
    comps: &Components,
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
                match (comps.index_of(id), ck.number(&k, v, Quantity::Dimensionless)) {
                    (Some(i), Some(u)) => out.push((i, u)),
                    (None, _) => ck.err(&k, format!("component `{id}` is not in this composition")),
                    _ => {}
                }
            }
        }
    }
    out
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

    /// The one error of a case that must fail: (key, line, message).
    fn only_error(text: &str) -> (String, usize, String) {
        let err = run(text).map(|r| r.effluent_temperature_k).unwrap_err();
        assert_eq!(err.0.len(), 1, "{err}");
        let e = &err.0[0];
        let key = e.location.key.as_ref().map(ToString::to_string).unwrap_or_default();
        (key, e.location.line_col.map_or(0, |(l, _)| l), e.message.clone())
    }

    fn water_feed(temperature: &str) -> String {
        format!(
            "[[feed]]\nflow = 10.0\ntemperature = {temperature}\ncomposition = {{ water = 1.0 }}\n[heater]\nduty = \"100 kW\"\n"
        )
    }

    /// A bare °C value read as K is refused at the key, with the value and a unit hint.
    /// Source of the limit: config/components.toml, water `cp_liq_range` and `psat_range`
    /// start at 273.16 K (Perry's 8th ed. Tables 2-153 and 2-8, as in the shared reference
    /// components.csv).
    #[test]
    fn a_bare_degc_feed_temperature_is_refused_with_a_unit_hint() {
        let (key, line, msg) = only_error(&water_feed("57"));
        assert_eq!((key.as_str(), line), ("feed[1].temperature", 3));
        assert!(
            msg.contains("57.00 K (given `57`; a bare number is in K) is too cold for a liquid"),
            "{msg}"
        );
        assert!(msg.contains("start at 273.16 K (water: start of its cp_liq and psat ranges)"), "{msg}");
        assert!(msg.contains("no melting points"), "{msg}");
        assert!(msg.ends_with("did you mean \"57 degC\"?"), "{msg}");
        // Written in K, the same hint; written in degC, none (the unit was meant).
        let (_, _, msg) = only_error(&water_feed("\"57 K\""));
        assert!(msg.ends_with("did you mean \"57 degC\"?"), "{msg}");
        let (key, _, msg) = only_error(&water_feed("\"-20 degC\""));
        assert_eq!(key, "feed[1].temperature");
        assert!(msg.contains("253.15 K (given `-20 degC`)") && !msg.contains("did you mean"), "{msg}");
        // At the limit and in °C, the case runs.
        assert!(run(&water_feed("273.16")).is_ok());
        assert!(run(&water_feed("\"57 degC\"")).is_ok());
    }

    /// A mixture is refused only below the lowest liquid limit of its components (freezing-point
    /// depression): water with methanol at 250 K runs. Source: config/components.toml,
    /// methanol `cp_liq_range` and `psat_range` start at 175.47 K (Perry's 8th ed.).
    #[test]
    fn a_mixture_is_refused_below_the_lowest_liquid_limit_of_its_components() {
        let case = |t: &str| {
            format!(
                "[[feed]]\nflow = 10.0\ntemperature = {t}\ncomposition = {{ water = 0.5, methanol = 0.5 }}\n[heater]\nduty = \"100 kW\"\n"
            )
        };
        assert!(run(&case("250.0")).is_ok());
        let (key, _, msg) = only_error(&case("150"));
        assert_eq!(key, "feed[1].temperature");
        assert!(msg.contains("start at 175.47 K (methanol: start of its cp_liq and psat ranges)"), "{msg}");
        assert!(msg.contains("did you mean \"150 degC\"?"), "{msg}");
    }

    /// Pure acetic acid is refused below 289.81 K, and 285 K is no °C slip (285 °C would be a
    /// strange misreading of a value above 0 °C in K): no hint. Source: config/components.toml,
    /// acetic acid `cp_liq_range` and `psat_range` start at 289.81 K (Perry's 8th ed.); it
    /// melts at about 289.8 K, 16.6 °C (from memory).
    #[test]
    fn a_value_above_0_degc_in_k_gets_no_unit_hint() {
        let case = "[[feed]]\nflow = 1.0\ntemperature = 285.0\ncomposition = { acetic_acid = 1.0 }\n[heater]\nduty = \"1 kW\"\n";
        let (key, _, msg) = only_error(case);
        assert_eq!(key, "feed[1].temperature");
        assert!(
            msg.contains("start at 289.81 K (acetic_acid: start of its cp_liq and psat ranges)"),
            "{msg}"
        );
        assert!(!msg.contains("did you mean"), "{msg}");
        assert!(run(&case.replace("285.0", "290.0")).is_ok());
    }

    /// A component without liquid ranges falls back to the safe floor; above every range and
    /// critical temperature nothing is liquid. Source: the floor is this module's documented
    /// choice; water's highest limit is the end of its cp_ig range, 1000 K (Poling, Prausnitz,
    /// O'Connell 5th ed. Appendix A, via components.csv).
    #[test]
    fn no_liquid_range_uses_the_floor_and_too_hot_is_refused() {
        let inline = "[components.solvent_x]\nmolar_mass = 100.0\ntc = 550.0\ntb = 400.0\nhvap_tb = 35000.0\nhf_ig = -200000.0\ncp_ig = [50.0, 0.3]\n";
        let case = |t: &str| {
            format!(
                "{inline}[[feed]]\nflow = 1.0\ntemperature = {t}\ncomposition = {{ solvent_x = 1.0 }}\n[heater]\nduty = 1.0\n"
            )
        };
        let (key, line, msg) = only_error(&case("90"));
        assert_eq!((key.as_str(), line), ("feed[1].temperature", 10));
        assert!(
            msg.contains(&format!("start at {SAFE_FLOOR_K:.2} K (solvent_x: no cp_liq_range or psat_range")),
            "{msg}"
        );
        assert!(msg.contains("did you mean \"90 degC\"?"), "{msg}");
        let (key, _, msg) = only_error(&water_feed("\"1500 K\""));
        assert_eq!(key, "feed[1].temperature");
        assert!(msg.contains("1500.00 K (given `1500 K`) is above every correlation range"), "{msg}");
        assert!(msg.contains("the highest is 1000.00 K, water: end of its cp_ig range"), "{msg}");
    }

    /// The effluent temperature of a duty solve is checked like a feed's.
    #[test]
    fn a_bare_degc_effluent_temperature_is_refused() {
        let case = "[[feed]]\nflow = 10.0\ntemperature = \"40 degC\"\ncomposition = { water = 1.0 }\n[effluent]\ntemperature = 63\n[solve]\nunknown = \"duty\"\n";
        let (key, line, msg) = only_error(case);
        assert_eq!((key.as_str(), line), ("effluent.temperature", 6));
        assert!(msg.contains("the liquid data of the effluent's components start at 273.16 K"), "{msg}");
        assert!(msg.ends_with("did you mean \"63 degC\"?"), "{msg}");
    }

    /// A given conversion outside 0..1 is refused at its key, with the allowed range.
    #[test]
    fn a_conversion_outside_0_to_1_is_refused_at_its_key() {
        let case = |x: &str| {
            format!(
                "[[feed]]\nflow = 10.0\ntemperature = 330.0\ncomposition = {{ water = 0.7, methyl_acetate = 0.3 }}\n[[reaction]]\nstoichiometry = {{ methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }}\nkey = \"methyl_acetate\"\nconversion = {x}\n[heater]\nduty = 1.0\n"
            )
        };
        for (x, got) in [("1.2", "got 1.2"), ("-0.1", "got -0.1"), ("\"120 %\"", "got 1.2")] {
            let (key, line, msg) = only_error(&case(x));
            assert_eq!((key.as_str(), line), ("reaction[1].conversion", 8), "{x}");
            assert!(
                msg.contains("conversion must be within 0..1 (0 <= X <= 1") && msg.contains(got),
                "{x}: {msg}"
            );
        }
        assert!(run(&case("1.0")).is_ok());
        assert!(run(&case("0")).is_ok());
    }

    /// A case with every kind of input uncertainty: a molar feed and a mass feed, mole and mass
    /// fractions, a conversion, the duty and the heat loss.
    const UNCERTAIN: &str = "[[feed]]\nflow = \"38.5 kmol/h\"\ntemperature = \"46.5 degC\"\ncomposition = { water = 0.64, methyl_acetate = 0.31, methanol = 0.05 }\nflow_uncertainty = \"1 %\"\ntemperature_uncertainty = \"0.5 K\"\ncomposition_uncertainty = 0.004\n[[feed]]\nflow = \"2.6 t/h\"\ntemperature = \"28 degC\"\ncomposition = { water = 0.9, methanol = 0.1 }\nbasis = \"mass\"\nflow_uncertainty = \"10 kg/h\"\ncomposition_uncertainty = 0.003\n[[reaction]]\nstoichiometry = { methyl_acetate = -1, water = -1, acetic_acid = 1, methanol = 1 }\nkey = \"methyl_acetate\"\nconversion = 0.42\nconversion_uncertainty = 0.02\n[heater]\nduty = \"0.145 MW\"\nduty_uncertainty = \"2 %\"\nheat_loss = \"6 kW\"\nheat_loss_uncertainty = \"2 kW\"\n";

    /// Every u(x) of the text budget carries its input's unit, and the JSON says it too.
    #[test]
    fn each_input_uncertainty_has_its_unit() {
        let report = run(UNCERTAIN).unwrap();
        let text = report.to_text();
        let line = |label: &str| {
            text.lines()
                .find(|l| l.trim_start().starts_with(label) && l.contains("u(x) ="))
                .unwrap_or_else(|| panic!("no budget line for {label}:\n{text}"))
                .to_string()
        };
        for (label, unit) in [
            ("feed 1 flow", "mol/s"),
            ("feed 1 temperature", "K"),
            ("feed 1 methyl_acetate fraction", "mol/mol"),
            ("feed 2 flow", "kg/s"),
            ("feed 2 water fraction", "kg/kg"),
            ("reaction 1 conversion", "mol/mol"),
            ("heater duty", "W"),
            ("heat loss", "W"),
        ] {
            let l = line(label);
            let after = l.split("u(x) =").nth(1).unwrap().split_whitespace().nth(1);
            assert_eq!(after, Some(unit), "{l}");
        }
        // 1 % of 38.5 kmol/h = 0.106944 mol/s; 10 kg/h = 2.77778e-3 kg/s (unit definitions).
        assert!(line("feed 1 flow").contains("1.06944e-1 mol/s"), "{text}");
        assert!(line("feed 2 flow").contains("2.77778e-3 kg/s"), "{text}");
        let json: serde_json::Value = serde_json::from_str(&report.to_json()).unwrap();
        let units: Vec<&str> = json["uncertainty"]["contributions"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c["unit"].as_str().unwrap())
            .collect();
        assert!(units.contains(&"kg/kg") && units.contains(&"mol/s") && units.contains(&"W"), "{units:?}");
    }

    /// In a duty solve the effluent temperature is the target, not a measurement.
    #[test]
    fn the_effluent_temperature_of_a_duty_solve_is_the_target() {
        let case = "[[feed]]\nflow = 10.0\ntemperature = \"40 degC\"\ncomposition = { water = 1.0 }\n[effluent]\ntemperature = \"63 degC\"\n[solve]\nunknown = \"duty\"\n";
        let text = run(case).unwrap().to_text();
        assert!(text.contains("target effluent temperature (the duty reaches it): \"63 degC\""), "{text}");
        assert!(!text.contains("measured"), "{text}");
        let measured = format!("{}[effluent]\ntemperature = \"60 degC\"\n", water_feed("\"40 degC\""));
        assert!(run(&measured).unwrap().to_text().contains("measured effluent temperature: \"60 degC\""));
    }

    /// Warnings come before the result. Source of the warning: water boils at 373.12 K at
    /// 101325 Pa (CRC Handbook 95th ed., tb of config/components.toml); 10 mol/s of water from
    /// 330 K with 60 kW ends near 410 K (Cp about 75.3 J/(mol K), CRC), above it.
    #[test]
    fn warnings_come_before_the_result() {
        let case =
            format!("[model]\npressure = \"1 atm\"\n{}", water_feed("330.0").replace("100 kW", "60 kW"));
        let report = run(&case).unwrap();
        assert!(report.flags.contains(&"two_phase_risk".to_string()), "{:?}", report.flags);
        assert_eq!(report.validity_warnings(), report.flags.len());
        let text = report.to_text();
        let warnings = text.find("Warnings").unwrap();
        let two_phase = text.find("two-phase risk").unwrap();
        let inputs = text.find("\nInputs").unwrap();
        let result = text.find("\nResult").unwrap();
        assert!(warnings < two_phase && two_phase < inputs && inputs < result, "{text}");
        assert_eq!(text.matches("two-phase risk").count(), 1, "{text}");
        // Without a warning, no section.
        let quiet = run(&water_feed("330.0")).unwrap();
        assert_eq!(quiet.validity_warnings(), 0);
        assert!(!quiet.to_text().contains("Warnings"));
    }

    /// A solved effluent temperature below the effluent's liquid floor is a validity warning
    /// (so `--strict` fails it). Source: water's liquid ranges start at 273.16 K
    /// (config/components.toml, Perry's 8th ed.); 10 mol/s of water at 300 K losing 50 kW ends
    /// near 300 - 50000/(10 x 75.3) = 234 K (liquid Cp about 75.3 J/(mol K), CRC).
    #[test]
    fn a_solved_effluent_below_the_liquid_floor_is_flagged() {
        let report = run(&water_feed("300.0").replace("100 kW", "-50 kW")).unwrap();
        assert!(report.effluent_temperature_k < 273.16, "{}", report.effluent_temperature_k);
        assert!(report.flags.contains(&"below_liquid_range".to_string()), "{:?}", report.flags);
        assert!(report.warnings.iter().any(|w| w.contains("below 273.16 K") && w.contains("may be frozen")));
        assert!(report.validity_warnings() > 0);
        let warm = run(&water_feed("300.0")).unwrap();
        assert!(!warm.flags.contains(&"below_liquid_range".to_string()), "{:?}", warm.flags);
    }
}
