//! What `check` reports: the chain is valid, each stage's operating point, and the
//! warnings; as lines for people (JSON is [`super::JsonExporter`], CSV
//! [`super::CsvExporter`]).

use super::{Exporter, TableExporter};
use crate::chain::Chain;
use crate::device::OperatingPoint;
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
    pub operating_point: OperatingPoint,
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
    pub warnings: Vec<Warning>,
}

impl CheckReport {
    pub fn new(origin: &str, chain: &Chain, ev: &Evaluation) -> CheckReport {
        CheckReport {
            chain: origin.to_string(),
            valid: true,
            stages: chain
                .stages
                .iter()
                .zip(&ev.dc)
                .map(|(s, dc)| CheckStage {
                    id: s.id.clone(),
                    kind: s.kind.model().type_name(),
                    operating_point: dc.op,
                })
                .collect(),
            loads: chain.loads.len(),
            warnings: warnings::collect(chain, ev, chain.source.level),
        }
    }
}

impl Exporter<CheckReport> for TableExporter {
    fn export(&self, r: &CheckReport, out: &mut dyn Write) -> std::io::Result<()> {
        writeln!(
            out,
            "{}: valid chain, {} stages, {} loads",
            r.chain,
            r.stages.len(),
            r.loads
        )?;
        for s in &r.stages {
            let op = &s.operating_point;
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
