//! One evaluation of a chain: DC pass, AC pass, headroom. The [`Evaluation`] holds
//! all results and is reused between evaluations, so repeated evaluation of a chain
//! with changed values allocates nothing.

use crate::ac::{self, AcState};
use crate::chain::Chain;
use crate::dc::{self, DcError, DcState};
use crate::device::thermal_voltage;
use crate::headroom::{self, Headroom};
use crate::loops::LoopAc;
use crate::network::Freq;
use num_complex::Complex64;

/// Results of evaluating a chain at one frequency.
#[derive(Debug, Clone)]
pub struct Evaluation {
    pub freq: Freq,
    /// Thermal voltage V_T = kT/q at the chain's temperature.
    pub v_t: f64,
    pub dc: Vec<DcState>,
    pub ac: Vec<AcState>,
    pub headroom: Vec<Headroom>,
    /// v(load)/EMF for every load.
    pub load_gain: Vec<Complex64>,
    /// Index of the stage with the lowest clip input level.
    pub first_clip: usize,
    /// Each feedback loop's figures (`Topology::feedback` order).
    pub loops: Vec<LoopAc>,
}

impl Evaluation {
    /// Buffers sized for `chain`.
    pub fn new(chain: &Chain) -> Self {
        let n = chain.stages.len();
        Evaluation {
            freq: Freq::Midband,
            v_t: thermal_voltage(chain.temperature),
            dc: vec![DcState::default(); n],
            ac: vec![AcState::default(); n],
            headroom: vec![Headroom::default(); n],
            load_gain: vec![Complex64::new(0.0, 0.0); chain.loads.len()],
            first_clip: 0,
            loops: vec![LoopAc::default(); chain.topology.feedback.len()],
        }
    }

    /// Evaluate `chain` at `freq` into these buffers (sized by [`Evaluation::new`]
    /// for a chain of the same shape).
    pub fn run(&mut self, chain: &Chain, freq: Freq) -> Result<(), DcError> {
        self.run_with(chain, freq, false)
    }

    /// [`Evaluation::run`] for a chain that differs from the last one evaluated here
    /// in a few values: a stage alone in its DC group whose inputs did not move keeps
    /// its DC solution (`dc::solve_reusing`). The results are bit for bit `run`'s.
    pub fn run_changed(&mut self, chain: &Chain, freq: Freq) -> Result<(), DcError> {
        self.run_with(chain, freq, true)
    }

    fn run_with(&mut self, chain: &Chain, freq: Freq, reuse: bool) -> Result<(), DcError> {
        self.freq = freq;
        self.v_t = thermal_voltage(chain.temperature);
        dc::solve_reusing(chain, self.v_t, &mut self.dc, reuse)?;
        ac::solve_with_loops(
            chain,
            freq,
            self.v_t,
            &self.dc,
            &mut self.ac,
            &mut self.load_gain,
            &mut self.loops,
        );
        check_gains(chain, &self.ac, &self.load_gain, GainUse::Levels)?;
        self.first_clip = headroom::solve(
            chain,
            freq,
            self.v_t,
            &self.dc,
            &self.ac,
            &self.loops,
            &mut self.headroom,
        );
        Ok(())
    }
}

/// Largest |gain| from the source EMF to a node (and smallest nonzero one, its
/// inverse) a chain may have: 6000 dB (docs/definitions.md, range of gains). f64 holds magnitudes from about 1e-308 to
/// 1e308, so levels (the planned input times the gain, a swing limit over it) stay
/// representable with room to spare; beyond, they would overflow, vanish or turn into
/// NaN.
pub const GAIN_LIMIT: f64 = 1e300;

/// What a range of gains keeps representable: levels (every evaluation, within
/// [`GAIN_LIMIT`]) or noise powers, which square the gain (`noise`, within its square
/// root: 3000 dB).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum GainUse {
    Levels,
    Noise,
}

impl GainUse {
    /// The largest |gain| (the smallest nonzero one is its inverse).
    pub fn limit(self) -> f64 {
        match self {
            GainUse::Levels => GAIN_LIMIT,
            GainUse::Noise => GAIN_LIMIT.sqrt(),
        }
    }
    fn expected(self) -> &'static str {
        match self {
            GainUse::Levels => "a gain within ±6000 dB (levels beyond that overflow f64)",
            GainUse::Noise => {
                "a gain within ±3000 dB for noise (noise powers, in V²/Hz, square the gain and beyond that overflow f64)"
            }
        }
    }
}

