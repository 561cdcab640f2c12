//! What `sweep` reports: per level and node the peaks, THD and gain, then the onset
//! table; written as a table for people, JSON or CSV for scripts.

use super::onset::{Onsets, Threshold};
use super::LevelResult;
use crate::report::csv::{field, scientific, Rows};
use crate::report::table::up_down;
use crate::report::{table_format, Exporter, LevelReport, TableExporter};
use crate::units::format_si;
use prettytable::{Cell, Row, Table};
use serde::Serialize;
use std::io::Write;

/// The model the figures come from, stated in every report.
pub const MODEL: &str = "quasi-static midband: coupling and bypass capacitors hold their operating-point voltages; every transistor in the Ebers–Moll transport model";

#[derive(Debug, Clone, Serialize)]
pub struct SweepReport {
    pub title: Option<String>,
    pub model: &'static str,
    pub samples_per_period: usize,
    pub levels: Vec<LevelResult>,
    pub onsets: Onsets,
}

fn dbu(l: &LevelReport) -> String {
    format!("{:+.1} dBu", l.dbu)
}

fn row(cells: Vec<String>) -> Row {
    Row::new(cells.into_iter().map(|c| Cell::new(&c)).collect())
}

fn opt_level(l: &Option<LevelReport>) -> String {
    l.as_ref().map_or("—".into(), dbu)
}

impl SweepReport {
    /// One row per level and node (stages, then loads); the onset table is in the
    /// table and JSON formats only.
    pub fn write_levels_csv(levels: &[LevelResult], out: &mut dyn Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        let mut header: Vec<String> = [
            "input_vpeak",
            "input_vrms",
            "input_dbu",
            "node",
            "kind",
            "fundamental",
        ]
        .map(String::from)
        .to_vec();
        header.extend((2..=10).map(|h| format!("h{h}")));
        header.extend(
            [
                "thd_percent",
                "thd_db",
                "dc_shift",
                "peak_positive",
                "peak_negative",
                "cumulative_gain",
                "gain",
                "compression_db",
                "added_thd_percent",
                "saturates",
                "cuts_off",
                "source_compression_db",
                "rail",
                "current_limit",
            ]
            .map(String::from),
        );
        rows.row(&header)?;
        for l in levels {
            let node = |id: &str, kind: &str, d: &super::NodeDistortion| {
                let mut cells = vec![
                    scientific(l.input.vpeak),
                    scientific(l.input.vrms),
                    field(l.input.dbu, |x| format!("{x:.4}")),
                    id.to_string(),
                    kind.to_string(),
                    scientific(d.fundamental),
                ];
                cells.extend(d.harmonics.iter().map(|&h| scientific(h)));
                cells.extend([
                    scientific(d.thd_percent),
                    field(d.thd_db, |x| format!("{x:.4}")),
                    scientific(d.dc_shift),
                    scientific(d.peak_positive),
                    scientific(d.peak_negative),
                ]);
                cells
            };
            for s in &l.stages {
                let mut cells = node(&s.id, "stage", &s.output);
                cells.extend([
                    scientific(s.cumulative_gain),
                    scientific(s.gain),
                    field(s.compression_db, |x| format!("{x:.5}")),
                    scientific(s.added_thd_percent),
                    s.saturates.to_string(),
                    s.cuts_off.to_string(),
                    field(s.source_compression_db, |x| format!("{x:.5}")),
                    // An op-amp stage's edges; empty for other stages.
                    s.rail.map_or(String::new(), |x| x.to_string()),
                    s.current_limit.map_or(String::new(), |x| x.to_string()),
                ]);
                rows.row(&cells)?;
            }
            for ld in &l.loads {
                let mut cells = node(&ld.id, "load", &ld.output);
                cells.extend(std::iter::repeat(String::new()).take(9));
                rows.row(&cells)?;
            }
        }
        rows.finish()
    }
}

