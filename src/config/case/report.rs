//! Solving a checked case and its report: the `--json` object and the short text summary.

use std::fmt::Write as _;

use indexmap::IndexMap;
use serde::Serialize;

use super::{Case, Echo};
use crate::source::{KeyPath, LocatedErrors};
use crate::thermo::balance::{Basis, Effluent, FlowValue, Outcome, SolveError, Unknown};
use crate::thermo::uncertainty::{InputRef, UncertaintyReport, propagate};

/// The one residual convention of every output (soft tags, alerts, reports, `calc`).
pub const RESIDUAL_SIGN: &str = "measured - predicted";

impl Case {
    /// Solve the case; a failure is located at the input most likely responsible.
    pub fn run(&self) -> Result<Report, LocatedErrors> {
        let outcome = self.system.solve(&self.inputs, self.unknown).map_err(|e| {
            let key = match &e {
                SolveError::Temperature(..) => KeyPath::keys("heater.duty"),
                SolveError::ImpossibleConversion { .. } => KeyPath::keys("effluent.temperature"),
                SolveError::NegativeFlow { component, .. } => {
                    // The conversion of a reaction that consumes the component, else of one
                    // that makes it (a negative conversion), else of the first.
                    let i = self.system.components.iter().position(|c| c.id == *component);
                    let nu = |r: &crate::thermo::balance::Reaction| i.map_or(0.0, |i| r.nu[i]);
                    let reactions = &self.system.reactions;
                    let r = reactions
                        .iter()
                        .position(|r| nu(r) < 0.0)
                        .or_else(|| reactions.iter().position(|r| nu(r) != 0.0))
                        .or((!reactions.is_empty()).then_some(0));
                    r.map_or(KeyPath::keys("reaction"), |r| {
                        KeyPath::keys("reaction").index(r).key("conversion")
                    })
                }
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
    /// The unit of `value` and `standard_uncertainty`: `mol/s` or `kg/s` (a flow, in its own
    /// basis), `K`, `W`, `mol/mol` or `kg/kg` (a fraction, in its composition's basis; a
    /// conversion: mol of key converted per mol fed).
    pub unit: &'static str,
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
    /// Residual: measured minus predicted, K (the soft tags' and the report's sign: positive
    /// when the effluent is hotter than the balance says).
    pub residual_k: Option<f64>,
    /// How the residual is signed: always `measured - predicted` (present with `residual_k`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub residual_sign: Option<&'static str>,
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
        let element_balance = element_balance(o);
        let uncertainty = u.map(|u| uncertainty_json(case, u));
        let mut warnings = case.warnings.clone();
        warnings.extend(o.flags.iter().map(ToString::to_string));
        let mut flags: Vec<String> = o.flags.iter().map(|f| f.code()).collect();
        if let Some((floor, why)) = &case.effluent_floor
            && o.t_out < *floor
        {
            flags.push("below_liquid_range".into());
            warnings.push(format!(
                "the effluent at {:.2} K is below {floor:.2} K, where the liquid data of its components start ({why}): it may be frozen, and the liquid balance extrapolates",
                o.t_out
            ));
        }
        Report {
            case: case.source.path.display().to_string(),
            solved_for: case.unknown.as_str(),
            effluent_temperature_k: o.t_out,
            effluent_temperature_degc: o.t_out - 273.15,
            measured_temperature_k: measured,
            residual_k: measured.map(|m| m - o.t_out),
            residual_sign: measured.map(|_| RESIDUAL_SIGN),
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
            flags,
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

    /// How many validity warnings (the `flags`) the result carries; notes from checking the
    /// case (a rescaled composition, an unused component) are not counted.
    pub fn validity_warnings(&self) -> usize {
        self.flags.len()
    }

    /// The JSON object.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }

    /// A short human-readable summary.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let _ = write!(s, "efftemp calc: {}\n\n", self.case);
        if !self.warnings.is_empty() {
            s.push_str("Warnings (read these before the result)\n");
            for w in &self.warnings {
                let _ = writeln!(s, "  - {w}");
            }
            s.push('\n');
        }
        self.write_inputs(&mut s);
        self.write_result(&mut s);
        self.write_uncertainty(&mut s);
        if !self.component_notes.is_empty() {
            s.push_str("\nComponent notes\n");
            for (id, n) in &self.component_notes {
                let _ = writeln!(s, "  - {id}: {n}");
            }
        }
        let _ = write!(s, "\nCaution: {}\n", self.caution);
        s
    }

    /// The inputs as the case gave them (with SI values), for the text summary.
    fn write_inputs(&self, s: &mut String) {
        let ids: Vec<String> = self.enthalpy_path.keys().cloned().collect();
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
                given(&gt, kelvin(*t)),
                fractions(&pairs)
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
            let label = match self.solved_for {
                "duty" => "target effluent temperature (the duty reaches it)",
                "conversion" => "specified effluent temperature (the conversion reproduces it)",
                _ => "measured effluent temperature",
            };
            let _ = writeln!(s, "  {label}: \"{t}\"");
        }
        if let Some(p) = self.pressure_pa {
            let _ = writeln!(
                s,
                "  pressure: {}",
                given(self.echo.pressure.as_deref().unwrap_or(""), format!("{p:.1} Pa"))
            );
        }
    }

    /// The solved balance, for the text summary.
    fn write_result(&self, s: &mut String) {
        s.push_str("\nResult\n");
        let _ = writeln!(s, "  solved for: {}", self.solved_for);
        let _ = writeln!(s, "  effluent temperature: {}", kelvin(self.effluent_temperature_k));
        if let (Some(m), Some(r)) = (self.measured_temperature_k, self.residual_k) {
            let _ = writeln!(s, "  measured: {}; residual (measured - predicted): {r:+.3} K", kelvin(m));
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
            fractions(&pairs)
        );
        if let (Some(b), Some(p), Some(m)) = (self.bubble_point_k, self.pressure_pa, self.bubble_margin_k) {
            let _ = writeln!(
                s,
                "  bubble point (ideal solution, Raoult's law) at {p:.0} Pa: {}; margin {m:+.2} K",
                kelvin(b)
            );
        }
        if let Some(eb) = &self.element_balance {
            let worst = eb.values().map(|e| e.relative_closure.abs()).fold(0.0, f64::max);
            let _ = writeln!(s, "  element balance closure: max |out - in|/in = {worst:.2e}");
        }
    }

    /// The uncertainty of the result and each input's contribution, for the text summary.
    fn write_uncertainty(&self, s: &mut String) {
        let Some(u) = &self.uncertainty else { return };
        let unit = match u.quantity {
            "effluent_temperature_k" => "K",
            "duty_w" => "W",
            _ => "mol/mol",
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
        let u_x: Vec<String> =
            u.contributions.iter().map(|c| format!("{:.5e} {}", c.standard_uncertainty, c.unit)).collect();
        let u_width = u_x.iter().map(String::len).max().unwrap_or(0);
        for (c, u_x) in u.contributions.iter().zip(&u_x) {
            let _ = writeln!(
                s,
                "  {:<width$} u(x) = {u_x:<u_width$}  contributes {:.4} {unit} ({:.1} %)",
                c.input,
                c.contribution,
                c.share * 100.0
            );
        }
    }
}

/// A temperature in K and degC.
fn kelvin(t: f64) -> String {
    format!("{t:.3} K ({:.2} degC)", t - 273.15)
}

/// An SI value, with the text it was given as when that differs.
fn given(g: &str, si: String) -> String {
    if g.is_empty() || g == si { si } else { format!("{si} (given \"{g}\")") }
}

/// The non-zero fractions, `id x` each.
fn fractions(m: &[(String, f64)]) -> String {
    m.iter().filter(|(_, x)| *x > 0.0).map(|(id, x)| format!("{id} {x:.4}")).collect::<Vec<_>>().join(", ")
}

/// Element flows in and out, with the relative closure; None when no element is known.
fn element_balance(o: &Outcome) -> Option<IndexMap<String, ElementReport>> {
    if o.elements.is_empty() {
        return None;
    }
    Some(
        o.elements
            .iter()
            .map(|(e, a, b)| {
                (
                    e.to_string(),
                    ElementReport {
                        feed_mol_s: *a,
                        effluent_mol_s: *b,
                        relative_closure: if *a != 0.0 { (b - a) / a } else { 0.0 },
                    },
                )
            })
            .collect(),
    )
}

/// The uncertainty of the solved quantity, per input.
fn uncertainty_json(case: &Case, u: &UncertaintyReport) -> UncertaintyJson {
    let quantity = match case.unknown {
        Unknown::Temperature => "effluent_temperature_k",
        Unknown::Duty => "duty_w",
        Unknown::Conversion(_) => "conversion",
    };
    UncertaintyJson {
        quantity,
        standard_uncertainty: u.u,
        dominant_input: u.dominant().map(|c| c.label.clone()),
        // The contributions are in the order of the case's uncertain inputs.
        contributions: u
            .contributions
            .iter()
            .zip(&case.uncertain)
            .map(|(c, item)| ContributionReport {
                input: c.label.clone(),
                value: c.value,
                standard_uncertainty: c.u,
                unit: input_unit(case, item.input),
                sensitivity: c.sensitivity,
                contribution: c.contribution,
                share: c.share,
            })
            .collect(),
    }
}

/// The unit of an input's value and standard uncertainty.
fn input_unit(case: &Case, input: InputRef) -> &'static str {
    let fraction = |basis: Basis| match basis {
        Basis::Mole => "mol/mol",
        Basis::Mass => "kg/kg",
    };
    match input {
        InputRef::FeedFlow(j) => match case.inputs.feeds.get(j).map(|f| f.flow) {
            Some(FlowValue::Mass(_)) => "kg/s",
            _ => "mol/s",
        },
        InputRef::FeedTemperature(_) | InputRef::EffluentTemperature => "K",
        InputRef::FeedFraction(j, _) => fraction(case.inputs.feeds.get(j).map_or(Basis::Mole, |f| f.basis)),
        InputRef::EffluentFraction(_) => match &case.inputs.effluent {
            Effluent::Measured { basis, .. } => fraction(*basis),
            _ => "mol/mol",
        },
        InputRef::Duty | InputRef::HeatLoss => "W",
        InputRef::Conversion(_) => "mol/mol",
    }
}