/// Where a cumulative gain left the range f64 levels (or noise powers) can be
/// computed in.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{} \"{id}\": the gain from the source EMF to {} {}; expected {}: plan a chain this long as two chains, the second with its own source", if *load { "load" } else { "stage" }, if *load { "the load" } else { "its output" }, describe_gain(*gain), range.expected())]
pub struct GainOverflow {
    /// The stage's id, or the load's.
    pub id: String,
    pub load: bool,
    /// |gain|, possibly infinite or NaN.
    pub gain: f64,
    /// The range it left.
    pub range: GainUse,
}

fn describe_gain(g: f64) -> String {
    if g.is_nan() {
        "is not a number (an infinite gain met a zero)".into()
    } else if g.is_infinite() {
        "overflows f64 (infinite)".into()
    } else {
        let db = 20.0 * g.log10();
        let verb = if db > 0.0 { "reaches" } else { "falls to" };
        format!("{verb} {g:.3e} ({db:+.0} dB)").replace('-', "−")
    }
}

/// A gain within `limit`: finite, at most `limit`, and zero or at least its inverse
/// (by its larger part, within √2 of |g|: no square root in every evaluation).
fn gain_in_range(g: Complex64, limit: f64) -> bool {
    let m = g.re.abs().max(g.im.abs());
    m.is_finite() && m <= limit && (m == 0.0 || m >= 1.0 / limit)
}

/// The first stage (in the chain's order), then load, whose gain from the source left
/// the range `range` keeps.
pub fn check_gains(
    chain: &Chain,
    ac: &[AcState],
    load_gain: &[Complex64],
    range: GainUse,
) -> Result<(), GainOverflow> {
    let limit = range.limit();
    if let Some(i) = ac.iter().position(|a| !gain_in_range(a.cumulative, limit)) {
        return Err(GainOverflow {
            id: chain.stages[i].id.clone(),
            load: false,
            gain: ac[i].cumulative.norm(),
            range,
        });
    }
    if let Some(k) = load_gain.iter().position(|g| !gain_in_range(*g, limit)) {
        return Err(GainOverflow {
            id: chain.loads[k].id.clone(),
            load: true,
            gain: load_gain[k].norm(),
            range,
        });
    }
    Ok(())
}

impl Chain {
    /// Evaluate at midband (docs/definitions.md: capacitors short for AC, open for DC).
    pub fn evaluate(&self) -> Result<Evaluation, DcError> {
        self.evaluate_at(Freq::Midband)
    }

    /// Evaluate at `freq`.
    pub fn evaluate_at(&self, freq: Freq) -> Result<Evaluation, DcError> {
        let mut ev = Evaluation::new(self);
        ev.run(self, freq)?;
        Ok(ev)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference: a cold evaluation of each build from a fresh [`Evaluation`]. A
    /// sequence of builds moving one part at a time (as `tune` makes them), one of
    /// them saturating its stage, evaluated with [`Evaluation::run_changed`] in one
    /// buffer gives every operating point and clip level bit for bit.
    #[test]
    fn run_changed_equals_a_cold_evaluation_bit_for_bit() {
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/chains/boost-pedal.json");
        let mut chain = Chain::from_json_str(&std::fs::read_to_string(path).unwrap()).unwrap();
        let gain1 = chain.stage_index("gain1").unwrap();
        let output = chain.stage_index("output").unwrap();
        // (stage, part, factor): part 0 is r_top, 2 the follower's r_emitter and the
        // common emitter's r_collector; × 40 on r_collector saturates gain1.
        let moves = [
            (output, 2, 1.1),
            (output, 2, 1.0 / 1.1),
            (gain1, 2, 40.0),
            (gain1, 2, 1.0 / 40.0),
            (output, 2, 1.2),
            (gain1, 0, 1.1),
            (output, 2, 1.0 / 1.2),
        ];
        let mut ev = Evaluation::new(&chain);
        let mut failures = 0;
        for (stage, part, factor) in moves {
            *chain.stages[stage].kind.part_mut(part).unwrap() *= factor;
            let warm = ev.run_changed(&chain, Freq::Midband);
            match chain.evaluate() {
                Ok(cold) => {
                    warm.unwrap();
                    for i in 0..chain.stages.len() {
                        assert_eq!(ev.dc[i].op, cold.dc[i].op, "stage {i}");
                        assert_eq!(ev.dc[i].terminals, cold.dc[i].terminals, "stage {i}");
                        let (a, b) = (&ev.headroom[i], &cold.headroom[i]);
                        assert_eq!(a.clip_input_vpeak.to_bits(), b.clip_input_vpeak.to_bits());
                    }
                    assert_eq!(ev.load_gain, cold.load_gain);
                }
                Err(e) => {
                    assert_eq!(warm.unwrap_err(), e);
                    failures += 1;
                }
            }
        }
        assert_eq!(failures, 1, "the saturating build fails");
    }
}
