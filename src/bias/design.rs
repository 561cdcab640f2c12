//! The bias designer: find the resistor values that put a stage's Q point where the
//! target says, with the whole chain re-evaluated for every candidate.
//!
//! 1. **Continuous solution.** Each free resistor meets one condition (see
//!    [`conditions_for`]): the divider the first, each `--also` resistor the next.
//!    Nested one-dimensional root finding on the real chain (every trial value is a
//!    full [`Evaluation::run`]) gives the ideal, unrounded values.
//! 2. **Candidates in the series.** Each `--also` resistor takes the two series values
//!    bracketing its ideal value, or stays. For each such choice the divider is solved
//!    again; the resulting base voltage V_B and the net current J the divider has to
//!    deliver to the base node fix the Q point, and every divider with
//!    (V_CC − V_B)/r_top − V_B/r_bottom = J gives exactly that Q point. Along this
//!    family each series value of one resistor is paired with the two series values
//!    bracketing the other.
//! 3. **Exact ranking.** Every candidate set is evaluated with the whole chain,
//!    checked (forward-active everywhere, stiff divider, input floor, gain band) and
//!    ranked by how close its real Q point comes to the target.

use super::knob::{Field, Knob};
use super::target::{Condition, QNames, Target};
use crate::chain::Chain;
use crate::circuit::Terminal;
use crate::dc::DcError;
use crate::device::{BiasFault, OperatingPoint};
use crate::eseries::{self, Series};
use crate::evaluate::Evaluation;
use crate::graph::Port;
use crate::headroom::LoadLine;
use crate::network::Freq;
use crate::stages::{divider_current, parallel, stiff_r_bottom, Toward};
use crate::units::format_si;
use crate::warnings::{self, Warning, STIFF_DIVIDER_RATIO};

/// A stiff divider carries at least this many times the base current (common
/// practice, no source; the same rule as the planner's warning).
pub const DEFAULT_STIFFNESS: f64 = STIFF_DIVIDER_RATIO;
/// Proposals shown by default.
pub const DEFAULT_COUNT: usize = 5;
/// Range of resistances the root finder looks at.
const R_MIN: f64 = 0.1;
const R_MAX: f64 = 1e9;
/// A root is accepted when its relative residual is below this.
const ROOT_ACCEPT: f64 = 1e-6;
/// The divider search spans this factor below the reference value of r_bottom...
const WINDOW_BELOW: f64 = 10.0;
/// ... and this factor above it.
const WINDOW_ABOVE: f64 = 10.0;

/// What the designer asks for.
#[derive(Debug, Clone, PartialEq)]
pub struct Request {
    /// Index of the stage to design.
    pub stage: usize,
    pub target: Target,
    pub series: Series,
    /// Further resistors the design may move (`--also`).
    pub also: Vec<Knob>,
    /// Keep the stage's |gain| within this many dB of its present value.
    pub keep_gain_db: Option<f64>,
    /// Smallest allowed input resistance of the stage (`--min-input`).
    pub min_input: Option<f64>,
    /// Smallest divider current as a multiple of the base current.
    pub stiffness: f64,
    /// How many proposals to return.
    pub count: usize,
}

impl Request {
    pub fn new(stage: usize, target: Target, series: Series) -> Request {
        Request {
            stage,
            target,
            series,
            also: Vec::new(),
            keep_gain_db: None,
            min_input: None,
            stiffness: DEFAULT_STIFFNESS,
            count: DEFAULT_COUNT,
        }
    }
}

/// Why no design could be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum BiasError {
    #[error("stage \"{stage}\" has no bias divider: {detail}")]
    NoDivider { stage: String, detail: String },
    #[error("stage \"{stage}\" {what}; expected a stage whose divider hangs on its rails (plan shows this one's operating point)")]
    Unsupported { stage: String, what: &'static str },
    #[error("stage \"{stage}\": found {found} resistors to move (divider and --also); expected at most three (the divider and two more)")]
    TooManyKnobs { stage: String, found: usize },
    #[error("stage \"{stage}\" has no operating point with its present values ({cause}); {needs}")]
    NoPresentPoint {
        stage: String,
        cause: String,
        needs: String,
    },
    /// The centred swing asked of a cascode's lower stage (docs/definitions.md "Bias").
    #[error("stage \"{stage}\" is the lower transistor of a cascode: its collector is held by stage \"{upper}\"'s emitter, so it moves by millivolts and the stage's bias sets the pair's current; found {conditions} as the target, expected --target ic=<current> or vce=<voltage> alone (no --also): centre the pair's swing with --stage {upper}, and set the pair's current here with --target ic=…{now} (or this stage's V_CE with --target vce=…)")]
    CascodeLower {
        stage: String,
        upper: String,
        conditions: String,
        /// " (now …)" with the present current, or nothing.
        now: String,
    },
    #[error("stage \"{stage}\": no values of {moved} reach {conditions} with the chain forward-active ({detail}); expected a target those resistors can reach (another --target, or --also a resistor that moves the load line)")]
    Unreachable {
        stage: String,
        moved: String,
        conditions: String,
        /// The range searched and, with a present point, where its DC load line runs.
        detail: String,
    },
}

/// What one set of values gives, from a full evaluation of the chain.
#[derive(Debug, Clone, PartialEq)]
pub struct Metrics {
    pub op: OperatingPoint,
    pub limit_up: f64,
    pub limit_down: f64,
    /// The stage's loaded midband gain, signed.
    pub gain: f64,
    /// |v(output)/EMF| of the stage: the gain from the source up to its output.
    pub cumulative_gain: f64,
    pub r_in: f64,
    /// Divider current (through r_bottom) over base current; None without r_bottom.
    pub divider_ratio: Option<f64>,
    /// Peak source EMF at which this stage clips, and its side.
    pub stage_clip_vpeak: f64,
    pub stage_toward: Toward,
    /// The chain's first stage to clip, its clip level (peak EMF) and side.
    pub chain_first: usize,
    pub chain_clip_vpeak: f64,
    pub chain_toward: Toward,
    /// Residual of each condition (relative, positive when I_C is too high).
    pub residuals: Vec<f64>,
}

