//! The effluent analyzer in the balance: each new analysis is reconciled with the feed and the
//! stoichiometry ([`System::reconcile`]) and the conversions it gives are smoothed over the
//! analyses with an exponential filter, so that the balance runs on the unit's conversions and
//! their uncertainty rather than on a raw composition.
//!
//! The filter is a first-order (EWMA) estimate with a time constant `τ` (the unit's
//! `[unit.effluent] smoothing`, 2 h unless set): a new analysis `z` after `Δt` moves the estimate
//! by `α = 1 − exp(−Δt/τ)` of the way, and the estimate's variance is that of a weighted mean of
//! independent analyses, `P ← (1 − α)²·P + α²·R`, with `R` the reconciled variance of `z`. A
//! conversion drifts over days; a 2 h constant cuts the analyzer's scatter about fivefold at a
//! 10-min cycle and follows a drift of 0.05 in three days within 0.002. An analysis that fails
//! the reconciliation's global test (a gross error: it contradicts the stoichiometry) does not
//! enter the estimate, unless nothing else has come for a time constant. The estimate is carried between intervals by the monitor (and the
//! checkpoint); this module stays pure.

use serde::{Deserialize, Serialize};

use crate::thermo::balance::System;
use crate::thermo::reconcile::{Reconciled, chi_square_999};

/// The smoothed conversions carried between intervals.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ExtentEstimate {
    /// Key conversion of each reaction.
    pub conversions: Vec<f64>,
    /// Their variances.
    pub variances: Vec<f64>,
    /// When the last analysis was taken in, ms.
    pub updated_ms: i64,
    /// The analysis last seen (SI fractions as reported), to tell a new one from a held one.
    pub last_seen: Vec<Option<f64>>,
}

impl ExtentEstimate {
    /// Standard uncertainty of reaction `r`'s conversion.
    pub fn u(&self, r: usize) -> f64 {
        self.variances.get(r).map_or(0.0, |v| v.max(0.0).sqrt())
    }
}

/// What this interval's analysis did.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisCheck {
    /// Sum of the reported fractions (before normalisation; 1 when the analyzer does not
    /// report every component).
    pub sum: f64,
    /// The reconciliation's global test statistic and its degrees of freedom.
    pub chi_square: f64,
    /// Degrees of freedom.
    pub dof: usize,
    /// Whether the analysis failed the global test (and was left out of the estimate).
    pub gross_error: bool,
}

