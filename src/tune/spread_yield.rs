//! `--goal yield`: the share of a spread run's builds that meet every `--keep`
//! (docs/definitions.md "Tune"). A spread run costs thousands of evaluations, so only
//! the best [`CANDIDATES`] builds of a margin search (every `--keep` as far inside
//! its bounds as it goes) are run, each as the chain file
//! `--write` would write (its tolerances kept), and ranked by their share.

use super::search::{rank, Outcome};
use super::vary::Variable;
use super::Objective;
use crate::chain::Chain;
use crate::spread::trials::monte_carlo;
use crate::spread::SpreadModel;

/// Builds of the headroom search whose yield is measured.
pub const CANDIDATES: usize = 8;
/// Spread builds per candidate.
pub const DEFAULT_RUNS: usize = 2000;

/// The share of `runs` spread builds (seeded by `seed`) of the chain text `text` with
/// `values` written that meet every constraint of `objective`.
pub fn share(
    text: &str,
    vars: &[Variable],
    values: &[f64],
    objective: &Objective,
    runs: usize,
    seed: u64,
) -> Result<f64, String> {
    let edited =
        crate::bias::edit::apply(text, &super::edits(vars, values)).map_err(|e| e.to_string())?;
    let spec = crate::spec::parse_chain_text(&edited).map_err(|e| e.to_string())?;
    let chain = Chain::from_spec(&spec).map_err(|e| e.to_string())?;
    let model = SpreadModel::build(&spec, &chain, None, objective.measure.at_frequency())
        .map_err(|e| e.to_string())?;
    if model.spreads.is_empty() {
        return Err("found nothing that spreads, expected a \"tolerance\" section or values with tolerances (the share of builds meeting --keep needs them)".into());
    }
    let trials = monte_carlo(&chain, &model, &objective.measure, runs, seed, &|_| {});
    let mut row = vec![0.0; trials.layout.width()];
    let mut met = 0;
    for t in 0..runs {
        trials.row_into(t, &mut row);
        if objective.keep.iter().all(|r| r.met(&trials.layout, &row)) {
            met += 1;
        }
    }
    Ok(met as f64 / runs as f64)
}

/// The chain of the text `text` and what spreads in it; an error when nothing does.
pub fn model_of(text: &str, objective: &Objective) -> Result<(Chain, SpreadModel), String> {
    let spec = crate::spec::parse_chain_text(text).map_err(|e| e.to_string())?;
    let chain = Chain::from_spec(&spec).map_err(|e| e.to_string())?;
    let model = SpreadModel::build(&spec, &chain, None, objective.measure.at_frequency())
        .map_err(|e| e.to_string())?;
    if model.spreads.is_empty() {
        return Err("found nothing that spreads, expected a \"tolerance\" section or values with tolerances (the share of builds meeting --keep needs them)".into());
    }
    Ok((chain, model))
}

/// Measure the yield of the chain as written and of every build of `outcome`, then
/// rank the builds by it (ties in the search's order) and keep `show`. Returns the
/// shares, the chain as written first, then the kept builds in their new order.
pub fn rank_by_yield(
    text: &str,
    vars: &[Variable],
    objective: &Objective,
    outcome: &mut Outcome,
    show: usize,
    runs: usize,
    seed: u64,
) -> Result<Vec<f64>, String> {
    let present: Vec<f64> = vars.iter().map(|v| v.present).collect();
    let as_written = share(text, vars, &present, objective, runs, seed)?;
    let mut measured: Vec<(f64, super::search::Found)> = Vec::new();
    for f in outcome.best.drain(..) {
        measured.push((share(text, vars, &f.values, objective, runs, seed)?, f));
    }
    measured.sort_by(|(a, fa), (b, fb)| b.total_cmp(a).then(rank(fa, fb)));
    measured.truncate(show);
    let mut shares = vec![as_written];
    for (s, f) in measured {
        shares.push(s);
        outcome.best.push(f);
    }
    Ok(shares)
}
