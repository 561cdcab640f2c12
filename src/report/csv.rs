//! CSV of a frequency sweep for spreadsheets and scripts: one row per frequency;
//! columns `frequency_hz`, then `load_<id>_db`, `load_<id>_deg` for every load and
//! `stage_<id>_db`, `stage_<id>_deg` for every stage's own gain. Numbers in full
//! precision; corners and attribution are in the table and JSON formats.

use super::response::ResponseReport;
use super::Exporter;

pub struct CsvExporter;

/// Rows written as CSV by the `csv` crate (RFC 4180: a field with a comma, quote or
/// line break quoted, quotes doubled), every row with the header's field count.
pub struct Rows<'a> {
    writer: csv::Writer<&'a mut dyn std::io::Write>,
}

impl<'a> Rows<'a> {
    pub fn new(out: &'a mut dyn std::io::Write) -> Rows<'a> {
        Rows {
            writer: csv::WriterBuilder::new().flexible(false).from_writer(out),
        }
    }

    /// One row of fields.
    pub fn row<I, T>(&mut self, fields: I) -> std::io::Result<()>
    where
        I: IntoIterator<Item = T>,
        T: AsRef<[u8]>,
    {
        self.writer.write_record(fields).map_err(into_io)
    }

    /// Flush what is buffered.
    pub fn finish(mut self) -> std::io::Result<()> {
        self.writer.flush()
    }
}

fn into_io(e: csv::Error) -> std::io::Error {
    match e.into_kind() {
        csv::ErrorKind::Io(e) => e,
        other => std::io::Error::other(format!("{other:?}")),
    }
}

impl Exporter<ResponseReport> for CsvExporter {
    fn export(&self, r: &ResponseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        let mut header = vec!["frequency_hz".to_string()];
        for l in &r.loads {
            header.push(format!("load_{}_db", l.id));
            header.push(format!("load_{}_deg", l.id));
        }
        for s in &r.stages {
            header.push(format!("stage_{}_db", s.id));
            header.push(format!("stage_{}_deg", s.id));
        }
        rows.row(&header)?;
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
            rows.row(&cells)?;
        }
        rows.finish()
    }
}

#[cfg(test)]
mod tests {
    use super::Rows;

    #[test]
    fn fields_are_quoted_per_rfc_4180() {
        // RFC 4180 §2: fields with commas, quotes or line breaks are enclosed in quotes,
        // quotes doubled.
        let mut out = Vec::new();
        let mut rows = Rows::new(&mut out);
        rows.row(["load_out_db", "load_a,b_db", "say \"hi\"", "two\nlines"])
            .unwrap();
        rows.finish().unwrap();
        assert_eq!(
            String::from_utf8(out).unwrap(),
            "load_out_db,\"load_a,b_db\",\"say \"\"hi\"\"\",\"two\nlines\"\n"
        );
    }
}