/// One resistor of a proposal: its present value and the proposed one.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Setting {
    pub knob: Knob,
    pub from: f64,
    pub to: f64,
}

impl Setting {
    pub fn changed(&self) -> bool {
        self.to != self.from
    }
}

/// A candidate set of values, evaluated.
#[derive(Debug, Clone, PartialEq)]
pub struct Proposal {
    pub settings: Vec<Setting>,
    pub metrics: Metrics,
    /// Largest |residual| over the conditions.
    pub miss: f64,
    /// Number of resistors that change.
    pub changed: usize,
    /// How far the values move (see [`shift`]).
    pub shift: f64,
    pub warnings: Vec<Warning>,
}

impl Proposal {
    /// The chain-file edits that apply this proposal: every changed value, written as
    /// its IEC 60062 code.
    pub fn edits(&self) -> Vec<super::edit::Edit> {
        self.settings
            .iter()
            .filter(|s| s.changed())
            .map(|s| super::edit::Edit {
                stage: s.knob.stage,
                key: s.knob.field.key(),
                code: super::code::resistor_code(s.to),
            })
            .collect()
    }
}

/// How many candidate sets were dropped, and why.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Rejections {
    /// Some stage leaves the forward-active region.
    pub no_operating_point: usize,
    pub not_stiff: usize,
    pub below_input_floor: usize,
    pub outside_gain_band: usize,
}

/// The whole answer.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    pub stage: usize,
    pub target: Target,
    pub series: Series,
    /// The condition each free resistor meets, in the order of [`Outcome::moved`].
    pub conditions: Vec<Condition>,
    /// The resistors the design moves (divider first).
    pub moved: Vec<Knob>,
    /// Set when `--keep-gain` held the centred target back: the band in dB.
    pub limited_by_gain_db: Option<f64>,
    /// The present values' results, or why they have no operating point.
    pub present: Result<Metrics, String>,
    /// Present value of every resistor a proposal lists.
    pub present_values: Vec<(Knob, f64)>,
    /// The continuous solution (every listed resistor: the moved ones at their ideal
    /// values, the others as they are) and what it gives.
    pub ideal_values: Vec<(Knob, f64)>,
    pub ideal: Metrics,
    /// Best first.
    pub proposals: Vec<Proposal>,
    /// Candidate sets evaluated, and those dropped.
    pub candidates: usize,
    pub rejected: Rejections,
    /// Misses closer than this to the best one rank as equal.
    pub resolution: f64,
    /// Full chain evaluations made.
    pub evaluations: usize,
    /// Remarks for the designer (e.g. a base fed through r_top alone).
    pub notes: Vec<String>,
}

/// Relative step between neighbouring values of a series, 10^(1/n) − 1.
pub fn series_step(series: Series) -> f64 {
    10f64.powf(1.0 / series.per_decade() as f64) - 1.0
}

/// Misses within this of the best rank as equal: a quarter of the series step. With
/// one resistor changed a series places the Q point no finer than a fraction of its
/// step, and a designer would rather change one part than two for a closer hit
/// inside that (common practice, no source).
pub fn resolution(series: Series) -> f64 {
    series_step(series) / 4.0
}

/// The conditions the free resistors meet, in order: the first goes to the divider
/// (or the first `--also` resistor when there is no divider), the next ones to the
/// `--also` resistors. A centred target with nothing else free centres the swing by
/// the divider; with more resistors free the divider keeps the present current and
/// the others centre the swing and keep the present gain.
pub fn conditions_for(target: Target, n: usize, i_c0: f64, gain0: f64) -> Vec<Condition> {
    let mut list = match target {
        Target::Centre if n == 1 => vec![Condition::Centred],
        Target::Centre => vec![Condition::Current(i_c0), Condition::Centred],
        Target::Current(i) => vec![Condition::Current(i), Condition::Centred],
        Target::Vce(v) => vec![Condition::Vce(v), Condition::Centred],
    };
    list.push(Condition::Gain(gain0));
    list.truncate(n);
    list
}

/// Points per decade of the fallback scan in [`find_root`].
const SCAN_PER_DECADE: f64 = 24.0;

