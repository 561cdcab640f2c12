//! The Ebers–Moll transport model with the Early factor: the fuller device model for
//! output characteristics and large-signal work, valid in every region (forward
//! active, saturation, cutoff, reverse). In forward active it reduces to docs/definitions.md's
//! I_C = I_S·e^(V_BE/V_T)·(1 + V_CE/V_A), I_B = (I_S/β)·e^(V_BE/V_T) up to terms of
//! order e^(−V_BE/V_T) and e^(V_BC/V_T), which the planner's model leaves out.
//!
//! Transport current I_T = I_S·(e^(V_BE/V_T) − e^(V_BC/V_T))·(1 + V_CE/V_A);
//! I_C = I_T − (I_S/β_R)·(e^(V_BC/V_T) − 1);
//! I_B = (I_S/β_F)·(e^(V_BE/V_T) − 1) + (I_S/β_R)·(e^(V_BC/V_T) − 1)
//! (the transport form of the Ebers–Moll equations, any device-physics text; from memory).

use super::Device;

/// Terminal currents and their partial derivatives at one bias point.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Currents {
    pub i_c: f64,
    pub i_b: f64,
    /// ∂I_C/∂V_BE, ∂I_C/∂V_BC, ∂I_B/∂V_BE, ∂I_B/∂V_BC.
    pub dic_dvbe: f64,
    pub dic_dvbc: f64,
    pub dib_dvbe: f64,
    pub dib_dvbc: f64,
}

impl Currents {
    pub fn i_e(&self) -> f64 {
        self.i_c + self.i_b
    }
}

/// Evaluate the model at junction voltages V_BE and V_BC.
pub fn currents(device: &Device, v_t: f64, v_be: f64, v_bc: f64) -> Currents {
    let i_s = device.i_s;
    let x = (v_be / v_t).exp();
    let y = (v_bc / v_t).exp();
    let inv_va = if device.v_a.is_finite() {
        1.0 / device.v_a
    } else {
        0.0
    };
    // Early factor on the transport current.
    let q = 1.0 + (v_be - v_bc) * inv_va;
    let i_t = i_s * (x - y) * q;
    let dit_dvbe = i_s * (x / v_t) * q + i_s * (x - y) * inv_va;
    let dit_dvbc = -i_s * (y / v_t) * q - i_s * (x - y) * inv_va;
    let g_f = i_s / device.beta;
    let g_r = i_s / device.beta_reverse;
    Currents {
        i_c: i_t - g_r * (y - 1.0),
        i_b: g_f * (x - 1.0) + g_r * (y - 1.0),
        dic_dvbe: dit_dvbe,
        dic_dvbc: dit_dvbc - g_r * y / v_t,
        dib_dvbe: g_f * x / v_t,
        dib_dvbc: g_r * y / v_t,
    }
}

