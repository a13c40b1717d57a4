//! The `pollard` command: a thin layer over the library (see `pollard --help`).

mod cli;

fn main() -> std::process::ExitCode {
    cli::main()
}
