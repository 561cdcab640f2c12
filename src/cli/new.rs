//! `ampchain new [--kind …]`: print a commented starter chain that plans as written.

use super::print;
use ampchain::error::Error;
use clap::ValueEnum;
use std::process::ExitCode;

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Kind {
    /// A common-emitter stage into an emitter follower on one supply.
    GainBlock,
    /// A cascode input (common emitter into common base) and a follower.
    Cascode,
}

#[derive(clap::Args)]
pub struct NewArgs {
    /// Which starter chain.
    #[arg(long, value_enum, default_value_t = Kind::GainBlock)]
    kind: Kind,
}

/// The starter chain of `kind`, as printed.
pub fn template(kind: Kind) -> &'static str {
    match kind {
        Kind::GainBlock => include_str!("../../templates/gain-block.jsonc"),
        Kind::Cascode => include_str!("../../templates/cascode.jsonc"),
    }
}

pub fn run(args: &NewArgs) -> Result<ExitCode, Error> {
    print(template(args.kind).as_bytes())?;
    Ok(ExitCode::SUCCESS)
}