/// The sweep table for people (the JSON is `JsonExporter`).
impl Exporter<SweepReport> for TableExporter {
    fn export(&self, report: &SweepReport, out: &mut dyn Write) -> std::io::Result<()> {
        if let Some(t) = &report.title {
            writeln!(out, "{t}")?;
        }
        writeln!(
            out,
            "large signal, {} samples per period; {MODEL}",
            report.samples_per_period
        )?;
        writeln!(out)?;
        let mut t = Table::new();
        t.set_format(table_format());
        t.set_titles(row([
            "input (EMF)",
            "stage",
            "peak + / -",
            "DC shift",
            "THD",
            "gain from EMF",
            "compression (stage)",
            "compression (from EMF)",
            "transistor",
        ]
        .map(String::from)
        .to_vec()));
        for l in &report.levels {
            for (k, s) in l.stages.iter().enumerate() {
                let input = if k == 0 {
                    format!("{} ({} pk)", dbu(&l.input), format_si(l.input.vpeak, "V"))
                } else {
                    String::new()
                };
                let state = match (s.saturates, s.cuts_off, s.rail, s.current_limit) {
                    (_, _, Some(true), Some(true)) => "rail and current limit",
                    (_, _, Some(true), _) => "rail",
                    (_, _, _, Some(true)) => "current limit",
                    (false, false, ..) => "active",
                    (true, false, ..) => "saturates",
                    (false, true, ..) => "cuts off",
                    (true, true, ..) => "saturates and cuts off",
                };
                t.add_row(row(vec![
                    input,
                    s.id.clone(),
                    up_down(s.output.peak_positive, s.output.peak_negative),
                    format_si(s.output.dc_shift, "V"),
                    format!("{:.3} %", s.output.thd_percent),
                    format!("{:.4} V/V", s.cumulative_gain),
                    format!("{:+.2} dB", s.compression_db),
                    format!("{:+.2} dB", s.source_compression_db),
                    state.into(),
                ]));
            }
        }
        t.print(out)?;
        writeln!(
            out,
            "gain from EMF: output over source EMF, source loading included (plan's `gain` is the stage's own, output over input). compression: against the small-signal value, of the stage's own gain from its driver's node (stage) and of the gain from the source EMF (from EMF)."
        )?;
        writeln!(out)?;
        writeln!(
            out,
            "Onset levels at the source (EMF), found by bracketing and bisection:"
        )?;
        let mut o = Table::new();
        o.set_format(table_format());
        let (titles, rows) = onset_rows(&report.onsets);
        o.set_titles(row(titles.map(String::from).to_vec()));
        for cells in rows {
            o.add_row(row(cells));
        }
        o.print(out)?;
        writeln!(out)?;
        let (verdicts, flags) = onset_notes(&report.onsets);
        for line in verdicts {
            writeln!(out, "{line}")?;
        }
        if !flags.is_empty() {
            writeln!(out)?;
            writeln!(out, "Where the waveform disagrees with the load lines:")?;
            for f in flags {
                writeln!(out, "  - {f}")?;
            }
        }
        Ok(())
    }
}

/// The onset table: titles and one row of cells per stage (the sweep table and the
/// design report show the same cells).
pub fn onset_rows(onsets: &Onsets) -> ([&'static str; 7], Vec<Vec<String>>) {
    let titles = [
        "stage",
        "1 % THD",
        "10 % THD",
        "−1 dB stage gain",
        "clips (waveform)",
        "clips (load line)",
        "waveform − load line",
    ];
    let rows = onsets
        .stages
        .iter()
        .map(|s| {
            vec![
                s.id.clone(),
                opt_level(&s.thd_1_percent),
                opt_level(&s.thd_10_percent),
                opt_level(&s.compression_1_db),
                match (&s.clip, s.clip_toward) {
                    (Some(l), Some(side)) => format!("{} ({side})", dbu(l)),
                    _ => "—".into(),
                },
                if s.plan_clip.vpeak.is_finite() {
                    format!("{} ({})", dbu(&s.plan_clip), s.plan_toward)
                } else {
                    "—".to_string()
                },
                s.clip_vs_plan_db
                    .map_or("—".into(), |d| format!("{d:+.1} dB")),
            ]
        })
        .collect();
    (titles, rows)
}

/// The sentences under the onset table: which stage limits the chain at each
/// threshold and the summary; then each place where the waveform disagrees with the
/// load lines.
pub fn onset_notes(onsets: &Onsets) -> (Vec<String>, Vec<String>) {
    let mut verdicts: Vec<String> = onsets
        .limiting
        .iter()
        .map(|l| {
            let what = match l.threshold {
                Threshold::Thd1Percent => "1 % THD",
                Threshold::Thd10Percent => "10 % THD",
                Threshold::Compression1Db => "1 dB compression",
                Threshold::Clip => "clipping",
            };
            if l.first == l.stage {
                format!(
                    "Limits the chain at {what}: stage \"{}\" ({} in).",
                    l.stage,
                    dbu(&l.level)
                )
            } else {
                format!(
                    "Limits the chain at {what}: stage \"{}\" ({} in), which adds the most of its own; stage \"{}\" reaches it first, at {} in.",
                    l.stage,
                    dbu(&l.stage_level),
                    l.first,
                    dbu(&l.level)
                )
            }
        })
        .collect();
    verdicts.push(onsets.summary.clone());
    let flags = onsets
        .stages
        .iter()
        .flat_map(|s| {
            s.flags
                .iter()
                .map(move |f| format!("stage \"{}\" {f}", s.id))
        })
        .collect();
    (verdicts, flags)
}
