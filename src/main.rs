//! The `isopach` binary: argument parsing and dispatch only (see `cli`).
mod cli;

fn main() -> std::process::ExitCode {
    cli::main()
}
