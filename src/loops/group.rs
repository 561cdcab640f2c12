//! A loop group's small-signal network (docs/definitions.md "Feedback links"): the
//! descriptions of the loop's stages joined by their forward links and the feedback
//! link, each stage's successors outside the loop as the admittance the backward pass
//! found, and what drives the loop's first stage as a Thevenin source. Solved by
//! modified nodal analysis (a wire, a short capacitor or an ideal source is a branch
//! with its own current unknown: v_a − v_b − Z·i = E stays well conditioned as Z → 0)
//! in one complex system per question, its unknowns numbered by reverse Cuthill–McKee
//! and solved in band storage (`nodal::Band`): the loop is a ring of stages, so the band
//! stays a few stages wide and a solve grows with the loop's length, not its cube.

use crate::chain::Chain;
use crate::circuit::{Element, BOTTOM, FIRST_OWN, GROUND, OUTSIDE_IN, OUTSIDE_OUT, TOP};
use crate::dc::{feedback_end, DcState};
use crate::device::DeviceModel;
use crate::graph::Port;
use crate::network::{Freq, HybridPi};
use crate::nodal::{self, Band, Numbering};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);
const ONE: Complex64 = Complex64::new(1.0, 0.0);

/// What drives the loop's first stage at its input node (through its link).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Upstream {
    /// Nothing (the link cut, or open at DC).
    Open,
    /// An impedance to AC ground (the driver with the EMF dead).
    Impedance(Complex64),
    /// An EMF `v` behind impedance `z`.
    Thevenin(Complex64, Complex64),
    /// A current `i` into the node (a driver whose output is a current source).
    Norton(Complex64),
}

impl Upstream {
    /// The same with the source EMF dead.
    pub fn dead(self) -> Upstream {
        match self {
            Upstream::Thevenin(_, z) => Upstream::Impedance(z),
            Upstream::Norton(_) => Upstream::Open,
            other => other,
        }
    }
}

/// Which element a stamp belongs to, so a question can leave it out.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Part {
    /// Element j of loop position p's description.
    Element(usize, usize),
    /// The op-amp's own elements (r_in, r_out) of loop position p.
    Opamp(usize),
    /// The forward link out of loop position p.
    Link(usize),
    /// The successors outside the loop of loop position p.
    Outside(usize),
    Feedback,
}

/// The loop group's network at one frequency.
#[derive(Debug, Clone, Default)]
pub struct GroupNet {
    /// Number of nodes, AC ground (node 0) included.
    nodes: usize,
    admittances: Vec<(usize, usize, Complex64, Part)>,
    /// Series elements: nodes, impedance (0 = a wire).
    series: Vec<(usize, usize, Complex64, Part)>,
    /// Each device: base, collector, emitter (its own nodes), its hybrid-π, loop position.
    devices: Vec<([usize; 3], HybridPi, usize)>,
    /// Each op-amp (docs/definitions.md "Op-amp wiring"): its source A·(v₊ − v₋) from
    /// node `src` to ground, a branch with its own current.
    pub opamps: Vec<OpampSource>,
    s: Complex64,
    /// Loop positions whose input is an op-amp's + input with nothing else on it
    /// (no r_bias, r_in = ∞, no feedback ending there): it floats once its link is cut.
    bare_input: Vec<bool>,
    /// Input and output node of each loop position.
    pub input: Vec<usize>,
    pub output: Vec<usize>,
    /// Each position's description node → group node.
    pub node_of: Vec<Vec<usize>>,
}

/// The linear system of [`GroupNet::solve_into`]: its branches, injected currents,
/// matrix and right-hand side, kept between solves.
#[derive(Debug, Clone, Default)]
pub struct Buffers {
    series: Vec<(usize, usize, Complex64, Complex64)>,
    inject: Vec<Complex64>,
    y: Vec<Complex64>,
    rhs: Vec<Complex64>,
    /// The couplings of the unknowns of the question being solved.
    edges: Vec<(usize, usize)>,
    /// The numberings met so far, one per set of couplings (each question of a pass
    /// has its own branches; a pass asks a handful).
    orderings: Vec<Ordering>,
}

