//! Large signal: the onset table and the distortion plot, from `sweep`'s engine
//! (`ampchain sweep`, `ampchain plot distortion`).

use super::{escape, figure, table, Context, Section};
use crate::chain::Chain;
use crate::evaluate::Evaluation;
use crate::large_signal::onset::{Onsets, SearchOptions};
use crate::large_signal::report::{onset_notes, onset_rows, MODEL};
use crate::large_signal::{level_steps, LargeSignal, LargeSignalError, LevelResult};
use crate::plot::distortion::distortion_svg;
use crate::plot::DrawError;
use std::fmt::Write;

/// Samples per period in the report: enough for harmonics 2–10 (the v1 record of
/// `sweep` was taken at 256 too), a quarter of `sweep`'s default cost.
pub const REPORT_SAMPLES: usize = 256;
/// Levels on the distortion plot, over `LargeSignal::default_range`.
pub const REPORT_LEVELS: usize = 21;

/// What the section shows: the evaluator (stage names, load-line clip levels), the
/// swept levels and the onsets.
pub struct LargeSignalPart {
    pub ls: LargeSignal,
    pub levels: Vec<LevelResult>,
    pub onsets: Onsets,
}

/// Most stages the report runs the large-signal search for: its cost grows with the
/// square of the stage count (seconds at 50 stages in a release build), and the
/// report is not asked for it on purpose as `sweep` is.
pub const REPORT_MAX_STAGES: usize = 50;

impl LargeSignalPart {
    /// The sweep and the onset search of `chain`, as `sweep` runs them; `watch` sees
    /// the evaluator first (to show progress). Why there are none, in words: a chain
    /// over [`REPORT_MAX_STAGES`], or the engine's error.
    pub fn compute(
        chain: &Chain,
        ev: &Evaluation,
        watch: impl FnOnce(&mut LargeSignal),
    ) -> Result<Self, String> {
        let n = chain.stages.len();
        if n > REPORT_MAX_STAGES {
            return Err(format!(
                "the chain has {n} stages, and the report searches the onsets of at most {REPORT_MAX_STAGES} (the search grows with the square of the stage count); `ampchain sweep` gives them, with its progress shown"
            ));
        }
        let run = || -> Result<Self, LargeSignalError> {
            let mut ls = LargeSignal::new(chain, ev, REPORT_SAMPLES)?;
            watch(&mut ls);
            let (from, to) = ls.default_range();
            let levels = ls.sweep(&level_steps(from, to, REPORT_LEVELS))?;
            let onsets = ls.onsets(&SearchOptions::default())?;
            Ok(LargeSignalPart { ls, levels, onsets })
        };
        run().map_err(|e| e.to_string())
    }
}

pub struct LargeSignalSection;

impl Section for LargeSignalSection {
    fn id(&self) -> &'static str {
        "large-signal"
    }

    fn title(&self) -> &'static str {
        "Large signal: where each stage distorts and clips"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let part = match &cx.large_signal {
            Ok(part) => *part,
            Err(why) => {
                let _ = writeln!(
                    out,
                    "<p>No large-signal figures for this chain: {}.</p>",
                    escape(why)
                );
                return Ok(());
            }
        };
        let _ = writeln!(
            out,
            "<p>Onset levels at the source (EMF), found by bracketing and bisection; {REPORT_SAMPLES} samples per period; {}.</p>",
            escape(MODEL)
        );
        let (titles, rows) = onset_rows(&part.onsets);
        out.push_str(&table(&titles, &rows));
        let (verdicts, flags) = onset_notes(&part.onsets);
        for line in verdicts {
            let _ = writeln!(out, "<p>{}</p>", escape(&line));
        }
        if !flags.is_empty() {
            out.push_str("<p>Where the waveform disagrees with the load lines:</p>\n<ul>\n");
            for f in flags {
                let _ = writeln!(out, "<li>{}</li>", escape(&f));
            }
            out.push_str("</ul>\n");
        }
        let svg = distortion_svg(&part.ls, &part.levels, "THD against input level")?;
        out.push_str(&figure(
            &svg,
            "THD at every stage's output against the source level; a square marks each stage's load-line clip level.",
        ));
        Ok(())
    }
}
