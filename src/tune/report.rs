//! What `ampchain tune` reports: the chain as written and the best proposals side by
//! side (every changed part, each load's gain and corners, each stage's clip level
//! and side, the chain's headroom, the objective), why each `--keep` holds, and how
//! the search went. Every figure of a build comes from the plan report of that build
//! ([`PlanReport::new`]), so a proposal written with `--write` plans to the same bits.

use super::objective::{Evaluator, Objective};
use super::search::Outcome;
use super::vary::{Selection, SeriesChoice, Variable};
use crate::chain::Chain;
use crate::device::Toward;
use crate::report::{FirstClip, LevelReport, PlanReport};
use crate::response::corners::{find_all, SearchRange, SEARCH_FROM, SEARCH_PER_DECADE, SEARCH_TO};
use crate::response::AtFrequency;
use crate::units::Level;
use serde::Serialize;

#[derive(Debug, Clone, Serialize)]
pub struct TuneReport {
    pub title: Option<String>,
    pub goal: &'static str,
    pub goal_description: &'static str,
    /// With `--goal yield`: spread builds per candidate.
    pub yield_runs: Option<usize>,
    pub series: String,
    pub capacitor_series: String,
    /// The planned input level (headroom is counted from it); `None` without one.
    pub input: Option<LevelReport>,
    /// The parts varied, `stage.part`.
    pub varied: Vec<String>,
    /// Stages left alone, and why.
    pub not_varied: Vec<SkippedReport>,
    /// The `--keep` constraints as written.
    pub keep: Vec<String>,
    /// The chain as written first, then the proposals, best first.
    pub builds: Vec<BuildReport>,
    pub search: SearchReport,
    /// The file `--write` wrote proposal 1 into.
    pub written: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SkippedReport {
    pub stage: String,
    pub reason: String,
}

/// One part changed from the chain as written.
#[derive(Debug, Clone, Serialize)]
pub struct ChangeReport {
    pub part: String,
    pub from: f64,
    pub to: f64,
    /// The value as written and as `--write` writes it (IEC 60062 codes).
    pub from_code: String,
    pub code: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct LoadFigures {
    pub id: String,
    pub gain: f64,
    pub gain_db: f64,
    /// The −3 dB corners (Hz); `None` when there is none in 1 mHz … 10 GHz.
    pub low_corner_hz: Option<f64>,
    pub high_corner_hz: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct StageFigures {
    pub id: String,
    pub limit_up: f64,
    pub limit_down: f64,
    pub clip_input_vpeak: f64,
    pub clip_toward: Option<Toward>,
    /// Against the planned input (`None` without one).
    pub headroom_db: Option<f64>,
}

/// One `--keep` for one build: its value and why it holds (or by how much it misses).
#[derive(Debug, Clone, Serialize)]
pub struct ConstraintReport {
    pub keep: String,
    pub value: f64,
    pub holds: bool,
    pub reason: String,
}

#[derive(Debug, Clone, Serialize)]
pub struct BuildReport {
    /// "as written", "proposal 1", …
    pub name: String,
    pub changes: Vec<ChangeReport>,
    /// The objective (see `goal_description`).
    pub objective: f64,
    /// Every `--keep` holds.
    pub feasible: bool,
    pub first_clip: FirstClip,
    /// The first stage to clip's headroom over the planned input (`None` without one).
    pub headroom_db: Option<f64>,
    pub loads: Vec<LoadFigures>,
    pub stages: Vec<StageFigures>,
    pub constraints: Vec<ConstraintReport>,
    /// With `--goal yield`: the share of its spread builds meeting every `--keep`.
    pub yield_share: Option<f64>,
    /// What `check` would warn of in this build at the planned level.
    pub warnings: Vec<crate::warnings::Warning>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SearchReport {
    pub seed: u64,
    pub width: usize,
    pub beam: usize,
    pub kicks: usize,
    /// Coordinate-descent sweeps, and whether they converged.
    pub sweeps: usize,
    pub converged: bool,
    /// Combinations of the discrete neighbourhood.
    pub neighbourhood: f64,
    pub continuous_evaluations: usize,
    pub discrete_evaluations: usize,
    pub evaluations: usize,
    /// Why the search stopped.
    pub stop: String,
}

/// Everything the report is made from.
pub struct Inputs<'a> {
    pub chain: &'a Chain,
    pub selection: &'a Selection,
    pub objective: &'a Objective,
    pub series: SeriesChoice,
    pub level: Option<Level>,
    pub outcome: &'a Outcome,
    pub settings: super::Settings,
    /// With `--goal yield`: the spread builds per candidate, and the share meeting
    /// every `--keep` of each build (the chain as written first).
    pub yields: Option<(usize, Vec<f64>)>,
}

impl TuneReport {
    pub fn new(x: &Inputs) -> TuneReport {
        let vars = &x.selection.variables;
        let present: Vec<f64> = vars.iter().map(|v| v.present).collect();
        let mut builds = vec![build(x, "as written".into(), &present)];
        for (k, f) in x.outcome.best.iter().enumerate() {
            builds.push(build(x, format!("proposal {}", k + 1), &f.values));
        }
        let (goal, goal_description) = match &x.yields {
            None => (x.objective.goal.name(), x.objective.goal.describe()),
            Some((_, shares)) => {
                for (b, share) in builds.iter_mut().zip(shares) {
                    b.objective = *share;
                    b.yield_share = Some(*share);
                }
                ("yield", "the share of spread builds meeting every --keep, of the best builds of a margin search")
            }
        };
        let o = x.outcome;
        TuneReport {
            title: x.chain.title.clone(),
            goal,
            goal_description,
            yield_runs: x.yields.as_ref().map(|(runs, _)| *runs),
            series: x.series.resistors.to_string(),
            capacitor_series: x.series.capacitors.to_string(),
            input: x.level.map(LevelReport::from),
            varied: vars.iter().map(|v| v.label(x.chain)).collect(),
            not_varied: x
                .selection
                .skipped
                .iter()
                .map(|s| SkippedReport {
                    stage: s.stage.clone(),
                    reason: s.reason.clone(),
                })
                .collect(),
            keep: x.objective.keep.iter().map(|r| r.text.clone()).collect(),
            builds,
            search: SearchReport {
                seed: x.settings.seed,
                width: x.settings.width,
                beam: x.settings.beam,
                kicks: x.settings.kicks,
                sweeps: o.sweeps,
                converged: o.converged,
                neighbourhood: o.neighbourhood,
                continuous_evaluations: o.continuous_evaluations,
                discrete_evaluations: o.discrete_evaluations,
                evaluations: o.continuous_evaluations + o.discrete_evaluations,
                stop: o.stop.describe().into(),
            },
            written: None,
        }
    }

    /// When the best build misses a `--keep`: which constraint, by how much, and the
    /// build (for the exit-status-1 message).
    pub fn unmet(&self) -> Option<String> {
        let best = self.builds.get(1)?;
        if best.feasible {
            return None;
        }
        let missed: Vec<String> = best
            .constraints
            .iter()
            .filter(|c| !c.holds)
            .map(|c| format!("--keep \"{}\" ({})", c.keep, c.reason))
            .collect();
        let changes = if best.changes.is_empty() {
            "the chain as written".to_string()
        } else {
            best.changes
                .iter()
                .map(|c| format!("{} {}", c.part, c.code))
                .collect::<Vec<_>>()
                .join(", ")
        };
        Some(format!(
            "no candidate meets every --keep: the closest ({changes}) misses {}; expected a build that meets them all (relax the constraint or vary more parts)",
            missed.join(" and ")
        ))
    }
}

/// The figures of the build with `values`, from its plan report.
fn build(x: &Inputs, name: String, values: &[f64]) -> BuildReport {
    let vars: &[Variable] = &x.selection.variables;
    let mut e = Evaluator::new(x.chain, x.objective, vars);
    let score = e.score(values);
    let row = e.row().to_vec();
    let chain = &e.chain;
    // A proposal always has an operating point (the search ranks builds without one
    // last, and the chain as written has one).
    let ev = chain.evaluate().unwrap_or_else(|_| e.ev.clone());
    let level = x.level.unwrap_or(Level::from_vpeak(1.0));
    let plan = PlanReport::new(chain, &ev, level);
    let mut at = AtFrequency::new(chain, &ev);
    let corners = find_all(
        chain,
        &ev,
        &mut at,
        &SearchRange {
            from: SEARCH_FROM,
            to: SEARCH_TO,
            per_decade: SEARCH_PER_DECADE,
        },
    );
    let headroom = |h: f64| x.level.map(|_| h);
    BuildReport {
        warnings: crate::warnings::collect(chain, &ev, x.level),
        name,
        changes: vars
            .iter()
            .zip(values)
            .filter(|(v, to)| v.present != **to)
            .map(|(v, to)| ChangeReport {
                part: v.label(x.chain),
                from: v.present,
                to: *to,
                from_code: crate::bias::code::value_code(v.present, v.kind),
                code: crate::bias::code::value_code(*to, v.kind),
            })
            .collect(),
        objective: score.value,
        feasible: score.feasible(),
        first_clip: plan.first_clip.clone(),
        headroom_db: headroom(plan.stages[ev.first_clip].headroom_db),
        loads: plan
            .loads
            .iter()
            .zip(&corners)
            .map(|(l, c)| LoadFigures {
                id: l.id.clone(),
                gain: l.gain,
                gain_db: l.gain_db,
                low_corner_hz: c.low.frequency,
                high_corner_hz: c.high.frequency,
            })
            .collect(),
        stages: plan
            .stages
            .iter()
            .map(|s| StageFigures {
                id: s.id.clone(),
                limit_up: s.limit_up,
                limit_down: s.limit_down,
                clip_input_vpeak: s.clip_input_vpeak,
                clip_toward: s.clip_toward,
                headroom_db: headroom(s.headroom_db),
            })
            .collect(),
        constraints: x
            .objective
            .keep
            .iter()
            .map(|r| {
                let value = row[r.column];
                let holds = r.miss(&x.objective.layout, &row) == 0.0;
                let reason = if holds {
                    format!("{} is within {}", r.format(value), r.format_range())
                } else if value.is_nan() {
                    "not found in this build".to_string()
                } else {
                    format!("{} is outside {}", r.format(value), r.format_range())
                };
                ConstraintReport {
                    keep: r.text.clone(),
                    value,
                    holds,
                    reason,
                }
            })
            .collect(),
        yield_share: None,
    }
}
