//! Ranking the candidate causes of an energy deviation by how well each one's signature
//! explains it.
//!
//! Each cause leaves its own signature in the energy residual `y_k = (r_k − μ)·C_k` (W, block
//! k; negative when heat is missing):
//!
//! * heater fouling: a fraction of the reported duty does not reach the process,
//!   `y = −θ·Q`, θ ≥ 0 and growing (a fouled heater only ever delivers less);
//! * a conversion change: a fraction of the key reactant reacts more or less, so the heat of
//!   reaction moves with the key reactant's feed, `y = θ·F_key` (either sign);
//! * more heat loss: `y = −θ·(T − T_ambient)`, θ ≥ 0;
//! * a drifting effluent thermometer: a temperature offset, `y = θ·C`.
//!
//! Each candidate is fitted by least squares with a level and a growth term,
//! `y_k = s_k·(a + b·τ_k)` (τ: hours since the episode began), which is the generalised
//! likelihood ratio test of each signature against the others over the window (Narasimhan &
//! Mah, AIChE J. 33 (1987) 1514, applied here to the block energy residual). With equal
//! parameter counts the log-likelihoods compare directly; the noise variance is the best fit's
//! residual variance (never below the baseline's scatter), inflated for the lag-1
//! autocorrelation of the fit residuals, so that a long, autocorrelated window does not make
//! the ranking overconfident. The posterior probability of each cause is its prior times its
//! likelihood, normalised over the candidates.
//!
//! When the operators move the duty with the feed, the signatures of fouling and of a
//! conversion change are nearly proportional and the data cannot tell them apart: their
//! likelihoods are then equal, the priors decide, and the ranking says how alike the two
//! signatures are (the cosine of the angle between them).

use crate::core::vocabulary::Cause;

/// Prior probabilities of the candidates. These are our judgement of how often each cause
/// is behind a persistent energy deviation of a heated liquid-phase reactor, not a published
/// figure: fouling is the commonest, a slowly drifting thermometer the rarest (a thermometer
/// that steps is caught by the instrument checks). A thermometer offset and a conversion change
/// both scale with the flow, so without a change of the feed composition only these priors
/// order them.
const PRIORS: [(Candidate, f64); 4] = [
    (Candidate::Fouling, 0.42),
    (Candidate::Conversion, 0.32),
    (Candidate::HeatLoss, 0.16),
    (Candidate::Thermometer, 0.10),
];

/// A candidate cause of an energy deviation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Candidate {
    /// Heater fouling.
    Fouling,
    /// A conversion change.
    Conversion,
    /// More heat lost to the surroundings.
    HeatLoss,
    /// A drifting effluent thermometer.
    Thermometer,
}

impl Candidate {
    /// The alert cause it stands for.
    pub(super) fn cause(self) -> Cause {
        match self {
            Candidate::Fouling => Cause::HeaterFouling,
            Candidate::Conversion => Cause::ConversionDrift,
            Candidate::HeatLoss => Cause::HeatLoss,
            Candidate::Thermometer => Cause::InstrumentFault,
        }
    }

    /// Its name in a sentence.
    pub(super) fn words(self) -> &'static str {
        match self {
            Candidate::Fouling => "heater fouling",
            Candidate::Conversion => "a conversion change",
            Candidate::HeatLoss => "more heat loss",
            Candidate::Thermometer => "a drifting effluent thermometer",
        }
    }

    /// What would tell it apart from the others.
    pub(super) fn settled_by(self) -> &'static str {
        match self {
            Candidate::Fouling => "a heater inspection or the condensate/steam balance of the heater",
            Candidate::Conversion => "an effluent lab sample (conversion)",
            Candidate::HeatLoss => "a look at the insulation and cladding",
            Candidate::Thermometer => "a check of the thermometer against a reference",
        }
    }
}

