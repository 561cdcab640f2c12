//! `ampchain spread`: Monte Carlo and corners over the chain's tolerances, device
//! spread and temperature.

use super::{file_path_only, origin, parse_frequency};
use ampchain::chain::Fields;
use ampchain::error::{Error, EXIT_FINDING};
use ampchain::io::{read_chain_with_spec, write_atomically};
use ampchain::network::Freq;
use ampchain::plot::spread::run_histograms_svg;
use ampchain::report::spread::SpreadReport;
use ampchain::report::{CsvExporter, Exporter, JsonExporter, TableExporter};
use ampchain::spec::{ChainSpec, ValueSpec};
use ampchain::spread::{self, Measure, Requirement, SpreadModel};
use ampchain::text::quote_value;
use clap::ValueEnum;
use std::io::IsTerminal;
use std::path::Path;
use std::process::ExitCode;

/// Largest record table a run may allocate (4 GB, a sixth of this machine's memory).
const MAX_RECORD_BYTES: usize = 4_000_000_000;

/// Runs from which a terminal gets a progress bar.
const PROGRESS_FROM: usize = 20_000;

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SpreadFormat {
    Table,
    Json,
    Csv,
}

#[derive(clap::Args)]
pub struct SpreadArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Number of Monte Carlo builds.
    #[arg(long, default_value_t = 10_000, value_name = "RUNS")]
    runs: usize,
    /// Seed of the random draws; the same seed gives the same report.
    #[arg(long, default_value_t = 1, value_name = "SEED")]
    seed: u64,
    /// Evaluate gains and clip levels at this frequency instead of midband ("20", "20 Hz",
    /// "15k"); capacitor tolerances then spread too.
    #[arg(long, allow_hyphen_values = true, value_name = "FREQ")]
    at: Option<String>,
    /// Also find every build's low and high −3 dB corners (capacitor tolerances then
    /// spread too); costs about 60 AC passes per build.
    #[arg(long)]
    band: bool,
    /// Also integrate every build's band noise (20 Hz to 20 kHz, unweighted): the EIN and SNR per load (capacitor tolerances then spread too).
    #[arg(long)]
    noise: bool,
    /// Ambient temperature range, replacing the file's: "0..50 C", "-20 C..70 C", "273 K..323 K".
    #[arg(long, allow_hyphen_values = true, value_name = "RANGE")]
    temperature: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = SpreadFormat::Table)]
    format: SpreadFormat,
    /// Write histograms of the overall gain and of the clip input level to this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    plot: Option<String>,
    /// A requirement every build should meet, e.g. "gain 30dB..33dB" or "clip -10dBu.." (repeatable).
    #[arg(
        long = "require",
        allow_hyphen_values = true,
        value_name = "REQUIREMENT"
    )]
    requirements: Vec<String>,
    /// Share of builds allowed to miss a requirement before the command exits with status 1: "0.01" or "1%".
    #[arg(long, default_value = "0", value_name = "SHARE")]
    max_failure: String,
    /// Worker threads (default: one per core). The report does not depend on it.
    #[arg(long, value_name = "N")]
    threads: Option<usize>,
    #[command(flatten)]
    out: super::ReportOutput,
}

/// `LOW..HIGH` with a temperature unit on each end, or once at the end ("0..50 C").
pub fn parse_temperature_range(text: &str) -> Result<(f64, f64), Error> {
    let usage = |expected: &str| {
        Error::Usage(format!(
            "--temperature {}: expected {expected}, such as \"0..50 C\" or \"-20 C..70 C\"",
            quote_value(text)
        ))
    };
    let (low, high) = text
        .split_once("..")
        .ok_or_else(|| usage("a range LOW..HIGH"))?;
    let f = Fields::new("");
    let read = |s: &str| f.temperature("--temperature", &ValueSpec::Text(s.trim().to_string()));
    let high_t = read(high).map_err(|e| Error::Usage(e.to_string()))?;
    // A bare number on the low end takes the high end's unit.
    let unit = high
        .trim()
        .trim_start_matches(|c: char| c.is_ascii_digit() || c == '.' || c == '-' || c == '+')
        .trim();
    let low_t = read(low)
        .or_else(|_| read(&format!("{} {unit}", low.trim())))
        .map_err(|e| Error::Usage(e.to_string()))?;
    if low_t > high_t {
        return Err(usage("LOW at or below HIGH"));
    }
    Ok((low_t, high_t))
}

