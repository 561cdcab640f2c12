//! `ampchain plan`: the full report, at midband or (`--at FREQ`) at one frequency.

use super::{file_path_only, origin, parse_frequency, planned_level, RowFormat};
use ampchain::chain::name_list;
use ampchain::error::{Error, EXIT_FINDING};
use ampchain::io::{read_chain, write_atomically};
use ampchain::position::{sweep_position, PositionError, PositionSweep};
use ampchain::report::{CsvExporter, Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::stages::StageKind;
use ampchain::text::{lookalike, quote};
use ampchain::units::format_si;
use ampchain::{Chain, Freq};
use std::path::Path;
use std::process::ExitCode;

/// Knob positions `--positions` may ask for.
const POSITIONS: std::ops::RangeInclusive<usize> = 2..=1001;

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
    /// Instead of one plan: sweep this potentiometer stage's knob from 0 to 1 and report,
    /// per position, the first stage to clip, its side and input level, and the headroom.
    #[arg(long, value_name = "STAGE", conflicts_with_all = ["noise", "fail_on_clip"])]
    sweep_position: Option<String>,
    /// Knob positions of `--sweep-position`, evenly spaced, both ends included (2 … 1001).
    #[arg(
        long,
        value_name = "N",
        default_value_t = 21,
        requires = "sweep_position"
    )]
    positions: usize,
    /// With `--sweep-position`: also write the headroom-against-position chart (SVG).
    #[arg(long, value_name = "FILE.svg", requires = "sweep_position")]
    plot: Option<String>,
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
    if let Some(id) = &args.sweep_position {
        return run_position(args, &chain, id, level, freq);
    }
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

/// `plan --sweep-position STAGE`: the knob sweep, its report and optional chart; every
/// output is computed before any is written.
fn run_position(
    args: &PlanArgs,
    chain: &Chain,
    id: &str,
    level: ampchain::units::Level,
    freq: Freq,
) -> Result<ExitCode, Error> {
    if !POSITIONS.contains(&args.positions) {
        return Err(Error::Usage(format!(
            "--positions: found {}, expected {} … {} knob positions",
            args.positions,
            POSITIONS.start(),
            POSITIONS.end()
        )));
    }
    if let Some(path) = &args.plot {
        file_path_only(path, "--plot")?;
    }
    let pots = || {
        chain
            .stages
            .iter()
            .filter(|s| matches!(s.kind, StageKind::Potentiometer(_)))
            .map(|s| s.id.as_str())
    };
    let stage = chain
        .stage_index(id)
        .filter(|&i| matches!(chain.stages[i].kind, StageKind::Potentiometer(_)))
        .ok_or_else(|| {
            let what = match chain.stage_index(id) {
                Some(i) => format!(
                    "{}, a stage of type \"{}\"",
                    quote(id),
                    chain.stages[i].kind.model().type_name()
                ),
                None => format!(
                    "{}, which is no stage of {}",
                    quote(id),
                    origin(&args.chain)
                ),
            };
            let expected = if pots().next().is_some() {
                format!("one of {}", name_list(pots()))
            } else {
                "a potentiometer stage, and this chain has none".into()
            };
            Error::Usage(format!(
                "--sweep-position: found {what}; expected {expected}{}",
                lookalike(id, pots())
            ))
        })?;
    let sweep: PositionSweep =
        sweep_position(chain, stage, args.positions, level, freq).map_err(|e| match e {
            PositionError::Dc { position, source } => Error::Dc {
                origin: format!(
                    "{} with the knob of {} at {position:.3}",
                    origin(&args.chain),
                    quote(id)
                ),
                source,
                hint: chain.milliohm_hint(),
            },
            PositionError::NotAPotentiometer(_) => unreachable!("checked above"),
        })?;
    let exporter: &dyn Exporter<PositionSweep> = match args.format {
        super::RowFormat::Table => &TableExporter,
        super::RowFormat::Json => &JsonExporter,
        super::RowFormat::Csv => &CsvExporter,
    };
    let mut buf = Vec::new();
    exporter.export(&sweep, &mut buf).map_err(Error::Write)?;
    if let Some(path) = &args.plot {
        let svg = ampchain::plot::position::position_svg(&sweep)?;
        write_atomically(Path::new(path), svg.as_bytes(), &[&args.chain])?;
    }
    args.out.emit(&buf, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
