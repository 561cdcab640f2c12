//! The plan: the stage and load tables exactly as `ampchain plan` prints them.

use super::{table, Context, Section};
use crate::plot::DrawError;
use crate::report::table::{load_rows, stage_rows};

pub struct Plan;

impl Section for Plan {
    fn id(&self) -> &'static str {
        "plan"
    }

    fn title(&self) -> &'static str {
        "Operating points, gains and headroom"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let (titles, rows) = stage_rows(cx.plan);
        out.push_str(&table(titles, &rows));
        let (titles, rows) = load_rows(cx.plan);
        out.push_str(&table(titles, &rows));
        out.push_str("<p>Definitions: docs/definitions.md of the ampchain repository (r_in with the real load attached, limits on the AC load line or at the transistor's region edges, clip levels at the source).</p>\n");
        Ok(())
    }
}
