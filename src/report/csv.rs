//! CSV of a frequency sweep for spreadsheets and scripts: one row per frequency;
//! columns `frequency_hz`, then `load_<id>_db`, `load_<id>_deg` for every load and
//! `stage_<id>_db`, `stage_<id>_deg` for every stage's own gain. Numbers in full
//! precision; corners and attribution are in the table and JSON formats.

use super::response::ResponseReport;
use super::Exporter;

pub struct CsvExporter;

/// A field quoted when it needs to be (RFC 4180: comma, quote or line break inside).
pub(super) fn field(text: &str) -> String {
    if text.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", text.replace('"', "\"\""))
    } else {
        text.to_string()
    }
}

impl Exporter<ResponseReport> for CsvExporter {
    fn export(&self, r: &ResponseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut header = vec!["frequency_hz".to_string()];
        for l in &r.loads {
            header.push(field(&format!("load_{}_db", l.id)));
            header.push(field(&format!("load_{}_deg", l.id)));
        }
        for s in &r.stages {
            header.push(field(&format!("stage_{}_db", s.id)));
            header.push(field(&format!("stage_{}_deg", s.id)));
        }
        writeln!(out, "{}", header.join(","))?;
        for (j, f) in r.frequencies.iter().enumerate() {
            let mut cells = vec![f.to_string()];
            for l in &r.loads {
                cells.push(l.magnitude_db[j].to_string());
                cells.push(l.phase_deg[j].to_string());
            }
            for s in &r.stages {
                cells.push(s.magnitude_db[j].to_string());
                cells.push(s.phase_deg[j].to_string());
            }
            writeln!(out, "{}", cells.join(","))?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::field;

    #[test]
    fn fields_are_quoted_per_rfc_4180() {
        // RFC 4180 §2: fields with commas or quotes are enclosed in quotes, quotes doubled.
        assert_eq!(field("load_out_db"), "load_out_db");
        assert_eq!(field("load_a,b_db"), "\"load_a,b_db\"");
        assert_eq!(field("say \"hi\""), "\"say \"\"hi\"\"\"");
    }
}