/// A numbering for band storage, kept with the couplings it was made for.
#[derive(Debug, Clone)]
struct Ordering {
    edges: Vec<(usize, usize)>,
    numbering: Numbering,
}

/// Up to this many unknowns a question keeps the network's own numbering (the nodes
/// along the loop, then the branch currents) in dense storage. Reverse Cuthill–McKee
/// puts the branch currents, whose rows have no diagonal entry when the branch is a
/// wire, among the nodes; on a small, ill-conditioned loop that cost digits against the
/// own numbering (a generated three-stage loop lost 1e-8 against the flat-network
/// reference of tests/network_check.rs). The band is faster at every size, but the
/// loops a chain usually holds are small: accuracy first up to about five stages (our
/// choice), the band beyond, where dense storage's cube would dominate.
const DENSE_UP_TO: usize = 48;

/// Most numberings kept: beyond, the list starts again (a network whose shape keeps
/// changing pays for a numbering per solve rather than growing without bound).
const ORDERINGS_KEPT: usize = 32;

/// The band numbering for `m` unknowns coupled by `edges` (`nodal::Numbering`), from
/// those met so far in `orderings` or else made and kept; its index in `orderings`.
fn ordering(orderings: &mut Vec<Ordering>, edges: &[(usize, usize)], m: usize) -> usize {
    if let Some(k) = orderings
        .iter()
        .position(|o| o.numbering.number.len() == m && o.edges == edges)
    {
        return k;
    }
    if orderings.len() == ORDERINGS_KEPT {
        orderings.clear();
    }
    orderings.push(Ordering {
        edges: edges.to_vec(),
        numbering: Numbering::of(m, edges),
    });
    orderings.len() - 1
}

/// Everything one loop's part of an AC pass needs, kept in its [`super::LoopAc`]
/// across evaluations (`spread` runs one evaluation per trial).
#[derive(Debug, Clone, Default)]
pub struct Workspace {
    pub net: GroupNet,
    pub buffers: Buffers,
    /// The outside successors' admittance per loop position.
    pub outside: Vec<Complex64>,
    /// The closed loop's solution, and two more for the other questions.
    pub v: Vec<Complex64>,
    pub w: Vec<Complex64>,
    pub u: Vec<Complex64>,
}

/// An op-amp of the loop network: + and − (group nodes, 0 where on the reference),
/// the source's node (behind r_out, or the pin itself), A at the network's frequency,
/// its loop position.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OpampSource {
    pub plus: usize,
    pub minus: usize,
    pub src: usize,
    pub a: Complex64,
    pub p: usize,
}

/// One question asked of the network.
#[derive(Debug, Clone, Copy)]
pub struct Setup {
    pub upstream: Upstream,
    /// Loop position whose forward outgoing links (in the loop and outside) are cut.
    pub cut_after: Option<usize>,
    /// Loop position (≥ 1) whose driver link is cut, the driver's output grounded.
    pub cut_before: Option<usize>,
    /// Loop position whose outside successors are removed.
    pub outside_off: Option<usize>,
    /// A unit current into the first node, out of the second (0: ground).
    pub inject: Option<(usize, usize)>,
    /// Loop position whose device's g_m (an op-amp's A) is zeroed.
    pub dead_gm: Option<usize>,
    /// Loop position whose op-amp source is a 1 V test source (A zeroed).
    pub test_source: Option<usize>,
    /// An element left out: element j of loop position p, or (`usize::MAX`, p) the
    /// forward link out of position p.
    pub open: Option<(usize, usize)>,
}

/// [`Setup::open`] for the forward link out of loop position p.
pub fn link_out_of(p: usize) -> (usize, usize) {
    (usize::MAX, p)
}

