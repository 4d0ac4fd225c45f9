//! The `flipmend-fleet` binary: parse, dispatch, map errors to exit codes
//! (2 for bad input, 1 for internal failures).

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = flipmend_fleet::cli::Cli::parse();
    match flipmend_fleet::cli::run(cli, &mut std::io::stdout().lock()) {
        Ok(()) => ExitCode::SUCCESS,
        Err(error) => {
            eprintln!("flipmend-fleet: error: {}", flipmend::cli::describe(&error));
            ExitCode::from(if error.is_bad_input() { 2 } else { 1 })
        }
    }
}
