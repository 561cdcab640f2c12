//! The bipolar transistor behind the device interface (docs/definitions.md "Device
//! model" and "Device interface"): control = base, output = collector, common =
//! emitter, every value in the NPN frame (a PNP is solved as its mirror image). A
//! device with JFET parameters answers through `jfet::Jfet` instead.

use super::ebers_moll::{self, Currents};
use super::model::{ActiveCurrents, DeviceModel, Quantities, RegionEdges, Toward};
use super::{Device, OperatingPoint};
use crate::network::HybridPi;

impl DeviceModel for Device {
    /// [`forward_active`] with this device's constants.
    fn active_currents(&self, v_t: f64, v_be: f64, v_ce: f64) -> ActiveCurrents {
        if let Some(j) = self.jfet_model() {
            return j.active_currents(v_t, v_be, v_ce);
        }
        let inv_v_a = if self.v_a.is_finite() {
            1.0 / self.v_a
        } else {
            0.0
        };
        forward_active(self.i_s, 1.0 / self.beta, inv_v_a, 1.0 / v_t, v_be, v_ce)
    }

    /// Ebers–Moll with the Early factor (`ebers_moll::currents`).
    fn large_signal(&self, v_t: f64, v_be: f64, v_bc: f64) -> Currents {
        if let Some(j) = self.jfet_model() {
            return j.large_signal(v_t, v_be, v_bc);
        }
        ebers_moll::currents(self, v_t, v_be, v_bc)
    }

    /// Hybrid-π (docs/definitions.md): g_m = I_C/V_T, r_π = V_T/I_B,
    /// r_o = (V_A + V_CE)/I_C, C_π = g_m/(2π·f_T) − C_μ (clamped at 0), C_μ = `c_bc`.
    fn small_signal(&self, op: &OperatingPoint, v_t: f64) -> HybridPi {
        if let Some(j) = self.jfet_model() {
            return j.small_signal(op, v_t);
        }
        HybridPi {
            g_m: op.i_c / v_t,
            g_pi: op.i_b / v_t,
            // r_o = (V_A + V_CE)/I_C with the device's own V_CE (inside r_c).
            g_o: if self.v_a.is_finite() {
                op.i_c / (self.v_a + op.v_ce - op.i_c * self.collector_resistance)
            } else {
                0.0
            },
            // A negative C_π is clamped to 0 (warnings.rs names the stage).
            c_pi: self
                .c_pi_unclamped(op.i_c / v_t)
                .map_or(0.0, |c| c.max(0.0)),
            c_mu: self.c_bc,
        }
    }

    /// I_C → 0 is cutoff; V_CE → `vce_sat` (at the terminals) is saturation.
    fn region_edges(&self, op: &OperatingPoint) -> RegionEdges {
        if let Some(j) = self.jfet_model() {
            return j.region_edges(op);
        }
        RegionEdges {
            current: (op.i_c, Toward::Cutoff),
            voltage: (op.v_ce - self.vce_sat, Toward::Saturation),
            voltage_follows_control: false,
        }
    }

    /// The v1 keys in their v1 order: currents and V_BE, V_CE as magnitudes, node
    /// voltages signed (docs/definitions.md "Operating points").
    fn operating_quantities(&self, op: &OperatingPoint) -> Quantities {
        if let Some(j) = self.jfet_model() {
            return j.operating_quantities(op);
        }
        Quantities::new(&[
            ("i_c", op.i_c),
            ("i_b", op.i_b),
            ("i_e", op.i_e),
            ("v_be", op.v_be),
            ("v_be_junction", op.v_be_junction),
            ("v_ce", op.v_ce),
            ("v_b", op.v_b),
            ("v_c", op.v_c),
            ("v_e", op.v_e),
        ])
    }

    /// g_m, r_π, r_o (null without Early effect), C_π, C_μ.
    fn small_signal_quantities(&self, hp: &HybridPi) -> Quantities {
        if let Some(j) = self.jfet_model() {
            return j.small_signal_quantities(hp);
        }
        Quantities::new(&[
            ("g_m", hp.g_m),
            ("r_pi", 1.0 / hp.g_pi),
            ("r_o", 1.0 / hp.g_o),
            ("c_pi", hp.c_pi),
            ("c_mu", hp.c_mu),
        ])
    }
}

