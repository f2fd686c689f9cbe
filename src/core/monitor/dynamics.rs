//! Dynamic compensation of the steady-state prediction: a dead time plus a first-order lag
//! (FOPDT), applied to the *prediction*, never to the measurement (filtering the thermometer
//! would hide its faults). Discretized with a zero-order hold at the interval Δt:
//!
//! ```text
//! a = exp(−Δt/τ),  d = round(θ/Δt),  y_k = a·y_{k−1} + (1 − a)·u_{k−d}
//! ```
//!
//! [`identify`] estimates θ and τ from history: θ from the peak of the cross-correlation of
//! differenced duty (or feed) and measured temperature, τ by least squares of the lag model
//! on the delayed prediction. Settling after a transient takes θ + 3τ (95 %).

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

/// The FOPDT filter state.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
pub struct Fopdt {
    /// Dead time in intervals.
    pub delay: usize,
    /// Lag factor `a = exp(−Δt/τ)` (0 without lag).
    pub a: f64,
    queue: VecDeque<f64>,
    y: Option<f64>,
}

impl Fopdt {
    /// A filter for dead time `theta_ms` and lag `tau_ms` at interval `dt_ms`.
    pub fn new(theta_ms: i64, tau_ms: i64, dt_ms: i64) -> Fopdt {
        let delay = usize::try_from((theta_ms as f64 / dt_ms as f64).round() as i64).unwrap_or(0);
        let a = if tau_ms > 0 { (-(dt_ms as f64) / tau_ms as f64).exp() } else { 0.0 };
        Fopdt { delay, a, queue: VecDeque::new(), y: None }
    }

    /// Feed one steady-state prediction; returns the compensated prediction. Until the dead
    /// time is filled, the oldest available value is used.
    pub fn step(&mut self, u: f64) -> f64 {
        self.queue.push_back(u);
        while self.queue.len() > self.delay + 1 {
            self.queue.pop_front();
        }
        let delayed = self.queue.front().copied().unwrap_or(u);
        let y = match self.y {
            None => delayed,
            Some(prev) => self.a * prev + (1.0 - self.a) * delayed,
        };
        self.y = Some(y);
        y
    }

    /// Forget the history (after a gap in the data).
    pub fn reset(&mut self) {
        self.queue.clear();
        self.y = None;
    }
}

/// Identified dynamics.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Identified {
    /// Dead time, intervals.
    pub delay: usize,
    /// Lag, intervals (continuous).
    pub tau: f64,
    /// Peak cross-correlation of the differenced series (quality of the estimate).
    pub correlation: f64,
    /// Residual standard deviation of the fit, K.
    pub fit_sd: f64,
    /// Dead times (intervals) whose correlation is within two standard errors of the peak
    /// (standard error of a sample correlation of white series ≈ 1/√n): the estimate's range.
    pub delay_range: (usize, usize),
    /// Fraction of the squared error of the uncompensated prediction that the fitted dead time
    /// and lag remove (0 when the dynamics explain nothing).
    pub improvement: f64,
    /// Whether the estimate can be used: the peak correlation is at least four standard errors
    /// and the dead-time range is at most 2 intervals wide.
    pub trustworthy: bool,
}

