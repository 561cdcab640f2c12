//! A stage's DC view from its description: capacitors open, rails at their voltages,
//! wires merged. It gives the Thevenin network each device terminal sees (the stage's
//! own elements with what the chain hangs on its input and output), and, once the
//! device is solved, the voltage of every node and the power in every resistor.

use super::{Element, SubCircuit, BOTTOM, FIXED, GROUND, OUTSIDE_IN, OUTSIDE_OUT, TOP};
use crate::network::Thevenin;
use crate::nodal::{self, merge::MAX_NODES, Merge};
use arrayvec::ArrayVec;

/// The DC voltages of a stage's rails.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rails {
    pub top: f64,
    pub bottom: f64,
}

/// The DC Thevenin networks on the device's base, collector and emitter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DcTerminals {
    pub base: Thevenin,
    pub collector: Thevenin,
    pub emitter: Thevenin,
}

/// The DC view of a stage: nodes merged by wires, the voltage of every held node.
struct View<'a> {
    circuit: &'a SubCircuit,
    merge: Merge,
    /// Voltage of every root that is held (rails, outside sources, solved terminals).
    held: [Option<f64>; MAX_NODES],
    /// Conductances from the input and output nodes to the outside sources (0: none).
    g_outside: [(usize, usize, f64); 2],
}

impl<'a> View<'a> {
    fn new(circuit: &'a SubCircuit, rails: Rails, at_input: Thevenin, at_output: Thevenin) -> Self {
        let mut merge = Merge::new(circuit.n_nodes(), FIXED);
        for e in circuit.elements() {
            if let Element::Resistor { a, b, r: 0.0, .. } = *e {
                merge.join(a, b);
            }
        }
        let mut g_outside = [(GROUND, GROUND, 0.0); 2];
        for (k, (node, outside, th)) in [
            (circuit.input, OUTSIDE_IN, at_input),
            (circuit.output, OUTSIDE_OUT, at_output),
        ]
        .into_iter()
        .enumerate()
        {
            if th.r == 0.0 {
                merge.join(node, outside);
            } else if th.r.is_finite() {
                g_outside[k] = (node, outside, 1.0 / th.r);
            }
        }
        let mut held = [None; MAX_NODES];
        held[GROUND] = Some(0.0);
        held[TOP] = Some(rails.top);
        held[BOTTOM] = Some(rails.bottom);
        held[OUTSIDE_IN] = Some(at_input.v);
        held[OUTSIDE_OUT] = Some(at_output.v);
        View {
            circuit,
            merge,
            held,
            g_outside,
        }
    }

    /// Hold node `n` (and whatever it is wired to) at voltage `v`.
    fn hold(&mut self, n: usize, v: f64) {
        let r = self.merge.root(n);
        if self.held[r].is_none() {
            self.held[r] = Some(v);
        }
    }

    fn held_at(&self, n: usize) -> Option<f64> {
        self.held[self.merge.root(n)]
    }

    /// Every conductance of the view as (node a, node b, g): the stage's resistors
    /// (wires are merged) and the outside sources.
    fn conductances(&self) -> impl Iterator<Item = (usize, usize, f64)> + '_ {
        let own = self.circuit.elements().iter().filter_map(|e| match *e {
            Element::Resistor { a, b, r, .. } if r > 0.0 => Some((a, b, 1.0 / r)),
            _ => None,
        });
        own.chain(self.g_outside.iter().copied().filter(|&(_, _, g)| g > 0.0))
    }

    /// The roots not held that are joined to `start`'s root through conductances
    /// (stopping at held nodes), and whether any of them reaches a held node.
    fn component(&self, start: usize) -> (ArrayVec<usize, MAX_NODES>, bool) {
        let mut nodes = ArrayVec::<usize, MAX_NODES>::new();
        nodes.push(self.merge.root(start));
        let mut anchored = false;
        let mut k = 0;
        while k < nodes.len() {
            let here = nodes[k];
            for (a, b, _) in self.conductances() {
                let (ra, rb) = (self.merge.root(a), self.merge.root(b));
                let other = if ra == here {
                    rb
                } else if rb == here {
                    ra
                } else {
                    continue;
                };
                if self.held[other].is_some() {
                    anchored = true;
                } else if !nodes.contains(&other) {
                    nodes.push(other);
                }
            }
            k += 1;
        }
        (nodes, anchored)
    }

    /// Solve the component `nodes` (roots, none held): G·v = I from the held nodes,
    /// with a second right-hand side of 1 A into `nodes[0]`. Returns the voltages and
    /// the resistance seen at `nodes[0]` (the Thevenin network there with nothing else
    /// injected), or `None` when the component is singular.
    fn solve(&self, nodes: &[usize]) -> Option<(ArrayVec<f64, MAX_NODES>, f64)> {
        let k = nodes.len();
        let index = |root: usize| nodes.iter().position(|&x| x == root);
        let mut g = [0.0; MAX_NODES * MAX_NODES];
        let g = &mut g[..k * k];
        // Two right-hand sides side by side: currents from held nodes, 1 A at nodes[0].
        let mut rhs = [[0.0; 2]; MAX_NODES];
        rhs[0][1] = 1.0;
        for (a, b, y) in self.conductances() {
            let (ra, rb) = (self.merge.root(a), self.merge.root(b));
            let (ia, ib) = (index(ra), index(rb));
            if ia.is_none() && ib.is_none() {
                continue;
            }
            nodal::stamp_between(g, k, ia, ib, y);
            // A held node on the other side drives y·V into this one.
            if let (Some(i), None) = (ia, ib) {
                rhs[i][0] += y * self.held[rb].unwrap_or(0.0);
            }
            if let (None, Some(i)) = (ia, ib) {
                rhs[i][0] += y * self.held[ra].unwrap_or(0.0);
            }
        }
        let mut first = [0.0; MAX_NODES];
        let mut unit = [0.0; MAX_NODES];
        for i in 0..k {
            first[i] = rhs[i][0];
            unit[i] = rhs[i][1];
        }
        let mut g2 = [0.0; MAX_NODES * MAX_NODES];
        g2[..k * k].copy_from_slice(g);
        nodal::solve_in_place(g, k, &mut first[..k])?;
        nodal::solve_in_place(&mut g2[..k * k], k, &mut unit[..k])?;
        Some((first[..k].iter().copied().collect(), unit[0]))
    }

    /// The Thevenin network at node `n` with nothing else injected anywhere.
    fn thevenin_at(&self, n: usize) -> Thevenin {
        if let Some(v) = self.held_at(n) {
            return Thevenin::new(v, 0.0);
        }
        let (nodes, anchored) = self.component(n);
        if !anchored {
            return Thevenin::OPEN;
        }
        match self.solve(&nodes) {
            Some((v, r)) => Thevenin::new(v[0], r),
            None => Thevenin::OPEN,
        }
    }
}

