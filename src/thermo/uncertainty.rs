//! First-order propagation of input standard uncertainties through the implicit balance
//! (GUM law of propagation, JCGM 100:2008 eq. 10, inputs taken as uncorrelated).
//!
//! With `f(y, x) = 0` the balance residual and `y` the solved unknown (temperature, duty or
//! conversion), the implicit function theorem gives `∂y/∂x_k = −(∂f/∂x_k)/(∂f/∂y)`. `∂f/∂y` is
//! analytic ([`System::residual_slope`]), and so is every `∂f/∂x_k`: the duty, the heat loss and
//! the temperatures directly; the inputs that act through the material balance (mass or molar
//! flows, compositions in either basis, conversions) by the chain rule through the component
//! flows, on which the balance depends linearly. The unit tests compare each with a central
//! difference of the residual at the solution.

use super::balance::{Basis, Effluent, FlowValue, Inputs, Outcome, System};

/// An input whose uncertainty is propagated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum InputRef {
    /// Total flow of feed j (in its own unit: mol/s or kg/s).
    FeedFlow(usize),
    /// Temperature of feed j.
    FeedTemperature(usize),
    /// Fraction of component i in feed j; the other fractions are rescaled to keep the sum.
    FeedFraction(usize, usize),
    /// Heater duty.
    Duty,
    /// Heat loss.
    HeatLoss,
    /// Key conversion of reaction r.
    Conversion(usize),
    /// Fraction of component i in the measured effluent.
    EffluentFraction(usize),
    /// Measured effluent temperature.
    EffluentTemperature,
}

/// One input's standard uncertainty (absolute, SI) and its label for reports.
#[derive(Debug, Clone, PartialEq)]
pub struct Uncertain {
    /// Which input.
    pub input: InputRef,
    /// Standard uncertainty, SI.
    pub u: f64,
    /// Label, e.g. "feed 1 flow".
    pub label: String,
}

/// One input's contribution to the uncertainty of the unknown.
#[derive(Debug, Clone, PartialEq)]
pub struct Contribution {
    /// Label.
    pub label: String,
    /// The input's value, SI.
    pub value: f64,
    /// Its standard uncertainty, SI.
    pub u: f64,
    /// Sensitivity `∂y/∂x`.
    pub sensitivity: f64,
    /// `|∂y/∂x|·u`, in the unknown's unit.
    pub contribution: f64,
    /// Share of the variance, 0..1.
    pub share: f64,
}

/// The propagated uncertainty of the unknown.
#[derive(Debug, Clone, PartialEq)]
pub struct UncertaintyReport {
    /// Combined standard uncertainty of the unknown (K, W or conversion).
    pub u: f64,
    /// Per input, in the order given.
    pub contributions: Vec<Contribution>,
}

impl UncertaintyReport {
    /// The input with the largest share, if any contributes.
    pub fn dominant(&self) -> Option<&Contribution> {
        self.contributions.iter().filter(|c| c.share > 0.0).max_by(|a, b| a.share.total_cmp(&b.share))
    }
}

fn value_of(inputs: &Inputs, input: InputRef) -> f64 {
    match input {
        InputRef::FeedFlow(j) => inputs.feeds.get(j).map_or(0.0, |f| f.flow.value()),
        InputRef::FeedTemperature(j) => inputs.feeds.get(j).map_or(0.0, |f| f.temperature),
        InputRef::FeedFraction(j, i) => {
            inputs.feeds.get(j).and_then(|f| f.fractions.get(i).copied()).unwrap_or(0.0)
        }
        InputRef::Duty => inputs.duty.unwrap_or(0.0),
        InputRef::HeatLoss => inputs.heat_loss,
        InputRef::Conversion(r) => match &inputs.effluent {
            Effluent::Reacted { conversions } => conversions.get(r).copied().flatten().unwrap_or(0.0),
            _ => 0.0,
        },
        InputRef::EffluentFraction(i) => match &inputs.effluent {
            Effluent::Measured { fractions, .. } => fractions.get(i).copied().unwrap_or(0.0),
            _ => 0.0,
        },
        InputRef::EffluentTemperature => inputs.effluent_temperature.unwrap_or(0.0),
    }
}

