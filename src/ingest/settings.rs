//! What ingestion needs to know about a unit's export files, checked by the site loader.

use std::path::PathBuf;

use jiff::tz::TimeZone;

/// How the directory is watched.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum WatchMode {
    /// Native file events; falls back to polling if the watcher cannot start.
    Auto,
    /// Native file events only (start fails if unavailable).
    Native,
    /// A polling watcher at the reconcile interval.
    Poll,
    /// No watcher: the periodic reconcile pass only.
    Off,
}

/// Layout of the export rows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Layout {
    /// A timestamp column and one column per tag.
    Wide,
    /// Timestamp, tag, value and optionally quality columns.
    Long {
        /// Tag column.
        tag: String,
        /// Value column.
        value: String,
        /// Quality column.
        quality: Option<String>,
    },
}

/// How timestamps are written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TimestampFormat {
    /// RFC 3339 with offset (or `Z`).
    Rfc3339,
    /// A strftime-style format of local time in the input's time zone.
    Local(String),
}

/// Input files of a unit.
#[derive(Debug, Clone)]
pub struct InputConfig {
    /// Export directory.
    pub directory: PathBuf,
    /// File-name pattern.
    pub pattern: String,
    /// File-name patterns of files not to read although `pattern` matches them.
    pub exclude: Vec<String>,
    /// Row layout.
    pub layout: Layout,
    /// Timestamp column.
    pub timestamp_column: String,
    /// Timestamp format.
    pub timestamp_format: TimestampFormat,
    /// Time zone of local timestamps.
    pub time_zone: TimeZone,
    /// Reject (count and log) rows of unmapped tags in long files.
    pub reject_unknown_tags: bool,
    /// Follow symbolic links out of the export directory.
    pub links_outside: bool,
}

impl InputConfig {
    /// Whether the file called `name` is one of this input's export files.
    pub fn selects(&self, name: &str) -> bool {
        crate::ingest::glob::selects(&self.pattern, &self.exclude, name)
    }
}
