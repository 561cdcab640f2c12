//! The `ampchain` command: parses options, calls the library, renders.

use ampchain::chain::{level_from_spec, Fields};
use ampchain::error::Error;
use ampchain::io::read_chain;
use ampchain::report::{Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::spec::ValueSpec;
use ampchain::units::{format_si, Level};
use ampchain::{warnings, Chain};
use clap::{Parser, Subcommand, ValueEnum};
use std::io::Write;
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
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Evaluate a chain: operating points, loaded gains, levels, headroom, first stage to clip.
    Plan(PlanArgs),
    /// Validate a chain file and print the operating points and warnings.
    Check(CheckArgs),
}

#[derive(Clone, Copy, ValueEnum)]
enum Format {
    Table,
    Json,
}

#[derive(clap::Args)]
struct PlanArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    /// Planned source level, overriding the file: "50 mV rms", "0.2 Vpk", "1 Vpp", "-20 dBu", "-10 dBV".
    #[arg(long, allow_hyphen_values = true)]
    input: Option<String>,
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    format: Format,
}

#[derive(clap::Args)]
struct CheckArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
}

fn origin(path: &str) -> String {
    if path == "-" {
        "<stdin>".into()
    } else {
        path.into()
    }
}

fn planned_level(chain: &Chain, path: &str, input: Option<&str>) -> Result<Level, Error> {
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

fn plan(args: &PlanArgs) -> Result<(), Error> {
    let chain = read_chain(&args.chain)?;
    let level = planned_level(&chain, &args.chain, args.input.as_deref())?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
    })?;
    let report = PlanReport::new(&chain, &ev, level);
    let exporter: &dyn Exporter = match args.format {
        Format::Table => &TableExporter,
        Format::Json => &JsonExporter,
    };
    let mut buf = Vec::new();
    exporter.export(&report, &mut buf).map_err(Error::Write)?;
    std::io::stdout().write_all(&buf).map_err(Error::Write)
}

fn check(args: &CheckArgs) -> Result<(), Error> {
    let chain = read_chain(&args.chain)?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
    })?;
    let mut out = String::new();
    out.push_str(&format!(
        "{}: valid chain, {} stages, {} loads\n",
        origin(&args.chain),
        chain.stages.len(),
        chain.loads.len()
    ));
    for (i, s) in chain.stages.iter().enumerate() {
        let op = &ev.dc[i].op;
        out.push_str(&format!(
            "  stage \"{}\" ({}): I_C {}, V_CE {}, V_B {}, V_E {}, V_C {}\n",
            s.id,
            s.kind.model().type_name().replace('_', " "),
            format_si(op.i_c, "A"),
            format_si(op.v_ce, "V"),
            format_si(op.v_b, "V"),
            format_si(op.v_e, "V"),
            format_si(op.v_c, "V"),
        ));
    }
    let ws = warnings::collect(&chain, &ev, chain.source.level);
    if ws.is_empty() {
        out.push_str("no warnings\n");
    }
    for w in ws {
        match w.stage {
            Some(s) => out.push_str(&format!("warning: stage \"{s}\": {}\n", w.message)),
            None => out.push_str(&format!("warning: {}\n", w.message)),
        }
    }
    std::io::stdout()
        .write_all(out.as_bytes())
        .map_err(Error::Write)
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match &cli.command {
        Command::Plan(a) => plan(a),
        Command::Check(a) => check(a),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