/// One block of the window.
#[derive(Debug, Clone, Copy)]
pub(super) struct Row {
    /// Hours since the episode began.
    pub(super) tau_h: f64,
    /// Energy residual, W (negative when heat is missing).
    pub(super) y: f64,
    /// Reported duty, W.
    pub(super) duty: Option<f64>,
    /// Key reactant's feed, mol/s.
    pub(super) key_feed: Option<f64>,
    /// Measured effluent minus ambient temperature, K.
    pub(super) above_ambient: Option<f64>,
    /// Effluent heat-capacity flow, W/K.
    pub(super) heat_capacity: f64,
}

/// One candidate's fit.
#[derive(Debug, Clone, Copy)]
pub(super) struct Fit {
    /// The candidate.
    pub(super) candidate: Candidate,
    /// Posterior probability.
    pub(super) p: f64,
}

/// The ranking of the candidates, best first.
#[derive(Debug, Clone)]
pub(super) struct Ranking {
    /// The candidates, most probable first.
    pub(super) fits: Vec<Fit>,
    /// Cosine of the angle between the signatures of the first two (1: indistinguishable).
    pub(super) alike: f64,
    /// Blocks in the window.
    pub(super) blocks: usize,
}

/// A cause is named when it is at least this probable ...
pub(super) const NAME_P: f64 = 0.6;
/// ... and at least this many times as probable as the runner-up.
pub(super) const NAME_RATIO: f64 = 2.0;

/// The signature of a candidate in block `r` (`None` when its input is missing).
fn signature(c: Candidate, r: &Row) -> Option<f64> {
    match c {
        Candidate::Fouling => r.duty.map(|q| -q),
        Candidate::Conversion => r.key_feed,
        Candidate::HeatLoss => r.above_ambient.map(|d| -d),
        Candidate::Thermometer => Some(r.heat_capacity),
    }
}

/// Least squares of `y` on `s·(a + b·τ)`; returns (a, b, sse). `monotone`: b ≥ 0 and the
/// fitted θ at the end positive (a cause that can only take heat away, and only more so).
fn fit_two(y: &[f64], s: &[f64], tau: &[f64], sign_positive: bool, monotone: bool) -> (f64, f64, f64) {
    let (mut s11, mut s12, mut s22, mut r1, mut r2) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for ((y, s), t) in y.iter().zip(s).zip(tau) {
        let (x1, x2) = (*s, s * t);
        s11 += x1 * x1;
        s12 += x1 * x2;
        s22 += x2 * x2;
        r1 += x1 * y;
        r2 += x2 * y;
    }
    let sse = |a: f64, b: f64| -> f64 {
        y.iter().zip(s).zip(tau).map(|((y, s), t)| (y - s * (a + b * t)).powi(2)).sum()
    };
    let det = s11 * s22 - s12 * s12;
    let (mut a, mut b) = if det.abs() > 1e-12 * s11 * s22 && det > 0.0 {
        ((r1 * s22 - r2 * s12) / det, (r2 * s11 - r1 * s12) / det)
    } else if s11 > 0.0 {
        (r1 / s11, 0.0)
    } else {
        (0.0, 0.0)
    };
    if monotone && b < 0.0 {
        b = 0.0;
        a = if s11 > 0.0 { r1 / s11 } else { 0.0 };
    }
    let tau_end = tau.iter().copied().fold(0.0, f64::max);
    if sign_positive && a + b * tau_end <= 0.0 {
        a = 0.0;
        b = 0.0;
    }
    (a, b, sse(a, b))
}

