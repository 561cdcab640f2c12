//! A stage's description compiled once for repeated evaluation: which nodes merge,
//! which nodes each device terminal's DC network holds, where every element stamps in
//! the small-signal matrix. The plan depends only on the description's shape (which
//! elements join which nodes, which are wires), never on values, so `spread` and
//! `bias` can change values in place and reuse it; a changed shape recompiles it.
//!
//! The plan's DC networks are exactly what [`SubCircuit::dc_networks`] computes
//! (`tests` compare them); the plan only moves the node bookkeeping out of the
//! evaluation loop (DEVELOPERS.md "Speed"). [`SubCircuit::two_port`] is this plan's
//! two-port compiled on the spot.

use super::dc::{DcTerminals, Rails};
use super::{Element, SubCircuit, BOTTOM, FIXED, GROUND, TOP};
use crate::network::{Freq, HybridPi, Thevenin, TwoPort, TERMINAL_B, TERMINAL_C, TERMINAL_E};
use crate::nodal::{self, merge::MAX_NODES, Merge, Scalar};
use arrayvec::ArrayVec;
use num_complex::Complex64;

/// Most unknowns of one device terminal's DC network.
const MAX_DC: usize = 6;
/// Most unknowns of a stage's small-signal network.
const MAX_AC: usize = 8;

/// One conductance of a DC network: element `elem`, between unknowns or held nodes.
#[derive(Debug, Clone, Copy)]
struct DcEdge {
    elem: u8,
    /// Unknown index at each end, or the held node (rail, ground) there.
    a: End,
    b: End,
}

#[derive(Debug, Clone, Copy)]
enum End {
    Unknown(u8),
    Held(u8),
}

/// How one device terminal's own DC network is solved.
#[derive(Debug, Clone, Default)]
struct TerminalPlan {
    /// Wired straight to a held node.
    held: Option<u8>,
    /// No DC path to any held node.
    floating: bool,
    /// Unknowns of the component (the terminal is unknown 0).
    k: u8,
    edges: ArrayVec<DcEdge, { super::MAX_ELEMENTS }>,
}

/// Where the elements stamp in the small-signal matrix at one kind of frequency.
#[derive(Debug, Clone, Default)]
struct AcPlan {
    /// Size of the matrix (input first, output second unless `ports` says otherwise);
    /// 0 when the input is grounded.
    m: u8,
    /// How the ports sit in the matrix.
    ports: PortLayout,
    /// Element index and the matrix positions of its two ends (`None`: AC ground).
    stamps: ArrayVec<(u8, Option<u8>, Option<u8>), { super::MAX_ELEMENTS }>,
    /// Positions of base, collector, emitter.
    device: [Option<u8>; 3],
    /// Position of every node of the description (`None`: AC ground).
    node_pos: [Option<u8>; MAX_NODES],
}

/// How a stage's input and output sit in its small-signal matrix.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
enum PortLayout {
    /// Two nodes: input at 0, output at 1 (every transistor stage).
    #[default]
    Two,
    /// Input and output are one node (a wire through the stage: a potentiometer at
    /// full position, a high-pass at midband), at 0.
    Through,
    /// The output is AC ground (a potentiometer at zero): the input at 0.
    GroundedOutput,
}

/// A node whose DC voltage is known once the transistor is solved.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum KnownNode {
    /// Ground, the top rail or the bottom rail.
    Rail(usize),
    /// The transistor's base, collector or emitter terminal (0, 1, 2).
    Terminal(usize),
    /// The transistor's own base, collector or emitter node (inside r_bb', r_c).
    Device(usize),
}

impl KnownNode {
    /// Its voltage from the rails (ground, top, bottom), the terminal voltages and the
    /// transistor's own node voltages.
    #[inline]
    pub fn voltage(self, rails: [f64; 3], terminals: [f64; 3], device: [f64; 3]) -> f64 {
        match self {
            KnownNode::Rail(k) => rails[k],
            KnownNode::Terminal(k) => terminals[k],
            KnownNode::Device(k) => device[k],
        }
    }
}

