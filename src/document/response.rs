//! The frequency response: the Bode plot, each load's corners and what sets them
//! (`ampchain response`).

use super::{escape, figure, table, Context, Section};
use crate::plot::bode::bode_svg;
use crate::plot::DrawError;
use crate::report::response_table::{
    contribution_rows, contribution_titles, HIGH_SHARE, LOW_SHARE,
};
use crate::units::format_si;
use std::fmt::Write;

pub struct Response;

impl Section for Response {
    fn id(&self) -> &'static str {
        "response"
    }

    fn title(&self) -> &'static str {
        "Frequency response and what sets its corners"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let r = cx.response;
        out.push_str(&figure(
            &bode_svg(r)?,
            &format!(
                "Gain and phase from the source EMF to each load, {} to {}.",
                format_si(r.sweep.from, "Hz"),
                format_si(r.sweep.to, "Hz")
            ),
        ));
        for load in &r.loads {
            let _ = writeln!(out, "<h3>Load \"{}\"</h3>", escape(&load.id));
            for (corner, share) in [
                (&load.low_corner, LOW_SHARE),
                (&load.high_corner, HIGH_SHARE),
            ] {
                let _ = writeln!(out, "<p>{}.</p>", escape(&corner.summary));
                if !corner.contributions.is_empty() {
                    let rows = contribution_rows(&corner.contributions);
                    out.push_str(&table(&contribution_titles(share), &rows));
                }
            }
        }
        Ok(())
    }
}
