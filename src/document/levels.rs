//! The level diagram of the chain (`ampchain plot levels`).

use super::{figure, Context, Section};
use crate::plot::{levels, DrawError};

pub struct Levels;

impl Section for Levels {
    fn id(&self) -> &'static str {
        "levels"
    }

    fn title(&self) -> &'static str {
        "Level diagram"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let svg = levels::render(cx.chain, cx.plan)?;
        out.push_str(&figure(
            &svg,
            "The level at every node at the planned input, each stage's clip ceiling and the headroom left.",
        ));
        Ok(())
    }
}