/// Find x in [R_MIN, R_MAX] with f(x) = 0, starting at `x0`. `f` returns None where it
/// is undefined (another stage of the chain leaves forward active); ±∞ marks a side
/// that is certainly past the root (the designed stage saturated or cut off).
///
/// First the quick way: walk outward from x0 in factors of two until the sign
/// changes, then refine ([`refine`]). Where that finds no root (a direct-coupled
/// neighbour saturates between the walk's points, so the bracket has undefined
/// stretches), scan the whole range at [`SCAN_PER_DECADE`] points per decade and
/// refine each sign change between neighbouring defined points, nearest to x0 first.
pub(crate) fn find_root(x0: f64, f: &mut dyn FnMut(f64) -> Option<f64>) -> Option<f64> {
    let (u_min, u_max) = (R_MIN.ln(), R_MAX.ln());
    let u0 = x0.clamp(R_MIN, R_MAX).ln();
    let mut eval = |u: f64| f(u.exp()).filter(|v| !v.is_nan());
    let first = eval(u0);
    if first == Some(0.0) {
        return Some(u0.exp());
    }
    let mut last_up = first.map(|v| (u0, v));
    let mut last_down = last_up;
    'walk: for k in 1..=40 {
        for dir in [1.0, -1.0] {
            let u = u0 + dir * k as f64 * std::f64::consts::LN_2;
            if !(u_min..=u_max).contains(&u) {
                continue;
            }
            let Some(v) = eval(u) else {
                continue;
            };
            if v == 0.0 {
                return Some(u.exp());
            }
            let last = if dir > 0.0 {
                &mut last_up
            } else {
                &mut last_down
            };
            if let Some((ul, vl)) = *last {
                if (vl > 0.0) != (v > 0.0) {
                    if let Some(u) = refine((ul, vl), (u, v), &mut eval) {
                        return Some(u.exp());
                    }
                    break 'walk;
                }
            }
            *last = Some((u, v));
        }
    }
    // The scan: every defined point of the grid, then each sign change between
    // neighbours, the one nearest x0 first.
    let n = ((u_max - u_min) / std::f64::consts::LN_10 * SCAN_PER_DECADE).ceil() as usize;
    let grid: Vec<(f64, Option<f64>)> = (0..=n)
        .map(|k| {
            let u = u_min + (u_max - u_min) * k as f64 / n as f64;
            (u, eval(u))
        })
        .collect();
    let mut changes: Vec<((f64, f64), (f64, f64))> = grid
        .windows(2)
        .filter_map(|w| match (w[0], w[1]) {
            ((ua, Some(fa)), (ub, Some(fb))) if (fa > 0.0) != (fb > 0.0) || fa == 0.0 => {
                Some(((ua, fa), (ub, fb)))
            }
            _ => None,
        })
        .collect();
    changes.sort_by(|p, q| {
        let d = |c: &((f64, f64), (f64, f64))| (0.5 * (c.0 .0 + c.1 .0) - u0).abs();
        d(p).total_cmp(&d(q))
    });
    changes
        .into_iter()
        .find_map(|(a, b)| refine(a, b, &mut eval))
        .map(f64::exp)
}

/// Refine a sign change of `f` (on u = ln x) between `(a, fa)` and `(b, fb)`:
/// regula falsi (Illinois variant), bisection while an end is infinite. None when a
/// point inside is undefined or the residual does not go to (nearly) zero: a sign
/// change across the edge of saturation or cutoff is no root.
fn refine(
    (mut a, mut fa): (f64, f64),
    (mut b, mut fb): (f64, f64),
    f: &mut dyn FnMut(f64) -> Option<f64>,
) -> Option<f64> {
    if fa == 0.0 {
        return Some(a);
    }
    // The point with the smallest residual evaluated so far (fa and fb get scaled).
    let mut best = if fa.abs() < fb.abs() {
        (a, fa)
    } else {
        (b, fb)
    };
    let mut kept = 0; // +1: a was kept last time, −1: b was kept
    for _ in 0..200 {
        if (b - a).abs() < 1e-12 {
            break;
        }
        let (lo, hi) = (a.min(b), a.max(b));
        let secant = (a * fb - b * fa) / (fb - fa);
        let u = if fa.is_finite() && fb.is_finite() && secant > lo && secant < hi {
            secant
        } else {
            0.5 * (a + b)
        };
        let fu = f(u)?;
        if fu == 0.0 || fu.abs() < 1e-13 {
            return Some(u);
        }
        if fu.abs() < best.1.abs() {
            best = (u, fu);
        }
        if (fu > 0.0) == (fb > 0.0) {
            b = u;
            fb = fu;
            if kept == 1 {
                fa *= 0.5;
            }
            kept = 1;
        } else {
            a = u;
            fa = fu;
            if kept == -1 {
                fb *= 0.5;
            }
            kept = -1;
        }
    }
    (best.1.abs() <= ROOT_ACCEPT).then_some(best.0)
}

/// The working copy of the chain, its evaluation buffers, and what the design moves.
struct Work {
    chain: Chain,
    ev: Evaluation,
    stage: usize,
    vce_sat: f64,
    /// The resistors moved, divider first; `moved[k]` meets `conditions[k]`.
    moved: Vec<Knob>,
    conditions: Vec<Condition>,
    /// The divider's moving resistor and the one that stays, if the stage has a divider.
    divider: Option<(Knob, Option<Knob>)>,
    /// Every resistor a proposal lists (the whole divider, then the `--also` ones),
    /// with its present value.
    listed: Vec<(Knob, f64)>,
    /// The present |gain|, DC load line and result (or why there is none).
    gain0: f64,
    present_line: Option<LoadLine>,
    present: Result<Metrics, String>,
    evaluations: usize,
}