/// Estimate dead time and lag from aligned series of the steady-state prediction and the
/// measured temperature (one value per interval, no gaps). `max_delay` bounds the search.
pub fn identify(predicted: &[f64], measured: &[f64], max_delay: usize) -> Option<Identified> {
    let n = predicted.len().min(measured.len());
    if n < 3 * max_delay + 20 {
        return None;
    }
    let dp: Vec<f64> = predicted[..n].windows(2).map(|w| w[1] - w[0]).collect();
    let dm: Vec<f64> = measured[..n].windows(2).map(|w| w[1] - w[0]).collect();
    let norm = |v: &[f64]| v.iter().map(|x| x * x).sum::<f64>().sqrt();
    let (np, nm) = (norm(&dp), norm(&dm));
    if np == 0.0 || nm == 0.0 {
        return None;
    }
    // Dead time: the lag with the largest cross-correlation (a lag spreads the response, but
    // its onset still comes after the dead time; the peak of the differenced series is the
    // customary estimate).
    let corr: Vec<f64> = (0..=max_delay)
        .map(|d| dp.iter().zip(dm.iter().skip(d)).map(|(a, b)| a * b).sum::<f64>() / (np * nm))
        .collect();
    let mut best = (0usize, f64::MIN);
    for (d, c) in corr.iter().enumerate() {
        if *c > best.1 {
            best = (d, *c);
        }
    }
    let se = 1.0 / ((n - 1) as f64).sqrt();
    let near: Vec<usize> = (0..corr.len()).filter(|d| corr[*d] >= best.1 - 2.0 * se).collect();
    let delay_range = (near.first().copied().unwrap_or(best.0), near.last().copied().unwrap_or(best.0));
    // Lag: grid search over a with the dead time fixed, minimizing the squared error.
    let mut best_fit = (0.0, f64::MAX);
    for i in 0..200 {
        let a = f64::from(i) / 200.0;
        let mut f = Fopdt { delay: best.0, a, queue: VecDeque::new(), y: None };
        let sse: f64 = predicted[..n].iter().zip(&measured[..n]).map(|(p, m)| (f.step(*p) - m).powi(2)).sum();
        if sse < best_fit.1 {
            best_fit = (a, sse);
        }
    }
    let tau = if best_fit.0 > 0.0 { -1.0 / best_fit.0.ln() } else { 0.0 };
    let sse_static: f64 = predicted[..n].iter().zip(&measured[..n]).map(|(p, m)| (p - m).powi(2)).sum();
    let improvement = if sse_static > 0.0 { (1.0 - best_fit.1 / sse_static).max(0.0) } else { 0.0 };
    let trustworthy = best.1 >= 4.0 * se && delay_range.1 - delay_range.0 <= 2;
    Some(Identified {
        delay: best.0,
        tau,
        correlation: best.1,
        fit_sd: (best_fit.1 / n as f64).sqrt(),
        delay_range,
        improvement,
        trustworthy,
    })
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn step_response_of_dead_time_and_lag() {
        // θ = 2 intervals, τ = 3 intervals: after the dead time, 63.2 % at one τ (FOPDT algebra,
        // e.g. Seborg et al., Process Dynamics and Control).
        let mut f = Fopdt::new(120_000, 180_000, 60_000);
        let ys: Vec<f64> = (0..20).map(|k| f.step(if k >= 1 { 1.0 } else { 0.0 })).collect();
        assert_eq!(&ys[..3], &[0.0, 0.0, 0.0]);
        assert!((ys[5] - (1.0 - (-1.0f64).exp())).abs() < 1e-12, "{ys:?}");
    }

    #[test]
    fn identification_recovers_dead_time_and_lag() {
        let mut rng = crate::rng::Rng::new(3);
        let mut u = 0.0;
        let pred: Vec<f64> = (0..600)
            .map(|k| {
                if k % 40 == 0 {
                    u = 5.0 * rng.normal();
                }
                330.0 + u
            })
            .collect();
        let mut plant = Fopdt::new(3 * 60_000, 4 * 60_000, 60_000);
        let meas: Vec<f64> = pred.iter().map(|p| plant.step(*p) + 0.02 * rng.normal()).collect();
        let id = identify(&pred, &meas, 10).unwrap();
        assert_eq!(id.delay, 3, "{id:?}");
        assert!((id.tau - 4.0).abs() < 0.5, "{id:?}");
        assert!(id.trustworthy && id.improvement > 0.5, "{id:?}");
    }

    #[test]
    fn noise_without_moves_is_not_trusted() {
        // A prediction that never moves beyond noise, and a measurement that is independent
        // noise: any peak is chance, and the estimate must say so.
        let mut rng = crate::rng::Rng::new(5);
        let pred: Vec<f64> = (0..2000).map(|_| 330.0 + 0.05 * rng.normal()).collect();
        let meas: Vec<f64> = (0..2000).map(|_| 330.0 + 0.05 * rng.normal()).collect();
        let id = identify(&pred, &meas, 15).unwrap();
        // (The lag still "improves" the fit here, by averaging the prediction's noise: that is
        // why the improvement alone does not make an estimate trustworthy.)
        assert!(!id.trustworthy, "{id:?}");
    }
}
