//! The junction FET behind the device interface (docs/definitions.md "JFET"):
//! control = gate, output = drain, common = source, every value in the n-channel
//! frame (a `p_jfet` is solved as its mirror image, like a PNP). In that frame the
//! pinch-off voltage is V_P = −`v_p` (negative) and, in saturation,
//! I_D = I_DSS·(1 − V_GS/V_P)²·(1 + V_DS/V_A).

use super::ebers_moll::Currents;
use super::model::{ActiveCurrents, DeviceModel, Quantities, RegionEdges, Toward};
use super::{BiasFault, OperatingPoint, I_CUTOFF};
use crate::network::{HybridPi, Thevenin};

/// A JFET's own parameters (the device's `early_voltage` is shared with the BJT).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Jfet {
    /// I_DSS: the saturation drain current at V_GS = 0.
    pub i_dss: f64,
    /// |V_P|, the pinch-off voltage's magnitude (V_P = −v_p in the n-channel frame).
    pub v_p: f64,
    /// Early voltage V_A = 1/λ (∞ without channel-length modulation).
    pub v_a: f64,
    /// Gate–source and gate–drain capacitances (0 when the file gives none).
    pub c_gs: f64,
    pub c_gd: f64,
    /// +1 for `n_jfet`, −1 for `p_jfet`: turns frame voltages into real ones.
    pub sign: f64,
}

impl Jfet {
    /// 1/V_A (0 without Early effect).
    fn inv_v_a(&self) -> f64 {
        if self.v_a.is_finite() {
            1.0 / self.v_a
        } else {
            0.0
        }
    }

    /// The overdrive V_GS − V_P = V_GS + |V_P| (positive when the channel is open).
    pub fn overdrive(&self, v_gs: f64) -> f64 {
        v_gs + self.v_p
    }

    /// Saturation law and its partials at (V_GS, V_DS), frame values:
    /// I_D = I_DSS·x²·(1 + V_DS/V_A) with x = (V_GS − V_P)/|V_P|; g_m = ∂I_D/∂V_GS =
    /// 2·I_D/(V_GS − V_P); g_o = ∂I_D/∂V_DS = I_DSS·x²/V_A. Zero below pinch-off.
    pub fn saturation(&self, v_gs: f64, v_ds: f64) -> ActiveCurrents {
        let x = (self.overdrive(v_gs) / self.v_p).max(0.0);
        let q = self.i_dss * x * x;
        let early = 1.0 + v_ds * self.inv_v_a();
        ActiveCurrents {
            i_ctrl: 0.0,
            i_out: q * early,
            g_in: 0.0,
            g_m: 2.0 * self.i_dss * x / self.v_p * early,
            g_o: q * self.inv_v_a(),
        }
    }

    /// Drain current in every region for V_DS ≥ 0 (frame values) and its partials
    /// (∂/∂V_GS, ∂/∂V_DS): cutoff (x ≤ 0) zero; ohmic (V_DS below V_GS − V_P)
    /// I_DSS·(2x·d − d²)·(1 + V_DS/V_A) with d = V_DS/|V_P|; saturation the square law.
    /// Both pieces meet with equal value and slope at the edge (common textbook form,
    /// from memory).
    fn forward(&self, v_gs: f64, v_ds: f64) -> (f64, f64, f64) {
        let x = self.overdrive(v_gs) / self.v_p;
        if x <= 0.0 {
            return (0.0, 0.0, 0.0);
        }
        let inv_v_a = self.inv_v_a();
        let early = 1.0 + v_ds * inv_v_a;
        let d = v_ds / self.v_p;
        if d >= x {
            let q = self.i_dss * x * x;
            (
                q * early,
                2.0 * self.i_dss * x / self.v_p * early,
                q * inv_v_a,
            )
        } else {
            let q = self.i_dss * (2.0 * x * d - d * d);
            (
                q * early,
                2.0 * self.i_dss * d / self.v_p * early,
                2.0 * self.i_dss * (x - d) / self.v_p * early + q * inv_v_a,
            )
        }
    }

