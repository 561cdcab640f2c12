//! CSV of `noise` for spreadsheets and scripts: one row per contribution of every load
//! (`load`, `stage`, `element`, `source`, `share`, `output_noise_vrms` of that
//! contribution alone), numbers in full precision.

use super::super::csv::Rows;
use super::super::{CsvExporter, Exporter};
use super::NoiseReport;

impl Exporter<NoiseReport> for CsvExporter {
    fn export(&self, r: &NoiseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        rows.row([
            "load",
            "stage",
            "element",
            "source",
            "share",
            "output_noise_vrms",
        ])?;
        for l in &r.loads {
            for c in &l.contributions {
                rows.row([
                    l.id.clone(),
                    c.stage.clone().unwrap_or_default(),
                    c.element.clone(),
                    c.source.clone(),
                    c.share.to_string(),
                    (l.output_noise_vrms * c.share.sqrt()).to_string(),
                ])?;
            }
        }
        rows.finish()
    }
}