impl Setup {
    pub fn new(upstream: Upstream) -> Setup {
        Setup {
            upstream,
            cut_after: None,
            cut_before: None,
            outside_off: None,
            inject: None,
            dead_gm: None,
            test_source: None,
            open: None,
        }
    }
}

impl GroupNet {
    /// The network of loop `k` of `chain` at `freq`, on the operating points of `dc`;
    /// `outside[p]` is the admittance the successors outside the loop hang on the
    /// output of loop position p.
    pub fn build(
        chain: &Chain,
        freq: Freq,
        v_t: f64,
        dc: &[DcState],
        k: usize,
        outside: &[Complex64],
    ) -> GroupNet {
        let mut net = GroupNet::default();
        net.refill(chain, freq, v_t, dc, k, outside);
        net
    }

    /// [`GroupNet::build`] into this network's storage (kept across evaluations: once
    /// grown, nothing is allocated).
    pub fn refill(
        &mut self,
        chain: &Chain,
        freq: Freq,
        v_t: f64,
        dc: &[DcState],
        k: usize,
        outside: &[Complex64],
    ) {
        let l = &chain.topology.feedback[k];
        let net = self;
        net.nodes = 1;
        net.admittances.clear();
        net.series.clear();
        net.devices.clear();
        net.opamps.clear();
        net.bare_input.clear();
        net.s = freq.s();
        net.input.clear();
        net.output.clear();
        // Keep each position's node map (and its storage) up to the loop's length.
        net.node_of.resize_with(l.stages.len(), Vec::new);
        for (p, &i) in l.stages.iter().enumerate() {
            let c = &dc[i].circuit;
            let base = net.nodes;
            let mut map = std::mem::take(&mut net.node_of[p]);
            map.clear();
            map.extend((0..c.n_nodes()).map(|x| match x {
                GROUND | TOP | BOTTOM | OUTSIDE_IN | OUTSIDE_OUT => 0,
                _ => base + x - FIRST_OWN,
            }));
            net.nodes += c.n_nodes() - FIRST_OWN;
            for (j, e) in c.elements().iter().enumerate() {
                let (a, b) = e.nodes();
                let (a, b) = (map[a], map[b]);
                let part = Part::Element(p, j);
                match *e {
                    Element::Resistor { r: 0.0, .. } => net.series.push((a, b, ZERO, part)),
                    Element::Resistor { r, .. } => net.admittances.push((a, b, ONE / r, part)),
                    // Open at DC; a shunt capacitor is open at midband too.
                    Element::Capacitor {
                        c, open_at_midband, ..
                    } => match freq {
                        Freq::Dc => {}
                        Freq::Midband if open_at_midband => {}
                        Freq::Hz(_) if open_at_midband => {
                            net.admittances.push((a, b, freq.shunt(c), part))
                        }
                        _ => {
                            if let Some(z) = freq.capacitor(c) {
                                net.series.push((a, b, z, part));
                            }
                        }
                    },
                }
            }
            if let Some(d) = c.bjt_nodes() {
                let hp = chain.device_of(i).small_signal(&dc[i].op, v_t);
                net.devices.push(([map[d.b], map[d.c], map[d.e]], hp, p));
            }
            let feedback_here = p == 0 && feedback_end(&dc[l.to].circuit, l) == c.input;
            net.bare_input.push(
                dc[i]
                    .opamp
                    .as_deref()
                    .zip(chain.device_of(i).opamp)
                    .is_some_and(|(o, amp)| {
                        let input = crate::circuit::opamp::Pin::Node(o.input);
                        amp.r_in.is_infinite()
                            && !feedback_here
                            && !o.resistors.iter().any(|r| r.1 == input || r.2 == input)
                    }),
            );
            if let (Some(o), Some(amp)) = (dc[i].opamp.as_deref(), chain.device_of(i).opamp) {
                // Node k of the op-amp's network is description node FIRST_OWN + k; the
                // reference is AC ground.
                let at = |pin| match pin {
                    crate::circuit::opamp::Pin::Reference => 0,
                    crate::circuit::opamp::Pin::Node(k) => map[FIRST_OWN + k],
                };
                let (plus, minus) = (at(o.plus), at(o.minus));
                if amp.r_in.is_finite() {
                    net.admittances
                        .push((plus, minus, ONE / amp.r_in, Part::Opamp(p)));
                }
                let src = if amp.r_out > 0.0 {
                    net.nodes += 1;
                    let src = net.nodes - 1;
                    let pin = map[FIRST_OWN + o.output];
                    net.admittances
                        .push((src, pin, ONE / amp.r_out, Part::Opamp(p)));
                    src
                } else {
                    map[FIRST_OWN + o.output]
                };
                let a = amp.open_loop_gain(freq);
                net.opamps.push(OpampSource {
                    plus,
                    minus,
                    src,
                    a,
                    p,
                });
            }
            net.input.push(map[c.input]);
            net.output.push(map[c.output]);
            net.node_of[p] = map;
            if outside[p] != ZERO {
                net.admittances
                    .push((net.output[p], 0, outside[p], Part::Outside(p)));
            }
        }
        // Forward links inside the loop: position p drives p + 1.
        for p in 0..l.stages.len() - 1 {
            let (_, coupling) = chain.topology.stage_driver[l.stages[p + 1]];
            if let Some(z) = freq.coupling(coupling) {
                net.series
                    .push((net.output[p], net.input[p + 1], z, Part::Link(p)));
            }
        }
        // The feedback link: R from the last stage's output, then its capacitor.
        let last = l.stages.len() - 1;
        let end = net.node_of[0][feedback_end(&dc[l.to].circuit, l)];
        match l.capacitance.map(|c| freq.capacitor(c)) {
            None => {
                net.admittances
                    .push((net.output[last], end, ONE / l.resistance, Part::Feedback))
            }
            Some(None) => {}
            Some(Some(z)) => {
                let j = net.nodes;
                net.nodes += 1;
                net.admittances
                    .push((net.output[last], j, ONE / l.resistance, Part::Feedback));
                net.series.push((j, end, z, Part::Feedback));
            }
        }
    }

