//! The table for people: one row per stage, the loads, the first stage to clip in a
//! sentence, and the warnings.

use super::{Exporter, PlanReport};
use crate::units::format_si;
use prettytable::{format, Cell, Row, Table};

pub struct TableExporter;

pub(super) fn dbu(x: f64) -> String {
    if x.is_finite() {
        format!("{x:+.1} dBu")
    } else {
        "—".into()
    }
}

pub(super) fn db(x: f64) -> String {
    if x.is_finite() {
        format!("{x:+.1} dB")
    } else {
        "—".into()
    }
}

/// Box-drawn outline and title rule, no rules between rows.
pub fn table_format() -> format::TableFormat {
    format::FormatBuilder::new()
        .column_separator('│')
        .borders('│')
        .separators(
            &[format::LinePosition::Top],
            format::LineSeparator::new('─', '┬', '┌', '┐'),
        )
        .separators(
            &[format::LinePosition::Title],
            format::LineSeparator::new('─', '┼', '├', '┤'),
        )
        .separators(
            &[format::LinePosition::Bottom],
            format::LineSeparator::new('─', '┴', '└', '┘'),
        )
        .padding(1, 1)
        .build()
}

/// A swing each way from the operating point, "+2.33 V / -19.2 V": the same
/// hyphen-minus as every other number in a table.
pub fn up_down(up: f64, down: f64) -> String {
    format!("+{} / -{}", format_si(up, "V"), format_si(down, "V"))
}

/// A gain with four significant digits.
pub(super) fn gain(x: f64) -> String {
    if x != 0.0 && !(1e-3..1e6).contains(&x.abs()) {
        return format!("{x:.3e} V/V");
    }
    let digits = if x.abs() >= 100.0 {
        1
    } else if x.abs() >= 10.0 {
        2
    } else {
        3
    };
    format!("{x:.digits$} V/V")
}

/// One table of titles and rows in the format of every text table.
pub(super) fn write_table(
    out: &mut dyn std::io::Write,
    (titles, rows): (Vec<String>, Vec<Vec<String>>),
) -> std::io::Result<()> {
    let mut t = Table::new();
    t.set_format(table_format());
    t.set_titles(row(titles));
    for cells in rows {
        t.add_row(row(cells));
    }
    t.print(out)?;
    Ok(())
}

pub(super) fn row(cells: Vec<String>) -> Row {
    Row::new(cells.into_iter().map(|c| Cell::new(&c)).collect())
}

impl Exporter for TableExporter {
    fn export(&self, r: &PlanReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        if let Some(t) = &r.title {
            writeln!(out, "{t}")?;
        }
        let at = match r.frequency {
            Some(f) => format!("at {}", format_si(f, "Hz")),
            None => "midband".to_string(),
        };
        let rails = match r.rails.as_slice() {
            [one] if one.name == "supply" => format!("supply {}", format_si(one.voltage, "V")),
            rails => {
                let each: Vec<String> = rails
                    .iter()
                    .map(|x| format!("{} {}", x.name, format_si(x.voltage, "V")))
                    .collect();
                format!("rails {}", each.join(", "))
            }
        };
        writeln!(
            out,
            "{rails}, {:.1} °C, planned input {} rms ({}) from {}; {at}",
            r.temperature - crate::device::ZERO_CELSIUS,
            format_si(r.input.vrms, "V"),
            dbu(r.input.dbu),
            format_si(r.source.resistance, "Ω"),
        )?;
        writeln!(out)?;

        let stages = super::noise::with_noise_column(r, stage_rows(r));
        let loads = super::noise::with_noise_column(r, load_rows(r));
        let mut tables = vec![stages, loads];
        if !r.loops.is_empty() {
            tables.push(loop_table(&r.loops));
        }
        for table in tables {
            write_table(out, table)?;
            writeln!(out)?;
        }

        writeln!(out, "{}.", first_clip_sentence(r))?;
        super::noise::write_snr_lines(r, out)?;
        write_warnings(out, &r.warnings)
    }
}

/// One row per feedback loop: its ends, T, A_∞, A_0, the closed-loop gain, the
/// desensitivity and the margins ("—" where the scan finds no crossing).
pub fn loop_table(loops: &[super::LoopReport]) -> (Vec<String>, Vec<Vec<String>>) {
    let titles = [
        "loop",
        "into",
        "return ratio T",
        "A_∞",
        "A_0",
        "closed loop",
        "1 + T",
        "phase margin",
        "gain margin",
    ];
    let rows = loops
        .iter()
        .map(|l| {
            vec![
                format!("{} → {}", l.from, l.to),
                l.into.to_string(),
                format!("{:.4}", l.return_ratio),
                l.asymptotic_gain.map_or("—".into(), gain),
                gain(l.direct_gain),
                gain(l.closed_loop_gain),
                db(l.desensitivity_db),
                l.phase_margin_deg
                    .map_or("—".into(), |m| format!("{m:.1}°")),
                l.gain_margin_db.map_or("—".into(), db),
            ]
        })
        .collect();
    (titles.iter().map(|t| t.to_string()).collect(), rows)
}