impl Work {
    /// Set up the design of `req.stage`: what moves, what each moved resistor meets,
    /// and the present point.
    fn new(chain: &Chain, req: &Request) -> Result<Work, BiasError> {
        let i = req.stage;
        let stage_id = chain.stages[i].id.clone();
        if let Some(what) = refusal(chain, i) {
            return Err(BiasError::Unsupported {
                stage: stage_id,
                what,
            });
        }
        let kind = &chain.stages[i].kind;
        let knob = |field| Knob { stage: i, field };
        // What moves: r_feedback for a collector-feedback stage (the divider resistors
        // it may have stay), else the divider's r_top (r_bottom stays), or the one
        // there is.
        let divider = super::knob::bias_field(kind).map(|field| {
            let kept = (field == Field::RTop && knob(Field::RBottom).get(chain).is_some())
                .then(|| knob(Field::RBottom));
            (knob(field), kept)
        });
        if divider.is_none() && req.also.is_empty() {
            return Err(BiasError::NoDivider {
                stage: stage_id,
                detail: no_divider_advice(chain, i),
            });
        }
        let mut moved: Vec<Knob> = divider.iter().map(|d| d.0).collect();
        moved.extend(req.also.iter().copied());
        if moved.len() > 3 {
            return Err(BiasError::TooManyKnobs {
                stage: stage_id,
                found: moved.len(),
            });
        }
        // A proposal lists the whole divider (and r_feedback); a self-biased JFET stage
        // its source resistor alone (the gate resistor carries no DC).
        let bias_fields: &[Field] = match divider {
            Some((k, _)) if k.field.is_source() => &[k.field],
            _ => &[Field::RTop, Field::RBottom, Field::RFeedback],
        };
        let mut listed: Vec<Knob> = bias_fields
            .iter()
            .copied()
            .map(knob)
            .filter(|k| k.get(chain).is_some())
            .collect();
        listed.extend(req.also.iter().copied());

        let mut work = Work {
            chain: chain.clone(),
            ev: Evaluation::new(chain),
            stage: i,
            vce_sat: chain.device_of(i).vce_sat,
            moved,
            conditions: Vec::new(),
            divider,
            listed: listed
                .iter()
                .map(|k| (*k, k.get(chain).unwrap_or(f64::NAN)))
                .collect(),
            gain0: f64::NAN,
            present_line: None,
            present: Err(String::new()),
            evaluations: 0,
        };
        let present_run = work.run();
        let i_c0 = match &present_run {
            Ok(()) => {
                work.gain0 = work.ev.ac[i].gain.norm();
                work.present_line = work.ev.headroom[i].dc_line;
                work.ev.dc[i].op.i_c
            }
            Err(_) => f64::NAN,
        };
        work.conditions = conditions_for(req.target, work.moved.len(), i_c0, work.gain0);
        let needs_present = req.keep_gain_db.is_some()
            || work
                .conditions
                .iter()
                .any(|c| matches!(c, Condition::Current(x) | Condition::Gain(x) if x.is_nan()));
        if let Some(j) = cascode_upper(chain, i) {
            if work.conditions.contains(&Condition::Centred) {
                let names = QNames::of(chain, i);
                return Err(BiasError::CascodeLower {
                    stage: stage_id,
                    upper: chain.stages[j].id.clone(),
                    conditions: work
                        .conditions
                        .iter()
                        .map(|c| c.describe(names))
                        .collect::<Vec<_>>()
                        .join(" and "),
                    now: if i_c0.is_finite() {
                        format!(" (now {})", format_si(i_c0, "A"))
                    } else {
                        String::new()
                    },
                });
            }
        }
        work.present = match present_run {
            Ok(()) => Ok(work.metrics()),
            Err(e) if needs_present => {
                return Err(BiasError::NoPresentPoint {
                    stage: stage_id,
                    cause: e.to_string(),
                    needs: if req.keep_gain_db.is_some() {
                        "--keep-gain needs a present gain to keep: drop it".into()
                    } else {
                        "keeping the present current or gain needs one: give the target as ic=… or vce=… instead".into()
                    },
                })
            }
            Err(e) => Err(e.to_string()),
        };
        Ok(work)
    }

    fn run(&mut self) -> Result<(), DcError> {
        self.evaluations += 1;
        self.ev.run(&self.chain, Freq::Midband)
    }

    /// Evaluate and return condition `k`'s residual (see [`residual_of`]).
    fn residual(&mut self, k: usize) -> Option<f64> {
        let result = self.run();
        residual_of(
            result,
            &self.chain,
            &self.ev,
            self.stage,
            self.conditions[k],
            self.vce_sat,
        )
    }

    /// Move `moved[level]` (and, nested, everything below it) until conditions
    /// 0..=level hold. Leaves the chain evaluated at the solution, or restores the
    /// values on failure.
    fn solve(&mut self, level: usize) -> Option<()> {
        let knob = self.moved[level];
        let saved: Vec<f64> = self.moved[..=level]
            .iter()
            .map(|k| k.get(&self.chain).unwrap_or(f64::NAN))
            .collect();
        let found = find_root(saved[level], &mut |x| {
            knob.set(&mut self.chain, x);
            if level > 0 {
                self.solve(level - 1)?;
            }
            self.residual(level)
        });
        let solved = found.and_then(|x| {
            knob.set(&mut self.chain, x);
            if level > 0 {
                self.solve(level - 1)?;
            }
            self.run().ok()
        });
        if solved.is_none() {
            for (k, v) in self.moved[..=level].iter().zip(&saved) {
                k.set(&mut self.chain, *v);
            }
        }
        solved
    }

    fn unreachable(&self) -> BiasError {
        let join = |v: Vec<String>, sep: &str| v.join(sep);
        BiasError::Unreachable {
            stage: self.chain.stages[self.stage].id.clone(),
            moved: join(
                self.moved
                    .iter()
                    .map(|k| k.label(&self.chain, self.stage))
                    .collect(),
                ", ",
            ),
            conditions: join(
                self.conditions
                    .iter()
                    .map(|c| c.describe(QNames::of(&self.chain, self.stage)))
                    .collect(),
                " and ",
            ),
            detail: format!(
                "searched {} to {} in {} evaluations of the chain{}",
                format_si(R_MIN, "Ω"),
                format_si(R_MAX, "Ω"),
                self.evaluations,
                self.why_unreachable()
            ),
        }
    }