/// Rank the candidates over the window. `sigma_w`: the baseline's block scatter of the energy
/// residual, W. `candidates`: those that apply (a unit with a measured conversion has no
/// conversion candidate; one without an ambient tag no heat loss).
pub(super) fn rank(rows: &[Row], sigma_w: f64, candidates: &[Candidate]) -> Option<Ranking> {
    let mut fits: Vec<(Candidate, f64, Vec<f64>, Vec<f64>)> = Vec::new();
    for &c in candidates {
        let used: Vec<&Row> = rows.iter().filter(|r| signature(c, r).is_some()).collect();
        if used.len() != rows.len() || rows.len() < 6 {
            continue;
        }
        let y: Vec<f64> = used.iter().map(|r| r.y).collect();
        let s: Vec<f64> = used.iter().filter_map(|r| signature(c, r)).collect();
        let tau: Vec<f64> = used.iter().map(|r| r.tau_h).collect();
        let positive = matches!(c, Candidate::Fouling | Candidate::HeatLoss);
        let (a, b, sse) = fit_two(&y, &s, &tau, positive, c == Candidate::Fouling);
        let resid: Vec<f64> = y.iter().zip(&s).zip(&tau).map(|((y, s), t)| y - s * (a + b * t)).collect();
        fits.push((c, sse, resid, s));
    }
    let best = fits.iter().min_by(|a, b| a.1.total_cmp(&b.1))?;
    let n = rows.len() as f64;
    let rho = crate::core::monitor::stats::acf1(&best.2).clamp(0.0, 0.9);
    let var = (best.1 / (n - 2.0)).max(sigma_w * sigma_w) * (1.0 + rho) / (1.0 - rho);
    let prior = |c: Candidate| PRIORS.iter().find(|p| p.0 == c).map_or(0.0, |p| p.1);
    let logp: Vec<f64> = fits.iter().map(|f| prior(f.0).ln() - f.1 / (2.0 * var)).collect();
    let top = logp.iter().copied().fold(f64::MIN, f64::max);
    let total: f64 = logp.iter().map(|l| (l - top).exp()).sum();
    let mut ranked: Vec<(Fit, Vec<f64>)> = fits
        .iter()
        .zip(&logp)
        .map(|(f, l)| (Fit { candidate: f.0, p: (l - top).exp() / total }, f.3.clone()))
        .collect();
    ranked.sort_by(|a, b| b.0.p.total_cmp(&a.0.p));
    let alike = match ranked.as_slice() {
        [(_, s1), (_, s2), ..] => {
            let dot: f64 = s1.iter().zip(s2).map(|(a, b)| a * b).sum();
            let norm = |v: &[f64]| v.iter().map(|x| x * x).sum::<f64>().sqrt();
            (dot / (norm(s1) * norm(s2)).max(1e-300)).abs()
        }
        _ => 0.0,
    };
    Some(Ranking { fits: ranked.into_iter().map(|r| r.0).collect(), alike, blocks: rows.len() })
}

impl Ranking {
    /// The candidate named: clearly ahead of the others.
    pub(super) fn named(&self) -> Option<Candidate> {
        let first = self.fits.first()?;
        let second = self.fits.get(1).map_or(0.0, |f| f.p);
        (first.p >= NAME_P && first.p >= NAME_RATIO * second).then_some(first.candidate)
    }

    /// The probability of a candidate.
    #[cfg(test)]
    pub(super) fn p(&self, c: Candidate) -> Option<f64> {
        self.fits.iter().find(|f| f.candidate == c).map(|f| f.p)
    }

    /// One sentence: the first cause with its probability, the runner-up, how alike they look,
    /// and what would settle it.
    pub(super) fn sentence(&self) -> String {
        let Some(first) = self.fits.first() else { return String::new() };
        use std::fmt::Write as _;
        let mut s = format!("{}, probability {:.2}", first.candidate.words(), first.p);
        if let Some(second) = self.fits.get(1) {
            let _ = write!(s, "; next {} ({:.2})", second.candidate.words(), second.p);
            // Alike signatures matter only while the runner-up is still in the running.
            if self.alike >= 0.98 && second.p >= 0.1 {
                let _ = write!(
                    s,
                    ", which would look the same here (signatures {:.0} % alike); {} settles it",
                    self.alike * 100.0,
                    second.candidate.settled_by()
                );
            }
        }
        s
    }

