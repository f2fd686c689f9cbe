//! Monitoring: turning per-interval residuals into few, correct, actionable alerts.
//!
//! The monitor of one unit ([`Monitor`]) is a state machine over the per-interval evaluations
//! that compensates the prediction's dynamics, detects steady state, learns a baseline of the
//! residual on block means, runs CUSUM, EWMA and Shewhart checks on the standardized block
//! residual, heater effectiveness and apparent conversion, and attributes a mismatch to a
//! cause. Pure and driven by event time; its state serializes into the checkpoint. Its parts:
//!
//! * `state`: [`Monitor`], its states ([`MonitorState`]), one interval in ([`Monitor::step`])
//!   and block accumulation;
//! * `baseline`: [`Baseline`] and learning it from steady data;
//! * `instruments`: spikes (Hampel filter), stuck transmitters, thermometer and meter steps;
//! * `analyzers`: each analyzer's update cadence, learnt from the data, and frozen analyzers;
//! * `attribution`: judging a completed block ([`BlockRecord`]): the charts, heat loss,
//!   heater fouling against a conversion drift, and when a condition has cleared;
//! * `ranking`: the candidate causes ranked by how well their signatures explain the energy
//!   residual (generalised likelihood ratios with priors);
//! * `active`: the conditions the monitor holds with its own hysteresis;
//! * `trend`: the heater-effectiveness [`Trend`] and its projected limit date.
//!
//! And the methods they use:
//!
//! * [`charts`]: CUSUM and EWMA on a standardized statistic, their ARLs and designs.
//! * [`dynamics`]: dead time + first-order lag compensation of the prediction, and its
//!   identification from history.
//! * [`settings`]: the monitor's settings.
//! * [`stats`]: robust statistics, block length, trends, projections and regressions.
//! * [`ssd`]: steady-state detection (Cao–Rhinehart R-statistic with hysteresis).

pub mod charts;
pub mod dynamics;
pub mod settings;
pub mod ssd;
pub mod stats;

mod active;
mod analyzers;
mod attribution;
mod baseline;
mod instruments;
mod ranking;
mod state;
mod trend;

pub use attribution::BlockRecord;
pub use baseline::Baseline;
pub use state::{Monitor, MonitorOutput, MonitorState};
pub use trend::{Trend, TrendModel, range_text};

#[cfg(test)]
mod tests;
