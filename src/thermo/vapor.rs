//! Vapour pressure (DIPPR eq. 101, with the Lee–Kesler generalized correlation as fallback)
//! and the ideal-solution bubble point by Raoult's law.
//!
//! Raoult's law ignores activity coefficients. Water with alcohols or esters deviates
//! positively, so the real bubble point is *lower* than the one computed here (by 0.5–12.9 K for
//! the aqueous mixtures vetted in the reference data): a "does not boil" verdict needs margin.

use super::component::Component;
use super::solver::{Tolerance, newton_brent};

/// Which correlation gives a component's vapour pressure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PsatModel {
    /// DIPPR eq. 101: `ln(P/Pa) = c1 + c2/T + c3 ln T + c4 T^c5`.
    Dippr101([f64; 5]),
    /// Lee–Kesler with Tc, Pc and the acentric factor.
    LeeKesler {
        /// Critical temperature, K.
        tc: f64,
        /// Critical pressure, Pa.
        pc: f64,
        /// Acentric factor.
        omega: f64,
    },
}

impl PsatModel {
    /// The best available model for a component, if any.
    pub fn for_component(c: &Component) -> Option<PsatModel> {
        if let Some(p) = &c.psat {
            return Some(PsatModel::Dippr101(p.c));
        }
        match (c.pc, c.omega) {
            (Some(pc), Some(omega)) => Some(PsatModel::LeeKesler { tc: c.tc, pc, omega }),
            _ => None,
        }
    }

    /// `ln(Psat/Pa)` and its derivative with respect to T.
    #[inline]
    pub fn ln_psat(&self, t: f64) -> (f64, f64) {
        self.ln_psat_at(t, t.ln())
    }

    /// [`ln_psat`](Self::ln_psat) with `ln_t = ln T` given (shared by every component at T).
    #[inline]
    fn ln_psat_at(&self, t: f64, ln_t: f64) -> (f64, f64) {
        match *self {
            PsatModel::Dippr101(c) => {
                let tp = if c[3] == 0.0 { 0.0 } else { c[3] * t.powf(c[4]) };
                let v = c[0] + c[1] / t + c[2] * ln_t + tp;
                let d = -c[1] / (t * t) + c[2] / t + if c[4] == 0.0 { 0.0 } else { tp * c[4] / t };
                (v, d)
            }
            PsatModel::LeeKesler { tc, pc, omega } => {
                // Lee & Kesler, AIChE J. 21 (1975) 510; coefficients as in Reid, Prausnitz and
                // Poling, The Properties of Gases and Liquids, 4th ed. (1987).
                let tr = t / tc;
                let tr6 = tr.powi(6);
                let f0 = 5.92714 - 6.09648 / tr - 1.28862 * tr.ln() + 0.169347 * tr6;
                let f1 = 15.2518 - 15.6875 / tr - 13.4721 * tr.ln() + 0.43577 * tr6;
                let df0 = 6.09648 / (tr * tr) - 1.28862 / tr + 6.0 * 0.169347 * tr6 / tr;
                let df1 = 15.6875 / (tr * tr) - 13.4721 / tr + 6.0 * 0.43577 * tr6 / tr;
                (pc.ln() + f0 + omega * f1, (df0 + omega * df1) / tc)
            }
        }
    }

    /// Vapour pressure in Pa.
    pub fn psat(&self, t: f64) -> f64 {
        self.ln_psat(t).0.exp()
    }
}

/// Components whose ln Psat a bubble-point iteration keeps on the stack.
const HELD: usize = 16;

/// Search range for bubble points, K.
pub const BUBBLE_RANGE: (f64, f64) = (150.0, 650.0);

/// Ideal-solution bubble point: solve `ln Σ x_i Psat_i(T) = ln P` for T. `x` need not be
/// normalized (it is, here); entries with zero amount are ignored. Returns the temperature and
/// the vapour mole fractions `y_i = x_i Psat_i / P`.
pub fn bubble_point(
    models: &[PsatModel],
    x: &[f64],
    pressure: f64,
) -> Result<(f64, Vec<f64>), super::solver::RootError> {
    bubble_point_from(models, x, pressure, 350.0)
}

/// [`bubble_point`] with Newton's method started at `guess`, K (a nearby bubble point: the
/// same root to within the solver's tolerance, in fewer steps).
pub fn bubble_point_from(
    models: &[PsatModel],
    x: &[f64],
    pressure: f64,
    guess: f64,
) -> Result<(f64, Vec<f64>), super::solver::RootError> {
    let total: f64 = x.iter().sum();
    let ln_p = pressure.ln();
    // ln Σ x_i exp(L_i), computed stably (log-sum-exp), and its derivative. Each component's
    // ln Psat is evaluated once per temperature (kept for the sum when the mixture is small
    // enough for the stack buffer, else evaluated again: the same numbers either way).
    let mut held = [(0.0, 0.0); HELD];
    let keep = models.len() <= HELD;
    let mut g = |t: f64| {
        let ln_t = t.ln();
        let mut m = f64::NEG_INFINITY;
        for (k, (model, &xi)) in models.iter().zip(x).enumerate() {
            if xi > 0.0 {
                let l = model.ln_psat_at(t, ln_t);
                if keep {
                    held[k] = l;
                }
                m = m.max(l.0);
            }
        }
        let (mut s, mut ds) = (0.0, 0.0);
        for (k, (model, &xi)) in models.iter().zip(x).enumerate() {
            if xi > 0.0 {
                let (l, dl) = if keep { held[k] } else { model.ln_psat_at(t, ln_t) };
                let w = xi / total * (l - m).exp();
                s += w;
                ds += w * dl;
            }
        }
        (m + s.ln() - ln_p, ds / s)
    };
    let root = newton_brent(
        &mut g,
        guess,
        BUBBLE_RANGE.0,
        BUBBLE_RANGE.1,
        Tolerance { xtol: 1e-11, ..Tolerance::default() },
    )?;
    let t = root.x;
    let y = models
        .iter()
        .zip(x)
        .map(|(model, &xi)| if xi > 0.0 { xi / total * model.psat(t) / pressure } else { 0.0 })
        .collect();
    Ok((t, y))
}