impl SubCircuit {
    /// The DC Thevenin network each device terminal sees with the device removed: the
    /// stage's own elements (capacitors open) on its rails, `at_input` on the input
    /// node and `at_output` on the output node. Exact when no two device terminals
    /// share a resistive path that avoids the rails ([`SubCircuit::terminals_coupled`]
    /// is false); otherwise the stage needs the group solve.
    pub fn dc_networks(
        &self,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
    ) -> DcTerminals {
        let view = View::new(self, rails, at_input, at_output);
        let Some(d) = self.bjt_nodes() else {
            return DcTerminals {
                base: Thevenin::OPEN,
                collector: Thevenin::OPEN,
                emitter: Thevenin::OPEN,
            };
        };
        DcTerminals {
            base: view.thevenin_at(d.b),
            collector: view.thevenin_at(d.c),
            emitter: view.thevenin_at(d.e),
        }
    }

    /// True when node `n` has a DC path through the stage's own resistors to ground or
    /// a rail (the transistor is no such path): a collector with its resistor does, a
    /// cascode's lower collector does not.
    pub fn rests_on_rails(&self, n: usize) -> bool {
        let zero = Rails {
            top: 0.0,
            bottom: 0.0,
        };
        let view = View::new(self, zero, Thevenin::OPEN, Thevenin::OPEN);
        view.held_at(n).is_some() || view.component(n).1
    }

    /// True when two device terminals are joined by resistors without passing through
    /// a rail (collector-to-base feedback, a shared supply filter): their DC networks
    /// are then not independent Thevenin sources.
    pub fn terminals_coupled(&self) -> bool {
        let view = View::new(
            self,
            Rails {
                top: 0.0,
                bottom: 0.0,
            },
            Thevenin::OPEN,
            Thevenin::OPEN,
        );
        let Some(d) = self.bjt_nodes() else {
            return false;
        };
        let roots = [d.b, d.c, d.e].map(|n| view.merge.root(n));
        roots.iter().enumerate().any(|(i, &r)| {
            view.held[r].is_none() && {
                let (nodes, _) = view.component(r);
                roots[i + 1..].iter().any(|x| nodes.contains(x))
            }
        })
    }

    /// DC voltage of every node once the transistor is solved: `device` holds the
    /// voltages of its own base, collector and emitter nodes, `terminals` (when given)
    /// those of its terminals outside r_bb' and r_c, with `at_input` and `at_output`
    /// hung on the ports. A node with no DC path reads NaN.
    pub fn dc_voltages(
        &self,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
        device: [f64; 3],
        terminals: Option<[f64; 3]>,
    ) -> ArrayVec<f64, MAX_NODES> {
        let mut view = View::new(self, rails, at_input, at_output);
        if let Some(d) = self.bjt_nodes() {
            for (n, v) in [d.b, d.c, d.e].into_iter().zip(device) {
                view.hold(n, v);
            }
        }
        if let (Some(t), Some(volts)) = (self.terminals, terminals) {
            for (n, v) in [t.b, t.c, t.e].into_iter().zip(volts) {
                view.hold(n, v);
            }
        }
        let mut out: ArrayVec<f64, MAX_NODES> = (0..self.n_nodes()).map(|_| f64::NAN).collect();
        for n in 0..self.n_nodes() {
            if !out[n].is_nan() {
                continue;
            }
            if let Some(v) = view.held_at(n) {
                out[n] = v;
                continue;
            }
            let (nodes, anchored) = view.component(n);
            let solved = if anchored { view.solve(&nodes) } else { None };
            for m in 0..self.n_nodes() {
                let r = view.merge.root(m);
                if let Some(i) = nodes.iter().position(|&x| x == r) {
                    out[m] = solved.as_ref().map_or(f64::NAN, |(v, _)| v[i]);
                }
            }
        }
        out
    }

    /// DC power in every resistor of the stage, by its chain-file name, from the node
    /// voltages of [`SubCircuit::dc_voltages`]: (V_a − V_b)²/R.
    pub fn resistor_power(&self, volts: &[f64]) -> ArrayVec<(&'static str, f64), 16> {
        self.elements()
            .iter()
            .filter_map(|e| match *e {
                Element::Resistor { name, a, b, r } if r > 0.0 => {
                    Some((name, (volts[a] - volts[b]).powi(2) / r))
                }
                _ => None,
            })
            .collect()
    }
}
