//! Molar enthalpy of a pure component on the element basis at 298.15 K (heat-of-formation
//! method), by either of two published paths:
//!
//! * **ideal-gas + Watson**: `H_L(T) = ΔHf°(ig) + ∫_{298.15}^{T} Cp_ig dτ − ΔHvap(T)`, with the
//!   Watson correlation `ΔHvap(T) = ΔHvap(Tb)·((Tc − T)/(Tc − Tb))^n` (zero at and above Tc);
//! * **liquid Cp**: `H_L(T) = ΔHf°(l) + ∫_{298.15}^{T} Cp_L dτ` with a DIPPR eq. 100 polynomial.
//!
//! Both are compiled into one form, `H(T) = k0 + P(T) − W(T)`, where `P` is the analytic
//! antiderivative of the Cp polynomial and `W` the Watson term (absent on the liquid path), so
//! that evaluation needs no branching on the path and mixtures can sum coefficients.

use serde::Serialize;

use super::component::{IdealGasData, LiquidData};

/// Reference temperature of the formation enthalpies, K.
pub const T_REF: f64 = 298.15;

/// Which enthalpy path a component uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum EnthalpyPath {
    /// Ideal-gas formation enthalpy + ideal-gas Cp − Watson ΔHvap.
    IdealGasWatson,
    /// Liquid formation enthalpy + liquid Cp (DIPPR eq. 100).
    LiquidCp,
}

impl EnthalpyPath {
    /// The name used in files and output.
    pub fn as_str(self) -> &'static str {
        match self {
            EnthalpyPath::IdealGasWatson => "ideal-gas-watson",
            EnthalpyPath::LiquidCp => "liquid-cp",
        }
    }
}

/// A Cp polynomial `c0 + c1 T + c2 T² + c3 T³ + c4 T⁴`.
#[inline]
pub fn cp_poly(c: &[f64; 5], t: f64) -> f64 {
    c[0] + t * (c[1] + t * (c[2] + t * (c[3] + t * c[4])))
}

/// Coefficients of the antiderivative divided by T: `a_k = c_k / (k + 1)`.
#[inline]
fn antiderivative_coeffs(c: &[f64; 5]) -> [f64; 5] {
    [c[0], c[1] / 2.0, c[2] / 3.0, c[3] / 4.0, c[4] / 5.0]
}

/// `∫_0^T cp dτ` from the antiderivative coefficients.
#[inline]
fn antiderivative(a: &[f64; 5], t: f64) -> f64 {
    t * (a[0] + t * (a[1] + t * (a[2] + t * (a[3] + t * a[4]))))
}

/// `∫_{t0}^{t1} cp dτ`, analytic.
pub fn cp_integral(c: &[f64; 5], t0: f64, t1: f64) -> f64 {
    let a = antiderivative_coeffs(c);
    antiderivative(&a, t1) - antiderivative(&a, t0)
}

/// The Watson term: parameters of `ΔHvap(T) = hvap_tb · ((tc − T)/(tc − tb))^n`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Watson {
    /// ΔHvap at the reference temperature `tb`, J/mol.
    pub hvap_tb: f64,
    /// Critical temperature, K.
    pub tc: f64,
    /// `ln(tc − tb)`.
    ln_span: f64,
    /// Exponent.
    pub n: f64,
}

impl Watson {
    /// Build from the published parameters.
    pub fn new(hvap_tb: f64, tb: f64, tc: f64, n: f64) -> Watson {
        Watson { hvap_tb, tc, ln_span: (tc - tb).ln(), n }
    }

    /// ΔHvap(T) and its temperature derivative; both zero at and above Tc.
    ///
    /// The power is taken as `exp(n (ln(tc − T) − ln(tc − tb)))` with the second logarithm
    /// computed once: one `ln` and one `exp` per evaluation cost about half a general `pow`
    /// (the hot path of the ideal-gas solve). The two agree to a few units in the last place.
    #[inline]
    pub fn eval(&self, t: f64) -> (f64, f64) {
        let gap = self.tc - t;
        if gap <= 0.0 {
            return (0.0, 0.0);
        }
        let v = self.hvap_tb * (self.n * (gap.ln() - self.ln_span)).exp();
        (v, -self.n * v / gap)
    }
}

/// A pure component's compiled enthalpy function `H(T) = k0 + P(T) − W(T)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PureEnthalpy {
    /// Constant term: formation enthalpy minus `P(298.15)`.
    pub k0: f64,
    /// Cp polynomial.
    pub cp: [f64; 5],
    /// Antiderivative coefficients of `cp`.
    pub a: [f64; 5],
    /// Watson term (ideal-gas path only).
    pub watson: Option<Watson>,
}

impl PureEnthalpy {
    fn from_parts(hf: f64, cp: [f64; 5], watson: Option<Watson>) -> PureEnthalpy {
        let a = antiderivative_coeffs(&cp);
        PureEnthalpy { k0: hf - antiderivative(&a, T_REF), cp, a, watson }
    }

