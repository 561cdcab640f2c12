//! The `noise` table for people: per load its output noise, EIN, noise figure and SNR
//! with the largest contributors in plain words; per stage its output noise and
//! dynamic range; with `--at`, the spot densities.

use super::super::table::{row, table_format};
use super::super::{Exporter, TableExporter};
use super::optimum::OptimumReport;
use super::{ContributionReport, NoiseReport};
use crate::text::quote;
use crate::units::format_si;
use prettytable::Table;

/// Contributors named per load in the table (those of at least 1 %).
pub const TOP: usize = 5;

fn optional_db(x: Option<f64>) -> String {
    x.map_or("—".into(), |x| format!("{x:.1} dB"))
}

fn contributors(out: &mut dyn std::io::Write, list: &[ContributionReport]) -> std::io::Result<()> {
    writeln!(out, "  largest contributors:")?;
    for c in list.iter().filter(|c| c.share >= 0.01).take(TOP) {
        writeln!(out, "    {}: {:.0} %", c.source, 100.0 * c.share)?;
    }
    Ok(())
}

impl Exporter<NoiseReport> for TableExporter {
    fn export(&self, r: &NoiseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let weighting = match r.weighting {
            "a" => "A-weighted",
            _ => "unweighted",
        };
        writeln!(
            out,
            "Noise over {} … {}, {weighting}, at {:.2} K (integration accurate to {:.0e})",
            format_si(r.band.from, "Hz"),
            format_si(r.band.to, "Hz"),
            r.temperature,
            r.integration_error.max(f64::MIN_POSITIVE),
        )?;
        for l in &r.loads {
            writeln!(out)?;
            writeln!(
                out,
                "load {}: output noise {} rms; EIN {} rms ({:.1} dBu), {}/√Hz at 1 kHz",
                quote(&l.id),
                format_si(l.output_noise_vrms, "V"),
                format_si(l.ein_vrms, "V"),
                l.ein_dbu,
                format_si(l.ein_density_at_1khz, "V"),
            )?;
            let snr = match (l.snr_db, r.planned_emf_vrms) {
                (Some(s), Some(v)) => format!("{s:.1} dB at {} rms", format_si(v, "V")),
                _ => "— (no planned level)".into(),
            };
            writeln!(
                out,
                "  noise figure {}, SNR {snr}",
                optional_db(l.noise_figure_db)
            )?;
            contributors(out, &l.contributions)?;
        }
        writeln!(out)?;
        let mut t = Table::new();
        t.set_format(table_format());
        t.set_titles(row(vec![
            "stage".into(),
            "output noise".into(),
            "dynamic range".into(),
        ]));
        for s in &r.stages {
            t.add_row(row(vec![
                s.id.clone(),
                format!("{} rms", format_si(s.output_noise_vrms, "V")),
                optional_db(s.dynamic_range_db),
            ]));
        }
        t.print(out)?;
        if let Some(at) = &r.at {
            writeln!(out)?;
            writeln!(out, "At {} (unweighted):", format_si(at.frequency, "Hz"))?;
            for l in &at.loads {
                writeln!(
                    out,
                    "load {}: output {}/√Hz, EIN {}/√Hz",
                    quote(&l.id),
                    format_si(l.output_density, "V"),
                    format_si(l.ein_density, "V"),
                )?;
                contributors(out, &l.contributions)?;
            }
        }
        Ok(())
    }
}

/// `plan --noise`: the stage table gains a `dynamic range` column and the load table an
/// `SNR` column; without noise the titles and rows are returned as they are.
pub fn with_noise_column(
    r: &crate::report::PlanReport,
    (titles, mut rows): (&[&str], Vec<Vec<String>>),
) -> (Vec<String>, Vec<Vec<String>>) {
    let mut titles: Vec<String> = titles.iter().map(|t| t.to_string()).collect();
    let Some(noise) = &r.noise else {
        return (titles, rows);
    };
    // The stage table's first title is "stage", the load table's "load".
    let cells: Vec<String> = if titles[0] == "stage" {
        titles.push("dynamic range".into());
        noise
            .stages
            .iter()
            .map(|s| optional_db(s.dynamic_range_db))
            .collect()
    } else {
        titles.push("SNR".into());
        noise.loads.iter().map(|l| optional_db(l.snr_db)).collect()
    };
    for (row, cell) in rows.iter_mut().zip(cells) {
        row.push(cell);
    }
    (titles, rows)
}

/// `plan --noise`: one line per load with its SNR and EIN, and the band.
pub fn write_snr_lines(
    r: &crate::report::PlanReport,
    out: &mut dyn std::io::Write,
) -> std::io::Result<()> {
    let Some(noise) = &r.noise else {
        return Ok(());
    };
    let weighting = match noise.weighting {
        "a" => "A-weighted",
        _ => "unweighted",
    };
    for l in &noise.loads {
        writeln!(
            out,
            "SNR at load {}: {} (EIN {} rms, {:.1} dBu, over {} … {}, {weighting}; noise figure {}).",
            quote(&l.id),
            optional_db(l.snr_db),
            format_si(l.ein_vrms, "V"),
            l.ein_dbu,
            format_si(noise.band.from, "Hz"),
            format_si(noise.band.to, "Hz"),
            optional_db(l.noise_figure_db),
        )?;
    }
    Ok(())
}

impl Exporter<OptimumReport> for TableExporter {
    fn export(&self, r: &OptimumReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        writeln!(
            out,
            "Stage {}: its {} swept for the lowest noise figure at load {} from {} ({} … {}{})",
            quote(&r.stage),
            r.resistor,
            quote(&r.load),
            format_si(r.source_resistance, "Ω"),
            format_si(r.band.from, "Hz"),
            format_si(r.band.to, "Hz"),
            if r.weighting == "a" {
                ", A-weighted"
            } else {
                ""
            },
        )?;
        let o = &r.optimum;
        writeln!(
            out,
            "lowest noise figure {:.2} dB at I_C = {} ({} = {}){}",
            o.noise_figure_db,
            format_si(o.i_c, "A"),
            r.resistor,
            format_si(o.resistance, "Ω"),
            if r.at_edge {
                "; at the end of the builds that bias, so the minimum may lie beyond"
            } else {
                ""
            },
        )?;
        writeln!(
            out,
            "textbook optimum of one transistor fed from R_S: I_C = (V_T/R_S)·√β = {}",
            format_si(r.textbook_i_c, "A"),
        )?;
        writeln!(out)?;
        let mut t = Table::new();
        t.set_format(table_format());
        t.set_titles(row(vec![
            r.resistor.to_string(),
            "I_C".into(),
            "noise figure".into(),
        ]));
        for p in &r.sweep {
            t.add_row(row(vec![
                format_si(p.resistance, "Ω"),
                format_si(p.i_c, "A"),
                format!("{:.2} dB", p.noise_figure_db),
            ]));
        }
        t.print(out)?;
        Ok(())
    }
}
