//! What `check` reports: the chain is valid, each stage's operating point, and the
//! warnings; as lines for people (JSON is [`super::JsonExporter`], CSV
//! [`super::CsvExporter`]).

use super::{Exporter, TableExporter};
use crate::chain::Chain;
use crate::device::{OperatingPoint, Quantities};
use crate::evaluate::Evaluation;
use crate::units::format_si;
use crate::warnings::{self, Warning};
use serde::Serialize;
use std::io::Write;

#[derive(Debug, Clone, Serialize)]
pub struct CheckStage {
    pub id: String,
    #[serde(rename = "type")]
    pub kind: &'static str,
    /// By the device's own names; `None` (null) for a stage without a device.
    pub operating_point: Option<Quantities>,
    /// The operating point itself, and the DC voltages at the stage's input and
    /// output (what a passive stage shows), for the table.
    #[serde(skip)]
    pub op: OperatingPoint,
    #[serde(skip)]
    pub ports: Option<(f64, f64)>,
}

/// Everything `check` reports.
#[derive(Debug, Clone, Serialize)]
pub struct CheckReport {
    /// The file's name as given (`<stdin>` for standard input).
    pub chain: String,
    /// Always true: an invalid chain is an error, not a report.
    pub valid: bool,
    pub stages: Vec<CheckStage>,
    pub loads: usize,
    /// Each feedback loop's figures and margins, as `plan` reports them.
    pub loops: Vec<super::LoopReport>,
    pub warnings: Vec<Warning>,
}

impl CheckReport {
    pub fn new(origin: &str, chain: &Chain, ev: &Evaluation) -> CheckReport {
        let stages = chain
            .stages
            .iter()
            .zip(&ev.dc)
            .enumerate()
            .map(|(i, (s, dc))| CheckStage {
                id: s.id.clone(),
                kind: s.kind.model().type_name(),
                operating_point: super::operating_quantities(chain, dc, i),
                op: dc.op,
                ports: s.device.is_none().then_some((dc.v_in, dc.v_out)),
            })
            .collect();
        let loops = super::LoopReport::all(chain, ev);
        let mut warnings = warnings::collect(chain, ev, chain.source.level);
        warnings.extend(warnings::loop_margins(
            &loops,
            ev.freq == crate::network::Freq::Midband,
        ));
        CheckReport {
            chain: origin.to_string(),
            valid: true,
            stages,
            loads: chain.loads.len(),
            loops,
            warnings,
        }
    }
}

impl Exporter<CheckReport> for TableExporter {
    fn export(&self, r: &CheckReport, out: &mut dyn Write) -> std::io::Result<()> {
        let plural = |n: usize, what: &str| format!("{n} {what}{}", if n == 1 { "" } else { "s" });
        writeln!(
            out,
            "{}: valid chain, {}, {}",
            r.chain,
            plural(r.stages.len(), "stage"),
            plural(r.loads, "load")
        )?;
        for s in &r.stages {
            if let Some((v_in, v_out)) = s.ports {
                writeln!(
                    out,
                    "  stage \"{}\" ({}): no device, DC at input {}, output {}",
                    s.id,
                    s.kind.replace('_', " "),
                    format_si(v_in, "V"),
                    format_si(v_out, "V"),
                )?;
                continue;
            }
            let op = &s.op;
            if s.operating_point
                .as_ref()
                .is_some_and(|q| q.get("v_out").is_some())
            {
                writeln!(
                    out,
                    "  stage \"{}\" ({}): output V_out {}, I_out {}",
                    s.id,
                    s.kind.replace('_', " "),
                    format_si(op.v_c, "V"),
                    format_si(op.i_c, "A"),
                )?;
                continue;
            }
            if s.operating_point
                .as_ref()
                .is_some_and(|q| q.get("i_d").is_some())
            {
                writeln!(
                    out,
                    "  stage \"{}\" ({}): I_D {}, V_DS {}, V_G {}, V_S {}, V_D {}",
                    s.id,
                    s.kind.replace('_', " "),
                    format_si(op.i_c, "A"),
                    format_si(op.v_ce, "V"),
                    format_si(op.v_b, "V"),
                    format_si(op.v_e, "V"),
                    format_si(op.v_c, "V"),
                )?;
                continue;
            }
            writeln!(
                out,
                "  stage \"{}\" ({}): I_C {}, V_CE {}, V_B {}, V_E {}, V_C {}",
                s.id,
                s.kind.replace('_', " "),
                format_si(op.i_c, "A"),
                format_si(op.v_ce, "V"),
                format_si(op.v_b, "V"),
                format_si(op.v_e, "V"),
                format_si(op.v_c, "V"),
            )?;
        }
        if !r.loops.is_empty() {
            super::table::write_table(out, super::table::loop_table(&r.loops))?;
        }
        if r.warnings.is_empty() {
            writeln!(out, "no warnings")?;
        }
        for w in &r.warnings {
            match &w.stage {
                Some(s) => writeln!(out, "warning: stage \"{s}\": {}", w.message)?,
                None => writeln!(out, "warning: {}", w.message)?,
            }
        }
        Ok(())
    }
}
