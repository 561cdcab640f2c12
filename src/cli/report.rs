//! `ampchain report`: the design report, one self-contained HTML file
//! (`ampchain::document`).

use super::{origin, planned_level, print};
use ampchain::document::{self, Context};
use ampchain::error::Error;
use ampchain::io::{read_chain_with_text, write_atomically};
use ampchain::report::{PlanReport, ResponseReport};
use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct ReportArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "-20 dBu".
    #[arg(long, allow_hyphen_values = true)]
    input: Option<String>,
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
    let cx = Context {
        chain: &chain,
        text: &text,
        origin: &name,
        ev: &ev,
        plan: &plan,
        response: &response,
        noise: &noise,
        noise_curves: &noise_curves,
    };
    // The whole page is made before anything is written.
    let page = document::render(&cx)?;
    write_atomically(&args.output, page.as_bytes(), &[&args.chain])?;
    print(format!("{}\n", args.output.display()).as_bytes())?;
    Ok(ExitCode::SUCCESS)
}
