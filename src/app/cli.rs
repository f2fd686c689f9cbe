//! Command-line interface: the argument definitions, and the one place that turns a command's
//! result into an exit code: 0 success, 1 runtime failure, 2 usage or configuration error, 3 a
//! `calc --strict` result outside the model's validity. A closed standard output
//! (`efftemp check … | head -1`) ends a command quietly with 0.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use crate::app::commands::{self, Failure};
use crate::app::logging::{LogFormat, err_line};

const AFTER_HELP: &str = concat!(
    "CAUTION: efftemp is advisory. It is not a safety instrumented function, must not be used for ",
    "automatic control actions, and its alerts do not replace the site's alarm system, operating ",
    "procedures, management of change, or the judgement of qualified engineers under local codes ",
    "and regulations."
);

/// efftemp: predicted reactor effluent temperature from an enthalpy balance, compared with the
/// thermometer.
#[derive(Debug, Parser)]
#[command(name = "efftemp", version, about, after_help = AFTER_HELP)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// Subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Solve one steady-state balance from a case file (engineering what-ifs).
    #[command(after_help = AFTER_HELP)]
    Calc {
        /// The case file (TOML).
        case: PathBuf,
        /// Print one JSON object instead of the human summary.
        #[arg(long)]
        json: bool,
        /// Fail (exit 3, after printing the result) when the result has any validity warning:
        /// above a critical temperature, outside a correlation's range, two-phase risk or near
        /// the bubble point, no bubble point, conversion outside 0..1, element imbalance,
        /// effluent below its liquid range.
        #[arg(long)]
        strict: bool,
    },
    /// The service: tail the export files, compute each interval, alert, write back.
    #[command(after_help = AFTER_HELP)]
    Run {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Log format: text on a terminal, JSON lines otherwise.
        #[arg(long, value_enum, default_value = "auto")]
        log_format: LogFormat,
        /// Log filter (tracing directives), e.g. `info` or `efftemp=debug`.
        #[arg(long, default_value = "info")]
        log_level: String,
    },
    /// Validate a site configuration; every problem names its file, line and key.
    #[command(after_help = AFTER_HELP)]
    Check {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
    },
    /// Process existing export files as a batch, with the same outputs as `run`.
    #[command(after_help = AFTER_HELP)]
    Replay {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Export directories to read instead of each unit's configured directory (every unit
        /// whose file pattern matches files there reads them).
        paths: Vec<PathBuf>,
        /// Write outputs here instead of the site's output directory.
        #[arg(long)]
        output: Option<PathBuf>,
        /// Log format.
        #[arg(long, value_enum, default_value = "auto")]
        log_format: LogFormat,
        /// Log filter.
        #[arg(long, default_value = "warn")]
        log_level: String,
    },
    /// Run the embedded demo plant end to end: simulated exports with injected faults,
    /// processed live by the real service, with a scorecard at the end.
    #[command(after_help = AFTER_HELP)]
    Demo {
        /// Simulator seed (same seed, same data).
        #[arg(long, default_value_t = 2026)]
        seed: u64,
        /// Simulated days.
        #[arg(long, default_value_t = 11.0)]
        days: f64,
        /// Simulated seconds per wall second (default: finish writing in about 40 s).
        #[arg(long)]
        speed: Option<f64>,
        /// Directory for exports, state and outputs (must be empty or new).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Delete the files at the end (by default they are kept for inspection).
        #[arg(long)]
        discard: bool,
        /// Only write the simulated plant's export files into DIR (new or empty) and stop: the
        /// data `config/example-site.toml` expects in `var/exports/sru`, for `replay` or `run`.
        #[arg(long, value_name = "DIR", conflicts_with_all = ["speed", "out", "discard"])]
        export_only: Option<PathBuf>,
    },
    /// Write the shift report (HTML) of a unit and print a text summary.
    #[command(after_help = AFTER_HELP)]
    Report {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit (default: every unit).
        #[arg(long)]
        unit: Option<String>,
        /// The shift that contains this time (RFC 3339, or local `YYYY-MM-DDTHH:MM`).
        #[arg(long, conflicts_with = "last")]
        shift: Option<String>,
        /// The last completed shift (the default).
        #[arg(long)]
        last: bool,
    },
    /// Ask the service to learn a new baseline for a unit (after maintenance); audited.
    #[command(after_help = AFTER_HELP)]
    Rebaseline {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// Why (recorded in the audit log).
        #[arg(long)]
        reason: String,
        /// Who (default: the login name).
        #[arg(long)]
        by: Option<String>,
    },
    /// Shelve alerts of a unit for a while: tracked but not announced; audited.
    #[command(after_help = AFTER_HELP)]
    Shelve {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// An alert id, a cause (e.g. `data_quality`) or `cause/subject`.
        #[arg(long)]
        selector: String,
        /// How long, e.g. "8h" (at most the configured `shelve_max`).
        #[arg(long = "for")]
        duration: String,
        /// Why (recorded in the audit log).
        #[arg(long)]
        reason: String,
        /// Who (default: the login name).
        #[arg(long)]
        by: Option<String>,
    },
    /// Remove a shelf before it expires; audited.
    #[command(after_help = AFTER_HELP)]
    Unshelve {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// The selector that was shelved.
        #[arg(long)]
        selector: String,
        /// Why.
        #[arg(long)]
        reason: String,
        /// Who.
        #[arg(long)]
        by: Option<String>,
    },
    /// Estimate the dead time and lag of the effluent temperature from existing export files.
    #[command(after_help = AFTER_HELP)]
    Identify {
        /// Site configuration (TOML).
        #[arg(long)]
        config: PathBuf,
        /// Unit.
        #[arg(long)]
        unit: String,
        /// Longest dead time to consider, e.g. "30m".
        #[arg(long, default_value = "30m")]
        max_dead_time: String,
    },
}

