//! One stage's own small-signal network at midband, solved as a small nodal system:
//! the stage's description (`SubCircuit`: its elements and the transistor's hybrid-π),
//! the impedance of what drives its input and the admittance hung on its output. Because stages meet the rest of
//! the chain only at their port nodes, this small network is exact for the whole
//! chain as far as the stage's own elements are concerned.
//!
//! It answers one question: the resistance between two of its nodes, with a test
//! current of 1 A driven in at one and out at the other, the EMF zeroed, device
//! capacitances open and every capacitor of the stage shorted except the one asked
//! about. Shorts and 0 Ω resistors are wires: the nodes they join are merged, never
//! stood in for by a huge conductance.

use crate::circuit::{Element, SubCircuit, BOTTOM, FIXED, GROUND, TOP};
use crate::network::{HybridPi, TERMINAL_B, TERMINAL_C, TERMINAL_E};
use crate::nodal::{self, Merge};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);

/// What surrounds the stage at midband.
#[derive(Debug, Clone, Copy)]
pub struct Surroundings {
    /// Impedance of what drives the input node (the driver node with the link), ∞ for nothing.
    pub z_source: Complex64,
    /// Admittance the successors hang on the output node.
    pub y_load: Complex64,
}

/// The stage's own capacitors that are shorts at midband (the low corner's), or with
/// `open_at_midband` those that are open there (the high corner's: a low-pass's
/// shunt C), as (node a, node b, capacitance, plain name, chain-file key), in the
/// order of its description.
pub fn capacitors(
    circuit: &SubCircuit,
    open_at_midband: bool,
) -> Vec<(usize, usize, f64, &'static str, &'static str)> {
    circuit
        .capacitors()
        .filter_map(|e| match *e {
            Element::Capacitor {
                a,
                b,
                c,
                what,
                name,
                open_at_midband: open,
            } if open == open_at_midband => Some((a, b, c, what, name)),
            _ => None,
        })
        .collect()
}

/// Resistance between nodes `a` and `b` of the stage's description at midband
/// (device capacitances open), every capacitor of the stage that is a short at
/// midband a short except the `open`-th (index into [`capacitors`]). ∞ when no current can flow between them.
pub fn resistance_between(
    circuit: &SubCircuit,
    hp: &HybridPi,
    around: Surroundings,
    a: usize,
    b: usize,
    open: Option<usize>,
) -> f64 {
    // Wires: rails (AC ground), 0 Ω resistors, shorted capacitors, an input driven
    // with zero impedance.
    let mut merge = Merge::new(circuit.n_nodes(), FIXED);
    merge.join(TOP, GROUND);
    merge.join(BOTTOM, GROUND);
    let mut k_cap = 0;
    for e in circuit.elements() {
        match *e {
            Element::Resistor { a, b, r: 0.0, .. } => merge.join(a, b),
            // Open at midband: never a short here.
            Element::Capacitor {
                open_at_midband: true,
                ..
            } => {}
            Element::Capacitor { a, b, .. } => {
                if open != Some(k_cap) {
                    merge.join(a, b);
                }
                k_cap += 1;
            }
            Element::Resistor { .. } => {}
        }
    }
    if around.z_source == ZERO {
        merge.join(circuit.input, GROUND);
    }
    let numbering = merge.unknowns();
    let m = numbering.m;
    let var = |node: usize| numbering.of(node);

    let mut y = vec![ZERO; m * m];
    for e in circuit.elements() {
        if let Element::Resistor { a, b, r, .. } = *e {
            if r > 0.0 {
                nodal::stamp_between(&mut y, m, var(a), var(b), Complex64::new(1.0 / r, 0.0));
            }
        }
    }
    if around.z_source != ZERO && around.z_source.is_finite() {
        nodal::stamp_between(&mut y, m, var(circuit.input), None, 1.0 / around.z_source);
    }
    nodal::stamp_between(&mut y, m, var(circuit.output), None, around.y_load);

    // The transistor at midband: s = 0, so C_π and C_μ are open.
    if let Some(d) = circuit.bjt_nodes() {
        let device = hp.admittance_matrix(ZERO);
        let terminals = [(TERMINAL_B, d.b), (TERMINAL_C, d.c), (TERMINAL_E, d.e)];
        for &(p, np) in &terminals {
            for &(q, nq) in &terminals {
                if let (Some(i), Some(j)) = (var(np), var(nq)) {
                    y[i * m + j] += device[p][q];
                }
            }
        }
    }

    let mut rhs = vec![ZERO; m];
    if let Some(i) = var(a) {
        rhs[i] += 1.0;
    }
    if let Some(j) = var(b) {
        rhs[j] -= 1.0;
    }
    if nodal::solve_in_place(&mut y, m, &mut rhs).is_none() {
        return f64::INFINITY;
    }
    let at = |node: usize| var(node).map_or(ZERO, |i| rhs[i]);
    (at(a) - at(b)).re
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::{BaseBias, CommonEmitter, StageModel};

    #[test]
    fn looking_into_the_emitter_of_a_bypassed_stage() {
        // Without r_o: R into the emitter node = (r_π + R_S ∥ R_B)/(β+1), so the bypass
        // capacitor sees R_E2 ∥ (R_E1 + (r_π + R_S ∥ R_B)/(β+1)) (handbook, from memory;
        // exact for the hybrid-π without r_o).
        let (beta, g_m) = (200.0, 0.04);
        let r_pi = beta / g_m;
        let hp = HybridPi {
            g_m,
            g_pi: 1.0 / r_pi,
            ..Default::default()
        };
        let ce = CommonEmitter {
            bias: BaseBias {
                r_top: Some(100e3),
                r_bottom: Some(22e3),
            },
            r_collector: Some(4.7e3),
            r_emitter: 100.0,
            r_emitter_bypassed: 1e3,
            c_bypass: Some(100e-6),
            r_feedback: None,
            supply_filter: None,
        };
        let r_s = 1e3;
        let around = Surroundings {
            z_source: Complex64::new(r_s, 0.0),
            y_load: Complex64::new(1.0 / 10e3, 0.0),
        };
        let circuit = ce.circuit(&crate::device::Device::default());
        let (node, ground, _, _, _) = capacitors(&circuit, false)[0];
        let r = resistance_between(&circuit, &hp, around, node, ground, Some(0));
        let r_b = 1.0 / (1.0 / 100e3 + 1.0 / 22e3 + 1.0 / r_s);
        let into = 100.0 + (r_pi + r_b) / (beta + 1.0);
        let expected = 1e3 * into / (1e3 + into);
        assert!((r - expected).abs() < 1e-9 * expected, "{r} vs {expected}");
    }
}