/// docs/definitions.md's forward-active law with its constants inverted (the nodal
/// Newton keeps them so): u = I_S·e^(V_BE/V_T), I_C = u·(1 + V_CE/V_A), I_B = u/β,
/// and the partials g_π = I_B/V_T, g_m = I_C/V_T, g_o = u/V_A.
pub fn forward_active(
    i_s: f64,
    inv_beta: f64,
    inv_v_a: f64,
    inv_v_t: f64,
    v_be: f64,
    v_ce: f64,
) -> ActiveCurrents {
    let u = i_s * (v_be * inv_v_t).exp();
    let i_c = u * (1.0 + v_ce * inv_v_a);
    let i_b = u * inv_beta;
    ActiveCurrents {
        i_ctrl: i_b,
        i_out: i_c,
        g_in: i_b * inv_v_t,
        g_m: i_c * inv_v_t,
        g_o: u * inv_v_a,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn device() -> Device {
        Device {
            beta: 180.0,
            i_s: 4e-15,
            v_a: 70.0,
            ..Device::default()
        }
    }

    /// Reference: the partials of the forward-active law against central differences
    /// of its own currents (calculus; step 1 µV, error O(h²) far below the tolerance).
    #[test]
    fn active_partials_are_the_derivatives_of_the_currents() {
        let (d, v_t, h) = (device(), 0.025852, 1e-6);
        for (v_be, v_ce) in [(0.55, 0.3), (0.62, 4.0), (0.7, 12.0)] {
            let a = d.active_currents(v_t, v_be, v_ce);
            let up = d.active_currents(v_t, v_be + h, v_ce);
            let down = d.active_currents(v_t, v_be - h, v_ce);
            let right = d.active_currents(v_t, v_be, v_ce + h);
            let left = d.active_currents(v_t, v_be, v_ce - h);
            let close = |x: f64, y: f64| (x - y).abs() <= 1e-7 * y.abs();
            assert!(close((up.i_ctrl - down.i_ctrl) / (2.0 * h), a.g_in));
            assert!(close((up.i_out - down.i_out) / (2.0 * h), a.g_m));
            assert!(close((right.i_out - left.i_out) / (2.0 * h), a.g_o));
        }
    }

    /// Reference: in forward active the Ebers–Moll transport model (`large_signal`)
    /// reduces to the forward-active law up to terms of order e^(−V_BE/V_T) and
    /// e^(V_BC/V_T) (any device-physics text, from memory): at V_BE = 0.65 V and
    /// V_BC = −4 V the largest, (1 + β/β_R)·e^(−V_BE/V_T) in I_B, is below 1e-9.
    #[test]
    fn large_signal_reduces_to_the_active_law_in_forward_active() {
        let (d, v_t) = (device(), 0.025852);
        let (v_be, v_ce) = (0.65, 4.65);
        let a = d.active_currents(v_t, v_be, v_ce);
        let l = d.large_signal(v_t, v_be, v_be - v_ce);
        assert!((l.i_c - a.i_out).abs() <= 1e-10 * a.i_out);
        assert!((l.i_b - a.i_ctrl).abs() <= 1e-9 * a.i_ctrl);
    }

    /// The named quantities are the v1 JSON keys in their v1 order (the chain-file
    /// contract, docs/definitions.md "Device interface"), r_o null without V_A.
    #[test]
    fn quantities_keep_the_v1_names_and_order() {
        let d = Device::default();
        let op = OperatingPoint {
            i_c: 1e-3,
            i_b: 1e-5,
            i_e: 1.01e-3,
            v_be: 0.65,
            v_be_junction: 0.65,
            v_ce: 5.0,
            v_b: 1.65,
            v_c: 6.0,
            v_e: 1.0,
        };
        let names: Vec<_> = d.operating_quantities(&op).iter().map(|(n, _)| n).collect();
        assert_eq!(
            names,
            [
                "i_c",
                "i_b",
                "i_e",
                "v_be",
                "v_be_junction",
                "v_ce",
                "v_b",
                "v_c",
                "v_e"
            ]
        );
        let hp = d.small_signal(&op, 0.025);
        let json = serde_json::to_string(&d.small_signal_quantities(&hp)).unwrap();
        assert!(json.starts_with("{\"g_m\":0.04,\"r_pi\":2500"), "{json}");
        assert!(json.contains("\"r_o\":null"), "{json}");
    }
}