/// The direction in which [`shift_fraction`](finite_difference) moves raw fractions `w` when
/// fraction `i` grows: `+1` for `i`, the others shrink in proportion so that the sum stays (all
/// of it on `i` when the others sum to zero).
fn shift_direction(w: &[f64], i: usize, d: &mut [f64]) {
    let total: f64 = w.iter().sum();
    let rest = total - w[i];
    for (k, (dk, wk)) in d.iter_mut().zip(w).enumerate() {
        *dk = if k == i {
            1.0
        } else if rest > 0.0 {
            -wk / rest
        } else {
            0.0
        };
    }
}

/// The derivative of [`System::mole_fractions`] of `w` in the direction `d` (raw fractions):
/// mole fractions `x` into `x` and their derivative into `dx`.
fn mole_fractions_along(system: &System, w: &[f64], basis: Basis, d: &[f64], x: &mut [f64], dx: &mut [f64]) {
    for (k, c) in system.components.iter().enumerate() {
        let (q, dq) = match basis {
            Basis::Mole => (w[k], d[k]),
            Basis::Mass => (w[k] / c.molar_mass, d[k] / c.molar_mass),
        };
        x[k] = q;
        dx[k] = dq;
    }
    let (total, dtotal): (f64, f64) = (x.iter().sum(), dx.iter().sum());
    if total != 0.0 {
        for (xk, dk) in x.iter_mut().zip(dx.iter_mut()) {
            *xk /= total;
            *dk = (*dk - *xk * dtotal) / total;
        }
    }
}

/// Mean molar mass (g/mol) of mole fractions `x`, and its derivative along `dx`.
fn molar_mass_along(system: &System, x: &[f64], dx: &[f64]) -> (f64, f64) {
    let mut mw = 0.0;
    let mut dmw = 0.0;
    for ((c, xk), dk) in system.components.iter().zip(x).zip(dx) {
        mw += xk * c.molar_mass;
        dmw += dk * c.molar_mass;
    }
    (mw, dmw)
}

/// What the analytic partials of the material-balance inputs need, computed once per
/// propagation: the molar enthalpies at the balance temperature and, per component, the
/// derivative of the effluent enthalpy flow with respect to its feed flow.
struct Partials {
    /// `H_i(T)`, J/mol, T the balance's (solved or measured) effluent temperature.
    h_t: Vec<f64>,
    /// `∂H_out/∂n_k` (J/mol): how the effluent enthalpy flow moves with component k's total
    /// feed flow through the material balance.
    dh_out: Vec<f64>,
    /// Component feed flows of all feeds together, mol/s.
    feed_total: Vec<f64>,
}

impl Partials {
    fn new(system: &System, inputs: &Inputs, outcome: &Outcome) -> Partials {
        let n = system.len();
        let t = outcome.t_out;
        let h_t: Vec<f64> = system.models.iter().map(|m| m.h(t)).collect();
        let mut feed_total = vec![0.0; n];
        for flows in &outcome.feed_flows {
            for (total, f) in feed_total.iter_mut().zip(flows) {
                *total += f;
            }
        }
        let dh_out = match &inputs.effluent {
            Effluent::Mixed => h_t.clone(),
            Effluent::Reacted { .. } => {
                // ṅ_out = ṅ_in + Σ_r ν_r ξ_r with ξ_r = X_r ṅ_key,in / (−ν_key).
                let mut d = h_t.clone();
                for (r, reaction) in system.reactions.iter().enumerate() {
                    let x = outcome.conversions.get(r).copied().unwrap_or(0.0);
                    let dh_r: f64 = reaction.nu.iter().zip(&h_t).map(|(nu, h)| nu * h).sum();
                    d[reaction.key] += x * dh_r / -reaction.nu[reaction.key];
                }
                d
            }
            Effluent::Measured { fractions, basis } => {
                // ṅ_out,i = x_i · ṁ_in / M_out: every feed component moves the total by its mass.
                let x = system.mole_fractions(fractions, *basis);
                let mw_out: f64 = x.iter().zip(&system.components).map(|(x, c)| x * c.molar_mass).sum();
                let h_mix: f64 = x.iter().zip(&h_t).map(|(x, h)| x * h).sum();
                system
                    .components
                    .iter()
                    .map(|c| if mw_out > 0.0 { c.molar_mass / mw_out * h_mix } else { 0.0 })
                    .collect()
            }
        };
        Partials { h_t, dh_out, feed_total }
    }

