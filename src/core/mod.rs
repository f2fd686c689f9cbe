//! The pure core: interval assembly, the per-interval unit model, the monitor and the alert
//! lifecycle. No I/O and no clock: every function is driven by event time and its state
//! serializes into the checkpoint.

pub mod alerts;
pub mod assembly;
pub mod calendar;
pub mod model;
pub mod monitor;
pub mod spec;
pub mod vocabulary;
