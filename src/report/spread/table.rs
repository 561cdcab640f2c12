//! The table for people: what spreads, the statistics per stage and load, then the
//! first stage to clip, DC failures, corners and requirements in sentences.

use super::super::table::{row, table_format};
use super::super::{Exporter, TableExporter};
use super::{CornerEntry, CornerValue, SpreadReport};
use crate::device::ZERO_CELSIUS;
use crate::spread::corners::At;
use crate::spread::Stats;
use crate::units::format_si;
use prettytable::Table;
use std::io::Write;

fn celsius(t: f64) -> String {
    format!("{:.1} °C", t - ZERO_CELSIUS)
}

/// A share of builds as a percentage, with enough digits to show a rare event.
pub fn percent(x: f64) -> String {
    let p = 100.0 * x;
    if p == 0.0 {
        "0 %".into()
    } else if p < 0.1 {
        format!("{p:.3} %")
    } else {
        format!("{p:.1} %")
    }
}

fn value(x: f64, unit: &str) -> String {
    match unit {
        "K" => celsius(x),
        // β: a plain number.
        "" if x == x.round() => format!("{x:.0}"),
        "" => format!("{x:.3}"),
        u => format_si(x, u),
    }
}

fn signed_db(x: f64, unit: &str) -> String {
    if x.is_finite() {
        format!("{x:+.1} {unit}")
    } else {
        "—".into()
    }
}

/// How a column's values are written.
type Format = dyn Fn(f64) -> String;

fn stats_cells(s: &Option<Stats>, fmt: &Format) -> Vec<String> {
    match s {
        Some(s) => [s.nominal, s.min, s.p1, s.median, s.p99, s.max]
            .iter()
            .map(|x| fmt(*x))
            .collect(),
        None => vec!["—".to_string(); 6],
    }
}