/// The input and output nodes and the input's resistors (element, other end), when
/// every one of those nodes is known once the transistor is solved.
#[derive(Debug, Clone, Default)]
pub struct Ports {
    pub input: Option<KnownNode>,
    pub output: Option<KnownNode>,
    pub edges: ArrayVec<(u8, KnownNode), { super::MAX_ELEMENTS }>,
}

/// A compiled description.
#[derive(Debug, Clone, Default)]
pub struct Plan {
    /// The shape compiled for ([`SubCircuit::shape`]); all zero before compiling.
    shape: [u64; 4],
    /// Both ports are device terminals: outside sources join their networks by
    /// Millman's theorem and the compiled DC networks apply.
    ports_on_terminals: bool,
    input_terminal: usize,
    output_terminal: usize,
    terminals: [TerminalPlan; 3],
    /// The own DC networks of base, collector and emitter at the last
    /// [`Plan::solve_own_dc`] (outside sources open).
    own: [Thevenin; 3],
    /// 1/R of every resistor element at the last [`Plan::solve_own_dc`] (0 for
    /// capacitors and wires), so repeated two-ports divide nothing.
    g: [f64; super::MAX_ELEMENTS],
    /// At DC (capacitors open), midband (shorts) and a frequency (admittances).
    ac: [AcPlan; 3],
    /// The resistors at the input node as (element, node at their other end), when
    /// every other end is a rail, ground or a transistor node (terminal or inside
    /// r_bb', r_c); `None` when one needs the whole DC view.
    ports: Option<Ports>,
    /// Two transistor terminals share a resistive path ([`SubCircuit::terminals_coupled`]):
    /// the stage is solved as one nodal network, not by Thevenin networks.
    coupled: bool,
}

fn freq_class(freq: Freq) -> usize {
    match freq {
        Freq::Dc => 0,
        Freq::Midband => 1,
        Freq::Hz(_) => 2,
    }
}

impl Plan {
    /// Compile `c` unless this plan already has its shape; true when it compiled.
    pub fn refresh(&mut self, c: &SubCircuit) -> bool {
        let changed = !c.has_shape(&self.shape);
        if changed {
            *self = Plan::compile(c);
            self.shape = c.shape();
        }
        changed
    }

    fn compile(c: &SubCircuit) -> Plan {
        let mut plan = Plan::default();
        let Some(d) = c.bjt_nodes() else {
            plan.ac = [Freq::Dc, Freq::Midband, Freq::Hz(1.0)].map(|f| AcPlan::compile(c, f));
            return plan;
        };
        let terminals = [d.b, d.c, d.e];
        let index = |n: usize| terminals.iter().position(|&t| t == n);
        if let (Some(i), Some(o)) = (index(c.input), index(c.output)) {
            plan.ports_on_terminals = true;
            plan.input_terminal = i;
            plan.output_terminal = o;
        }
        // DC: capacitors open, wires merged; rails and ground held.
        let mut merge = Merge::new(c.n_nodes(), FIXED);
        for e in c.elements() {
            if let Element::Resistor { a, b, r: 0.0, .. } = *e {
                merge.join(a, b);
            }
        }
        for (t, &node) in terminals.iter().enumerate() {
            plan.terminals[t] = TerminalPlan::compile(c, &merge, node);
        }
        let outer = c.bjt_terminals().map(|t| [t.b, t.c, t.e]);
        let known = |n: usize| -> Option<KnownNode> {
            match n {
                GROUND => Some(KnownNode::Rail(0)),
                TOP => Some(KnownNode::Rail(1)),
                BOTTOM => Some(KnownNode::Rail(2)),
                _ => outer
                    .and_then(|t| t.iter().position(|&x| x == n))
                    .map(KnownNode::Terminal)
                    .or_else(|| {
                        terminals
                            .iter()
                            .position(|&x| x == n)
                            .map(KnownNode::Device)
                    }),
            }
        };
        let mut edges = ArrayVec::new();
        let mut all_known = known(c.input).is_some() && known(c.output).is_some();
        for (i, e) in c.elements().iter().enumerate() {
            if let Element::Resistor { a, b, r, .. } = *e {
                if r > 0.0 && (a == c.input) != (b == c.input) {
                    let other = if a == c.input { b } else { a };
                    match known(other) {
                        Some(k) => edges.push((i as u8, k)),
                        None => all_known = false,
                    }
                }
            }
        }
        plan.ports = all_known.then_some(Ports {
            input: known(c.input),
            output: known(c.output),
            edges,
        });
        plan.coupled = c.terminals_coupled();
        plan.ac = [Freq::Dc, Freq::Midband, Freq::Hz(1.0)].map(|f| AcPlan::compile(c, f));
        plan
    }

