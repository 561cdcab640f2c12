//! An op-amp stage's network, solved exactly (docs/definitions.md "Op-amp wiring"):
//! the stage's resistors between its nodes and its `reference`, `input_resistance`
//! between + and −, the source A·(v₊ − v₋) referenced to ground driving the pin
//! through `output_resistance`. Modified nodal analysis: the node voltages and the
//! source's current are the unknowns, so `output_resistance` = 0 (an ideal voltage
//! source on the pin) needs no stand-in resistance.
//!
//! The reference is a held node: its voltage at DC, AC ground at any frequency.

use crate::device::opamp::OpAmp;
use crate::network::Freq;
use crate::nodal;
use arrayvec::ArrayVec;
use num_complex::Complex64;

/// Where an element of the stage ends: the reference (held) or one of its nodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pin {
    Reference,
    Node(usize),
}

/// Most nodes of an op-amp stage (input, +, −, output).
const MAX_NODES: usize = 4;

/// An op-amp stage's network: nodes 0 … n−1, its resistors by chain-file name, and
/// where the inputs, the output pin and the stage's input port sit.
#[derive(Debug, Clone, PartialEq)]
pub struct OpAmpNetwork {
    pub n: usize,
    pub resistors: ArrayVec<(&'static str, Pin, Pin, f64), 4>,
    /// The stage's input port (the driver's link ends here).
    pub input: usize,
    pub plus: Pin,
    pub minus: Pin,
    /// The output pin (the successors' links start here).
    pub output: usize,
}

/// How the input port is driven.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Drive {
    /// Held at this voltage.
    Voltage(Complex64),
    /// Left open (a coupling capacitor at DC).
    Open,
    /// Dead behind impedance `z` (a source EMF set to zero), for output impedances.
    Dead(Complex64),
}

/// A solved stage: node voltages, the current the drive delivers into the input
/// port, and the pin current (out of the op-amp into load and feedback network).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Solution {
    pub v: [Complex64; MAX_NODES],
    pub i_in: Complex64,
    pub i_pin: Complex64,
}

impl OpAmpNetwork {
    /// Solve the stage with the reference at `v_ref` (0 for AC), the input port
    /// driven by `drive`, admittance `y_load` from the output pin to ground and
    /// current `i_test` injected into the pin from outside. `None` when the network
    /// is singular (a node with no path that fixes it).
    ///
    /// Unknowns: the n node voltages, the source's own node when `output_resistance`
    /// is above zero, the source's current, and the input drive's current when held.
    pub fn solve(
        &self,
        amp: &OpAmp,
        freq: Freq,
        v_ref: f64,
        drive: Drive,
        y_load: Complex64,
        i_test: Complex64,
    ) -> Option<Solution> {
        let a = amp.open_loop_gain(freq);
        let zero = Complex64::ZERO;
        let v_ref = Complex64::new(v_ref, 0.0);
        // Unknown indices.
        let n = self.n;
        let src = if amp.r_out > 0.0 { n } else { self.output };
        let i_src = if amp.r_out > 0.0 { n + 1 } else { n };
        let i_drive = i_src + 1;
        let m = i_drive + usize::from(matches!(drive, Drive::Voltage(_)));
        let mut y = [zero; 64];
        let mut rhs = [zero; 8];
        let at = |i: usize, j: usize| i * m + j;
        // A conductance g between two pins; the reference is a held voltage.
        let between = |y: &mut [Complex64; 64],
                       rhs: &mut [Complex64; 8],
                       p: Pin,
                       q: Pin,
                       g: Complex64| {
            match (p, q) {
                (Pin::Node(i), Pin::Node(j)) => {
                    nodal::stamp_between(&mut y[..m * m], m, Some(i), Some(j), g)
                }
                (Pin::Node(i), Pin::Reference) | (Pin::Reference, Pin::Node(i)) => {
                    y[at(i, i)] += g;
                    rhs[i] += g * v_ref;
                }
                (Pin::Reference, Pin::Reference) => {}
            }
        };
        for &(_, p, q, r) in &self.resistors {
            between(&mut y, &mut rhs, p, q, Complex64::new(1.0 / r, 0.0));
        }
        if amp.r_in.is_finite() {
            between(
                &mut y,
                &mut rhs,
                self.plus,
                self.minus,
                Complex64::new(1.0 / amp.r_in, 0.0),
            );
        }
        if amp.r_out > 0.0 {
            let g = Complex64::new(1.0 / amp.r_out, 0.0);
            nodal::stamp_between(&mut y[..m * m], m, Some(src), Some(self.output), g);
        }
        y[at(self.output, self.output)] += y_load;
        rhs[self.output] += i_test;
        // The source: its current leaves its node's KCL; v_src − A·(v₊ − v₋) = 0.
        y[at(src, i_src)] -= Complex64::ONE;
        y[at(i_src, src)] += Complex64::ONE;
        for (pin, sign) in [(self.plus, -1.0), (self.minus, 1.0)] {
            match pin {
                Pin::Node(k) => y[at(i_src, k)] += sign * a,
                Pin::Reference => rhs[i_src] -= sign * a * v_ref,
            }
        }
        match drive {
            Drive::Voltage(v) => {
                // The drive's current enters the input node; v_input = v.
                y[at(self.input, i_drive)] -= Complex64::ONE;
                y[at(i_drive, self.input)] += Complex64::ONE;
                rhs[i_drive] = v;
            }
            Drive::Dead(z) => y[at(self.input, self.input)] += Complex64::ONE / z,
            Drive::Open => {}
        }
        nodal::solve_in_place(&mut y[..m * m], m, &mut rhs[..m])?;
        let mut v = [zero; MAX_NODES];
        v[..n].copy_from_slice(&rhs[..n]);
        Some(Solution {
            v,
            i_in: if matches!(drive, Drive::Voltage(_)) {
                rhs[i_drive]
            } else {
                zero
            },
            i_pin: rhs[i_src],
        })
    }

