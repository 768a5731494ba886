//! The `isotint` command: parse the command line, hand over to the library.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = isotint::cli::Cli::parse();
    match isotint::cli::run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(isotint::cli::exit_code(&e))
        }
    }
}
