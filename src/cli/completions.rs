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

/// The man page (roff) of `ampchain` and, after it, one of each command and of each
/// command's subcommands (`plot loadlines`, …) at any depth: every command a `--help`
/// lists. Built first, so each page is named by its path ("ampchain-plot-loadlines")
/// and its synopsis reads "ampchain plot loadlines".
pub fn run_manual(_: &ManualArgs) -> Result<ExitCode, Error> {
    let mut command = Cli::command();
    command.build();
    let mut page = Vec::new();
    clap_mangen::Man::new(command.clone())
        .render(&mut page)
        .map_err(Error::Write)?;
    render_subcommands(&command, &mut page)?;
    print(roff_ascii(&String::from_utf8_lossy(&page)).as_bytes())?;
    Ok(ExitCode::SUCCESS)
}

/// A page for every subcommand of `command`, each followed by its own subcommands'
/// (clap's `help` too: the pages' SUBCOMMANDS lists name it).
fn render_subcommands(command: &clap::Command, page: &mut Vec<u8>) -> Result<(), Error> {
    for sub in command.get_subcommands() {
        clap_mangen::Man::new(sub.clone())
            .render(page)
            .map_err(Error::Write)?;
        render_subcommands(sub, page)?;
    }
    Ok(())
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
