//! The `ampchain` command: parses options (see `cli`), calls the library, renders.

mod cli;

use clap::Parser;
use std::process::ExitCode;

/// Standard output closed at start (`ampchain plan chain.json >&-`) must be an error
/// (exit status 3, docs/errors.md `cannot-write`), but the Rust runtime puts `/dev/null`
/// on a closed descriptor 0–2 before `main` (so a file opened later never lands on
/// them), after which writes vanish silently. This runs before the runtime, as an ELF
/// initialiser, and only records whether descriptor 1 is open.
#[cfg(target_os = "linux")]
#[used]
#[link_section = ".init_array"]
static NOTE_CLOSED_STDOUT: extern "C" fn() = {
    extern "C" fn note() {
        // SAFETY: fcntl(F_GETFD) only queries the descriptor's flags.
        if unsafe { libc::fcntl(1, libc::F_GETFD) } == -1 {
            ampchain::io::note_stdout_closed();
        }
    }
    note
};

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
