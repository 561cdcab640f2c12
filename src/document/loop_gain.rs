//! Feedback loops: each loop's figures (T, A_∞, A_0, closed-loop gain, desensitivity,
//! margins) and the loop-gain Bode plot (docs/definitions.md "Feedback links").

use super::{escape, figure, table, Context, Section};
use crate::plot::loop_gain::loop_gain_svg;
use crate::plot::DrawError;
use crate::report::table::loop_table;
use std::fmt::Write;

pub struct LoopGain;

impl Section for LoopGain {
    fn id(&self) -> &'static str {
        "loops"
    }

    fn title(&self) -> &'static str {
        "Feedback loops: loop gain and margins"
    }

    fn applies(&self, cx: &Context) -> bool {
        !cx.response.loops.is_empty()
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let (titles, rows) = loop_table(&cx.plan.loops);
        let titles: Vec<&str> = titles.iter().map(String::as_str).collect();
        out.push_str(&table(&titles, &rows));
        let _ = writeln!(
            out,
            "<p>{}</p>",
            escape(
                "T is Bode's return ratio of the g_m of the loop's first device; the closed-loop gain is A_∞·T/(1 + T) + A_0/(1 + T). The phase margin is read where |T| crosses 1 (0 dB), the gain margin where the phase of T crosses 180°."
            )
        );
        out.push_str(&figure(
            &loop_gain_svg(cx.response)?,
            "Magnitude and phase of the return ratio T of every loop over the response sweep.",
        ));
        Ok(())
    }
}
