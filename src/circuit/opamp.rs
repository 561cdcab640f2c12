//! An op-amp stage's network, solved exactly (docs/definitions.md "Op-amp wiring"):
//! the stage's resistors between its nodes and its `reference`, `input_resistance`
//! between + and −, the source A·(v₊ − v₋) referenced to ground driving the pin
//! through `output_resistance`. Modified nodal analysis: the node voltages and the
//! source's current are the unknowns, so `output_resistance` = 0 (an ideal voltage
//! source on the pin) needs no stand-in resistance.
//!
//! The reference is a held node: its voltage at DC, AC ground at any frequency.

use crate::device::opamp::OpAmp;
use crate::network::{Freq, TwoPort};
use crate::nodal;
use arrayvec::ArrayVec;
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);

/// Where an element of the stage ends: the reference (held) or one of its nodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pin {
    Reference,
    Node(usize),
}

/// Most nodes of an op-amp stage (input, +, −, output).
pub const MAX_NODES: usize = 4;

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

/// What hangs on the output port.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Output {
    /// An admittance to ground and a current injected from outside.
    Load(Complex64, Complex64),
    /// Held at this voltage.
    Held(Complex64),
}

/// A solved stage: node voltages, the current the drive delivers into the input
/// port, and the pin current (out of the op-amp into load and feedback network).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Solution {
    pub v: [Complex64; MAX_NODES],
    pub i_in: Complex64,
    pub i_pin: Complex64,
    /// The current a held output port takes in from its holder (zero when loaded).
    pub i_held: Complex64,
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
        self.solve_with(amp, freq, v_ref, drive, Output::Load(y_load, i_test), ZERO)
    }

    /// [`OpAmpNetwork::solve`] with the output port loaded (admittance and injected
    /// current) or held at a voltage (for Y parameters; singular when the op-amp's own
    /// source holds the pin, `output_resistance` = 0).
    fn solve_with(
        &self,
        amp: &OpAmp,
        freq: Freq,
        v_ref: f64,
        drive: Drive,
        output: Output,
        offset: Complex64,
    ) -> Option<Solution> {
        let a = amp.open_loop_gain(freq);
        let zero = Complex64::ZERO;
        let v_ref = Complex64::new(v_ref, 0.0);
        // Unknown indices.
        let n = self.n;
        let src = if amp.r_out > 0.0 { n } else { self.output };
        let i_src = if amp.r_out > 0.0 { n + 1 } else { n };
        let i_drive = i_src + 1;
        let i_hold = i_drive + usize::from(matches!(drive, Drive::Voltage(_)));
        let m = i_hold + usize::from(matches!(output, Output::Held(_)));
        let mut y = [zero; 81];
        let mut rhs = [zero; 9];
        let at = |i: usize, j: usize| i * m + j;
        // A conductance g between two pins; the reference is a held voltage.
        let between = |y: &mut [Complex64; 81],
                       rhs: &mut [Complex64; 9],
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
        match output {
            Output::Load(y_load, i_test) => {
                y[at(self.output, self.output)] += y_load;
                rhs[self.output] += i_test;
            }
            Output::Held(v) => {
                // The holder's current enters the output node; v_output = v.
                y[at(self.output, i_hold)] -= Complex64::ONE;
                y[at(i_hold, self.output)] += Complex64::ONE;
                rhs[i_hold] = v;
            }
        }
        // The source: its current leaves its node's KCL; v_src − A·(v₊ − v₋) = offset
        // (0, or a test voltage for the loop gain).
        y[at(src, i_src)] -= Complex64::ONE;
        y[at(i_src, src)] += Complex64::ONE;
        rhs[i_src] += offset;
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
            i_held: if matches!(output, Output::Held(_)) {
                rhs[i_hold]
            } else {
                zero
            },
        })
    }

    /// The stage's two-port at `freq` (reference AC ground): Y parameters from the
    /// input and the output held in turn, or, with `output_resistance` = 0, the input
    /// admittance and gain of an output held by the op-amp's own source, which no load
    /// changes ([`TwoPort::source`]).
    pub fn two_port(&self, amp: &OpAmp, freq: Freq) -> Option<TwoPort> {
        let one = Drive::Voltage(Complex64::ONE);
        let zero = Complex64::ZERO;
        if amp.r_out == 0.0 {
            let s = self.solve_with(amp, freq, 0.0, one, Output::Load(zero, zero), zero)?;
            return Some(TwoPort::source(s.i_in, s.v[self.output]));
        }
        let a = self.solve_with(amp, freq, 0.0, one, Output::Held(zero), zero)?;
        let b = self.solve_with(
            amp,
            freq,
            0.0,
            Drive::Voltage(zero),
            Output::Held(Complex64::ONE),
            zero,
        )?;
        Some(TwoPort::new(a.i_in, b.i_in, a.i_held, b.i_held))
    }

    /// The rate di_pin/dv_out at which the pin current (into load and feedback network)
    /// moves with the output, at `freq` with admittance `y_load` on the output.
    pub fn pin_rate(&self, amp: &OpAmp, freq: Freq, y_load: Complex64) -> Option<Complex64> {
        let s = self.driven(amp, freq, y_load)?;
        Some(s.i_pin / s.v[self.output])
    }

    /// The loop gain T at midband (docs/definitions.md "Op-amp"): the op-amp's source
    /// replaced by a 1 V test source, the input port dead behind `z_source` (∞: open),
    /// `y_load` on the output; T = −A_0·(v₊ − v₋) that the test source produces. The
    /// closed-loop pole of the stage in its surroundings is then GBW/A_0·(1 + T).
    pub fn loop_gain(&self, amp: &OpAmp, z_source: Complex64, y_load: Complex64) -> Option<f64> {
        let zero = Complex64::ZERO;
        let drive = if z_source.is_finite() {
            Drive::Dead(z_source)
        } else {
            Drive::Open
        };
        let test = OpAmp { a_0: 0.0, ..*amp };
        let s = self.solve_with(
            &test,
            Freq::Midband,
            0.0,
            drive,
            Output::Load(y_load, zero),
            Complex64::ONE,
        )?;
        let at = |p: Pin| match p {
            Pin::Reference => zero,
            Pin::Node(k) => s.v[k],
        };
        Some(-amp.a_0 * (at(self.plus) - at(self.minus)).re)
    }

    /// The DC current the input port draws from its driver, from the node voltages
    /// `v` of a DC solution (reference at `v_ref`): Ohm's law in every resistor at the
    /// input node, and in `input_resistance` when the input is an op-amp input.
    pub fn input_current(&self, amp: &OpAmp, v: &[f64; MAX_NODES], v_ref: f64) -> f64 {
        let at = |p: Pin| match p {
            Pin::Reference => v_ref,
            Pin::Node(k) => v[k],
        };
        let input = Pin::Node(self.input);
        let r_in =
            amp.r_in
                .is_finite()
                .then_some(("input_resistance", self.plus, self.minus, amp.r_in));
        let mut i = 0.0;
        for (_, a, b, r) in self.resistors.iter().copied().chain(r_in) {
            if a == input && b != input {
                i += (at(a) - at(b)) / r;
            } else if b == input && a != input {
                i += (at(b) - at(a)) / r;
            }
        }
        i
    }

    /// DC power in every resistor by chain-file name, (V_a − V_b)²/R, from the node
    /// voltages `v` of a DC solution and the reference at `v_ref`.
    pub fn resistor_power(
        &self,
        v: &[f64; MAX_NODES],
        v_ref: f64,
    ) -> ArrayVec<(&'static str, f64), 4> {
        let at = |p: Pin| match p {
            Pin::Reference => v_ref,
            Pin::Node(k) => v[k],
        };
        self.resistors
            .iter()
            .map(|&(name, a, b, r)| (name, (at(a) - at(b)).powi(2) / r))
            .collect()
    }

    /// The stage at `freq` with its input port held at 1 V (reference AC ground) and
    /// admittance `y_load` on the output.
    fn driven(&self, amp: &OpAmp, freq: Freq, y_load: Complex64) -> Option<Solution> {
        let one = Drive::Voltage(Complex64::ONE);
        self.solve(amp, freq, 0.0, one, y_load, ZERO)
    }

    /// v(output)/v(input) with admittance `y_load` on the output, at `freq`.
    pub fn voltage_gain(&self, amp: &OpAmp, freq: Freq, y_load: Complex64) -> Option<Complex64> {
        Some(self.driven(amp, freq, y_load)?.v[self.output])
    }

    /// The admittance looking into the input port with `y_load` on the output.
    pub fn input_admittance(
        &self,
        amp: &OpAmp,
        freq: Freq,
        y_load: Complex64,
    ) -> Option<Complex64> {
        Some(self.driven(amp, freq, y_load)?.i_in)
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

/// What keeps an op-amp from resting at pin voltage `v_out` and pin current `i_out`
/// between the stage's `rails` (top, bottom), docs/definitions.md "Op-amp": a pin
/// outside the rails less `swing_margin`, or a current beyond ± `output_current_limit`
/// (the op-amp sits in current limiting, no linear operating point).
pub fn rest_fault(
    amp: &OpAmp,
    rails: (f64, f64),
    v_out: f64,
    i_out: f64,
) -> Option<crate::device::BiasFault> {
    let (lo, hi) = (rails.1 + amp.swing_margin, rails.0 - amp.swing_margin);
    if !(lo..=hi).contains(&v_out) {
        Some(crate::device::BiasFault::OpampOutputOutOfReach { v_out, lo, hi })
    } else if i_out.abs() > amp.i_limit {
        Some(crate::device::BiasFault::OpampCurrentLimited {
            i_out,
            i_limit: amp.i_limit,
        })
    } else {
        None
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
