//! `ampchain plot waveform` and `ampchain plot distortion`: the large-signal pictures.

use super::sweep::{level_range, prepare, reversed_range};
use super::{origin, planned_level};
use ampchain::error::Error;
use ampchain::io::write_atomically;
use ampchain::large_signal::{level_steps, DEFAULT_SAMPLES};
use ampchain::plot::{distortion::distortion_svg, waveform::waveform_svg};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct WaveformArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Source level (EMF), overriding the file's planned level: "50 mV rms", "0.2 Vpk", "-20 dBu", …
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    input: Option<String>,
    /// Output SVG file, or - for standard output.
    #[arg(short = 'o', long = "output", value_name = "FILE.svg")]
    output: PathBuf,
    /// Samples per period (a power of two from 32 to 65536).
    #[arg(long, default_value_t = DEFAULT_SAMPLES, value_name = "N")]
    samples: usize,
}

#[derive(clap::Args)]
pub struct DistortionArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Output SVG file, or - for standard output.
    #[arg(short = 'o', long = "output", value_name = "FILE.svg")]
    output: PathBuf,
    /// Lowest source level. Default: 40 dB below the first load-line clip.
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    from: Option<String>,
    /// Highest source level. Default: 10 dB above the first load-line clip.
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    to: Option<String>,
    /// Number of levels, evenly spaced in dB.
    #[arg(long, default_value_t = 51, value_name = "N")]
    steps: usize,
    /// Samples per period (a power of two from 32 to 65536).
    #[arg(long, default_value_t = DEFAULT_SAMPLES, value_name = "N")]
    samples: usize,
}

fn title(chain: &ampchain::Chain, what: &str) -> String {
    match &chain.title {
        Some(t) => format!("{t}: {what}"),
        None => what.to_string(),
    }
}

pub fn run_waveform(args: &WaveformArgs) -> Result<ExitCode, Error> {
    let (chain, mut ls) = prepare(&args.chain, args.samples)?;
    let level = planned_level(&chain, &args.chain, args.input.as_deref())?;
    let wrap = |source| Error::LargeSignal {
        origin: origin(&args.chain),
        source,
    };
    let r = ls.level(level.vpeak()).map_err(wrap)?;
    let svg = waveform_svg(&ls, &r, &title(&chain, "waveforms over one period"))?;
    write_atomically(&args.output, svg.as_bytes(), &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}

pub fn run_distortion(args: &DistortionArgs) -> Result<ExitCode, Error> {
    if args.steps < 2 || args.steps > 1000 {
        return Err(Error::Usage(format!(
            "--steps: found {}, expected 2 to 1000 levels",
            args.steps
        )));
    }
    let (chain, mut ls) = prepare(&args.chain, args.samples)?;
    let (from, to) = level_range(&ls, args.from.as_deref(), args.to.as_deref())?;
    if to <= from {
        return Err(reversed_range(from, to, "at or above", "below"));
    }
    let levels = ls
        .sweep(&level_steps(from, to, args.steps))
        .map_err(|source| Error::LargeSignal {
            origin: origin(&args.chain),
            source,
        })?;
    let svg = distortion_svg(&ls, &levels, &title(&chain, "THD against input level"))?;
    write_atomically(&args.output, svg.as_bytes(), &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
