//! JSON for scripts: SI units, the field names of [`super::SpreadReport`].

use super::{SpreadExporter, SpreadReport};

pub struct JsonExporter;

impl SpreadExporter for JsonExporter {
    fn export(&self, report: &SpreadReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        serde_json::to_writer_pretty(&mut *out, report)?;
        writeln!(out)
    }
}
