//! `ampchain check`: validate a chain, print operating points and warnings.

use super::{origin, RowFormat};
use ampchain::error::Error;
use ampchain::io::read_chain;
use ampchain::report::check::CheckReport;
use ampchain::report::{CsvExporter, Exporter, JsonExporter, TableExporter};
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct CheckArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Output format.
    #[arg(long, value_enum, default_value_t = RowFormat::Table)]
    format: RowFormat,
    #[command(flatten)]
    out: super::ReportOutput,
}

pub fn run(args: &CheckArgs) -> Result<ExitCode, Error> {
    let chain = read_chain(&args.chain)?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
        hint: chain.milliohm_hint(),
    })?;
    let report = CheckReport::new(&origin(&args.chain), &chain, &ev);
    let exporter: &dyn Exporter<CheckReport> = match args.format {
        RowFormat::Table => &TableExporter,
        RowFormat::Json => &JsonExporter,
        RowFormat::Csv => &CsvExporter,
    };
    let mut out = Vec::new();
    exporter.export(&report, &mut out).map_err(Error::Write)?;
    args.out.emit(&out, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
