//! Spread (`report --spread N`): what spreads, the statistics over the builds, first
//! to clip, corners, and the histograms (`ampchain spread`).

use super::{escape, figure, table, Context, Section};
use crate::plot::DrawError;
use crate::report::spread::table::{heading, not_sampled, notes, spread_rows, stats_rows};
use crate::report::spread::SpreadReport;
use std::fmt::Write;

/// What the section shows: the report of the run and its histograms (SVG).
pub struct SpreadPart {
    pub report: SpreadReport,
    pub histograms: String,
}

pub struct Spread;

impl Section for Spread {
    fn id(&self) -> &'static str {
        "spread"
    }

    fn title(&self) -> &'static str {
        "Spread over tolerances, devices and temperature"
    }

    fn applies(&self, cx: &Context) -> bool {
        cx.spread.is_some()
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let Some(part) = cx.spread else {
            return Ok(());
        };
        let r = &part.report;
        let _ = writeln!(out, "<p>{}.</p>", escape(&heading(r)));
        let (titles, rows) = spread_rows(r);
        out.push_str(&table(&titles, &rows));
        if !r.not_sampled.is_empty() {
            let _ = writeln!(out, "<p>{}</p>", escape(&not_sampled(r)));
        }
        let (titles, rows) = stats_rows(r);
        out.push_str(&table(&titles, &rows));
        // The corner lines are indented under their heading: kept as written.
        let _ = writeln!(
            out,
            "<pre class=\"notes\">{}</pre>",
            escape(&notes(r).join("\n"))
        );
        out.push_str(&figure(
            &part.histograms,
            "Histograms over the builds; the red line marks the nominal value (the plan).",
        ));
        Ok(())
    }
}
