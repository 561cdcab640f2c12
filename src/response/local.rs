//! One stage's own small-signal network at midband, solved as a small nodal system:
//! the transistor's hybrid-π (B, C, E), the stage's own elements
//! ([`StageModel::local_network`]), its bias divider, the impedance of what drives
//! its base and the admittance hung on its output. Because stages meet the rest of
//! the chain only at their port nodes, this small network is exact for the whole
//! chain as far as the stage's own elements are concerned.
//!
//! It answers one question: the resistance between two of its nodes, with a test
//! current of 1 A driven in at one and out at the other, the EMF zeroed, device
//! capacitances open and every capacitor of the stage shorted except the one asked
//! about. Shorts and 0 Ω resistors are wires: the nodes they join are merged, never
//! stood in for by a huge conductance.

use crate::network::{HybridPi, OutputTerminal, TERMINAL_B, TERMINAL_C, TERMINAL_E};
use crate::stages::{LocalElement, LocalNode, StageModel};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);

/// What surrounds the stage at midband.
#[derive(Debug, Clone, Copy)]
pub struct Surroundings {
    /// Impedance of what drives the base (the driver node with the link), ∞ for nothing.
    pub z_source: Complex64,
    /// Admittance the successors hang on the output node.
    pub y_load: Complex64,
}

/// The stage's own capacitors, in the order of [`StageModel::local_network`].
pub fn capacitors(model: &dyn StageModel) -> Vec<(LocalNode, LocalNode, f64, &'static str)> {
    model
        .local_network()
        .into_iter()
        .filter_map(|e| match e {
            LocalElement::Capacitor { a, b, c, what, .. } => Some((a, b, c, what)),
            LocalElement::Resistor { .. } => None,
        })
        .collect()
}

fn index(node: LocalNode) -> usize {
    match node {
        LocalNode::Ground => 0,
        LocalNode::Base => 1,
        LocalNode::Collector => 2,
        LocalNode::Emitter => 3,
        LocalNode::Inner(k) => 4 + k,
    }
}

fn root(parent: &mut [usize], mut x: usize) -> usize {
    while parent[x] != x {
        parent[x] = parent[parent[x]];
        x = parent[x];
    }
    x
}

