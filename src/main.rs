//! The `efftemp` binary: a thin wrapper around [`efftemp::app::cli`].

fn main() -> std::process::ExitCode {
    efftemp::app::cli::main()
}
