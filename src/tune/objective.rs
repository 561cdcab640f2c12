//! What a search maximises (`--goal`) under the constraints it keeps (`--keep`), and
//! the one evaluation of a candidate build both come from (docs/definitions.md
//! "Tune").
//!
//! Every candidate is one [`Evaluation::run`] of the parsed chain with the varied
//! parts written in place (parse once, evaluate many); a `--keep` reads the same record
//! `spread --require` reads ([`crate::spread::trials::record`]).

use super::vary::Variable;
use crate::chain::Chain;
use crate::evaluate::Evaluation;
use crate::network::Freq;
use crate::spread::measure::{BandSearch, Measure, NoiseMeasure};
use crate::spread::trials::{record, record_band, record_extra, record_noise, Layout};
use crate::spread::Requirement;

/// The objective (`--goal`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Goal {
    /// The chain's clip level: the lowest clip input level of any stage, in dB re 1 V
    /// peak at the source (more is better).
    Headroom,
    /// Every stage centred: the worst stage's smaller swing limit over its larger one,
    /// in dB (0 dB: every stage's limits equal).
    Swing,
    /// The lowest equivalent input noise: minus the EIN at the first load over
    /// 20 Hz … 20 kHz, unweighted, in dBu (`noise`'s default band).
    Noise,
    /// Every `--keep` as far inside its bounds as it goes: the smallest margin
    /// ([`Requirement::margin`]), in per cent of the bound.
    Margin,
}

impl Goal {
    pub fn name(self) -> &'static str {
        match self {
            Goal::Headroom => "headroom",
            Goal::Swing => "swing",
            Goal::Noise => "noise",
            Goal::Margin => "margin",
        }
    }

    /// What the objective's figure is, for reports.
    pub fn describe(self) -> &'static str {
        match self {
            Goal::Headroom => "the chain's clip level at the source, dB re 1 V peak",
            Goal::Swing => "the worst stage's smaller swing limit over its larger one, dB",
            Goal::Noise => "minus the EIN at the first load, 20 Hz … 20 kHz, dBu",
            Goal::Margin => "the smallest margin of any --keep inside its bounds, % of the bound",
        }
    }

    /// The objective of an evaluated chain (see the variants); `row` is its record
    /// in `layout` (read for the noise and the margins of `keep`).
    pub fn value(
        self,
        chain: &Chain,
        ev: &Evaluation,
        keep: &[Requirement],
        layout: &Layout,
        row: &[f64],
    ) -> f64 {
        match self {
            Goal::Margin => {
                100.0
                    * keep
                        .iter()
                        .map(|r| r.margin(layout, row))
                        .fold(f64::INFINITY, f64::min)
            }
            Goal::Noise => -crate::units::Level::from_vrms(row[layout.ein(0)]).dbu(),
            Goal::Headroom => 20.0 * ev.headroom[ev.first_clip].clip_input_vpeak.log10(),
            Goal::Swing => (0..chain.stages.len())
                .filter(|i| chain.stages[*i].device.is_some())
                .map(|i| {
                    let s = ev.headroom[i].swing;
                    20.0 * (s.limit_up.min(s.limit_down) / s.limit_up.max(s.limit_down)).log10()
                })
                .fold(f64::INFINITY, f64::min),
        }
    }
}

/// Below every feasible merit: a candidate that misses a `--keep` ranks by how far it
/// misses, under every one that meets them all.
const INFEASIBLE: f64 = -1e12;

/// The result of one candidate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Score {
    /// The objective (NaN for a build without an operating point).
    pub value: f64,
    /// Sum of every `--keep`'s relative miss ([`Requirement::miss`]): 0 when all hold,
    /// ∞ for a build without an operating point.
    pub miss: f64,
}

impl Score {
    pub const FAILED: Score = Score {
        value: f64::NAN,
        miss: f64::INFINITY,
    };

    /// One number to rank by, larger better: the objective when every constraint
    /// holds, else far below by the miss (scaled, −10¹²·(1 + miss), not offset: an
    /// offset of 10¹² would round misses apart by less than 10⁻⁴ to one merit); −∞
    /// without an operating point.
    pub fn merit(&self) -> f64 {
        if self.miss == 0.0 && self.value.is_finite() {
            self.value
        } else if self.miss.is_finite() {
            (INFEASIBLE * (1.0 + self.miss)).max(f64::MIN)
        } else {
            f64::NEG_INFINITY
        }
    }

    pub fn feasible(&self) -> bool {
        self.miss == 0.0 && self.value.is_finite()
    }
}

