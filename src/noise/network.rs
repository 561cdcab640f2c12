//! The whole chain's small-signal network at a frequency, as one flat complex nodal
//! system built from the stage descriptions (`large_signal::flat::Netlist`), and its
//! adjoint solve: one solve of Yᵀ·z = e_o gives, for an output node o, the transfer
//! impedance from a unit current injected at every node, z_n = ∂v_o/∂i_n (Tellegen's
//! adjoint network, any circuit-theory text, from memory). A current source between
//! nodes a and b then reaches o as (z_b − z_a)·i, and its noise power as
//! |z_a − z_b|²·S_i.
//!
//! The network is the one `response` evaluates (docs/definitions.md "Midband, DC and a
//! frequency"): every capacitor of the file as 1/(j2πfC), the source and load shunt
//! capacitances, each transistor's hybrid-π with C_π and C_μ at its own nodes, every
//! rail and the dead source EMF at AC ground, wires (0 Ω resistors, direct links)
//! merged. Unknowns are numbered by reverse Cuthill–McKee and Yᵀ is factored once per
//! frequency in band storage (`nodal::band`); each output then costs one forward and
//! back substitution, so a long chain costs linear time per factorisation and per
//! output.

use crate::chain::Chain;
use crate::device::opamp::OpAmp;
use crate::device::DeviceModel;
use crate::evaluate::Evaluation;
use crate::large_signal::flat::Netlist;
use crate::network::{Freq, HybridPi};
use crate::nodal::{Band, Numbering};
use num_complex::Complex64;

/// The chain's small-signal network, ready to be stamped at any frequency.
#[derive(Debug, Clone)]
pub struct NoiseNetwork {
    /// The unknown of each netlist node (`None`: AC ground).
    unknown: Vec<Option<usize>>,
    band: Band,
    /// Conductances 1/R between unknowns.
    conductances: Vec<(Option<usize>, Option<usize>, f64)>,
    /// Capacitances between unknowns (every capacitor, source and load shunts).
    capacitances: Vec<(Option<usize>, Option<usize>, f64)>,
    /// Each transistor's own base, collector and emitter unknowns and its hybrid-π.
    transistors: Vec<([Option<usize>; 3], HybridPi)>,
    /// Each op-amp: its unknowns and values (`Netlist::opamps` order).
    opamps: Vec<OpampStamp>,
    /// Yᵀ at the last frequency, factored in place, and its pivot rows.
    factored: Vec<Complex64>,
    pivots: Vec<usize>,
}

/// An op-amp in the network (docs/definitions.md "Op-amp wiring"): r_in between + and
/// −; the source A(s)·(v₊ − v₋) referenced to ground behind r_out, as its Norton
/// equivalent A/r_out·(v₊ − v₋) into the pin beside 1/r_out, or with r_out = 0 as one
/// more unknown, its current (modified nodal analysis).
#[derive(Debug, Clone, Copy)]
struct OpampStamp {
    plus: Option<usize>,
    minus: Option<usize>,
    pin: Option<usize>,
    /// The source current's unknown when r_out = 0.
    current: Option<usize>,
    amp: OpAmp,
}

/// The network has no unique solution at this frequency (a node nothing holds).
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
#[error("the small-signal network at {frequency} Hz is singular (a node that nothing holds); expected every node tied to ground through some admittance")]
pub struct Singular {
    pub frequency: f64,
}

