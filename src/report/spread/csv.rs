//! CSV for spreadsheets: one row per quantity, SI units, fields quoted as RFC 4180
//! asks (a field with a comma, quote or line break is quoted, quotes doubled).
//!
//! Columns: `subject,quantity,unit,nominal,min,p1,median,p99,max,mean,std_dev,share`.
//! Statistic rows fill `nominal` to `std_dev`; share rows (first to clip, out of the
//! active region, requirements missed, yield) fill `share`; corner rows give the
//! lowest and highest corner in `min` and `max` (for the −3 dB corners of `--band`
//! only the worst: the highest low corner, the lowest high corner).

use super::super::csv::{scientific, Rows};
use super::super::{CsvExporter, Exporter};
use super::SpreadReport;
use crate::spread::Stats;
use std::io::Write;

/// An optional number in scientific notation; empty where absent or infinite.
fn number(x: Option<f64>) -> String {
    x.map_or_else(String::new, scientific)
}

fn stats_row(
    out: &mut Rows,
    subject: &str,
    quantity: &str,
    unit: &str,
    s: &Option<Stats>,
) -> std::io::Result<()> {
    let cells: Vec<String> = match s {
        Some(s) => [
            Some(s.nominal),
            Some(s.min),
            Some(s.p1),
            Some(s.median),
            Some(s.p99),
            Some(s.max),
            s.mean,
            s.std_dev,
        ]
        .map(number)
        .to_vec(),
        None => vec![String::new(); 8],
    };
    let lead = [subject, quantity, unit].map(String::from);
    out.row(lead.into_iter().chain(cells).chain([String::new()]))
}

fn share_row(out: &mut Rows, subject: &str, quantity: &str, share: f64) -> std::io::Result<()> {
    let mut cells = vec![String::new(); 12];
    cells[0] = subject.to_string();
    cells[1] = quantity.to_string();
    cells[11] = number(Some(share));
    out.row(cells)
}

fn corner_row(
    out: &mut Rows,
    subject: &str,
    quantity: &str,
    unit: &str,
    lo: Option<f64>,
    hi: Option<f64>,
) -> std::io::Result<()> {
    let mut cells = vec![String::new(); 12];
    cells[0] = subject.to_string();
    cells[1] = quantity.to_string();
    cells[2] = unit.to_string();
    cells[4] = number(lo);
    cells[8] = number(hi);
    out.row(cells)
}

impl Exporter<SpreadReport> for CsvExporter {
    fn export(&self, r: &SpreadReport, out: &mut dyn Write) -> std::io::Result<()> {
        let out = &mut Rows::new(out);
        out.row([
            "subject", "quantity", "unit", "nominal", "min", "p1", "median", "p99", "max", "mean",
            "std_dev", "share",
        ])?;
        for s in &r.stages {
            stats_row(out, &s.id, "i_c", "A", &s.i_c)?;
            stats_row(out, &s.id, "v_ce", "V", &s.v_ce)?;
            stats_row(out, &s.id, "gain", "V/V", &s.gain)?;
            stats_row(out, &s.id, "clip_input_vpeak", "V", &s.clip_input_vpeak)?;
        }
        for l in &r.loads {
            stats_row(out, &l.id, "gain", "V/V", &l.gain)?;
            if r.band {
                stats_row(out, &l.id, "low_corner", "Hz", &l.low_corner)?;
                stats_row(out, &l.id, "high_corner", "Hz", &l.high_corner)?;
            }
            if l.ein_vrms.is_some() {
                stats_row(out, &l.id, "ein_vrms", "V", &l.ein_vrms)?;
                stats_row(out, &l.id, "snr_db", "dB", &l.snr_db)?;
            }
        }
        stats_row(out, "chain", "clip_input_vpeak", "V", &r.clip_input_vpeak)?;
        for s in &r.stages {
            share_row(out, &s.id, "first_to_clip", s.first_to_clip_share)?;
            for (fault, share) in &s.dc_failures {
                share_row(out, &s.id, &format!("dc_{fault}"), *share)?;
            }
        }
        share_row(out, "chain", "dc_failure", r.dc_failure_share)?;
        for l in &r.corners.loads {
            let lo = l.lowest_gain.as_ref().map(|c| c.value);
            let hi = l.highest_gain.as_ref().map(|c| c.value);
            corner_row(out, &l.id, "gain_corners", "V/V", lo, hi)?;
            if r.band {
                // The worst of each: the highest low corner, the lowest high corner.
                let hi = l.highest_low_corner.as_ref().map(|c| c.value);
                corner_row(out, &l.id, "low_corner_corners", "Hz", None, hi)?;
                let lo = l.lowest_high_corner.as_ref().map(|c| c.value);
                corner_row(out, &l.id, "high_corner_corners", "Hz", lo, None)?;
            }
        }
        let lo = r.corners.lowest_clip.as_ref().map(|c| c.value);
        let hi = r.corners.highest_clip.as_ref().map(|c| c.value);
        corner_row(out, "chain", "clip_input_vpeak_corners", "V", lo, hi)?;
        for q in &r.requirements {
            share_row(out, &q.requirement, "missed", q.missed_share)?;
        }
        if let Some(y) = r.yield_share {
            share_row(out, "chain", "yield", y)?;
        }
        Ok(())
    }
}
