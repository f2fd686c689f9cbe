//! Steady-state reconciliation of an effluent analyzer with the material balance.
//!
//! A measured effluent composition is never put into the enthalpy balance as it is: with
//! formation enthalpies of hundreds of kJ/mol, an analyzer error of a few tenths of a mol%
//! moves the predicted temperature by kelvins. Instead the extents of the unit's reactions are
//! estimated from the analysis by weighted least squares. Every effluent the reactions can
//! produce from the measured feed closes the element balance by construction (the reactions
//! conserve atoms), so the estimate is constrained to the element balance and the
//! stoichiometry; this is the classical reduction of the linear reconciliation problem to the
//! reaction (null) space of the element matrix (Crowe, AIChE J. 32 (1986) 616; Narasimhan &
//! Jordache, *Data Reconciliation and Gross Error Detection*, Gulf, 2000, ch. 3 and 7).
//!
//! With `n(ξ) = F + Σ_r ν_r ξ_r` the effluent molar flows, the analyzer reports the fractions
//! `ŷ_i(ξ) = m_i n_i / Σ_j m_j n_j` (`m = 1` on a mole basis, the molar mass on a mass basis).
//! The extents minimise `Σ_i ((y_i − ŷ_i(ξ))/σ_i)²` over the components the analyzer reports
//! (Gauss–Newton, the effluent flows kept non-negative). The covariance of the extents is
//! `(JᵀJ)⁻¹` of the weighted Jacobian, scaled up by the reduced chi-square when the fit is worse
//! than the stated analyzer uncertainty says (the Birge ratio, so that an optimistic σ does not
//! make the conversions look better known than they are). The minimum itself is the global
//! test: under a correct model and σ it follows a chi-square distribution with
//! `reported − R − (1 if normalised)` degrees of freedom.
//!
//! The feed is itself uncertain: a composition typed in as a design value drifts with the
//! upstream plant, and a feed analyzer has its own noise. Each feed component flow with a
//! stated standard uncertainty `s_i` (mol/s) gets a correction `δ_i`, estimated with the
//! extents, `n(ξ, δ) = F + δ + Σ_r ν_r ξ_r`, and the prior `δ_i/s_i ~ N(0, 1)` enters the sum
//! of squares as a pseudo-measurement (Narasimhan & Jordache 2000, ch. 3: measured and
//! unmeasured variables with a prior). One parameter and one residual each, so the degrees of
//! freedom of the global test are unchanged; what the analyzer says that an ordinary feed
//! variation explains no longer fails it.

use super::balance::{Basis, System};

/// Why an analysis could not be reconciled.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ReconcileError {
    /// The analyzer reports fewer components than there are reactions to estimate.
    #[error(
        "the effluent analyzer reports {reported} component(s), too few for {reactions} reaction extent(s)"
    )]
    TooFewComponents {
        /// Components reported.
        reported: usize,
        /// Reactions.
        reactions: usize,
    },
    /// A reaction's key reactant is not fed.
    #[error("no {component} is fed, so the conversion of reaction {} is undefined", .reaction + 1)]
    NoKeyFeed {
        /// Reaction index.
        reaction: usize,
        /// Key component id.
        component: String,
    },
    /// The analysis does not determine an extent (the reactions look alike to the analyzer).
    #[error("the reported components do not determine the extent of every reaction")]
    Singular,
    /// Non-finite input.
    #[error("the analysis or the feed is not finite")]
    NotFinite,
}

/// The reconciled effluent.
#[derive(Debug, Clone, PartialEq)]
pub struct Reconciled {
    /// Reaction extents, mol/s.
    pub extents: Vec<f64>,
    /// Key conversion of each reaction.
    pub conversions: Vec<f64>,
    /// Covariance of the conversions (R × R, row-major).
    pub conversion_covariance: Vec<Vec<f64>>,
    /// Minimum weighted sum of squares (the global test statistic).
    pub chi_square: f64,
    /// Its degrees of freedom.
    pub dof: usize,
    /// Sum of the reported fractions before normalisation.
    pub sum: f64,
    /// Whether the reported fractions were normalised (the analyzer reports every component).
    pub normalised: bool,
    /// Reconciled effluent fractions in the analyzer's basis.
    pub fractions: Vec<f64>,
}

impl Reconciled {
    /// Standard uncertainty of reaction `r`'s conversion.
    pub fn u_conversion(&self, r: usize) -> f64 {
        self.conversion_covariance.get(r).and_then(|row| row.get(r)).map_or(0.0, |v| v.max(0.0).sqrt())
    }
}

