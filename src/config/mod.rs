//! Configuration files, checked in two stages (a serde mirror with `deny_unknown_fields`, then
//! each stage's own settings with every problem located by file, line and key): the site file
//! of the service and the `calc` case file.
//!
//! `raw` mirrors the site file, `site` checks its site-wide sections and `unit` each unit, both
//! through the one checker in `check`, which the case file (`case`) uses too.

pub mod case;
mod check;
mod raw;
mod site;
mod unit;

pub use check::{parse_duration_ms, parse_time_zone};
pub use raw::*;
pub use site::{ServiceConfig, SiteConfig};
pub use unit::UnitConfig;