    /// The operating point on a Thevenin network per terminal (frame values): the
    /// gate draws no current, so V_G = V_Gth; V_S = V_Sth + I_D·R_S and
    /// V_D = V_Dth − I_D·R_D. With y = V_GS − V_P and D = V_Gth − V_Sth + |V_P|, the
    /// source loop y = D − R_S·I_D(y) is, without Early effect, the quadratic
    /// k·y² + y − D = 0 (k = R_S·I_DSS/V_P²) whose physical root (y in [0, D]) is
    /// 2D/(1 + √(1 + 4kD)); with Early effect the drain loop gives
    /// I_D = q·a/(1 + q·(R_D + R_S)/V_A) (q = I_DSS·x², a = 1 + (V_Dth − V_Sth)/V_A),
    /// and Newton inside the bracket [0, D] starts from the quadratic's root with the
    /// factor a. Reports V_GS (negative in normal bias) in `v_be`, V_DS in `v_ce`.
    pub fn solve(
        &self,
        gate: Thevenin,
        source: Thevenin,
        drain: Thevenin,
    ) -> Result<OperatingPoint, BiasFault> {
        for (th, terminal) in [(gate, "gate"), (source, "source"), (drain, "drain")] {
            if th.is_open() {
                return Err(BiasFault::NoDcPath { terminal });
            }
        }
        let d_max = gate.v - source.v + self.v_p;
        if d_max <= 0.0 {
            return Err(BiasFault::PinchedOff {
                v_gs: gate.v - source.v,
                v_p: self.v_p,
            });
        }
        let (r_s, r_sum) = (source.r, source.r + drain.r);
        let inv_v_a = self.inv_v_a();
        let a = 1.0 + (drain.v - source.v) * inv_v_a;
        // I_D(y) and dI_D/dy with the drain loop solved in closed form.
        let drain_current = |y: f64| -> (f64, f64) {
            let x = y / self.v_p;
            let q = self.i_dss * x * x;
            let dq = 2.0 * self.i_dss * x / self.v_p;
            let den = 1.0 + q * r_sum * inv_v_a;
            (q * a / den, dq * a / (den * den))
        };
        let k = r_s * self.i_dss / (self.v_p * self.v_p) * a;
        let mut y = 2.0 * d_max / (1.0 + (1.0 + 4.0 * k * d_max).sqrt());
        if r_s > 0.0 && inv_v_a > 0.0 {
            let (mut lo, mut hi) = (0.0, d_max);
            for _ in 0..100 {
                let (i_d, di_d) = drain_current(y);
                let f = d_max - y - r_s * i_d;
                let step = f / (1.0 + r_s * di_d);
                // Converged: the step is below rounding of y.
                if step.abs() <= 1e-15 * d_max {
                    y += step;
                    break;
                }
                if f > 0.0 {
                    lo = y;
                } else {
                    hi = y;
                }
                let next = y + step;
                y = if next > lo && next < hi {
                    next
                } else {
                    0.5 * (lo + hi)
                };
                if hi - lo <= 1e-15 * d_max {
                    break;
                }
            }
        }
        let (i_d, _) = drain_current(y);
        let v_gs = y - self.v_p;
        if i_d < I_CUTOFF || !i_d.is_finite() {
            return Err(BiasFault::PinchedOff {
                v_gs,
                v_p: self.v_p,
            });
        }
        let v_s = source.v + i_d * r_s;
        let v_d = drain.v - i_d * drain.r;
        Ok(OperatingPoint {
            i_c: i_d,
            i_b: 0.0,
            i_e: i_d,
            v_be: v_gs,
            v_be_junction: v_gs,
            v_ce: v_d - v_s,
            v_b: gate.v,
            v_c: v_d,
            v_e: v_s,
        })
    }

    /// The ohmic edge at DC: V_DS (at the terminals) below V_GS − V_P is an error
    /// (docs/definitions.md "JFET").
    pub fn check_ohmic(&self, op: &OperatingPoint) -> Result<(), BiasFault> {
        let edge = self.overdrive(op.v_be);
        if op.v_ce < edge || !op.i_c.is_finite() {
            return Err(BiasFault::Ohmic {
                v_ds: op.v_ce,
                i_d: op.i_c,
                edge,
            });
        }
        Ok(())
    }
}

impl DeviceModel for Jfet {
    fn active_currents(&self, _v_t: f64, v_gs: f64, v_ds: f64) -> ActiveCurrents {
        self.saturation(v_gs, v_ds)
    }

    /// Every region, the drain and source swapping roles when V_DS < 0 (the channel
    /// is symmetric); no gate current.
    fn large_signal(&self, _v_t: f64, v_gs: f64, v_gd: f64) -> Currents {
        let v_ds = v_gs - v_gd;
        if v_ds >= 0.0 {
            let (i, d_gs, d_ds) = self.forward(v_gs, v_ds);
            // In (V_GS, V_GD): ∂/∂V_GS = d_gs + d_ds, ∂/∂V_GD = −d_ds.
            Currents {
                i_c: i,
                i_b: 0.0,
                dic_dvbe: d_gs + d_ds,
                dic_dvbc: -d_ds,
                dib_dvbe: 0.0,
                dib_dvbc: 0.0,
            }
        } else {
            // The drain is the source: I_D = −f(V_GD, V_SD).
            let (i, d_gd, d_sd) = self.forward(v_gd, -v_ds);
            // V_SD = V_GD − V_GS: ∂/∂V_GS = d_sd, ∂/∂V_GD = −(d_gd + d_sd).
            Currents {
                i_c: -i,
                i_b: 0.0,
                dic_dvbe: d_sd,
                dic_dvbc: -(d_gd + d_sd),
                dib_dvbe: 0.0,
                dib_dvbc: 0.0,
            }
        }
    }

