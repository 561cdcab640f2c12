//! `ampchain noise`: output noise, EIN, noise figure and SNR per load, with what sets
//! the noise; output noise and dynamic range per stage.

use super::{file_path_only, origin, parse_frequency, planned_level};
use ampchain::error::Error;
use ampchain::io::{read_chain, write_atomically};
use ampchain::noise::optimum::{optimum, OptimumError};
use ampchain::noise::{self, BandNoise, NoiseBand, NoiseError, NoiseModel, Weighting};
use ampchain::plot::noise::noise_svg;
use ampchain::report::noise::optimum::OptimumReport;
use ampchain::report::noise::{DensityCurves, NoiseReport};
use ampchain::report::{CsvExporter, Exporter, JsonExporter, TableExporter};
use ampchain::text::quote_value;
use ampchain::units::Level;
use ampchain::Chain;
use clap::ValueEnum;
use std::path::Path;
use std::process::ExitCode;

/// Contributors drawn per load in the chart.
pub const CHART_CONTRIBUTORS: usize = 3;

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum NoiseFormat {
    Table,
    Json,
    Csv,
}

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum WeightingArg {
    None,
    A,
}

#[derive(clap::Args)]
pub struct NoiseArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// The band noise is integrated over: "20Hz..20kHz", "10..100k" [default: 20 Hz to 20 kHz].
    #[arg(long, allow_hyphen_values = true)]
    band: Option<String>,
    /// Weighting of the noise power: none, or A (IEC 61672-1).
    #[arg(long, value_enum, default_value_t = WeightingArg::None)]
    weighting: WeightingArg,
    /// Also report the noise densities at this frequency: "1k", "100 Hz".
    #[arg(long, allow_hyphen_values = true)]
    at: Option<String>,
    /// Planned source level for the SNR, overriding the file: "50 mV rms", "-20 dBu".
    #[arg(long, allow_hyphen_values = true)]
    input: Option<String>,
    /// Instead: sweep this stage's bias resistor for the collector current with the lowest noise figure.
    #[arg(long, value_name = "STAGE", conflicts_with_all = ["plot", "at"])]
    optimum: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = NoiseFormat::Table)]
    format: NoiseFormat,
    /// Also write a chart of the output noise density and its largest contributors (SVG) to this file.
    #[arg(long, value_name = "FILE.svg")]
    plot: Option<String>,
    #[command(flatten)]
    out: super::ReportOutput,
}

/// `--band FROM..TO`: two frequencies, the first below the second.
fn parse_band(text: &str) -> Result<NoiseBand, Error> {
    let bad = || {
        Error::Usage(format!(
            "--band: found {}, expected two frequencies as FROM..TO, the first below the second, such as \"20Hz..20kHz\"",
            quote_value(text)
        ))
    };
    let (from, to) = text.split_once("..").ok_or_else(bad)?;
    let from = parse_frequency(from.trim(), "--band")?;
    let to = parse_frequency(to.trim(), "--band")?;
    if from >= to {
        return Err(bad());
    }
    Ok(NoiseBand { from, to })
}