/// `0.01` or `1%`, from 0 to 1.
fn parse_share(text: &str) -> Result<f64, Error> {
    let t = text.trim();
    let x = match t.strip_suffix('%') {
        Some(p) => p.trim().parse::<f64>().map(|p| p / 100.0),
        None => t.parse::<f64>(),
    };
    match x {
        Ok(x) if (0.0..=1.0).contains(&x) => Ok(x),
        _ => Err(Error::Usage(format!(
            "--max-failure {}: expected a share of builds from 0 to 1, or a percentage such as \"1%\"", quote_value(text)
        ))),
    }
}

/// What spreads in the chain (see [`something_spreads`]).
pub fn model_for(
    spec: &ChainSpec,
    chain: &ampchain::Chain,
    name: &str,
    temperature: Option<(f64, f64)>,
    measure: &Measure,
) -> Result<SpreadModel, Error> {
    SpreadModel::build(spec, chain, temperature, measure.at_frequency()).map_err(|source| {
        Error::Chain {
            origin: name.to_string(),
            source,
        }
    })
}

/// Which command runs the spread, so a refusal names only options it has.
#[derive(Clone, Copy, PartialEq, Eq)]
pub enum SpreadCommand {
    /// `ampchain spread`: `--temperature`, `--at`, `--band`.
    Spread,
    /// `ampchain report --spread N`: midband, the file's spreads only.
    Report,
}

/// Refuse a model in which nothing spreads (or only capacitances, at midband); the
/// message names only what `command` can do about it.
pub fn something_spreads(
    model: &SpreadModel,
    name: &str,
    command: SpreadCommand,
) -> Result<(), Error> {
    const EXAMPLE: &str = "(e.g. \"r_collector\": {\"value\": \"10k\", \"tolerance\": \"1%\"}, \"beta\": {\"min\": 100, \"typical\": 250, \"max\": 400})";
    if model.spreads.is_empty() && !model.not_sampled.is_empty() {
        let names: Vec<&str> = model
            .not_sampled
            .iter()
            .map(|n| n.parameter.as_str())
            .collect();
        let instead = match command {
            SpreadCommand::Spread => {
                "expected --at FREQ or --band to spread them, or a resistor, β or temperature spread"
            }
            SpreadCommand::Report => {
                "the report's spread section builds the chain at midband; expected a resistor, β or temperature spread in the file"
            }
        };
        return Err(Error::Usage(format!(
            "{name}: found only capacitances that spread ({}), which do not act at midband; {instead}",
            names.join(", ")
        )));
    }
    if model.spreads.is_empty() {
        let or = match command {
            SpreadCommand::Spread => "or --temperature",
            SpreadCommand::Report => {
                "or a temperature range (\"temperature\": {\"min\": \"0 C\", \"typical\": \"25 C\", \"max\": \"50 C\"})"
            }
        };
        return Err(Error::Usage(format!(
            "{name}: found nothing that spreads; expected a \"tolerance\" section, a value with a tolerance or range {EXAMPLE}, {or}"
        )));
    }
    Ok(())
}

/// A progress bar of `runs` builds, on a terminal and for runs of [`PROGRESS_FROM`]
/// or more.
pub fn builds_bar(runs: usize) -> Option<indicatif::ProgressBar> {
    (std::io::stderr().is_terminal() && runs >= PROGRESS_FROM).then(|| {
        let bar = indicatif::ProgressBar::new(runs as u64);
        if let Ok(style) = indicatif::ProgressStyle::with_template(
            "{bar:40} {human_pos}/{human_len} builds, {eta} left",
        ) {
            bar.set_style(style);
        }
        bar
    })
}

/// A number of builds this chain's records fit in (`option` names it in messages).
pub fn check_runs(runs: usize, layout: &spread::Layout, option: &str) -> Result<(), Error> {
    if runs == 0 {
        return Err(Error::Usage(format!(
            "{option} 0: expected at least one build"
        )));
    }
    // Every build keeps its record (8 bytes per value) until the statistics are made.
    let record_bytes = 8 * layout.width();
    if runs.saturating_mul(record_bytes) > MAX_RECORD_BYTES {
        return Err(Error::Usage(format!(
            "{option} {}: the records of that many builds would take {:.1} GB; expected at most {} builds for this chain ({} GB)",
            runs,
            runs as f64 * record_bytes as f64 / 1e9,
            MAX_RECORD_BYTES / record_bytes,
            MAX_RECORD_BYTES / 1_000_000_000
        )));
    }
    Ok(())
}