/// Resistance between nodes `a` and `b` at midband (device capacitances open), every
/// capacitor of the stage a short except the `open`-th (index into [`capacitors`]).
/// ∞ when no current can flow between them.
pub fn resistance_between(
    model: &dyn StageModel,
    hp: &HybridPi,
    around: Surroundings,
    a: LocalNode,
    b: LocalNode,
    open: Option<usize>,
) -> f64 {
    let elements = model.local_network();
    let n_inner = elements
        .iter()
        .flat_map(|e| match *e {
            LocalElement::Resistor { a, b, .. } | LocalElement::Capacitor { a, b, .. } => [a, b],
        })
        .map(|n| match n {
            LocalNode::Inner(k) => k + 1,
            _ => 0,
        })
        .max()
        .unwrap_or(0);
    let n = 4 + n_inner;

    // Wires: 0 Ω resistors, shorted capacitors, a base driven with zero impedance.
    let mut parent: Vec<usize> = (0..n).collect();
    let join = |parent: &mut Vec<usize>, p: LocalNode, q: LocalNode| {
        let (rp, rq) = (root(parent, index(p)), root(parent, index(q)));
        parent[rp] = rq;
    };
    let mut k_cap = 0;
    for e in &elements {
        match *e {
            LocalElement::Resistor { a, b, r: 0.0 } => join(&mut parent, a, b),
            LocalElement::Capacitor { a, b, .. } => {
                if open != Some(k_cap) {
                    join(&mut parent, a, b);
                }
                k_cap += 1;
            }
            LocalElement::Resistor { .. } => {}
        }
    }
    if around.z_source == ZERO {
        join(&mut parent, LocalNode::Base, LocalNode::Ground);
    }
    let node_of: Vec<usize> = (0..n).map(|t| root(&mut parent, t)).collect();
    let ground = node_of[0];
    let mut unknown = vec![None; n];
    let mut m = 0;
    for t in 0..n {
        if node_of[t] == t && t != ground {
            unknown[t] = Some(m);
            m += 1;
        }
    }
    let var = |node: LocalNode| unknown[node_of[index(node)]];

    let mut y = vec![vec![ZERO; m]; m];
    let mut between = |p: LocalNode, q: LocalNode, g: Complex64| {
        let (vp, vq) = (var(p), var(q));
        if let Some(i) = vp {
            y[i][i] += g;
            if let Some(j) = vq {
                y[i][j] -= g;
            }
        }
        if let Some(j) = vq {
            y[j][j] += g;
            if let Some(i) = vp {
                y[j][i] -= g;
            }
        }
    };
    for e in &elements {
        if let LocalElement::Resistor { a, b, r } = *e {
            if r > 0.0 {
                between(a, b, Complex64::new(1.0 / r, 0.0));
            }
        }
    }
    between(
        LocalNode::Base,
        LocalNode::Ground,
        Complex64::new(model.bias().conductance(), 0.0),
    );
    if around.z_source != ZERO && around.z_source.is_finite() {
        between(LocalNode::Base, LocalNode::Ground, 1.0 / around.z_source);
    }
    let output = match model.output() {
        OutputTerminal::Collector => LocalNode::Collector,
        OutputTerminal::Emitter => LocalNode::Emitter,
    };
    between(output, LocalNode::Ground, around.y_load);

    // The transistor at midband: s = 0, so C_π and C_μ are open.
    let device = hp.admittance_matrix(ZERO);
    let terminals = [
        (TERMINAL_B, LocalNode::Base),
        (TERMINAL_C, LocalNode::Collector),
        (TERMINAL_E, LocalNode::Emitter),
    ];
    for &(p, np) in &terminals {
        for &(q, nq) in &terminals {
            if let (Some(i), Some(j)) = (var(np), var(nq)) {
                y[i][j] += device[p][q];
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
    let Some(v) = solve_dense(y, rhs) else {
        return f64::INFINITY;
    };
    let at = |node: LocalNode| var(node).map_or(ZERO, |i| v[i]);
    (at(a) - at(b)).re
}

/// Gaussian elimination with partial pivoting; `None` when the matrix is singular.
fn solve_dense(mut y: Vec<Vec<Complex64>>, mut rhs: Vec<Complex64>) -> Option<Vec<Complex64>> {
    let m = rhs.len();
    for col in 0..m {
        let pivot = (col..m).max_by(|&p, &q| y[p][col].norm().total_cmp(&y[q][col].norm()))?;
        if y[pivot][col].norm() == 0.0 {
            return None;
        }
        y.swap(col, pivot);
        rhs.swap(col, pivot);
        let pivot_row = y[col].clone();
        let pivot_rhs = rhs[col];
        for row in col + 1..m {
            let f = y[row][col] / pivot_row[col];
            for (dst, src) in y[row].iter_mut().zip(&pivot_row).skip(col) {
                *dst -= f * src;
            }
            rhs[row] -= f * pivot_rhs;
        }
    }
    let mut x = vec![ZERO; m];
    for row in (0..m).rev() {
        let mut acc = rhs[row];
        for k in row + 1..m {
            acc -= y[row][k] * x[k];
        }
        x[row] = acc / y[row][row];
    }
    x.iter()
        .all(|v| v.re.is_finite() && v.im.is_finite())
        .then_some(x)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::{BaseBias, CommonEmitter};

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
            r_collector: 4.7e3,
            r_emitter: 100.0,
            r_emitter_bypassed: 1e3,
            c_bypass: Some(100e-6),
        };
        let r_s = 1e3;
        let around = Surroundings {
            z_source: Complex64::new(r_s, 0.0),
            y_load: Complex64::new(1.0 / 10e3, 0.0),
        };
        let (node, ground, _, _) = capacitors(&ce)[0];
        let r = resistance_between(&ce, &hp, around, node, ground, Some(0));
        let r_b = 1.0 / (1.0 / 100e3 + 1.0 / 22e3 + 1.0 / r_s);
        let into = 100.0 + (r_pi + r_b) / (beta + 1.0);
        let expected = 1e3 * into / (1e3 + into);
        assert!((r - expected).abs() < 1e-9 * expected, "{r} vs {expected}");
    }
}
