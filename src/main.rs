//! The `efftemp` binary: a thin wrapper around [`efftemp::cli`].

fn main() -> std::process::ExitCode {
    efftemp::cli::main()
}