impl NoiseNetwork {
    /// Build the network of `chain` (netlist `net`) at the operating points of `mid`.
    pub fn build(chain: &Chain, net: &Netlist, mid: &Evaluation) -> NoiseNetwork {
        let n_nodes = net.nodes.len();
        // Union–find: every fixed node (ground, rails, the dead EMF) is AC ground, so
        // all of them join node 0; wires join their two ends.
        let mut parent: Vec<usize> = (0..n_nodes).collect();
        fn root(parent: &[usize], mut x: usize) -> usize {
            while parent[x] != x {
                x = parent[x];
            }
            x
        }
        let join = |parent: &mut Vec<usize>, a: usize, b: usize| {
            let (ra, rb) = (root(parent, a), root(parent, b));
            let (lo, hi) = if ra < rb { (ra, rb) } else { (rb, ra) };
            parent[hi] = lo;
        };
        for f in 1..net.fixed.len() {
            join(&mut parent, 0, f);
        }
        for r in net.resistors.iter().filter(|r| r.r == 0.0) {
            join(&mut parent, r.a, r.b);
        }
        // One unknown per group that is not ground.
        let mut group_unknown: Vec<Option<usize>> = vec![None; n_nodes];
        let mut m = 0;
        for (x, slot) in group_unknown.iter_mut().enumerate().skip(1) {
            if root(&parent, x) == x {
                *slot = Some(m);
                m += 1;
            }
        }
        let mut unknown: Vec<Option<usize>> = (0..n_nodes)
            .map(|x| group_unknown[root(&parent, x)])
            .collect();
        // An ideal op-amp output's current: one more unknown each.
        let mut opamps: Vec<OpampStamp> = Vec::with_capacity(net.opamps.len());
        for o in &net.opamps {
            let Some(amp) = chain.devices[o.device].opamp else {
                continue;
            };
            let current = (amp.r_out == 0.0).then(|| {
                m += 1;
                m - 1
            });
            opamps.push(OpampStamp {
                plus: unknown[o.plus],
                minus: unknown[o.minus],
                pin: unknown[o.pin],
                current,
                amp,
            });
        }

        let mut conductances = Vec::new();
        let mut capacitances = Vec::new();
        for r in net.resistors.iter().filter(|r| r.r > 0.0) {
            conductances.push((r.a, r.b, 1.0 / r.r));
        }
        for c in &net.capacitors {
            capacitances.push((c.a, c.b, c.c));
        }
        if chain.source.capacitance > 0.0 {
            capacitances.push((net.source, 0, chain.source.capacitance));
        }
        for (k, load) in chain.loads.iter().enumerate() {
            if load.capacitance > 0.0 {
                capacitances.push((net.loads[k], 0, load.capacitance));
            }
        }
        let transistors: Vec<([usize; 3], HybridPi)> = net
            .transistors
            .iter()
            .map(|t| {
                let hp = chain.devices[t.device].small_signal(&mid.dc[t.stage].op, mid.v_t);
                ([t.nodes.b, t.nodes.c, t.nodes.e], hp)
            })
            .collect();

        // Reverse Cuthill–McKee on the unknowns' couplings, then the band they need.
        let mut edges = Vec::new();
        let pair = |a: usize, b: usize, edges: &mut Vec<(usize, usize)>| {
            if let (Some(p), Some(q)) = (unknown[a], unknown[b]) {
                edges.push((p, q));
            }
        };
        for &(a, b, _) in conductances.iter().chain(&capacitances) {
            pair(a, b, &mut edges);
        }
        for (pins, _) in &transistors {
            for &p in pins {
                for &q in pins {
                    pair(p, q, &mut edges);
                }
            }
        }
        for o in &opamps {
            let ends = [o.plus, o.minus, o.pin, o.current];
            for p in ends.iter().flatten() {
                for q in ends.iter().flatten() {
                    edges.push((*p, *q));
                }
            }
        }
        let Numbering {
            number: position,
            band,
            ..
        } = Numbering::of(m, &edges);
        for u in unknown.iter_mut().flatten() {
            *u = position[*u];
        }
        let at = |n: usize| unknown[n];
        NoiseNetwork {
            band,
            conductances: conductances
                .iter()
                .map(|&(a, b, g)| (at(a), at(b), g))
                .collect(),
            capacitances: capacitances
                .iter()
                .map(|&(a, b, c)| (at(a), at(b), c))
                .collect(),
            transistors: transistors
                .iter()
                .map(|&(p, hp)| ([at(p[0]), at(p[1]), at(p[2])], hp))
                .collect(),
            opamps: opamps
                .iter()
                .map(|o| {
                    let to = |u: Option<usize>| u.map(|u| position[u]);
                    OpampStamp {
                        plus: to(o.plus),
                        minus: to(o.minus),
                        pin: to(o.pin),
                        current: to(o.current),
                        amp: o.amp,
                    }
                })
                .collect(),
            factored: vec![Complex64::ZERO; band.len()],
            pivots: vec![0; m],
            unknown,
        }
    }

    /// Number of unknowns.
    pub fn size(&self) -> usize {
        self.band.order()
    }

    /// The unknown of netlist node `n` (`None`: AC ground).
    pub fn unknown(&self, n: usize) -> Option<usize> {
        self.unknown[n]
    }