    /// g_m = 2·I_D/(V_GS − V_P) (the exact derivative, Early factor included),
    /// g_π = 0, r_o = (V_A + V_DS)/I_D, C_π = `c_gs`, C_μ = `c_gd`.
    fn small_signal(&self, op: &OperatingPoint, _v_t: f64) -> HybridPi {
        let y = self.overdrive(op.v_be);
        HybridPi {
            g_m: if y > 0.0 { 2.0 * op.i_c / y } else { 0.0 },
            g_pi: 0.0,
            g_o: if self.v_a.is_finite() {
                op.i_c / (self.v_a + op.v_ce)
            } else {
                0.0
            },
            c_pi: self.c_gs,
            c_mu: self.c_gd,
        }
    }

    /// I_D → 0 is cutoff; V_DS → V_GS − V_P is the ohmic edge, which moves with V_GS.
    fn region_edges(&self, op: &OperatingPoint) -> RegionEdges {
        RegionEdges {
            current: (op.i_c, Toward::Cutoff),
            voltage: (op.v_ce - self.overdrive(op.v_be), Toward::Ohmic),
            voltage_follows_control: true,
        }
    }

    /// `i_d, v_gs, v_ds, v_g, v_d, v_s`: I_D and V_DS magnitudes, V_GS signed
    /// (negative for an n-JFET in normal bias), node voltages signed.
    fn operating_quantities(&self, op: &OperatingPoint) -> Quantities {
        Quantities::new(&[
            ("i_d", op.i_c),
            ("v_gs", self.sign * op.v_be),
            ("v_ds", op.v_ce),
            ("v_g", op.v_b),
            ("v_d", op.v_c),
            ("v_s", op.v_e),
        ])
    }

