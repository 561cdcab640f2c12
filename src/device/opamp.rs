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
    fn full_power_bandwidth_is_the_textbook_one() {
        // SR/(2π·V_peak) (textbook): 0.5 V/µs at 10 V peak is 7.958 kHz.
        let f = amp().full_power_bandwidth(10.0).expect("slew rate given");
        assert!((f - 0.5e6 / (2.0 * PI * 10.0)).abs() < 1e-9);
        assert!((f - 7957.747).abs() < 1e-3);
        assert_eq!(amp().full_power_bandwidth(0.0), None);
    }
}
