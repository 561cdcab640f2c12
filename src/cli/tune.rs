//! `ampchain tune`: propose the whole chain's standard values for one goal under
//! constraints, and optionally write the best proposal into a new chain file.

use super::{file_path_only, origin, write_edited};
use ampchain::error::Error;
use ampchain::eseries::Series;
use ampchain::io::read_chain_with_text;
use ampchain::report::{Exporter, JsonExporter, TableExporter};
use ampchain::spread::{Layout, Measure, Requirement};
use ampchain::tune::report::Inputs;
use ampchain::tune::{self, Goal, Objective, SeriesChoice, Settings, TuneReport};
use ampchain::Freq;
use clap::ValueEnum;
use std::io::IsTerminal;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// Most series steps on each side of the continuous optimum.
const MAX_WIDTH: usize = 10;
/// Most partial builds the beam keeps.
const MAX_BEAM: usize = 1 << 16;
/// Most random restarts.
const MAX_KICKS: usize = 10_000;
/// Most proposals shown.
const MAX_SHOW: usize = 20;
/// A search running longer than this shows a progress bar on a terminal.
const PROGRESS_AFTER: Duration = Duration::from_secs(1);

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum GoalArg {
    /// The chain's clip level (the lowest stage's), as high as it goes.
    Headroom,
    /// Every stage's swing centred (the worst stage's limits as equal as they go).
    Swing,
    /// The lowest equivalent input noise at the first load (20 Hz … 20 kHz).
    Noise,
    /// Every --keep as far inside its bounds as it goes (the smallest margin).
    Margin,
    /// The largest share of spread builds meeting every --keep (the best builds of a
    /// margin search, each spread by the file's tolerances).
    Yield,
}

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TuneFormat {
    Table,
    Json,
}

#[derive(clap::Args)]
pub struct TuneArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// The parts that may move: all (every resistor), STAGE.* (a stage's resistors),
    /// STAGE.PART, or STAGE.PART=LOW..HIGH (comma-separated).
    #[arg(long, value_delimiter = ',', required = true, value_name = "PARTS")]
    vary: Vec<String>,
    /// IEC 60063 series for resistors (any case).
    #[arg(long, default_value = "E24", value_name = "SERIES", value_parser = super::SeriesNames)]
    series: String,
    /// IEC 60063 series for capacitors (any case).
    #[arg(long, default_value = "E12", value_name = "SERIES", value_parser = super::SeriesNames)]
    cap_series: String,
    /// What to maximise.
    #[arg(long, value_enum, default_value_t = GoalArg::Headroom)]
    goal: GoalArg,
    /// A constraint every proposal meets, in the `spread --require` syntax, e.g.
    /// "gain 38dB..42dB", "i_c@input ..2mA", "low_corner ..20Hz" (repeatable).
    #[arg(long = "keep", allow_hyphen_values = true, value_name = "CONSTRAINT")]
    keep: Vec<String>,
    /// Write the best proposal as a new chain file (never over the input).
    #[arg(long, value_name = "FILE.json")]
    write: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = TuneFormat::Table)]
    format: TuneFormat,
    /// Seed of the random restarts: the same seed gives the same proposals.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// How many proposals to show.
    #[arg(long, default_value_t = 3, value_name = "N")]
    show: usize,
    /// Series values each side of the continuous optimum the discrete search tries.
    #[arg(long, default_value_t = 2, value_name = "STEPS")]
    width: usize,
    /// Partial builds the beam search keeps (when the neighbourhood is too large to
    /// evaluate whole).
    #[arg(long, default_value_t = 256, value_name = "N")]
    beam: usize,
    /// Random restarts of the final polish.
    #[arg(long, default_value_t = 16, value_name = "N")]
    kicks: usize,
    /// Planned input level the headroom is counted from (default: the file's
    /// source.level).
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    input: Option<String>,
    #[command(flatten)]
    out: super::ReportOutput,
}

fn bounded(option: &str, x: usize, min: usize, max: usize) -> Result<(), Error> {
    if x < min || x > max {
        return Err(Error::Usage(format!(
            "{option}: found {x}, expected {min} to {max}"
        )));
    }
    Ok(())
}

fn series(text: &str, option: &str) -> Result<Series, Error> {
    text.parse()
        .map_err(|e| Error::Usage(format!("{option}: {e}")))
}

/// The objective with its constraints; a corner constraint makes every candidate's
/// corners measured, a dissipation or warning constraint those (warnings at `level`).
fn objective(
    chain: &ampchain::Chain,
    goal: Goal,
    keep: &[String],
    level: Option<ampchain::units::Level>,
) -> Result<Objective, Error> {
    let parse = |layout: &Layout| {
        keep.iter()
            .map(|k| Requirement::parse_as("--keep", k, chain, layout).map_err(Error::Usage))
            .collect::<Result<Vec<_>, _>>()
    };
    let mut measure = Measure::MIDBAND;
    measure.noise = Objective::noise_measure(goal);
    ampchain::spread::require::measure_for(keep, &mut measure, level);
    let mut with_band = Layout::new(chain, &measure);
    with_band.band = true;
    let band = parse(&with_band)?
        .iter()
        .any(|r| with_band.corner_of(r.column).is_some());
    if band {
        let corners =
            Measure::new(chain, Freq::Midband, true).map_err(|e| Error::Usage(e.to_string()))?;
        measure.band = corners.band;
    }
    // Columns as the measured records hold them.
    let layout = Layout::new(chain, &measure);
    Ok(Objective {
        goal,
        keep: parse(&layout)?,
        layout,
        measure,
    })
}

