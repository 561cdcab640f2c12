//! Command-line options, one file per command. Each command reads its inputs, calls
//! the library and renders; no computation lives here.

mod bias;
mod check;
mod completions;
mod new;
mod noise;
mod plan;
mod plot;
mod plot_signal;
mod report;
mod response;
mod schema;
mod spread;
mod sweep;
mod tune;

use ampchain::chain::{level_from_spec, Fields};
use ampchain::error::Error;
use ampchain::spec::ValueSpec;
use ampchain::text::quote_value;
use ampchain::units::Level;
use ampchain::Chain;
use clap::{Parser, Subcommand, ValueEnum};
use std::process::ExitCode;

const SAFETY: &str = "Caution: chains run from supplies above 60 V DC, and parts near their \
dissipation ratings, can hurt people and start fires. ampchain plans small-signal circuits; \
it is no safety assessment. Follow the electrical codes in force where you work and licensed practice.";

#[derive(Parser)]
#[command(
    name = "ampchain",
    version,
    about = "Plan cascaded transistor amplifier chains: operating points, loaded gains, load lines, headroom and the first stage to clip.",
    after_help = SAFETY
)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Evaluate a chain: operating points, loaded gains, levels, headroom, first stage to clip.
    Plan(plan::PlanArgs),
    /// Validate a chain file and print the operating points and warnings.
    Check(check::CheckArgs),
    /// Frequency response: gain and phase at every load and stage, −3 dB corners and what sets them.
    Response(response::ResponseArgs),
    /// Noise: output noise, EIN, noise figure and SNR per load, what sets it, and each stage's dynamic range.
    Noise(noise::NoiseArgs),
    /// Draw pictures as SVG: load-line charts per stage, a level diagram of the chain, waveforms at every node, THD against input level.
    #[command(subcommand)]
    Plot(plot::PlotCommand),
    /// Propose standard resistor values that place a stage's Q point for the swing it needs.
    Bias(bias::BiasArgs),
    /// Large signal: waveform distortion over a range of input levels, and the levels where each stage distorts, compresses and clips.
    Sweep(sweep::SweepArgs),
    /// Monte Carlo and corners over tolerances, device spread and temperature.
    Spread(spread::SpreadArgs),
    /// Propose the whole chain's standard values for one goal (headroom, centred swing, noise, margin or yield) under constraints.
    Tune(tune::TuneArgs),
    /// Print the JSON Schema (draft 2020-12) of chain files, for editors and scripts.
    Schema(schema::SchemaArgs),
    /// Write the design report: one self-contained HTML page with the whole plan, to share or print.
    Report(report::ReportArgs),
    /// Print a commented starter chain that plans as written: ampchain new > my-chain.json
    New(new::NewArgs),
    /// Print a shell completion script (bash, zsh, fish, elvish, powershell).
    Completions(completions::CompletionsArgs),
    /// Print the manual page (roff, for man -l) of ampchain and each command.
    Manual(completions::ManualArgs),
}

/// The parser of the `--series` options: the text passes unchanged (the command reads
/// it with `Series::from_str`, in any case, with its own message), and clap learns the
/// series' names for the help and shell completion.
#[derive(Clone)]
struct SeriesNames;

impl clap::builder::TypedValueParser for SeriesNames {
    type Value = String;

    fn parse_ref(
        &self,
        cmd: &clap::Command,
        arg: Option<&clap::Arg>,
        value: &std::ffi::OsStr,
    ) -> Result<String, clap::Error> {
        clap::builder::StringValueParser::new().parse_ref(cmd, arg, value)
    }

    fn possible_values(
        &self,
    ) -> Option<Box<dyn Iterator<Item = clap::builder::PossibleValue> + '_>> {
        Some(Box::new(
            ampchain::eseries::Series::ALL
                .into_iter()
                .map(|s| clap::builder::PossibleValue::new(s.name())),
        ))
    }
}

/// Run the chosen command; the exit code on success (a command may report a finding).
pub fn run(cli: &Cli) -> Result<ExitCode, Error> {
    match &cli.command {
        Command::Plan(a) => plan::run(a),
        Command::Check(a) => check::run(a),
        Command::Response(a) => response::run(a),
        Command::Noise(a) => noise::run(a),
        Command::Plot(c) => plot::run(c),
        Command::Bias(a) => bias::run(a),
        Command::Sweep(a) => sweep::run(a),
        Command::Spread(a) => spread::run(a),
        Command::Tune(a) => tune::run(a),
        Command::Schema(a) => schema::run(a),
        Command::Report(a) => report::run(a),
        Command::New(a) => new::run(a),
        Command::Completions(a) => completions::run_completions(a),
        Command::Manual(a) => completions::run_manual(a),
    }
}

/// Output formats of the commands that print rows (stages and loads, proposals).
#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum RowFormat {
    Table,
    Json,
    Csv,
}

/// The name a chain file goes by in messages.
pub fn origin(path: &str) -> String {
    if path == "-" {
        "<stdin>".into()
    } else {
        path.into()
    }
}

/// The planned source level: `--input` if given, else the file's `source.level`.
pub fn planned_level(chain: &Chain, path: &str, input: Option<&str>) -> Result<Level, Error> {
    match input {
        Some(text) => level_from_spec(&ValueSpec::Text(text.into()), &Fields::new(""), "--input")
            .map_err(|e| Error::Usage(e.to_string())),
        None => chain.source.level.ok_or_else(|| {
            Error::Usage(format!(
                "{}: source.level: found nothing, expected the planned input level in the file or with --input (e.g. --input \"-20 dBu\")",
                origin(path)
            ))
        }),
    }
}

/// Write a finished output to standard output in one go ([`ampchain::io::write_stdout`]:
/// a reader that has gone is no error, a closed standard output is).
pub fn print(bytes: &[u8]) -> Result<(), Error> {
    ampchain::io::write_stdout(bytes)
}