    /// What stands in the way, for [`Work::unreachable`]: a self-biased JFET's source
    /// resistor moves the load line with the Q point, and I_D·R_S = |V_GS| stays
    /// below |V_P| (docs/definitions.md "Bias"); any other bias resistor moves the Q
    /// point along the present DC load line.
    fn why_unreachable(&self) -> String {
        let names = QNames::of(&self.chain, self.stage);
        let jfet = self.chain.device_of(self.stage).jfet;
        match (self.divider, jfet) {
            (Some((k, _)), Some(j)) if k.field.is_source() => format!(
                "; {} sets {} and the DC load line together, and with the gate at its rail I_D·R_S = |V_GS| stays below |V_P| = {} (a source follower's output rests within it of its rail; a gate divider lifts it)",
                k.field,
                names.current,
                format_si(j.v_p.abs(), "V")
            ),
            _ => self.present_line.map_or(String::new(), |l| {
                format!(
                    "; its DC load line now runs from {v} = {} at cutoff to {i} = {} at {v} = 0, and its bias resistor moves the Q point along it",
                    format_si(l.v_ce_intercept, "V"),
                    format_si(l.i_c_intercept, "A"),
                    v = names.voltage,
                    i = names.current,
                )
            }),
        }
    }

    /// The continuous solution: every moved resistor meets its condition. With
    /// `--keep-gain` and a centred target, the largest symmetrical swing whose gain
    /// stays in the band: the smaller limit grows monotonically on the way from the
    /// present Q point to the centred one, so the answer is the centred point, or the
    /// point on the way where the gain reaches the edge of the band. Returns the band
    /// when it held the target back.
    fn solve_ideal(&mut self, req: &Request) -> Result<Option<f64>, BiasError> {
        let top = self.moved.len() - 1;
        self.solve(top).ok_or_else(|| self.unreachable())?;
        if let (Some(band), Target::Centre, 1) = (req.keep_gain_db, req.target, self.moved.len()) {
            let off_db = 20.0 * (self.ev.ac[self.stage].gain.norm() / self.gain0).log10();
            if off_db.abs() > band {
                let edge = self.gain0 * 10f64.powf(band.copysign(off_db) / 20.0);
                self.conditions[0] = Condition::Gain(edge);
                self.solve(0).ok_or_else(|| self.unreachable())?;
                // From here on the target is the current found at the band's edge.
                self.conditions[0] = Condition::Current(self.ev.dc[self.stage].op.i_c);
                return Ok(Some(band));
            }
        }
        Ok(None)
    }

    /// Candidate sets of values (in the order of `listed`): the `--also` resistors at
    /// the series values bracketing their ideal values or at their present ones; for
    /// each such choice, the dividers along the family through the re-solved Q point
    /// ([`divider_family`]); and the present values.
    fn candidate_sets(&mut self, req: &Request, ideal: &[(Knob, f64)]) -> Vec<Vec<f64>> {
        let also_options: Vec<Vec<f64>> = req
            .also
            .iter()
            .map(|k| {
                let mut v = bracketing(req.series, value_of(ideal, *k));
                v.push(value_of(&self.listed, *k));
                v.sort_by(f64::total_cmp);
                v.dedup();
                v
            })
            .collect();
        let n_divider = self.listed.len() - req.also.len();
        let mut sets: Vec<Vec<f64>> = Vec::new();
        for combo in cartesian(&also_options) {
            for (k, v) in req.also.iter().zip(&combo) {
                k.set(&mut self.chain, *v);
            }
            let Some((moving, kept)) = self.divider else {
                sets.push(combo);
                continue;
            };
            // From the ideal divider, solve it alone for the first condition.
            moving.set(&mut self.chain, value_of(ideal, moving));
            if self.solve(0).is_none() {
                continue;
            }
            for (r_t, r_b) in divider_family(self, req, moving, kept) {
                // The moving resistor takes its family value (r_bottom's when it moves
                // alone), a kept r_bottom its own; the rest stay.
                let divider = self.listed[..n_divider].iter().map(|&(k, present)| {
                    if k == moving {
                        if k.field == Field::RBottom {
                            r_b
                        } else {
                            r_t
                        }
                    } else if Some(k) == kept {
                        r_b
                    } else {
                        present
                    }
                });
                sets.push(divider.chain(combo.iter().copied()).collect());
            }
        }
        // The present values are a candidate too ("nothing to change").
        sets.push(self.listed.iter().map(|(_, v)| *v).collect());
        sets.sort_by(|a, b| {
            a.iter()
                .zip(b)
                .map(|(x, y)| x.total_cmp(y))
                .find(|o| o.is_ne())
                .unwrap_or(std::cmp::Ordering::Equal)
        });
        sets.dedup();
        sets
    }

    /// Evaluate every candidate set with the whole chain; keep those that pass the
    /// rules (forward-active everywhere, stiff divider, input floor, gain band).
    fn assess(&mut self, req: &Request, sets: &[Vec<f64>]) -> (Vec<Proposal>, Rejections) {
        let mut rejected = Rejections::default();
        let mut proposals = Vec::new();
        for set in sets {
            for ((k, _), v) in self.listed.iter().zip(set) {
                k.set(&mut self.chain, *v);
            }
            if self.run().is_err() {
                rejected.no_operating_point += 1;
                continue;
            }
            let m = self.metrics();
            if m.divider_ratio.is_some_and(|r| r < req.stiffness) {
                rejected.not_stiff += 1;
                continue;
            }
            if req.min_input.is_some_and(|floor| m.r_in < floor) {
                rejected.below_input_floor += 1;
                continue;
            }
            if let Some(band) = req.keep_gain_db {
                // A hair of slack for rounding in the dB conversion.
                if (20.0 * (m.gain.abs() / self.gain0).log10()).abs() > band + 1e-9 {
                    rejected.outside_gain_band += 1;
                    continue;
                }
            }
            let settings: Vec<Setting> = self
                .listed
                .iter()
                .zip(set)
                .map(|((knob, from), to)| Setting {
                    knob: *knob,
                    from: *from,
                    to: *to,
                })
                .collect();
            proposals.push(Proposal {
                miss: m.residuals.iter().fold(0.0, |a: f64, r| a.max(r.abs())),
                changed: settings.iter().filter(|s| s.changed()).count(),
                shift: shift(&settings, self.stage),
                settings,
                metrics: m,
                warnings: Vec::new(),
            });
        }
        (proposals, rejected)
    }

