//! Pure-component data: the raw file form ([`ComponentSpec`]), the checked form
//! ([`Component`]), chemical formulas, and the component [`Library`] (built-in, user files and
//! inline definitions merged field by field).

use std::collections::{BTreeMap, HashMap};
use std::path::Path;
use std::sync::Arc;

use indexmap::IndexMap;
use serde::Deserialize;

use crate::source::{KeyPath, LocatedError, LocatedErrors, SourceText};
use crate::units::{Number, Quantity};

/// The built-in library, embedded so that the binary works from any directory.
pub const BUILTIN_LIBRARY: &str = include_str!("../../config/components.toml");
/// How the built-in library is named in messages.
pub const BUILTIN_NAME: &str = "config/components.toml (built in)";

/// Default Watson exponent (Watson 1943; the customary value).
pub const DEFAULT_WATSON_N: f64 = 0.38;

/// Normalize a component id for lookup: case-insensitive, `_` and `-` equivalent.
pub fn normalize_id(id: &str) -> String {
    id.trim().to_ascii_lowercase().replace('_', "-")
}

/// The `source` of a component: one note for all fields, or a source key per field.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(untagged)]
pub enum SourceNote {
    /// One free-text note.
    Text(String),
    /// Field name → source key (defined in the library's `[sources]`) or free text.
    PerField(BTreeMap<String, String>),
}

/// A component as written in a library file or inline in a case: every field optional, so
/// that a definition with the id of an existing component overrides only what it sets.
#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ComponentSpec {
    /// Display name.
    pub name: Option<String>,
    /// CAS registry number.
    pub cas: Option<String>,
    /// Chemical formula, e.g. `C2H4O2` (enables the element balance).
    pub formula: Option<String>,
    /// Molar mass, g/mol.
    pub molar_mass: Option<Number>,
    /// Normal boiling point (Watson reference temperature), K.
    pub tb: Option<Number>,
    /// Critical temperature, K.
    pub tc: Option<Number>,
    /// Critical pressure, Pa (Lee-Kesler vapour pressure fallback).
    pub pc: Option<Number>,
    /// Enthalpy of vaporization at `tb`, J/mol.
    pub hvap_tb: Option<Number>,
    /// Watson exponent (default 0.38).
    pub watson_n: Option<f64>,
    /// Enthalpy of formation, ideal gas, 298.15 K, J/mol.
    pub hf_ig: Option<Number>,
    /// Ideal-gas Cp polynomial A..E, J/(mol K).
    pub cp_ig: Option<Vec<f64>>,
    /// Validity range of `cp_ig`, K.
    pub cp_ig_range: Option<[Number; 2]>,
    /// Enthalpy of formation, liquid, 298.15 K, J/mol.
    pub hf_liq: Option<Number>,
    /// Liquid Cp, DIPPR eq. 100 coefficients C1..C5, J/(mol K).
    pub cp_liq: Option<Vec<f64>>,
    /// Validity range of `cp_liq`, K.
    pub cp_liq_range: Option<[Number; 2]>,
    /// Vapour pressure, DIPPR eq. 101 coefficients C1..C5 (Pa, K).
    pub psat: Option<Vec<f64>>,
    /// Validity range of `psat`, K.
    pub psat_range: Option<[Number; 2]>,
    /// Acentric factor (Lee-Kesler fallback).
    pub omega: Option<f64>,
    /// Where the values come from.
    pub source: Option<SourceNote>,
    /// Free-text caveat shown with results that use the component.
    pub note: Option<String>,
}

macro_rules! merge_fields {
    ($base:expr, $over:expr, $($f:ident),*) => {
        $( if $over.$f.is_some() { $base.$f = $over.$f.clone(); } )*
    };
}

impl ComponentSpec {
    /// Overlay `other` on `self`: every field `other` sets replaces ours.
    pub fn merge(&mut self, other: &ComponentSpec) {
        merge_fields!(
            self,
            other,
            name,
            cas,
            formula,
            molar_mass,
            tb,
            tc,
            pc,
            hvap_tb,
            watson_n,
            hf_ig,
            cp_ig,
            cp_ig_range,
            hf_liq,
            cp_liq,
            cp_liq_range,
            psat,
            psat_range,
            omega,
            source,
            note
        );
    }

