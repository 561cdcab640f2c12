//! The tune report as a table for people: one column per build (the chain as
//! written, then the proposals), one row per figure; then the constraints of the best
//! proposal with their reasons, the stages not varied and the search's account.

use super::report::TuneReport;
use crate::report::{table_format, Exporter, TableExporter};
use crate::units::{format_si, Level};
use prettytable::{Cell, Row, Table};

impl Exporter<TuneReport> for TableExporter {
    fn export(&self, r: &TuneReport, w: &mut dyn std::io::Write) -> std::io::Result<()> {
        w.write_all(text(r).as_bytes())
    }
}

fn row(cells: Vec<String>) -> Row {
    Row::new(cells.into_iter().map(|c| Cell::new(&c)).collect())
}

fn dbu(vpeak: f64) -> String {
    format!("{:+.1} dBu", Level::from_vpeak(vpeak).dbu())
}

fn text(r: &TuneReport) -> String {
    let mut out = String::new();
    if let Some(t) = &r.title {
        out.push_str(&format!("{t}\n"));
    }
    out.push_str(&format!(
        "Tune for {} ({}); resistors in {}, capacitors in {}\n",
        r.goal, r.goal_description, r.series, r.capacitor_series
    ));
    out.push_str(&format!("varied: {}\n", r.varied.join(", ")));
    for s in &r.not_varied {
        out.push_str(&format!("stage \"{}\" {}\n", s.stage, s.reason));
    }
    if !r.keep.is_empty() {
        out.push_str(&format!("keep: {}\n", r.keep.join("; ")));
    }
    out.push('\n');

    let mut table = Table::new();
    table.set_format(table_format());
    let mut titles = vec![String::new()];
    titles.extend(r.builds.iter().map(|b| b.name.clone()));
    table.set_titles(row(titles));
    let mut add = |label: String, cell: &dyn Fn(&super::report::BuildReport) -> String| {
        let mut cells = vec![label];
        cells.extend(r.builds.iter().map(cell));
        table.add_row(row(cells));
    };
    // Every part any proposal changes, in the order of --vary, with its value in each
    // build.
    let parts: Vec<(String, String)> = r
        .varied
        .iter()
        .filter_map(|part| {
            r.builds
                .iter()
                .flat_map(|b| &b.changes)
                .find(|c| c.part == *part)
                .map(|c| (part.clone(), c.from_code.clone()))
        })
        .collect();
    for (part, written) in &parts {
        add(part.clone(), &|b| {
            b.changes
                .iter()
                .find(|c| c.part == *part)
                .map_or(written.clone(), |c| c.code.clone())
        });
    }
    let first = &r.builds[0];
    for (k, l) in first.loads.iter().enumerate() {
        add(format!("gain to {}", l.id), &|b| {
            format!("{:+.2} dB", b.loads[k].gain_db)
        });
        add(format!("low corner, {}", l.id), &|b| {
            b.loads[k]
                .low_corner_hz
                .map_or("—".into(), |f| format_si(f, "Hz"))
        });
        add(format!("high corner, {}", l.id), &|b| {
            b.loads[k]
                .high_corner_hz
                .map_or("—".into(), |f| format_si(f, "Hz"))
        });
    }
    for (i, s) in first.stages.iter().enumerate() {
        add(format!("{} clips at", s.id), &|b| {
            let st = &b.stages[i];
            match st.clip_toward {
                Some(t) => format!("{} ({})", dbu(st.clip_input_vpeak), t),
                None => "—".into(),
            }
        });
    }
    add("first to clip".into(), &|b| b.first_clip.stage.clone());
    if r.input.is_some() {
        add("headroom".into(), &|b| {
            b.headroom_db.map_or("—".into(), |h| format!("{h:+.1} dB"))
        });
    }
    match r.yield_runs {
        Some(runs) => add(format!("yield ({runs} spread builds)"), &|b| {
            b.yield_share
                .map_or("—".into(), |y| format!("{:.1} %", 100.0 * y))
        }),
        None => add(format!("objective ({})", r.goal), &|b| {
            format!("{:.3}", b.objective)
        }),
    }
    if !r.keep.is_empty() {
        add("every --keep holds".into(), &|b| {
            if b.feasible { "yes" } else { "no" }.into()
        });
    }
    out.push_str(&table.to_string());

    if let Some(best) = r.builds.get(1) {
        if !best.constraints.is_empty() {
            out.push_str(&format!("\n{}:\n", best.name));
            for c in &best.constraints {
                let verdict = if c.holds { "holds" } else { "misses" };
                out.push_str(&format!("  {} {verdict}: {}\n", c.keep, c.reason));
            }
        }
    }
    // What proposal 1 brings that the chain as written had not: the warnings `check`
    // would give it and not the file.
    if let (Some(written), Some(best)) = (r.builds.first(), r.builds.get(1)) {
        let new: Vec<_> = best
            .warnings
            .iter()
            .filter(|w| !written.warnings.contains(w))
            .collect();
        if !new.is_empty() {
            out.push_str(&format!("\nWith {} (not as written):\n", best.name));
            for w in new {
                match &w.stage {
                    Some(s) => out.push_str(&format!("  - stage \"{s}\": {}\n", w.message)),
                    None => out.push_str(&format!("  - {}\n", w.message)),
                }
            }
        }
    }
    let s = &r.search;
    out.push_str(&format!(
        "\nsearch: {} candidate builds evaluated ({} in {} sweep{} of coordinate descent{}, {} in the discrete search over a neighbourhood of {:.0} combinations); stopped because {}\n",
        s.evaluations,
        s.continuous_evaluations,
        s.sweeps,
        if s.sweeps == 1 { "" } else { "s" },
        if s.converged { ", converged" } else { ", not converged" },
        s.discrete_evaluations,
        s.neighbourhood,
        s.stop
    ));
    if let Some(path) = &r.written {
        out.push_str(&format!("proposal 1 written to {path}\n"));
    }
    out
}
