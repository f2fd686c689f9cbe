//! # efftemp
//!
//! An online soft sensor for heated liquid-phase reactors. Each interval it computes, from an
//! enthalpy balance (heat-of-formation method), the effluent temperature the reactor should
//! have, compares it with the thermometer, and turns persistent mismatches into alerts.
//!
//! **Advisory only.** efftemp is not a safety instrumented function, must not be used for
//! automatic control actions, and its alerts do not replace the site's alarm system, operating
//! procedures, management of change, or the judgement of qualified engineers under local codes
//! and regulations.
//!
//! # Layout
//!
//! The folders follow the data path: export files are read by [`ingest`], every closed
//! interval goes through the pure [`core`] (no I/O, no clock), and its outcome is written by
//! the [`sinks`]. [`pipeline`] connects them; [`app`] is the command line and the service
//! around it; [`config`] checks the site and case files into each stage's own settings.
//! Imports run one way: `app` → `pipeline` → `config` → {`ingest`, `core`, `sinks`} →
//! [`thermo`] and the leaves ([`units`], [`source`], [`hash`], [`rng`]); `ingest` and `sinks`
//! may use `core`'s vocabulary, `core` uses neither.

pub mod app;
pub mod config;
pub mod core;
pub mod hash;
pub mod ingest;
pub mod pipeline;
pub mod requests;
pub mod rng;
pub mod sinks;
pub mod source;
pub mod thermo;
pub mod units;

/// The cautions every user-facing output carries (README, report, `--help`).
pub const CAUTION: &str = "efftemp is advisory. It is not a safety instrumented function, must not be used for automatic control actions, and its alerts do not replace the site's alarm system, operating procedures, management of change, or the judgement of qualified engineers under local codes and regulations.";