    /// Whether this spec sets the field named `field` (used to locate errors after a merge).
    pub fn sets(&self, field: &str) -> bool {
        match field {
            "name" => self.name.is_some(),
            "cas" => self.cas.is_some(),
            "formula" => self.formula.is_some(),
            "molar_mass" => self.molar_mass.is_some(),
            "tb" => self.tb.is_some(),
            "tc" => self.tc.is_some(),
            "pc" => self.pc.is_some(),
            "hvap_tb" => self.hvap_tb.is_some(),
            "watson_n" => self.watson_n.is_some(),
            "hf_ig" => self.hf_ig.is_some(),
            "cp_ig" => self.cp_ig.is_some(),
            "cp_ig_range" => self.cp_ig_range.is_some(),
            "hf_liq" => self.hf_liq.is_some(),
            "cp_liq" => self.cp_liq.is_some(),
            "cp_liq_range" => self.cp_liq_range.is_some(),
            "psat" => self.psat.is_some(),
            "psat_range" => self.psat_range.is_some(),
            "omega" => self.omega.is_some(),
            _ => false,
        }
    }
}

/// A chemical formula as element counts, e.g. `C2H4O2` → C 2, H 4, O 2.
#[derive(Debug, Clone, PartialEq)]
pub struct Formula(pub Vec<(String, f64)>);

impl Formula {
    /// Parse a formula with optional parentheses and counts: `CH3(CH2)4CH3`, `C2H6O2`.
    pub fn parse(text: &str) -> Result<Formula, String> {
        fn group(chars: &[char], pos: &mut usize, depth: usize) -> Result<BTreeMap<String, f64>, String> {
            let mut counts = BTreeMap::new();
            while *pos < chars.len() {
                let c = chars[*pos];
                if c == '(' {
                    *pos += 1;
                    let inner = group(chars, pos, depth + 1)?;
                    if *pos >= chars.len() || chars[*pos] != ')' {
                        return Err("unbalanced '('".into());
                    }
                    *pos += 1;
                    let n = count(chars, pos);
                    for (el, k) in inner {
                        *counts.entry(el).or_insert(0.0) += k * n;
                    }
                } else if c == ')' {
                    if depth == 0 {
                        return Err("unbalanced ')'".into());
                    }
                    return Ok(counts);
                } else if c.is_ascii_uppercase() {
                    let mut el = c.to_string();
                    *pos += 1;
                    while *pos < chars.len() && chars[*pos].is_ascii_lowercase() {
                        el.push(chars[*pos]);
                        *pos += 1;
                    }
                    let n = count(chars, pos);
                    *counts.entry(el).or_insert(0.0) += n;
                } else {
                    return Err(format!("unexpected character '{c}'"));
                }
            }
            Ok(counts)
        }
        fn count(chars: &[char], pos: &mut usize) -> f64 {
            let start = *pos;
            while *pos < chars.len() && chars[*pos].is_ascii_digit() {
                *pos += 1;
            }
            if start == *pos {
                1.0
            } else {
                chars[start..*pos].iter().collect::<String>().parse().unwrap_or(1.0)
            }
        }
        let chars: Vec<char> = text.trim().chars().collect();
        if chars.is_empty() {
            return Err("empty formula".into());
        }
        let mut pos = 0;
        let counts = group(&chars, &mut pos, 0)?;
        if pos != chars.len() {
            return Err("unbalanced ')'".into());
        }
        Ok(Formula(counts.into_iter().collect()))
    }

    /// Count of one element (0 when absent).
    pub fn count(&self, element: &str) -> f64 {
        self.0.iter().find(|(e, _)| e == element).map_or(0.0, |(_, n)| *n)
    }
}

/// Data for the ideal-gas + Watson enthalpy path.
#[derive(Debug, Clone, PartialEq)]
pub struct IdealGasData {
    /// Enthalpy of formation, ideal gas, 298.15 K, J/mol.
    pub hf_ig: f64,
    /// Cp polynomial A..E, J/(mol K).
    pub cp: [f64; 5],
    /// Published validity range of `cp`, K.
    pub cp_range: Option<(f64, f64)>,
    /// Normal boiling point, K.
    pub tb: f64,
    /// Enthalpy of vaporization at `tb`, J/mol.
    pub hvap_tb: f64,
    /// The component's own Watson exponent, if it sets one.
    pub watson_n: Option<f64>,
}