pub fn run(args: &SpreadArgs) -> Result<ExitCode, Error> {
    let name = origin(&args.chain);
    if let Some(n) = args.threads {
        let max = ampchain::limits::MAX_THREADS;
        if n == 0 || n > max {
            return Err(Error::Usage(format!(
                "--threads: found {n}, expected 1 to {max} worker threads (the report does not depend on the count; more threads than cores only add switching)"
            )));
        }
    }
    if let Some(path) = &args.plot {
        file_path_only(path, "--plot")?;
    }
    let (spec, chain) = read_chain_with_spec(&args.chain)?;
    let temperature = args
        .temperature
        .as_deref()
        .map(parse_temperature_range)
        .transpose()?;
    let freq = match &args.at {
        Some(text) => Freq::Hz(parse_frequency(text, "--at")?),
        None => Freq::Midband,
    };
    let dc_error = |source| Error::Dc {
        origin: name.clone(),
        source,
        hint: chain.milliohm_hint(),
    };
    let mut measure = Measure::new(&chain, freq, args.band).map_err(dc_error)?;
    if args.noise {
        measure.noise = Some(spread::measure::NoiseMeasure {
            band: ampchain::noise::DEFAULT_BAND,
            weighting: ampchain::noise::Weighting::None,
            planned_vrms: chain.source.level.map(|l| l.vrms),
        });
    }
    spread::require::measure_for(&args.requirements, &mut measure, chain.source.level);
    let model = model_for(&spec, &chain, &name, temperature, &measure)?;
    let layout = spread::Layout::new(&chain, &measure);
    let requirements = args
        .requirements
        .iter()
        .map(|r| Requirement::parse(r, &chain, &layout).map_err(Error::Usage))
        .collect::<Result<Vec<_>, _>>()?;
    // A corner requirement needs that corner in the nominal chain (else no build is
    // searched for it and every build would miss).
    if let Some(starts) = &measure.band {
        for r in &requirements {
            if let Some((k, edge)) = layout.corner_of(r.column) {
                let start = if edge == 0 {
                    starts[k].low
                } else {
                    starts[k].high
                };
                if start.is_none() {
                    return Err(Error::Usage(format!(
                        "--require \"{}\": found no {} −3 dB corner of load \"{}\" in the nominal chain between 1 mHz and 10 GHz; expected a corner the chain has (see `ampchain response`)",
                        r.text,
                        if edge == 0 { "low" } else { "high" },
                        chain.loads[k].id
                    )));
                }
            }
        }
    }
    something_spreads(&model, &name, SpreadCommand::Spread)?;
    check_runs(args.runs, &layout, "--runs")?;
    let max_failure = parse_share(&args.max_failure)?;

    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(args.threads.unwrap_or(0))
        .build()
        .map_err(|e| Error::Usage(format!("--threads: {e}")))?;
    let threads = pool.current_num_threads();
    let bar = builds_bar(args.runs);
    let progress = |n: u64| {
        if let Some(b) = &bar {
            b.inc(n);
        }
    };
    let run = pool
        .install(|| spread::run(&chain, model, measure, args.runs, args.seed, &progress))
        .map_err(dc_error)?;
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let seconds = run.monte_carlo_seconds;
    let report = pool.install(|| SpreadReport::new(&chain, &run, &requirements, max_failure));

    if let Some(path) = &args.plot {
        let title = format!(
            "{}: {} builds",
            chain.title.as_deref().unwrap_or("spread"),
            args.runs
        );
        let svg = run_histograms_svg(&chain, &run, &title)?;
        write_atomically(Path::new(path), svg.as_bytes(), &[&args.chain])?;
    }

    let exporter: &dyn Exporter<SpreadReport> = match args.format {
        SpreadFormat::Table => &TableExporter,
        SpreadFormat::Json => &JsonExporter,
        SpreadFormat::Csv => &CsvExporter,
    };
    let mut buf = Vec::new();
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    let speed = format!(
        "Monte Carlo: {} trials in {:.3} s, {:.0} trials/s on {threads} thread{}",
        args.runs,
        seconds,
        args.runs as f64 / seconds,
        if threads == 1 { "" } else { "s" },
    );
    if args.format == SpreadFormat::Table {
        buf.extend_from_slice(format!("{speed}.\n").as_bytes());
    } else {
        eprintln!("{speed}");
    }
    args.out.emit(&buf, &[&args.chain])?;
    Ok(if report.passed {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(EXIT_FINDING as u8)
    })
}
