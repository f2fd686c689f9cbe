//! Configuration files, checked in two stages (a serde mirror with `deny_unknown_fields`, then
//! each stage's own settings with every problem located by file, line and key): the site file
//! of the service and the `calc` case file.

pub mod case;
mod site;

pub use site::*;
