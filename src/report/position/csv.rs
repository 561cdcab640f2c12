//! The knob sweep as CSV: one row per position (`position`, `fraction`, `gain_db:<load>`
//! per load, `first_clip_stage`, `first_clip_toward`, `first_clip_input_dbu`,
//! `headroom_db`, `headroom_db:<stage>` per stage), numbers in full precision, an empty
//! field for none.

use super::super::csv::{number, optional, Rows};
use super::super::{CsvExporter, Exporter};
use crate::position::PositionSweep;

impl Exporter<PositionSweep> for CsvExporter {
    fn export(&self, r: &PositionSweep, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        let mut header = vec!["position".to_string(), "fraction".into()];
        header.extend(r.loads.iter().map(|l| format!("gain_db:{l}")));
        header.extend([
            "first_clip_stage".into(),
            "first_clip_toward".into(),
            "first_clip_input_dbu".into(),
            "headroom_db".into(),
        ]);
        header.extend(r.stages.iter().map(|s| format!("headroom_db:{s}")));
        rows.row(header)?;
        for p in &r.rows {
            let mut fields = vec![p.position.to_string(), number(p.fraction)];
            fields.extend(p.load_gain_db.iter().map(|&g| number(g)));
            fields.extend([
                p.first_clip.stage.clone().unwrap_or_default(),
                p.first_clip
                    .toward
                    .map_or_else(String::new, |t| t.to_string()),
                number(p.first_clip.input_dbu),
                number(p.headroom_db),
            ]);
            fields.extend(p.stage_headroom_db.iter().map(|&h| optional(h)));
            rows.row(fields)?;
        }
        rows.finish()
    }
}