pub fn run(args: &NoiseArgs) -> Result<ExitCode, Error> {
    let band = match &args.band {
        Some(t) => parse_band(t)?,
        None => noise::DEFAULT_BAND,
    };
    let at = args
        .at
        .as_deref()
        .map(|t| parse_frequency(t, "--at"))
        .transpose()?;
    let weighting = match args.weighting {
        WeightingArg::None => Weighting::None,
        WeightingArg::A => Weighting::A,
    };
    if let Some(path) = &args.plot {
        file_path_only(path, "--plot")?;
    }
    let chain = read_chain(&args.chain)?;
    if let Some(id) = &args.optimum {
        return run_optimum(args, &chain, id, band, weighting);
    }
    let planned = match args.input.as_deref() {
        Some(t) => Some(planned_level(&chain, &args.chain, Some(t))?),
        None => chain.source.level,
    };
    let (report, mut model, result) =
        noise_report(&chain, &args.chain, band, weighting, planned, at)?;
    // Everything is computed before anything is written.
    let mut buf = Vec::new();
    let exporter: &dyn Exporter<NoiseReport> = match args.format {
        NoiseFormat::Table => &TableExporter,
        NoiseFormat::Json => &JsonExporter,
        NoiseFormat::Csv => &CsvExporter,
    };
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    if let Some(path) = &args.plot {
        let curves = DensityCurves::new(&chain, &mut model, &result, CHART_CONTRIBUTORS)
            .map_err(|e| noise_error(&chain, &args.chain, e.into()))?;
        let svg = noise_svg(&curves, chain.title.as_deref())?;
        write_atomically(Path::new(path), svg.as_bytes(), &[&args.chain])?;
    }
    args.out.emit(&buf, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}

/// A noise failure as the command reports it: no operating point is the DC error of
/// `plan`, anything else a broken invariant.
pub fn noise_error(chain: &Chain, path: &str, source: NoiseError) -> Error {
    match source {
        NoiseError::Dc(source) => Error::Dc {
            origin: origin(path),
            source,
            hint: chain.milliohm_hint(),
        },
        // A chain whose gain squares beyond f64: bad input, like a level overflow.
        NoiseError::Gain(g) => Error::Dc {
            origin: origin(path),
            source: g.into(),
            hint: String::new(),
        },
        source => Error::Noise {
            origin: origin(path),
            source,
        },
    }
}

/// The noise report of `chain` (read from `path`) over `band` with `weighting`, with
/// the model and band noise it came from (for the chart).
pub fn noise_report(
    chain: &Chain,
    path: &str,
    band: NoiseBand,
    weighting: Weighting,
    planned: Option<Level>,
    at: Option<f64>,
) -> Result<(NoiseReport, NoiseModel, BandNoise), Error> {
    let fail = |e: NoiseError| noise_error(chain, path, e);
    let mut model = NoiseModel::new(chain).map_err(fail)?;
    let result = noise::band_noise(&mut model, band, weighting).map_err(|e| fail(e.into()))?;
    let report =
        NoiseReport::new(chain, &mut model, &result, planned, at).map_err(|e| fail(e.into()))?;
    Ok((report, model, result))
}

/// `noise --optimum STAGE`.
fn run_optimum(
    args: &NoiseArgs,
    chain: &Chain,
    id: &str,
    band: NoiseBand,
    weighting: Weighting,
) -> Result<ExitCode, Error> {
    let stage = chain.stage_index(id).ok_or_else(|| {
        Error::Usage(format!(
            "--optimum: found {}, which is no stage of {}; expected one of {}{}",
            ampchain::text::quote(id),
            origin(&args.chain),
            ampchain::chain::name_list(chain.stages.iter().map(|s| s.id.as_str())),
            ampchain::text::lookalike(id, chain.stages.iter().map(|s| s.id.as_str())),
        ))
    })?;
    let result = optimum(chain, stage, band, weighting).map_err(|e| match e {
        OptimumError::Noise(source) => noise_error(chain, &args.chain, source),
        other => Error::Usage(format!("{}: {other}", origin(&args.chain))),
    })?;
    let report = OptimumReport::new(chain, &result, band, weighting);
    let mut buf = Vec::new();
    let exporter: &dyn Exporter<OptimumReport> = match args.format {
        NoiseFormat::Table => &TableExporter,
        NoiseFormat::Json => &JsonExporter,
        NoiseFormat::Csv => &CsvExporter,
    };
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    args.out.emit(&buf, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}

/// The noise report every other command adds on request (`plan --noise`, `plot levels
/// --noise`, the design report): 20 Hz … 20 kHz, unweighted, at the planned level.
pub fn audio_band_report(
    chain: &Chain,
    path: &str,
    planned: Level,
) -> Result<(NoiseReport, NoiseModel, BandNoise), Error> {
    noise_report(
        chain,
        path,
        noise::DEFAULT_BAND,
        Weighting::None,
        Some(planned),
        None,
    )
}
