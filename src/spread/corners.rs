//! The worst-case pass: builds with every spread at one of its limits.
//!
//! With n spreads and n ≤ [`FULL_CORNER_LIMIT`], all 2^n corners are evaluated. Beyond
//! that, a reduced set: every spread alone at each limit with the others nominal
//! (2n builds), then, for each reported output (the gain to every load and the
//! chain's clip input level), the two corners that push it furthest by the signs of
//! its one-at-a-time sensitivities (each spread at the limit that raised the output,
//! or the one that lowered it; nominal where it made no difference). For quantities
//! that are monotone in every spread, the full set brackets every build exactly; the
//! reduced set does so to first order.

use super::measure::Measure;
use super::model::SpreadModel;
use super::trials::{Layout, Trials, Worker};
use crate::chain::Chain;
use rayon::prelude::*;
use serde::Serialize;

/// Largest number of spreads for which all 2^n corners are evaluated (4096 builds).
pub const FULL_CORNER_LIMIT: usize = 12;

/// Where a spread sits in a corner.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum At {
    Min,
    Nominal,
    Max,
}

/// The corners evaluated and their records (row `c` for corner `c`).
#[derive(Debug, Clone)]
pub struct CornerPass {
    /// True when all 2^n corners were evaluated.
    pub full: bool,
    pub settings: Vec<Vec<At>>,
    pub records: Trials,
}

/// The values of a corner's spreads.
fn values(model: &SpreadModel, setting: &[At]) -> Vec<f64> {
    model
        .spreads
        .iter()
        .zip(setting)
        .map(|(s, at)| match at {
            At::Min => s.min,
            At::Nominal => s.nominal,
            At::Max => s.max,
        })
        .collect()
}

/// Evaluate the builds of `settings` in parallel; the records row by row, row `c`
/// for corner `c`.
fn evaluate(
    chain: &Chain,
    model: &SpreadModel,
    measure: &Measure,
    settings: &[Vec<At>],
) -> Vec<f64> {
    let w = Layout::new(chain, measure).width();
    let mut rows = vec![0.0; settings.len() * w];
    let builds: Vec<Vec<f64>> = settings.iter().map(|s| values(model, s)).collect();
    rows.par_chunks_mut(w).zip(builds.par_iter()).for_each_init(
        || Worker::new(chain, model, measure),
        |worker, (row, build)| worker.evaluate(build, row),
    );
    rows
}

/// Run the corner pass.
pub fn run(chain: &Chain, model: &SpreadModel, measure: &Measure) -> CornerPass {
    let n = model.spreads.len();
    let layout = Layout::new(chain, measure);
    let w = layout.width();
    if n <= FULL_CORNER_LIMIT {
        let settings: Vec<Vec<At>> = (0..1usize << n)
            .map(|c| {
                (0..n)
                    .map(|j| if (c >> j) & 1 == 1 { At::Max } else { At::Min })
                    .collect()
            })
            .collect();
        let rows = evaluate(chain, model, measure, &settings);
        return CornerPass {
            full: true,
            settings,
            records: Trials::from_rows(layout, &rows),
        };
    }

    // One at a time: corner 2j has spread j at its minimum, 2j + 1 at its maximum.
    let mut settings: Vec<Vec<At>> = (0..n)
        .flat_map(|j| {
            [At::Min, At::Max].map(|at| {
                let mut s = vec![At::Nominal; n];
                s[j] = at;
                s
            })
        })
        .collect();
    let mut rows = evaluate(chain, model, measure, &settings);
    let row = |c: usize| &rows[c * w..(c + 1) * w];
    let status = layout.status();
    let mut outputs: Vec<usize> = (0..layout.loads)
        .map(|k| layout.load_gain(k))
        .chain([layout.chain_clip()])
        .collect();
    if layout.band {
        outputs
            .extend((0..layout.loads).flat_map(|k| [layout.low_corner(k), layout.high_corner(k)]));
    }
    let mut extra = Vec::new();
    for &c in &outputs {
        let up: Vec<At> = (0..n)
            .map(|j| {
                let (lo, hi) = (row(2 * j), row(2 * j + 1));
                // (A corner not found is NaN: no direction.)
                let flat = hi[c] == lo[c] || hi[c].is_nan() || lo[c].is_nan();
                if lo[status] >= 0.0 || hi[status] >= 0.0 || flat {
                    At::Nominal
                } else if hi[c] > lo[c] {
                    At::Max
                } else {
                    At::Min
                }
            })
            .collect();
        let down = up
            .iter()
            .map(|at| match at {
                At::Min => At::Max,
                At::Max => At::Min,
                At::Nominal => At::Nominal,
            })
            .collect();
        extra.push(up);
        extra.push(down);
    }
    rows.extend(evaluate(chain, model, measure, &extra));
    settings.extend(extra);
    CornerPass {
        full: false,
        records: Trials::from_rows(layout, &rows),
        settings,
    }
}

/// Lowest and highest value of column `c` over the corners that evaluated, with the
/// corner that gives each (the first such corner on ties).
pub fn extremes(pass: &CornerPass, c: usize) -> Option<((f64, usize), (f64, usize))> {
    let mut best: Option<((f64, usize), (f64, usize))> = None;
    for (i, &x) in pass.records.column(c).iter().enumerate() {
        if !pass.records.good(i) {
            continue;
        }
        if x.is_nan() {
            continue;
        }
        best = Some(match best {
            None => ((x, i), (x, i)),
            Some((lo, hi)) => (
                if x < lo.0 { (x, i) } else { lo },
                if x > hi.0 { (x, i) } else { hi },
            ),
        });
    }
    best
}
