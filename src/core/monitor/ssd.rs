//! Steady-state detection by the R-statistic of Cao & Rhinehart (1995, J. Process Control
//! 5(6):363–374): the ratio of two variance estimates of a signal, one from the deviation from
//! a filtered mean and one from successive differences. R ≈ 1 at steady state with independent
//! noise and R > 1 during a trend; the ratio does not depend on the noise level.
//!
//! Hysteresis: the unit is unsteady as soon as one signal has R > `r_hi`; it is steady again
//! only after `steady_count` consecutive samples with every R < `r_lo`.
//!
//! Two practical adjustments, both needed on plant data:
//! * **Several signals.** The unit is judged on the maximum over its signals, so thresholds
//!   that suit one white-noise signal (its 99th percentile of R is 1.73) trigger far too often
//!   on six: with R_hi = 2.0 and R_lo = 1.5 a stationary six-signal white-noise plant is
//!   unsteady ~17 % of the time with ~9 spurious episodes a day. The defaults R_hi = 3.0 and
//!   R_lo = 2.0 give ~0.2 % and ~0.2 a day (simulation with λ = 0.2, 0.1, 0.1).
//! * **Autocorrelated noise.** R's steady-state distribution shifts up with the noise's
//!   autocorrelation (median 1.0 for white noise, 1.18 at AR(1) φ = 0.2, 1.62 at φ = 0.5;
//!   by simulation). Each signal's thresholds are therefore scaled by a slowly
//!   tracked running median of its own R (clamped to 1..2.5), a self-calibration on the unit's
//!   own data; with white noise the scale stays 1.

use serde::{Deserialize, Serialize};

/// Filter constants and thresholds.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct SsdSettings {
    /// Filter constant of the mean (λ1).
    pub lambda1: f64,
    /// Filter constant of the squared deviation (λ2).
    pub lambda2: f64,
    /// Filter constant of the squared successive difference (λ3).
    pub lambda3: f64,
    /// Unsteady above this.
    pub r_hi: f64,
    /// Steady below this (for `steady_count` samples).
    pub r_lo: f64,
    /// Consecutive samples below `r_lo` to be steady again.
    pub steady_count: u32,
}

/// A practical-significance floor for one signal: the successive-difference variance is not
/// allowed below `(abs + rel·|x|)²`, so that drifts far below the instrument noise (which a
/// 1-minute average makes tiny) do not count as transients. With a zero floor the statistic is
/// the original R of Cao & Rhinehart.
#[derive(Debug, Clone, Copy, PartialEq, Default, Serialize, Deserialize)]
pub struct Floor {
    /// Absolute part, in the signal's unit.
    pub abs: f64,
    /// Relative part, fraction of the value.
    pub rel: f64,
}

impl Default for SsdSettings {
    /// λ = (0.2, 0.1, 0.1) (Cao & Rhinehart 1995); R_hi 3.0 and R_lo 2.0 with 10 samples for
    /// a unit judged on about six signals (see the module docs).
    fn default() -> Self {
        SsdSettings { lambda1: 0.2, lambda2: 0.1, lambda3: 0.1, r_hi: 3.0, r_lo: 2.0, steady_count: 10 }
    }
}

/// Step of the running-median tracker of R (Robbins–Monro: m += η·sign(R − m)).
const MEDIAN_STEP: f64 = 0.002;

fn one() -> f64 {
    1.0
}

/// The R-statistic filter of one signal.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RFilter {
    mean: f64,
    v2: f64,
    d2: f64,
    last: Option<f64>,
    /// Samples seen.
    pub n: u32,
    /// Running median of R (threshold scale, see the module docs).
    #[serde(default = "one")]
    pub median: f64,
}

impl Default for RFilter {
    fn default() -> Self {
        RFilter { mean: 0.0, v2: 0.0, d2: 0.0, last: None, n: 0, median: 1.0 }
    }
}

impl RFilter {
    /// Scale of this signal's thresholds: its running median R, clamped to 1..2.5.
    pub fn scale(&self) -> f64 {
        self.median.clamp(1.0, 2.5)
    }

    /// Add a sample; returns R once the filter has warmed up (the variance update uses the
    /// previous filtered mean, as in the original recursion).
    pub fn step(&mut self, x: f64, s: &SsdSettings) -> Option<f64> {
        self.step_floored(x, s, Floor::default())
    }

