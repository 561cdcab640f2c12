//! `ampchain sweep`: the chain's large-signal behaviour over a range of input levels,
//! then the onset table (where each stage distorts, compresses and clips).

use super::origin;
use ampchain::chain::{level_from_spec, Fields};
use ampchain::error::Error;
use ampchain::io::read_chain;
use ampchain::large_signal::onset::SearchOptions;
use ampchain::large_signal::report::{SweepReport, MODEL};
use ampchain::large_signal::{level_steps, LargeSignal, DEFAULT_SAMPLES};
use ampchain::report::{Exporter, JsonExporter, TableExporter};
use ampchain::spec::ValueSpec;
use ampchain::units::{format_si, Level};
use clap::ValueEnum;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressFinish, ProgressStyle};
use std::io::IsTerminal;
use std::process::ExitCode;
use std::time::{Duration, Instant};

/// A sweep still running after this long shows its progress (on a terminal).
const PROGRESS_AFTER: Duration = Duration::from_secs(1);

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SweepFormat {
    Table,
    Json,
    /// One row per level and node; no onset table.
    Csv,
}

#[derive(clap::Args)]
pub struct SweepArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Lowest source level (EMF): "1 mV rms", "-60 dBu", … Default: 40 dB below the first load-line clip.
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    from: Option<String>,
    /// Highest source level. Default: 10 dB above the first load-line clip.
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    to: Option<String>,
    /// Number of levels, evenly spaced in dB.
    #[arg(long, default_value_t = 11, value_name = "N")]
    steps: usize,
    /// Samples per period (a power of two from 32 to 65536).
    #[arg(long, default_value_t = DEFAULT_SAMPLES, value_name = "N")]
    samples: usize,
    /// Output format.
    #[arg(long, value_enum, default_value_t = SweepFormat::Table)]
    format: SweepFormat,
    #[command(flatten)]
    out: super::ReportOutput,
}

/// A level given on the command line, naming the option in errors.
fn cli_level(text: &str, option: &str) -> Result<Level, Error> {
    level_from_spec(&ValueSpec::Text(text.into()), &Fields::new(""), option)
        .map_err(|e| Error::Usage(e.to_string()))
}

/// The swept range (peak EMF): `--from` and `--to`, by default from 40 dB below to
/// 10 dB above the first load-line clip level.
pub fn level_range(
    ls: &LargeSignal,
    from: Option<&str>,
    to: Option<&str>,
) -> Result<(f64, f64), Error> {
    let (low, high) = ls.default_range();
    let from = match from {
        Some(t) => cli_level(t, "--from")?.vpeak(),
        None => low,
    };
    let to = match to {
        Some(t) => cli_level(t, "--to")?.vpeak(),
        None => high,
    };
    if from > to {
        return Err(reversed_range(from, to, "above", "at or below"));
    }
    Ok((from, to))
}

/// `--from` (peak EMF) `found` against `--to`, both named with their levels.
pub fn reversed_range(from: f64, to: f64, found: &str, expected: &str) -> Error {
    let dbu = |v: f64| format!("{:.1} dBu", Level::from_vpeak(v).dbu()).replace('-', "−");
    Error::Usage(format!(
        "--from: found {} ({}), {found} --to {} ({}); expected --from {expected} --to",
        format_si(from, "V peak"),
        dbu(from),
        format_si(to, "V peak"),
        dbu(to)
    ))
}

/// Read, plan and build the large-signal evaluator of a chain file.
pub fn prepare(path: &str, samples: usize) -> Result<(ampchain::Chain, LargeSignal), Error> {
    let chain = read_chain(path)?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(path),
        source,
        hint: chain.milliohm_hint(),
    })?;
    let ls = LargeSignal::new(&chain, &ev, samples).map_err(|source| Error::LargeSignal {
        origin: origin(path),
        source,
    })?;
    Ok((chain, ls))
}

/// Progress of `ls`'s periods on standard error, drawn once the run has lasted
/// `PROGRESS_AFTER` and only when standard error is a terminal; cleared when dropped.
/// The onset search's periods are not known in advance, so it counts them.
pub fn progress(ls: &mut LargeSignal) -> ProgressBar {
    let bar = ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden())
        .with_finish(ProgressFinish::AndClear);
    if let Ok(style) =
        ProgressStyle::with_template("{spinner} {pos} periods solved: {msg} ({elapsed})")
    {
        bar.set_style(style);
    }
    if std::io::stderr().is_terminal() {
        let (shown, start, mut visible) = (bar.clone(), Instant::now(), false);
        ls.on_period(move || {
            shown.inc(1);
            if !visible && start.elapsed() >= PROGRESS_AFTER {
                shown.set_draw_target(ProgressDrawTarget::stderr());
                shown.enable_steady_tick(Duration::from_millis(100));
                visible = true;
            }
        });
    }
    bar
}

pub fn run(args: &SweepArgs) -> Result<ExitCode, Error> {
    if args.steps == 0 || args.steps > 1000 {
        return Err(Error::Usage(format!(
            "--steps: found {}, expected 1 to 1000 levels",
            args.steps
        )));
    }
    let (chain, mut ls) = prepare(&args.chain, args.samples)?;
    let (from, to) = level_range(&ls, args.from.as_deref(), args.to.as_deref())?;
    let wrap = |source| Error::LargeSignal {
        origin: origin(&args.chain),
        source,
    };
    let bar = progress(&mut ls);
    bar.set_message(format!("{} levels", args.steps));
    let levels = ls.sweep(&level_steps(from, to, args.steps)).map_err(wrap)?;
    let onsets = if args.format == SweepFormat::Csv {
        None
    } else {
        bar.set_message("onset search");
        Some(ls.onsets(&SearchOptions::default()).map_err(wrap)?)
    };
    bar.finish_and_clear();
    let mut buf = Vec::new();
    let report = |onsets| SweepReport {
        title: chain.title.clone(),
        model: MODEL,
        samples_per_period: args.samples,
        levels: levels.clone(),
        onsets,
    };
    let written = match (args.format, onsets) {
        (SweepFormat::Table, Some(o)) => TableExporter.export(&report(o), &mut buf),
        (SweepFormat::Json, Some(o)) => JsonExporter.export(&report(o), &mut buf),
        _ => SweepReport::write_levels_csv(&levels, &mut buf),
    };
    written.map_err(Error::Write)?;
    args.out.emit(&buf, &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