    /// The planner's warnings for a proposal, its values set and the chain evaluated.
    fn warnings_for(&mut self, settings: &[Setting]) -> Vec<Warning> {
        for s in settings {
            s.knob.set(&mut self.chain, s.to);
        }
        match self.run() {
            Ok(()) => warnings::collect(&self.chain, &self.ev, None),
            Err(_) => Vec::new(),
        }
    }

    /// Results of the last successful evaluation.
    fn metrics(&self) -> Metrics {
        let i = self.stage;
        let ev = &self.ev;
        let op = ev.dc[i].op;
        let h = &ev.headroom[i];
        let bias = self.chain.stages[i].kind.model().bias();
        let first = ev.first_clip;
        Metrics {
            op,
            limit_up: h.swing.limit_up,
            limit_down: h.swing.limit_down,
            gain: ev.ac[i].gain.re,
            cumulative_gain: ev.ac[i].cumulative.norm(),
            // The same arithmetic as the plan report, so the figures agree to the bit.
            r_in: (1.0 / ev.ac[i].y_in).re,
            // A JFET's gate draws no DC current: no ratio (docs/definitions.md "Bias").
            divider_ratio: bias
                .r_bottom
                .filter(|_| bias.r_top.is_some() && self.chain.device_of(i).jfet.is_none())
                .map(|r| {
                    let device = self.chain.device_of(i);
                    divider_current(&op, r, self.chain.stage_rails(i).bottom, device) / op.i_b
                }),
            stage_clip_vpeak: h.clip_input_vpeak,
            stage_toward: h.toward,
            chain_first: first,
            chain_clip_vpeak: ev.headroom[first].clip_input_vpeak,
            chain_toward: ev.headroom[first].toward,
            residuals: self
                .conditions
                .iter()
                .map(|c| c.residual(&self.chain, ev, i, self.vce_sat))
                .collect(),
        }
    }
}

/// Why the bias designer cannot move stage `i`'s operating point, or `None` when it
/// can. The divider line (docs/definitions.md "Bias divider") takes the divider's
/// resistors to the stage's rails; a supply filter's node moves with the stage's own
/// current, so such a stage is refused by name, as are passive and op-amp stages. A
/// JFET stage with a gate divider is designed on the divider (no gate current); a
/// self-biased one (one gate resistor) by its source resistor (docs/definitions.md
/// "Bias"), refused only without one.
pub fn refusal(chain: &Chain, i: usize) -> Option<&'static str> {
    if chain.stages[i].device.is_none() {
        return Some("has no transistor (a passive stage): there is no operating point to design");
    }
    if chain.device_of(i).opamp.is_some() {
        return Some("is an op-amp stage: its output rests at its reference by the feedback, with no divider or transistor bias to design (move `reference` instead)");
    }
    if chain.device_of(i).jfet.is_some() && super::knob::bias_field(&chain.stages[i].kind).is_none()
    {
        return Some("is a JFET stage without a gate divider or a source resistor: it rests at I_DSS, and the bias designer moves r_source (add r_source, or r_top and r_bottom, to the chain file first)");
    }
    if chain.topology.loop_of[i].is_some() {
        return Some("is on a feedback loop: its operating point is set by the loop (the other stages and a feedback link's DC current), which the bias designer's divider line does not follow");
    }
    let circuit = chain.stages[i].kind.model().circuit(chain.device_of(i));
    if circuit.element("supply_filter.resistance").is_some() {
        return Some("has a supply_filter: the top of its divider moves with the stage's own current, which the bias designer's divider line does not follow");
    }
    None
}

/// The stage whose emitter holds stage `i`'s collector through a direct link: the
/// upper transistor of a cascode over `i`. Stage `i`'s collector then moves by
/// millivolts (the upper emitter's 1/g_m), so it has no swing of its own to centre.
fn cascode_upper(chain: &Chain, i: usize) -> Option<usize> {
    let terminal = |k: usize, node: fn(&crate::circuit::SubCircuit) -> usize| {
        let c = chain.stages[k].kind.model().circuit(chain.device_of(k));
        c.terminal_of(node(&c))
    };
    if terminal(i, |c| c.output) != Terminal::Collector {
        return None;
    }
    (0..chain.stages.len()).find(|&j| {
        chain.topology.stage_driver[j] == (Port::Stage(i), None)
            && terminal(j, |c| c.input) == Terminal::Emitter
    })
}

/// The residual of `condition` for stage `i` after an evaluation that gave `result`:
/// ±∞ when that stage saturates or cuts off (the side certainly past the root), None
/// when anything else fails.
pub fn residual_of(
    result: Result<(), DcError>,
    chain: &Chain,
    ev: &Evaluation,
    i: usize,
    condition: Condition,
    vce_sat: f64,
) -> Option<f64> {
    match result {
        Ok(()) => {
            let r = condition.residual(chain, ev, i, vce_sat);
            r.is_finite().then_some(r)
        }
        Err(DcError::Bias { stage, fault }) if stage == chain.stages[i].id => match fault {
            BiasFault::Saturated { .. }
            | BiasFault::InsideCollectorResistance { .. }
            | BiasFault::Unlimited
            | BiasFault::Ohmic { .. } => Some(f64::INFINITY),
            BiasFault::NoForwardBias { .. } | BiasFault::PinchedOff { .. } => {
                Some(f64::NEG_INFINITY)
            }
            BiasFault::NoDcPath { .. }
            | BiasFault::NoConvergence { .. }
            | BiasFault::LoopNoSolution
            | BiasFault::OpampOutputOutOfReach { .. }
            | BiasFault::OpampCurrentLimited { .. } => None,
        },
        Err(_) => None,
    }
}