/// Upper `1 − 10⁻³` points of the chi-square distribution for 1 to 10 degrees of freedom.
/// Source: NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4 (α = 0.001).
const CHI2_999: [f64; 10] = [10.828, 13.816, 16.266, 18.467, 20.515, 22.458, 24.322, 26.125, 27.877, 29.588];

/// The upper `1 − 10⁻³` point of the chi-square distribution with `dof` degrees of freedom:
/// tabulated up to 10, the Wilson–Hilferty cube-root approximation beyond (Wilson & Hilferty,
/// PNAS 17 (1931) 684; within 1 % of the table there).
pub fn chi_square_999(dof: usize) -> f64 {
    if dof == 0 {
        return f64::INFINITY;
    }
    if let Some(v) = CHI2_999.get(dof - 1) {
        return *v;
    }
    let k = dof as f64;
    let z = 3.090_232; // standard normal 0.999 quantile
    let c = 2.0 / (9.0 * k);
    k * (1.0 - c + z * c.sqrt()).powi(3)
}

impl System {
    /// Reconcile an effluent analysis with the feed `feed_total` (mol/s per component).
    /// `reported[i]`: the analyzer's fraction of component i in `basis` (`None`: not reported)
    /// and its standard uncertainty (absolute fraction). `feed_sigma[i]`: the standard
    /// uncertainty of the feed of component i, mol/s (0 or absent: known exactly).
    pub fn reconcile(
        &self,
        feed_total: &[f64],
        feed_sigma: &[f64],
        reported: &[Option<(f64, f64)>],
        basis: Basis,
    ) -> Result<Reconciled, ReconcileError> {
        let n = self.len();
        let nr = self.reactions.len();
        let m: Vec<f64> = match basis {
            Basis::Mole => vec![1.0; n],
            Basis::Mass => self.components.iter().map(|c| c.molar_mass).collect(),
        };
        let idx: Vec<usize> = (0..n).filter(|i| reported.get(*i).is_some_and(Option::is_some)).collect();
        let raw: Vec<(f64, f64)> = idx.iter().filter_map(|i| reported[*i]).collect();
        if raw.iter().any(|(y, s)| !y.is_finite() || !s.is_finite())
            || feed_total.iter().chain(feed_sigma).any(|f| !f.is_finite())
        {
            return Err(ReconcileError::NotFinite);
        }
        let sum: f64 = raw.iter().map(|r| r.0).sum();
        let normalised = idx.len() == n && sum > 0.0;
        let y: Vec<f64> = raw.iter().map(|r| if normalised { r.0 / sum } else { r.0 }).collect();
        let sigma: Vec<f64> = raw.iter().map(|r| r.1.max(1e-6)).collect();
        let used = usize::from(normalised);
        if idx.len() < nr + used || idx.is_empty() {
            return Err(ReconcileError::TooFewComponents { reported: idx.len(), reactions: nr });
        }
        for (r, re) in self.reactions.iter().enumerate() {
            if feed_total[re.key] <= 0.0 {
                return Err(ReconcileError::NoKeyFeed {
                    reaction: r,
                    component: self.components[re.key].id.clone(),
                });
            }
        }
        // The parameters: the extents, then a correction of each uncertain feed flow.
        let priors: Vec<(usize, f64)> =
            (0..n).filter_map(|i| feed_sigma.get(i).copied().filter(|s| *s > 0.0).map(|s| (i, s))).collect();
        let np = nr + priors.len();
        let flows = |theta: &[f64]| -> Vec<f64> {
            let mut out = feed_total.to_vec();
            for (re, x) in self.reactions.iter().zip(theta) {
                for (o, nu) in out.iter_mut().zip(&re.nu) {
                    *o += nu * x;
                }
            }
            for ((i, _), d) in priors.iter().zip(&theta[nr..]) {
                out[*i] += d;
            }
            out
        };
        // Weighted residuals and Jacobian at θ: the analysis, then the priors.
        let model = |theta: &[f64]| -> ModelAt {
            let nf = flows(theta);
            let s: f64 = nf.iter().zip(&m).map(|(n, m)| n * m).sum();
            let mut res = Vec::with_capacity(idx.len() + priors.len());
            let mut jac = Vec::with_capacity(idx.len() + priors.len());
            for (k, &i) in idx.iter().enumerate() {
                let yhat = m[i] * nf[i] / s;
                res.push((y[k] - yhat) / sigma[k]);
                // ∂ŷ_i/∂n_j = m_i (δ_ij s − n_i m_j) / s².
                let dn = |j: usize| m[i] * (if i == j { s } else { 0.0 } - nf[i] * m[j]) / (s * s);
                let mut row: Vec<f64> = self
                    .reactions
                    .iter()
                    .map(|re| {
                        let dm: f64 = re.nu.iter().zip(&m).map(|(nu, m)| nu * m).sum();
                        m[i] * (re.nu[i] * s - nf[i] * dm) / (s * s) / sigma[k]
                    })
                    .collect();
                row.extend(priors.iter().map(|(j, _)| dn(*j) / sigma[k]));
                jac.push(row);
            }
            for (p, (_, sp)) in priors.iter().enumerate() {
                res.push(-theta[nr + p] / sp);
                let mut row = vec![0.0; np];
                row[nr + p] = 1.0 / sp;
                jac.push(row);
            }
            let fractions = nf.iter().zip(&m).map(|(n, mm)| mm * n / s).collect();
            (res, jac, fractions)
        };
        let scale: f64 = feed_total.iter().map(|f| f.abs()).sum::<f64>().max(1e-300);
        let feasible = |theta: &[f64]| flows(theta).iter().all(|f| *f >= -1e-12 * scale);
        let (theta, (res, jac, fractions)) = gauss_newton(vec![0.0; np], model, feasible, scale)?;
        let chi_square = sse(&res);
        let dof = idx.len() - nr - used;
        let (d, cov) = self.conversion_covariance(feed_total, &jac, &res, dof, chi_square)?;
        let xi = theta[..nr].to_vec();
        let conversions = xi.iter().zip(&d).map(|(x, d)| x * d).collect();
        Ok(Reconciled {
            extents: xi,
            conversions,
            conversion_covariance: cov,
            chi_square,
            dof,
            sum,
            normalised,
            fractions,
        })
    }
}

