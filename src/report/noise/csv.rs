//! CSV of `noise` for spreadsheets and scripts: one row per contribution of every load
//! (`load`, `stage`, `element`, `source`, `share`, `output_noise_vrms` of that
//! contribution alone), numbers in full precision. With `--optimum`: one row per build
//! of the sweep (`resistance`, `i_c`, `noise_figure_db`).

use super::super::csv::{number, Rows};
use super::super::{CsvExporter, Exporter};
use super::optimum::OptimumReport;
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
                    number(c.share),
                    number(l.output_noise_vrms * c.share.sqrt()),
                ])?;
            }
        }
        rows.finish()
    }
}

impl Exporter<OptimumReport> for CsvExporter {
    fn export(&self, r: &OptimumReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        rows.row(["resistance", "i_c", "noise_figure_db"])?;
        for p in &r.sweep {
            rows.row([
                number(p.resistance),
                number(p.i_c),
                number(p.noise_figure_db),
            ])?;
        }
        rows.finish()
    }
}