    /// Read `c`'s values: every resistor's 1/R, and the stage's own DC networks on its
    /// device terminals (once per evaluation; [`Plan::dc_networks`] adds the outside
    /// to them).
    pub fn solve_own_dc(&mut self, c: &SubCircuit, rails: Rails) {
        for (g, e) in self.g.iter_mut().zip(c.elements()) {
            *g = match *e {
                Element::Resistor { r, .. } if r > 0.0 => 1.0 / r,
                _ => 0.0,
            };
        }
        for k in 0..3 {
            self.own[k] = self.terminals[k].solve(c, &self.g, rails);
        }
    }

    /// The DC networks on base, collector and emitter with `at_input` on the input
    /// node and `at_output` on the output node: [`SubCircuit::dc_networks`], compiled.
    /// Needs [`Plan::solve_own_dc`] for the same values first.
    pub fn dc_networks(
        &self,
        c: &SubCircuit,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
    ) -> DcTerminals {
        if !self.ports_on_terminals {
            return c.dc_networks(rails, at_input, at_output);
        }
        let with_outside = |k: usize| {
            let mut th = self.own[k];
            if k == self.input_terminal {
                th = th.parallel(at_input);
            }
            if k == self.output_terminal {
                th = th.parallel(at_output);
            }
            th
        };
        DcTerminals {
            base: with_outside(0),
            collector: with_outside(1),
            emitter: with_outside(2),
        }
    }

    /// Every node's small-signal voltage at `freq` with the input at `v_in` and the
    /// output at `v_out` (the stage's inner nodes carry no outside current). Needs
    /// [`Plan::solve_own_dc`] for the same values first.
    pub fn node_voltages(
        &self,
        c: &SubCircuit,
        hp: &HybridPi,
        freq: Freq,
        v_in: Complex64,
        v_out: Complex64,
    ) -> Option<ArrayVec<Complex64, MAX_NODES>> {
        self.ac[freq_class(freq)].node_voltages(c, &self.g, hp, freq, v_in, v_out)
    }

    /// True when the stage's terminals are coupled (see [`Plan`]'s `coupled`).
    pub fn coupled(&self) -> bool {
        self.coupled
    }

    /// See [`Plan`]'s `ports`.
    pub fn ports(&self) -> Option<&Ports> {
        self.ports.as_ref()
    }

    /// 1/R of element `i` at the last [`Plan::solve_own_dc`].
    pub fn conductance(&self, i: usize) -> f64 {
        self.g[i]
    }

    /// The two-port at `freq`: [`SubCircuit::two_port`], compiled. Needs
    /// [`Plan::solve_own_dc`] for the same values first (it keeps every 1/R).
    #[inline]
    pub fn two_port(&self, c: &SubCircuit, hp: &HybridPi, freq: Freq) -> TwoPort {
        self.ac[freq_class(freq)].two_port(c, &self.g, hp, freq)
    }

