//! `ampchain bias`: propose standard resistor values that put one stage's Q point
//! where its swing needs it, and optionally write them into a new chain file.

use super::{file_path_only, origin, RowFormat};
use ampchain::bias::design::{DEFAULT_COUNT, DEFAULT_STIFFNESS};
use ampchain::bias::report::{BiasReport, Limits};
use ampchain::bias::{design, Knob, Request, Target};
use ampchain::chain::name_list;
use ampchain::error::Error;
use ampchain::eseries::Series;
use ampchain::io::read_chain_with_text;
use ampchain::report::{CsvExporter, Exporter, JsonExporter, TableExporter};
use ampchain::text::quote_value;
use ampchain::text::{lookalike, quote};
use ampchain::units::{parse_value, Kind};
use ampchain::Chain;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct BiasArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Id of the stage to re-bias.
    #[arg(long, value_name = "ID")]
    stage: String,
    /// Where the Q point goes: centre (equal limits toward cutoff and saturation),
    /// ic=<current> (e.g. ic=1mA) or vce=<voltage> (e.g. vce=6V).
    #[arg(long, default_value = "centre", value_name = "TARGET")]
    target: String,
    /// IEC 60063 series for the proposed values (any case).
    #[arg(long, default_value = "E24", value_name = "SERIES", value_parser = super::SeriesNames)]
    series: String,
    /// Further resistors the design may move, by chain-file key: r_collector,
    /// r_emitter, r_emitter_bypassed of this stage, or <stage>.<key> of another
    /// (r_feedback there too) (comma-separated, at most two). The stage's own bias
    /// resistor (its divider, or r_feedback) always moves.
    #[arg(long, value_delimiter = ',', value_name = "KEY")]
    also: Vec<String>,
    /// Keep the stage's gain within this band of its present value, e.g. 1dB; with
    /// --target centre: the largest symmetrical swing the band allows.
    #[arg(long, allow_hyphen_values = true, value_name = "DB")]
    keep_gain: Option<String>,
    /// Smallest input resistance the stage may present, e.g. 10k.
    #[arg(long, value_name = "OHMS")]
    min_input: Option<String>,
    /// Smallest divider current as a multiple of the base current.
    #[arg(long, default_value_t = DEFAULT_STIFFNESS, value_name = "RATIO")]
    stiffness: f64,
    /// How many proposals to show.
    #[arg(long, default_value_t = DEFAULT_COUNT, value_name = "N")]
    show: usize,
    /// Output format.
    #[arg(long, value_enum, default_value_t = RowFormat::Table)]
    format: RowFormat,
    /// Write the best proposal as a new chain file (never over the input).
    #[arg(long, value_name = "FILE.json")]
    write: Option<String>,
    #[command(flatten)]
    out: super::ReportOutput,
}

fn usage(msg: String) -> Error {
    Error::Usage(msg)
}

/// "1dB", "1 dB" or "1": a band in dB, zero or more.
fn parse_db(text: &str) -> Result<f64, Error> {
    let t = text.trim();
    let number = t
        .strip_suffix("dB")
        .or_else(|| t.strip_suffix("db"))
        .unwrap_or(t)
        .trim();
    match number.parse::<f64>() {
        Ok(x) if x.is_finite() && x >= 0.0 => Ok(x),
        _ => Err(usage(format!(
            "--keep-gain: found {}, expected a band in dB of zero or more, such as 1dB",
            quote_value(text)
        ))),
    }
}

/// Build the request from the options; errors name the option.
fn request(chain: &Chain, args: &BiasArgs) -> Result<Request, Error> {
    let stage = chain.stage_index(&args.stage).ok_or_else(|| {
        usage(format!(
            "{}: --stage: found {}, expected one of {}{}",
            origin(&args.chain),
            quote(&args.stage),
            name_list(chain.stages.iter().map(|s| s.id.as_str())),
            lookalike(&args.stage, chain.stages.iter().map(|s| s.id.as_str()))
        ))
    })?;
    let target = Target::parse(&args.target).map_err(usage)?;
    let series: Series = args
        .series
        .parse()
        .map_err(|e| usage(format!("--series: {e}")))?;
    let also = Knob::parse_list(chain, stage, &args.also).map_err(|e| usage(e.to_string()))?;
    let min_input = args
        .min_input
        .as_deref()
        .map(|t| {
            parse_value(t, Kind::Resistance).map_err(|e| {
                usage(format!(
                    "--min-input: found {}, expected {}",
                    e.found, e.expected
                ))
            })
        })
        .transpose()?;
    let max = ampchain::limits::MAX_STIFFNESS;
    if !(args.stiffness.is_finite() && args.stiffness > 0.0 && args.stiffness <= max) {
        return Err(usage(format!(
            "--stiffness: found {}, expected a ratio above zero and at most {max} (10 is common practice; at {max} the divider draws about as much as the collector of a β = 100 stage)",
            args.stiffness
        )));
    }
    if args.show == 0 {
        return Err(usage(
            "--show: found 0, expected at least one proposal".into(),
        ));
    }
    let mut req = Request::new(stage, target, series);
    req.also = also;
    req.keep_gain_db = args.keep_gain.as_deref().map(parse_db).transpose()?;
    req.min_input = min_input;
    req.stiffness = args.stiffness;
    req.count = args.show;
    Ok(req)
}

pub fn run(args: &BiasArgs) -> Result<ExitCode, Error> {
    if let Some(path) = &args.write {
        file_path_only(path, "--write")?;
    }
    let (chain, text) = read_chain_with_text(&args.chain)?;
    let req = request(&chain, args)?;
    let outcome =
        design(&chain, &req).map_err(|e| usage(format!("{}: {e}", origin(&args.chain))))?;
    let limits = Limits {
        keep_gain_db: req.keep_gain_db,
        min_input: req.min_input,
        stiffness: req.stiffness,
    };
    let mut report = BiasReport::new(&chain, &outcome, limits);

    if let Some(path) = &args.write {
        let best = outcome.proposals.first().ok_or_else(|| {
            usage(format!(
                "{}: nothing to write: {}",
                origin(&args.chain),
                report.summary
            ))
        })?;
        super::write_edited(&args.chain, &text, &best.edits(), path, "proposal 1")?;
        report.written = Some(path.clone());
    }

    let mut out = Vec::new();
    match args.format {
        RowFormat::Table => TableExporter.export(&report, &mut out),
        RowFormat::Json => JsonExporter.export(&report, &mut out),
        RowFormat::Csv => CsvExporter.export(&report, &mut out),
    }
    .map_err(Error::Write)?;
    args.out.emit(&out, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
