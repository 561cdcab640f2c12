//! How a transistor's parameters follow the temperature (used by `spread`).
//!
//! V_T = kT/q follows from [`super::thermal_voltage`]; the saturation current follows
//! the usual junction law I_S(T) = I_S(T0)·(T/T0)^3·exp((E_g/(k/q))·(1/T0 − 1/T))
//! with E_g = 1.11 eV for silicon (from memory); β follows an optional linear
//! coefficient, β(T) = β(T0)·(1 + c·(T − T0)).

use super::{BOLTZMANN, ELEMENTARY_CHARGE};

/// Band gap of silicon in eV, as used in the saturation-current law (from memory).
pub const SILICON_BAND_GAP_EV: f64 = 1.11;

/// I_S at `t` kelvin, given I_S = `i_s0` at `t0` kelvin:
/// I_S(T) = I_S(T0)·(T/T0)^3·exp((E_g/(k/q))·(1/T0 − 1/T)).
pub fn saturation_current_at(i_s0: f64, t0: f64, t: f64) -> f64 {
    let eg_over_k_q = SILICON_BAND_GAP_EV * ELEMENTARY_CHARGE / BOLTZMANN;
    i_s0 * (t / t0).powi(3) * (eg_over_k_q * (1.0 / t0 - 1.0 / t)).exp()
}

/// β at `t` kelvin, given β = `beta0` at `t0` and a relative change `per_kelvin`:
/// β(T) = β(T0)·(1 + c·(T − T0)).
pub fn beta_at(beta0: f64, per_kelvin: f64, t0: f64, t: f64) -> f64 {
    beta0 * (1.0 + per_kelvin * (t - t0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{thermal_voltage, ZERO_CELSIUS};

    /// V_BE at constant I_C from I_C = I_S·e^(V_BE/V_T): V_BE = V_T·ln(I_C/I_S(T)).
    fn v_be(i_c: f64, i_s0: f64, t0: f64, t: f64) -> f64 {
        thermal_voltage(t) * (i_c / saturation_current_at(i_s0, t0, t)).ln()
    }

    #[test]
    fn v_be_falls_about_2_mv_per_kelvin_at_constant_collector_current() {
        // V_BE of a silicon junction at constant I_C falls by about 2 mV per °C near
        // room temperature (common practice, no source): accept −1.7 to −2.3 mV/°C.
        // Checked for the default I_S (1e-14 A) and the demo devices' 12 fA to 30 fA at
        // small-signal collector currents of 100 µA and 1 mA (V_BE about 0.57 V to 0.66 V;
        // the law gives a slope of (V_BE − E_g − 3·V_T)/T, flatter at higher V_BE).
        let t0 = ZERO_CELSIUS + 25.0;
        for i_s0 in [1e-14, 12e-15, 20e-15, 30e-15] {
            for i_c in [100e-6, 1e-3] {
                let slope = (v_be(i_c, i_s0, t0, t0 + 5.0) - v_be(i_c, i_s0, t0, t0 - 5.0)) / 10.0;
                assert!(
                    (-2.3e-3..=-1.7e-3).contains(&slope),
                    "I_S {i_s0:e} A, I_C {i_c:e} A: {:.3} mV/K",
                    slope * 1e3
                );
            }
        }
    }

    #[test]
    fn saturation_current_doubles_about_every_5_kelvin() {
        // Rule of thumb: I_S of silicon roughly doubles for every 5 °C rise near room
        // temperature (common practice, no source; some texts say 15 %/°C). Accept 4 to 6 K.
        let t0 = ZERO_CELSIUS + 25.0;
        let per_kelvin = (saturation_current_at(1e-14, t0, t0 + 1.0) / 1e-14).ln();
        let doubling = std::f64::consts::LN_2 / per_kelvin;
        assert!((4.0..=6.0).contains(&doubling), "{doubling} K");
        // At T = T0 nothing changes (the law's own normalisation).
        assert_eq!(saturation_current_at(3e-14, t0, t0), 3e-14);
        assert_eq!(beta_at(200.0, 0.005, t0, t0), 200.0);
        // +0.5 %/K over 20 K: +10 % (the linear law as documented).
        assert!((beta_at(200.0, 0.005, t0, t0 + 20.0) - 220.0).abs() < 1e-9);
    }
}