    /// The two-port at DC (capacitors open) in real numbers, [y11, y12, y21, y22],
    /// for the DC sweep's linearisation; `None` where Y parameters do not exist (a
    /// passive stage's wire or grounded output: [`Plan::two_port`] at DC has its limit).
    #[inline]
    pub fn two_port_dc(&self, c: &SubCircuit, hp: &HybridPi) -> Option<[f64; 4]> {
        let plan = &self.ac[freq_class(Freq::Dc)];
        if plan.ports != PortLayout::Two {
            return None;
        }
        let device = hp.admittance_matrix_real();
        Some(
            plan.reduce(c, &device, |i, _| self.g[i])
                .unwrap_or([0.0; 4]),
        )
    }
}

fn held_voltage(node: u8, rails: Rails) -> f64 {
    match node as usize {
        TOP => rails.top,
        BOTTOM => rails.bottom,
        _ => 0.0,
    }
}

impl TerminalPlan {
    fn compile(c: &SubCircuit, merge: &Merge, node: usize) -> TerminalPlan {
        let mut plan = TerminalPlan::default();
        let root = merge.root(node);
        if merge.is_fixed(root) {
            plan.held = Some(root as u8);
            return plan;
        }
        let mut nodes = ArrayVec::<usize, MAX_NODES>::new();
        nodes.push(root);
        let mut anchored = false;
        let mut k = 0;
        while k < nodes.len() {
            let here = nodes[k];
            for e in c.elements() {
                if let Element::Resistor { a, b, r, .. } = *e {
                    let (ra, rb) = (merge.root(a), merge.root(b));
                    if r == 0.0 || (ra != here && rb != here) {
                        continue;
                    }
                    let other = if ra == here { rb } else { ra };
                    if merge.is_fixed(other) {
                        anchored = true;
                    } else if !nodes.contains(&other) {
                        nodes.push(other);
                    }
                }
            }
            k += 1;
        }
        if !anchored || nodes.len() > MAX_DC {
            plan.floating = !anchored;
            plan.k = nodes.len() as u8;
            return plan;
        }
        let end = |n: usize| match nodes.iter().position(|&x| x == merge.root(n)) {
            Some(i) => Some(End::Unknown(i as u8)),
            None if merge.is_fixed(n) => Some(End::Held(merge.root(n) as u8)),
            None => None,
        };
        for (i, e) in c.elements().iter().enumerate() {
            if let Element::Resistor { a, b, r, .. } = *e {
                if r == 0.0 {
                    continue;
                }
                if let (Some(ea), Some(eb)) = (end(a), end(b)) {
                    if matches!(ea, End::Unknown(_)) || matches!(eb, End::Unknown(_)) {
                        plan.edges.push(DcEdge {
                            elem: i as u8,
                            a: ea,
                            b: eb,
                        });
                    }
                }
            }
        }
        plan.k = nodes.len() as u8;
        plan
    }

