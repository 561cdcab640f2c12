//! The search (docs/definitions.md "Tune"):
//!
//! 1. **Continuous optimum.** From the values as written and from `starts` seeded
//!    points (log-uniform over the ranges), coordinate descent over the parts in ln R, the
//!    whole chain evaluated for every trial (loading between stages updated): each
//!    stage's bias resistor first tries the value that centres that stage (the closed
//!    form and root finder of `bias --target centre`, [`crate::bias::design`]), then
//!    every part a scan of nine points over ×/÷4 and golden-section refinement in ln R.
//!    A move is kept only when it raises the merit ([`Score::merit`]); sweeps repeat
//!    until no part moves by more than 1e-9 (relative), a sweep raises the merit by
//!    less than 1e-6 dB, or [`MAX_SWEEPS`].
//! 2. **Discrete search.** When every combination of the parts' series values in
//!    range numbers at most `exhaustive_limit`, all are evaluated (exact). Otherwise,
//!    around each of the [`NEIGHBOURHOODS`] best continuous optima, each part's
//!    neighbourhood: `width` series values below and `width` above its optimum, and
//!    its value as written. When the product of the neighbourhood sizes is at most
//!    `exhaustive_limit`, every combination is evaluated (exact within the
//!    neighbourhood); otherwise a beam search assigns the parts in order, keeping the
//!    `beam` best partial builds (the parts not yet assigned at their continuous
//!    optima).
//! 3. **Polish.** From the best build, every one-step move of one part along its
//!    whole series range (and back to its value as written), and every move of two
//!    parts by one step each, is evaluated; the best improving move is taken until
//!    none improves. Then `kicks` random restarts, each
//!    moving two parts by one or two steps (ChaCha8 from the seed) and polishing again,
//!    the better result kept.
//!
//! Candidates of one step are evaluated in parallel (rayon) and reduced in candidate
//! order, so the result depends only on the seed. Ties rank by fewer changed parts,
//! then the smaller total |ln(new/old)|, then the order of generation.

use super::objective::{Evaluator, Objective, Score};
use super::vary::Variable;
use crate::bias::design::{find_root, residual_of};
use crate::bias::knob::bias_field;
use crate::bias::target::Condition;
use crate::chain::Chain;
use crate::network::Freq;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Most sweeps of the coordinate descent.
pub const MAX_SWEEPS: usize = 30;
/// A sweep that raises the merit by less than this (dB) ends the descent: on the ridge
/// of a max–min objective coordinate steps only zigzag.
const SWEEP_GAIN: f64 = 1e-6;
/// Points of the coarse scan of one part (odd: the present value in the middle).
const SCAN_POINTS: usize = 9;
/// The scan spans this factor either way of the part's present value.
const SCAN_SPAN: f64 = 4.0;
/// Golden-section refinement stops at this width in ln R.
const LINE_TOLERANCE: f64 = 1e-7;
/// A move must raise the merit by more than this (dB) to count.
const IMPROVEMENT: f64 = 1e-9;
/// Continuous optima whose neighbourhoods the discrete search explores.
const NEIGHBOURHOODS: usize = 3;
/// The random stream of the starting points (the restarts use stream 0).
const STARTS_STREAM: u64 = 1;
/// Candidates per rayon work item.
const CHUNK: usize = 64;

/// How far the discrete search looks (`tune`'s options).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Settings {
    /// Series values on each side of the continuous optimum.
    pub width: usize,
    /// Partial builds the beam keeps.
    pub beam: usize,
    /// Largest neighbourhood evaluated combination by combination.
    pub exhaustive_limit: usize,
    /// Random restarts of the polish.
    pub kicks: usize,
    /// Seeded starting points of the coordinate descent besides the values as written.
    pub starts: usize,
    pub seed: u64,
    /// Builds reported.
    pub show: usize,
    /// Most candidate evaluations in all.
    pub budget: usize,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            width: 2,
            beam: 256,
            exhaustive_limit: 1 << 18,
            kicks: 16,
            starts: 8,
            seed: 0,
            show: 3,
            budget: 50_000_000,
        }
    }
}

