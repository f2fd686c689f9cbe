//! First-order propagation of input standard uncertainties through the implicit balance
//! (GUM law of propagation, JCGM 100:2008 eq. 10, inputs taken as uncorrelated).
//!
//! With `f(y, x) = 0` the balance residual and `y` the solved unknown (temperature, duty or
//! conversion), the implicit function theorem gives `∂y/∂x_k = −(∂f/∂x_k)/(∂f/∂y)`. `∂f/∂y` is
//! analytic ([`System::residual_slope`]). `∂f/∂x_k` is analytic for the duty, the heat loss and
//! the temperatures; for inputs that act through the material balance (mass or molar flows,
//! compositions in either basis, conversions) it is a central difference of the residual at the
//! solution with step `10⁻⁴·max(|x_k|, scale_k)`.

use super::balance::{Effluent, Inputs, Outcome, System};

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

/// `∂residual/∂x` where it has a closed form (the residual is `H_out(T) − H_in − Q + Q_loss`);
/// `None` for flows, fractions and conversions, which go through the material balance and are
/// differentiated numerically.
fn analytic_partial(system: &System, inputs: &Inputs, outcome: &Outcome, input: InputRef) -> Option<f64> {
    use super::balance::Unknown;
    match input {
        // The duty being solved for is not an input of the residual.
        InputRef::Duty => Some(if outcome.unknown == Unknown::Duty { 0.0 } else { -1.0 }),
        InputRef::HeatLoss => Some(1.0),
        // Only duty and conversion solves evaluate the balance at the measured temperature.
        InputRef::EffluentTemperature => {
            Some(if outcome.unknown == Unknown::Temperature { 0.0 } else { outcome.cp_out })
        }
        // −(heat-capacity flow of feed j at its temperature).
        InputRef::FeedTemperature(j) => {
            let (feed, flows) = (inputs.feeds.get(j)?, outcome.feed_flows.get(j)?);
            Some(-system.stream_h_cp(flows, feed.temperature).1)
        }
        InputRef::FeedFlow(_)
        | InputRef::FeedFraction(..)
        | InputRef::Conversion(_)
        | InputRef::EffluentFraction(_) => None,
    }
}

/// Propagate `uncertain` inputs to the unknown of `outcome`.
pub fn propagate(
    system: &System,
    inputs: &Inputs,
    outcome: &Outcome,
    uncertain: &[Uncertain],
) -> UncertaintyReport {
    let unknown = outcome.unknown;
    let y = match unknown {
        super::balance::Unknown::Temperature => outcome.t_out,
        super::balance::Unknown::Duty => outcome.duty,
        super::balance::Unknown::Conversion(r) => outcome.conversions[r],
    };
    let slope = system.residual_slope(outcome);
    // One scratch copy, perturbed and restored in place for each input.
    let mut scratch = inputs.clone();
    let mut contributions: Vec<Contribution> = uncertain
        .iter()
        .map(|item| {
            let x = value_of(inputs, item.input);
            let df = match analytic_partial(system, inputs, outcome, item.input) {
                Some(df) => df,
                None => {
                    let h = 1e-4 * x.abs().max(scale_of(item.input));
                    perturb(&mut scratch, item.input, h);
                    let f_plus = system.residual(&scratch, unknown, y);
                    restore(&mut scratch, inputs, item.input);
                    perturb(&mut scratch, item.input, -h);
                    let f_minus = system.residual(&scratch, unknown, y);
                    restore(&mut scratch, inputs, item.input);
                    (f_plus - f_minus) / (2.0 * h)
                }
            };
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
