//! The Monte Carlo pass: every trial draws its build from its own random stream,
//! writes it into a per-worker copy of the chain, evaluates it with a per-worker
//! [`Evaluation`] and stores one record in a table preallocated for all trials and
//! indexed by trial. Nothing is allocated per trial.

use super::measure::{BandSearch, Measure};
use super::model::SpreadModel;
use super::sample::{key_from_seed, trial_rng};
use crate::chain::Chain;
use crate::dc::DcError;
use crate::device::BiasFault;
use crate::evaluate::Evaluation;
use crate::warnings::KINDS;
use rayon::prelude::*;

/// Trials per work item handed to a thread (also the progress step).
pub const BLOCK: usize = 512;

/// Why a build has no forward-active operating point, as stored in a record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    Saturated = 0,
    CutOff = 1,
    /// No DC path, an unlimited base drive, or a DC Newton solve that did not converge.
    Other = 2,
}

impl Fault {
    pub const ALL: [Fault; 3] = [Fault::Saturated, Fault::CutOff, Fault::Other];

    pub fn name(self) -> &'static str {
        match self {
            Fault::Saturated => "saturated",
            Fault::CutOff => "cut_off",
            Fault::Other => "other",
        }
    }
}

/// Column layout of one trial's record (all f64):
/// per stage I_C, V_CE, |gain|, clip input level (V peak); per load |overall gain|;
/// the chain's clip input level (V peak); the first stage to clip; the status; with
/// `band`, per load the low and the high −3 dB corner (Hz; NaN where none was found);
/// with `noise`, per load its EIN (V rms) and SNR (dB; NaN without a planned level);
/// per feedback loop its return ratio T and |closed-loop gain|; with `dissipation`,
/// per stage its transistor's dissipation (W; NaN without a transistor); with
/// `resistor_power`, per stage [`RESISTOR_SLOTS`] resistor powers (W) in the order
/// `stages::stage_resistor_power` lists them (NaN past its end); with `warnings`, per
/// kind of `warnings::KINDS` the count of its warnings (last).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Layout {
    pub stages: usize,
    pub loads: usize,
    pub band: bool,
    pub noise: bool,
    pub loops: usize,
    pub dissipation: bool,
    pub resistor_power: bool,
    pub warnings: bool,
}

/// Resistor power columns per stage with `resistor_power` (the most resistors
/// `stages::stage_resistor_power` lists).
pub const RESISTOR_SLOTS: usize = 16;

