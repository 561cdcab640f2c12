//! Frequency response: the exact response of the chain over a log-spaced sweep, the
//! −3 dB corners of every load found on the exact response, and which capacitor sets
//! each corner (time-constant attribution).
//!
//! The DC operating points are solved once; each frequency is one AC pass
//! ([`crate::ac::solve`]) at s = j·2πf over the same two-ports as midband, with
//! coupling capacitors as series impedances, bypass capacitors in the emitter
//! impedance, C_π and C_μ in each transistor and the source and load shunt
//! capacitances on their nodes. No Miller or single-pole shortcut is in the numbers.

pub mod attribution;
pub mod corners;
pub mod local;

pub use attribution::{Band, Contribution, Element};
pub use corners::{Corner, LoadCorners, SearchRange};

use crate::ac::{self, AcState};
use crate::chain::Chain;
use crate::dc::DcError;
use crate::evaluate::Evaluation;
use crate::network::Freq;
use num_complex::Complex64;

/// Default sweep of the `response` command: 1 Hz to 10 MHz, 20 points per decade.
pub const DEFAULT_FROM: f64 = 1.0;
pub const DEFAULT_TO: f64 = 10e6;
pub const DEFAULT_PER_DECADE: usize = 20;
/// Largest number of points a sweep may have (with [`crate::limits::MAX_PER_DECADE`]
/// and 14 decades, [`crate::limits::FREQUENCY`], the most a sweep can ask for).
pub const MAX_POINTS: usize = 140_001;

/// A log-spaced sweep: `from`·10^(j/per_decade) up to `to` (included).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Sweep {
    pub from: f64,
    pub to: f64,
    pub per_decade: usize,
}

/// A sweep that cannot be run; the message names the option.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SweepError {
    #[error("{name}: found {value} Hz, expected a frequency above zero")]
    NotPositive { name: &'static str, value: f64 },
    #[error("{name}: found {value:e} Hz, expected {range}")]
    OutOfRange {
        name: &'static str,
        value: f64,
        range: String,
    },
    #[error("--per-decade: found {0}, expected at most {max} points per decade", max = crate::limits::MAX_PER_DECADE)]
    TooDense(usize),
    #[error("--from {from} Hz is not below --to {to} Hz; expected --from < --to")]
    Order { from: f64, to: f64 },
    #[error("--per-decade: found 0, expected at least 1 point per decade")]
    NoPoints,
    #[error("--per-decade {per_decade} over {decades:.1} decades gives more than {max} points; expected fewer")]
    TooManyPoints {
        per_decade: usize,
        decades: f64,
        max: usize,
    },
}

impl Sweep {
    pub fn new(from: f64, to: f64, per_decade: usize) -> Result<Sweep, SweepError> {
        for (name, value) in [("--from", from), ("--to", to)] {
            if !(value.is_finite() && value > 0.0) {
                return Err(SweepError::NotPositive { name, value });
            }
        }
        for (name, value) in [("--from", from), ("--to", to)] {
            if !crate::limits::FREQUENCY.contains(value) {
                return Err(SweepError::OutOfRange {
                    name,
                    value,
                    range: crate::limits::FREQUENCY.describe(),
                });
            }
        }
        if from >= to {
            return Err(SweepError::Order { from, to });
        }
        if per_decade == 0 {
            return Err(SweepError::NoPoints);
        }
        if per_decade > crate::limits::MAX_PER_DECADE {
            return Err(SweepError::TooDense(per_decade));
        }
        let decades = (to / from).log10();
        if decades * per_decade as f64 > MAX_POINTS as f64 {
            return Err(SweepError::TooManyPoints {
                per_decade,
                decades,
                max: MAX_POINTS,
            });
        }
        Ok(Sweep {
            from,
            to,
            per_decade,
        })
    }

    /// The sweep's frequencies, ascending; both ends included.
    pub fn frequencies(&self) -> Vec<f64> {
        log_spaced(self.from, self.to, self.per_decade)
    }
}

