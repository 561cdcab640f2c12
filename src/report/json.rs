//! JSON for scripts: the field names of DESIGN.md, SI units, infinities as null.

use super::{Exporter, PlanReport};

pub struct JsonExporter;

impl Exporter for JsonExporter {
    fn export(&self, report: &PlanReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        serde_json::to_writer_pretty(&mut *out, report)?;
        writeln!(out)
    }
}