impl Layout {
    /// The layout of the records of a run that measures `measure`.
    pub fn new(chain: &Chain, measure: &Measure) -> Layout {
        Layout {
            stages: chain.stages.len(),
            loads: chain.loads.len(),
            band: measure.band.is_some(),
            noise: measure.noise.is_some(),
            loops: chain.topology.feedback.len(),
            dissipation: measure.dissipation,
            resistor_power: measure.resistor_power,
            warnings: measure.warnings.is_some(),
        }
    }
    pub fn width(&self) -> usize {
        self.warning_start() + if self.warnings { KINDS.len() } else { 0 }
    }
    /// The first column after the loop columns.
    fn dissipation_start(&self) -> usize {
        self.loop_start() + 2 * self.loops
    }
    /// The transistor dissipation of stage `stage`, W (only with `dissipation`).
    pub fn dissipation(&self, stage: usize) -> usize {
        self.dissipation_start() + stage
    }
    /// The first column after the dissipation columns.
    fn resistor_start(&self) -> usize {
        self.dissipation_start() + if self.dissipation { self.stages } else { 0 }
    }
    /// The DC power of resistor `slot` of stage `stage`, W (only with `resistor_power`).
    pub fn resistor_power(&self, stage: usize, slot: usize) -> usize {
        self.resistor_start() + RESISTOR_SLOTS * stage + slot
    }
    /// The first column after the resistor power columns.
    fn warning_start(&self) -> usize {
        self.resistor_start()
            + if self.resistor_power {
                RESISTOR_SLOTS * self.stages
            } else {
                0
            }
    }
    /// The count of warnings of `warnings::KINDS[kind]` (only with `warnings`).
    pub fn warning_count(&self, kind: usize) -> usize {
        self.warning_start() + kind
    }
    /// The first column after the noise columns.
    fn loop_start(&self) -> usize {
        self.noise_start() + if self.noise { 2 * self.loads } else { 0 }
    }
    /// Return ratio T of loop `k` (signed at midband, |T| at a frequency).
    pub fn return_ratio(&self, k: usize) -> usize {
        self.loop_start() + 2 * k
    }
    /// |Closed-loop gain| of loop `k` (v(its last stage's output)/EMF).
    pub fn closed_loop_gain(&self, k: usize) -> usize {
        self.loop_start() + 2 * k + 1
    }
    /// The first column after the corners.
    fn noise_start(&self) -> usize {
        4 * self.stages + self.loads + 3 + if self.band { 2 * self.loads } else { 0 }
    }
    /// EIN of load `load`, V rms (only with `noise`).
    pub fn ein(&self, load: usize) -> usize {
        self.noise_start() + 2 * load
    }
    /// SNR of load `load`, dB (only with `noise`).
    pub fn snr(&self, load: usize) -> usize {
        self.noise_start() + 2 * load + 1
    }
    pub fn i_c(&self, stage: usize) -> usize {
        4 * stage
    }
    pub fn v_ce(&self, stage: usize) -> usize {
        4 * stage + 1
    }
    pub fn gain(&self, stage: usize) -> usize {
        4 * stage + 2
    }
    pub fn clip(&self, stage: usize) -> usize {
        4 * stage + 3
    }
    pub fn load_gain(&self, load: usize) -> usize {
        4 * self.stages + load
    }
    pub fn chain_clip(&self) -> usize {
        4 * self.stages + self.loads
    }
    pub fn first_clip(&self) -> usize {
        4 * self.stages + self.loads + 1
    }
    /// −1 for a build in its active region; else 4·stage + [`Fault`].
    pub fn status(&self) -> usize {
        4 * self.stages + self.loads + 2
    }
    /// Low −3 dB corner of load `load` (only with `band`).
    pub fn low_corner(&self, load: usize) -> usize {
        4 * self.stages + self.loads + 3 + 2 * load
    }
    /// High −3 dB corner of load `load` (only with `band`).
    pub fn high_corner(&self, load: usize) -> usize {
        4 * self.stages + self.loads + 4 + 2 * load
    }
    /// The load and edge (0 low, 1 high) of a corner column; `None` for any other.
    pub fn corner_of(&self, c: usize) -> Option<(usize, usize)> {
        let first = self.low_corner(0);
        (self.band && c >= first && c < self.noise_start())
            .then(|| ((c - first) / 2, (c - first) % 2))
    }
    /// The columns that hold numbers of a good build (not the first-to-clip index or
    /// the status).
    pub fn numeric_columns(&self) -> Vec<usize> {
        let mut c: Vec<usize> = (0..self.first_clip()).collect();
        c.extend(self.status() + 1..self.width());
        c
    }
}

/// Status of a record: `None` for a good build, else the stage and fault.
pub fn status_of(layout: &Layout, row: &[f64]) -> Option<(usize, Fault)> {
    let s = row[layout.status()];
    if s < 0.0 {
        return None;
    }
    let code = s as usize;
    let fault = match code % 4 {
        0 => Fault::Saturated,
        1 => Fault::CutOff,
        _ => Fault::Other,
    };
    Some((code / 4, fault))
}