/// Why the search ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stop {
    /// Every combination of the series values in range was evaluated: the best is
    /// exact.
    Exhaustive,
    /// Every combination of the neighbourhood was evaluated, then no one-step move of
    /// the best build improved it (nor did any restart).
    Enumerated,
    /// The beam search ended, then no one-step move of the best build improved it
    /// (nor did any restart).
    LocalOptimum,
    /// The evaluation budget ran out.
    Budget,
}

impl Stop {
    pub fn describe(self) -> &'static str {
        match self {
            Stop::Exhaustive => "every combination of the series values in range was evaluated (the best is exact)",
            Stop::Enumerated => "every combination of the neighbourhood was evaluated, and no one-step move of one or two parts of the best build (nor any random restart) improves it",
            Stop::LocalOptimum => "the beam search ended, and no one-step move of one or two parts of the best build (nor any random restart) improves it",
            Stop::Budget => "the evaluation budget ran out",
        }
    }
}

/// One evaluated build.
#[derive(Debug, Clone, PartialEq)]
pub struct Found {
    /// One value per variable.
    pub values: Vec<f64>,
    pub score: Score,
    /// Parts that differ from the chain as written.
    pub changed: usize,
    /// Σ |ln(value / as written)|.
    pub shift: f64,
}

/// What the search found and how.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    pub present: Score,
    /// The continuous optimum and its score.
    pub continuous: Vec<f64>,
    pub continuous_score: Score,
    pub sweeps: usize,
    pub converged: bool,
    /// The best builds, best first (at most `show`), every value a series value or
    /// the value as written.
    pub best: Vec<Found>,
    /// Candidate builds evaluated: in the continuous phase, and in the discrete one.
    pub continuous_evaluations: usize,
    pub discrete_evaluations: usize,
    /// Combinations in the neighbourhood, and whether all were evaluated.
    pub neighbourhood: f64,
    pub stop: Stop,
}

/// The search's state: the chain, the objective, the variables, the counters.
struct Search<'a> {
    chain: &'a Chain,
    objective: &'a Objective,
    vars: &'a [Variable],
    settings: Settings,
    progress: &'a (dyn Fn(u64) + Sync),
    evaluations: usize,
    top: Vec<Found>,
}

/// One coordinate descent: the chain, the parts, its count of evaluations.
struct Descent<'a> {
    chain: &'a Chain,
    vars: &'a [Variable],
    progress: &'a (dyn Fn(u64) + Sync),
    evaluations: usize,
}

/// Where a descent ended.
struct Descended {
    x: Vec<f64>,
    score: Score,
    sweeps: usize,
    converged: bool,
    evaluations: usize,
}

