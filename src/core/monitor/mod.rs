//! Monitoring: turning per-interval residuals into few, correct, actionable alerts.
//!
//! * [`charts`]: CUSUM and EWMA on a standardized statistic, their ARLs and designs.
//! * [`dynamics`]: dead time + first-order lag compensation of the prediction, and its
//!   identification from history.
//! * [`engine`]: the per-unit monitor: states, baseline, charts, cause attribution.
//! * [`stats`]: robust statistics, block length, trends, projections and regressions.
//! * [`ssd`]: steady-state detection (Cao–Rhinehart R-statistic with hysteresis).

pub mod charts;
pub mod dynamics;
pub mod engine;
pub mod settings;
pub mod ssd;
pub mod stats;

#[cfg(test)]
mod tests;