    /// Liquid by the ideal-gas + Watson path with exponent `n`.
    pub fn ideal_gas_watson(d: &IdealGasData, tc: f64, n: f64) -> PureEnthalpy {
        Self::from_parts(d.hf_ig, d.cp, Some(Watson::new(d.hvap_tb, d.tb, tc, n)))
    }

    /// Liquid by the liquid-Cp path.
    pub fn liquid(d: &LiquidData) -> PureEnthalpy {
        Self::from_parts(d.hf_liq, d.cp, None)
    }

    /// Ideal-gas (vapour) enthalpy.
    pub fn vapour(d: &IdealGasData) -> PureEnthalpy {
        Self::from_parts(d.hf_ig, d.cp, None)
    }

    /// Molar enthalpy at T, J/mol.
    #[inline]
    pub fn h(&self, t: f64) -> f64 {
        self.h_cp(t).0
    }

    /// Molar enthalpy (J/mol) and its temperature derivative, the effective Cp (J/(mol K)).
    #[inline]
    pub fn h_cp(&self, t: f64) -> (f64, f64) {
        let mut h = self.k0 + antiderivative(&self.a, t);
        let mut cp = cp_poly(&self.cp, t);
        if let Some(w) = &self.watson {
            let (v, dv) = w.eval(t);
            h -= v;
            cp -= dv;
        }
        (h, cp)
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn analytic_derivative_matches_finite_difference() {
        let d = IdealGasData {
            hf_ig: -241_800.0,
            cp: [36.54, -0.0348, 1.168e-4, -1.30e-7, 5.25e-11],
            cp_range: None,
            tb: 373.12,
            hvap_tb: 40_650.0,
            watson_n: None,
        };
        let h = PureEnthalpy::ideal_gas_watson(&d, 647.096, 0.38);
        for t in [280.0, 330.0, 450.0, 600.0] {
            let e = 1e-4;
            let fd = (h.h(t + e) - h.h(t - e)) / (2.0 * e);
            let (_, cp) = h.h_cp(t);
            assert!((fd - cp).abs() < 1e-5 * cp, "{t}: {fd} vs {cp}");
        }
        // At the reference temperature the ideal-gas path gives ΔHf(ig) − ΔHvap(298.15).
        let w = Watson::new(40_650.0, 373.12, 647.096, 0.38).eval(T_REF).0;
        assert!((h.h(T_REF) - (-241_800.0 - w)).abs() < 1e-9);
    }

    #[test]
    fn vapour_minus_liquid_is_the_watson_heat_of_vaporization() {
        let d = IdealGasData {
            hf_ig: -201_000.0,
            cp: [39.19, -0.0581, 3.50e-4, -3.69e-7, 1.28e-10],
            cp_range: None,
            tb: 337.75,
            hvap_tb: 35_210.0,
            watson_n: None,
        };
        let v = PureEnthalpy::vapour(&d);
        let l = PureEnthalpy::ideal_gas_watson(&d, 512.5, 0.38);
        assert!((v.h(T_REF) - d.hf_ig).abs() < 1e-9);
        for t in [300.0, 337.75, 420.0] {
            let w = Watson::new(d.hvap_tb, d.tb, 512.5, 0.38).eval(t).0;
            assert!((v.h(t) - l.h(t) - w).abs() < 1e-8, "{t}");
        }
        // At Tb the difference is the published ΔHvap(Tb).
        assert!((v.h(337.75) - l.h(337.75) - 35_210.0).abs() < 1e-8);
    }

    /// The exp/ln form is the published power law `hvap_tb · ((tc − T)/(tc − tb))^n` (Watson,
    /// Ind. Eng. Chem. 35 (1943) 398), evaluated here directly with `powf` as the reference.
    #[test]
    fn watson_matches_the_power_law() {
        for (tb, tc, n) in [(373.12, 647.096, 0.38), (337.75, 512.5, 0.38), (329.2, 508.1, 0.41)] {
            let w = Watson::new(35_000.0, tb, tc, n);
            let mut t = 150.0;
            while t < tc {
                let want = 35_000.0 * ((tc - t) / (tc - tb)).powf(n);
                let (v, dv) = w.eval(t);
                assert!((v - want).abs() <= 1e-14 * want, "{t}: {v} vs {want}");
                assert!((dv - -n * want / (tc - t)).abs() <= 1e-13 * dv.abs(), "{t}");
                t += 0.37;
            }
        }
    }

    #[test]
    fn watson_vanishes_at_tc() {
        let w = Watson::new(30_000.0, 350.0, 500.0, 0.38);
        assert_eq!(w.eval(500.0), (0.0, 0.0));
        assert_eq!(w.eval(650.0), (0.0, 0.0));
        assert!((w.eval(350.0).0 - 30_000.0).abs() < 1e-9);
    }
}
