//! Service logs through `tracing`: human-readable on a terminal, JSON lines otherwise (for
//! journald and log aggregators), INFO by default. Logs go to standard error; standard output
//! is reserved for alert events and command output.

use std::fmt::Display;
use std::io::{IsTerminal, Write};

use tracing_subscriber::EnvFilter;
use tracing_subscriber::filter::LevelFilter;

/// Log format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum LogFormat {
    /// Text on a terminal, JSON otherwise.
    Auto,
    /// Human-readable text.
    Text,
    /// One JSON object per line.
    Json,
}

/// Install the global subscriber. `filter` uses `tracing` directives, e.g. `info` or
/// `efftemp=debug`. A bad directive is an error (not silently ignored).
pub fn init(format: LogFormat, filter: &str) -> Result<(), String> {
    let filter = EnvFilter::builder()
        .with_default_directive(LevelFilter::INFO.into())
        .parse(filter)
        .map_err(|e| format!("bad log filter `{filter}`: {e}"))?;
    let json = match format {
        LogFormat::Json => true,
        LogFormat::Text => false,
        LogFormat::Auto => !std::io::stderr().is_terminal(),
    };
    let builder = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr);
    let res = if json {
        builder.json().flatten_event(true).with_current_span(false).with_span_list(false).try_init()
    } else {
        builder.with_target(false).try_init()
    };
    res.map_err(|e| format!("cannot install the logger: {e}"))
}

/// Write a line on standard error. Unlike `eprintln!` it does not panic when standard error is
/// a closed pipe (`efftemp check … 2>&1 | head -1`): what cannot be written is dropped.
pub fn err_line(text: impl Display) {
    let mut err = std::io::stderr().lock();
    let _ = writeln!(err, "{text}");
}

/// [`err_line`] without the newline (progress lines redrawn in place).
pub fn err_text(text: impl Display) {
    let mut err = std::io::stderr().lock();
    let _ = write!(err, "{text}");
    let _ = err.flush();
}