/// The stage table's titles; the two Q-point columns name the quantities of every
/// device family in the chain (a JFET's I_D, V_DS; an op-amp's output pin I_out, V_out).
const fn stage_titles(q_current: &'static str, q_voltage: &'static str) -> [&'static str; 11] {
    [
        "stage",
        "type",
        q_current,
        q_voltage,
        "r_in",
        "load",
        "gain",
        "output (rms)",
        "limit up / down",
        "headroom",
        "clips at input",
    ]
}
const STAGE_TITLES: [&str; 11] = stage_titles("I_C", "V_CE");
const STAGE_TITLES_WITH_JFET: [&str; 11] = stage_titles("I_C / I_D", "V_CE / V_DS");
const STAGE_TITLES_WITH_OPAMP: [&str; 11] = stage_titles("I_C / I_out", "V_CE / V_out");
const STAGE_TITLES_WITH_BOTH: [&str; 11] = stage_titles("I_C / I_D / I_out", "V_CE / V_DS / V_out");

/// The stage table: its column titles and one row of cells per stage (the text table
/// and the design report show the same cells).
pub fn stage_rows(r: &PlanReport) -> (&'static [&'static str], Vec<Vec<String>>) {
    // A chain with a JFET names both devices' quantities in the Q-point columns.
    let jfet = r.stages.iter().any(|s| {
        s.operating_point
            .as_ref()
            .is_some_and(|q| q.get("i_d").is_some())
    });
    let opamp = r.stages.iter().any(|s| {
        s.operating_point
            .as_ref()
            .is_some_and(|q| q.get("v_out").is_some())
    });
    let titles: &'static [&'static str] = match (jfet, opamp) {
        (false, false) => &STAGE_TITLES,
        (true, false) => &STAGE_TITLES_WITH_JFET,
        (false, true) => &STAGE_TITLES_WITH_OPAMP,
        (true, true) => &STAGE_TITLES_WITH_BOTH,
    };
    let rows = r
        .stages
        .iter()
        .map(|s| {
            // A stage without a device (passive) has no Q point and never clips.
            let device = s.device.is_some();
            let or_dash = |text: String| if device { text } else { "—".to_string() };
            vec![
                s.id.clone(),
                s.kind.replace('_', " "),
                or_dash(format_si(s.op.i_c, "A")),
                // An op-amp's pin voltage (kept in `v_c`) in place of a V_CE.
                or_dash(
                    match s.operating_point.as_ref().and_then(|q| q.get("v_out")) {
                        Some(v_out) => format_si(v_out, "V"),
                        None => format_si(s.op.v_ce, "V"),
                    },
                ),
                format_si(s.r_in, "Ω"),
                format_si(s.load, "Ω"),
                format!("{} ({})", gain(s.gain), db(s.gain_db)),
                format!("{} ({})", format_si(s.output_vrms, "V"), dbu(s.output_dbu)),
                or_dash(up_down(s.limit_up, s.limit_down)),
                db(s.headroom_db),
                match s.clip_toward {
                    Some(toward) => format!(
                        "{} ({toward})",
                        dbu(crate::units::Level::from_vrms(s.clip_input_vrms).dbu()),
                    ),
                    None => "—".to_string(),
                },
            ]
        })
        .collect();
    (titles, rows)
}

/// The load table: titles and one row per load.
pub fn load_rows(r: &PlanReport) -> (&'static [&'static str], Vec<Vec<String>>) {
    let titles = &[
        "load",
        "driven by",
        "resistance",
        "overall gain",
        "level (rms)",
    ];
    let rows = r
        .loads
        .iter()
        .map(|load| {
            vec![
                load.id.clone(),
                load.from.clone(),
                format_si(load.resistance, "Ω"),
                format!("{} ({})", gain(load.gain), db(load.gain_db)),
                format!(
                    "{} ({})",
                    format_si(load.output_vrms, "V"),
                    dbu(load.output_dbu)
                ),
            ]
        })
        .collect();
    (titles, rows)
}

/// "First to clip: stage …, toward …, at … at the source; the planned input leaves …"
/// (without the full stop).
pub fn first_clip_sentence(r: &PlanReport) -> String {
    let fc = &r.first_clip;
    if !fc.input_vrms.is_finite() {
        return "No stage clips: the chain has no transistor".to_string();
    }
    let headroom = r
        .stages
        .iter()
        .find(|s| s.id == fc.stage)
        .map(|s| s.headroom_db)
        .unwrap_or(f64::NAN);
    let verdict = if headroom >= 0.0 {
        format!("the planned input leaves {headroom:.1} dB of headroom")
    } else {
        format!(
            "the planned input drives it {:.1} dB past clipping",
            -headroom
        )
    };
    format!(
        "First to clip: stage \"{}\", toward {}, at {} rms ({} peak, {}) at the source; {verdict}",
        fc.stage,
        fc.toward,
        format_si(fc.input_vrms, "V"),
        format_si(fc.input_vpeak, "V"),
        dbu(fc.input_dbu),
    )
}

/// The warnings under a report, one line each, after a blank line (nothing when none).
pub(super) fn write_warnings(
    out: &mut dyn std::io::Write,
    warnings: &[crate::warnings::Warning],
) -> std::io::Result<()> {
    if warnings.is_empty() {
        return Ok(());
    }
    writeln!(out)?;
    writeln!(out, "Warnings:")?;
    for w in warnings {
        match &w.stage {
            Some(s) => writeln!(out, "  - stage \"{s}\": {}", w.message)?,
            None => writeln!(out, "  - {}", w.message)?,
        }
    }
    Ok(())
}
