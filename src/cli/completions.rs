//! `ampchain completions SHELL` and `ampchain manual`: shell completions and a man
//! page, generated from the same clap definitions that parse the options
//! (`clap_complete`, `clap_mangen`), so they cannot drift.

use super::{print, Cli};
use ampchain::error::Error;
use clap::CommandFactory;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct CompletionsArgs {
    /// The shell to complete for.
    #[arg(value_enum)]
    shell: clap_complete::Shell,
}

#[derive(clap::Args)]
pub struct ManualArgs {}

pub fn run_completions(args: &CompletionsArgs) -> Result<ExitCode, Error> {
    let mut script = Vec::new();
    clap_complete::generate(args.shell, &mut Cli::command(), "ampchain", &mut script);
    print(&script)?;
    Ok(ExitCode::SUCCESS)
}

/// The man page (roff) of `ampchain` and, after it, one of each command.
pub fn run_manual(_: &ManualArgs) -> Result<ExitCode, Error> {
    let command = Cli::command();
    let mut page = Vec::new();
    clap_mangen::Man::new(command.clone())
        .render(&mut page)
        .map_err(Error::Write)?;
    for sub in command.get_subcommands() {
        clap_mangen::Man::new(sub.clone())
            .title(format!("ampchain-{}", sub.get_name()))
            .render(&mut page)
            .map_err(Error::Write)?;
    }
    print(roff_ascii(&String::from_utf8_lossy(&page)).as_bytes())?;
    Ok(ExitCode::SUCCESS)
}

/// Every non-ASCII character as roff's Unicode escape `\[uXXXX]`, so the page needs
/// no input-encoding guess from the formatter (groff without preconv reads bytes).
fn roff_ascii(page: &str) -> String {
    let mut out = String::with_capacity(page.len());
    for c in page.chars() {
        if c.is_ascii() {
            out.push(c);
        } else {
            out.push_str(&format!("\\[u{:04X}]", c as u32));
        }
    }
    out
}