/// Data for the liquid-reference enthalpy path.
#[derive(Debug, Clone, PartialEq)]
pub struct LiquidData {
    /// Enthalpy of formation, liquid, 298.15 K, J/mol.
    pub hf_liq: f64,
    /// DIPPR-100 coefficients C1..C5, J/(mol K).
    pub cp: [f64; 5],
    /// Published validity range, K.
    pub cp_range: Option<(f64, f64)>,
}

/// DIPPR-101 vapour pressure.
#[derive(Debug, Clone, PartialEq)]
pub struct PsatData {
    /// C1..C5 (Pa, K).
    pub c: [f64; 5],
    /// Published validity range, K.
    pub range: Option<(f64, f64)>,
}

/// A checked component.
#[derive(Debug, Clone, PartialEq)]
pub struct Component {
    /// Id as first written by the user (or the library id).
    pub id: String,
    /// Display name.
    pub name: String,
    /// CAS number.
    pub cas: Option<String>,
    /// Formula, for the element balance.
    pub formula: Option<Formula>,
    /// Molar mass, g/mol.
    pub molar_mass: f64,
    /// Critical temperature, K.
    pub tc: f64,
    /// Normal boiling point, K.
    pub tb: Option<f64>,
    /// Critical pressure, Pa.
    pub pc: Option<f64>,
    /// Acentric factor.
    pub omega: Option<f64>,
    /// Ideal-gas + Watson path data, when complete.
    pub ideal_gas: Option<IdealGasData>,
    /// Which ideal-gas path fields are missing (for "missing data" messages).
    pub ideal_gas_missing: Vec<&'static str>,
    /// Liquid path data, when complete.
    pub liquid: Option<LiquidData>,
    /// Which liquid path fields are missing.
    pub liquid_missing: Vec<&'static str>,
    /// Vapour pressure correlation.
    pub psat: Option<PsatData>,
    /// Field → source.
    pub sources: BTreeMap<String, String>,
    /// Caveat.
    pub note: Option<String>,
}

/// One problem with one field of a component.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldError {
    /// The field (key in the component table).
    pub field: &'static str,
    /// What is wrong.
    pub message: String,
}

fn poly5(c: &[f64; 5], t: f64) -> f64 {
    c[0] + t * (c[1] + t * (c[2] + t * (c[3] + t * c[4])))
}

/// The values of a spec in SI units and checked form; `None` where a field is not set or could
/// not be read (the reason is then in the error list).
struct Values {
    molar_mass: Option<f64>,
    tb: Option<f64>,
    tc: Option<f64>,
    pc: Option<f64>,
    hvap_tb: Option<f64>,
    hf_ig: Option<f64>,
    hf_liq: Option<f64>,
    cp_ig_range: Option<(f64, f64)>,
    cp_liq_range: Option<(f64, f64)>,
    psat_range: Option<(f64, f64)>,
    cp_ig: Option<[f64; 5]>,
    cp_liq: Option<[f64; 5]>,
    psat: Option<[f64; 5]>,
}

/// A number in SI units of `q`.
fn si_value(field: &'static str, v: Option<&Number>, q: Quantity, errs: &mut Vec<FieldError>) -> Option<f64> {
    match v {
        None => None,
        Some(n) => match n.si(q) {
            Ok(x) => Some(x),
            Err(e) => {
                errs.push(FieldError { field, message: e.to_string() });
                None
            }
        },
    }
}

/// A temperature range `[low, high]` in K, with `0 < low < high`.
fn temperature_range(
    field: &'static str,
    r: Option<&[Number; 2]>,
    errs: &mut Vec<FieldError>,
) -> Option<(f64, f64)> {
    let r = r?;
    let lo = r[0].si(Quantity::Temperature);
    let hi = r[1].si(Quantity::Temperature);
    match (lo, hi) {
        (Ok(lo), Ok(hi)) if lo > 0.0 && hi > lo => Some((lo, hi)),
        (Ok(lo), Ok(hi)) => {
            errs.push(FieldError {
                field,
                message: format!("range must be [low, high] with 0 < low < high, got [{lo}, {hi}]"),
            });
            None
        }
        (Err(e), _) | (_, Err(e)) => {
            errs.push(FieldError { field, message: e.to_string() });
            None
        }
    }
}

