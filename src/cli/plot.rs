//! `ampchain plot`: pictures as SVG, one subcommand per chart. Each reads the chain,
//! evaluates it as `plan` does, and draws from the same report.

use super::{origin, planned_level, plot_signal, print};
use ampchain::chain::name_list;
use ampchain::error::Error;
use ampchain::io::{read_chain, Outputs};
use ampchain::plot::{levels, loadlines};
use ampchain::report::PlanReport;
use ampchain::text::{lookalike, quote};
use ampchain::{Chain, Evaluation};
use clap::Subcommand;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

#[derive(Subcommand)]
pub enum PlotCommand {
    /// Load-line chart of each stage: output curves, DC and AC load lines, Q point, planned swing.
    Loadlines(LoadlinesArgs),
    /// Level diagram of the chain: level at every node, clip ceilings, headroom, gains.
    Levels(LevelsArgs),
    /// The waveform at every node over one period, at one input level.
    Waveform(plot_signal::WaveformArgs),
    /// THD against input level for every stage's output.
    Distortion(plot_signal::DistortionArgs),
}

pub fn run(command: &PlotCommand) -> Result<ExitCode, Error> {
    match command {
        PlotCommand::Loadlines(a) => run_loadlines(a),
        PlotCommand::Levels(a) => run_levels(a),
        PlotCommand::Waveform(a) => plot_signal::run_waveform(a),
        PlotCommand::Distortion(a) => plot_signal::run_distortion(a),
    }
}

/// What every chart reads: the chain and the planned input level.
#[derive(clap::Args)]
pub struct ChartInput {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "0.2 Vpk", "1 Vpp", "-20 dBu", "-10 dBV".
    #[arg(long, allow_hyphen_values = true, value_name = "LEVEL")]
    input: Option<String>,
}

impl ChartInput {
    /// Read the chain, evaluate it at midband and gather what `plan` reports.
    fn plan(&self) -> Result<(Chain, Evaluation, PlanReport), Error> {
        let chain = read_chain(&self.chain)?;
        let level = planned_level(&chain, &self.chain, self.input.as_deref())?;
        let ev = chain.evaluate().map_err(|source| Error::Dc {
            origin: origin(&self.chain),
            source,
            hint: chain.milliohm_hint(),
        })?;
        let report = PlanReport::new(&chain, &ev, level);
        Ok((chain, ev, report))
    }

    /// Write one output file, never over the chain file, and name it on standard
    /// output; `-` writes the chart itself to standard output.
    fn write(&self, path: &Path, svg: &str) -> Result<(), Error> {
        self.write_all(&[(path.to_path_buf(), svg.to_string())])
    }

    /// Write several charts: every path is checked and every chart prepared before
    /// any is written (`io::Outputs`), so a failure leaves none of them behind.
    fn write_all(&self, charts: &[(PathBuf, String)]) -> Result<(), Error> {
        let inputs = [self.chain.as_str()];
        let mut outputs = Outputs::new(&inputs);
        for (path, svg) in charts {
            outputs.add(path, svg.as_bytes())?;
        }
        outputs.commit()?;
        let names: String = charts
            .iter()
            .filter(|(p, _)| p.as_os_str() != "-")
            .map(|(p, _)| format!("{}\n", p.display()))
            .collect();
        print(names.as_bytes())
    }
}

#[derive(clap::Args)]
pub struct LoadlinesArgs {
    #[command(flatten)]
    input: ChartInput,
    /// Draw only this stage (by id); -o then names the file.
    #[arg(long, value_name = "ID")]
    stage: Option<String>,
    /// Output: a folder (created if missing) that gets one SVG per stage named after its
    /// id, or with --stage the SVG file (- for standard output).
    #[arg(short, long, value_name = "DIR|FILE.svg")]
    output: PathBuf,
}

#[derive(clap::Args)]
pub struct LevelsArgs {
    #[command(flatten)]
    input: ChartInput,
    /// Output SVG file, or - for standard output.
    #[arg(short, long, value_name = "FILE.svg")]
    output: PathBuf,
    /// Leave out the noise floor (drawn by default: each node's output noise over
    /// 20 Hz to 20 kHz, unweighted, under its level and ceiling).
    #[arg(long)]
    no_noise: bool,
    /// Require the noise floor: fail when it cannot be computed (by default a chain
    /// whose noise cannot be computed is drawn without it).
    #[arg(long, conflicts_with = "no_noise")]
    noise: bool,
}