/// Fill `row` from an evaluation (or its DC failure).
pub fn record(
    chain: &Chain,
    layout: &Layout,
    result: Result<(), DcError>,
    ev: &Evaluation,
    row: &mut [f64],
) {
    match result {
        Ok(()) => {
            for i in 0..layout.stages {
                let op = &ev.dc[i].op;
                // An op-amp stage's pair is its pin's I_out and V_out (kept in i_c, v_c);
                // a passive stage has none (NaN: no statistics, null as in `plan`).
                let (i_c, v_ce) = if chain.stages[i].device.is_none() {
                    (f64::NAN, f64::NAN)
                } else if ev.dc[i].opamp.is_some() {
                    (op.i_c, op.v_c)
                } else {
                    (op.i_c, op.v_ce)
                };
                row[layout.i_c(i)] = i_c;
                row[layout.v_ce(i)] = v_ce;
                row[layout.gain(i)] = ev.ac[i].gain.norm();
                row[layout.clip(i)] = ev.headroom[i].clip_input_vpeak;
            }
            for (k, g) in ev.load_gain.iter().enumerate() {
                row[layout.load_gain(k)] = g.norm();
            }
            for (k, l) in ev.loops.iter().enumerate() {
                row[layout.return_ratio(k)] = crate::report::signed(l.return_ratio);
                row[layout.closed_loop_gain(k)] = l.closed_loop_gain.norm();
            }
            row[layout.chain_clip()] = ev.headroom[ev.first_clip].clip_input_vpeak;
            row[layout.first_clip()] = ev.first_clip as f64;
            row[layout.status()] = -1.0;
        }
        Err(e) => {
            row.fill(f64::NAN);
            let (stage, fault) = match &e {
                DcError::Bias { stage, fault } => (
                    stage,
                    match fault {
                        BiasFault::Saturated { .. }
                        | BiasFault::InsideCollectorResistance { .. } => Fault::Saturated,
                        BiasFault::NoForwardBias { .. } => Fault::CutOff,
                        _ => Fault::Other,
                    },
                ),
                // A gain beyond f64's levels: a build that gives no numbers.
                DcError::Gain(g) => (&g.id, Fault::Other),
            };
            let index = chain.stage_index(stage).unwrap_or(0);
            row[layout.status()] = (4 * index + fault as usize) as f64;
        }
    }
}

/// Record the corners of the build evaluated in `ev` into `row` (a good build of a
/// run with `band`).
pub fn record_band(
    chain: &Chain,
    layout: &Layout,
    measure: &Measure,
    search: &mut BandSearch,
    corners: &mut [[Option<f64>; 2]],
    ev: &Evaluation,
    row: &mut [f64],
) {
    let Some(starts) = &measure.band else {
        return;
    };
    search.corners(chain, ev, starts, corners);
    for (k, c) in corners.iter().enumerate() {
        row[layout.low_corner(k)] = c[0].unwrap_or(f64::NAN);
        row[layout.high_corner(k)] = c[1].unwrap_or(f64::NAN);
    }
}

/// Record the band noise of the build in `chain` into `row` (a good build of a run
/// with `noise`): each load's EIN and SNR. The noise network is built per build (it
/// allocates; only runs asked for noise pay for it). A build whose noise cannot be
/// solved records NaN.
pub fn record_noise(chain: &Chain, layout: &Layout, measure: &Measure, row: &mut [f64]) {
    let Some(m) = &measure.noise else {
        return;
    };
    let noise = crate::noise::NoiseModel::new(chain)
        .ok()
        .and_then(|mut model| {
            let totals = crate::noise::band_load_totals(&mut model, m.band, m.weighting).ok()?;
            Some((model, totals))
        });
    for k in 0..layout.loads {
        let (ein, snr) = match &noise {
            Some((model, totals)) => {
                // EIN = output noise / |midband gain EMF → load| (docs/definitions.md).
                let ein = totals[k].sqrt() / model.midband.load_gain[k].norm();
                let snr = m
                    .planned_vrms
                    .map_or(f64::NAN, |v| 20.0 * (v / ein).log10());
                (ein, snr)
            }
            None => (f64::NAN, f64::NAN),
        };
        row[layout.ein(k)] = ein;
        row[layout.snr(k)] = snr;
    }
}

