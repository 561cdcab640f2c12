//! A stage's small-signal two-port from its description: every element and the
//! device's hybrid-π stamped on the nodal core at s, every node but the input and the
//! output eliminated (Kron reduction). Rails are AC ground; wires and shorted
//! capacitors merge their nodes. The work is done by the compiled plan (`plan.rs`),
//! which the evaluation keeps between runs; this entry compiles one on the spot.

use super::plan::Plan;
use super::SubCircuit;
use crate::network::{Freq, HybridPi, TwoPort};

impl SubCircuit {
    /// The two-port between the input and the output node at `freq`, the device
    /// linearised as `hp`: [i_in; i_out] = Y·[v_in; v_out], currents into the stage.
    pub fn two_port(&self, hp: &HybridPi, freq: Freq) -> TwoPort {
        let mut plan = Plan::default();
        plan.refresh(self);
        plan.solve_own_dc(
            self,
            super::dc::Rails {
                top: 0.0,
                bottom: 0.0,
            },
        );
        plan.two_port(self, hp, freq)
    }
}
