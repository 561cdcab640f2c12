//! The operational amplifier (docs/definitions.md "Op-amp"): a one-pole voltage
//! amplifier A(s) = A_0/(1 + s·A_0/(2π·GBW)) whose source A·(v₊ − v₋) is referenced
//! to ground and drives the output pin through `output_resistance`, with the
//! differential `input_resistance` between the inputs.
//!
//! It does not sit behind `DeviceModel`: that interface is a three-terminal device
//! (control, output and common terminal, a current law with its partials), while the
//! op-amp is a four-terminal controlled voltage source (both inputs, the output pin and
//! ground) with no DC law of its own beyond its gain. Its stage network is solved by
//! `circuit::opamp`, exactly, with the source as one more unknown.

use super::model::Quantities;
use crate::network::Freq;
use num_complex::Complex64;
use std::f64::consts::PI;

/// An op-amp's parameters, in SI units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpAmp {
    /// A_0: the open-loop gain at DC and midband (V/V).
    pub a_0: f64,
    /// GBW: the gain–bandwidth product (Hz).
    pub gain_bandwidth: f64,
    /// Differential input resistance between + and − (∞ when absent).
    pub r_in: f64,
    /// Output resistance in series with the pin (0: an ideal voltage source).
    pub r_out: f64,
    /// How close the output pin comes to either rail of its stage (V).
    pub swing_margin: f64,
    /// Largest output pin current, either direction (∞ when absent).
    pub i_limit: f64,
    /// Slew rate (V/s), when the file gives one.
    pub slew_rate: Option<f64>,
    /// Input noise voltage density e_n (V/√Hz), a series source at + (0: none).
    pub voltage_noise: f64,
    /// Input noise current density i_n (A/√Hz), from each input pin to ground (0: none).
    pub current_noise: f64,
}

impl OpAmp {
    /// The open-loop pole f_p = GBW/A_0 (Hz).
    pub fn pole(&self) -> f64 {
        self.gain_bandwidth / self.a_0
    }

    /// A at `freq`: A_0 at DC and midband, where the pole does not act
    /// (docs/definitions.md "Midband"); A_0/(1 + j·f·A_0/GBW) at f, the one-pole law
    /// at s = j2πf.
    pub fn open_loop_gain(&self, freq: Freq) -> Complex64 {
        match freq.hz() {
            None => Complex64::new(self.a_0, 0.0),
            Some(f) => {
                let s = Complex64::new(0.0, 2.0 * PI * f);
                self.a_0 / (1.0 + s * self.a_0 / (2.0 * PI * self.gain_bandwidth))
            }
        }
    }

    /// The full-power bandwidth SR/(2π·V_peak): the highest frequency at which a sine
    /// of peak `v_peak` at the pin keeps within the slew rate (textbook: the sine's
    /// steepest slope is 2πf·V_peak). `None` without a slew rate or at zero level.
    pub fn full_power_bandwidth(&self, v_peak: f64) -> Option<f64> {
        let sr = self.slew_rate?;
        (v_peak > 0.0).then(|| sr / (2.0 * PI * v_peak))
    }

    /// The operating point as the reports name it: the pin's voltage and the current
    /// it sources (docs/definitions.md "Operating points").
    pub fn operating_quantities(v_out: f64, i_out: f64) -> Quantities {
        Quantities::new(&[("v_out", v_out), ("i_out", i_out)])
    }
}

/// How steeply the pin voltage falls, per ampere of the auxiliary current's excess
/// over `output_current_limit`, in [`ClippedOutput::at`] (V/A). Any positive value gives
/// the same solution (the delivered current is the limit exactly); it only scales the
/// auxiliary unknown. 1 kΩ: about a line load, so the Newton matrix stays balanced.
pub const CURRENT_LIMIT_SLOPE: f64 = 1e3;

/// Where a Newton step leaving a rail clip stops, as a fraction of the window
/// V_hi − V_lo inside the edge it crosses ([`ClippedOutput::leave_clip`]): far enough
/// inside that rounding cannot put it back beyond (our choice).
pub const CLIP_ENTRY: f64 = 0.01;

