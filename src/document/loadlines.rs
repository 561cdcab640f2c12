//! Every stage's load-line chart (`ampchain plot loadlines`).

use super::{figure, Context, Section};
use crate::plot::{loadlines, DrawError};

pub struct LoadLines;

impl Section for LoadLines {
    fn id(&self) -> &'static str {
        "loadlines"
    }

    fn title(&self) -> &'static str {
        "Load lines of every stage"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        for (i, s) in cx.plan.stages.iter().enumerate() {
            // A passive stage has no load lines.
            if s.device.is_none() {
                continue;
            }
            // An op-amp stage: its transfer chart instead.
            if cx.chain.device_of(i).opamp.is_some() {
                let svg = crate::plot::transfer::render(cx.chain, cx.plan, i)?;
                out.push_str(&figure(
                    &svg,
                    &format!(
                        "Stage \"{}\": output against input, the rail limits and the planned swing.",
                        s.id
                    ),
                ));
                continue;
            }
            let svg = loadlines::render(cx.chain, cx.ev, cx.plan, i)?;
            out.push_str(&figure(
                &svg,
                &format!(
                    "Stage \"{}\": output curves, DC and AC load lines, Q point and the planned swing.",
                    s.id
                ),
            ));
        }
        Ok(())
    }
}