/// 1 to 5 finite correlation coefficients, padded with zeros to 5.
fn coefficients(field: &'static str, v: Option<&[f64]>, errs: &mut Vec<FieldError>) -> Option<[f64; 5]> {
    let v = v?;
    if v.is_empty() || v.len() > 5 {
        errs.push(FieldError { field, message: format!("expected 1 to 5 coefficients, got {}", v.len()) });
        return None;
    }
    if let Some(bad) = v.iter().find(|x| !x.is_finite()) {
        errs.push(FieldError { field, message: format!("coefficient {bad} is not finite") });
        return None;
    }
    let mut c = [0.0; 5];
    c[..v.len()].copy_from_slice(v);
    Some(c)
}

/// Read every numeric field of a spec: constants, validity ranges, correlation coefficients.
fn read_values(spec: &ComponentSpec, errs: &mut Vec<FieldError>) -> Values {
    let molar_mass = si_value("molar_mass", spec.molar_mass.as_ref(), Quantity::MolarMass, errs);
    let tb = si_value("tb", spec.tb.as_ref(), Quantity::Temperature, errs);
    let tc = si_value("tc", spec.tc.as_ref(), Quantity::Temperature, errs);
    let pc = si_value("pc", spec.pc.as_ref(), Quantity::Pressure, errs);
    let hvap_tb = si_value("hvap_tb", spec.hvap_tb.as_ref(), Quantity::MolarEnergy, errs);
    let hf_ig = si_value("hf_ig", spec.hf_ig.as_ref(), Quantity::MolarEnergy, errs);
    let hf_liq = si_value("hf_liq", spec.hf_liq.as_ref(), Quantity::MolarEnergy, errs);
    let cp_ig_range = temperature_range("cp_ig_range", spec.cp_ig_range.as_ref(), errs);
    let cp_liq_range = temperature_range("cp_liq_range", spec.cp_liq_range.as_ref(), errs);
    let psat_range = temperature_range("psat_range", spec.psat_range.as_ref(), errs);
    let cp_ig = coefficients("cp_ig", spec.cp_ig.as_deref(), errs);
    let cp_liq = coefficients("cp_liq", spec.cp_liq.as_deref(), errs);
    let psat = coefficients("psat", spec.psat.as_deref(), errs);
    Values {
        molar_mass,
        tb,
        tc,
        pc,
        hvap_tb,
        hf_ig,
        hf_liq,
        cp_ig_range,
        cp_liq_range,
        psat_range,
        cp_ig,
        cp_liq,
        psat,
    }
}

/// The physical checks of the constants: required ones present, signs, `tb < tc`, the Watson
/// exponent and the acentric factor in range.
fn check_constants(spec: &ComponentSpec, v: &Values, errs: &mut Vec<FieldError>) {
    let mut err = |field: &'static str, message: String| errs.push(FieldError { field, message });
    match v.molar_mass {
        None => err("molar_mass", "molar mass is required".into()),
        Some(m) if m <= 0.0 => err("molar_mass", format!("molar mass must be positive, got {m} g/mol")),
        _ => {}
    }
    match v.tc {
        None => err("tc", "critical temperature is required (validity check: no liquid above Tc)".into()),
        Some(t) if t <= 0.0 => err("tc", format!("critical temperature must be positive, got {t} K")),
        _ => {}
    }
    if let Some(t) = v.tb {
        if t <= 0.0 {
            err("tb", format!("boiling point must be positive, got {t} K"));
        } else if let Some(c) = v.tc
            && c <= t
        {
            err("tc", format!("critical temperature {c} K must be above the boiling point {t} K"));
        }
    }
    if let Some(p) = v.pc
        && p <= 0.0
    {
        err("pc", format!("critical pressure must be positive, got {p} Pa"));
    }
    if let Some(h) = v.hvap_tb
        && h <= 0.0
    {
        err("hvap_tb", format!("enthalpy of vaporization must be positive, got {h} J/mol"));
    }
    if let Some(n) = spec.watson_n
        && !(n > 0.0 && n <= 1.0)
    {
        err("watson_n", format!("Watson exponent must be in (0, 1], got {n}"));
    }
    if let Some(w) = spec.omega
        && (!w.is_finite() || !(-1.0..=2.0).contains(&w))
    {
        err("omega", format!("acentric factor {w} is outside -1..2"));
    }
}