    /// Stamp Yᵀ, the transposed nodal admittance matrix, at `f` hertz and factor it
    /// (`nodal::Band::factor_in_place`) for the adjoint solves at that frequency.
    pub fn stamp(&mut self, f: f64) -> Result<(), Singular> {
        let freq = Freq::Hz(f);
        let s = freq.s();
        let band = self.band;
        let y = &mut self.factored;
        y.iter_mut().for_each(|x| *x = Complex64::ZERO);
        for &(p, q, g) in &self.conductances {
            band.stamp_between(y, p, q, Complex64::new(g, 0.0));
        }
        for &(p, q, c) in &self.capacitances {
            band.stamp_between(y, p, q, s * c);
        }
        for (pins, hp) in &self.transistors {
            let m = hp.admittance_matrix(s);
            for (i, row) in m.iter().enumerate() {
                for (j, &v) in row.iter().enumerate() {
                    // Entry (i, j) of Y goes to (j, i) of Yᵀ.
                    if let (Some(p), Some(q)) = (pins[i], pins[j]) {
                        y[band.at(q, p)] += v;
                    }
                }
            }
        }
        for o in &self.opamps {
            let a = o.amp.open_loop_gain(freq);
            // Entry (i, j) of Y goes to (j, i) of Yᵀ.
            let put = |y: &mut [Complex64], i: Option<usize>, j: Option<usize>, v: Complex64| {
                if let (Some(i), Some(j)) = (i, j) {
                    y[band.at(j, i)] += v;
                }
            };
            if o.amp.r_in.is_finite() {
                band.stamp_between(y, o.plus, o.minus, Complex64::new(1.0 / o.amp.r_in, 0.0));
            }
            match o.current {
                // KCL at the pin: −g·(v₊ − v₋) + v_pin/r_out (the Norton source g = A/r_out).
                None => {
                    let g = a / o.amp.r_out;
                    put(y, o.pin, o.plus, -g);
                    put(y, o.pin, o.minus, g);
                    band.stamp_between(y, o.pin, None, Complex64::new(1.0 / o.amp.r_out, 0.0));
                }
                // The source current enters the pin; its row: v_pin − A·(v₊ − v₋) = 0.
                Some(c) => {
                    put(y, o.pin, Some(c), -Complex64::ONE);
                    put(y, Some(c), o.pin, Complex64::ONE);
                    put(y, Some(c), o.plus, -a);
                    put(y, Some(c), o.minus, a);
                }
            }
        }
        band.factor_in_place(y, &mut self.pivots)
            .ok_or(Singular { frequency: f })
    }

    /// The adjoint solve for output unknown `o` on the matrix of the last
    /// [`NoiseNetwork::stamp`]: `z` becomes ∂v_o/∂i_n for a unit current into every
    /// unknown n.
    pub fn adjoint(&self, o: usize, z: &mut [Complex64]) -> Option<()> {
        z.iter_mut().for_each(|x| *x = Complex64::ZERO);
        z[o] = Complex64::ONE;
        self.band.solve_factored(&self.factored, &self.pivots, z)
    }
}

impl NoiseNetwork {
    /// The transfer (V/V) from a voltage source in series with op-amp `k`'s + input
    /// (its `voltage_noise`) to the output whose adjoint solution is `z`, at `f` hertz:
    /// the source adds e to the op-amp's control, so A·e at its output source
    /// (A/r_out·e into the pin, or A·e on its own row with r_out = 0), and e/r_in
    /// from + to − through r_in.
    pub fn series_transfer(&self, k: usize, z: &[Complex64], f: f64) -> Complex64 {
        let o = &self.opamps[k];
        let at = |u: Option<usize>| u.map_or(Complex64::ZERO, |u| z[u]);
        let a = o.amp.open_loop_gain(Freq::Hz(f));
        let source = match o.current {
            None => a / o.amp.r_out * at(o.pin),
            Some(c) => a * z[c],
        };
        let through_r_in = if o.amp.r_in.is_finite() {
            (at(o.minus) - at(o.plus)) / o.amp.r_in
        } else {
            Complex64::ZERO
        };
        source + through_r_in
    }
}

/// The transfer impedance from a current source between unknowns `a` and `b` (from a
/// into b inside the source, so it leaves the network at a and enters at b) to the
/// output whose adjoint solution is `z`: v_o = (z_b − z_a)·i.
pub fn transfer(z: &[Complex64], a: Option<usize>, b: Option<usize>) -> Complex64 {
    let at = |u: Option<usize>| u.map_or(Complex64::ZERO, |u| z[u]);
    at(b) - at(a)
}