pub fn run(args: &TuneArgs) -> Result<ExitCode, Error> {
    if let Some(path) = &args.write {
        file_path_only(path, "--write")?;
    }
    bounded("--show", args.show, 1, MAX_SHOW)?;
    bounded("--width", args.width, 1, MAX_WIDTH)?;
    bounded("--beam", args.beam, 1, MAX_BEAM)?;
    bounded("--kicks", args.kicks, 0, MAX_KICKS)?;
    let choice = SeriesChoice {
        resistors: series(&args.series, "--series")?,
        capacitors: series(&args.cap_series, "--cap-series")?,
    };
    let (chain, text) = read_chain_with_text(&args.chain)?;
    let name = origin(&args.chain);
    let selection = tune::vary::parse(&chain, &args.vary, choice)
        .map_err(|e| Error::Usage(format!("{name}: {e}")))?;
    tune::check_as_written(&chain).map_err(|e| Error::Usage(format!("{name}: {e}")))?;
    let level = match &args.input {
        Some(_) => Some(super::planned_level(
            &chain,
            &args.chain,
            args.input.as_deref(),
        )?),
        None => chain.source.level,
    };
    let goal = match args.goal {
        GoalArg::Headroom => Goal::Headroom,
        GoalArg::Swing => Goal::Swing,
        GoalArg::Noise => Goal::Noise,
        GoalArg::Margin => Goal::Margin,
        // The candidates come from a margin search; their yields rank them.
        GoalArg::Yield => Goal::Margin,
    };
    let yield_goal = args.goal == GoalArg::Yield;
    if goal == Goal::Margin && args.keep.is_empty() {
        return Err(Error::Usage(format!(
            "--goal {}: found no --keep, expected at least one constraint to keep inside",
            if yield_goal { "yield" } else { "margin" }
        )));
    }
    let objective = objective(&chain, goal, &args.keep, level)?;
    if yield_goal {
        tune::spread_yield::model_of(&text, &objective)
            .map_err(|e| Error::Usage(format!("{name}: --goal yield: {e}")))?;
    }
    let settings = Settings {
        width: args.width,
        beam: args.beam,
        kicks: args.kicks,
        seed: args.seed,
        show: if yield_goal {
            args.show.max(tune::spread_yield::CANDIDATES)
        } else {
            args.show
        },
        ..Settings::default()
    };

    // A bar on a terminal once the search has run for a second.
    let started = Instant::now();
    let bar = indicatif::ProgressBar::hidden();
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{spinner} {human_pos} candidate builds, {elapsed}")
    {
        bar.set_style(style);
    }
    let shown = AtomicBool::new(false);
    let terminal = std::io::stderr().is_terminal();
    let progress = |n: u64| {
        bar.inc(n);
        if terminal && started.elapsed() > PROGRESS_AFTER && !shown.swap(true, Ordering::Relaxed) {
            bar.set_draw_target(indicatif::ProgressDrawTarget::stderr());
        }
    };
    let mut outcome = tune::search(
        &chain,
        &objective,
        &selection.variables,
        settings,
        &progress,
    );
    let yields = if yield_goal {
        let runs = tune::spread_yield::DEFAULT_RUNS;
        let shares = tune::spread_yield::rank_by_yield(
            &text,
            &selection.variables,
            &objective,
            &mut outcome,
            args.show,
            runs,
            args.seed,
        )
        .map_err(|e| Error::Usage(format!("{name}: --goal yield: {e}")))?;
        Some((runs, shares))
    } else {
        None
    };
    bar.finish_and_clear();

    let mut report = TuneReport::new(&Inputs {
        chain: &chain,
        selection: &selection,
        objective: &objective,
        series: choice,
        level,
        outcome: &outcome,
        settings,
        yields,
    });
    let unmet = report.unmet();
    if let (Some(path), None) = (&args.write, &unmet) {
        if let Some(best) = outcome.best.first() {
            let edits = tune::edits(&selection.variables, &best.values);
            write_edited(&args.chain, &text, &edits, path, "proposal 1")?;
            report.written = Some(path.clone());
        }
    }
    let mut out = Vec::new();
    match args.format {
        TuneFormat::Table => TableExporter.export(&report, &mut out),
        TuneFormat::Json => JsonExporter.export(&report, &mut out),
    }
    .map_err(Error::Write)?;
    args.out.emit(&out, &[&args.chain])?;
    if let Some(why) = unmet {
        eprintln!("ampchain: {name}: {why}");
        return Ok(ExitCode::from(1));
    }
    Ok(ExitCode::SUCCESS)
}
