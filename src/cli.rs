//! Command-line interface: argument definitions and the commands. Exit codes: 0 success,
//! 1 runtime failure, 2 usage or configuration error.

use std::io::Write;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand};

use crate::case::Case;

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
    },
    /// Run the embedded demo plant end to end.
    #[command(after_help = AFTER_HELP)]
    Demo,
}

/// Exit code for usage and configuration errors.
pub const EXIT_CONFIG: u8 = 2;
/// Exit code for runtime failures.
pub const EXIT_RUNTIME: u8 = 1;

/// Parse arguments and run.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Calc { case, json } => calc(&case, json),
        Command::Demo => {
            eprintln!(
                "efftemp demo: the embedded demo plant is not built yet; try `efftemp calc config/examples/steam-heated-hydrolysis.toml`"
            );
            ExitCode::from(EXIT_RUNTIME)
        }
    }
}

fn calc(path: &std::path::Path, json: bool) -> ExitCode {
    let report = match Case::load(path).and_then(|case| case.run()) {
        Ok(r) => r,
        Err(errors) => {
            for e in &errors.0 {
                eprintln!("error: {e}");
            }
            return ExitCode::from(EXIT_CONFIG);
        }
    };
    let text = if json { report.to_json() } else { report.to_text() };
    let mut out = std::io::stdout().lock();
    match writeln!(out, "{text}") {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: cannot write the report: {e}");
            ExitCode::from(EXIT_RUNTIME)
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
