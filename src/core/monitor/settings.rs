//! The monitor's settings, checked by the site loader.

use serde::{Deserialize, Serialize};

use super::ssd::SsdSettings;

/// Monitor settings (defaults in parentheses).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MonitorConfig {
    /// Intervals per block before the baseline picks its own (10).
    pub block_intervals: usize,
    /// Steady blocks needed for the baseline (200).
    pub baseline_blocks: usize,
    /// Dead time of the effluent temperature, ms.
    pub dead_time_ms: i64,
    /// First-order lag, ms.
    pub lag_ms: i64,
    /// Steady-state detection.
    pub ssd: SsdSettings,
    /// Days between false alerts per chart (30).
    pub false_alert_days: f64,
    /// CUSUM reference value (0.5).
    pub cusum_k: f64,
    /// EWMA smoothing (0.1).
    pub ewma_lambda: f64,
    /// Shewhart limit on block z, 2 of 3 blocks (4.0).
    pub shewhart_z: f64,
    /// |z| at which an alert condition starts (3.5).
    pub enter_z: f64,
    /// |z| below which it may clear (2.5).
    pub clear_z: f64,
    /// Clean blocks before a condition clears (6).
    pub clear_blocks: u32,
    /// Block-mean jump, in σ, that marks a step (3.0).
    pub step_z: f64,
    /// Heater effectiveness at which cleaning is due (0.85).
    pub effectiveness_limit: f64,
    /// Smallest loss of heater effectiveness named as fouling, fraction of the baseline (0.02).
    pub min_fouling_loss: f64,
    /// Smallest change of the key conversion named as a conversion drift (0.02).
    pub min_conversion_change: f64,
    /// Trend window, ms (14 d).
    pub trend_window_ms: i64,
    /// Trend point spacing, ms (4 h).
    pub trend_point_ms: i64,
    /// Trend t-statistic needed to report a projection (2.0).
    pub trend_t_min: f64,
    /// Window of the ambient correlation, ms (3 d).
    pub ambient_window_ms: i64,
    /// |ρ| of residual and ambient that points at heat loss (0.5).
    pub ambient_correlation: f64,
    /// Window of the fouling/conversion separation, ms (24 h).
    pub separation_window_ms: i64,
    /// Suppress statistical alerts when u(T_pred) exceeds this, K (5).
    pub max_prediction_uncertainty: f64,
    /// Pause when the total feed is below this fraction of the baseline feed (0.2).
    pub min_feed_fraction: f64,
    /// Window of the flatline check, intervals (30).
    pub flatline_intervals: usize,
    /// Gross-error check while unsteady, in interval σ (6).
    pub gross_z: f64,
    /// Noise floor of temperatures and the residual in the steady-state test, K (0.1).
    pub ssd_floor_k: f64,
    /// Relative noise floor of flows and the duty in the steady-state test (0.005).
    pub ssd_floor_rel: f64,
}

impl Default for MonitorConfig {
    fn default() -> Self {
        MonitorConfig {
            block_intervals: 10,
            baseline_blocks: 200,
            dead_time_ms: 0,
            lag_ms: 0,
            ssd: SsdSettings::default(),
            false_alert_days: 30.0,
            cusum_k: 0.5,
            ewma_lambda: 0.1,
            shewhart_z: 4.0,
            enter_z: 3.5,
            clear_z: 2.5,
            clear_blocks: 6,
            step_z: 3.0,
            effectiveness_limit: 0.85,
            min_fouling_loss: 0.02,
            min_conversion_change: 0.02,
            trend_window_ms: 14 * 86_400_000,
            trend_point_ms: 4 * 3_600_000,
            trend_t_min: 2.0,
            ambient_window_ms: 3 * 86_400_000,
            ambient_correlation: 0.5,
            separation_window_ms: 86_400_000,
            max_prediction_uncertainty: 5.0,
            min_feed_fraction: 0.2,
            flatline_intervals: 30,
            gross_z: 6.0,
            ssd_floor_k: 0.1,
            ssd_floor_rel: 0.005,
        }
    }
}