impl System {
    /// `dX/dξ` per reaction and the covariance of the conversions from the weighted Jacobian
    /// at the solution, scaled by the Birge ratio.
    fn conversion_covariance(
        &self,
        feed_total: &[f64],
        jac: &[Vec<f64>],
        res: &[f64],
        dof: usize,
        chi_square: f64,
    ) -> Result<(Vec<f64>, Vec<Vec<f64>>), ReconcileError> {
        let nr = self.reactions.len();
        let (a, _) = normal_equations(jac, res);
        // The extents' block of the full inverse (the feed corrections are integrated out).
        let mut cov = if nr == 0 { Vec::new() } else { invert_spd(&a).ok_or(ReconcileError::Singular)? };
        cov.truncate(nr);
        for row in &mut cov {
            row.truncate(nr);
        }
        let birge = if dof > 0 { (chi_square / dof as f64).max(1.0) } else { 1.0 };
        // Conversions: X_r = ξ_r·(−ν_key)/F_key, so cov(X) = D·cov(ξ)·D.
        let d: Vec<f64> = self.reactions.iter().map(|re| -re.nu[re.key] / feed_total[re.key]).collect();
        for (r, row) in cov.iter_mut().enumerate() {
            for (c, v) in row.iter_mut().enumerate() {
                *v *= d[r] * d[c] * birge;
            }
        }
        Ok((d, cov))
    }
}

/// Sum of squares.
fn sse(r: &[f64]) -> f64 {
    r.iter().map(|v| v * v).sum()
}

/// What the model gives at a parameter vector: weighted residuals, their Jacobian, and the
/// fitted fractions.
type ModelAt = (Vec<f64>, Vec<Vec<f64>>, Vec<f64>);