fn run_loadlines(args: &LoadlinesArgs) -> Result<ExitCode, Error> {
    let (chain, ev, report) = args.input.plan()?;
    match &args.stage {
        Some(id) => {
            let i = chain.stage_index(id).ok_or_else(|| {
                Error::Usage(format!(
                    "--stage: found {}, which is no stage of {}; expected one of {}{}",
                    quote(id),
                    origin(&args.input.chain),
                    name_list(chain.stages.iter().map(|s| s.id.as_str())),
                    lookalike(id, chain.stages.iter().map(|s| s.id.as_str()))
                ))
            })?;
            if chain.stages[i].device.is_none() {
                return Err(Error::Usage(format!(
                    "--stage: found {}, a stage of type \"{}\", which has no transistor and so no load lines; expected a stage with a transistor",
                    quote(id),
                    chain.stages[i].kind.model().type_name()
                )));
            }
            if chain.device_of(i).opamp.is_some() {
                let svg = ampchain::plot::transfer::render(&chain, &report, i)?;
                args.input.write(&args.output, &svg)?;
                return Ok(ExitCode::SUCCESS);
            }
            let svg = loadlines::render(&chain, &ev, &report, i)?;
            args.input.write(&args.output, &svg)?;
        }
        None => {
            if args.output.as_os_str() == "-" {
                return Err(Error::Usage(
                    "-o -: standard output takes one chart; expected a folder for one chart per stage, or --stage ID".into(),
                ));
            }
            if args.output.is_file() {
                return Err(Error::Usage(format!(
                    "-o {}: found a file; expected a folder for one chart per stage (or --stage ID for one file)",
                    args.output.display()
                )));
            }
            // A chain of passive stages has no chart to draw: say so rather than
            // succeed with an empty (or no) folder.
            if chain.stages.iter().all(|s| s.device.is_none()) {
                return Err(Error::Usage(format!(
                    "{}: found only passive stages ({}), which have no transistor and so no load lines; expected at least one stage with a transistor or an op-amp (nothing written)",
                    origin(&args.input.chain),
                    name_list(chain.stages.iter().map(|s| s.id.as_str()))
                )));
            }
            let names = file_names(chain.stages.iter().map(|s| s.id.as_str()));
            let mut charts = Vec::with_capacity(names.len());
            // One chart per stage with a transistor (a passive stage has no load lines),
            // an op-amp stage's transfer chart.
            for (i, name) in names.iter().enumerate() {
                if chain.stages[i].device.is_none() {
                    continue;
                }
                if chain.device_of(i).opamp.is_some() {
                    let svg = ampchain::plot::transfer::render(&chain, &report, i)?;
                    charts.push((args.output.join(name), svg));
                    continue;
                }
                let svg = loadlines::render(&chain, &ev, &report, i)?;
                charts.push((args.output.join(name), svg));
            }
            args.input.write_all(&charts)?;
        }
    }
    Ok(ExitCode::SUCCESS)
}

fn run_levels(args: &LevelsArgs) -> Result<ExitCode, Error> {
    let (chain, _, mut report) = args.input.plan()?;
    if !args.no_noise {
        let planned = ampchain::units::Level::from_vrms(report.input.vrms);
        match super::noise::audio_band_report(&chain, &args.input.chain, planned) {
            Ok((noise, _, _)) => report.noise = Some(noise),
            Err(e) if args.noise => return Err(e),
            // The floor is an addition: without it the diagram is still whole.
            Err(_) => {}
        }
    }
    let svg = levels::render(&chain, &report)?;
    args.input.write(&args.output, &svg)?;
    Ok(ExitCode::SUCCESS)
}

/// Longest stem of a chart's file name in bytes: 255 (the usual file-name limit,
/// NAME_MAX on Linux file systems) less ".svg" and room for a "-1000" suffix.
const MAX_STEM_BYTES: usize = 255 - 4 - 5;

/// One file name per stage id: `<id>.svg`, characters that do not belong in a file name
/// replaced by `_`, no leading dot, shortened to fit a file name, and `-2`, `-3`… when
/// two ids come out the same.
fn file_names<'a>(ids: impl Iterator<Item = &'a str>) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for id in ids {
        let safe: String = id
            .chars()
            .map(|c| {
                if c.is_alphanumeric() || c == '-' || c == '_' || c == '.' {
                    c
                } else {
                    '_'
                }
            })
            .collect();
        let mut stem = match safe.trim_start_matches('.') {
            "" => "stage".to_string(),
            s => s.to_string(),
        };
        if stem.len() > MAX_STEM_BYTES {
            let mut end = MAX_STEM_BYTES;
            while !stem.is_char_boundary(end) {
                end -= 1;
            }
            stem.truncate(end);
        }
        let mut name = format!("{stem}.svg");
        let mut k = 2;
        while names.contains(&name) {
            name = format!("{stem}-{k}.svg");
            k += 1;
        }
        names.push(name);
    }
    names
}

#[cfg(test)]
mod tests {
    use super::file_names;

    #[test]
    fn stage_ids_become_safe_distinct_file_names() {
        let ids = ["input", "a/b", "a_b", "..", "gain stage", "µ-amp"];
        assert_eq!(
            file_names(ids.into_iter()),
            [
                "input.svg",
                "a_b.svg",
                "a_b-2.svg",
                "stage.svg",
                "gain_stage.svg",
                "µ-amp.svg"
            ]
        );
    }

    #[test]
    fn long_ids_fit_a_file_name() {
        // 255 bytes is the file-name limit of Linux file systems (NAME_MAX).
        let long = "é".repeat(300);
        let names = file_names([long.as_str(), long.as_str()].into_iter());
        assert!(names.iter().all(|n| n.len() <= 255), "{names:?}");
        assert_ne!(names[0], names[1]);
        assert!(names[1].ends_with("-2.svg"));
    }
}
