//! The chain-wide standard-value search (`ampchain tune`): the whole chain's parts in
//! an IEC 60063 series, chosen for one objective under constraints, every candidate a
//! full evaluation of the chain (docs/definitions.md "Tune").
//!
//! - [`vary`]: `--vary`, the parts that move and their series values;
//! - [`objective`]: `--goal` and `--keep`, one candidate's score;
//! - [`search`]: continuous optimum, discrete search, polish;
//! - [`spread_yield`]: `--goal yield`, the share of spread builds meeting `--keep`;
//! - [`report`]: the proposals side by side with the chain as written;
//! - [`table`]: the report as a table (the JSON is `JsonExporter`).

pub mod objective;
pub mod report;
pub mod search;
pub mod spread_yield;
pub mod table;
pub mod vary;

pub use objective::{Evaluator, Goal, Objective, Score};
pub use report::TuneReport;
pub use search::{search, Outcome, Settings, Stop};
pub use vary::{SeriesChoice, Variable};

use crate::chain::Chain;

/// The chain as written must plan: the search starts from it (and a chain out of
/// its active region as written usually means a value misread, which no search
/// should paper over). The message names what `plan` says and what to do.
pub fn check_as_written(chain: &Chain) -> Result<(), String> {
    chain.evaluate().map(|_| ()).map_err(|e| {
        format!(
            "the chain as written has no operating point ({e}); expected a chain that plans as written, which tune starts from (re-bias the stage with `ampchain bias` first, or fix the value)"
        )
    })
}

/// The chain-file edits that write `values` (one per variable): every changed part,
/// as its IEC 60062 code.
pub fn edits(vars: &[Variable], values: &[f64]) -> Vec<crate::bias::edit::Edit> {
    vars.iter()
        .zip(values)
        .filter(|(v, x)| v.present != **x)
        .map(|(v, x)| crate::bias::edit::Edit {
            stage: v.stage,
            key: v.name,
            code: crate::bias::code::value_code(*x, v.kind),
        })
        .collect()
}