/// Search `chain` for the best values of `vars`.
pub fn search(
    chain: &Chain,
    objective: &Objective,
    vars: &[Variable],
    settings: Settings,
    progress: &(dyn Fn(u64) + Sync),
) -> Outcome {
    let mut s = Search {
        chain,
        objective,
        vars,
        settings,
        progress,
        evaluations: 0,
        top: Vec::new(),
    };
    let present_values: Vec<f64> = vars.iter().map(|v| v.present).collect();
    let mut ev = Evaluator::new(chain, objective, vars);
    let present = ev.score(&present_values);
    s.evaluations += 1;
    // From the values as written, then from `starts` seeded points spread over the
    // ranges (log-uniform), each descent on its own worker.
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    rng.set_stream(STARTS_STREAM);
    let starts: Vec<Vec<f64>> = std::iter::once(
        vars.iter()
            .map(|v| {
                let (lo, hi) = range_of(v);
                v.present.clamp(lo, hi)
            })
            .collect(),
    )
    .chain((0..settings.starts).map(|_| {
        vars.iter()
            .map(|v| {
                let (lo, hi) = range_of(v);
                (lo.ln() + rng.random::<f64>() * (hi / lo).ln()).exp()
            })
            .collect()
    }))
    .collect();
    let mut descents: Vec<Descended> = starts
        .into_par_iter()
        .map(|x0| {
            let mut d = Descent {
                chain,
                vars,
                progress,
                evaluations: 0,
            };
            let mut ev = Evaluator::new(chain, objective, vars);
            d.continuous(&mut ev, x0)
        })
        .collect();
    s.evaluations += descents.iter().map(|d| d.evaluations).sum::<usize>();
    let sweeps = descents.iter().map(|d| d.sweeps).sum();
    // Best first (stable: ties in start order).
    descents.sort_by(|a, b| b.score.merit().total_cmp(&a.score.merit()));
    let continuous_evaluations = s.evaluations;

    // Every combination of the series values in range when there are few enough
    // (exact); else the neighbourhoods of the best few optima (the series rounding
    // can reorder optima of nearly equal merit).
    let full: f64 = vars.iter().map(|v| v.values.len() as f64).product();
    let mut neighbourhood = 0.0;
    let mut stop = Stop::Enumerated;
    if full <= settings.exhaustive_limit as f64 {
        let options: Vec<Vec<f64>> = vars.iter().map(|v| v.values.clone()).collect();
        s.enumerate(&options);
        neighbourhood = full;
        stop = Stop::Exhaustive;
    } else {
        let mut explored: Vec<Vec<Vec<f64>>> = Vec::new();
        for d in descents.iter().take(NEIGHBOURHOODS) {
            let options: Vec<Vec<f64>> = vars
                .iter()
                .zip(&d.x)
                .map(|(v, x)| neighbourhood_of(v, *x, settings.width))
                .collect();
            if explored.contains(&options) {
                continue;
            }
            let size: f64 = options.iter().map(|o| o.len() as f64).product();
            neighbourhood += size;
            if size <= settings.exhaustive_limit as f64 {
                s.enumerate(&options);
            } else {
                s.beam(&options, &d.x);
                stop = Stop::LocalOptimum;
            }
            explored.push(options);
        }
    }
    let best = &descents[0];
    let (continuous, continuous_score, converged) = (best.x.clone(), best.score, best.converged);
    // The build as written is a candidate too ("nothing to change").
    s.consider(&present_values, &[present]);
    let stop = if s.polish_and_kick() {
        stop
    } else {
        Stop::Budget
    };
    let discrete_evaluations = s.evaluations - continuous_evaluations;
    Outcome {
        present,
        continuous,
        continuous_score,
        sweeps,
        converged,
        best: s.top,
        continuous_evaluations,
        discrete_evaluations,
        neighbourhood,
        stop,
    }
}

/// The options of one part: `width` series values below its continuous optimum `x`
/// and `width` at or above it, and its value as written when in range.
fn neighbourhood_of(v: &Variable, x: f64, width: usize) -> Vec<f64> {
    let j = v.values.partition_point(|r| *r < x);
    let from = j.saturating_sub(width);
    let to = (j + width).min(v.values.len());
    let mut o: Vec<f64> = v.values[from..to].to_vec();
    let (lo, hi) = range_of(v);
    if (lo..=hi).contains(&v.present) && !o.contains(&v.present) {
        o.push(v.present);
    }
    o
}

/// The continuous range of a part: its series values' span, widened to its value as
/// written when that lies in the span's decade.
fn range_of(v: &Variable) -> (f64, f64) {
    (v.values[0], v.values[v.values.len() - 1])
}