    /// As [`RFilter::step`], with a floor on the noise estimate.
    pub fn step_floored(&mut self, x: f64, s: &SsdSettings, floor: Floor) -> Option<f64> {
        let Some(prev) = self.last else {
            self.mean = x;
            self.last = Some(x);
            self.n = 1;
            return None;
        };
        self.v2 = s.lambda2 * (x - self.mean).powi(2) + (1.0 - s.lambda2) * self.v2;
        self.mean = s.lambda1 * x + (1.0 - s.lambda1) * self.mean;
        self.d2 = s.lambda3 * (x - prev).powi(2) + (1.0 - s.lambda3) * self.d2;
        self.last = Some(x);
        self.n = self.n.saturating_add(1);
        let f = floor.abs + floor.rel * x.abs();
        let d2 = self.d2.max(f * f);
        if self.n < 10 || d2 <= 0.0 {
            return None;
        }
        let r = (2.0 - s.lambda1) * self.v2 / d2;
        if r.is_finite() {
            self.median += MEDIAN_STEP * (r - self.median).signum();
        }
        Some(r)
    }
}

/// Steady-state judgement over several signals with hysteresis.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct SteadyState {
    filters: Vec<RFilter>,
    /// Latest R per signal.
    pub r: Vec<Option<f64>>,
    below: u32,
    /// Current judgement.
    pub steady: bool,
}

impl SteadyState {
    /// A detector for `n` signals (starts unsteady until proven steady).
    pub fn new(n: usize) -> SteadyState {
        SteadyState { filters: vec![RFilter::default(); n], r: vec![None; n], below: 0, steady: false }
    }

    /// Add one sample of every signal (`None` for an unusable one, which keeps the state).
    pub fn step(&mut self, xs: &[Option<f64>], s: &SsdSettings) -> bool {
        self.step_floored(xs, &[], s)
    }