    /// v(output)/v(input) with admittance `y_load` on the output, at `freq`.
    pub fn voltage_gain(&self, amp: &OpAmp, freq: Freq, y_load: Complex64) -> Option<Complex64> {
        let s = self.solve(
            amp,
            freq,
            0.0,
            Drive::Voltage(Complex64::ONE),
            y_load,
            Complex64::ZERO,
        )?;
        Some(s.v[self.output])
    }

    /// The admittance looking into the input port with `y_load` on the output.
    pub fn input_admittance(
        &self,
        amp: &OpAmp,
        freq: Freq,
        y_load: Complex64,
    ) -> Option<Complex64> {
        let s = self.solve(
            amp,
            freq,
            0.0,
            Drive::Voltage(Complex64::ONE),
            y_load,
            Complex64::ZERO,
        )?;
        Some(s.i_in)
    }

    /// The impedance looking back into the output pin, load removed, with the input
    /// port dead behind `z_source` (infinite: open): 1 A injected, v(output) read.
    /// Exactly zero with `output_resistance` = 0.
    pub fn output_impedance(
        &self,
        amp: &OpAmp,
        freq: Freq,
        z_source: Complex64,
    ) -> Option<Complex64> {
        let drive = if z_source.is_finite() {
            Drive::Dead(z_source)
        } else {
            Drive::Open
        };
        let s = self.solve(amp, freq, 0.0, drive, Complex64::ZERO, Complex64::ONE)?;
        Some(s.v[self.output])
    }
}

/// An op-amp stage's swing at its output pin (docs/definitions.md "Op-amp"): the room
/// up and down to the rail edges (`swing_margin` inside the stage's rails) and to the
/// pin current limit, given the quiescent pin voltage and current and the rate
/// di_pin/dv_out of the pin current as the output moves (load and feedback network).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PinSwing {
    pub up: (f64, Edge),
    pub down: (f64, Edge),
}

/// Which edge of an op-amp's output a side meets first.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Edge {
    /// The pin within `swing_margin` of a rail.
    Rail,
    /// The pin current at ± `output_current_limit`.
    CurrentLimit,
}

/// The swing at the pin (region limits: distance to each edge over its rate).
pub fn pin_swing(amp: &OpAmp, rails: (f64, f64), v_out: f64, i_out: f64, di_dv: f64) -> PinSwing {
    let (top, bottom) = rails;
    let rail_up = top - amp.swing_margin - v_out;
    let rail_down = v_out - (bottom + amp.swing_margin);
    // The pin current moves by di_dv per volt of output: rising output, rising current
    // when di_dv > 0, reaching +I_lim after (I_lim − I_Q)/di_dv volts.
    let (cur_up, cur_down) = if di_dv > 0.0 {
        ((amp.i_limit - i_out) / di_dv, (amp.i_limit + i_out) / di_dv)
    } else if di_dv < 0.0 {
        (
            (amp.i_limit + i_out) / -di_dv,
            (amp.i_limit - i_out) / -di_dv,
        )
    } else {
        (f64::INFINITY, f64::INFINITY)
    };
    let side = |rail: f64, cur: f64| {
        if cur < rail {
            (cur, Edge::CurrentLimit)
        } else {
            (rail, Edge::Rail)
        }
    };
    PinSwing {
        up: side(rail_up, cur_up),
        down: side(rail_down, cur_down),
    }
}
