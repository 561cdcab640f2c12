//! `ampchain plan`: the full report, at midband or (`--at FREQ`) at one frequency.

use super::{origin, parse_frequency, planned_level, RowFormat};
use ampchain::error::{Error, EXIT_FINDING};
use ampchain::io::read_chain;
use ampchain::report::{CsvExporter, Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::units::format_si;
use ampchain::Freq;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct PlanArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "0.2 Vpk", "1 Vpp", "-20 dBu", "-10 dBV".
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    input: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = RowFormat::Table)]
    format: RowFormat,
    /// Evaluate gains, levels and headroom at this frequency instead of midband: "1k", "20 Hz".
    #[arg(long, allow_hyphen_values = true, value_name = "FREQ")]
    at: Option<String>,
    /// Exit with status 1 when the planned input clips any stage (the report is still
    /// printed), for scripts.
    #[arg(long)]
    fail_on_clip: bool,
    /// Add the noise floor: each stage's dynamic range, each load's SNR (20 Hz to 20 kHz, unweighted; `noise` has the options).
    #[arg(long)]
    noise: bool,
    #[command(flatten)]
    out: super::ReportOutput,
}

pub fn run(args: &PlanArgs) -> Result<ExitCode, Error> {
    let freq = match &args.at {
        Some(text) => Freq::Hz(parse_frequency(text, "--at")?),
        None => Freq::Midband,
    };
    let chain = read_chain(&args.chain)?;
    let level = planned_level(&chain, &args.chain, args.input.as_deref())?;
    let ev = chain.evaluate_at(freq).map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
        hint: chain.milliohm_hint(),
    })?;
    let mut report = PlanReport::new(&chain, &ev, level);
    if args.noise {
        let (noise, _, _) = super::noise::audio_band_report(&chain, &args.chain, level)?;
        report.noise = Some(noise);
    }
    let exporter: &dyn Exporter = match args.format {
        RowFormat::Table => &TableExporter,
        RowFormat::Json => &JsonExporter,
        RowFormat::Csv => &CsvExporter,
    };
    let mut buf = Vec::new();
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    args.out.emit(&buf, &[&args.chain])?;
    let first = &report.first_clip;
    if args.fail_on_clip && level.vpeak() > first.input_vpeak {
        eprintln!(
            "ampchain: the planned input ({} peak) clips stage \"{}\" toward {} (it clips at {} peak at the source); failing as --fail-on-clip asks",
            format_si(level.vpeak(), "V"),
            first.stage,
            first.toward,
            format_si(first.input_vpeak, "V")
        );
        return Ok(ExitCode::from(EXIT_FINDING as u8));
    }
    Ok(ExitCode::SUCCESS)
}
