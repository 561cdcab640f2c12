//! `ampchain check`: validate a chain, print operating points and warnings.

use super::origin;
use ampchain::error::Error;
use ampchain::io::read_chain;
use ampchain::units::format_si;
use ampchain::warnings;
use std::fmt::Write;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct CheckArgs {
    /// Chain file (JSON), or - for standard input.
    chain: String,
    #[command(flatten)]
    out: super::ReportOutput,
}

pub fn run(args: &CheckArgs) -> Result<ExitCode, Error> {
    let chain = read_chain(&args.chain)?;
    let ev = chain.evaluate().map_err(|source| Error::Dc {
        origin: origin(&args.chain),
        source,
        hint: chain.milliohm_hint(),
    })?;
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{}: valid chain, {} stages, {} loads",
        origin(&args.chain),
        chain.stages.len(),
        chain.loads.len()
    );
    for (i, s) in chain.stages.iter().enumerate() {
        let op = &ev.dc[i].op;
        if s.device.is_none() {
            let _ = writeln!(
                out,
                "  stage \"{}\" ({}): no device, DC at input {}, output {}",
                s.id,
                s.kind.model().type_name().replace('_', " "),
                format_si(ev.dc[i].v_in, "V"),
                format_si(ev.dc[i].v_out, "V"),
            );
            continue;
        }
        let _ = writeln!(
            out,
            "  stage \"{}\" ({}): I_C {}, V_CE {}, V_B {}, V_E {}, V_C {}",
            s.id,
            s.kind.model().type_name().replace('_', " "),
            format_si(op.i_c, "A"),
            format_si(op.v_ce, "V"),
            format_si(op.v_b, "V"),
            format_si(op.v_e, "V"),
            format_si(op.v_c, "V"),
        );
    }
    let ws = warnings::collect(&chain, &ev, chain.source.level);
    if ws.is_empty() {
        out.push_str("no warnings\n");
    }
    for w in ws {
        match w.stage {
            Some(s) => {
                let _ = writeln!(out, "warning: stage \"{s}\": {}", w.message);
            }
            None => {
                let _ = writeln!(out, "warning: {}", w.message);
            }
        }
    }
    args.out.emit(out.as_bytes(), &[&args.chain])?;
    Ok(ExitCode::SUCCESS)
}