/// `from`·10^(j/n) for j = 0, 1, … while below `to`, then `to` itself.
///
/// The number of decades is a difference of logarithms, finite for any two positive
/// finite ends (their ratio could overflow); callers bound the count of points
/// ([`Sweep::new`]).
pub fn log_spaced(from: f64, to: f64, per_decade: usize) -> Vec<f64> {
    let n = per_decade as f64;
    let steps = (n * (to.log10() - from.log10())).floor().max(0.0) as usize;
    let mut out: Vec<f64> = (0..=steps)
        .map(|j| from * 10f64.powf(j as f64 / n))
        .filter(|&f| f < to * (1.0 - 1e-9))
        .collect();
    out.push(to);
    out
}

/// Evaluates the AC pass at any frequency on fixed operating points (the DC pass of
/// a midband evaluation), reusing its buffers.
pub struct AtFrequency<'a> {
    chain: &'a Chain,
    mid: &'a Evaluation,
    pub ac: Vec<AcState>,
    /// v(load)/EMF for every load at the last frequency.
    pub load_gain: Vec<Complex64>,
    /// Every feedback loop's figures at the last frequency.
    pub loops: Vec<crate::loops::LoopAc>,
}

impl<'a> AtFrequency<'a> {
    pub fn new(chain: &'a Chain, mid: &'a Evaluation) -> Self {
        AtFrequency {
            chain,
            mid,
            ac: mid.ac.clone(),
            load_gain: mid.load_gain.clone(),
            loops: mid.loops.clone(),
        }
    }

    /// Run the AC pass at `f` hertz.
    pub fn run(&mut self, f: f64) {
        ac::solve_with_loops(
            self.chain,
            Freq::Hz(f),
            self.mid.v_t,
            &self.mid.dc,
            &mut self.ac,
            &mut self.load_gain,
            &mut self.loops,
        );
    }
}

/// The chain's response over a sweep, with corners and attribution per load.
#[derive(Debug, Clone)]
pub struct Response {
    pub sweep: Sweep,
    pub frequencies: Vec<f64>,
    /// v(load)/EMF: `load_gain[k][j]` for load k at frequency j.
    pub load_gain: Vec<Vec<Complex64>>,
    /// Return ratio T of loop k at frequency j: `loop_gain[k][j]`.
    pub loop_gain: Vec<Vec<Complex64>>,
    /// v(output)/v(input) of each stage: `stage_gain[i][j]`.
    pub stage_gain: Vec<Vec<Complex64>>,
    /// The midband evaluation (operating points, midband gains).
    pub midband: Evaluation,
    /// Corners and attribution, one entry per load.
    pub corners: Vec<LoadCorners>,
    pub search: SearchRange,
}

/// Evaluate the response of `chain` over `sweep`, and find every load's corners.
pub fn analyse(chain: &Chain, sweep: &Sweep) -> Result<Response, DcError> {
    let midband = chain.evaluate()?;
    let frequencies = sweep.frequencies();
    let mut load_gain = vec![Vec::with_capacity(frequencies.len()); chain.loads.len()];
    let mut stage_gain = vec![Vec::with_capacity(frequencies.len()); chain.stages.len()];
    let mut loop_gain = vec![Vec::with_capacity(frequencies.len()); chain.topology.feedback.len()];
    let search = SearchRange::covering(sweep);
    let corners;
    {
        let mut at = AtFrequency::new(chain, &midband);
        for &f in &frequencies {
            at.run(f);
            for (k, g) in at.load_gain.iter().enumerate() {
                load_gain[k].push(*g);
            }
            for (i, st) in at.ac.iter().enumerate() {
                stage_gain[i].push(st.gain);
            }
            for (k, l) in at.loops.iter().enumerate() {
                loop_gain[k].push(l.return_ratio);
            }
        }
        corners = corners::find_all(chain, &midband, &mut at, &search);
    }
    Ok(Response {
        sweep: *sweep,
        frequencies,
        load_gain,
        stage_gain,
        loop_gain,
        midband,
        corners,
        search,
    })
}