    /// The terminal's Thevenin network: v = (G⁻¹·I)₀, r = (G⁻¹)₀₀.
    fn solve(&self, c: &SubCircuit, g_element: &[f64], rails: Rails) -> Thevenin {
        if let Some(h) = self.held {
            return Thevenin::new(held_voltage(h, rails), 0.0);
        }
        if self.floating {
            return Thevenin::OPEN;
        }
        let k = self.k as usize;
        if k > MAX_DC {
            return Thevenin::OPEN;
        }
        let g_of = |e: &DcEdge| g_element[e.elem as usize];
        if let [DcEdge {
            elem,
            a: End::Unknown(_),
            b: End::Held(h),
        }
        | DcEdge {
            elem,
            a: End::Held(h),
            b: End::Unknown(_),
        }] = self.edges[..]
        {
            // One resistor to a held node: that node behind that resistor.
            if let Element::Resistor { r, .. } = c.elements()[elem as usize] {
                return Thevenin::new(held_voltage(h, rails), r);
            }
        }
        if k == 1 {
            // One node: Millman's theorem, V = Σ(V/R)/Σ(1/R), R = 1/Σ(1/R).
            let (mut g_sum, mut i_sum) = (0.0, 0.0);
            for e in &self.edges {
                let g = g_of(e);
                g_sum += g;
                if let End::Held(h) = e.a {
                    i_sum += g * held_voltage(h, rails);
                }
                if let End::Held(h) = e.b {
                    i_sum += g * held_voltage(h, rails);
                }
            }
            let r = 1.0 / g_sum;
            return Thevenin::new(i_sum * r, r);
        }
        let mut g = [0.0; MAX_DC * MAX_DC];
        let mut i_held = [0.0; MAX_DC];
        let g = &mut g[..k * k];
        for e in &self.edges {
            let y = g_of(e);
            let (p, q) = match (e.a, e.b) {
                (End::Unknown(p), End::Unknown(q)) => (Some(p as usize), Some(q as usize)),
                (End::Unknown(p), End::Held(h)) | (End::Held(h), End::Unknown(p)) => {
                    i_held[p as usize] += y * held_voltage(h, rails);
                    (Some(p as usize), None)
                }
                (End::Held(_), End::Held(_)) => continue,
            };
            nodal::stamp_between(g, k, p, q, y);
        }
        if k == 2 {
            // Two nodes (a tapped emitter resistor): G⁻¹ by Cramer's rule.
            let det = g[0] * g[3] - g[1] * g[2];
            let v = (g[3] * i_held[0] - g[1] * i_held[1]) / det;
            return Thevenin::new(v, g[3] / det);
        }
        let mut unit = [0.0; MAX_DC];
        unit[0] = 1.0;
        let mut g2 = [0.0; MAX_DC * MAX_DC];
        g2[..k * k].copy_from_slice(g);
        if nodal::solve_in_place(g, k, &mut i_held[..k]).is_none()
            || nodal::solve_in_place(&mut g2[..k * k], k, &mut unit[..k]).is_none()
        {
            return Thevenin::OPEN;
        }
        Thevenin::new(i_held[0], unit[0])
    }
}

impl AcPlan {
    fn compile(c: &SubCircuit, freq: Freq) -> AcPlan {
        let mut merge = Merge::new(c.n_nodes(), FIXED);
        merge.join(TOP, GROUND);
        merge.join(BOTTOM, GROUND);
        for e in c.elements() {
            match *e {
                Element::Resistor { a, b, r: 0.0, .. } => merge.join(a, b),
                Element::Capacitor {
                    a,
                    b,
                    open_at_midband: false,
                    ..
                } if freq == Freq::Midband => merge.join(a, b),
                _ => {}
            }
        }
        let numbering = merge.unknowns();
        let mut plan = AcPlan::default();
        let Some(u_in) = numbering.of(c.input) else {
            return plan;
        };
        let u_out = numbering.of(c.output);
        if numbering.m > MAX_AC {
            return plan;
        }
        plan.ports = match u_out {
            Some(u) if u != u_in => PortLayout::Two,
            Some(_) => PortLayout::Through,
            None => PortLayout::GroundedOutput,
        };
        // Input at 0, output (when a node of its own) at 1, inner nodes after them.
        let u_out = u_out.filter(|&u| u != u_in);
        let position = |u: usize| -> u8 {
            (if u == u_in {
                0
            } else if Some(u) == u_out {
                1
            } else {
                let ports = 1 + usize::from(u_out.is_some());
                ports + u - usize::from(u > u_in) - usize::from(u_out.is_some_and(|o| u > o))
            }) as u8
        };
        let at = |node: usize| numbering.of(node).map(position);
        plan.m = numbering.m as u8;
        for (n, pos) in plan.node_pos.iter_mut().enumerate().take(c.n_nodes()) {
            *pos = at(n);
        }
        for (i, e) in c.elements().iter().enumerate() {
            let (a, b) = e.nodes();
            let stamps = match *e {
                Element::Resistor { r, .. } => r != 0.0,
                Element::Capacitor { .. } => freq == Freq::Hz(1.0),
            };
            if stamps && (at(a).is_some() || at(b).is_some()) {
                plan.stamps.push((i as u8, at(a), at(b)));
            }
        }
        if let Some(d) = c.bjt_nodes() {
            plan.device = [at(d.b), at(d.c), at(d.e)];
        }
        plan
    }

