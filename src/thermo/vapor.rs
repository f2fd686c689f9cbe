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
    let guess = 350.0;
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
