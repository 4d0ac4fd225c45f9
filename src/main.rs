//! The `flipmend` binary: parse, dispatch, map errors to exit codes
//! (2 for bad input, 1 for internal failures).

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = flipmend::cli::Cli::parse();
    let outcome =
        std::panic::catch_unwind(|| flipmend::cli::run(cli, &mut std::io::stdout().lock()));
    match outcome {
        Ok(Ok(())) => ExitCode::SUCCESS,
        Ok(Err(error)) => {
            eprintln!("flipmend: error: {}", flipmend::cli::describe(&error));
            ExitCode::from(if error.is_bad_input() { 2 } else { 1 })
        }
        Err(_) => {
            eprintln!("flipmend: internal error: a bug stopped the command; please report it with the command line used");
            ExitCode::from(1)
        }
    }
}
