//! The top of the report: the caution, the chain's conditions, the first stage to
//! clip, and every warning of the plan.

use super::{escape, Context, Section};
use crate::plot::DrawError;
use crate::report::table::first_clip_sentence;
use crate::units::format_si;
use crate::warnings::{hazard_caution, ELV_DC_LIMIT};
use std::fmt::Write;

pub struct Summary;

impl Section for Summary {
    fn id(&self) -> &'static str {
        "summary"
    }

    fn title(&self) -> &'static str {
        "Summary, cautions and warnings"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let span = cx.chain.span();
        let caution = if span > ELV_DC_LIMIT {
            hazard_caution(span)
        } else {
            "These numbers are a planning aid, not a safety assessment: mains-powered and high-voltage equipment is built and tested only under the electrical codes in force where you work and with licensed practice.".to_string()
        };
        let _ = writeln!(
            out,
            "<p class=\"caution\"><strong>Caution.</strong> {}</p>",
            escape(&caution)
        );
        let p = cx.plan;
        let rails: Vec<String> = p
            .rails
            .iter()
            .map(|r| format!("{} {}", r.name, format_si(r.voltage, "V")))
            .collect();
        let _ = writeln!(
            out,
            "<p>Rails {}; {:.1} °C; planned input {} rms ({:+.1} dBu) from {}; {}, {}; at midband.</p>",
            escape(&rails.join(", ")),
            p.temperature - crate::device::ZERO_CELSIUS,
            format_si(p.input.vrms, "V"),
            p.input.dbu,
            format_si(p.source.resistance, "Ω"),
            count(p.stages.len(), "stage"),
            count(p.loads.len(), "load")
        );
        let _ = writeln!(
            out,
            "<p><strong>{}.</strong></p>",
            escape(&first_clip_sentence(p))
        );
        if p.warnings.is_empty() {
            out.push_str("<p>No warnings.</p>\n");
        } else {
            out.push_str("<ul class=\"warnings\">\n");
            for w in &p.warnings {
                let who = w
                    .stage
                    .as_ref()
                    .map_or(String::new(), |s| format!("stage \"{s}\": "));
                let _ = writeln!(out, "<li>{}{}</li>", escape(&who), escape(&w.message));
            }
            out.push_str("</ul>\n");
        }
        Ok(())
    }
}

/// "1 stage", "3 stages".
fn count(n: usize, what: &str) -> String {
    if n == 1 {
        format!("1 {what}")
    } else {
        format!("{n} {what}s")
    }
}
