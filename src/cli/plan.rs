//! `ampchain plan`: the full midband report.

use super::{origin, planned_level, print, Format};
use ampchain::error::{Error, EXIT_FINDING};
use ampchain::io::read_chain;
use ampchain::report::{Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::units::format_si;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct PlanArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "0.2 Vpk", "1 Vpp", "-20 dBu", "-10 dBV".
    #[arg(long, allow_hyphen_values = true)]
    input: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    format: Format,
    /// Exit with status 1 when the planned input clips any stage (the report is still
    /// printed), for scripts.
    #[arg(long)]
    fail_on_clip: bool,
}

pub fn run(args: &PlanArgs) -> Result<ExitCode, Error> {
    let chain = read_chain(&args.chain)?;
    let level = planned_level(&chain, &args.chain, args.input.as_deref())?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
    })?;
    let report = PlanReport::new(&chain, &ev, level);
    let exporter: &dyn Exporter = match args.format {
        Format::Table => &TableExporter,
        Format::Json => &JsonExporter,
    };
    let mut buf = Vec::new();
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    print(&buf)?;
    let first = &report.first_clip;
    if args.fail_on_clip && level.vpeak() > first.input_vpeak {
        eprintln!(
            "ampchain: the planned input ({} peak) clips stage \"{}\" toward {} (it clips at {} peak at the source); failing as --fail-on-clip asks",
            format_si(level.vpeak(), "V"),
            first.stage,
            first.toward,
            format_si(first.input_vpeak, "V")
        );
        return Ok(ExitCode::from(EXIT_FINDING));
    }
    Ok(ExitCode::SUCCESS)
}