/// The op-amp's output in the large-signal network (docs/definitions.md "Large
/// signal"): at midband the source A_0·(v₊ − v₋) behind `output_resistance`, with the
/// pin held inside [V_lo, V_hi] (the stage's rails less `swing_margin`) and its current
/// inside ± `output_current_limit`. Piecewise linear in an auxiliary current j.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ClippedOutput {
    pub a_0: f64,
    pub r_out: f64,
    pub v_lo: f64,
    pub v_hi: f64,
    pub i_limit: f64,
}

/// [`ClippedOutput::at`]: the pin current and voltage with their exact partials.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OutputPoint {
    /// Delivered pin current i = clamp(j, −I_lim, I_lim), out of the op-amp.
    pub i: f64,
    pub di_dj: f64,
    /// The pin voltage the op-amp sets.
    pub v: f64,
    /// ∂v/∂(v₊ − v₋) and ∂v/∂j.
    pub dv_dvd: f64,
    pub dv_dj: f64,
}

impl ClippedOutput {
    /// The clipped output of `amp` on a stage between rails `top` and `bottom`.
    pub fn new(amp: &OpAmp, top: f64, bottom: f64) -> Self {
        ClippedOutput {
            a_0: amp.a_0,
            r_out: amp.r_out,
            v_lo: bottom + amp.swing_margin,
            v_hi: top - amp.swing_margin,
            i_limit: amp.i_limit,
        }
    }

    /// The pin voltage the linear source asks for: A_0·v_d − r_out·j.
    pub fn wanted(&self, v_d: f64, j: f64) -> f64 {
        self.a_0 * v_d - self.r_out * j
    }

    /// Newton's step on a clipped output (docs/definitions.md "Large signal"): when
    /// the wanted voltage moves from beyond a rail edge (`old`, clipped) to `new` on the
    /// other side of that edge, where to stop instead: `CLIP_ENTRY` of the window inside
    /// the edge. The clipped linearisation knows nothing of the narrow window
    /// (|v_d| < (V_hi − V_lo)/A_0) where the source is linear, and its steps jump over
    /// it from one rail to the other; from inside, the linear law's step is exact.
    pub fn leave_clip(&self, old: f64, new: f64) -> Option<f64> {
        let inset = CLIP_ENTRY * (self.v_hi - self.v_lo);
        if old > self.v_hi && new <= self.v_hi {
            Some(self.v_hi - inset)
        } else if old < self.v_lo && new >= self.v_lo {
            Some(self.v_lo + inset)
        } else {
            None
        }
    }

    /// The same for the auxiliary current j (`old` to `new`) and the current limit:
    /// leaving ±I_limit for the other side stops `CLIP_ENTRY` of 2·I_limit inside.
    pub fn leave_limit(&self, old: f64, new: f64) -> Option<f64> {
        let inset = CLIP_ENTRY * 2.0 * self.i_limit;
        if old > self.i_limit && new <= self.i_limit {
            Some(self.i_limit - inset)
        } else if old < -self.i_limit && new >= -self.i_limit {
            Some(-self.i_limit + inset)
        } else {
            None
        }
    }

    /// The delivered pin current at auxiliary current j: clamp(j, ±I_limit).
    pub fn current(&self, j: f64) -> f64 {
        j.clamp(-self.i_limit, self.i_limit)
    }

