//! `ampchain report`: the design report, one self-contained HTML file
//! (`ampchain::document`).

use super::spread::{builds_bar, check_runs, model_for, something_spreads, SpreadCommand};
use super::sweep::progress;
use super::{origin, planned_level, print};
use ampchain::document::{self, Context, LargeSignalPart, SpreadPart};
use ampchain::error::Error;
use ampchain::io::{read_chain_with_text, write_atomically};
use ampchain::network::Freq;
use ampchain::plot::spread::run_histograms_svg;
use ampchain::report::spread::SpreadReport;
use ampchain::report::{PlanReport, ResponseReport};
use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
use ampchain::spec::parse_chain_text;
use ampchain::spread::{self, Measure};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct ReportArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "-20 dBu".
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    input: Option<String>,
    /// Add a spread section: this many Monte Carlo builds at midband, as `ampchain spread --runs N` (the file must say what spreads).
    #[arg(long, value_name = "RUNS")]
    spread: Option<usize>,
    /// Seed of the spread's random draws; the same seed gives the same report.
    #[arg(long, default_value_t = 1, requires = "spread")]
    seed: u64,
    /// Output HTML file (never the chain file itself).
    #[arg(short, long, value_name = "FILE.html")]
    output: PathBuf,
}

pub fn run(args: &ReportArgs) -> Result<ExitCode, Error> {
    let (chain, text) = read_chain_with_text(&args.chain)?;
    let level = planned_level(&chain, &args.chain, args.input.as_deref())?;
    let dc = |source| Error::Dc {
        origin: origin(&args.chain),
        source,
        hint: chain.milliohm_hint(),
    };
    let ev = chain.evaluate().map_err(dc)?;
    let plan = PlanReport::new(&chain, &ev, level);
    let sweep = Sweep::new(
        response::DEFAULT_FROM,
        response::DEFAULT_TO,
        DEFAULT_PER_DECADE,
    )
    .map_err(|e| Error::Usage(e.to_string()))?;
    let response = ResponseReport::new(&chain, &response::analyse(&chain, &sweep).map_err(dc)?);
    let (noise, mut model, band_noise) =
        super::noise::audio_band_report(&chain, &args.chain, level)?;
    let noise_curves = ampchain::report::noise::DensityCurves::new(
        &chain,
        &mut model,
        &band_noise,
        super::noise::CHART_CONTRIBUTORS,
    )
    .map_err(|e| super::noise::noise_error(&chain, &args.chain, e.into()))?;
    let name = origin(&args.chain);
    // The spread first: its options are checked before the long large-signal search.
    let spread = match args.spread {
        Some(runs) => Some(spread_part(&chain, &text, &name, runs, args.seed)?),
        None => None,
    };
    let mut bar = None;
    let large_signal = LargeSignalPart::compute(&chain, &ev, |ls| {
        let b = progress(ls);
        b.set_message("large signal for the report");
        bar = Some(b);
    });
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    let cx = Context {
        chain: &chain,
        text: &text,
        origin: &name,
        ev: &ev,
        plan: &plan,
        response: &response,
        noise: &noise,
        noise_curves: &noise_curves,
        large_signal: large_signal.as_ref().map_err(Clone::clone),
        spread: spread.as_ref(),
    };
    // The whole page is made before anything is written.
    let page = document::render(&cx)?;
    write_atomically(&args.output, page.as_bytes(), &[&args.chain])?;
    print(format!("{}\n", args.output.display()).as_bytes())?;
    Ok(ExitCode::SUCCESS)
}

/// The spread section's run: `runs` builds at midband with the file's spreads, as
/// `ampchain spread` checks and runs them.
fn spread_part(
    chain: &ampchain::Chain,
    text: &str,
    name: &str,
    runs: usize,
    seed: u64,
) -> Result<SpreadPart, Error> {
    let invalid = |source| Error::Chain {
        origin: name.to_string(),
        source,
    };
    let spec =
        parse_chain_text(text).map_err(|e| invalid(ampchain::chain::ChainError::Syntax(e)))?;
    let dc = |source| Error::Dc {
        origin: name.to_string(),
        source,
        hint: chain.milliohm_hint(),
    };
    let measure = Measure::new(chain, Freq::Midband, false).map_err(dc)?;
    let model = model_for(&spec, chain, name, None, &measure)?;
    something_spreads(&model, name, SpreadCommand::Report)?;
    check_runs(runs, &spread::Layout::new(chain, &measure), "--spread")?;
    let bar = builds_bar(runs);
    let progress = |n: u64| {
        if let Some(b) = &bar {
            b.inc(n);
        }
    };
    let run = spread::run(chain, model, measure, runs, seed, &progress).map_err(dc)?;
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let report = SpreadReport::new(chain, &run, &[], 0.0);
    let title = format!("{runs} builds");
    let histograms = run_histograms_svg(chain, &run, &title)?;
    Ok(SpreadPart { report, histograms })
}