fn describe(corner: &[CornerEntry]) -> String {
    if corner.is_empty() {
        return "all nominal".into();
    }
    corner
        .iter()
        .map(|e| {
            let name = e.parameter.strip_prefix("stages.").unwrap_or(&e.parameter);
            let at = if e.at == At::Min { "min" } else { "max" };
            format!("{name} {at}")
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// `unit` is the unit of `value_db` when the value has one (dB, dBu), else of `value`.
fn corner_line(what: &str, c: &Option<CornerValue>, unit: &str) -> String {
    match c {
        Some(c) => format!(
            "{what} {} at corner {}:\n      {}",
            match c.value_db {
                Some(x) => signed_db(x, unit),
                None => format_si(c.value, unit),
            },
            c.index,
            describe(&c.corner)
        ),
        None => format!("{what}: no corner in the active region"),
    }
}

/// The first line under the title: runs, seed, frequency, temperature.
pub fn heading(r: &SpreadReport) -> String {
    let t = &r.temperature;
    let temperature = if t.min == t.max {
        format!("at {}", celsius(t.nominal))
    } else {
        format!(
            "ambient {} to {} (values of the file at {})",
            celsius(t.min),
            celsius(t.max),
            celsius(t.nominal)
        )
    };
    let at = match r.frequency {
        Some(f) => format!("at {}", format_si(f, "Hz")),
        None => "midband".into(),
    };
    let band = if r.band {
        ", with every build's −3 dB corners"
    } else {
        ""
    };
    format!(
        "Spread over {} builds (seed {}), {at}{band}, {temperature}",
        r.runs, r.seed
    )
}

/// What spreads: titles and one row per spread.
pub fn spread_rows(r: &SpreadReport) -> ([&'static str; 4], Vec<Vec<String>>) {
    let rows = r
        .spreads
        .iter()
        .map(|s| {
            vec![
                s.parameter.clone(),
                value(s.nominal, s.unit),
                format!("{} … {}", value(s.min, s.unit), value(s.max, s.unit)),
                format!("{:?}", s.distribution).to_lowercase(),
            ]
        })
        .collect();
    (["spread", "nominal", "min … max", "distribution"], rows)
}

/// The statistics: titles and rows per stage quantity, per load, and the chain's clip
/// level.
pub fn stats_rows(r: &SpreadReport) -> ([&'static str; 8], Vec<Vec<String>>) {
    let titles = [
        "stage", "quantity", "nominal", "min", "1 %", "median", "99 %", "max",
    ];
    let mut rows = Vec::new();
    let dbu = |x: f64| signed_db(x, "dBu");
    let db = |x: f64| signed_db(x, "dB");
    for s in &r.stages {
        let lines: [(&str, &Option<Stats>, &Format); 4] = [
            (s.names.current, &s.i_c, &|x| format_si(x, "A")),
            (s.names.voltage, &s.v_ce, &|x| format_si(x, "V")),
            // Spread records magnitudes: |gain| in dB (plan's gain carries the sign).
            ("|gain|", &s.gain_db, &db),
            ("clips at input", &s.clip_input_dbu, &dbu),
        ];
        for (k, (name, stats, fmt)) in lines.into_iter().enumerate() {
            let mut cells = vec![
                if k == 0 { s.id.clone() } else { String::new() },
                name.to_string(),
            ];
            cells.extend(stats_cells(stats, fmt));
            rows.push(cells);
        }
    }
    let hz = |x: f64| format_si(x, "Hz");
    for l in &r.loads {
        let mut cells = vec![format!("→ {}", l.id), "overall |gain|".into()];
        cells.extend(stats_cells(&l.gain_db, &db));
        rows.push(cells);
        if r.band {
            for (name, stats) in [
                ("low corner", &l.low_corner),
                ("high corner", &l.high_corner),
            ] {
                let mut cells = vec![String::new(), name.to_string()];
                cells.extend(stats_cells(stats, &hz));
                rows.push(cells);
            }
        }
        // With --noise: EIN in dBu and SNR in dB.
        for (name, stats, fmt) in [
            ("EIN", &l.ein_dbu, &dbu as &Format),
            ("SNR", &l.snr_db, &db),
        ] {
            if stats.is_some() {
                let mut cells = vec![String::new(), name.to_string()];
                cells.extend(stats_cells(stats, fmt));
                rows.push(cells);
            }
        }
    }
    // Each loop: its return ratio (the open loop) beside its closed-loop gain.
    let plain = |x: f64| format!("{x:.4}");
    for l in &r.loops {
        let mut cells = vec![
            format!("loop {} → {}", l.from, l.to),
            "return ratio T".into(),
        ];
        cells.extend(stats_cells(&l.return_ratio, &plain));
        rows.push(cells);
        let mut cells = vec![String::new(), "closed-loop |gain|".into()];
        cells.extend(stats_cells(&l.closed_loop_gain_db, &db));
        rows.push(cells);
    }
    let mut cells = vec!["chain".to_string(), "clips at input".into()];
    cells.extend(stats_cells(&r.clip_input_dbu, &dbu));
    rows.push(cells);
    (titles, rows)
}

/// The sentences under the tables: first to clip, DC failures, corners (indented
/// lines under their heading), requirements and yield.
pub fn notes(r: &SpreadReport) -> Vec<String> {
    let mut out = Vec::new();
    for l in &r.loops {
        if let (Some(t), Some(a_f)) = (
            l.return_ratio_relative_spread,
            l.closed_loop_relative_spread,
        ) {
            out.push(format!(
                "Loop {} → {}: relative spread (σ/mean) of the return ratio T {}, of the closed-loop gain {}: the feedback narrows the gain's spread.",
                l.from,
                l.to,
                percent(t),
                percent(a_f)
            ));
        }
    }
    let firsts: Vec<String> = r
        .stages
        .iter()
        .filter(|s| s.first_to_clip_share > 0.0)
        .map(|s| format!("\"{}\" {}", s.id, percent(s.first_to_clip_share)))
        .collect();
    out.push(format!(
        "First to clip (share of builds): {}.",
        firsts.join(", ")
    ));
    if r.dc_failure_share == 0.0 {
        out.push("Out of the active region at DC: no build.".into());
    } else {
        let which: Vec<String> = r
            .stages
            .iter()
            .flat_map(|s| {
                s.dc_failures.iter().filter(|(_, share)| **share > 0.0).map(
                    move |(fault, share)| {
                        format!(
                            "\"{}\" {} {}",
                            s.id,
                            fault.replace('_', " "),
                            percent(*share)
                        )
                    },
                )
            })
            .collect();
        out.push(format!(
            "Out of the active region at DC: {} of builds ({}).",
            percent(r.dc_failure_share),
            which.join(", ")
        ));
    }

    let c = &r.corners;
    let set = if c.set == "all" {
        format!("all {} corners", c.evaluated)
    } else {
        format!("a reduced set of {} corners", c.evaluated)
    };
    let failures = match &c.first_dc_failure {
        None => String::new(),
        Some(f) => format!(
            "; {} out of the active region at DC, first stage \"{}\" {} (corner: {})",
            c.dc_failures,
            f.stage,
            f.fault.replace('_', " "),
            describe(&f.corner)
        ),
    };
    out.push(format!("Corners ({set}{failures}):"));
    for l in &c.loads {
        out.push(format!(
            "  {}",
            corner_line(
                &format!("gain to \"{}\" lowest", l.id),
                &l.lowest_gain,
                "dB"
            )
        ));
        out.push(format!(
            "  {}",
            corner_line(
                &format!("gain to \"{}\" highest", l.id),
                &l.highest_gain,
                "dB"
            )
        ));
        if r.band {
            for (what, c) in [
                ("low −3 dB corner highest", &l.highest_low_corner),
                ("high −3 dB corner lowest", &l.lowest_high_corner),
            ] {
                let what = format!("{what} (to \"{}\")", l.id);
                let line = match c {
                    Some(_) => corner_line(&what, c, "Hz"),
                    None => format!("{what}: none found (nor in the nominal chain)"),
                };
                out.push(format!("  {line}"));
            }
        }
    }
    out.push(format!(
        "  {}",
        corner_line("clips at input lowest", &c.lowest_clip, "dBu")
    ));
    out.push(format!(
        "  {}",
        corner_line("clips at input highest", &c.highest_clip, "dBu")
    ));

    for q in &r.requirements {
        out.push(format!(
            "Requirement \"{}\": missed by {} of builds (allowed {}): {}.",
            q.requirement,
            percent(q.missed_share),
            percent(r.max_failure),
            if q.passed { "passed" } else { "FAILED" }
        ));
    }
    if let Some(y) = r.yield_share {
        out.push(format!(
            "Yield (every requirement met): {} of builds.",
            percent(y)
        ));
    }
    out
}

fn print_table(
    titles: &[&str],
    rows: Vec<Vec<String>>,
    out: &mut dyn Write,
) -> std::io::Result<()> {
    let mut t = Table::new();
    t.set_format(table_format());
    t.set_titles(row(titles.iter().map(|s| s.to_string()).collect()));
    for cells in rows {
        t.add_row(row(cells));
    }
    t.print(out)?;
    Ok(())
}

impl Exporter<SpreadReport> for TableExporter {
    fn export(&self, r: &SpreadReport, out: &mut dyn Write) -> std::io::Result<()> {
        if let Some(t) = &r.title {
            writeln!(out, "{t}")?;
        }
        writeln!(out, "{}", heading(r))?;
        writeln!(out)?;
        let (titles, rows) = spread_rows(r);
        print_table(&titles, rows, out)?;
        if !r.not_sampled.is_empty() {
            writeln!(out, "{}", not_sampled(r))?;
        }
        writeln!(out)?;
        let (titles, rows) = stats_rows(r);
        print_table(&titles, rows, out)?;
        writeln!(out)?;
        for line in notes(r) {
            writeln!(out, "{line}")?;
        }
        Ok(())
    }
}

/// "Not sampled (reason): names." (when something is not sampled).
pub fn not_sampled(r: &SpreadReport) -> String {
    let names: Vec<&str> = r.not_sampled.iter().map(|n| n.parameter.as_str()).collect();
    match r.not_sampled.first() {
        Some(n) => format!("Not sampled ({}): {}.", n.reason, names.join(", ")),
        None => String::new(),
    }
}