    /// `∂residual/∂n_jk` for each component k of feed j: through the effluent, minus its own
    /// enthalpy at the feed temperature.
    fn per_feed_component(&self, system: &System, t_feed: f64, k: usize) -> f64 {
        self.dh_out[k] - system.models[k].h(t_feed)
    }
}

/// `∂residual/∂x` of an input that acts through the material balance (flows, fractions,
/// conversions), analytic: the balance is linear in the component flows, which depend on these
/// inputs through the normalisation of fractions, the molar mass (mass bases) and the
/// stoichiometry.
fn material_partial(
    system: &System,
    inputs: &Inputs,
    outcome: &Outcome,
    p: &Partials,
    input: InputRef,
) -> f64 {
    use super::balance::Unknown;
    let n = system.len();
    match input {
        InputRef::FeedFlow(j) => {
            let Some(feed) = inputs.feeds.get(j) else { return 0.0 };
            let x = system.mole_fractions(&feed.fractions, feed.basis);
            // ∂ṅ_k/∂F: the mole fraction (molar flow), or per kg/s of the feed's molar mass.
            let per = match feed.flow {
                FlowValue::Molar(_) => 1.0,
                FlowValue::Mass(_) => {
                    let mw: f64 = x.iter().zip(&system.components).map(|(x, c)| x * c.molar_mass).sum();
                    if mw > 0.0 { 1000.0 / mw } else { 0.0 }
                }
            };
            (0..n).map(|k| x[k] * per * p.per_feed_component(system, feed.temperature, k)).sum()
        }
        InputRef::FeedFraction(j, i) => {
            let Some(feed) = inputs.feeds.get(j).filter(|f| i < f.fractions.len()) else { return 0.0 };
            let (mut d, mut x, mut dx) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
            shift_direction(&feed.fractions, i, &mut d);
            mole_fractions_along(system, &feed.fractions, feed.basis, &d, &mut x, &mut dx);
            // ṅ_k = x_k · total, total = F (molar) or 1000 F / M (mass).
            let (total, dtotal) = match feed.flow {
                FlowValue::Molar(f) => (f, 0.0),
                FlowValue::Mass(m) => {
                    let (mw, dmw) = molar_mass_along(system, &x, &dx);
                    if mw > 0.0 { (m * 1000.0 / mw, -m * 1000.0 * dmw / (mw * mw)) } else { (0.0, 0.0) }
                }
            };
            (0..n)
                .map(|k| (dx[k] * total + x[k] * dtotal) * p.per_feed_component(system, feed.temperature, k))
                .sum()
        }
        InputRef::Conversion(r) => {
            let given = match &inputs.effluent {
                Effluent::Reacted { conversions } => conversions.get(r).copied().flatten().is_some(),
                _ => false,
            };
            let Some(reaction) = system.reactions.get(r) else { return 0.0 };
            if !given || outcome.unknown == Unknown::Conversion(r) {
                // The conversion solved for is not an input of the residual.
                return 0.0;
            }
            let dh_r: f64 = reaction.nu.iter().zip(&p.h_t).map(|(nu, h)| nu * h).sum();
            p.feed_total[reaction.key] * dh_r / -reaction.nu[reaction.key]
        }
        InputRef::EffluentFraction(i) => {
            let Effluent::Measured { fractions, basis } = &inputs.effluent else { return 0.0 };
            if i >= fractions.len() {
                return 0.0;
            }
            let (mut d, mut x, mut dx) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
            shift_direction(fractions, i, &mut d);
            mole_fractions_along(system, fractions, *basis, &d, &mut x, &mut dx);
            let mass_in: f64 =
                p.feed_total.iter().zip(&system.components).map(|(n, c)| n * c.molar_mass).sum();
            let (mw, dmw) = molar_mass_along(system, &x, &dx);
            let (total, dtotal) =
                if mw > 0.0 { (mass_in / mw, -mass_in * dmw / (mw * mw)) } else { (0.0, 0.0) };
            (0..n).map(|k| (dx[k] * total + x[k] * dtotal) * p.h_t[k]).sum()
        }
        InputRef::FeedTemperature(_)
        | InputRef::Duty
        | InputRef::HeatLoss
        | InputRef::EffluentTemperature => 0.0,
    }
}

