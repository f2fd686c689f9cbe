//! The learned reference of the residual and of the figures the charts watch: block length,
//! robust block mean and σ (inflated for what autocorrelation the blocks still carry), the
//! scatter of the step statistic, the tags' noise, and the chart designs for the configured
//! false-alert rate.

use serde::{Deserialize, Serialize};

use super::charts::{cusum_h_for, ewma_l_for};
use super::settings::MonitorConfig;
use super::stats;
use crate::core::spec::UnitSpec;

/// One learning interval: residual, effectiveness, apparent and measured conversion, total
/// feed, and the tags' values (SI).
pub(super) type LearnRow = (f64, Option<f64>, Option<f64>, Option<f64>, f64, Vec<Option<f64>>);

/// The learned reference.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Baseline {
    /// Intervals per block.
    pub block: usize,
    /// Residual block mean, K.
    pub mu: f64,
    /// Residual block σ, K.
    pub sigma: f64,
    /// Residual interval σ, K (gross checks, spikes).
    pub sigma_interval: f64,
    /// Effectiveness mean and σ (block).
    pub eff: Option<(f64, f64)>,
    /// Apparent conversion mean and σ (block).
    pub conv: Option<(f64, f64)>,
    /// Measured conversion mean and σ (block).
    pub conv_measured: Option<(f64, f64)>,
    /// Mean total feed, mol/s.
    pub feed: f64,
    /// Block σ of each tag (SI), for step attribution.
    pub tag_sigma: Vec<Option<f64>>,
    /// Interval-to-interval noise of each tag (SI): σ of successive differences / √2.
    #[serde(default)]
    pub tag_noise: Vec<Option<f64>>,
    /// When it was learned (event time, ms).
    pub learned_ms: i64,
    /// Blocks used.
    pub blocks: usize,
    /// Robust scatter of the step statistic on the learning data (0: not known).
    #[serde(default)]
    pub step_sigma: f64,
    /// Lag-1 autocorrelation of the block means.
    pub acf1: f64,
    /// CUSUM decision interval for the false-alert target.
    pub h: f64,
    /// EWMA limit width for the false-alert target.
    pub l: f64,
}

/// What the learning intervals say about the residual itself.
struct Residual {
    block: usize,
    means: Vec<f64>,
    mu: f64,
    sigma: f64,
    sigma_interval: f64,
    step_sigma: f64,
}

impl Baseline {
    /// Learn the baseline from the steady intervals collected while learning.
    pub(super) fn learn(cfg: &MonitorConfig, unit: &UnitSpec, learning: &[LearnRow], now: i64) -> Baseline {
        let resid: Vec<f64> = learning.iter().map(|l| l.0).collect();
        let Residual { block, means, mu, sigma, sigma_interval, step_sigma } = residual(cfg, &resid);
        let eff = series(learning, block, &|l| l.1);
        let conv = series(learning, block, &|l| l.2);
        let conv_measured = series(learning, block, &|l| l.3);
        let feed = stats::mean(&learning.iter().map(|l| l.4).collect::<Vec<_>>());
        let (tag_sigma, tag_noise) = tag_scatter(learning, block, unit.tags.len());
        let arl0 = cfg.false_alert_days * 86_400_000.0 / (block as f64 * unit.interval_ms as f64);
        let h = cusum_h_for(cfg.cusum_k, arl0);
        let l = ewma_l_for(cfg.ewma_lambda, arl0);
        Baseline {
            block,
            mu,
            sigma,
            sigma_interval,
            eff,
            conv,
            conv_measured,
            feed,
            tag_sigma,
            tag_noise,
            learned_ms: now,
            blocks: means.len(),
            step_sigma,
            acf1: stats::acf1(&means),
            h,
            l,
        }
    }

    /// The log line that announces it.
    pub(super) fn note(&self, cfg: &MonitorConfig) -> String {
        format!(
            "baseline learned from {} blocks of {} intervals: residual {:+.3} K ± {:.3} K (block σ), lag-1 autocorrelation {:.2}; CUSUM h = {:.2}, EWMA L = {:.3} for one false alert per {:.0} days per chart",
            self.blocks, self.block, self.mu, self.sigma, self.acf1, self.h, self.l, cfg.false_alert_days
        )
    }
}