/// Heat capacities must be positive where they are published to hold (at the ends of the
/// validity range and at 298.15 K if it lies inside; at 298.15 K without a range).
fn check_heat_capacity(
    field: &'static str,
    c: Option<&[f64; 5]>,
    r: Option<(f64, f64)>,
    errs: &mut Vec<FieldError>,
) {
    if let Some(c) = c {
        let mut points = vec![298.15];
        if let Some((lo, hi)) = r {
            points = vec![lo, hi];
            if (lo..=hi).contains(&298.15) {
                points.push(298.15);
            }
        }
        for t in points {
            let cp = poly5(c, t);
            if cp <= 0.0 {
                errs.push(FieldError {
                    field,
                    message: format!("heat capacity must be positive, but is {cp:.4} J/(mol K) at {t} K"),
                });
                break;
            }
        }
    }
}

/// The chemical formula, if the spec sets one.
fn read_formula(spec: &ComponentSpec, errs: &mut Vec<FieldError>) -> Option<Formula> {
    match &spec.formula {
        None => None,
        Some(f) => match Formula::parse(f) {
            Ok(f) => Some(f),
            Err(e) => {
                errs.push(FieldError {
                    field: "formula",
                    message: format!("cannot read formula `{f}`: {e}"),
                });
                None
            }
        },
    }
}

/// The ideal-gas + Watson path data when complete, and the names of its missing fields.
fn ideal_gas_data(spec: &ComponentSpec, v: &Values) -> (Option<IdealGasData>, Vec<&'static str>) {
    let mut missing = Vec::new();
    for (present, name) in [
        (v.hf_ig.is_some(), "hf_ig"),
        (v.cp_ig.is_some(), "cp_ig"),
        (v.tb.is_some(), "tb"),
        (v.hvap_tb.is_some(), "hvap_tb"),
    ] {
        if !present {
            missing.push(name);
        }
    }
    let data = match (v.hf_ig, v.cp_ig, v.tb, v.hvap_tb) {
        (Some(hf_ig), Some(cp), Some(tb), Some(hvap_tb)) => {
            Some(IdealGasData { hf_ig, cp, cp_range: v.cp_ig_range, tb, hvap_tb, watson_n: spec.watson_n })
        }
        _ => None,
    };
    (data, missing)
}

/// The liquid path data when complete, and the names of its missing fields.
fn liquid_data(v: &Values) -> (Option<LiquidData>, Vec<&'static str>) {
    let mut missing = Vec::new();
    for (present, name) in [(v.hf_liq.is_some(), "hf_liq"), (v.cp_liq.is_some(), "cp_liq")] {
        if !present {
            missing.push(name);
        }
    }
    let data = match (v.hf_liq, v.cp_liq) {
        (Some(hf_liq), Some(cp)) => Some(LiquidData { hf_liq, cp, cp_range: v.cp_liq_range }),
        _ => None,
    };
    (data, missing)
}

/// Field → source, from the spec's `source` note.
fn source_map(spec: &ComponentSpec) -> BTreeMap<String, String> {
    match &spec.source {
        None => BTreeMap::new(),
        Some(SourceNote::Text(t)) => BTreeMap::from([("all".to_string(), t.clone())]),
        Some(SourceNote::PerField(m)) => m.clone(),
    }
}

