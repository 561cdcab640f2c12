//! Spread: how far component tolerances, device spread and temperature move a
//! chain's operating points, gains and headroom, by Monte Carlo and by corners.
//!
//! The chain file is parsed and validated once; [`SpreadModel`] lists what spreads
//! (a flat list of parameter, limits and distribution); every worker thread keeps
//! one copy of the chain and one [`crate::Evaluation`] and writes each build's values
//! into them in place. Each trial draws from its own random stream, derived from the
//! seed and the trial's index, and its record goes to the row of that trial: results
//! depend on the seed alone, never on the number of threads.

pub mod corners;
pub mod measure;
pub mod model;
pub mod require;
pub mod sample;
pub mod stats;
pub mod trials;

pub use corners::{CornerPass, FULL_CORNER_LIMIT};
pub use measure::Measure;
pub use model::{Param, Spread, SpreadModel};
pub use require::Requirement;
pub use stats::Stats;
pub use trials::{Layout, Trials};

use crate::chain::Chain;
use crate::dc::DcError;
use crate::evaluate::Evaluation;

/// Everything a spread run computed.
#[derive(Debug, Clone)]
pub struct SpreadRun {
    pub model: SpreadModel,
    pub measure: Measure,
    pub seed: u64,
    /// The record of the chain as planned (the file's values at its temperature).
    pub nominal: Vec<f64>,
    pub trials: Trials,
    pub corners: CornerPass,
    /// Wall-clock time of the Monte Carlo pass, in seconds (not part of any report,
    /// which depends on the seed alone).
    pub monte_carlo_seconds: f64,
}

/// The nominal record: what `plan` computes (at the measured frequency), in the
/// layout of a trial.
pub fn nominal_record(chain: &Chain, measure: &Measure) -> Result<Vec<f64>, DcError> {
    let mut ev = Evaluation::new(chain);
    ev.run(chain, measure.freq)?;
    let layout = Layout::new(chain, measure);
    let mut row = vec![0.0; layout.width()];
    trials::record(chain, &layout, Ok(()), &ev, &mut row);
    let mut search = measure::BandSearch::new(chain);
    let mut corners = vec![[None; 2]; chain.loads.len()];
    trials::record_band(
        chain,
        &layout,
        measure,
        &mut search,
        &mut corners,
        &ev,
        &mut row,
    );
    trials::record_noise(chain, &layout, measure, &mut row);
    trials::record_extra(chain, &layout, measure, &ev, &mut row);
    Ok(row)
}

/// Run `runs` Monte Carlo trials from `seed` and the corner pass, each build
/// measuring `measure`, on the current rayon pool. `progress` is told of finished trials. Fails when the nominal chain
/// has no forward-active operating point (as `plan` would).
pub fn run(
    chain: &Chain,
    model: SpreadModel,
    measure: Measure,
    runs: usize,
    seed: u64,
    progress: &(dyn Fn(u64) + Sync),
) -> Result<SpreadRun, DcError> {
    let nominal = nominal_record(chain, &measure)?;
    let started = std::time::Instant::now();
    let trials = trials::monte_carlo(chain, &model, &measure, runs, seed, progress);
    let monte_carlo_seconds = started.elapsed().as_secs_f64();
    let corners = corners::run(chain, &model, &measure);
    Ok(SpreadRun {
        model,
        measure,
        seed,
        nominal,
        trials,
        corners,
        monte_carlo_seconds,
    })
}