/// Record what requirements asked for beyond the figures of `plan` into `row` (a
/// good build): every stage's transistor dissipation with `dissipation`, its
/// resistors' with `resistor_power`, and the
/// count of each kind of warning at the planned level with `warnings` (collecting
/// them allocates; only runs asked for them pay for it).
pub fn record_extra(
    chain: &Chain,
    layout: &Layout,
    measure: &Measure,
    ev: &Evaluation,
    row: &mut [f64],
) {
    if layout.dissipation {
        for i in 0..layout.stages {
            let transistor = chain.stages[i].device.is_some() && chain.device_of(i).opamp.is_none();
            row[layout.dissipation(i)] = if transistor {
                ev.dc[i].op.transistor_power()
            } else {
                f64::NAN
            };
        }
    }
    if layout.resistor_power {
        for i in 0..layout.stages {
            let powers = crate::stages::stage_resistor_power(chain, ev, i);
            for slot in 0..RESISTOR_SLOTS {
                row[layout.resistor_power(i, slot)] = powers.get(slot).map_or(f64::NAN, |p| p.1);
            }
        }
    }
    if let Some(w) = &measure.warnings {
        for k in 0..KINDS.len() {
            row[layout.warning_count(k)] = 0.0;
        }
        for warning in crate::warnings::collect(chain, ev, w.level) {
            if let Some(k) = KINDS.iter().position(|kind| *kind == warning.kind) {
                row[layout.warning_count(k)] += 1.0;
            }
        }
    }
}

/// One thread's working copy: a chain to write builds into, its evaluation buffers
/// and the drawn values.
pub struct Worker<'a> {
    model: &'a SpreadModel,
    measure: &'a Measure,
    pub chain: Chain,
    pub ev: Evaluation,
    values: Vec<f64>,
    layout: Layout,
    search: BandSearch,
    corners: Vec<[Option<f64>; 2]>,
}

impl<'a> Worker<'a> {
    pub fn new(chain: &Chain, model: &'a SpreadModel, measure: &'a Measure) -> Self {
        Worker {
            model,
            measure,
            chain: chain.clone(),
            ev: Evaluation::new(chain),
            values: model.nominal_values(),
            layout: Layout::new(chain, measure),
            search: BandSearch::new(chain),
            corners: vec![[None; 2]; chain.loads.len()],
        }
    }

    /// Evaluate the build with the spread values `values` into `row`.
    pub fn evaluate(&mut self, values: &[f64], row: &mut [f64]) {
        self.values.copy_from_slice(values);
        self.evaluate_drawn(row);
    }

    /// Draw trial `trial` of the run keyed `key` and evaluate it into `row`.
    pub fn trial(&mut self, key: u64, trial: u64, row: &mut [f64]) {
        let mut rng = trial_rng(key, trial);
        for (v, s) in self.values.iter_mut().zip(&self.model.spreads) {
            *v = s.sample(&mut rng);
        }
        self.evaluate_drawn(row);
    }

    fn evaluate_drawn(&mut self, row: &mut [f64]) {
        self.model.apply(&self.values, &mut self.chain);
        let result = self.ev.run(&self.chain, self.measure.freq);
        let good = result.is_ok();
        record(&self.chain, &self.layout, result, &self.ev, row);
        if good {
            record_band(
                &self.chain,
                &self.layout,
                self.measure,
                &mut self.search,
                &mut self.corners,
                &self.ev,
                row,
            );
            record_noise(&self.chain, &self.layout, self.measure, row);
            record_extra(&self.chain, &self.layout, self.measure, &self.ev, row);
        }
    }
}

/// All trials' records, stored by column: the value of column `c` for trial `t` is
/// `data[c * runs + t]`. A column is what the statistics read, so each is one
/// contiguous run of memory; the table is allocated once and never copied.
#[derive(Debug, Clone)]
pub struct Trials {
    pub layout: Layout,
    pub runs: usize,
    data: Vec<f64>,
}