/// The block length, the residual's block mean and σ, its interval σ and the scatter of the
/// step statistic.
fn residual(cfg: &MonitorConfig, resid: &[f64]) -> Residual {
    let b0 = cfg.block_intervals.max(1);
    let candidates = [b0, 2 * b0, 3 * b0, 6 * b0];
    let block = stats::choose_block(resid, &candidates, 0.2, 30);
    let means = stats::block_means(resid, block);
    let mu = stats::median(&means);
    // Robust σ, not below 80 % of the standard deviation (the MAD of a few dozen values
    // can be small by chance), inflated for any autocorrelation the blocks still carry
    // (variance of a mean of correlated values; batch-means practice).
    let rho = stats::acf1(&means).clamp(0.0, 0.8);
    let inflate = ((1.0 + rho) / (1.0 - rho)).sqrt();
    let sigma = (stats::mad_sigma(&means).max(0.8 * stats::std_dev(&means)) * inflate).max(0.01);
    let sigma_interval = stats::mad_sigma(resid).max(0.01);
    // Scatter of the step statistic itself (median of 10 intervals against the 20 before)
    // on the steady learning data: slow wander of the residual makes it larger than the
    // interval noise suggests, and the step test is judged against it.
    let steps: Vec<f64> = (20..resid.len().saturating_sub(10))
        .step_by(3)
        .map(|t| stats::median(&resid[t..t + 10]) - stats::median(&resid[t - 20..t]))
        .collect();
    let step_sigma = if steps.len() >= 30 { stats::mad_sigma(&steps) } else { 0.0 };
    Residual { block, means, mu, sigma, sigma_interval, step_sigma }
}

/// Block mean and σ of one figure of the learning intervals (inflated like the residual's),
/// when at least ten blocks of it were seen.
fn series(learning: &[LearnRow], block: usize, f: &dyn Fn(&LearnRow) -> Option<f64>) -> Option<(f64, f64)> {
    let v: Vec<f64> = learning.iter().filter_map(f).collect();
    if v.len() < block * 10 {
        return None;
    }
    let m = stats::block_means(&v, block);
    let rho = stats::acf1(&m).clamp(0.0, 0.8);
    let inflate = ((1.0 + rho) / (1.0 - rho)).sqrt();
    Some((stats::median(&m), (stats::mad_sigma(&m).max(0.8 * stats::std_dev(&m)) * inflate).max(1e-6)))
}

/// Per tag: the σ of its block means and its interval-to-interval noise.
type TagScatter = (Vec<Option<f64>>, Vec<Option<f64>>);