    /// The ranking as evidence: candidate → probability.
    pub(super) fn evidence(&self) -> serde_json::Value {
        let mut m = serde_json::Map::new();
        for f in &self.fits {
            let p = (f.p * 1000.0).round() / 1000.0;
            m.insert(f.candidate.cause().as_str().to_string(), p.into());
        }
        serde_json::Value::Object(m)
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    const ALL: [Candidate; 4] =
        [Candidate::Fouling, Candidate::Conversion, Candidate::HeatLoss, Candidate::Thermometer];

    /// Two days of hourly blocks: the feed steps every 8 h, the duty follows it only partly
    /// (operators trim at shift change), the ambient swings daily; `effect` gives the true
    /// energy residual of a block from (τ, duty, key feed, above-ambient, C).
    fn rows(effect: impl Fn(f64, f64, f64, f64, f64) -> f64, follow: f64, seed: u64) -> Vec<Row> {
        let mut rng = Rng::new(seed);
        (0..48)
            .map(|k| {
                let tau = f64::from(k);
                let feed = [10.0, 11.5, 9.0, 10.8, 9.6, 11.0][(k / 8) as usize % 6];
                let trim = [0.0, 1500.0, -1200.0, 800.0, -600.0, 1000.0][(k / 8 + 3) as usize % 6];
                let duty = 30_000.0 * (1.0 + follow * (feed / 10.0 - 1.0)) + (1.0 - follow) * trim;
                let key = 0.1 * feed;
                let ambient = 283.0 + 6.0 * (2.0 * std::f64::consts::PI * tau / 24.0).sin();
                let above = 345.0 - ambient;
                let c = feed * 75.0;
                let y = effect(tau, duty, key, above, c) + 20.0 * rng.normal();
                Row {
                    tau_h: tau,
                    y,
                    duty: Some(duty),
                    key_feed: Some(key),
                    above_ambient: Some(above),
                    heat_capacity: c,
                }
            })
            .collect()
    }

    #[test]
    fn a_growing_deficit_proportional_to_the_duty_ranks_fouling_first() {
        for seed in 0..10 {
            let r = rank(&rows(|t, q, _, _, _| -q * 0.001 * t, 0.5, seed), 20.0, &ALL).unwrap();
            assert_eq!(r.named(), Some(Candidate::Fouling), "seed {seed}: {}", r.sentence());
        }
    }

    #[test]
    fn a_deficit_proportional_to_the_key_feed_ranks_a_conversion_change_first() {
        for seed in 0..10 {
            let r = rank(&rows(|t, _, f, _, _| -f * 80_000.0 * 0.002 * t, 0.5, seed), 20.0, &ALL).unwrap();
            assert_eq!(r.named(), Some(Candidate::Conversion), "seed {seed}: {}", r.sentence());
        }
    }

    #[test]
    fn a_loss_proportional_to_the_temperature_above_ambient_ranks_heat_loss_first() {
        for seed in 0..10 {
            let r = rank(&rows(|_, _, _, d, _| -25.0 * d, 0.5, seed), 20.0, &ALL).unwrap();
            assert_eq!(r.named(), Some(Candidate::HeatLoss), "seed {seed}: {}", r.sentence());
        }
    }

    /// When the duty follows the feed exactly, fouling and a conversion change look the same:
    /// nothing is named, the priors order them, and the sentence says what settles it.
    #[test]
    fn when_the_duty_follows_the_feed_nothing_is_named_and_the_sentence_says_why() {
        let r = rank(&rows(|t, q, _, _, _| -q * 0.001 * t, 1.0, 3), 20.0, &ALL).unwrap();
        assert_eq!(r.named(), None, "{}", r.sentence());
        assert!(r.alike > 0.98);
        let s = r.sentence();
        assert!(s.contains("would look the same"), "{s}");
        let (pf, pc) = (r.p(Candidate::Fouling).unwrap(), r.p(Candidate::Conversion).unwrap());
        assert!(pf > pc, "the prior favours fouling: {s}");
    }

    /// A fouled heater delivers less heat: an effluent hotter than expected is never fouling.
    #[test]
    fn a_surplus_is_never_fouling() {
        let r = rank(&rows(|t, q, _, _, _| q * 0.001 * t, 0.5, 1), 20.0, &ALL).unwrap();
        assert!(r.p(Candidate::Fouling).unwrap() < 0.05, "{}", r.sentence());
    }
}