    fn two_port(&self, c: &SubCircuit, g: &[f64], hp: &HybridPi, freq: Freq) -> TwoPort {
        let zero = Complex64::new(0.0, 0.0);
        let m = self.m as usize;
        let reduced = match freq {
            // At DC and midband every admittance is real: the same reduction in f64.
            Freq::Dc | Freq::Midband => {
                let device = hp.admittance_matrix_real();
                self.reduce(c, &device, |i, _| g[i])
                    .map(|y| y.map(|x| Complex64::new(x, 0.0)))
            }
            Freq::Hz(_) => {
                let device = hp.admittance_matrix(freq.s());
                self.reduce(c, &device, |i, e| match *e {
                    Element::Resistor { .. } => Complex64::new(g[i], 0.0),
                    Element::Capacitor { c, .. } => freq.shunt(c),
                })
            }
        };
        let [y11, y12, y21, y22] = match reduced {
            Some(y) if m > 0 => y,
            _ => [zero; 4],
        };
        match self.ports {
            PortLayout::Two => TwoPort::new(y11, y12, y21, y22),
            PortLayout::Through => TwoPort::through(y11),
            PortLayout::GroundedOutput => TwoPort::grounded_output(y11),
        }
    }

    /// Stamp every element (admittance from `admittance`) and the device matrix
    /// (rows and columns base, collector, emitter), eliminate all but the ports:
    /// [y11, y12, y21, y22]. `None` when an eliminated node has nothing on it.
    fn reduce<T: Scalar>(
        &self,
        c: &SubCircuit,
        device: &[[T; 3]; 3],
        admittance: impl Fn(usize, &Element) -> T,
    ) -> Option<[T; 4]> {
        let m = self.m as usize;
        if m == 0 {
            return None;
        }
        // One row and column more than the unknowns: AC ground stamps there, and that
        // row and column are ignored (no branch per stamp). Bipolar stages give at most
        // three unknowns at midband: their matrix lives in a small buffer.
        let w = m + 1;
        let mut small = [T::ZERO; 16];
        let mut large = ArrayVec::<T, { (MAX_AC + 1) * (MAX_AC + 1) }>::new();
        let y: &mut [T] = if w <= 4 {
            &mut small[..]
        } else {
            large.extend((0..w * w).map(|_| T::ZERO));
            &mut large[..]
        };
        self.assemble(y, c, device, admittance);
        if self.ports == PortLayout::Two {
            nodal::eliminate_strided(y, w, m, 2)?;
            Some([y[0], y[1], y[w], y[w + 1]])
        } else {
            // One port node: its driving-point admittance.
            nodal::eliminate_strided(y, w, m, 1)?;
            Some([y[0], T::ZERO, T::ZERO, T::ZERO])
        }
    }

    /// Stamp every element and the device matrix into `y`, (m+1) × (m+1) and zeroed,
    /// AC ground in the last row and column.
    fn assemble<T: Scalar>(
        &self,
        y: &mut [T],
        c: &SubCircuit,
        device: &[[T; 3]; 3],
        admittance: impl Fn(usize, &Element) -> T,
    ) {
        let m = self.m as usize;
        let w = m + 1;
        let elements = c.elements();
        let slot = |p: Option<u8>| p.map_or(m, usize::from);
        for &(i, p, q) in &self.stamps {
            let g = admittance(i as usize, &elements[i as usize]);
            let (p, q) = (slot(p), slot(q));
            y[p * w + p] += g;
            y[q * w + q] += g;
            y[p * w + q] -= g;
            y[q * w + p] -= g;
        }
        if self.device.iter().any(Option::is_some) {
            let at = self.device.map(slot);
            for (tp, &i) in [TERMINAL_B, TERMINAL_C, TERMINAL_E].iter().zip(&at) {
                for (tq, &j) in [TERMINAL_B, TERMINAL_C, TERMINAL_E].iter().zip(&at) {
                    y[i * w + j] += device[*tp][*tq];
                }
            }
        }
    }

