//! One evaluation of a chain: DC pass, AC pass, headroom. The [`Evaluation`] holds
//! all results and is reused between evaluations, so repeated evaluation of a chain
//! with changed values allocates nothing.

use crate::ac::{self, AcState};
use crate::chain::Chain;
use crate::dc::{self, DcError, DcState};
use crate::device::thermal_voltage;
use crate::headroom::{self, Headroom};
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
        }
    }

    /// Evaluate `chain` at `freq` into these buffers (sized by [`Evaluation::new`]
    /// for a chain of the same shape).
    pub fn run(&mut self, chain: &Chain, freq: Freq) -> Result<(), DcError> {
        self.freq = freq;
        self.v_t = thermal_voltage(chain.temperature);
        dc::solve(chain, self.v_t, &mut self.dc)?;
        ac::solve(
            chain,
            freq,
            self.v_t,
            &self.dc,
            &mut self.ac,
            &mut self.load_gain,
        );
        self.first_clip = headroom::solve(
            chain,
            freq,
            self.v_t,
            &self.dc,
            &self.ac,
            &mut self.headroom,
        );
        Ok(())
    }
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
