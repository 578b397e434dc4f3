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
            // An adapter that cannot be reached is the adapter/link code,
            // not a usage error; every driver reports it the same way.
            let code = e.downcast_ref::<buscue::adapter::OpenError>().map_or(buscue::exit::INPUT, |o| o.exit_code());
            ExitCode::from(code)
        }
    }
}
