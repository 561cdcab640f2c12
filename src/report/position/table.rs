//! The knob sweep for people: one row per position with the track fraction, the gain
//! to each load, the first stage to clip, its side and input level, and the headroom
//! at the planned input; a closing sentence names the last setting without clipping.

use super::super::table::{db, dbu, row, table_format};
use super::super::{Exporter, TableExporter};
use crate::position::PositionSweep;
use crate::text::quote;
use prettytable::Table;

impl Exporter<PositionSweep> for TableExporter {
    fn export(&self, r: &PositionSweep, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        if let Some(title) = &r.title {
            writeln!(out, "{title}")?;
        }
        writeln!(
            out,
            "Knob of potentiometer {} ({} taper; the file sets {:.3}) at a planned input of {}",
            quote(&r.stage),
            r.taper,
            r.written_position,
            dbu(r.planned_input_dbu),
        )?;
        let mut t = Table::new();
        t.set_format(table_format());
        let mut titles = vec!["position".to_string(), "track below wiper".into()];
        titles.extend(r.loads.iter().map(|l| format!("gain to {l}")));
        titles.extend([
            "first to clip".into(),
            "toward".into(),
            "clips at input".into(),
            "headroom".into(),
        ]);
        t.set_titles(row(titles));
        for p in &r.rows {
            let mut cells = vec![
                format!("{:.3}", p.position),
                format!("{:.2} %", 100.0 * p.fraction),
            ];
            cells.extend(p.load_gain_db.iter().map(|&g| db(g)));
            let clip = &p.first_clip;
            cells.extend([
                clip.stage.clone().unwrap_or_else(|| "—".into()),
                clip.toward.map_or_else(|| "—".into(), |t| t.to_string()),
                dbu(p.first_clip.input_dbu),
                db(p.headroom_db),
            ]);
            t.add_row(row(cells));
        }
        t.print(out)?;
        writeln!(out, "{}", verdict(r))
    }
}

/// One sentence: up to which position the planned input passes without clipping.
fn verdict(r: &PositionSweep) -> String {
    let clean: Vec<&crate::position::PositionRow> =
        r.rows.iter().filter(|p| p.headroom_db >= 0.0).collect();
    match (clean.len(), r.rows.iter().find(|p| p.headroom_db < 0.0)) {
        (_, None) => "The planned input clips no stage at any knob position.".into(),
        (0, Some(_)) => "The planned input clips a stage at every knob position.".into(),
        (_, Some(first)) => format!(
            "The planned input first clips at position {:.3}: stage {} toward {}.",
            first.position,
            quote(first.first_clip.stage.as_deref().unwrap_or("?")),
            first
                .first_clip
                .toward
                .map_or_else(|| "?".into(), |t| t.to_string()),
        ),
    }
}