/// The last bubble point a caller computed: given back when it asks again for the same
/// mixture at the same pressure ([`bubble_point`] is a pure function of the models, the
/// amounts and the pressure, so the result is the same to the bit), else the start of the next
/// solve. An effluent changes little from one interval to the next: from the last bubble
/// point Newton's method meets its tolerance (1e-11 K) in one or two steps instead of five to
/// eight from a fixed start; the root is the same to within that tolerance, not always to the
/// last bit.
#[derive(Debug, Clone, Default)]
pub struct BubbleMemo {
    /// A result is held.
    held: bool,
    /// The models, the amounts and the pressure (bit patterns) it was computed for.
    models: Vec<PsatModel>,
    x: Vec<u64>,
    pressure: u64,
    /// The bubble point and the vapour mole fractions.
    t: f64,
    y: Vec<f64>,
}

impl BubbleMemo {
    /// [`bubble_point`], from the memo when the inputs are bit for bit those of the last call,
    /// else solved from the last bubble point (for the same models).
    pub fn bubble_point(
        &mut self,
        models: &[PsatModel],
        x: &[f64],
        pressure: f64,
    ) -> Result<(f64, Vec<f64>), super::solver::RootError> {
        let same_models = self.held && self.models.as_slice() == models;
        if same_models
            && self.pressure == pressure.to_bits()
            && self.x.len() == x.len()
            && self.x.iter().zip(x).all(|(a, b)| *a == b.to_bits())
        {
            return Ok((self.t, self.y.clone()));
        }
        let guess = if same_models { self.t } else { 350.0 };
        let result = bubble_point_from(models, x, pressure, guess)?;
        if !same_models {
            self.models.clear();
            self.models.extend_from_slice(models);
        }
        self.x.clear();
        self.x.extend(x.iter().map(|v| v.to_bits()));
        self.pressure = pressure.to_bits();
        self.t = result.0;
        self.y.clone_from(&result.1);
        self.held = true;
        Ok(result)
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    /// The memo gives what a fresh solve gives (the same root to within the solver's
    /// tolerance; bit for bit when asked again for the same inputs), for the same and for
    /// changed inputs (models, amounts, pressure).
    #[test]
    fn the_memo_returns_exactly_what_a_fresh_solve_returns() {
        // DIPPR-101 coefficients of water (DIPPR 801, as listed in Perry's Chemical Engineers'
        // Handbook, 8th ed., Table 2-8) and a Lee–Kesler component with methanol's critical
        // constants (Tc 512.5 K, Pc 8.084 MPa, ω 0.565: Poling, Prausnitz and O'Connell, 5th
        // ed., Appendix A) — values from memory; the test compares the memo with the function.
        let water = PsatModel::Dippr101([73.649, -7258.2, -7.3037, 4.1653e-6, 2.0]);
        let methanol = PsatModel::LeeKesler { tc: 512.5, pc: 8.084e6, omega: 0.565 };
        let models = [water, methanol];
        let mut memo = BubbleMemo::default();
        let cases: [(&[PsatModel], [f64; 2], f64); 5] = [
            (&models, [0.97, 0.03], 2.5e5),
            (&models, [0.97, 0.03], 2.5e5),
            (&models, [0.96, 0.04], 2.5e5),
            (&models, [0.96, 0.04], 1.0e5),
            (&models[..1], [1.0, 0.0], 1.0e5),
        ];
        let mut last: Option<(f64, Vec<f64>)> = None;
        for (m, x, p) in cases {
            let x = &x[..m.len()];
            let fresh = bubble_point(m, x, p).unwrap();
            let memo = memo.bubble_point(m, x, p).unwrap();
            assert!((fresh.0 - memo.0).abs() < 1e-9, "{x:?} at {p} Pa: {} vs {}", fresh.0, memo.0);
            for (a, b) in fresh.1.iter().zip(&memo.1) {
                assert!((a - b).abs() < 1e-9, "{:?} vs {:?}", fresh.1, memo.1);
            }
            // Asked again for the same inputs: the same result to the bit.
            if let Some(prev) = last.as_ref().filter(|_| m.len() == 2 && x == [0.97, 0.03] && p == 2.5e5) {
                assert_eq!(prev.0.to_bits(), memo.0.to_bits());
            }
            last = Some(memo);
        }
        // Water alone at 1 atm boils at 373.12 K (IAPWS-95: 373.124 K at 101.325 kPa).
        let (t, _) = memo.bubble_point(&models[..1], &[1.0], 101_325.0).unwrap();
        assert!((t - 373.12).abs() < 0.1, "{t}");
    }
}