/// The goal and the constraints, with what their records need.
#[derive(Debug, Clone)]
pub struct Objective {
    pub goal: Goal,
    pub keep: Vec<Requirement>,
    pub layout: Layout,
    pub measure: Measure,
}

impl Objective {
    /// An objective without constraints.
    pub fn new(chain: &Chain, goal: Goal) -> Objective {
        let mut measure = Measure::MIDBAND;
        measure.noise = Objective::noise_measure(goal);
        Objective {
            goal,
            keep: Vec::new(),
            layout: Layout::new(chain, &measure),
            measure,
        }
    }
}

impl Objective {
    /// What a goal needs measured of every build besides `plan`'s figures.
    pub fn noise_measure(goal: Goal) -> Option<NoiseMeasure> {
        (goal == Goal::Noise).then_some(NoiseMeasure {
            band: crate::noise::DEFAULT_BAND,
            weighting: crate::noise::Weighting::None,
            planned_vrms: None,
        })
    }

    /// Whether a build's record is needed (constraints, or the noise).
    fn records(&self) -> bool {
        !self.keep.is_empty() || self.measure.noise.is_some()
    }
}

/// One worker's copy of the chain and its buffers: writes a candidate's values into
/// the chain and scores it. Nothing is allocated per candidate.
pub struct Evaluator<'a> {
    objective: &'a Objective,
    variables: &'a [Variable],
    pub chain: Chain,
    pub ev: Evaluation,
    row: Vec<f64>,
    search: BandSearch,
    corners: Vec<[Option<f64>; 2]>,
}

impl<'a> Evaluator<'a> {
    pub fn new(chain: &Chain, objective: &'a Objective, variables: &'a [Variable]) -> Self {
        Evaluator {
            objective,
            variables,
            chain: chain.clone(),
            ev: Evaluation::new(chain),
            row: vec![0.0; objective.layout.width()],
            search: BandSearch::new(chain),
            corners: vec![[None; 2]; chain.loads.len()],
        }
    }

    /// Write `values` (one per variable) into the chain.
    pub fn set(&mut self, values: &[f64]) {
        for (v, x) in self.variables.iter().zip(values) {
            if let Some(p) = self.chain.stages[v.stage].kind.part_mut(v.part) {
                *p = *x;
            }
        }
    }

    /// Score the candidate `values`.
    pub fn score(&mut self, values: &[f64]) -> Score {
        self.set(values);
        self.score_set()
    }

    /// Score the chain as it now holds its values.
    pub fn score_set(&mut self) -> Score {
        let o = self.objective;
        // Only the varied parts move between candidates: unchanged stages keep their
        // DC solutions (bit for bit a cold evaluation's).
        let result = self.ev.run_changed(&self.chain, Freq::Midband);
        let good = result.is_ok();
        if !o.records() {
            return if good {
                Score {
                    value: o
                        .goal
                        .value(&self.chain, &self.ev, &o.keep, &o.layout, &self.row),
                    miss: 0.0,
                }
            } else {
                Score::FAILED
            };
        }
        record(&self.chain, &o.layout, result, &self.ev, &mut self.row);
        if !good {
            return Score::FAILED;
        }
        record_band(
            &self.chain,
            &o.layout,
            &o.measure,
            &mut self.search,
            &mut self.corners,
            &self.ev,
            &mut self.row,
        );
        record_noise(&self.chain, &o.layout, &o.measure, &mut self.row);
        record_extra(&self.chain, &o.layout, &o.measure, &self.ev, &mut self.row);
        Score {
            value: o
                .goal
                .value(&self.chain, &self.ev, &o.keep, &o.layout, &self.row),
            miss: o.keep.iter().map(|r| r.miss(&o.layout, &self.row)).sum(),
        }
    }

    /// The record of the last candidate scored with constraints (see [`Layout`]).
    pub fn row(&self) -> &[f64] {
        &self.row
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn infeasible_builds_rank_by_the_smallest_miss_however_close() {
        // A build that misses a --keep by less ranks higher, however little the misses
        // differ (here by 4e-5, the case of two series values of one resistor), and
        // every infeasible build below every feasible one, below none without a point.
        let score = |value: f64, miss: f64| Score { value, miss };
        let (near, far) = (score(58.27, 0.167_14), score(58.26, 0.167_18));
        assert!(near.merit() > far.merit());
        assert!(score(-500.0, 0.0).merit() > near.merit());
        assert!(far.merit() > Score::FAILED.merit());
        assert!(score(10.0, 1e300).merit() > Score::FAILED.merit());
    }
}