impl Trials {
    /// A table from records given row by row (`rows.len()` a multiple of the width).
    pub fn from_rows(layout: Layout, rows: &[f64]) -> Trials {
        let w = layout.width();
        let runs = rows.len() / w;
        let mut data = vec![0.0; rows.len()];
        for (t, row) in rows.chunks_exact(w).enumerate() {
            for (c, &x) in row.iter().enumerate() {
                data[c * runs + t] = x;
            }
        }
        Trials { layout, runs, data }
    }
    /// Column `c`, in trial order.
    pub fn column(&self, c: usize) -> &[f64] {
        &self.data[c * self.runs..(c + 1) * self.runs]
    }
    /// The record of trial `t`, into `row` (of the layout's width).
    pub fn row_into(&self, t: usize, row: &mut [f64]) {
        for (c, x) in row.iter_mut().enumerate() {
            *x = self.data[c * self.runs + t];
        }
    }
    /// The record of trial `t` (allocates: for small tables and tests).
    pub fn row(&self, t: usize) -> Vec<f64> {
        let mut row = vec![0.0; self.layout.width()];
        self.row_into(t, &mut row);
        row
    }
    /// Every record in trial order (allocates one row each: for small tables and tests).
    pub fn rows(&self) -> impl Iterator<Item = Vec<f64>> + '_ {
        (0..self.runs).map(|t| self.row(t))
    }
    /// Whether trial `t` has every stage in its active region.
    pub fn good(&self, t: usize) -> bool {
        self.data[self.layout.status() * self.runs + t] < 0.0
    }
    /// Column `c` of the good builds (every stage in its active region), in trial
    /// order, without NaN (a corner not found), into `out` (cleared first).
    pub fn good_values_into(&self, c: usize, out: &mut Vec<f64>) {
        out.clear();
        let status = self.column(self.layout.status());
        out.extend(
            self.column(c)
                .iter()
                .zip(status)
                .filter(|(x, s)| **s < 0.0 && !x.is_nan())
                .map(|(x, _)| *x),
        );
    }
    /// Column `c` of the good builds, in trial order, without NaN.
    pub fn good_column(&self, c: usize) -> Vec<f64> {
        let mut out = Vec::new();
        self.good_values_into(c, &mut out);
        out
    }
}

/// Run `runs` trials of the seed's run on the current rayon pool; `progress` is
/// told how many trials each finished work item held.
pub fn monte_carlo(
    chain: &Chain,
    model: &SpreadModel,
    measure: &Measure,
    runs: usize,
    seed: u64,
    progress: &(dyn Fn(u64) + Sync),
) -> Trials {
    let layout = Layout::new(chain, measure);
    let w = layout.width();
    let mut data = vec![0.0; runs * w];
    let key = key_from_seed(seed);
    // Work item b owns trials b·BLOCK.. of every column: one slice per column.
    let mut pieces: Vec<std::slice::ChunksMut<f64>> = data
        .chunks_mut(runs.max(1))
        .map(|column| column.chunks_mut(BLOCK))
        .collect();
    let blocks: Vec<Vec<&mut [f64]>> = (0..runs.div_ceil(BLOCK))
        .map(|_| pieces.iter_mut().filter_map(|p| p.next()).collect())
        .collect();
    blocks.into_par_iter().enumerate().for_each_init(
        || (Worker::new(chain, model, measure), vec![0.0; w]),
        |(worker, row), (block, mut columns)| {
            let first = block * BLOCK;
            let n = columns.first().map_or(0, |c| c.len());
            for j in 0..n {
                worker.trial(key, (first + j) as u64, row);
                for (column, &x) in columns.iter_mut().zip(row.iter()) {
                    column[j] = x;
                }
            }
            progress(n as u64);
        },
    );
    Trials { layout, runs, data }
}