/// Gauss–Newton from `theta` with step halving, staying where `feasible`; stops when a step
/// no longer lowers the sum of squares or moves by less than `1e-12·scale`. Returns the
/// parameters and the model there.
fn gauss_newton(
    mut theta: Vec<f64>,
    model: impl Fn(&[f64]) -> ModelAt,
    feasible: impl Fn(&[f64]) -> bool,
    scale: f64,
) -> Result<(Vec<f64>, ModelAt), ReconcileError> {
    let (mut res, mut jac, mut fractions) = model(&theta);
    for _ in 0..50 {
        if theta.is_empty() {
            break;
        }
        let (a, g) = normal_equations(&jac, &res);
        let step = solve_spd(&a, &g).ok_or(ReconcileError::Singular)?;
        let mut t = 1.0;
        let before = sse(&res);
        let mut moved = false;
        for _ in 0..40 {
            let trial: Vec<f64> = theta.iter().zip(&step).map(|(x, d)| x + t * d).collect();
            if feasible(&trial) {
                let (r2, j2, f2) = model(&trial);
                if sse(&r2) <= before * (1.0 + 1e-12) {
                    theta = trial;
                    (res, jac, fractions) = (r2, j2, f2);
                    moved = true;
                    break;
                }
            }
            t *= 0.5;
        }
        let size: f64 = step.iter().map(|d| (t * d).abs()).sum();
        if !moved || size <= 1e-12 * scale {
            break;
        }
    }
    Ok((theta, (res, jac, fractions)))
}

/// `JᵀJ` and `Jᵀr`.
fn normal_equations(jac: &[Vec<f64>], res: &[f64]) -> (Vec<Vec<f64>>, Vec<f64>) {
    let nr = jac.first().map_or(0, Vec::len);
    let mut a = vec![vec![0.0; nr]; nr];
    let mut g = vec![0.0; nr];
    for (row, r) in jac.iter().zip(res) {
        for p in 0..nr {
            g[p] += row[p] * r;
            for q in 0..nr {
                a[p][q] += row[p] * row[q];
            }
        }
    }
    (a, g)
}

/// Cholesky factor of a symmetric positive definite matrix (`None` when it is not).
fn cholesky(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let mut l = vec![vec![0.0; n]; n];
    let trace: f64 = (0..n).map(|i| a[i][i].abs()).sum();
    for i in 0..n {
        for j in 0..=i {
            let s: f64 = (0..j).map(|k| l[i][k] * l[j][k]).sum();
            if i == j {
                let d = a[i][i] - s;
                if d.is_nan() || d <= 1e-14 * trace {
                    return None;
                }
                l[i][i] = d.sqrt();
            } else {
                l[i][j] = (a[i][j] - s) / l[j][j];
            }
        }
    }
    Some(l)
}

/// Solve `A x = b` for a symmetric positive definite `A`.
fn solve_spd(a: &[Vec<f64>], b: &[f64]) -> Option<Vec<f64>> {
    let l = cholesky(a)?;
    let n = b.len();
    let mut z = vec![0.0; n];
    for i in 0..n {
        z[i] = (b[i] - (0..i).map(|k| l[i][k] * z[k]).sum::<f64>()) / l[i][i];
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        x[i] = (z[i] - (i + 1..n).map(|k| l[k][i] * x[k]).sum::<f64>()) / l[i][i];
    }
    Some(x)
}

