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
//! * [`units`]: engineering unit strings (`"57 degC"`, `"3.2 MW"`) to SI and back.
//! * [`source`]: source files and located errors (file, line, column, key).
//! * [`thermo`]: pure thermodynamics: components, enthalpy paths, the balance solver, bubble
//!   points, uncertainty propagation.
//! * [`case`]: the `calc` case file (two-stage: serde mirror, then checked model) and its
//!   human and JSON reports.
//! * [`ingest`]: tailing historian export files into records (split, tail).
//! * [`hash`]: a stable 64-bit hash for fingerprints and checksums.
//! * [`assembly`]: interval assembly in event time (aggregation, staleness, lateness).
//! * [`config`]: the site configuration (two-stage, located errors).
//! * [`model`]: the per-interval unit model (soft tags, flags, conditions).
//! * [`alerts`]: the alert lifecycle (raise, update, clear; stable ids).
//! * [`output`]: soft-tag CSV and alert JSON-lines writers (idempotent by key).
//! * [`forward`]: alert events to a syslog collector (RFC 5424 over UDP or framed TCP, disk queue).
//! * [`state`]: the locked state directory and the atomic checkpoint.
//! * [`pipeline`]: tail → rows → intervals → model → alerts → outputs → checkpoint.
//! * [`service`]: the async shell of `run` (events, ticks, shutdown) and the batch `replay`.
//! * [`logging`]: text or JSON logs.
//! * [`http`]: health and Prometheus metrics endpoints.
//! * [`monitor`]: steady state, dynamics, baseline, charts, cause attribution.
//! * [`report`]: the shift report (HTML with inline SVG, and text).
//! * [`sim`]: the embedded plant simulator of the demo.
//! * [`demo`]: `efftemp demo`.
//! * [`cli`]: command-line definitions and the commands.

pub mod alerts;
pub mod assembly;
pub mod case;
pub mod cli;
pub mod config;
pub mod demo;
pub mod forward;
pub mod hash;
pub mod http;
pub mod ingest;
pub mod logging;
pub mod model;
pub mod monitor;
pub mod output;
pub mod pipeline;
pub mod report;
pub mod rng;
pub mod service;
pub mod sim;
pub mod source;
pub mod state;
pub mod thermo;
pub mod units;

/// The cautions every user-facing output carries (DESIGN §6).
pub const CAUTION: &str = "efftemp is advisory. It is not a safety instrumented function, must not be used for automatic control actions, and its alerts do not replace the site's alarm system, operating procedures, management of change, or the judgement of qualified engineers under local codes and regulations.";