impl Component {
    /// Check a (merged) spec. Returns every problem found.
    pub fn from_spec(id: &str, spec: &ComponentSpec) -> Result<Component, Vec<FieldError>> {
        let mut errs: Vec<FieldError> = Vec::new();
        let v = read_values(spec, &mut errs);
        check_constants(spec, &v, &mut errs);
        check_heat_capacity("cp_ig", v.cp_ig.as_ref(), v.cp_ig_range, &mut errs);
        check_heat_capacity("cp_liq", v.cp_liq.as_ref(), v.cp_liq_range, &mut errs);
        let formula = read_formula(spec, &mut errs);
        if !errs.is_empty() {
            return Err(errs);
        }
        let (ideal_gas, ideal_gas_missing) = ideal_gas_data(spec, &v);
        let (liquid, liquid_missing) = liquid_data(&v);
        Ok(Component {
            id: id.to_string(),
            name: spec.name.clone().unwrap_or_else(|| id.to_string()),
            cas: spec.cas.clone(),
            formula,
            molar_mass: v.molar_mass.unwrap_or_default(),
            tc: v.tc.unwrap_or_default(),
            tb: v.tb,
            pc: v.pc,
            omega: spec.omega,
            ideal_gas,
            ideal_gas_missing,
            liquid,
            liquid_missing,
            psat: v.psat.map(|c| PsatData { c, range: v.psat_range }),
            sources: source_map(spec),
            note: spec.note.clone(),
        })
    }
}

/// A library file as written: `[sources]` and `[components.<id>]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LibraryFile {
    /// Source key → full citation.
    #[serde(default)]
    pub sources: IndexMap<String, String>,
    /// Components by id.
    #[serde(default)]
    pub components: IndexMap<String, ComponentSpec>,
}

/// Where a component definition came from (for locating errors).
#[derive(Debug, Clone)]
pub struct Origin {
    /// The file.
    pub source: Arc<SourceText>,
    /// The key path of the component's table in that file.
    pub key: KeyPath,
}

#[derive(Debug, Clone)]
struct Entry {
    id: String,
    /// Each definition in load order; later ones override earlier ones field by field.
    layers: Vec<(ComponentSpec, Origin)>,
}

/// The component library: built-in data, then user library files, then inline definitions.
#[derive(Debug, Clone, Default)]
pub struct Library {
    entries: Vec<Entry>,
    index: HashMap<String, usize>,
    /// Source key → citation, from every loaded file.
    pub sources: BTreeMap<String, String>,
}

impl Library {
    /// The built-in library only.
    pub fn builtin() -> Result<Library, LocatedErrors> {
        let mut lib = Library::default();
        lib.add_file(Arc::new(SourceText::new(BUILTIN_NAME, BUILTIN_LIBRARY)))?;
        Ok(lib)
    }

    /// Load a user library file (its components are checked at once).
    pub fn load(&mut self, path: &Path) -> Result<(), LocatedErrors> {
        let src = SourceText::read(path)?;
        self.add_file(Arc::new(src))
    }

    /// Add a parsed library file; every component in it is checked (after merging).
    pub fn add_file(&mut self, src: Arc<SourceText>) -> Result<(), LocatedErrors> {
        let file: LibraryFile = src.deserialize()?;
        for (k, v) in &file.sources {
            self.sources.insert(k.clone(), v.clone());
        }
        let base = KeyPath::keys("components");
        let mut errors = Vec::new();
        for (id, spec) in &file.components {
            let origin = Origin { source: src.clone(), key: base.key(id) };
            self.add(id, spec.clone(), origin);
            if let Err(e) = self.resolve(id) {
                errors.extend(e.0);
            }
        }
        if errors.is_empty() { Ok(()) } else { Err(LocatedErrors(errors)) }
    }

    /// Add one definition (overrides an existing component with the same normalized id).
    pub fn add(&mut self, id: &str, spec: ComponentSpec, origin: Origin) {
        let key = normalize_id(id);
        match self.index.get(&key) {
            Some(&i) => self.entries[i].layers.push((spec, origin)),
            None => {
                self.index.insert(key, self.entries.len());
                self.entries.push(Entry { id: id.to_string(), layers: vec![(spec, origin)] });
            }
        }
    }

    /// Whether a component id is known.
    pub fn contains(&self, id: &str) -> bool {
        self.index.contains_key(&normalize_id(id))
    }

    /// All ids, in load order.
    pub fn ids(&self) -> impl Iterator<Item = &str> {
        self.entries.iter().map(|e| e.id.as_str())
    }