impl Descent<'_> {
    /// Coordinate descent from `x` (see the module comment).
    fn continuous(&mut self, ev: &mut Evaluator, mut x: Vec<f64>) -> Descended {
        let n = self.vars.len();
        let mut current = ev.score(&x);
        self.evaluations += 1;
        for sweep in 1..=MAX_SWEEPS {
            let before_sweep = self.evaluations;
            let merit_before = current.merit();
            let mut moved: f64 = 0.0;
            for k in 0..n {
                let before = x[k];
                // The centring value of a stage's bias resistor, kept when it is at
                // least as good (ties go to the centred stage).
                if let Some(t) = self.centring(ev, &mut x, k) {
                    x[k] = t;
                    let s = ev.score(&x);
                    self.evaluations += 1;
                    if s.merit() >= current.merit() {
                        current = s;
                    } else {
                        x[k] = before;
                    }
                }
                let (t, s) = self.line_search(ev, &mut x, k, current);
                if s.merit() > current.merit() + IMPROVEMENT {
                    x[k] = t;
                    current = s;
                }
                ev.set(&x);
                moved = moved.max((x[k] / before).ln().abs());
            }
            (self.progress)((self.evaluations - before_sweep) as u64);
            if moved <= 1e-9 || current.merit() - merit_before < SWEEP_GAIN {
                return self.descended(x, current, sweep, true);
            }
        }
        self.descended(x, current, MAX_SWEEPS, false)
    }

    fn descended(&self, x: Vec<f64>, score: Score, sweeps: usize, converged: bool) -> Descended {
        Descended {
            x,
            score,
            sweeps,
            converged,
            evaluations: self.evaluations,
        }
    }

    /// The value of part `k` that centres its stage, when it is that stage's bias
    /// resistor (`bias --target centre`'s root finder and condition), clamped to the
    /// part's range.
    fn centring(&mut self, ev: &mut Evaluator, x: &mut [f64], k: usize) -> Option<f64> {
        let v = &self.vars[k];
        let i = v.stage;
        if bias_field(&self.chain.stages[i].kind).map(|f| f.key()) != Some(v.name) {
            return None;
        }
        let vce_sat = self.chain.device_of(i).vce_sat;
        ev.set(x);
        let part = v.part;
        let mut count = 0;
        let root = find_root(x[k], &mut |r| {
            count += 1;
            if let Some(p) = ev.chain.stages[i].kind.part_mut(part) {
                *p = r;
            }
            let result = ev.ev.run_changed(&ev.chain, Freq::Midband);
            residual_of(result, &ev.chain, &ev.ev, i, Condition::Centred, vce_sat)
        });
        self.evaluations += count;
        let (lo, hi) = range_of(v);
        root.map(|r| r.clamp(lo, hi))
    }

    /// The best value of part `k` alone: a scan of [`SCAN_POINTS`] in ln R over ×/÷
    /// [`SCAN_SPAN`] within its range, then golden-section refinement around the best
    /// point. Returns the value and its score (`current` when nothing is better).
    fn line_search(
        &mut self,
        ev: &mut Evaluator,
        x: &mut [f64],
        k: usize,
        current: Score,
    ) -> (f64, Score) {
        let (lo, hi) = range_of(&self.vars[k]);
        let (u_lo, u_hi) = (lo.ln(), hi.ln());
        let u0 = x[k].ln();
        let a = (u0 - SCAN_SPAN.ln()).max(u_lo);
        let b = (u0 + SCAN_SPAN.ln()).min(u_hi);
        let saved = x[k];
        let mut count = 0;
        let mut f = |u: f64, x: &mut [f64]| {
            x[k] = u.exp();
            count += 1;
            ev.score(x)
        };
        let mut best = (u0, current);
        if b > a {
            let step = (b - a) / (SCAN_POINTS - 1) as f64;
            let scan: Vec<(f64, Score)> = (0..SCAN_POINTS)
                .map(|j| {
                    let u = a + step * j as f64;
                    (u, f(u, x))
                })
                .collect();
            let j = (0..SCAN_POINTS)
                .max_by(|p, q| {
                    scan[*p]
                        .1
                        .merit()
                        .total_cmp(&scan[*q].1.merit())
                        .then(q.cmp(p))
                })
                .unwrap_or(0);
            if scan[j].1.merit() > best.1.merit() {
                best = scan[j];
            }
            // Golden section on [u_{j−1}, u_{j+1}].
            let (mut l, mut r) = (
                scan[j.saturating_sub(1)].0,
                scan[(j + 1).min(SCAN_POINTS - 1)].0,
            );
            let g = (5f64.sqrt() - 1.0) / 2.0;
            let mut c = r - g * (r - l);
            let mut d = l + g * (r - l);
            let mut fc = f(c, x);
            let mut fd = f(d, x);
            while r - l > LINE_TOLERANCE {
                if fc.merit() >= fd.merit() {
                    r = d;
                    d = c;
                    fd = fc;
                    c = r - g * (r - l);
                    fc = f(c, x);
                } else {
                    l = c;
                    c = d;
                    fc = fd;
                    d = l + g * (r - l);
                    fd = f(d, x);
                }
            }
            for (u, s) in [(c, fc), (d, fd)] {
                if s.merit() > best.1.merit() {
                    best = (u, s);
                }
            }
        }
        x[k] = saved;
        self.evaluations += count;
        (best.0.exp(), best.1)
    }
}