/// Collector current on an output characteristic: the device held at base current
/// `i_b` and collector–emitter voltage `v_ce`. I_B rises monotonically with V_BE at
/// fixed V_CE, so V_BE is found by Newton inside a bisection bracket.
pub fn collector_current(device: &Device, v_t: f64, i_b: f64, v_ce: f64) -> f64 {
    let (mut lo, mut hi) = (-1.0, 1.5_f64.max(v_ce + 1.5));
    let mut v_be = 0.6;
    for _ in 0..200 {
        let c = currents(device, v_t, v_be, v_be - v_ce);
        let f = c.i_b - i_b;
        if f > 0.0 {
            hi = v_be;
        } else {
            lo = v_be;
        }
        let slope = c.dib_dvbe + c.dib_dvbc;
        let newton = v_be - f / slope;
        let next = if slope > 0.0 && newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        let done = (next - v_be).abs() <= 1e-15 * v_t;
        v_be = next;
        if done || hi - lo <= 1e-15 {
            break;
        }
    }
    currents(device, v_t, v_be, v_be - v_ce).i_c
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::thermal_voltage;

    fn npn() -> Device {
        // The defaults (I_S = 10 fA, V_CE,sat = 0.2 V) with this β and V_A.
        Device {
            name: "t".into(),
            beta: 200.0,
            v_a: 80.0,
            ..Default::default()
        }
    }

    #[test]
    fn reduces_to_the_forward_active_model() {
        // docs/definitions.md's forward-active equations, which the transport model must reproduce
        // when the collector junction is reverse biased (V_BC ≤ −0.5 V here).
        let d = npn();
        let v_t = thermal_voltage(300.0);
        for &(v_be, v_ce) in &[(0.55, 1.0), (0.62, 5.0), (0.68, 12.0), (0.7, 30.0)] {
            let c = currents(&d, v_t, v_be, v_be - v_ce);
            let x = (v_be / v_t).exp();
            let i_c = d.i_s * x * (1.0 + v_ce / d.v_a);
            let i_b = d.i_s / d.beta * x;
            assert!(((c.i_c - i_c) / i_c).abs() < 1e-9, "{v_be} {v_ce}");
            // I_B also carries the reverse-biased collector junction's −I_S/β_R, of
            // relative size β/(β_R·e^(V_BE/V_T)) ≈ 4e-8 at the lowest V_BE here.
            assert!(((c.i_b - i_b) / i_b).abs() < 1e-7, "{v_be} {v_ce}");
        }
    }

    #[test]
    fn derivatives_match_finite_differences() {
        // Central differences (numerical analysis, any text) against the analytic partials.
        let d = npn();
        let v_t = thermal_voltage(300.0);
        let (v_be, v_bc) = (0.65, 0.55);
        let h = 1e-7;
        let c = currents(&d, v_t, v_be, v_bc);
        let dbe = |f: &dyn Fn(&Currents) -> f64| {
            (f(&currents(&d, v_t, v_be + h, v_bc)) - f(&currents(&d, v_t, v_be - h, v_bc)))
                / (2.0 * h)
        };
        let dbc = |f: &dyn Fn(&Currents) -> f64| {
            (f(&currents(&d, v_t, v_be, v_bc + h)) - f(&currents(&d, v_t, v_be, v_bc - h)))
                / (2.0 * h)
        };
        let close = |a: f64, b: f64| ((a - b) / b).abs() < 1e-5;
        assert!(close(c.dic_dvbe, dbe(&|c| c.i_c)));
        assert!(close(c.dic_dvbc, dbc(&|c| c.i_c)));
        assert!(close(c.dib_dvbe, dbe(&|c| c.i_b)));
        assert!(close(c.dib_dvbc, dbc(&|c| c.i_b)));
    }

    #[test]
    fn collector_current_collapses_in_saturation() {
        // Output characteristics: flat (≈ β·I_B·(1 + V_CE/V_A)) in forward active, falling
        // toward zero as V_CE → 0 when the collector junction turns on (textbook behaviour,
        // from memory).
        let d = npn();
        let v_t = thermal_voltage(300.0);
        let i_b = 10e-6;
        let active = collector_current(&d, v_t, i_b, 5.0);
        assert!(((active - d.beta * i_b * (1.0 + 5.0 / d.v_a)) / active).abs() < 1e-6);
        let near_zero = collector_current(&d, v_t, i_b, 0.02);
        let at_sat = collector_current(&d, v_t, i_b, 0.1);
        assert!(
            near_zero < at_sat && at_sat < 0.5 * active,
            "{near_zero} {at_sat} {active}"
        );
    }

    #[test]
    fn output_curve_reproduces_the_forward_active_current() {
        // docs/definitions.md's forward-active law I_C = I_S·e^(V_BE/V_T)·(1 + V_CE/V_A): a point of
        // an output curve (fixed I_B, V_CE) in forward active must carry that current at
        // the V_BE that draws the base current.
        let d = npn();
        let v_t = thermal_voltage(300.0);
        for &(v_be, v_ce) in &[(0.55, 0.8), (0.6, 3.0), (0.65, 9.0), (0.7, 25.0)] {
            let i_b = currents(&d, v_t, v_be, v_be - v_ce).i_b;
            let i_c = collector_current(&d, v_t, i_b, v_ce);
            let law = d.i_s * (v_be / v_t).exp() * (1.0 + v_ce / d.v_a);
            assert!(
                ((i_c - law) / law).abs() < 1e-9,
                "{v_be} {v_ce}: {i_c} vs {law}"
            );
        }
    }

    #[test]
    fn output_curve_falls_through_the_origin_as_the_collector_junction_turns_on() {
        // Textbook behaviour (from memory): below the knee the collector current falls
        // steadily toward zero as V_CE → 0, and at V_CE = 0 it has reversed: with both
        // junctions at the same bias the transport current vanishes and the forward-biased
        // collector junction gives I_C = −(I_S/β_R)(e^(V_BE/V_T) − 1) = −I_B·β_F/(β_F + β_R)
        // (the Ebers–Moll equations at V_BC = V_BE, worked by hand).
        let d = npn();
        let v_t = thermal_voltage(300.0);
        let i_b = 10e-6;
        let curve: Vec<f64> = (0..=40)
            .map(|k| collector_current(&d, v_t, i_b, 0.01 * f64::from(k)))
            .collect();
        assert!(curve.windows(2).all(|w| w[0] < w[1]), "{curve:?}");
        let at_zero = -i_b * d.beta / (d.beta + d.beta_reverse);
        assert!(
            ((curve[0] - at_zero) / at_zero).abs() < 1e-6,
            "{}",
            curve[0]
        );
        // Past the knee the curve is flat at β·I_B (Early factor aside).
        let flat = d.beta * i_b * (1.0 + 0.4 / d.v_a);
        assert!(((curve[40] - flat) / flat).abs() < 1e-3, "{}", curve[40]);
    }
}