    /// Resolve and check a component by id. Errors are located in the definition that set the
    /// offending field (the latest layer that sets it), or in the first definition.
    pub fn resolve(&self, id: &str) -> Result<Component, LocatedErrors> {
        let Some(&i) = self.index.get(&normalize_id(id)) else {
            return Err(LocatedErrors::default());
        };
        let entry = &self.entries[i];
        let mut merged = ComponentSpec::default();
        for (spec, _) in &entry.layers {
            merged.merge(spec);
        }
        Component::from_spec(id, &merged).map_err(|errs| {
            LocatedErrors(
                errs.into_iter()
                    .map(|fe| {
                        let origin = entry
                            .layers
                            .iter()
                            .rev()
                            .find(|(spec, _)| spec.sets(fe.field))
                            .map_or(&entry.layers[0].1, |(_, o)| o);
                        let key = if origin.key.0.is_empty() {
                            origin.key.clone()
                        } else {
                            origin.key.key(fe.field)
                        };
                        origin.source.error_at(&key, format!("component `{}`: {}", entry.id, fe.message))
                    })
                    .collect(),
            )
        })
    }

    /// Suggest known ids close to an unknown one (for "unknown component" messages).
    pub fn suggestions(&self, id: &str) -> Vec<&str> {
        let want = normalize_id(id);
        let mut out: Vec<&str> = self
            .entries
            .iter()
            .filter(|e| {
                let have = normalize_id(&e.id);
                have.contains(&want) || want.contains(&have) || edit_distance(&have, &want) <= 2
            })
            .map(|e| e.id.as_str())
            .collect();
        out.truncate(5);
        out
    }

    /// Error for an unknown component id used at `key` in `src`.
    pub fn unknown(&self, id: &str, src: &SourceText, key: &KeyPath) -> LocatedError {
        let hints = self.suggestions(id);
        let hint = if hints.is_empty() {
            format!(
                "define it under [components.{id}] or add a library file; known ids: {}",
                self.ids().collect::<Vec<_>>().join(", ")
            )
        } else {
            format!("did you mean {}?", hints.join(", "))
        };
        src.error_at(key, format!("unknown component `{id}`: {hint}"))
    }
}

fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut cur = vec![i + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != *cb);
            cur.push(sub.min(prev[j + 1] + 1).min(cur[j] + 1));
        }
        prev = cur;
    }
    prev[b.len()]
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn formulas() {
        let f = Formula::parse("C2H4O2").unwrap();
        assert_eq!((f.count("C"), f.count("H"), f.count("O")), (2.0, 4.0, 2.0));
        let f = Formula::parse("CH3(CH2)4CH3").unwrap();
        assert_eq!((f.count("C"), f.count("H")), (6.0, 14.0));
        assert!(Formula::parse("C2(H").is_err());
        assert!(Formula::parse("c2").is_err());
    }

    #[test]
    fn builtin_library_is_complete_and_valid() {
        let lib = Library::builtin().unwrap();
        assert_eq!(lib.ids().count(), 17);
        for id in lib.ids() {
            let c = lib.resolve(id).unwrap();
            assert!(c.ideal_gas.is_some() && c.liquid.is_some() && c.psat.is_some(), "{id}");
            assert!(c.sources.contains_key("tc"), "{id}");
        }
        assert!(lib.contains("Ethyl_Acetate"));
    }

    #[test]
    fn non_physical_values_are_located() {
        let text = "[components.x]\nmolar_mass = -3.0\ntb = 400.0\ntc = 350.0\n";
        let mut lib = Library::default();
        let err = lib.add_file(Arc::new(SourceText::new("lib.toml", text))).unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("lib.toml:2:14: `components.x.molar_mass`"), "{msg}");
        assert!(msg.contains("lib.toml:4:6: `components.x.tc`"), "{msg}");
    }

    #[test]
    fn overrides_merge_field_by_field() {
        let mut lib = Library::builtin().unwrap();
        let src = Arc::new(SourceText::new("case.toml", "[components.water]\nwatson_n = 0.33\n"));
        let spec = ComponentSpec { watson_n: Some(0.33), ..Default::default() };
        lib.add("water", spec, Origin { source: src, key: KeyPath::keys("components.water") });
        let c = lib.resolve("water").unwrap();
        assert_eq!(c.ideal_gas.unwrap().watson_n, Some(0.33));
        assert_eq!(c.molar_mass, 18.01528);
    }
}
