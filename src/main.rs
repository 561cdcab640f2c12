//! The `ampchain` command: parses options (see `cli`), calls the library, renders.

mod cli;

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    // A panic is a bug: it must still end with the internal-error status (3), not
    // Rust's 101, so scripts can tell it from bad input.
    match std::panic::catch_unwind(|| cli::run(&args)) {
        Ok(Ok(code)) => code,
        Ok(Err(e)) => {
            eprintln!("error: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
        Err(_) => {
            eprintln!(
                "error: internal error (a bug in ampchain; please report it with the chain file)"
            );
            ExitCode::from(ampchain::error::EXIT_INTERNAL as u8)
        }
    }
}
