//! The chain file itself, as read, at the end of the report.

use super::{escape, Context, Section};
use crate::plot::DrawError;
use std::fmt::Write;

pub struct ChainFile;

impl Section for ChainFile {
    fn id(&self) -> &'static str {
        "chain-file"
    }

    fn title(&self) -> &'static str {
        "The chain file"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let _ = writeln!(out, "<pre>{}</pre>", escape(cx.text));
        Ok(())
    }
}