/// Take an analysis in. `feed`: the feed per component and its standard uncertainty, mol/s
/// (asked for only when the analysis is new); `reported`: per component, the analyzer's fraction and its standard
/// uncertainty (`None` for components it does not report); `prior`: the estimate so far.
/// Returns the new estimate and, when the analysis is new, its check (`Err` when it cannot
/// be reconciled at all).
pub fn take_in(
    sys: &System,
    feed: impl FnOnce() -> (Vec<f64>, Vec<f64>),
    reported: &[Option<(f64, f64)>],
    basis: crate::thermo::Basis,
    prior: Option<&ExtentEstimate>,
    now_ms: i64,
    tau_ms: i64,
) -> Result<(ExtentEstimate, Option<AnalysisCheck>), String> {
    let seen: Vec<Option<f64>> = reported.iter().map(|r| r.map(|r| r.0)).collect();
    if let Some(p) = prior.filter(|p| p.last_seen == seen && p.conversions.len() == sys.reactions.len()) {
        return Ok((p.clone(), None));
    }
    let (feed_total, feed_sigma) = feed();
    let rec: Reconciled =
        sys.reconcile(&feed_total, &feed_sigma, reported, basis).map_err(|e| e.to_string())?;
    let gross_error = rec.chi_square > chi_square_999(rec.dof);
    let check = AnalysisCheck {
        sum: if rec.normalised { rec.sum } else { 1.0 },
        chi_square: rec.chi_square,
        dof: rec.dof,
        gross_error,
    };
    let var_z: Vec<f64> = (0..rec.conversions.len()).map(|r| rec.u_conversion(r).powi(2)).collect();
    let next = match prior.filter(|p| p.conversions.len() == rec.conversions.len()) {
        // An outlier is left out; when nothing but failing analyses has come for a time
        // constant, the analyzer (or the configured feed) is off for good: they are taken in
        // again (the best there is) and the monitor's balance alert says so.
        Some(p) if gross_error && now_ms - p.updated_ms < tau_ms => {
            ExtentEstimate { last_seen: seen, ..p.clone() }
        }
        Some(p) => {
            let dt = (now_ms - p.updated_ms).max(0) as f64;
            let alpha = 1.0 - (-dt / tau_ms.max(1) as f64).exp();
            let conversions =
                p.conversions.iter().zip(&rec.conversions).map(|(x, z)| x + alpha * (z - x)).collect();
            let variances = p
                .variances
                .iter()
                .zip(&var_z)
                .map(|(pv, r)| (1.0 - alpha).powi(2) * pv + alpha * alpha * r)
                .collect();
            ExtentEstimate { conversions, variances, updated_ms: now_ms, last_seen: seen }
        }
        None => ExtentEstimate {
            conversions: rec.conversions,
            variances: var_z,
            updated_ms: now_ms,
            last_seen: seen,
        },
    };
    Ok((next, Some(check)))
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::rng::Rng;
    use crate::thermo::Basis;
    use crate::thermo::reconcile::tests::system;

    fn analysis(x: f64, sd: f64, rng: &mut Rng) -> Vec<Option<(f64, f64)>> {
        // Feed 2 mol/s methyl acetate, 6 mol/s water: 8 mol/s in and out.
        let nf = [2.0 - 2.0 * x, 6.0 - 2.0 * x, 2.0 * x, 2.0 * x];
        nf.iter().map(|n| Some((n / 8.0 + sd * rng.normal(), 0.003))).collect()
    }

    #[test]
    fn the_filter_cuts_the_scatter_follows_a_drift_and_ignores_held_results() {
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.0];
        let mut rng = Rng::new(5);
        let (tau, cycle) = (2 * 3_600_000, 600_000);
        let mut est: Option<ExtentEstimate> = None;
        let (mut raw, mut smooth) = (Vec::new(), Vec::new());
        // Three days, the conversion falling from 0.55 to 0.50; an analysis every 10 min,
        // held by the export in between (1-min intervals).
        for minute in 0..3 * 1440 {
            let x = 0.55 - 0.05 * minute as f64 / (3.0 * 1440.0);
            let now = minute * 60_000;
            let a = if minute % 10 == 0 {
                analysis(x, 0.003, &mut rng)
            } else {
                est.as_ref().unwrap().last_seen.iter().map(|v| v.map(|v| (v, 0.003))).collect()
            };
            let (next, check) =
                take_in(&sys, || (feed.to_vec(), Vec::new()), &a, Basis::Mole, est.as_ref(), now, tau)
                    .unwrap();
            assert_eq!(check.is_some(), minute % 10 == 0, "minute {minute}");
            if minute % 10 == 0 && minute > 720 {
                raw.push(sys.reconcile(&feed, &[], &a, Basis::Mole).unwrap().conversions[0] - x);
                smooth.push(next.conversions[0] - x);
            }
            // Taken in at its update, unless it failed the global test (about 1 in 1000).
            if check.is_some_and(|c| !c.gross_error) {
                assert_eq!(next.updated_ms, now);
            }
            assert!(now - next.updated_ms < 3 * cycle);
            est = Some(next);
        }
        let rms = |v: &[f64]| (v.iter().map(|e| e * e).sum::<f64>() / v.len() as f64).sqrt();
        // Noise cut to √(α/(2 − α)) ≈ 0.2 of the raw scatter, plus the lag behind the drift
        // (0.0007 per hour × τ = 0.0014).
        assert!(rms(&smooth) < 0.4 * rms(&raw), "smoothed {} vs raw {}", rms(&smooth), rms(&raw));
        assert!(rms(&smooth) < 0.0025, "{}", rms(&smooth));
        // The stated uncertainty is of the order of the error left.
        let u = est.unwrap().u(0);
        assert!(u > 0.3 * rms(&smooth) && u < 3.0 * rms(&smooth), "u {u}, error {}", rms(&smooth));
    }

    #[test]
    fn an_analysis_that_contradicts_the_stoichiometry_is_left_out() {
        let sys = system();
        let feed = [2.0, 6.0, 0.0, 0.0];
        let mut rng = Rng::new(6);
        let (first, _) = take_in(
            &sys,
            || (feed.to_vec(), Vec::new()),
            &analysis(0.5, 0.0, &mut rng),
            Basis::Mole,
            None,
            0,
            7_200_000,
        )
        .unwrap();
        let mut bad = analysis(0.5, 0.0, &mut rng);
        bad[3] = bad[3].map(|(y, u)| (y + 0.05, u));
        let (next, check) = take_in(
            &sys,
            || (feed.to_vec(), Vec::new()),
            &bad,
            Basis::Mole,
            Some(&first),
            600_000,
            7_200_000,
        )
        .unwrap();
        assert!(check.unwrap().gross_error);
        assert_eq!(next.conversions, first.conversions);
        assert_eq!(next.updated_ms, 0);
        // Still failing after a time constant (a new analysis, as bad): taken in.
        bad[0] = bad[0].map(|(y, u)| (y + 1e-4, u));
        let (later, _) = take_in(
            &sys,
            || (feed.to_vec(), Vec::new()),
            &bad,
            Basis::Mole,
            Some(&next),
            7_200_000,
            7_200_000,
        )
        .unwrap();
        assert_eq!(later.updated_ms, 7_200_000);
    }
}