/// Design the bias of `req.stage` in `chain`.
pub fn design(chain: &Chain, req: &Request) -> Result<Outcome, BiasError> {
    let mut work = Work::new(chain, req)?;
    let limited_by_gain_db = work.solve_ideal(req)?;
    let ideal = work.metrics();
    let ideal_values: Vec<(Knob, f64)> = work
        .listed
        .iter()
        .map(|(k, _)| (*k, k.get(&work.chain).unwrap_or(f64::NAN)))
        .collect();

    let sets = work.candidate_sets(req, &ideal_values);
    let (mut proposals, rejected) = work.assess(req, &sets);
    let resolution = resolution(req.series);
    rank(&mut proposals, resolution);
    proposals.truncate(req.count);
    for p in &mut proposals {
        p.warnings = work.warnings_for(&p.settings);
    }

    let mut notes = Vec::new();
    match work.divider {
        Some((k, _)) if k.field == Field::RFeedback => notes.push(format!(
            "stage \"{}\" is biased by collector feedback: r_feedback is moved, and I_C ≈ (V_top − V_BE)/(R_C + R_F/β) follows β only through R_F/β",
            chain.stages[req.stage].id
        )),
        Some((k, _)) if k.field.is_source() => notes.push(format!(
            "stage \"{}\" is a self-biased JFET stage: {} is moved, and the gate rests at its rail, so V_GS = −I_D·R_S sets I_D (no stiffness rule applies)",
            chain.stages[req.stage].id,
            k.field
        )),
        Some((_, Some(_))) if chain.device_of(req.stage).jfet.is_some() => notes.push(format!(
            "stage \"{}\" is a JFET stage with a gate divider: the gate draws no DC current, so the divider's ratio alone sets V_G, and V_GS = V_G − I_D·R_S sets I_D (no stiffness rule applies; the pair sets the input resistance)",
            chain.stages[req.stage].id
        )),
        Some((_, None)) => notes.push(format!(
            "stage \"{}\" is biased through one divider resistor alone: its Q point follows β, and no stiffness rule applies",
            chain.stages[req.stage].id
        )),
        _ => {}
    }
    Ok(Outcome {
        stage: req.stage,
        target: req.target,
        series: req.series,
        conditions: work.conditions.clone(),
        moved: work.moved.clone(),
        limited_by_gain_db,
        present: work.present.clone(),
        present_values: work.listed.clone(),
        ideal_values,
        ideal,
        proposals,
        candidates: sets.len(),
        rejected,
        resolution,
        evaluations: work.evaluations,
        notes,
    })
}

/// Rank: the proposals within `resolution` of the closest miss count as equally
/// close and come first, fewest changed resistors first, then the smallest move,
/// then the smaller miss; the others follow by miss.
pub fn rank(proposals: &mut [Proposal], resolution: f64) {
    let best = proposals
        .iter()
        .map(|p| p.miss)
        .fold(f64::INFINITY, f64::min);
    let on_target = |p: &Proposal| p.miss <= best + resolution;
    proposals.sort_by(|a, b| {
        on_target(b).cmp(&on_target(a)).then_with(|| {
            if on_target(a) {
                a.changed
                    .cmp(&b.changed)
                    .then(a.shift.total_cmp(&b.shift))
                    .then(a.miss.total_cmp(&b.miss))
            } else {
                a.miss.total_cmp(&b.miss)
            }
        })
    });
}

/// How far a set of values moves from the present: |ln| of the change of the
/// divider's impedance r_top ∥ r_bottom (its ratio has to change anyway; its impedance
/// sets the loading of the driver and the stiffness), plus |ln(to/from)| of every
/// other resistor.
fn shift(settings: &[Setting], stage: usize) -> f64 {
    let in_divider =
        |s: &Setting| s.knob.stage == stage && matches!(s.knob.field, Field::RTop | Field::RBottom);
    let part = |field: Field| {
        settings
            .iter()
            .find(|s| in_divider(s) && s.knob.field == field)
    };
    let (top, bottom) = (part(Field::RTop), part(Field::RBottom));
    let impedance = |value: fn(&Setting) -> f64| match (top, bottom) {
        (Some(t), Some(b)) => Some(parallel(value(t), value(b))),
        (Some(x), None) | (None, Some(x)) => Some(value(x)),
        (None, None) => None,
    };
    let divider = match (impedance(|s| s.from), impedance(|s| s.to)) {
        (Some(from), Some(to)) => (to / from).ln().abs(),
        _ => 0.0,
    };
    let others: f64 = settings
        .iter()
        .filter(|s| !in_divider(s))
        .map(|s| (s.to / s.from).ln().abs())
        .sum();
    divider + others
}

/// A series value as a chain file will hold it (see [`super::code::as_written`]).
fn as_written(r: f64) -> f64 {
    super::code::as_written(r)
}

/// Every combination of one value from each list (one empty combination for none).
fn cartesian(options: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let mut out = vec![Vec::new()];
    for opts in options {
        out = out
            .into_iter()
            .flat_map(|c| {
                opts.iter().map(move |v| {
                    let mut c = c.clone();
                    c.push(*v);
                    c
                })
            })
            .collect();
    }
    out
}

/// The value of `knob` in a list of values.
fn value_of(list: &[(Knob, f64)], knob: Knob) -> f64 {
    list.iter()
        .find(|(k, _)| *k == knob)
        .map_or(f64::NAN, |(_, v)| *v)
}