    /// As [`SteadyState::step`], with a noise floor per signal (missing floors are zero).
    pub fn step_floored(&mut self, xs: &[Option<f64>], floors: &[Floor], s: &SsdSettings) -> bool {
        if self.filters.len() != xs.len() {
            *self = SteadyState::new(xs.len());
        }
        let mut any_hi = false;
        let mut all_lo = true;
        for (i, ((f, r), x)) in self.filters.iter_mut().zip(self.r.iter_mut()).zip(xs).enumerate() {
            if let Some(x) = x {
                *r = f.step_floored(*x, s, floors.get(i).copied().unwrap_or_default());
            }
            let k = f.scale();
            match *r {
                Some(v) if v > s.r_hi * k => any_hi = true,
                Some(v) if v < s.r_lo * k => {}
                _ => all_lo = false,
            }
        }
        if any_hi {
            self.steady = false;
            self.below = 0;
        } else if all_lo {
            self.below = self.below.saturating_add(1);
            if self.below >= s.steady_count {
                self.steady = true;
            }
        } else {
            self.below = 0;
        }
        self.steady
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    fn percentile(v: &mut [f64], p: f64) -> f64 {
        v.sort_by(f64::total_cmp);
        v[((v.len() - 1) as f64 * p).round() as usize]
    }

    /// Reference: a longer simulation (4×10⁵ samples, white noise, λ = 0.2, 0.1, 0.1):
    /// median 1.00, p90 1.32, p95 1.44, p99 1.73. Monte Carlo here with 2×10⁵ samples after
    /// a burn-in; tolerance 3 %.
    #[test]
    fn r_statistic_percentiles_on_white_noise() {
        let s = SsdSettings::default();
        let mut f = RFilter::default();
        let mut rng = Rng::new(2026);
        let mut rs = Vec::new();
        for i in 0..202_000 {
            let r = f.step(rng.normal(), &s);
            if i >= 2_000 {
                rs.push(r.unwrap());
            }
        }
        for (p, want) in [(0.5, 1.00), (0.9, 1.32), (0.95, 1.44), (0.99, 1.73)] {
            let got = percentile(&mut rs, p);
            assert!((got / want - 1.0).abs() < 0.03, "p{p}: {got} vs {want}");
        }
    }

    /// A ramp of 0.2 σ per sample gives E[R] ≈ [2 + (2−λ1)s²/λ1²]/(2 + s²) ≈ 2.0 (the filters'
    /// expectations for a ramp of slope s σ per sample): the detector turns unsteady.
    #[test]
    fn a_ramp_is_unsteady_and_hysteresis_holds() {
        let s = SsdSettings::default();
        let mut ss = SteadyState::new(1);
        let mut rng = Rng::new(1);
        let steady = (0..2000).filter(|_| ss.step(&[Some(rng.normal())], &s)).count();
        assert!(steady > 1800, "white noise is steady most of the time: {steady} of 2000");
        let mut unsteady_seen = false;
        for i in 0..200 {
            let x = rng.normal() + 0.5 * f64::from(i);
            if !ss.step(&[Some(x)], &s) {
                unsteady_seen = true;
            }
        }
        assert!(unsteady_seen);
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod plant_tests {
    use super::*;
    use crate::rng::Rng;

    /// Fraction of samples judged steady for `n` stationary AR(1) signals (φ), with the
    /// default settings.
    fn steady_fraction(n: usize, phi: f64, samples: usize, seed: u64) -> f64 {
        let s = SsdSettings::default();
        let mut ss = SteadyState::new(n);
        let mut rng = Rng::new(seed);
        let mut x = vec![0.0; n];
        let mut steady = 0;
        for i in 0..samples {
            for v in &mut x {
                *v = phi * *v + rng.normal();
            }
            let xs: Vec<Option<f64>> = x.iter().map(|v| Some(*v)).collect();
            // Judge after the median trackers have had time to settle.
            if ss.step(&xs, &s) && i >= samples / 4 {
                steady += 1;
            }
        }
        steady as f64 / (samples - samples / 4) as f64
    }

    /// A stationary unit judged on six signals is steady nearly all the time. Expected values
    /// from a simulation of the same recursion (our own calculation, λ = 0.2, 0.1, 0.1): about
    /// 99.8 % steady for white noise and 99 % for AR(1) φ = 0.3 noise with median scaling.
    #[test]
    fn six_stationary_signals_are_steady_nearly_all_the_time() {
        let white = steady_fraction(6, 0.0, 40_000, 11);
        assert!(white > 0.98, "white noise: steady {white:.3}");
        let coloured = steady_fraction(6, 0.3, 40_000, 12);
        assert!(coloured > 0.95, "AR(1) 0.3: steady {coloured:.3}");
    }

    /// The median scale follows autocorrelated noise (by simulation, median R 1.18 at φ = 0.2,
    /// 1.62 at φ = 0.5; tolerance 10 %) and stays 1 for white noise.
    #[test]
    fn the_threshold_scale_tracks_the_median_of_r() {
        for (phi, want) in [(0.0, 1.0), (0.2, 1.18), (0.5, 1.62)] {
            let s = SsdSettings::default();
            let mut f = RFilter::default();
            let mut rng = Rng::new(5);
            let mut x = 0.0;
            let (mut sum, mut n) = (0.0, 0);
            for i in 0..80_000 {
                x = phi * x + rng.normal();
                f.step(x, &s);
                if i >= 20_000 {
                    sum += f.median;
                    n += 1;
                }
            }
            let m = sum / f64::from(n);
            assert!((m / want - 1.0).abs() < 0.1, "φ {phi}: median {m} vs {want}");
        }
    }

    /// A 15 % step of one signal (in units of its noise: 15 σ) still makes the unit unsteady.
    #[test]
    fn a_feed_step_on_one_signal_is_unsteady() {
        let s = SsdSettings::default();
        let mut ss = SteadyState::new(6);
        let mut rng = Rng::new(3);
        for _ in 0..3_000 {
            let xs: Vec<Option<f64>> = (0..6).map(|_| Some(rng.normal())).collect();
            ss.step(&xs, &s);
        }
        assert!(ss.steady);
        let mut seen = false;
        for _ in 0..30 {
            let mut xs: Vec<Option<f64>> = (0..6).map(|_| Some(rng.normal())).collect();
            xs[1] = Some(15.0 + rng.normal());
            seen |= !ss.step(&xs, &s);
        }
        assert!(seen, "a step must be seen as a transient");
    }
}
