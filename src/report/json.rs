//! JSON for scripts: the field names of docs/definitions.md, SI units, infinities as null.

use super::Exporter;

pub struct JsonExporter;

impl<R: serde::Serialize> Exporter<R> for JsonExporter {
    fn export(&self, report: &R, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        serde_json::to_writer_pretty(&mut *out, report)?;
        writeln!(out)
    }
}
