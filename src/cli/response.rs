//! `ampchain response`: the frequency response at every load and of every stage, the
//! −3 dB corners and which capacitor sets each, optionally as a Bode plot (SVG).

use super::{file_path_only, origin, parse_frequency};
use ampchain::error::Error;
use ampchain::io::{read_chain, write_atomically};
use ampchain::plot::bode::bode_svg;
use ampchain::plot::loop_gain::loop_gain_svg;
use ampchain::report::{CsvExporter, Exporter, JsonExporter, ResponseReport, TableExporter};
use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
use clap::ValueEnum;
use std::path::Path;
use std::process::ExitCode;

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ResponseFormat {
    Table,
    Json,
    Csv,
}

#[derive(clap::Args)]
pub struct ResponseArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Lowest frequency of the sweep: "1", "10 Hz", "20Hz" [default: 1 Hz].
    #[arg(long, allow_hyphen_values = true, value_name = "FREQ")]
    from: Option<String>,
    /// Highest frequency of the sweep: "20k", "1 MHz" [default: 10 MHz].
    #[arg(long, allow_hyphen_values = true, value_name = "FREQ")]
    to: Option<String>,
    /// Points per decade (log-spaced).
    #[arg(long, default_value_t = DEFAULT_PER_DECADE, value_name = "N")]
    per_decade: usize,
    /// Output format.
    #[arg(long, value_enum, default_value_t = ResponseFormat::Table)]
    format: ResponseFormat,
    /// Also write a Bode plot (SVG) to this file.
    #[arg(long, value_name = "FILE.svg")]
    plot: Option<String>,
    /// Also write the loop-gain Bode plot (T of every feedback loop, SVG) to this file.
    #[arg(long, value_name = "FILE.svg")]
    loop_plot: Option<String>,
    #[command(flatten)]
    out: super::ReportOutput,
}

pub fn run(args: &ResponseArgs) -> Result<ExitCode, Error> {
    let from = match &args.from {
        Some(t) => parse_frequency(t, "--from")?,
        None => response::DEFAULT_FROM,
    };
    let to = match &args.to {
        Some(t) => parse_frequency(t, "--to")?,
        None => response::DEFAULT_TO,
    };
    if let Some(path) = &args.plot {
        file_path_only(path, "--plot")?;
    }
    if let Some(path) = &args.loop_plot {
        file_path_only(path, "--loop-plot")?;
    }
    let sweep = Sweep::new(from, to, args.per_decade).map_err(|e| Error::Usage(e.to_string()))?;
    let chain = read_chain(&args.chain)?;
    // Every frequency holds a gain for each stage and load: bound the report's size.
    let points = sweep.frequencies().len();
    let columns = chain.stages.len() + chain.loads.len();
    let max = ampchain::limits::MAX_RESPONSE_VALUES;
    if points.saturating_mul(columns) > max {
        return Err(Error::Usage(format!(
            "--per-decade {}: {points} frequencies × {columns} stages and loads would make {} values; expected at most {max} (fewer points per decade, or a narrower --from/--to)",
            args.per_decade,
            points * columns
        )));
    }
    let result = response::analyse(&chain, &sweep).map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
        hint: chain.milliohm_hint(),
    })?;
    let report = ResponseReport::new(&chain, &result);
    // Everything is computed before anything is written.
    let mut buf = Vec::new();
    let exporter: &dyn Exporter<ResponseReport> = match args.format {
        ResponseFormat::Table => &TableExporter,
        ResponseFormat::Json => &JsonExporter,
        ResponseFormat::Csv => &CsvExporter,
    };
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    if let Some(path) = &args.plot {
        let svg = bode_svg(&report)?;
        write_atomically(Path::new(path), svg.as_bytes(), &[&args.chain])?;
    }
    if let Some(path) = &args.loop_plot {
        if report.loops.is_empty() {
            return Err(Error::Usage(
                "--loop-plot: found a chain without a feedback link; expected a chain with a loop (\"coupling\": \"feedback\")".into(),
            ));
        }
        let svg = loop_gain_svg(&report)?;
        write_atomically(Path::new(path), svg.as_bytes(), &[&args.chain])?;
    }
    args.out.emit(&buf, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