/// Inverse of a symmetric positive definite matrix.
fn invert_spd(a: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let n = a.len();
    let mut inv = vec![vec![0.0; n]; n];
    for c in 0..n {
        let mut e = vec![0.0; n];
        e[c] = 1.0;
        let col = solve_spd(a, &e)?;
        for r in 0..n {
            inv[r][c] = col[r];
        }
    }
    Some(inv)
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
pub(crate) mod tests {
    use super::*;
    use crate::rng::Rng;
    use crate::thermo::balance::{PathChoice, Reaction};
    use crate::thermo::component::Library;

    /// Methyl acetate hydrolysis: methyl acetate + water → acetic acid + methanol (also the
    /// system of the analyzer filter's tests).
    pub(crate) fn system() -> System {
        let lib = Library::builtin().unwrap();
        let ids = ["methyl_acetate", "water", "acetic_acid", "methanol"];
        let comps = ids.iter().map(|id| lib.resolve(id).unwrap()).collect();
        let reaction = Reaction { label: "hydrolysis".into(), nu: vec![-1.0, -1.0, 1.0, 1.0], key: 0 };
        System::new(comps, &[PathChoice::Auto; 4], None, vec![reaction], (250.0, 600.0)).unwrap()
    }

    /// An exact analysis of the effluent at conversion `x`, in the basis, with noise `sd`.
    fn analysis(
        sys: &System,
        feed: &[f64],
        x: f64,
        basis: Basis,
        sd: f64,
        rng: &mut Rng,
    ) -> Vec<Option<(f64, f64)>> {
        let xi = x * feed[0];
        let nf = [feed[0] - xi, feed[1] - xi, feed[2] + xi, feed[3] + xi];
        let m: Vec<f64> = match basis {
            Basis::Mole => vec![1.0; 4],
            Basis::Mass => sys.components.iter().map(|c| c.molar_mass).collect(),
        };
        let s: f64 = nf.iter().zip(&m).map(|(n, m)| n * m).sum();
        nf.iter().zip(&m).map(|(n, m)| Some((m * n / s + sd * rng.normal(), sd.max(1e-4)))).collect()
    }

    /// Mean and sample standard deviation.
    fn mean_sd(xs: &[f64]) -> (f64, f64) {
        let mean = xs.iter().sum::<f64>() / xs.len() as f64;
        let sd = (xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (xs.len() - 1) as f64).sqrt();
        (mean, sd)
    }

    #[test]
    fn an_exact_analysis_gives_back_the_conversion_in_either_basis() {
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.1];
        let mut rng = Rng::new(1);
        for basis in [Basis::Mole, Basis::Mass] {
            let r =
                sys.reconcile(&feed, &[], &analysis(&sys, &feed, 0.42, basis, 0.0, &mut rng), basis).unwrap();
            assert!((r.conversions[0] - 0.42).abs() < 1e-9, "{basis:?}: {}", r.conversions[0]);
            assert!(r.chi_square < 1e-12);
            assert_eq!(r.dof, 2);
            assert!(r.normalised);
        }
    }

    #[test]
    fn an_unnormalised_analysis_is_normalised_and_reconciled() {
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.0];
        let mut rng = Rng::new(2);
        let mut a = analysis(&sys, &feed, 0.3, Basis::Mole, 0.0, &mut rng);
        for v in a.iter_mut().flatten() {
            v.0 *= 1.013;
        }
        let r = sys.reconcile(&feed, &[], &a, Basis::Mole).unwrap();
        assert!((r.sum - 1.013).abs() < 1e-12);
        assert!((r.conversions[0] - 0.3).abs() < 1e-9);
    }

    #[test]
    fn the_conversion_uncertainty_matches_the_scatter_and_the_global_test_its_distribution() {
        // 0.3 mol% analyzer noise: the stated u(X) agrees with the scatter of X over many
        // analyses, and the statistic exceeds its 0.999 point about once in a thousand.
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.0];
        let mut rng = Rng::new(3);
        let (mut xs, mut us, mut over) = (Vec::new(), Vec::new(), 0);
        for _ in 0..4000 {
            let r = sys
                .reconcile(&feed, &[], &analysis(&sys, &feed, 0.5, Basis::Mole, 0.003, &mut rng), Basis::Mole)
                .unwrap();
            xs.push(r.conversions[0]);
            us.push(r.u_conversion(0));
            if r.chi_square > chi_square_999(r.dof) {
                over += 1;
            }
        }
        let (mean, sd) = mean_sd(&xs);
        let u = us.iter().sum::<f64>() / us.len() as f64;
        assert!((mean - 0.5).abs() < 3.0 * sd / (xs.len() as f64).sqrt() + 1e-4, "mean {mean}");
        assert!((u / sd - 1.0).abs() < 0.15, "stated {u}, scatter {sd}");
        assert!(over <= 20, "{over} of 4000 beyond the 0.999 point");
    }

    #[test]
    fn an_analyzer_that_contradicts_the_stoichiometry_fails_the_global_test() {
        // Methanol reads 4 mol% high: no extent of the one reaction reproduces that.
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.0];
        let mut rng = Rng::new(4);
        let mut a = analysis(&sys, &feed, 0.5, Basis::Mole, 0.0, &mut rng);
        a[3] = a[3].map(|(y, s)| (y + 0.04, s));
        let a: Vec<Option<(f64, f64)>> = a.into_iter().map(|v| v.map(|(y, _)| (y, 0.003))).collect();
        let r = sys.reconcile(&feed, &[], &a, Basis::Mole).unwrap();
        assert!(r.chi_square > chi_square_999(r.dof), "{} vs {}", r.chi_square, chi_square_999(r.dof));
    }

    #[test]
    fn a_feed_that_varies_within_its_stated_uncertainty_passes_the_global_test() {
        // The feed's methyl acetate is 2.5 mol% of the feed below its design value (a typed-in
        // composition that the upstream plant no longer delivers). Without a feed uncertainty
        // the exact analysis of the real effluent contradicts the design feed; with the feed's
        // fractions known to 0.02 it is an ordinary feed variation, and the conversion comes
        // back within its stated uncertainty.
        let sys = system();
        let design = [2.0, 6.0, 0.0, 0.0];
        let total: f64 = design.iter().sum();
        let real = [2.0 - 0.025 * total, 6.0 + 0.025 * total, 0.0, 0.0];
        let mut rng = Rng::new(5);
        let a: Vec<Option<(f64, f64)>> = analysis(&sys, &real, 0.5, Basis::Mole, 0.0, &mut rng)
            .into_iter()
            .map(|v| v.map(|(y, _)| (y, 0.003)))
            .collect();
        let exact = sys.reconcile(&design, &[], &a, Basis::Mole).unwrap();
        assert!(exact.chi_square > chi_square_999(exact.dof), "{}", exact.chi_square);
        let sigma: Vec<f64> = design.iter().map(|f| if *f > 0.0 { 0.02 * total } else { 0.0 }).collect();
        let r = sys.reconcile(&design, &sigma, &a, Basis::Mole).unwrap();
        assert_eq!(r.dof, exact.dof, "the priors leave the degrees of freedom alone");
        assert!(r.chi_square < chi_square_999(r.dof), "{}", r.chi_square);
        // The conversion of the design feed's key that reproduces the real extent.
        let want = 0.5 * real[0] / design[0];
        assert!((r.conversions[0] - want).abs() < 3.0 * r.u_conversion(0), "{} vs {want}", r.conversions[0]);
    }

    #[test]
    fn with_an_uncertain_feed_the_stated_conversion_uncertainty_matches_the_scatter() {
        // Feed flows drawn around the design, each with its stated σ (1 % of the total feed,
        // independently), analyzer noise 0.3 mol%:
        // over many analyses the stated u(X) (of the design feed's conversion) agrees with the
        // scatter, and the global test exceeds its 0.999 point about once in a thousand.
        let sys = system();
        let design = [2.0, 6.0, 0.0, 0.0];
        let total: f64 = design.iter().sum();
        let sigma = [0.01 * total, 0.01 * total, 0.0, 0.0];
        let mut rng = Rng::new(6);
        let (mut xs, mut us, mut over) = (Vec::new(), Vec::new(), 0);
        for _ in 0..3000 {
            let real = [design[0] + sigma[0] * rng.normal(), design[1] + sigma[1] * rng.normal(), 0.0, 0.0];
            let a = analysis(&sys, &real, 0.5, Basis::Mole, 0.003, &mut rng);
            let r = sys.reconcile(&design, &sigma, &a, Basis::Mole).unwrap();
            xs.push(r.conversions[0] - 0.5 * real[0] / design[0]);
            us.push(r.u_conversion(0));
            if r.chi_square > chi_square_999(r.dof) {
                over += 1;
            }
        }
        let (mean, sd) = mean_sd(&xs);
        let u = us.iter().sum::<f64>() / us.len() as f64;
        assert!(mean.abs() < 4.0 * sd / (xs.len() as f64).sqrt() + 1e-4, "bias {mean}");
        assert!((u / sd - 1.0).abs() < 0.2, "stated {u}, scatter {sd}");
        assert!(over <= 15, "{over} of 3000 beyond the 0.999 point");
    }

    #[test]
    fn the_chi_square_points_match_tables() {
        // Source: NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4 (upper
        // critical values of the chi-square distribution, α = 0.001).
        for (dof, table) in [(1, 10.828), (10, 29.588), (11, 31.264), (20, 45.315), (30, 59.703)] {
            let got = chi_square_999(dof);
            assert!((got / table - 1.0).abs() < 0.01, "dof {dof}: {got} vs {table}");
        }
    }

    #[test]
    fn missing_key_feed_and_too_few_components_are_errors() {
        let sys = system();
        let a = vec![Some((0.5, 0.003)), None, None, None];
        assert!(sys.reconcile(&[1.0, 1.0, 0.0, 0.0], &[], &a, Basis::Mole).is_ok());
        let none = vec![None, None, None, None];
        assert!(matches!(
            sys.reconcile(&[1.0, 1.0, 0.0, 0.0], &[], &none, Basis::Mole),
            Err(ReconcileError::TooFewComponents { .. })
        ));
        let a = vec![Some((0.5, 0.003)); 4];
        assert!(matches!(
            sys.reconcile(&[0.0, 1.0, 0.0, 0.0], &[], &a, Basis::Mole),
            Err(ReconcileError::NoKeyFeed { .. })
        ));
    }
}