    /// g_m, r_o (null without Early effect), C_gs, C_gd.
    fn small_signal_quantities(&self, hp: &HybridPi) -> Quantities {
        Quantities::new(&[
            ("g_m", hp.g_m),
            ("r_o", 1.0 / hp.g_o),
            ("c_gs", hp.c_pi),
            ("c_gd", hp.c_mu),
        ])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn jfet(v_a: f64) -> Jfet {
        Jfet {
            i_dss: 6e-3,
            v_p: 2.0,
            v_a,
            c_gs: 4e-12,
            c_gd: 1.5e-12,
            sign: 1.0,
        }
    }

    /// Reference: g_m and g_o against central differences of the saturation law
    /// (calculus; step 1 µV, O(h²) error far below the tolerance), and the large-signal
    /// partials against differences of its own currents in every region.
    #[test]
    fn partials_are_the_derivatives_of_the_law() {
        let h = 1e-6;
        for v_a in [f64::INFINITY, 60.0] {
            let j = jfet(v_a);
            for (v_gs, v_ds) in [(-1.5, 3.0), (-0.4, 8.0), (-1.0, 0.3), (-1.8, -0.2)] {
                if v_ds > j.overdrive(v_gs) {
                    let a = j.saturation(v_gs, v_ds);
                    let dgs = (j.saturation(v_gs + h, v_ds).i_out
                        - j.saturation(v_gs - h, v_ds).i_out)
                        / (2.0 * h);
                    let dds = (j.saturation(v_gs, v_ds + h).i_out
                        - j.saturation(v_gs, v_ds - h).i_out)
                        / (2.0 * h);
                    assert!((dgs - a.g_m).abs() <= 1e-7 * a.g_m);
                    assert!((dds - a.g_o).abs() <= 1e-7 * a.g_o.max(1e-12));
                    // g_m = 2·I_D/|V_GS − V_P| (docs/definitions.md).
                    let exact = 2.0 * a.i_out / (v_gs + 2.0);
                    assert!((a.g_m - exact).abs() <= 1e-14 * exact);
                }
                let v_gd = v_gs - v_ds;
                let c = j.large_signal(0.0, v_gs, v_gd);
                let d1 = (j.large_signal(0.0, v_gs + h, v_gd).i_c
                    - j.large_signal(0.0, v_gs - h, v_gd).i_c)
                    / (2.0 * h);
                let d2 = (j.large_signal(0.0, v_gs, v_gd + h).i_c
                    - j.large_signal(0.0, v_gs, v_gd - h).i_c)
                    / (2.0 * h);
                assert!((d1 - c.dic_dvbe).abs() <= 1e-6 * c.dic_dvbe.abs().max(1e-6));
                assert!((d2 - c.dic_dvbc).abs() <= 1e-6 * c.dic_dvbc.abs().max(1e-6));
            }
        }
    }

    /// Reference: the ohmic and saturation pieces are continuous with a continuous
    /// slope at V_DS = V_GS − V_P (textbook JFET law, from memory), and the
    /// large-signal law equals the saturation law beyond the edge.
    #[test]
    fn regions_meet_at_the_ohmic_edge() {
        let j = jfet(50.0);
        let v_gs = -0.8;
        let edge = j.overdrive(v_gs);
        let below = j.forward(v_gs, edge * (1.0 - 1e-9));
        let above = j.forward(v_gs, edge * (1.0 + 1e-9));
        assert!((below.0 - above.0).abs() <= 1e-8 * above.0);
        assert!((below.2 - above.2).abs() <= 1e-6 * above.0);
        let s = j.saturation(v_gs, 5.0);
        assert_eq!(j.forward(v_gs, 5.0).0, s.i_out);
    }

    /// Reference: the self-bias textbook quadratic I_D = I_DSS(1 − V_GS/V_P)² =
    /// −V_GS/R_S solved by hand (algebra), and a bisection of the drain loop with
    /// Early effect (its KCL written here).
    #[test]
    fn thevenin_solve_matches_the_quadratic_and_a_bisection() {
        let j = jfet(f64::INFINITY);
        let r_s = 470.0;
        let op = j
            .solve(
                Thevenin::new(0.0, 1e6),
                Thevenin::new(0.0, r_s),
                Thevenin::new(12.0, 2200.0),
            )
            .unwrap();
        // I_D·R_S = −V_GS: (I_DSS·R_S/V_P²)·V_GS² + (2·I_DSS·R_S/|V_P| + 1)·V_GS... solved
        // in u = −V_GS: a·u² − (2·I_DSS·R_S/|V_P| + 1)·u + I_DSS·R_S = 0, smaller root.
        let (i_dss, v_p) = (6e-3, 2.0);
        let qa = i_dss * r_s / (v_p * v_p);
        let qb = -(2.0 * i_dss * r_s / v_p + 1.0);
        let qc = i_dss * r_s;
        let u = (-qb - (qb * qb - 4.0 * qa * qc).sqrt()) / (2.0 * qa);
        assert!((op.v_be + u).abs() <= 1e-12, "{} vs {}", op.v_be, -u);
        assert!((op.i_c - u / r_s).abs() <= 1e-12 * op.i_c);

        let j = jfet(40.0);
        let op = j
            .solve(
                Thevenin::new(1.5, 1e6),
                Thevenin::new(0.0, 1000.0),
                Thevenin::new(15.0, 3300.0),
            )
            .unwrap();
        // Bisection on V_GS of V_G − V_GS − R_S·I_D with the drain loop by bisection too.
        let i_d_at = |v_gs: f64| {
            let (mut lo, mut hi) = (0.0, 1.0);
            for _ in 0..200 {
                let i = 0.5 * (lo + hi);
                let v_ds = 15.0 - i * 4300.0;
                let law = 6e-3 * (1.0 + v_gs / 2.0).powi(2) * (1.0 + v_ds / 40.0);
                if law > i {
                    lo = i;
                } else {
                    hi = i;
                }
            }
            0.5 * (lo + hi)
        };
        let (mut lo, mut hi) = (-2.0, 1.5);
        for _ in 0..200 {
            let v = 0.5 * (lo + hi);
            if 1.5 - v - 1000.0 * i_d_at(v) > 0.0 {
                lo = v;
            } else {
                hi = v;
            }
        }
        assert!((op.v_be - 0.5 * (lo + hi)).abs() <= 1e-12);
    }

    /// Gate at or below pinch-off, or a drain too low for saturation, are faults.
    #[test]
    fn pinched_and_ohmic_bias_are_faults() {
        let j = jfet(f64::INFINITY);
        let pinched = j.solve(
            Thevenin::new(-3.0, 1e6),
            Thevenin::new(0.0, 100.0),
            Thevenin::new(12.0, 1000.0),
        );
        assert!(matches!(pinched, Err(BiasFault::PinchedOff { .. })));
        let op = j
            .solve(
                Thevenin::new(0.0, 1e6),
                Thevenin::new(0.0, 100.0),
                Thevenin::new(12.0, 10e3),
            )
            .unwrap();
        assert!(matches!(j.check_ohmic(&op), Err(BiasFault::Ohmic { .. })));
    }
}
