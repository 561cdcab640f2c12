//! The `response` table for people: the sweep (magnitude and phase at every load and
//! of every stage's own gain), then per load its corners, the sentence naming what
//! sets each, and the time-constant table behind it; then the warnings.

use super::response::ResponseReport;
use super::table::{db, gain, row, table_format, write_warnings};
use super::{Exporter, TableExporter};
use crate::response::{Contribution, Corner};
use crate::units::format_si;
use prettytable::Table;

/// "+58.1 dB  -12.3°"
fn magnitude_phase(db_value: f64, deg: f64) -> String {
    format!("{}  {:+.1}°", db(db_value), deg)
}

/// The share columns' titles of the low and the high corner.
pub const LOW_SHARE: &str = "share of Σ 1/(2πRC)";
pub const HIGH_SHARE: &str = "share of Σ RC";

/// The columns of a corner's contribution table; `band_weight` names the share.
pub fn contribution_titles(band_weight: &str) -> [&str; 6] {
    ["capacitor", "C", "R seen", "RC", "1/(2πRC)", band_weight]
}

/// One row per capacitor of a corner (the text table and the design report show the
/// same cells).
pub fn contribution_rows(list: &[Contribution]) -> Vec<Vec<String>> {
    list.iter()
        .map(|c| {
            vec![
                c.description.clone(),
                format_si(c.capacitance, "F"),
                format_si(c.resistance, "Ω"),
                format_si(c.time_constant, "s"),
                format_si(c.frequency, "Hz"),
                format!("{:.0} %", 100.0 * c.share),
            ]
        })
        .collect()
}

fn contributions_table(list: &[Contribution], band_weight: &str) -> Table {
    let mut t = Table::new();
    t.set_format(table_format());
    t.set_titles(row(contribution_titles(band_weight)
        .map(String::from)
        .to_vec()));
    for cells in contribution_rows(list) {
        t.add_row(row(cells));
    }
    t
}

fn corner(out: &mut dyn std::io::Write, c: &Corner, band_weight: &str) -> std::io::Result<()> {
    writeln!(out, "  {}.", c.summary)?;
    if !c.contributions.is_empty() {
        let mut buf = Vec::new();
        contributions_table(&c.contributions, band_weight).print(&mut buf)?;
        for line in String::from_utf8_lossy(&buf).lines() {
            writeln!(out, "    {line}")?;
        }
    }
    Ok(())
}

impl Exporter<ResponseReport> for TableExporter {
    fn export(&self, r: &ResponseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        if let Some(t) = &r.title {
            writeln!(out, "{t}")?;
        }
        writeln!(
            out,
            "frequency response from {} to {}, {} point{} per decade: gain from the source EMF to each load, and each stage's own gain v(out)/v(in)",
            format_si(r.sweep.from, "Hz"),
            format_si(r.sweep.to, "Hz"),
            r.sweep.per_decade,
            if r.sweep.per_decade == 1 { "" } else { "s" }
        )?;
        writeln!(out)?;

        let mut t = Table::new();
        t.set_format(table_format());
        let mut titles = vec!["frequency".to_string()];
        titles.extend(r.loads.iter().map(|l| format!("load {}", l.id)));
        titles.extend(r.stages.iter().map(|s| format!("stage {}", s.id)));
        t.set_titles(row(titles));
        for (j, f) in r.frequencies.iter().enumerate() {
            let mut cells = vec![format_si(*f, "Hz")];
            cells.extend(
                r.loads
                    .iter()
                    .map(|l| magnitude_phase(l.magnitude_db[j], l.phase_deg[j])),
            );
            cells.extend(
                r.stages
                    .iter()
                    .map(|s| magnitude_phase(s.magnitude_db[j], s.phase_deg[j])),
            );
            t.add_row(row(cells));
        }
        t.print(out)?;

        for l in &r.loads {
            writeln!(out)?;
            writeln!(
                out,
                "Load \"{}\" (driven by \"{}\"), midband gain {} ({}); corners at −3 dB from midband:",
                l.id,
                l.from,
                gain(l.midband_gain),
                db(l.midband_gain_db)
            )?;
            corner(out, &l.low_corner, LOW_SHARE)?;
            corner(out, &l.high_corner, HIGH_SHARE)?;
        }
        write_warnings(out, &r.warnings)
    }
}
