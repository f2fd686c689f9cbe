//! Where the outcome of each interval goes: soft-tag CSV files, the alert log, syslog, the
//! shift reports, and the checkpoint of the state directory.

pub mod checkpoint;
pub mod report;
pub mod softtags;
pub mod syslog;