/// `∂residual/∂x` (the residual is `H_out(T) − H_in − Q + Q_loss`), every one analytic.
fn partial(
    system: &System,
    inputs: &Inputs,
    outcome: &Outcome,
    p: &mut Option<Partials>,
    input: InputRef,
) -> f64 {
    use super::balance::Unknown;
    match input {
        // The duty being solved for is not an input of the residual.
        InputRef::Duty => {
            if outcome.unknown == Unknown::Duty {
                0.0
            } else {
                -1.0
            }
        }
        InputRef::HeatLoss => 1.0,
        // Only duty and conversion solves evaluate the balance at the measured temperature.
        InputRef::EffluentTemperature => {
            if outcome.unknown == Unknown::Temperature {
                0.0
            } else {
                outcome.cp_out
            }
        }
        // −(heat-capacity flow of feed j at its temperature).
        InputRef::FeedTemperature(j) => match (inputs.feeds.get(j), outcome.feed_flows.get(j)) {
            (Some(feed), Some(flows)) => -system.stream_h_cp(flows, feed.temperature).1,
            _ => 0.0,
        },
        InputRef::FeedFlow(_)
        | InputRef::FeedFraction(..)
        | InputRef::Conversion(_)
        | InputRef::EffluentFraction(_) => {
            let p = p.get_or_insert_with(|| Partials::new(system, inputs, outcome));
            material_partial(system, inputs, outcome, p, input)
        }
    }
}

/// The combined standard uncertainty of the unknown and the index of the dominant input, for
/// `items` of (input, standard uncertainty): the same numbers as [`propagate`] without its
/// labels and per-input report (the service's path, once per interval).
pub fn combined(
    system: &System,
    inputs: &Inputs,
    outcome: &Outcome,
    items: &[(InputRef, f64)],
) -> (f64, Option<usize>) {
    let slope = system.residual_slope(outcome);
    let mut partials = None;
    let contribution = |p: &mut Option<Partials>, (input, u): (InputRef, f64)| {
        let df = partial(system, inputs, outcome, p, input);
        let sensitivity = if slope != 0.0 && df.is_finite() { -df / slope } else { 0.0 };
        (sensitivity * u).abs()
    };
    // Contributions kept on the stack for the shares (computed again for a longer list).
    const KEPT: usize = 32;
    let mut kept = [0.0; KEPT];
    let mut variance = 0.0;
    for (k, item) in items.iter().enumerate() {
        let c = contribution(&mut partials, *item);
        if let Some(slot) = kept.get_mut(k) {
            *slot = c;
        }
        variance += c * c;
    }
    if variance <= 0.0 {
        return (variance.sqrt(), None);
    }
    // The same arithmetic as the shares of `propagate` (and its choice among equal shares:
    // the last).
    let mut dominant: Option<(usize, f64)> = None;
    for (k, item) in items.iter().enumerate() {
        let c = if k < KEPT { kept[k] } else { contribution(&mut partials, *item) };
        let share = c * c / variance;
        if share > 0.0 && dominant.is_none_or(|(_, best)| share.total_cmp(&best).is_ge()) {
            dominant = Some((k, share));
        }
    }
    (variance.sqrt(), dominant.map(|d| d.0))
}

