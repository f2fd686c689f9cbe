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
//! * [`cli`]: command-line definitions and the commands.

pub mod case;
pub mod cli;
pub mod hash;
pub mod ingest;
pub mod source;
pub mod thermo;
pub mod units;

/// The cautions every user-facing output carries (DESIGN §6).
pub const CAUTION: &str = "efftemp is advisory. It is not a safety instrumented function, must not be used for automatic control actions, and its alerts do not replace the site's alarm system, operating procedures, management of change, or the judgement of qualified engineers under local codes and regulations.";