/// Exit code for usage and configuration errors.
pub const EXIT_CONFIG: u8 = 2;
/// Exit code for runtime failures.
pub const EXIT_RUNTIME: u8 = 1;
/// Exit code of `calc --strict` for a result outside the model's validity.
pub const EXIT_INVALID_RESULT: u8 = 3;

/// Parse arguments, run the command, and map its result to an exit code.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match dispatch(cli.command) {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => exit(&failure),
    }
}

fn dispatch(command: Command) -> Result<(), Failure> {
    use crate::requests::Action;
    match command {
        Command::Calc { case, json, strict } => commands::calc(&case, json, strict),
        Command::Check { config } => commands::check(&config),
        Command::Run { config, log_format, log_level } => commands::run(&config, log_format, &log_level),
        Command::Replay { config, paths, output, log_format, log_level } => {
            commands::replay(&config, &paths, output, log_format, &log_level)
        }
        Command::Demo { seed, days, speed, out, discard, export_only: Some(dir) } => {
            let _ = (speed, out, discard);
            commands::demo_exports(seed, days, &dir)
        }
        Command::Demo { seed, days, speed, out, discard, export_only: None } => {
            commands::demo(seed, days, speed, out, discard)
        }
        Command::Report { config, unit, shift, last: _ } => {
            commands::report(&config, unit.as_deref(), shift.as_deref())
        }
        Command::Rebaseline { config, unit, reason, by } => {
            commands::request(&config, &unit, commands::Asked::Rebaseline, &reason, by)
        }
        Command::Shelve { config, unit, selector, duration, reason, by } => {
            commands::request(&config, &unit, commands::Asked::Shelve { selector, duration }, &reason, by)
        }
        Command::Unshelve { config, unit, selector, reason, by } => commands::request(
            &config,
            &unit,
            commands::Asked::Action(Action::Unshelve { selector }),
            &reason,
            by,
        ),
        Command::Identify { config, unit, max_dead_time } => {
            commands::identify(&config, &unit, &max_dead_time)
        }
    }
}

/// Print a failure on standard error and give its exit code.
fn exit(failure: &Failure) -> ExitCode {
    match failure {
        Failure::Closed => ExitCode::SUCCESS,
        Failure::Usage(message) => {
            err_line(format_args!("error: {message}"));
            ExitCode::from(EXIT_CONFIG)
        }
        Failure::Site(errors) => {
            for e in &errors.0 {
                err_line(format_args!("error: {e}"));
            }
            err_line(format_args!("{} problem(s) in the configuration", errors.0.len()));
            ExitCode::from(EXIT_CONFIG)
        }
        Failure::Case(errors) => {
            for e in &errors.0 {
                err_line(format_args!("error: {e}"));
            }
            ExitCode::from(EXIT_CONFIG)
        }
        Failure::Runtime(message) => {
            err_line(format_args!("error: {message}"));
            ExitCode::from(EXIT_RUNTIME)
        }
        Failure::Invalid(message) => {
            eprintln!("error: {message}");
            ExitCode::from(EXIT_INVALID_RESULT)
        }
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use clap::CommandFactory;

    #[test]
    fn cli_definition_is_consistent() {
        super::Cli::command().debug_assert();
    }
}
