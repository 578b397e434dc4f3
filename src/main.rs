//! The `buscue` command line: parse, dispatch, exit codes (see
//! [`buscue::exit`] and the README).

use std::process::ExitCode;

use clap::Parser;

mod cli;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    match cli::dispatch(args) {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::from(buscue::exit::INPUT)
        }
    }
}