    /// Every node's small-signal voltage when the input sits at `v_in` and the output
    /// at `v_out`: the eliminated nodes carry no outside current, so
    /// Y_II·v_I = −Y_IP·v_P. `None` when that block is singular.
    fn node_voltages(
        &self,
        c: &SubCircuit,
        g: &[f64],
        hp: &HybridPi,
        freq: Freq,
        v_in: Complex64,
        v_out: Complex64,
    ) -> Option<ArrayVec<Complex64, MAX_NODES>> {
        let m = self.m as usize;
        if m == 0 || self.ports != PortLayout::Two {
            return None;
        }
        let w = m + 1;
        let mut y = ArrayVec::<Complex64, { (MAX_AC + 1) * (MAX_AC + 1) }>::new();
        y.extend((0..w * w).map(|_| Complex64::new(0.0, 0.0)));
        let device = hp.admittance_matrix(freq.s());
        self.assemble(&mut y, c, &device, |i, e| match *e {
            Element::Resistor { .. } => Complex64::new(g[i], 0.0),
            Element::Capacitor { c, .. } => freq.shunt(c),
        });
        let k = m - 2;
        let mut a = ArrayVec::<Complex64, { MAX_AC * MAX_AC }>::new();
        let mut rhs = ArrayVec::<Complex64, MAX_AC>::new();
        for r in 2..m {
            for col in 2..m {
                a.push(y[r * w + col]);
            }
            rhs.push(-(y[r * w] * v_in + y[r * w + 1] * v_out));
        }
        if k > 0 {
            nodal::solve_in_place(&mut a, k, &mut rhs)?;
        }
        Some(
            self.node_pos[..c.n_nodes()]
                .iter()
                .map(|p| match p {
                    None => Complex64::new(0.0, 0.0),
                    Some(0) => v_in,
                    Some(1) => v_out,
                    Some(j) => rhs[*j as usize - 2],
                })
                .collect(),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::{BaseBias, CommonEmitter, EmitterFollower, StageModel};

    #[test]
    fn the_plan_computes_what_the_description_does() {
        // The compiled DC networks against the uncompiled reduction of the same
        // description (component search and a dense solve per call).
        let rails = Rails {
            top: 15.0,
            bottom: 0.0,
        };
        let bias = BaseBias {
            r_top: Some(82e3),
            r_bottom: Some(15e3),
        };
        let stages: Vec<Box<dyn StageModel>> = vec![
            Box::new(CommonEmitter {
                bias,
                r_collector: Some(6.8e3),
                r_emitter: 150.0,
                r_emitter_bypassed: 1.2e3,
                c_bypass: Some(47e-6),
                r_feedback: None,
                supply_filter: None,
            }),
            Box::new(CommonEmitter {
                bias,
                r_collector: Some(6.8e3),
                r_emitter: 0.0,
                r_emitter_bypassed: 1.2e3,
                c_bypass: Some(47e-6),
                r_feedback: None,
                supply_filter: None,
            }),
            Box::new(EmitterFollower {
                bias,
                r_emitter: 2.2e3,
                r_collector: 0.0,
                supply_filter: None,
            }),
        ];
        for s in &stages {
            let c = s.circuit(&crate::device::Device::default());
            let mut plan = Plan::default();
            plan.refresh(&c);
            plan.solve_own_dc(&c, rails);
            let (at_in, at_out) = (Thevenin::new(2.0, 4.7e3), Thevenin::new(7.0, 33e3));
            let a = plan.dc_networks(&c, rails, at_in, at_out);
            let b = c.dc_networks(rails, at_in, at_out);
            for (x, y) in [
                (a.base, b.base),
                (a.collector, b.collector),
                (a.emitter, b.emitter),
            ] {
                assert!(
                    (x.v - y.v).abs() <= 1e-14 * y.v.abs().max(1.0),
                    "{x:?} vs {y:?}"
                );
                assert!((x.r - y.r).abs() <= 1e-14 * y.r, "{x:?} vs {y:?}");
            }
        }
    }
}
