//! The collector current that minimises a stage's noise figure for the chain's source
//! resistance (`noise --optimum STAGE`): the stage's bias resistor (as `bias` moves
//! it: `r_feedback`, else `r_top`, else `r_bottom`) swept over a wide range, every
//! build biased and its band noise integrated, then the best grid point refined by
//! golden-section search in ln R. Beside it the textbook optimum of one transistor
//! fed from R_S, I_C,opt = (V_T/R_S)·√β (minimising 1/(2g_m·R_S) + g_m·R_S/(2β)).

use super::{band_noise, NoiseBand, NoiseError, NoiseModel, Weighting};
use crate::bias::knob::{bias_field, Field, Knob};
use crate::chain::Chain;

/// The sweep: R from R0/SPAN to R0·SPAN, POINTS log-spaced values.
pub const SPAN: f64 = 30.0;
pub const POINTS: usize = 61;
/// Golden-section steps (each shrinks the bracket by 0.618: 40 steps to 4e-9 in ln R).
const REFINE_STEPS: usize = 40;

/// One build of the sweep.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OptimumPoint {
    /// The bias resistor's value (Ω).
    pub resistance: f64,
    /// The stage's collector current (A).
    pub i_c: f64,
    /// Noise figure at the first load (dB).
    pub noise_figure_db: f64,
}

/// The result of the sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct Optimum {
    pub stage: usize,
    pub field: Field,
    /// Every build that biases, by rising resistance.
    pub points: Vec<OptimumPoint>,
    pub best: OptimumPoint,
    /// The best build lies at an end of the builds that bias (the minimum may lie beyond).
    pub at_edge: bool,
    /// (V_T/R_S)·√β with the stage's β at the best build (A).
    pub textbook_i_c: f64,
}

/// Why the sweep cannot run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum OptimumError {
    #[error("--optimum: stage \"{0}\" has no bias resistor (r_top, r_bottom or r_feedback) to sweep; expected a stage biased by its own resistors")]
    NoBiasResistor(String),
    #[error("--optimum: stage \"{0}\" is an op-amp stage, whose noise no bias current sets (its r_feedback is a gain resistor); expected a transistor stage biased by its own resistors")]
    Opamp(String),
    #[error("--optimum: the source has no resistance; expected a source resistance to compare the noise with")]
    NoSourceResistance,
    #[error("--optimum: stage \"{0}\" biases at no value of its {1} from 1/30 to 30 times the file's; expected a stage that can be biased")]
    NeverBiases(String, &'static str),
    #[error(transparent)]
    Noise(#[from] NoiseError),
}

/// The noise figure at the first load and the stage's I_C with the bias resistor at
/// `r`; `None` when that build has no operating point.
fn build(
    chain: &mut Chain,
    knob: Knob,
    stage: usize,
    r: f64,
    band: NoiseBand,
    weighting: Weighting,
) -> Result<Option<OptimumPoint>, NoiseError> {
    knob.set(chain, r);
    let mut model = match NoiseModel::new(chain) {
        Ok(m) => m,
        Err(NoiseError::Dc(_)) => return Ok(None),
        Err(e) => return Err(e),
    };
    let noise = band_noise(&mut model, band, weighting)?;
    let Some(s) = model.source_resistance() else {
        return Ok(None);
    };
    // NF = 10·log10(total / the source resistance's own output noise) (docs/definitions.md).
    let nf = 10.0 * (noise.total(0) / noise.power[0][s]).log10();
    Ok(nf.is_finite().then_some(OptimumPoint {
        resistance: r,
        i_c: model.midband.dc[stage].op.i_c,
        noise_figure_db: nf,
    }))
}

/// Sweep stage `stage`'s bias resistor for the lowest noise figure at the first load.
pub fn optimum(
    chain: &Chain,
    stage: usize,
    band: NoiseBand,
    weighting: Weighting,
) -> Result<Optimum, OptimumError> {
    let id = chain.stages[stage].id.clone();
    if chain.device_of(stage).opamp.is_some() {
        return Err(OptimumError::Opamp(id));
    }
    let field = bias_field(&chain.stages[stage].kind)
        .ok_or_else(|| OptimumError::NoBiasResistor(id.clone()))?;
    if chain.source.r_s <= 0.0 {
        return Err(OptimumError::NoSourceResistance);
    }
    let knob = Knob { stage, field };
    let r0 = knob.get(chain).unwrap_or(1.0);
    let mut work = chain.clone();
    let mut points = Vec::with_capacity(POINTS);
    for j in 0..POINTS {
        let x = -1.0 + 2.0 * j as f64 / (POINTS - 1) as f64;
        let r = r0 * SPAN.powf(x);
        if let Some(p) = build(&mut work, knob, stage, r, band, weighting)? {
            points.push(p);
        }
    }
    let k = (0..points.len())
        .min_by(|&a, &b| {
            points[a]
                .noise_figure_db
                .total_cmp(&points[b].noise_figure_db)
        })
        .ok_or(OptimumError::NeverBiases(id, field.key()))?;
    let at_edge = k == 0 || k + 1 == points.len();
    let mut best = points[k];
    if !at_edge {
        // Golden-section search in ln R between the neighbours of the best grid point.
        let (mut a, mut b) = (points[k - 1].resistance.ln(), points[k + 1].resistance.ln());
        let g = (5f64.sqrt() - 1.0) / 2.0;
        let mut eval = |u: f64, best: &mut OptimumPoint| -> Result<f64, NoiseError> {
            match build(&mut work, knob, stage, u.exp(), band, weighting)? {
                Some(p) => {
                    if p.noise_figure_db < best.noise_figure_db {
                        *best = p;
                    }
                    Ok(p.noise_figure_db)
                }
                None => Ok(f64::INFINITY),
            }
        };
        let (mut c, mut d) = (b - g * (b - a), a + g * (b - a));
        let (mut fc, mut fd) = (eval(c, &mut best)?, eval(d, &mut best)?);
        for _ in 0..REFINE_STEPS {
            if fc < fd {
                b = d;
                d = c;
                fd = fc;
                c = b - g * (b - a);
                fc = eval(c, &mut best)?;
            } else {
                a = c;
                c = d;
                fc = fd;
                d = a + g * (b - a);
                fd = eval(d, &mut best)?;
            }
        }
    }
    // β at the best build: I_C/I_B there.
    knob.set(&mut work, best.resistance);
    let ev = work.evaluate().map_err(NoiseError::from)?;
    let op = ev.dc[stage].op;
    let textbook_i_c = ev.v_t / chain.source.r_s * (op.i_c / op.i_b).sqrt();
    Ok(Optimum {
        stage,
        field,
        points,
        best,
        at_edge,
        textbook_i_c,
    })
}