    /// Node voltages (node 0 is ground) for `setup`; `None` when the network is
    /// singular there.
    pub fn solve(&self, setup: &Setup) -> Option<Vec<Complex64>> {
        let mut v = Vec::new();
        self.solve_into(setup, &mut Buffers::default(), &mut v)
            .then_some(v)
    }

    /// [`GroupNet::solve`] into `v` with the system in `b` (both reused: nothing is
    /// allocated once they have grown); false when the network is singular.
    pub fn solve_into(&self, setup: &Setup, b: &mut Buffers, v: &mut Vec<Complex64>) -> bool {
        let keep = |part: Part| match part {
            Part::Link(p) => {
                setup.cut_after != Some(p)
                    && setup.cut_before != Some(p + 1)
                    && setup.open != Some(link_out_of(p))
            }
            Part::Outside(p) => setup.cut_after != Some(p) && setup.outside_off != Some(p),
            Part::Element(p, j) => setup.open != Some((p, j)),
            Part::Opamp(_) | Part::Feedback => true,
        };
        let series = &mut b.series;
        series.clear();
        series.extend(
            self.series
                .iter()
                .filter(|e| keep(e.3))
                .map(|&(a, b, z, _)| (a, b, z, ZERO)),
        );
        if let Some(p) = setup.cut_before {
            series.push((self.output[p - 1], 0, ZERO, ZERO));
        }
        // A bare op-amp + input whose link is cut carries no signal: AC ground, unless
        // the test current goes in there.
        for p in 1..self.input.len() {
            let cut = setup.cut_after == Some(p - 1)
                || setup.cut_before == Some(p)
                || setup.open == Some(link_out_of(p - 1));
            let injected = setup
                .inject
                .is_some_and(|(a, b)| a == self.input[p] || b == self.input[p]);
            if cut && self.bare_input[p] && !injected {
                series.push((self.input[p], 0, ZERO, ZERO));
            }
        }
        let inject = &mut b.inject;
        inject.clear();
        inject.resize(self.nodes, ZERO);
        match setup.upstream {
            Upstream::Open => {}
            Upstream::Impedance(z) => series.push((self.input[0], 0, z, ZERO)),
            Upstream::Thevenin(v, z) => series.push((self.input[0], 0, z, v)),
            Upstream::Norton(i) => inject[self.input[0]] += i,
        }
        if let Some((a, b)) = setup.inject {
            inject[a] += ONE;
            inject[b] -= ONE;
        }
        let n = self.nodes - 1;
        let m = n + series.len() + self.opamps.len();
        // Unknowns: node x ≥ 1 is x − 1, branch k is n + k, op-amp k is n + branches + k.
        let at = |x: usize| x.checked_sub(1);
        let branch = |k: usize| n + k;
        let source = |k: usize| n + series.len() + k;
        // A long loop: which unknowns each stamp below couples, for its band numbering;
        // up to DENSE_UP_TO unknowns the own numbering in dense storage.
        let numbering = if m > DENSE_UP_TO {
            let edges = &mut b.edges;
            edges.clear();
            let mut couple = |p: Option<usize>, q: Option<usize>| {
                if let (Some(p), Some(q)) = (p, q) {
                    edges.push((p, q));
                }
            };
            for &(a, c, _, part) in &self.admittances {
                if keep(part) {
                    couple(at(a), at(c));
                }
            }
            for (pins, _, _) in &self.devices {
                for &r in pins {
                    for &c in pins {
                        couple(at(r), at(c));
                    }
                }
            }
            for (k, &(a, c, _, _)) in series.iter().enumerate() {
                couple(Some(branch(k)), at(a));
                couple(Some(branch(k)), at(c));
            }
            for (k, o) in self.opamps.iter().enumerate() {
                for node in [o.src, o.plus, o.minus] {
                    couple(Some(source(k)), at(node));
                }
            }
            let k = ordering(&mut b.orderings, &b.edges, m);
            Some(&b.orderings[k].numbering)
        } else {
            None
        };
        let band = numbering.map_or(Band::dense(m), |x| x.band);
        let row = |u: usize| numbering.map_or(u, |x| x.number[u]);
        let slot = |r: usize, c: usize| band.at(row(r), row(c));
        let (y, rhs) = (&mut b.y, &mut b.rhs);
        y.clear();
        y.resize(band.len(), ZERO);
        rhs.clear();
        rhs.resize(m, ZERO);
        for &(a, c, g, part) in &self.admittances {
            if keep(part) {
                band.stamp_between(y, at(a).map(row), at(c).map(row), g);
            }
        }
        for &(pins, hp, p) in &self.devices {
            let hp = if setup.dead_gm == Some(p) {
                HybridPi { g_m: 0.0, ..hp }
            } else {
                hp
            };
            let d = hp.admittance_matrix(self.s);
            for (r, entries) in d.iter().enumerate() {
                for (c, &v) in entries.iter().enumerate() {
                    if let (Some(pr), Some(pc)) = (at(pins[r]), at(pins[c])) {
                        y[slot(pr, pc)] += v;
                    }
                }
            }
        }
        // Branch k: current i_k leaves node a into the branch and enters node b;
        // v_a − v_b − Z·i_k = E.
        for (k, &(a, c, z, e)) in series.iter().enumerate() {
            let i_k = branch(k);
            if let Some(a) = at(a) {
                y[slot(a, i_k)] += ONE;
                y[slot(i_k, a)] += ONE;
            }
            if let Some(c) = at(c) {
                y[slot(c, i_k)] -= ONE;
                y[slot(i_k, c)] -= ONE;
            }
            y[slot(i_k, i_k)] = -z;
            rhs[row(i_k)] = e;
        }
        // Op-amp k: a branch from its source node to ground whose current leaves the
        // source node; v_src − A·(v₊ − v₋) = E (E = 1 V for the test source, A = 0
        // there and where zeroed).
        // A source node wired to ground by the setup (the driver's output of
        // `cut_before` when r_out = 0) takes the source out: its current is zero.
        let grounded = setup.cut_before.map(|p| self.output[p - 1]);
        for (k, o) in self.opamps.iter().enumerate() {
            let i_k = source(k);
            if grounded == Some(o.src) {
                y[slot(i_k, i_k)] = ONE;
                continue;
            }
            let a = if setup.dead_gm == Some(o.p) || setup.test_source == Some(o.p) {
                ZERO
            } else {
                o.a
            };
            if let Some(src) = at(o.src) {
                y[slot(src, i_k)] += ONE;
                y[slot(i_k, src)] += ONE;
            }
            for (node, sign) in [(o.plus, -ONE), (o.minus, ONE)] {
                if let Some(x) = at(node) {
                    y[slot(i_k, x)] += sign * a;
                }
            }
            if setup.test_source == Some(o.p) {
                rhs[row(i_k)] = ONE;
            }
        }
        for (x, &i) in inject.iter().enumerate().skip(1) {
            rhs[row(x - 1)] += i;
        }
        let solved = match numbering {
            Some(_) => band.solve_in_place(y, rhs),
            None => nodal::solve_in_place(y, m, rhs),
        };
        if solved.is_none() {
            return false;
        }
        // Node voltages (node 0 ground), then each op-amp source's current out of its
        // node ([`GroupNet::source_current`]).
        v.clear();
        v.resize(self.nodes + self.opamps.len(), ZERO);
        for x in 1..self.nodes {
            v[x] = rhs[row(x - 1)];
        }
        for k in 0..self.opamps.len() {
            v[self.nodes + k] = -rhs[row(source(k))];
        }
        true
    }