/// Per tag, the σ of its block means (ten blocks at least) and its interval-to-interval
/// noise (σ of successive differences / √2, from 100 differences at least).
fn tag_scatter(learning: &[LearnRow], block: usize, ntags: usize) -> TagScatter {
    let values =
        |i: usize| -> Vec<f64> { learning.iter().filter_map(|l| l.5.get(i).copied().flatten()).collect() };
    let tag_sigma = (0..ntags)
        .map(|i| {
            let v = values(i);
            (v.len() >= block * 10).then(|| stats::std_dev(&stats::block_means(&v, block)).max(1e-9))
        })
        .collect();
    let tag_noise = (0..ntags)
        .map(|i| {
            let v = values(i);
            let d: Vec<f64> = v.windows(2).map(|w| w[1] - w[0]).collect();
            (d.len() >= 100).then(|| stats::mad_sigma(&d) / std::f64::consts::SQRT_2)
        })
        .collect();
    (tag_sigma, tag_noise)
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::core::monitor::tests::unit;
    use crate::rng::Rng;

    /// `n` learning intervals: a white-noise residual of σ 0.1 K, an effectiveness of
    /// 0.95 ± 0.01 in every other interval, and the first tag with white noise of σ 0.02.
    fn white_noise(n: usize) -> Vec<LearnRow> {
        let mut rng = Rng::new(42);
        (0..n)
            .map(|k| {
                let r = 0.1 * rng.normal();
                let eff = (k % 2 == 0).then(|| 0.95 + 0.01 * rng.normal());
                let tags = vec![Some(10.0 + 0.02 * rng.normal()), None, None, None, None];
                (r, eff, None, None, 10.0, tags)
            })
            .collect()
    }

    #[test]
    fn a_baseline_learned_on_white_noise_has_its_sigma_and_the_designed_limits() {
        let cfg = MonitorConfig { block_intervals: 10, ..MonitorConfig::default() };
        let unit = unit();
        let b = Baseline::learn(&cfg, &unit, &white_noise(3000), 7);
        // White noise needs no longer blocks: 300 blocks of 10.
        assert_eq!((b.block, b.blocks, b.learned_ms), (10, 300, 7));
        // Block σ = 0.1/√10 = 0.032 K, interval σ 0.1 K, mean 0 within 3 standard errors.
        assert!((b.sigma / (0.1 / 10f64.sqrt()) - 1.0).abs() < 0.15, "block σ {}", b.sigma);
        assert!((b.sigma_interval / 0.1 - 1.0).abs() < 0.1, "interval σ {}", b.sigma_interval);
        assert!(b.mu.abs() < 3.0 * 0.1 / 3000f64.sqrt(), "μ {}", b.mu);
        assert!(b.acf1.abs() < 0.2, "{}", b.acf1);
        // One false alert per 30 days per chart on 10-minute blocks: ARL0 = 4320 blocks, for
        // which the CUSUM (k = 0.5) needs h = 7.21 and the EWMA (λ = 0.1) L = 3.515.
        assert!((b.h - 7.21).abs() < 0.02, "h = {}", b.h);
        assert!((b.l - 3.515).abs() < 0.01, "L = {}", b.l);
        // The effectiveness is learned on its own blocks; the conversion was never seen.
        let (m, s) = b.eff.unwrap();
        assert!((m - 0.95).abs() < 0.002 && (s / (0.01 / 10f64.sqrt()) - 1.0).abs() < 0.25, "{m} ± {s}");
        assert_eq!((b.conv, b.conv_measured, b.feed), (None, None, 10.0));
        // The tag's interval noise is its σ; tags never seen have none.
        let noise = b.tag_noise[0].unwrap();
        assert!((noise / 0.02 - 1.0).abs() < 0.1, "tag noise {noise}");
        assert_eq!((b.tag_noise.len(), b.tag_noise[1], b.tag_sigma[1]), (5, None, None));
        // The step statistic (median of 10 against the 20 before) scatters by about
        // 0.1 × √(π/2 · (1/10 + 1/20)) = 0.049 K on white noise.
        assert!((b.step_sigma / 0.049 - 1.0).abs() < 0.2, "step σ {}", b.step_sigma);
        assert!(b.note(&cfg).starts_with("baseline learned from 300 blocks of 10 intervals"));
    }

    #[test]
    fn autocorrelated_residuals_get_longer_blocks_and_a_wider_sigma() {
        let cfg = MonitorConfig { block_intervals: 10, ..MonitorConfig::default() };
        let mut rng = Rng::new(9);
        let mut x = 0.0;
        let rows: Vec<LearnRow> = (0..6000)
            .map(|_| {
                x = 0.95 * x + 0.1 * rng.normal();
                (x, None, None, None, 10.0, Vec::new())
            })
            .collect();
        let b = Baseline::learn(&cfg, &unit(), &rows, 0);
        assert!(b.block > 10, "block {}", b.block);
        // The standard deviation of the means of AR(1) blocks is well above σ_x/√b.
        let sigma_x = 0.1 / (1.0 - 0.95f64 * 0.95).sqrt();
        assert!(b.sigma > 1.5 * sigma_x / (b.block as f64).sqrt(), "{} for block {}", b.sigma, b.block);
        assert_eq!(b.eff, None, "no effectiveness seen");
    }
}