impl Search<'_> {
    /// Evaluate the candidates in `flat` (one build per `vars.len()` values) in
    /// parallel; scores in candidate order.
    fn evaluate(&mut self, flat: &[f64]) -> Vec<Score> {
        let n = self.vars.len();
        let (chain, objective, vars) = (self.chain, self.objective, self.vars);
        let progress = self.progress;
        let scores: Vec<Score> = flat
            .par_chunks(n * CHUNK)
            .map_init(
                || Evaluator::new(chain, objective, vars),
                |ev, chunk| {
                    let out: Vec<Score> = chunk.chunks(n).map(|c| ev.score(c)).collect();
                    progress(out.len() as u64);
                    out
                },
            )
            .collect::<Vec<Vec<Score>>>()
            .concat();
        self.evaluations += scores.len();
        scores
    }

    /// Keep the best `show` distinct builds of `flat` (each a full set of series
    /// values) and those kept before.
    fn consider(&mut self, flat: &[f64], scores: &[Score]) {
        let n = self.vars.len();
        for j in best_first(scores, self.settings.show.max(1) * 4) {
            let values = &flat[j * n..(j + 1) * n];
            if self.top.iter().any(|f| f.values == values) {
                continue;
            }
            let found = self.found(values, scores[j]);
            self.top.push(found);
        }
        self.top.sort_by(rank);
        self.top.truncate(self.settings.show.max(1));
    }

    fn found(&self, values: &[f64], score: Score) -> Found {
        let changed = self
            .vars
            .iter()
            .zip(values)
            .filter(|(v, x)| v.present != **x)
            .count();
        let shift = self
            .vars
            .iter()
            .zip(values)
            .map(|(v, x)| (x / v.present).ln().abs())
            .sum();
        Found {
            values: values.to_vec(),
            score,
            changed,
            shift,
        }
    }

    fn over_budget(&self) -> bool {
        self.evaluations >= self.settings.budget
    }

    /// Every combination of the options (mixed radix, the first part fastest).
    fn enumerate(&mut self, options: &[Vec<f64>]) {
        let n = options.len();
        let total: usize = options.iter().map(Vec::len).product();
        // In blocks, so the table of values stays small.
        let block = 1 << 16;
        let mut first = 0;
        while first < total && !self.over_budget() {
            let count = block.min(total - first);
            let mut flat = Vec::with_capacity(count * n);
            for c in first..first + count {
                let mut r = c;
                for o in options {
                    flat.push(o[r % o.len()]);
                    r /= o.len();
                }
            }
            let scores = self.evaluate(&flat);
            self.consider(&flat, &scores);
            first += count;
        }
    }

    /// Beam search: assign the parts in order, each partial build's unassigned parts
    /// at their continuous optima; keep the `beam` best after each part.
    fn beam(&mut self, options: &[Vec<f64>], continuous: &[f64]) {
        let n = options.len();
        let mut beam: Vec<f64> = continuous.to_vec();
        for (k, o) in options.iter().enumerate() {
            if self.over_budget() {
                return;
            }
            let states = beam.len() / n;
            let mut flat = Vec::with_capacity(states * o.len() * n);
            for s in 0..states {
                for x in o {
                    flat.extend_from_slice(&beam[s * n..(s + 1) * n]);
                    let at = flat.len() - n + k;
                    flat[at] = *x;
                }
            }
            let scores = self.evaluate(&flat);
            let order = best_first(&scores, self.settings.beam.max(1));
            beam = order
                .iter()
                .flat_map(|j| flat[j * n..(j + 1) * n].iter().copied())
                .collect();
            if k + 1 == n {
                let kept: Vec<Score> = order.iter().map(|j| scores[*j]).collect();
                self.consider(&beam, &kept);
            }
        }
    }

    /// Hill-climb from the best build by one-step moves, then the seeded restarts.
    /// False when the budget ran out.
    fn polish_and_kick(&mut self) -> bool {
        let Some(start) = self.top.first().cloned() else {
            return true;
        };
        let mut best = self.polish(start);
        let mut rng = ChaCha8Rng::seed_from_u64(self.settings.seed);
        let n = self.vars.len();
        for _ in 0..self.settings.kicks {
            if self.over_budget() {
                return false;
            }
            let mut values = best.values.clone();
            for _ in 0..2.min(n) {
                let k = rng.random_range(0..n);
                let steps: i64 = if rng.random_bool(0.5) { 1 } else { 2 };
                let sign: i64 = if rng.random_bool(0.5) { 1 } else { -1 };
                values[k] = self.stepped(k, values[k], sign * steps);
            }
            let flat = values.clone();
            let scores = self.evaluate(&flat);
            self.consider(&flat, &scores);
            let kicked = self.found(&values, scores[0]);
            let result = self.polish(kicked);
            if rank(&result, &best).is_lt() {
                best = result;
            }
        }
        !self.over_budget()
    }

    /// Part `k`'s value `steps` series steps from `x` (within its range; a value as
    /// written between series values steps to its neighbours).
    fn stepped(&self, k: usize, x: f64, steps: i64) -> f64 {
        let values = &self.vars[k].values;
        let below = values.partition_point(|r| *r < x) as i64; // first ≥ x
        let exact = values.get(below as usize) == Some(&x);
        let j = if steps > 0 {
            below + steps - i64::from(!exact)
        } else {
            below + steps
        };
        values[j.clamp(0, values.len() as i64 - 1) as usize]
    }

    /// One-step moves until none improves: every part one series step either way (or
    /// back to its value as written), and every pair of parts one step each, in the
    /// same or opposite directions (a divider's two resistors move together along
    /// the line of equal bias).
    fn polish(&mut self, mut at: Found) -> Found {
        let n = self.vars.len();
        loop {
            if self.over_budget() {
                return at;
            }
            let mut flat = Vec::with_capacity((3 * n + 2 * n * n) * n);
            let push = |flat: &mut Vec<f64>, changes: &[(usize, f64)]| {
                if changes.iter().all(|(k, m)| *m != at.values[*k]) {
                    flat.extend_from_slice(&at.values);
                    let len = flat.len();
                    for (k, m) in changes {
                        flat[len - n + k] = *m;
                    }
                }
            };
            for k in 0..n {
                let (lo, hi) = range_of(&self.vars[k]);
                let present = self.vars[k].present;
                if (lo..=hi).contains(&present) {
                    push(&mut flat, &[(k, present)]);
                }
                for dir in [-1, 1] {
                    let m = self.stepped(k, at.values[k], dir);
                    push(&mut flat, &[(k, m)]);
                    for l in k + 1..n {
                        for dir_l in [-1, 1] {
                            let m_l = self.stepped(l, at.values[l], dir_l);
                            push(&mut flat, &[(k, m), (l, m_l)]);
                        }
                    }
                }
            }
            let scores = self.evaluate(&flat);
            self.consider(&flat, &scores);
            let better = (0..scores.len())
                .map(|j| self.found(&flat[j * n..(j + 1) * n], scores[j]))
                .filter(|f| f.score.merit() > at.score.merit() + IMPROVEMENT)
                .min_by(rank);
            match better {
                Some(f) => at = f,
                None => return at,
            }
        }
    }
}

/// The indices of the `k` best scores, best first, ties in index order (the first `k`
/// of a stable sort by merit, without sorting the rest).
fn best_first(scores: &[Score], k: usize) -> Vec<usize> {
    let cmp = |a: &usize, b: &usize| {
        scores[*b]
            .merit()
            .total_cmp(&scores[*a].merit())
            .then(a.cmp(b))
    };
    let mut order: Vec<usize> = (0..scores.len()).collect();
    if k < order.len() {
        order.select_nth_unstable_by(k, cmp);
        order.truncate(k);
    }
    order.sort_by(cmp);
    order
}

/// Best first: the larger merit, then fewer changed parts, then the smaller shift.
pub fn rank(a: &Found, b: &Found) -> std::cmp::Ordering {
    b.score
        .merit()
        .total_cmp(&a.score.merit())
        .then(a.changed.cmp(&b.changed))
        .then(a.shift.total_cmp(&b.shift))
}