    /// Where op-amp k's source current (out of the op-amp into its node: into the pin)
    /// sits in a solution of [`GroupNet::solve`].
    pub fn source_current(&self, k: usize) -> usize {
        self.nodes + k
    }

    /// The device of loop position p: its nodes and hybrid-π.
    pub fn device(&self, p: usize) -> Option<([usize; 3], HybridPi)> {
        self.devices
            .iter()
            .find(|d| d.2 == p)
            .map(|&(pins, hp, _)| (pins, hp))
    }

    /// The first loop position with a device (docs/definitions.md: the loop's first
    /// device is the device of the stage the feedback returns to, else the first stage
    /// with a device after it).
    pub fn first_device(&self) -> Option<usize> {
        let transistor = self.devices.iter().map(|d| d.2);
        transistor.chain(self.opamps.iter().map(|o| o.p)).min()
    }

    /// The op-amp of loop position p, with its index in [`GroupNet::opamps`].
    pub fn opamp(&self, p: usize) -> Option<(usize, OpampSource)> {
        self.opamps
            .iter()
            .enumerate()
            .find(|(_, o)| o.p == p)
            .map(|(k, &o)| (k, o))
    }
}

/// Admittance seen at a node by a unit current into it: 1/v; zero when the network
/// is singular there (nothing but a current source meets the node: an infinite
/// impedance), infinite when the node is held.
pub fn admittance_at(v: Option<&[Complex64]>, node: usize) -> Complex64 {
    match v {
        Some(v) if v[node] == ZERO => Complex64::new(f64::INFINITY, 0.0),
        Some(v) => crate::network::cdiv(ONE, v[node]),
        None => ZERO,
    }
}

/// Successors of loop position `p` that are outside the loop (every forward
/// successor but the next stage of the loop).
pub fn outside_successors(
    chain: &Chain,
    k: usize,
    p: usize,
) -> impl Iterator<Item = &crate::graph::Branch> {
    let l = &chain.topology.feedback[k];
    let next = l.stages.get(p + 1).copied();
    chain
        .topology
        .successors(Port::Stage(l.stages[p]))
        .iter()
        .filter(move |b| Some(b.to) != next.map(Port::Stage))
}