    /// At differential input v_d = v₊ − v₋ and auxiliary current j:
    /// i = clamp(j, ±I_lim), v = clamp(A_0·v_d − r_out·j, V_lo, V_hi) − R_X·(j − i),
    /// R_X = [`CURRENT_LIMIT_SLOPE`]. Inside both limits i = j and v = A_0·v_d − r_out·i
    /// (the linear source); at a rail edge v is held there whatever current the network
    /// draws; past the current limit i is held at ±I_lim and v goes where the network
    /// takes it (j absorbs it). The derivative of a clamp is taken as 1 inside and 0
    /// outside, the edge itself counting as inside.
    pub fn at(&self, v_d: f64, j: f64) -> OutputPoint {
        let i = self.current(j);
        let di_dj = if j.abs() > self.i_limit { 0.0 } else { 1.0 };
        let wanted = self.wanted(v_d, j);
        let (held, inside) = if wanted > self.v_hi {
            (self.v_hi, 0.0)
        } else if wanted < self.v_lo {
            (self.v_lo, 0.0)
        } else {
            (wanted, 1.0)
        };
        OutputPoint {
            i,
            di_dj,
            v: held - CURRENT_LIMIT_SLOPE * (j - i),
            dv_dvd: inside * self.a_0,
            dv_dj: -inside * self.r_out - CURRENT_LIMIT_SLOPE * (1.0 - di_dj),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn amp() -> OpAmp {
        OpAmp {
            a_0: 2e5,
            gain_bandwidth: 1e6,
            r_in: f64::INFINITY,
            r_out: 0.0,
            swing_margin: 1.0,
            i_limit: f64::INFINITY,
            slew_rate: Some(0.5e6),
            voltage_noise: 0.0,
            current_noise: 0.0,
        }
    }

    #[test]
    fn one_pole_law() {
        // One pole at GBW/A_0 (textbook one-pole model, from memory): |A| = A_0/√2 at
        // the pole, and |A|·f → GBW far above it.
        let a = amp();
        assert_eq!(a.open_loop_gain(Freq::Midband), Complex64::new(2e5, 0.0));
        assert!((a.pole() - 5.0).abs() < 1e-12);
        let at_pole = a.open_loop_gain(Freq::Hz(5.0)).norm();
        assert!((at_pole - 2e5 / 2f64.sqrt()).abs() < 1e-9 * 2e5);
        let f = 1e5;
        assert!((a.open_loop_gain(Freq::Hz(f)).norm() * f - 1e6).abs() < 1e-6 * 1e6);
    }

    #[test]
    fn clipped_output_pieces_and_their_exact_partials() {
        // Rails ±15 V less 1 V, 20 mA, r_out 50 Ω. Each piece by its definition
        // (docs/definitions.md "Large signal"), and every partial against a central
        // difference (calculus; the pieces are linear, so to rounding) away from kinks.
        let mut a = amp();
        a.r_out = 50.0;
        a.i_limit = 20e-3;
        let law = ClippedOutput::new(&a, 15.0, -15.0);
        // Linear: v = A_0·v_d − r_out·j, i = j.
        let p = law.at(2e-5, 1e-3);
        assert!((p.v - (2e5 * 2e-5 - 50.0 * 1e-3)).abs() < 1e-12 && p.i == 1e-3);
        // At the top rail edge: v = 14 V whatever j; i = j.
        let p = law.at(1e-3, 5e-3);
        assert_eq!((p.v, p.i, p.dv_dvd), (14.0, 5e-3, 0.0));
        // Past the current limit: i = 20 mA exactly; v falls by R_X per ampere beyond.
        let p = law.at(2e-5, 25e-3);
        assert_eq!(p.i, 20e-3);
        let want = 2e5 * 2e-5 - 50.0 * 25e-3 - CURRENT_LIMIT_SLOPE * 5e-3;
        assert!((p.v - want).abs() < 1e-12);
        for (v_d, j) in [(2e-5, 1e-3), (1e-3, 5e-3), (2e-5, 25e-3), (-1e-3, -30e-3)] {
            let p = law.at(v_d, j);
            let (h_v, h_j) = (1e-9, 1e-7);
            let dv_dvd = (law.at(v_d + h_v, j).v - law.at(v_d - h_v, j).v) / (2.0 * h_v);
            let dv_dj = (law.at(v_d, j + h_j).v - law.at(v_d, j - h_j).v) / (2.0 * h_j);
            let di_dj = (law.at(v_d, j + h_j).i - law.at(v_d, j - h_j).i) / (2.0 * h_j);
            assert!((dv_dvd - p.dv_dvd).abs() <= 1e-4 * p.dv_dvd.abs().max(1.0));
            assert!((dv_dj - p.dv_dj).abs() <= 1e-4 * p.dv_dj.abs().max(1.0));
            assert!((di_dj - p.di_dj).abs() <= 1e-6);
        }
    }

    #[test]
    fn full_power_bandwidth_is_the_textbook_one() {
        // SR/(2π·V_peak) (textbook): 0.5 V/µs at 10 V peak is 7.958 kHz.
        let f = amp().full_power_bandwidth(10.0).expect("slew rate given");
        assert!((f - 0.5e6 / (2.0 * PI * 10.0)).abs() < 1e-9);
        assert!((f - 7957.747).abs() < 1e-3);
        assert_eq!(amp().full_power_bandwidth(0.0), None);
    }
}