/// Where a command's report goes: standard output, or with `-o FILE` a file written
/// atomically, never over the chain file (`ampchain::io::Outputs`; `-` is standard
/// output too).
#[derive(clap::Args)]
pub struct ReportOutput {
    /// Write the report to this file instead of standard output (atomically, never over the chain file; - is standard output).
    #[arg(short = 'o', long = "output", value_name = "FILE")]
    output: Option<std::path::PathBuf>,
}

impl ReportOutput {
    /// Send the report: to standard output, or to the file (`inputs` are the files it
    /// must never replace).
    pub fn emit(&self, bytes: &[u8], inputs: &[&str]) -> Result<(), Error> {
        match &self.output {
            Some(path) if path.as_os_str() != "-" => {
                ampchain::io::write_atomically(path, bytes, inputs)
            }
            _ => print(&fit_terminal(bytes)),
        }
    }
}

/// A report for standard output: on a terminal, tables wider than it laid out row by
/// row (`ampchain::report::fit`); into a pipe or file, unchanged.
fn fit_terminal(bytes: &[u8]) -> std::borrow::Cow<'_, [u8]> {
    use std::io::IsTerminal;
    let term = console::Term::stdout();
    let width = match term.size_checked() {
        Some((_, cols)) if std::io::stdout().is_terminal() => usize::from(cols),
        _ => return bytes.into(),
    };
    match std::str::from_utf8(bytes) {
        Ok(text) => ampchain::report::fit::fit_tables(text, width)
            .into_bytes()
            .into(),
        Err(_) => bytes.into(),
    }
}

/// An option naming an output file beside a report on standard output: `-` would mix
/// the two, so it is refused.
pub fn file_path_only(path: &str, option: &str) -> Result<(), Error> {
    if path == "-" {
        return Err(Error::Usage(format!(
            "{option} -: standard output carries the report; expected a file path"
        )));
    }
    Ok(())
}

/// Write `edits` into the chain text `text` (read from `chain_path`) as the new chain
/// file `path`, with the `bias --write` editor: only the changed values, comments,
/// layout and tolerances kept; the edited chain must plan before anything is written,
/// and the file is written atomically. `what` names the proposal in messages.
pub fn write_edited(
    chain_path: &str,
    text: &str,
    edits: &[ampchain::bias::edit::Edit],
    path: &str,
    what: &str,
) -> Result<(), Error> {
    use ampchain::bias::edit;
    // A range to move is the input's (exit status 2); any other failed edit is our
    // fault, not the input's: exit status 3.
    let new_text = edit::apply(text, edits).map_err(|e| match e {
        edit::EditError::Range { .. } => Error::Usage(format!("{}: {e}", origin(chain_path))),
        e => Error::Write(std::io::Error::other(format!("{path}: {e}"))),
    })?;
    // Never write a chain that does not plan.
    let plans = ampchain::Chain::from_json_str(&new_text)
        .map_err(|e| e.to_string())
        .and_then(|c| c.evaluate().map(|_| ()).map_err(|e| e.to_string()));
    if let Err(e) = plans {
        return Err(Error::Usage(format!(
            "{}: --write {path}: {what} would give a chain that does not plan ({e}); nothing written",
            origin(chain_path)
        )));
    }
    ampchain::io::write_atomically(
        std::path::Path::new(path),
        new_text.as_bytes(),
        &[chain_path],
    )
}

/// A frequency given on the command line ("1k", "20 Hz", "1 MHz"), above zero.
pub fn parse_frequency(text: &str, option: &str) -> Result<f64, Error> {
    let f = ampchain::units::parse_value(text, ampchain::units::Kind::Frequency).map_err(|e| {
        Error::Usage(format!(
            "{option}: found {}, expected a frequency in Hz such as \"20\", \"1k\" or \"20 kHz\"",
            e.found
        ))
    })?;
    if !(f.is_finite() && f > 0.0) {
        return Err(Error::Usage(format!(
            "{option}: found {}, expected a frequency above zero",
            quote_value(text)
        )));
    }
    let range = &ampchain::limits::FREQUENCY;
    if !range.contains(f) {
        return Err(Error::Usage(format!(
            "{option}: found {}, expected a frequency {}",
            quote_value(text),
            range.describe()
        )));
    }
    Ok(f)
}

#[cfg(test)]
mod tests {
    use clap::CommandFactory;

    /// Options whose values may start with a minus sign: levels ("-45 dBu"),
    /// temperatures ("-20 C..70 C"), frequencies (a negative one gets our own message),
    /// dB bands and constraints ("clip -31dBu..").
    const SIGNED: [&str; 9] = [
        "input",
        "at",
        "from",
        "to",
        "band",
        "temperature",
        "requirements",
        "keep",
        "keep_gain",
    ];

    fn check(cmd: &clap::Command, path: &str, missing: &mut Vec<String>) {
        for arg in cmd.get_arguments() {
            let id = arg.get_id().as_str();
            let takes_value = arg.get_action().takes_values();
            if SIGNED.contains(&id) && takes_value && !arg.is_allow_hyphen_values_set() {
                missing.push(format!("{path} --{}", arg.get_long().unwrap_or(id)));
            }
        }
        for sub in cmd.get_subcommands() {
            check(sub, &format!("{path} {}", sub.get_name()), missing);
        }
    }

    #[test]
    fn every_signed_option_takes_a_leading_minus() {
        let mut cli = super::Cli::command();
        cli.build();
        let mut missing = Vec::new();
        check(&cli, "ampchain", &mut missing);
        assert!(
            missing.is_empty(),
            "without allow_hyphen_values: {missing:?}"
        );
    }
}