/// Propagate `uncertain` inputs to the unknown of `outcome`.
pub fn propagate(
    system: &System,
    inputs: &Inputs,
    outcome: &Outcome,
    uncertain: &[Uncertain],
) -> UncertaintyReport {
    let slope = system.residual_slope(outcome);
    // Built on the first input that needs it.
    let mut partials = None;
    let mut contributions: Vec<Contribution> = uncertain
        .iter()
        .map(|item| {
            let x = value_of(inputs, item.input);
            let df = partial(system, inputs, outcome, &mut partials, item.input);
            let sensitivity = if slope != 0.0 && df.is_finite() { -df / slope } else { 0.0 };
            Contribution {
                label: item.label.clone(),
                value: x,
                u: item.u,
                sensitivity,
                contribution: (sensitivity * item.u).abs(),
                share: 0.0,
            }
        })
        .collect();
    let variance: f64 = contributions.iter().map(|c| c.contribution * c.contribution).sum();
    for c in &mut contributions {
        c.share = if variance > 0.0 { c.contribution * c.contribution / variance } else { 0.0 };
    }
    UncertaintyReport { u: variance.sqrt(), contributions }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    //! The analytic partials against the central differences of the residual that computed
    //! them before (step `10⁻⁴·max(|x|, scale)`), on mixing, reacting and measured-effluent
    //! balances, both enthalpy paths, molar and mass flows and bases, every unknown.
    use super::*;
    use crate::thermo::Library;
    use crate::thermo::balance::{DEFAULT_BOUNDS, FeedInput, PathChoice, Reaction, Unknown};
    use crate::thermo::enthalpy::EnthalpyPath;

    /// Shift one fraction by `h`, rescaling the others so the sum is unchanged.
    fn shift_fraction(fractions: &mut [f64], i: usize, h: f64) {
        let total: f64 = fractions.iter().sum();
        let xi = fractions[i];
        let rest = total - xi;
        if rest <= 0.0 {
            fractions[i] += h;
            return;
        }
        let scale = (rest - h) / rest;
        for (k, x) in fractions.iter_mut().enumerate() {
            if k == i {
                *x += h;
            } else {
                *x *= scale;
            }
        }
    }

    /// Undo [`perturb`] on `p` (a copy of `base` with one input perturbed), without allocating.
    fn restore(p: &mut Inputs, base: &Inputs, input: InputRef) {
        match input {
            InputRef::FeedFlow(j) | InputRef::FeedTemperature(j) | InputRef::FeedFraction(j, _) => {
                if let (Some(f), Some(b)) = (p.feeds.get_mut(j), base.feeds.get(j)) {
                    f.flow = b.flow;
                    f.temperature = b.temperature;
                    f.fractions.copy_from_slice(&b.fractions);
                }
            }
            InputRef::Duty => p.duty = base.duty,
            InputRef::HeatLoss => p.heat_loss = base.heat_loss,
            InputRef::Conversion(_) | InputRef::EffluentFraction(_) => p.effluent.clone_from(&base.effluent),
            InputRef::EffluentTemperature => p.effluent_temperature = base.effluent_temperature,
        }
    }

    /// Perturb one input of `p` by `h`.
    fn perturb(p: &mut Inputs, input: InputRef, h: f64) {
        match input {
            InputRef::FeedFlow(j) => {
                if let Some(f) = p.feeds.get_mut(j) {
                    f.flow = f.flow.with_value(f.flow.value() + h);
                }
            }
            InputRef::FeedTemperature(j) => {
                if let Some(f) = p.feeds.get_mut(j) {
                    f.temperature += h;
                }
            }
            InputRef::FeedFraction(j, i) => {
                if let Some(f) = p.feeds.get_mut(j)
                    && i < f.fractions.len()
                {
                    shift_fraction(&mut f.fractions, i, h);
                }
            }
            InputRef::Duty => p.duty = p.duty.map(|d| d + h),
            InputRef::HeatLoss => p.heat_loss += h,
            InputRef::Conversion(r) => {
                if let Effluent::Reacted { conversions } = &mut p.effluent
                    && let Some(Some(c)) = conversions.get_mut(r)
                {
                    *c += h;
                }
            }
            InputRef::EffluentFraction(i) => {
                if let Effluent::Measured { fractions, .. } = &mut p.effluent
                    && i < fractions.len()
                {
                    shift_fraction(fractions, i, h);
                }
            }
            InputRef::EffluentTemperature => p.effluent_temperature = p.effluent_temperature.map(|t| t + h),
        }
    }

    fn scale_of(input: InputRef) -> f64 {
        match input {
            InputRef::FeedTemperature(_) | InputRef::EffluentTemperature => 1.0,
            InputRef::FeedFraction(..) | InputRef::EffluentFraction(_) | InputRef::Conversion(_) => 0.01,
            InputRef::FeedFlow(_) => 1e-3,
            InputRef::Duty | InputRef::HeatLoss => 1.0,
        }
    }

    /// The central difference of the residual at the solution (the former way).
    fn numeric(system: &System, inputs: &Inputs, outcome: &Outcome, input: InputRef) -> f64 {
        let y = match outcome.unknown {
            Unknown::Temperature => outcome.t_out,
            Unknown::Duty => outcome.duty,
            Unknown::Conversion(r) => outcome.conversions[r],
        };
        let h = 1e-4 * value_of(inputs, input).abs().max(scale_of(input));
        let mut scratch = inputs.clone();
        perturb(&mut scratch, input, h);
        let f_plus = system.residual(&scratch, outcome.unknown, y);
        restore(&mut scratch, inputs, input);
        perturb(&mut scratch, input, -h);
        let f_minus = system.residual(&scratch, outcome.unknown, y);
        (f_plus - f_minus) / (2.0 * h)
    }

    const IDS: [&str; 4] = ["water", "methyl-acetate", "methanol", "acetic-acid"];

    fn system(path: EnthalpyPath, reacting: bool) -> System {
        let lib = Library::builtin().unwrap();
        let comps = IDS.iter().map(|id| lib.resolve(id).unwrap()).collect();
        let reactions = if reacting {
            vec![Reaction { label: "hydrolysis".into(), nu: vec![-1.0, -1.0, 1.0, 1.0], key: 1 }]
        } else {
            Vec::new()
        };
        System::new(comps, &[PathChoice::Force(path); 4], None, reactions, DEFAULT_BOUNDS).unwrap()
    }

    fn feeds(mass: bool) -> Vec<FeedInput> {
        let (basis, flow1, flow2) = if mass {
            (Basis::Mass, FlowValue::Mass(0.21), FlowValue::Mass(0.05))
        } else {
            (Basis::Mole, FlowValue::Molar(10.7), FlowValue::Molar(2.1))
        };
        vec![
            FeedInput { flow: flow1, temperature: 318.0, fractions: vec![0.62, 0.30, 0.05, 0.03], basis },
            FeedInput { flow: flow2, temperature: 301.5, fractions: vec![0.9, 0.0, 0.1, 0.0], basis },
        ]
    }

    fn every_input(inputs: &Inputs) -> Vec<InputRef> {
        let mut v = vec![InputRef::Duty, InputRef::HeatLoss, InputRef::EffluentTemperature];
        for (j, f) in inputs.feeds.iter().enumerate() {
            v.extend([InputRef::FeedFlow(j), InputRef::FeedTemperature(j)]);
            v.extend((0..f.fractions.len()).map(|i| InputRef::FeedFraction(j, i)));
        }
        match &inputs.effluent {
            Effluent::Reacted { conversions } => v.extend((0..conversions.len()).map(InputRef::Conversion)),
            Effluent::Measured { fractions, .. } => {
                v.extend((0..fractions.len()).map(InputRef::EffluentFraction));
            }
            Effluent::Mixed => {}
        }
        v
    }

    /// Every analytic partial equals the central difference within 1e-6 of the largest partial
    /// of the same balance (the differences are exact up to rounding where the residual is
    /// linear in the input, within their own truncation error where it is not).
    fn check(system: &System, inputs: &Inputs, unknown: Unknown) -> usize {
        let outcome = system.solve(inputs, unknown).unwrap();
        let list = every_input(inputs);
        let mut p = None;
        let pairs: Vec<(InputRef, f64, f64)> = list
            .iter()
            .map(|&i| (i, partial(system, inputs, &outcome, &mut p, i), numeric(system, inputs, &outcome, i)))
            .collect();
        let scale = pairs.iter().map(|(_, a, n)| a.abs().max(n.abs())).fold(0.0, f64::max);
        for (input, a, n) in &pairs {
            assert!(
                (a - n).abs() <= 1e-6 * scale.max(1.0),
                "{unknown:?} {input:?}: analytic {a} vs numeric {n}"
            );
        }
        // The report and the service's shortcut agree.
        let items: Vec<(InputRef, f64)> =
            list.iter().map(|&i| (i, 0.01 * value_of(inputs, i).abs().max(1.0))).collect();
        let uncertain: Vec<Uncertain> =
            items.iter().map(|&(input, u)| Uncertain { input, u, label: format!("{input:?}") }).collect();
        let report = propagate(system, inputs, &outcome, &uncertain);
        let (u, dominant) = combined(system, inputs, &outcome, &items);
        assert_eq!(u, report.u);
        assert_eq!(dominant.map(|k| &uncertain[k].label), report.dominant().map(|c| &c.label));
        pairs.len()
    }

    fn base(feeds: Vec<FeedInput>, effluent: Effluent) -> Inputs {
        Inputs {
            feeds,
            effluent,
            duty: Some(160_000.0),
            heat_loss: 2_500.0,
            effluent_temperature: Some(334.0),
            pressure: None,
            bubble_margin: 10.0,
        }
    }

    #[test]
    fn analytic_partials_match_finite_differences_on_mixing_and_reacting_balances() {
        let mut checked = 0;
        for path in [EnthalpyPath::LiquidCp, EnthalpyPath::IdealGasWatson] {
            for mass in [false, true] {
                let mixing = system(path, false);
                let inputs = base(feeds(mass), Effluent::Mixed);
                for unknown in [Unknown::Temperature, Unknown::Duty] {
                    checked += check(&mixing, &inputs, unknown);
                }
                let reacting = system(path, true);
                let inputs = base(feeds(mass), Effluent::Reacted { conversions: vec![Some(0.42)] });
                for unknown in [Unknown::Temperature, Unknown::Duty] {
                    checked += check(&reacting, &inputs, unknown);
                }
                // The measured temperature a little above the one at conversion 0.42.
                let t = reacting.solve(&inputs, Unknown::Temperature).unwrap().t_out;
                let mut inputs = base(feeds(mass), Effluent::Reacted { conversions: vec![None] });
                inputs.effluent_temperature = Some(t + 0.2);
                checked += check(&reacting, &inputs, Unknown::Conversion(0));
            }
        }
        assert!(checked > 100, "{checked}");
    }

    #[test]
    fn analytic_partials_match_finite_differences_with_a_measured_effluent() {
        for path in [EnthalpyPath::LiquidCp, EnthalpyPath::IdealGasWatson] {
            let sys = system(path, true);
            for (mass, basis) in [(false, Basis::Mole), (true, Basis::Mass), (false, Basis::Mass)] {
                let effluent = Effluent::Measured { fractions: vec![0.55, 0.16, 0.16, 0.13], basis };
                let inputs = base(feeds(mass), effluent);
                for unknown in [Unknown::Temperature, Unknown::Duty] {
                    check(&sys, &inputs, unknown);
                }
            }
        }
    }

    #[test]
    fn fractions_that_do_not_sum_to_one_and_a_lone_component() {
        // Raw fractions summing to 0.96 (the calc case rescales them), and a feed of one
        // component: the shift then moves that fraction alone.
        let sys = system(EnthalpyPath::LiquidCp, true);
        let mut f = feeds(false);
        f[0].fractions = vec![0.6, 0.28, 0.05, 0.03];
        f[1].fractions = vec![1.0, 0.0, 0.0, 0.0];
        let inputs = base(f, Effluent::Reacted { conversions: vec![Some(0.3)] });
        check(&sys, &inputs, Unknown::Temperature);
        check(&sys, &inputs, Unknown::Duty);
    }
}