/// The series values just below and just above `x` (one value when `x` is in the
/// series), as written; none for a value that is not a positive resistance.
fn bracketing(series: Series, x: f64) -> Vec<f64> {
    match eseries::bracket(series, x) {
        Ok((below, above)) if below == above => vec![as_written(below)],
        Ok((below, above)) => vec![as_written(below), as_written(above)],
        Err(_) => Vec::new(),
    }
}

/// Series values between `lo` and `hi`, as written.
fn series_between(series: Series, lo: f64, hi: f64) -> Vec<f64> {
    eseries::between(series, lo, hi)
        .into_iter()
        .map(as_written)
        .collect()
}

/// Divider pairs (r_top, r_bottom) in the series that give the solved Q point: with
/// the base at V_B and the divider delivering the net current
/// J = (V_top − V_B)/r_top − (V_B − V_bottom)/r_bottom to the base node, every pair on
/// that line gives the same operating point (docs/definitions.md "Bias divider"); each
/// series value of one resistor is paired with the two values bracketing the other.
/// A single moving resistor (r_top or r_bottom alone, or r_feedback) takes the two
/// series values bracketing its solved value. Pairs the stiffness rule or the input
/// floor rule out for certain are skipped here.
fn divider_family(work: &Work, req: &Request, moving: Knob, kept: Option<Knob>) -> Vec<(f64, f64)> {
    let i = work.stage;
    let rails = work.chain.stage_rails(i);
    let (v_top, v_bottom) = (rails.top, rails.bottom);
    let op = work.ev.dc[i].op;
    let v_b = op.v_b;
    let bias = work.chain.stages[i].kind.model().bias();
    let delivered = |r_t: Option<f64>, r_b: Option<f64>| {
        r_t.map_or(0.0, |r| (v_top - v_b) / r) - r_b.map_or(0.0, |r| (v_b - v_bottom) / r)
    };
    let bracket = |x: f64| bracketing(req.series, x);
    let mut pairs = Vec::new();
    match kept {
        None => {
            // One resistor only: the chain stands at its solved value.
            let solved = moving.get(&work.chain).unwrap_or(f64::NAN);
            for r in bracket(solved) {
                pairs.push(if moving.field == Field::RBottom {
                    (f64::NAN, r)
                } else {
                    (r, f64::NAN)
                });
            }
        }
        Some(_) => {
            let j = delivered(bias.r_top, bias.r_bottom);
            let top_for = |r_b: f64| (v_top - v_b) / (j + (v_b - v_bottom) / r_b);
            let bottom_for = |r_t: f64| (v_b - v_bottom) / ((v_top - v_b) / r_t - j);
            // The present values (the family keeps either one where it can).
            let present = |field| value_of(&work.listed, Knob { stage: i, field });
            let (t0, b0) = (present(Field::RTop), present(Field::RBottom));
            // Stiff: the divider current at least stiffness·I_B. The search spans the
            // present r_bottom (or the stiff limit when that is lower) from a tenth to
            // ten times.
            let stiff_max = stiff_r_bottom(&op, v_bottom, work.chain.device_of(i), req.stiffness);
            let reference = b0.min(stiff_max);
            let floor = req.min_input.unwrap_or(0.0);
            let b_lo = (reference / WINDOW_BELOW).max(floor);
            let b_hi = reference * WINDOW_ABOVE;
            let mut bottoms = series_between(req.series, b_lo, b_hi);
            bottoms.push(b0);
            for r_b in bottoms {
                for r_t in bracket(top_for(r_b)) {
                    pairs.push((r_t, r_b));
                }
            }
            let (t_a, t_b) = (top_for(b_lo), top_for(b_hi));
            let (t_lo, t_hi) = if t_a > 0.0 && t_b > 0.0 && t_b.is_finite() {
                (t_a.min(t_b), t_a.max(t_b))
            } else {
                (t0 / WINDOW_BELOW, t0 * WINDOW_BELOW)
            };
            let mut tops = series_between(req.series, t_lo, t_hi);
            tops.push(t0);
            for r_t in tops {
                for r_b in bracket(bottom_for(r_t)) {
                    pairs.push((r_t, r_b));
                }
            }
            // The floor needs r_top ∥ r_bottom at least (the input is that in
            // parallel with the transistor).
            pairs.retain(|(t, b)| t * b / (t + b) >= floor);
        }
    }
    pairs
}

/// What a designer can move instead when a stage has no divider.
fn no_divider_advice(chain: &Chain, i: usize) -> String {
    let id = &chain.stages[i].id;
    let kind = &chain.stages[i].kind;
    let own: Vec<&str> = super::knob::fields_of(kind)
        .iter()
        .filter(|f| !matches!(f, Field::RTop | Field::RBottom))
        .filter(|f| super::knob::get(kind, **f).is_some())
        .map(|f| f.key())
        .collect();
    let own_hint = own
        .iter()
        .map(|k| format!("--also {k}"))
        .collect::<Vec<_>>()
        .join(" or ");
    match chain.topology.stage_driver[i] {
        (Port::Stage(u), None) => {
            let up = &chain.stages[u];
            let c = up.kind.model().circuit(chain.device_of(u));
            let (node, up_key) = match c.terminal_of(c.output) {
                Terminal::Emitter => ("emitter", "r_emitter"),
                _ => ("collector", "r_collector"),
            };
            format!(
                "its base sits on the {node} of stage \"{}\" (direct link), so the divider cannot be used. Its Q point moves with its own resistors ({own_hint}), with stage \"{}\"'s {up_key} (--also {}.{up_key}), or by re-biasing stage \"{}\" (--stage {})",
                up.id, up.id, up.id, up.id, up.id
            )
        }
        _ => format!(
            "its base is direct-coupled to the source, so the divider cannot be used; its Q point moves with its own resistors ({own_hint}) for stage \"{id}\""
        ),
    }
}
