//! DC operating points by Newton's method on a nodal network of one or more stages:
//! a stage whose device terminals are coupled (a collector-to-base feedback resistor,
//! or a supply filter that feeds both the divider and the collector resistor,
//! [`SubCircuit::terminals_coupled`]), and every group of stages joined by direct
//! links (a complementary pair, a cascode). The Thevenin reduction of `dc.rs` treats
//! each terminal's network of one stage as independent, which these are not, so here
//! the stages' descriptions are joined into one network and solved with every
//! transistor in it.
//!
//! Unknowns: the voltages of the merged nodes that are not held (ground, rails,
//! ideal sources) and have a DC path to a held node. Residual: KCL at each, the
//! currents leaving the node through its resistors, through the outside Thevenin
//! sources and into the devices summing to zero. Each device is docs/definitions.md's
//! forward-active NPN, u = I_S·e^(V_BE/V_T), I_C = u·(1 + V_CE/V_A), I_B = u/β; a PNP
//! is the same law on the negated voltages with the currents negated (sign s = −1:
//! V_BE = s·(V_B − V_E), current into the base s·I_B), so its Jacobian entries are
//! the NPN's. A JFET (docs/definitions.md "JFET") takes the square law in saturation,
//! I_D = I_DSS·(1 − V_GS/V_P)²·(1 + V_DS/V_A) with no gate current, mirrored for a
//! p-JFET the same way; its law is chosen once per device (`Network::fets` beside
//! `Network::transistors`), so the bipolar loops are unchanged. It starts at
//! V_GS = V_P/2 and each step moves its V_GS by at most |V_P|/2 (`JFET_STEP`). Over
//! 2125 random divider and supply-filter JFET stages in saturation (decades of every
//! value), a cold start took 5 to 7 steps in 3 cases of 4 and at most 29.
//!
//! The first guess is the linear network with each junction replaced by a V_BE source
//! and each collector by β·I_B (biasing by hand, done on the nodes), each V_BE
//! corrected a few times from the current it carries. Each Newton step is scaled so
//! that no V_BE rises more than the large-signal limiter allows
//! (`large_signal::network::limit_junction`) and no Early factor shrinks too fast.
//! Should Newton still fail with a finite V_A (a collector driven far into
//! saturation), the Early effect is switched on in steps. Over 200 000 random
//! feedback, supply-filter and divider stages (decades of every value), a cold start
//! took 3 or 4 steps in 9 cases of 10 and at most 18.

use super::dc::Rails;
use super::opamp::{rest_fault, OpAmpNetwork, Pin as OpPin};
use super::{Element, SubCircuit, BOTTOM, FIRST_OWN, GROUND, OUTSIDE_IN, OUTSIDE_OUT, TOP};
use crate::device::bipolar::forward_active;
use crate::device::jfet::Jfet;
use crate::device::opamp::OpAmp;
use crate::device::{
    ActiveCurrents, BiasFault, Device, OperatingPoint, I_CUTOFF, I_MAX, V_BE_TYPICAL,
};
use crate::large_signal::network::limit_junction;
use crate::network::Thevenin;
use crate::nodal;

/// Most Newton steps before the solve gives up (or, with a finite V_A, falls back to
/// the Early continuation). A cold start takes 3 to 5.
const MAX_ITERATIONS: usize = 50;
/// Converged when the undamped step moves no node by more than this times the largest
/// held voltage (at least 1 V); the last step is still taken, which leaves an error of
/// about step²/V_T, far below rounding.
const STEP_TOLERANCE: f64 = 1e-12;
/// The residual is at rounding level when every node's KCL sum is below this (about
/// 450 ε) times the size of its terms.
const RESIDUAL_ROUNDING: f64 = 1e-13;
/// A residual this small is nil whatever its terms (a node resting at 0 V whose
/// every term is itself rounding, as around an op-amp on a ground reference).
const RESIDUAL_FLOOR: f64 = 1e-30;
/// Most continuation steps of the Early fallback, and Newton steps in each.
const CONTINUATION_STEPS: usize = 40;
const CONTINUATION_ITERATIONS: usize = 30;
/// Most the Early factor may shrink in one Newton step.
const EARLY_SHRINK: f64 = 8.0;
/// Most a JFET's V_GS may move in one Newton step, in units of |V_P| (common practice
/// for piecewise-quadratic laws, no source: a step must not jump across regions).
const JFET_STEP: f64 = 0.5;
/// Most passes of the first guess's V_BE correction.
const START_PASSES: usize = 4;
/// The first guess stops correcting V_BE once every correction is below this many
/// V_T (Newton takes it from there).
const START_CLOSE: f64 = 0.01;

/// One stage of a DC network: its description, its rails and its device.
#[derive(Debug, Clone, Copy)]
pub struct Piece<'a> {
    pub circuit: &'a SubCircuit,
    pub rails: Rails,
    pub device: &'a Device,
    /// An op-amp stage's own network, which replaces the description's resistors
    /// (their far ends sit on the `reference`, not on ground, at DC).
    pub opamp: Option<PieceOpamp<'a>>,
}

/// An op-amp stage in a DC network (docs/definitions.md "Op-amp"): its network,
/// whose node k is node `FIRST_OWN + k` of the stage's description, the op-amp's
/// values, and the reference's DC voltage.
#[derive(Debug, Clone, Copy)]
pub struct PieceOpamp<'a> {
    pub network: &'a OpAmpNetwork,
    pub amp: OpAmp,
    pub v_ref: f64,
}

/// An op-amp of the network at DC, a linear element as `circuit::opamp` stamps it:
/// the source A_0·(v₊ − v₋) referenced to ground, its current one more unknown, on
/// its own node behind r_out (or on the pin itself when r_out = 0).
#[derive(Debug, Clone, Copy)]
struct Opamp {
    piece: usize,
    a_0: f64,
    /// 1/r_out (0 when the source sits on the pin).
    g_out: f64,
    plus: Pin,
    minus: Pin,
    out: Pin,
    /// The source's node: its own unknown behind r_out, or the pin.
    src: Pin,
    /// The unknown holding the source's current (out of the source into its node).
    current: usize,
}

impl Opamp {
    /// Its linear equations as (row, column, coefficient), zero-padded: a row is a
    /// node's KCL (the current leaving the node) or the source's own equation
    /// v_src − A_0·(v₊ − v₋) = 0; a column is an unknown or a held voltage. The
    /// source's current j enters its node (−j in that node's KCL); r_out joins the
    /// source's node to the pin.
    fn terms(&self) -> [(Pin, Pin, f64); 8] {
        let (a, g, j) = (self.a_0, self.g_out, Pin::Unknown(self.current));
        let (src, out) = (self.src, self.out);
        [
            (src, j, -1.0),
            (j, src, 1.0),
            (j, self.plus, -a),
            (j, self.minus, a),
            (src, src, g),
            (src, out, -g),
            (out, out, g),
            (out, src, -g),
        ]
    }
}

/// A node of a network of pieces: (piece, node of its description).
pub type PieceNode = (usize, usize);

/// What joins the pieces and hangs on them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Tie {
    /// A direct link: the two nodes are one.
    Wire(PieceNode, PieceNode),
    /// A Thevenin source on a node (the source's R_S, a load's R_L, a linearised
    /// neighbour): r = 0 holds the node, r = ∞ is nothing.
    Source(PieceNode, Thevenin),
    /// A resistor between two nodes of different pieces (a feedback link without a
    /// series capacitor).
    Resistor(PieceNode, PieceNode, f64),
}

/// A network's DC solution, piece by piece.
#[derive(Debug, Clone, PartialEq)]
pub struct NetworkSolution {
    /// Each piece's device operating point in its solved frame: currents, V_BE and
    /// V_CE as magnitudes and node voltages times the device's sign (a PNP's negated),
    /// at the device's own nodes (inside r_bb' and r_c). `None` for a piece without one.
    pub ops: Vec<Option<OperatingPoint>>,
    /// Voltage of every node of every piece (held nodes included); NaN for a node
    /// with no DC path to a held node.
    pub volts: Vec<Vec<f64>>,
    /// Each op-amp piece's pin current (out of the op-amp into load and feedback
    /// network); 0 for every other piece.
    pub pin_currents: Vec<f64>,
}

/// A coupled stage's DC solution: the device's operating point (solved frame, see
/// [`NetworkSolution::ops`]) and every node's voltage.
#[derive(Debug, Clone, PartialEq)]
pub struct CoupledSolution {
    pub op: OperatingPoint,
    pub volts: Vec<f64>,
}

/// Where a node sits in the nodal system.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Pin {
    /// Unknown number k.
    Unknown(usize),
    /// Held at a known voltage (ground, a rail, an ideal source, or wired to one).
    Held(f64),
    /// No DC path to any held node.
    Floating,
}

impl Pin {
    fn voltage(self, x: &[f64]) -> f64 {
        match self {
            Pin::Unknown(k) => x[k],
            Pin::Held(v) => v,
            Pin::Floating => f64::NAN,
        }
    }

    fn unknown(self) -> Option<usize> {
        match self {
            Pin::Unknown(k) => Some(k),
            _ => None,
        }
    }
}

/// docs/definitions.md's forward-active NPN with its constants inverted once.
#[derive(Debug, Clone, Copy)]
struct Law {
    i_s: f64,
    beta: f64,
    inv_beta: f64,
    inv_v_a: f64,
    inv_v_t: f64,
}

impl Law {
    fn new(device: &Device, v_t: f64) -> Law {
        Law {
            i_s: device.i_s,
            beta: device.beta,
            inv_beta: 1.0 / device.beta,
            inv_v_a: if device.v_a.is_finite() {
                1.0 / device.v_a
            } else {
                0.0
            },
            inv_v_t: 1.0 / v_t,
        }
    }

    /// u = I_S·e^(V_BE/V_T).
    fn u(&self, v_be: f64) -> f64 {
        self.i_s * (v_be * self.inv_v_t).exp()
    }

    /// The device interface's forward-active law (`device::bipolar::forward_active`).
    fn at(&self, v_be: f64, v_ce: f64) -> ActiveCurrents {
        forward_active(
            self.i_s,
            self.inv_beta,
            self.inv_v_a,
            self.inv_v_t,
            v_be,
            v_ce,
        )
    }
}

/// A transistor of the network: its law, its polarity's sign and its base, collector
/// and emitter pins (the device's own nodes).
#[derive(Debug, Clone, Copy)]
struct Transistor {
    piece: usize,
    law: Law,
    /// +1 NPN, −1 PNP.
    s: f64,
    pins: [Pin; 3],
}

impl Transistor {
    /// V_BE and V_CE in the device's frame: s·(V_B − V_E), s·(V_C − V_E).
    fn v_be_ce(&self, x: &[f64]) -> (f64, f64) {
        let [b, c, e] = self.pins.map(|p| p.voltage(x));
        (self.s * (b - e), self.s * (c - e))
    }

    /// V_BE when held nodes fix it (both terminals held, or merged into one node).
    fn fixed_v_be(&self) -> Option<f64> {
        match (self.pins[0], self.pins[2]) {
            (Pin::Unknown(i), Pin::Unknown(j)) => (i == j).then_some(0.0),
            (Pin::Held(v_b), Pin::Held(v_e)) => Some(self.s * (v_b - v_e)),
            _ => None,
        }
    }
}

/// A JFET of the network: its law (docs/definitions.md "JFET", saturation), its
/// polarity's sign and its gate, drain and source pins, in the order of a
/// [`Transistor`]'s base, collector and emitter.
#[derive(Debug, Clone, Copy)]
struct Fet {
    piece: usize,
    law: Jfet,
    /// +1 n-channel, −1 p-channel.
    s: f64,
    pins: [Pin; 3],
}

impl Fet {
    /// V_GS and V_DS in the n-channel frame: s·(V_G − V_S), s·(V_D − V_S).
    fn v_gs_ds(&self, x: &[f64]) -> (f64, f64) {
        let [g, d, src] = self.pins.map(|p| p.voltage(x));
        (self.s * (g - src), self.s * (d - src))
    }

    /// V_GS when held nodes fix it (both terminals held, or merged into one node).
    fn fixed_v_gs(&self) -> Option<f64> {
        match (self.pins[0], self.pins[2]) {
            (Pin::Unknown(i), Pin::Unknown(j)) => (i == j).then_some(0.0),
            (Pin::Held(v_g), Pin::Held(v_s)) => Some(self.s * (v_g - v_s)),
            _ => None,
        }
    }
}

/// The device laws of a network, each chosen once per device: the bipolar
/// transistors' (in [`Network::transistors`]' order) and the JFETs' (in
/// [`Network::fets`]' order).
#[derive(Debug, Clone)]
struct Laws {
    bjt: Vec<Law>,
    fet: Vec<Jfet>,
}

impl Laws {
    /// The laws with every 1/V_A scaled by `t` (the Early continuation).
    fn scaled(&self, t: f64) -> Laws {
        Laws {
            bjt: self
                .bjt
                .iter()
                .map(|l| Law {
                    inv_v_a: t * l.inv_v_a,
                    ..*l
                })
                .collect(),
            fet: self
                .fet
                .iter()
                .map(|l| Jfet {
                    v_a: l.v_a / t,
                    ..*l
                })
                .collect(),
        }
    }

    fn has_early(&self) -> bool {
        self.bjt.iter().any(|l| l.inv_v_a > 0.0) || self.fet.iter().any(|l| l.v_a.is_finite())
    }
}

/// The DC nodal network of the pieces: capacitors open, wires merged, the outside
/// sources as conductances to held nodes (or merged when ideal).
struct Network {
    /// Where every node of every piece sits, piece by piece.
    pins: Vec<Vec<Pin>>,
    /// Conductances with at least one end unknown: (end a, end b, g).
    edges: Vec<(Pin, Pin, f64)>,
    transistors: Vec<Transistor>,
    fets: Vec<Fet>,
    opamps: Vec<Opamp>,
    /// Number of unknowns: node voltages, then each op-amp's source node (with
    /// r_out) and current.
    m: usize,
    /// The largest held voltage, at least 1 V: the scale of the step tolerance.
    v_scale: f64,
}

/// Union–find over the network's nodes, a held node always the root of its set.
struct Sets {
    parent: Vec<usize>,
    held: Vec<Option<f64>>,
}

impl Sets {
    fn root(&self, mut x: usize) -> usize {
        while self.parent[x] != x {
            x = self.parent[x];
        }
        x
    }

    fn join(&mut self, a: usize, b: usize) {
        let (ra, rb) = (self.root(a), self.root(b));
        if ra == rb {
            return;
        }
        // Keep a held node as the root; otherwise the smaller index.
        let keep_b = self.held[rb].is_some() && self.held[ra].is_none();
        let (lo, hi) = if keep_b || (self.held[ra].is_some() == self.held[rb].is_some() && rb < ra)
        {
            (rb, ra)
        } else {
            (ra, rb)
        };
        self.parent[hi] = lo;
    }
}

/// One end of a conductance while the network is built: a merged node, or a held
/// voltage (the far end of an outside Thevenin source).
#[derive(Debug, Clone, Copy)]
enum End {
    Node(usize),
    Volts(f64),
}

impl Network {
    /// The pieces' network. A device terminal without a DC path is named with the
    /// piece it belongs to.
    fn new(pieces: &[Piece], ties: &[Tie], v_t: f64) -> Result<Network, (usize, BiasFault)> {
        let mut first = Vec::with_capacity(pieces.len());
        let mut total = 0;
        for p in pieces {
            first.push(total);
            total += p.circuit.n_nodes();
        }
        let index = |(p, node): PieceNode| first[p] + node;
        // Each piece's ground and rails are held; its outside handles are unused.
        let mut sets = Sets {
            parent: (0..total).collect(),
            held: vec![None; total],
        };
        for (p, piece) in pieces.iter().enumerate() {
            sets.held[first[p] + GROUND] = Some(0.0);
            sets.held[first[p] + TOP] = Some(piece.rails.top);
            sets.held[first[p] + BOTTOM] = Some(piece.rails.bottom);
        }
        let resistors = || {
            pieces
                .iter()
                .enumerate()
                .filter(|(_, piece)| piece.opamp.is_none())
                .flat_map(move |(p, piece)| {
                    piece
                        .circuit
                        .elements()
                        .iter()
                        .filter_map(move |e| match *e {
                            Element::Resistor { a, b, r, .. } => Some(((p, a), (p, b), r)),
                            Element::Capacitor { .. } => None,
                        })
                })
                .chain(ties.iter().filter_map(|t| match *t {
                    Tie::Resistor(a, b, r) => Some((a, b, r)),
                    _ => None,
                }))
        };
        for (a, b, r) in resistors() {
            if r == 0.0 {
                sets.join(index(a), index(b));
            }
        }
        for tie in ties {
            if let Tie::Wire(a, b) = *tie {
                sets.join(index(a), index(b));
            }
        }
        for tie in ties {
            if let Tie::Source(at, th) = *tie {
                let r = sets.root(index(at));
                if th.r == 0.0 && sets.held[r].is_none() {
                    sets.held[r] = Some(th.v);
                }
            }
        }
        // Conductances between merged roots, and from a root to a held voltage.
        let mut joins: Vec<(usize, End, f64)> = Vec::new();
        for (a, b, r) in resistors() {
            let (ra, rb) = (sets.root(index(a)), sets.root(index(b)));
            if r > 0.0 && ra != rb {
                joins.push((ra, End::Node(rb), 1.0 / r));
            }
        }
        for tie in ties {
            if let Tie::Source(at, th) = *tie {
                if th.r > 0.0 && th.r.is_finite() {
                    joins.push((sets.root(index(at)), End::Volts(th.v), 1.0 / th.r));
                }
            }
        }
        // An op-amp stage's resistors (and r_in from + to −) from its own network, the
        // reference a held voltage; its pin is driven by the op-amp's source.
        let opamp_node = |p: usize, pin: OpPin, v_ref: f64| match pin {
            OpPin::Reference => End::Volts(v_ref),
            OpPin::Node(k) => End::Node(sets.root(first[p] + FIRST_OWN + k)),
        };
        let mut driven_pins = Vec::new();
        for (p, piece) in pieces.iter().enumerate() {
            let Some(o) = piece.opamp else { continue };
            let r_in = o.amp.r_in.is_finite().then_some((
                "r_in",
                o.network.plus,
                o.network.minus,
                o.amp.r_in,
            ));
            for (_, a, b, r) in o.network.resistors.iter().copied().chain(r_in) {
                match (opamp_node(p, a, o.v_ref), opamp_node(p, b, o.v_ref)) {
                    (End::Node(a), b) | (b, End::Node(a)) => {
                        if !matches!(b, End::Node(b) if b == a) {
                            joins.push((a, b, 1.0 / r));
                        }
                    }
                    (End::Volts(_), End::Volts(_)) => {}
                }
            }
            driven_pins.push(sets.root(first[p] + FIRST_OWN + o.network.output));
        }
        // A DC path to a held node: held roots, then whatever a conductance joins to
        // one, and the emitter of an anchored base where another device's collector
        // feeds it (a cascode's upper emitter follows its base, carrying the lower
        // collector's current). A base reached only through its emitter, or an emitter
        // that nothing feeds, would carry no current, and a collector alone is a
        // current source: none of these fixes anything.
        let device_roots: Vec<[usize; 3]> = pieces
            .iter()
            .enumerate()
            .filter_map(|(p, piece)| {
                let d = piece.circuit.bjt_nodes()?;
                Some([d.b, d.c, d.e].map(|n| sets.root(index((p, n)))))
            })
            .collect();
        // What joins without passing a held node: an emitter is fed by a collector in
        // its piece of the network (through r_c, say).
        let mut floating = Sets {
            parent: (0..total).collect(),
            held: vec![None; total],
        };
        for &(a, b, _) in &joins {
            if let End::Node(b) = b {
                if sets.held[a].is_none() && sets.held[b].is_none() {
                    floating.join(a, b);
                }
            }
        }
        let junctions: Vec<(usize, usize)> = device_roots
            .iter()
            .enumerate()
            .filter(|&(k, &[_, _, e])| {
                device_roots
                    .iter()
                    .enumerate()
                    .any(|(j, &[_, c, _])| j != k && floating.root(c) == floating.root(e))
            })
            .map(|(_, &[b, _, e])| (b, e))
            .collect();
        let mut anchored: Vec<bool> = sets.held.iter().map(Option::is_some).collect();
        for &r in &driven_pins {
            anchored[r] = true;
        }
        loop {
            let mut grew = false;
            for &(a, b, _) in &joins {
                let b_anchored = match b {
                    End::Node(b) => anchored[b],
                    End::Volts(_) => true,
                };
                if anchored[a] != b_anchored {
                    anchored[a] = true;
                    if let End::Node(b) = b {
                        anchored[b] = true;
                    }
                    grew = true;
                }
            }
            for &(b, e) in &junctions {
                if anchored[b] && !anchored[e] {
                    anchored[e] = true;
                    grew = true;
                }
            }
            if !grew {
                break;
            }
        }
        let mut pin_of_root = vec![Pin::Floating; total];
        let mut m = 0;
        for x in 0..total {
            if sets.root(x) == x {
                pin_of_root[x] = match sets.held[x] {
                    Some(v) => Pin::Held(v),
                    None if anchored[x] => {
                        m += 1;
                        Pin::Unknown(m - 1)
                    }
                    None => Pin::Floating,
                };
            }
        }
        let pin = |x: usize| pin_of_root[sets.root(x)];
        let pins: Vec<Vec<Pin>> = pieces
            .iter()
            .enumerate()
            .map(|(p, piece)| {
                (0..piece.circuit.n_nodes())
                    .map(|node| match node {
                        OUTSIDE_IN | OUTSIDE_OUT => Pin::Floating,
                        _ => pin(first[p] + node),
                    })
                    .collect()
            })
            .collect();
        let mut transistors = Vec::new();
        let mut fets = Vec::new();
        for (p, piece) in pieces.iter().enumerate() {
            let Some(d) = piece.circuit.bjt_nodes() else {
                continue;
            };
            let jfet = piece.device.jfet_model();
            let names = match jfet {
                Some(_) => ["gate", "source", "drain"],
                None => ["base", "emitter", "collector"],
            };
            for (node, terminal) in [d.b, d.e, d.c].into_iter().zip(names) {
                if pins[p][node] == Pin::Floating {
                    return Err((p, BiasFault::NoDcPath { terminal }));
                }
            }
            let device_pins = [pins[p][d.b], pins[p][d.c], pins[p][d.e]];
            match jfet {
                Some(law) => fets.push(Fet {
                    piece: p,
                    law,
                    s: piece.device.sign(),
                    pins: device_pins,
                }),
                None => transistors.push(Transistor {
                    piece: p,
                    law: Law::new(piece.device, v_t),
                    s: piece.device.sign(),
                    pins: device_pins,
                }),
            }
        }
        let mut opamps = Vec::new();
        for (p, piece) in pieces.iter().enumerate() {
            let Some(o) = piece.opamp else { continue };
            let at = |pin: OpPin, terminal| match pin {
                OpPin::Reference => Ok(Pin::Held(o.v_ref)),
                OpPin::Node(k) => match pins[p][FIRST_OWN + k] {
                    Pin::Floating => Err((p, BiasFault::NoDcPath { terminal })),
                    pin => Ok(pin),
                },
            };
            let (plus, minus) = (
                at(o.network.plus, "+ input")?,
                at(o.network.minus, "− input")?,
            );
            let out = at(OpPin::Node(o.network.output), "output")?;
            let (src, g_out) = if o.amp.r_out > 0.0 {
                m += 1;
                (Pin::Unknown(m - 1), 1.0 / o.amp.r_out)
            } else {
                (out, 0.0)
            };
            m += 1;
            opamps.push(Opamp {
                piece: p,
                a_0: o.amp.a_0,
                g_out,
                plus,
                minus,
                out,
                src,
                current: m - 1,
            });
        }
        let edges = joins
            .iter()
            .map(|&(a, b, g)| {
                let b = match b {
                    End::Node(b) => pin_of_root[b],
                    End::Volts(v) => Pin::Held(v),
                };
                (pin_of_root[a], b, g)
            })
            .filter(|(a, b, _)| a.unknown().is_some() || b.unknown().is_some())
            .collect();
        let v_scale = sets
            .held
            .iter()
            .flatten()
            .chain(ties.iter().filter_map(|t| match t {
                Tie::Source(_, th) if th.r.is_finite() => Some(&th.v),
                _ => None,
            }))
            .fold(1.0_f64, |s, v| s.max(v.abs()));
        Ok(Network {
            pins,
            edges,
            transistors,
            fets,
            opamps,
            m,
            v_scale,
        })
    }

    /// Stamp conductance `g` between `pa` and `pb` into the `s × s` matrix `a`
    /// (unknowns first), and the current it drives from a held end into `rhs`.
    fn stamp(a: &mut [f64], s: usize, rhs: &mut [f64], pa: Pin, pb: Pin, g: f64) {
        nodal::stamp_between(a, s, pa.unknown(), pb.unknown(), g);
        // A held node on the other side drives g·V into this one.
        match (pa, pb) {
            (Pin::Unknown(k), Pin::Held(v)) | (Pin::Held(v), Pin::Unknown(k)) => rhs[k] += g * v,
            _ => {}
        }
    }

    /// The resistive network and the op-amps (linear at DC): G·V = I_held.
    fn stamp_resistive(&self, a: &mut [f64], s: usize, rhs: &mut [f64]) {
        for &(pa, pb, g) in &self.edges {
            Network::stamp(a, s, rhs, pa, pb, g);
        }
        for o in &self.opamps {
            for (row, col, c) in o.terms() {
                let Some(r) = row.unknown() else { continue };
                match col {
                    Pin::Unknown(k) => a[r * s + k] += c,
                    Pin::Held(v) => rhs[r] -= c * v,
                    Pin::Floating => {}
                }
            }
        }
    }

    /// The first guess, biasing by hand on the nodes: the linear network with each
    /// junction replaced by a V_BE source carrying I_B (one more unknown, and one more
    /// equation, s·(V_B − V_E) = V_BE, per transistor) and its collector by β·I_B plus
    /// the Early part g_o·V_CE, g_o = β·I_B'/V_A from the last pass's I_B'. V_BE is
    /// first V_BE_TYPICAL, then V_T·ln(β·I_B'/I_S), so that source and junction carry
    /// the same current (a few passes; each moves V_BE by a fraction of about
    /// V_T/(I_B·R) of the last move); at a fixed point this is the solution. Where held
    /// nodes fix a V_BE its device is linear: I_B = u/β and I_C = u + (u/V_A)·V_CE
    /// there. A JFET's gate–source is a V_GS source at half the pinch-off voltage
    /// carrying no gate current, its drain current I_D an unknown leaving the drain and
    /// entering the source (or, where held nodes fix V_GS, the square law's current
    /// there); Newton takes it from there. Falls back to the resistive network alone.
    fn cold_start(&self, all: &Laws, x: &mut [f64]) {
        let laws = &all.bjt[..];
        let m = self.m;
        let fixed: Vec<Option<f64>> = self
            .transistors
            .iter()
            .map(Transistor::fixed_v_be)
            .collect();
        // Column (and row) of each free junction's I_B.
        let mut column = vec![None; self.transistors.len()];
        let mut s = m;
        for (k, f) in fixed.iter().enumerate() {
            if f.is_none() {
                column[k] = Some(s);
                s += 1;
            }
        }
        let any_free_junction = s > m;
        // Column (and row) of each free JFET's I_D.
        let mut fet_column = vec![None; self.fets.len()];
        for (k, f) in self.fets.iter().enumerate() {
            if f.fixed_v_gs().is_none() {
                fet_column[k] = Some(s);
                s += 1;
            }
        }
        let mut resistive = vec![0.0; s * s];
        let mut held = vec![0.0; s];
        self.stamp_resistive(&mut resistive, s, &mut held);
        for ((f, law), column) in self.fets.iter().zip(&all.fet).zip(&fet_column) {
            let [g, d, src] = f.pins;
            // I_D (times s) leaves the drain into the device and the source out of it.
            let share = [(d, f.s), (src, -f.s)];
            match (*column, f.fixed_v_gs()) {
                (Some(col), _) => {
                    for (p, sign) in share {
                        if let Some(r) = p.unknown() {
                            resistive[r * s + col] += sign;
                        }
                    }
                    // s·(V_G − V_S) = V_GS at half the pinch-off: V_GS = −|V_P|/2.
                    let mut v_held = -0.5 * law.v_p;
                    for (p, sign) in [(g, f.s), (src, -f.s)] {
                        match p {
                            Pin::Unknown(j) => resistive[col * s + j] += sign,
                            Pin::Held(v) => v_held -= sign * v,
                            Pin::Floating => {}
                        }
                    }
                    held[col] = v_held;
                }
                (None, Some(v_gs)) => {
                    let i_d = law.saturation(v_gs, 0.0).i_out;
                    for (p, sign) in share {
                        if let Some(r) = p.unknown() {
                            held[r] -= sign * i_d;
                        }
                    }
                }
                (None, None) => {}
            }
        }
        let mut v_be: Vec<f64> = fixed.iter().map(|f| f.unwrap_or(V_BE_TYPICAL)).collect();
        // u = β·I_B of the last pass (none yet).
        let mut u_last = vec![0.0; self.transistors.len()];
        let mut solved = false;
        let (mut a, mut rhs) = (vec![0.0; s * s], vec![0.0; s]);
        for pass in 0..START_PASSES {
            a.copy_from_slice(&resistive);
            rhs.copy_from_slice(&held);
            for (k, t) in self.transistors.iter().enumerate() {
                let law = &laws[k];
                let [b, c, e] = t.pins;
                // Early part of I_C: a conductance g_o = u/V_A from collector to emitter
                // (in either polarity: s·u·s·(V_C − V_E)/V_A).
                let u = if fixed[k].is_some() {
                    law.u(v_be[k])
                } else {
                    u_last[k]
                };
                Network::stamp(&mut a, s, &mut rhs, c, e, u * law.inv_v_a);
                // Currents leaving the terminals into the device, per unit of I_B:
                // s·I_B at the base, s·β·I_B at the collector, −s·(β + 1)·I_B at the emitter.
                let share = [(b, t.s), (c, t.s * law.beta), (e, -t.s * (law.beta + 1.0))];
                match column[k] {
                    None => {
                        for (p, f) in share {
                            if let Some(r) = p.unknown() {
                                rhs[r] -= f * u * law.inv_beta;
                            }
                        }
                    }
                    Some(col) => {
                        for (p, f) in share {
                            if let Some(r) = p.unknown() {
                                a[r * s + col] += f;
                            }
                        }
                        let mut v_held = 0.0;
                        for (p, sign) in [(b, t.s), (e, -t.s)] {
                            match p {
                                Pin::Unknown(j) => a[col * s + j] += sign,
                                Pin::Held(v) => v_held += sign * v,
                                Pin::Floating => {}
                            }
                        }
                        rhs[col] = v_be[k] - v_held;
                    }
                }
            }
            if nodal::solve_in_place(&mut a, s, &mut rhs).is_none() {
                break;
            }
            x[..m].copy_from_slice(&rhs[..m]);
            solved = true;
            // u = β·I_B ⇒ V_BE = V_T·ln(β·I_B/I_S), at most where u reaches I_MAX.
            let mut settled = true;
            for (k, law) in laws.iter().enumerate() {
                let Some(col) = column[k] else { continue };
                let u = law.beta * rhs[col];
                if u <= 0.0 {
                    continue;
                }
                u_last[k] = u.min(I_MAX);
                let next = (u_last[k] / law.i_s).ln() / law.inv_v_t;
                settled &= (next - v_be[k]).abs() * law.inv_v_t <= START_CLOSE;
                v_be[k] = next;
            }
            // Once the Early parts have been in (pass ≥ 1), stop when V_BE settles.
            if !any_free_junction || (pass >= 1 && settled) {
                break;
            }
        }
        if solved {
            return;
        }
        // The resistive network alone is regular: every unknown has a DC path to a
        // held node.
        let mut a = vec![0.0; m * m];
        let mut rhs = vec![0.0; m];
        self.stamp_resistive(&mut a, m, &mut rhs);
        if nodal::solve_in_place(&mut a, m, &mut rhs).is_some() {
            x[..m].copy_from_slice(&rhs);
        } else {
            x[..m].fill(0.0);
        }
    }

    /// The Jacobian J and −f, f the KCL residual (current leaving each unknown node),
    /// at `x`; `size` gets the size of each node's terms, for the rounding test.
    fn assemble(
        &self,
        laws: &Laws,
        x: &[f64],
        jac: &mut [f64],
        neg_f: &mut [f64],
        size: &mut [f64],
    ) {
        let m = self.m;
        jac.fill(0.0);
        neg_f.fill(0.0);
        size.fill(0.0);
        for &(pa, pb, g) in &self.edges {
            let (v_a, v_b) = (pa.voltage(x), pb.voltage(x));
            // Current a → b: i = g·(V_a − V_b) (Ohm's law).
            let i = g * (v_a - v_b);
            let terms = g * (v_a.abs() + v_b.abs());
            nodal::stamp_between(jac, m, pa.unknown(), pb.unknown(), g);
            if let Some(k) = pa.unknown() {
                neg_f[k] -= i;
                size[k] += terms;
            }
            if let Some(k) = pb.unknown() {
                neg_f[k] += i;
                size[k] += terms;
            }
        }
        for o in &self.opamps {
            for (row, col, c) in o.terms() {
                let Some(r) = row.unknown() else { continue };
                let term = c * col.voltage(x);
                neg_f[r] -= term;
                size[r] += term.abs();
                if let Some(k) = col.unknown() {
                    jac[r * m + k] += c;
                }
            }
        }
        for (t, law) in self.transistors.iter().zip(&laws.bjt) {
            let [b, _, e] = t.pins;
            let (v_be, v_ce) = t.v_be_ce(x);
            let j = law.at(v_be, v_ce);
            // A device current's rounding: its own, and the terminal voltages' rounding
            // magnified by 1/V_T through the exponential.
            let spread = 1.0 + (b.voltage(x).abs() + e.voltage(x).abs()) * law.inv_v_t;
            Network::stamp_device(t.pins, t.s, &j, spread, m, jac, neg_f, size);
        }
        for (f, law) in self.fets.iter().zip(&laws.fet) {
            let [g, _, src] = f.pins;
            let (v_gs, v_ds) = f.v_gs_ds(x);
            let j = law.saturation(v_gs, v_ds);
            // The terminal voltages' rounding magnified by g_m/I_D = 2/(V_GS − V_P).
            let y = law.overdrive(v_gs);
            let spread = if y > 0.0 {
                1.0 + (g.voltage(x).abs() + src.voltage(x).abs()) * 2.0 / y
            } else {
                1.0
            };
            Network::stamp_device(f.pins, f.s, &j, spread, m, jac, neg_f, size);
            // The gate carries no current; its KCL is measured against the channel
            // current its voltage controls (a gate at 0 V on its gate resistor alone
            // would otherwise have terms as small as its own rounding).
            if let Some(r) = g.unknown() {
                size[r] += j.i_out.abs() * spread;
            }
        }
    }

    /// One device's currents `j` (its control, output and common pins, sign `s`) into
    /// J, −f and the terms' sizes (the currents times `spread`).
    #[allow(clippy::too_many_arguments)]
    #[inline]
    fn stamp_device(
        pins: [Pin; 3],
        s: f64,
        j: &ActiveCurrents,
        spread: f64,
        m: usize,
        jac: &mut [f64],
        neg_f: &mut [f64],
        size: &mut [f64],
    ) {
        let [b, c, e] = pins;
        // (terminal, current leaving it into the device, its partials by V_B, V_C,
        // V_E); a PNP's currents are negated and its partials unchanged (s² = 1).
        let rows = [
            (b, s * j.i_ctrl, [j.g_in, 0.0, -j.g_in]),
            (c, s * j.i_out, [j.g_m, j.g_o, -j.g_m - j.g_o]),
            (
                e,
                -s * (j.i_ctrl + j.i_out),
                [-j.g_in - j.g_m, -j.g_o, j.g_in + j.g_m + j.g_o],
            ),
        ];
        for (p, i, d) in rows {
            let Some(r) = p.unknown() else { continue };
            neg_f[r] -= i;
            size[r] += i.abs() * spread;
            for (col, q) in pins.into_iter().enumerate() {
                if let Some(k) = q.unknown() {
                    jac[r * m + k] += d[col];
                }
            }
        }
    }

    /// The share λ ≤ 1 of the Newton step `dx` that keeps every V_BE's rise within what
    /// the junction limiter allows, and every Early factor q = 1 + V_CE/V_A, where it
    /// is positive, from shrinking by more than EARLY_SHRINK in one step (the law's
    /// domain: below q = 0 the forward-active collector current changes sign).
    ///
    /// A JFET's V_GS moves by at most JFET_STEP·|V_P| (the square law has no
    /// junction to limit), and its overdrive V_GS − V_P, where positive, shrinks by at
    /// most EARLY_SHRINK (below pinch-off the law is flat, g_m = 0).
    fn damping(&self, laws: &Laws, x: &[f64], dx: &[f64], v_t: f64) -> f64 {
        let step = |p: Pin| p.unknown().map_or(0.0, |k| dx[k]);
        let mut lambda: f64 = 1.0;
        for (f, law) in self.fets.iter().zip(&laws.fet) {
            let [g, d, src] = f.pins;
            let (v_gs, v_ds) = f.v_gs_ds(x);
            let d_gs = f.s * (step(g) - step(src));
            let most = JFET_STEP * law.v_p;
            if d_gs.abs() > most {
                lambda = lambda.min(most / d_gs.abs());
            }
            let y = law.overdrive(v_gs);
            if y > 0.0 && y + d_gs < y / EARLY_SHRINK {
                lambda = lambda.min((y / EARLY_SHRINK - y) / d_gs);
            }
            let inv_v_a = 1.0 / law.v_a;
            let q = 1.0 + v_ds * inv_v_a;
            let d_q = f.s * (step(d) - step(src)) * inv_v_a;
            if q > 0.0 && q + d_q < q / EARLY_SHRINK {
                lambda = lambda.min((q / EARLY_SHRINK - q) / d_q);
            }
        }
        for (t, law) in self.transistors.iter().zip(&laws.bjt) {
            let [b, c, e] = t.pins;
            let (v_be, v_ce) = t.v_be_ce(x);
            let d_be = t.s * (step(b) - step(e));
            let limited = limit_junction(v_be, v_be + d_be, v_t);
            if d_be != 0.0 && limited != v_be + d_be {
                lambda = lambda.min((limited - v_be) / d_be);
            }
            // q + λ·Δq ≥ q/EARLY_SHRINK with Δq = ΔV_CE/V_A.
            let q = 1.0 + v_ce * law.inv_v_a;
            let d_q = t.s * (step(c) - step(e)) * law.inv_v_a;
            let floor = q / EARLY_SHRINK;
            if q > 0.0 && q + d_q < floor {
                lambda = lambda.min((floor - q) / d_q);
            }
        }
        lambda
    }

    /// Newton's method on KCL from `x`; returns the number of steps taken.
    fn newton(
        &self,
        laws: &Laws,
        v_t: f64,
        x: &mut [f64],
        max_iterations: usize,
    ) -> Result<usize, BiasFault> {
        let m = self.m;
        let tolerance = STEP_TOLERANCE * self.v_scale;
        let mut jac = vec![0.0; m * m];
        let mut dx = vec![0.0; m];
        let mut size = vec![0.0; m];
        let mut largest = f64::INFINITY;
        for iteration in 1..=max_iterations {
            self.assemble(laws, x, &mut jac, &mut dx, &mut size);
            let at_rounding = dx
                .iter()
                .zip(size.iter())
                .all(|(f, s)| f.abs() <= RESIDUAL_ROUNDING * s || f.abs() <= RESIDUAL_FLOOR);
            // J·dx = −f, on the nodal core's elimination.
            if nodal::solve_in_place(&mut jac, m, &mut dx).is_none() {
                return Err(BiasFault::NoConvergence {
                    iterations: iteration,
                    step: f64::INFINITY,
                });
            }
            largest = dx.iter().fold(0.0, |l: f64, d| l.max(d.abs()));
            let lambda = self.damping(laws, x, &dx, v_t);
            for (v, d) in x.iter_mut().zip(dx.iter()) {
                *v += lambda * d;
            }
            if lambda == 1.0 && largest <= tolerance && at_rounding {
                return Ok(iteration);
            }
        }
        Err(BiasFault::NoConvergence {
            iterations: max_iterations,
            step: largest,
        })
    }

    /// The fallback when Newton fails with a finite V_A (a collector driven far into
    /// saturation, where the first guess puts V_CE below −V_A and the Early factor
    /// changes sign): solve without the Early effect, then switch it on in steps, every
    /// 1/V_A scaled by one share t growing up to fourfold per step from where it
    /// changes some q by a tenth, each step warm from the last; a step that fails is
    /// retried shorter (the factor's square root). Along the way the solution keeps
    /// q > 0, so each step starts inside the law's domain. Returns the Newton steps
    /// taken in all.
    fn early_continuation(&self, laws: &Laws, v_t: f64, x: &mut [f64]) -> Option<usize> {
        let m = self.m;
        let without = laws.scaled(0.0);
        self.cold_start(&without, x);
        let mut total = self
            .newton(&without, v_t, &mut x[..m], MAX_ITERATIONS)
            .ok()?;
        let mut reached: f64 = 1.0;
        for (t, law) in self.transistors.iter().zip(&laws.bjt) {
            let v_ce = t.v_be_ce(x).1.abs();
            if law.inv_v_a > 0.0 {
                reached = reached.min(0.1 / (v_ce * law.inv_v_a).max(f64::MIN_POSITIVE));
            }
        }
        for (f, law) in self.fets.iter().zip(&laws.fet) {
            let v_ds = f.v_gs_ds(x).1.abs();
            if law.v_a.is_finite() {
                reached = reached.min(0.1 / (v_ds / law.v_a).max(f64::MIN_POSITIVE));
            }
        }
        reached /= 4.0;
        let mut factor: f64 = 4.0;
        let mut good = x[..m].to_vec();
        for _ in 0..CONTINUATION_STEPS {
            let share = (reached * factor).min(1.0);
            match self.newton(
                &laws.scaled(share),
                v_t,
                &mut x[..m],
                CONTINUATION_ITERATIONS,
            ) {
                Ok(n) => {
                    total += n;
                    if share == 1.0 {
                        return Some(total);
                    }
                    reached = share;
                    good.copy_from_slice(&x[..m]);
                    factor = 4.0;
                }
                Err(_) => {
                    total += CONTINUATION_ITERATIONS;
                    x[..m].copy_from_slice(&good);
                    factor = factor.sqrt();
                }
            }
        }
        None
    }

    /// The operating point of JFET `f` in its solved frame (V_GS in `v_be`, V_DS in
    /// `v_ce`, I_D in `i_c` and `i_e`, no gate current).
    fn fet_operating_point(f: &Fet, x: &[f64]) -> OperatingPoint {
        let [v_g, v_d, v_s] = f.pins.map(|p| f.s * p.voltage(x));
        let i_d = f.law.saturation(v_g - v_s, v_d - v_s).i_out;
        OperatingPoint {
            i_c: i_d,
            i_b: 0.0,
            i_e: i_d,
            v_be: v_g - v_s,
            v_be_junction: v_g - v_s,
            v_ce: v_d - v_s,
            v_b: v_g,
            v_c: v_d,
            v_e: v_s,
        }
    }

    /// The operating point of transistor `t` in its solved frame.
    fn operating_point(t: &Transistor, x: &[f64]) -> OperatingPoint {
        let [v_b, v_c, v_e] = t.pins.map(|p| t.s * p.voltage(x));
        let j = t.law.at(v_b - v_e, v_c - v_e);
        OperatingPoint {
            i_c: j.i_out,
            i_b: j.i_ctrl,
            i_e: j.i_out + j.i_ctrl,
            v_be: v_b - v_e,
            v_be_junction: v_b - v_e,
            v_ce: v_c - v_e,
            v_b,
            v_c,
            v_e,
        }
    }
}

/// DC operating points of the pieces joined by `ties`, by Newton's method on their
/// one nodal network: capacitors open, wires merged, every transistor in forward
/// active, I_C = I_S·e^(V_BE/V_T)·(1 + V_CE/V_A), I_B = (I_S/β)·e^(V_BE/V_T)
/// (docs/definitions.md), a PNP on its negated voltages, every JFET in its square law.
/// A fault names the piece whose device it concerns. Each transistor is checked for
/// cut-off, a current nothing limits, and V_CE below `vce_sat` at its own nodes; each
/// JFET for pinch-off and the ohmic edge (`Jfet::check_ohmic`).
pub fn solve_network(
    pieces: &[Piece],
    ties: &[Tie],
    v_t: f64,
) -> Result<NetworkSolution, (usize, BiasFault)> {
    solve_network_counted(pieces, ties, v_t).map(|(s, _)| s)
}

/// [`solve_network`] and the number of Newton steps it took.
fn solve_network_counted(
    pieces: &[Piece],
    ties: &[Tie],
    v_t: f64,
) -> Result<(NetworkSolution, usize), (usize, BiasFault)> {
    let net = Network::new(pieces, ties, v_t)?;
    let laws = Laws {
        bjt: net.transistors.iter().map(|t| t.law).collect(),
        fet: net.fets.iter().map(|f| f.law).collect(),
    };
    // Held nodes fixing a V_BE so far forward that nothing limits the current.
    for t in &net.transistors {
        if t.fixed_v_be().is_some_and(|v_be| t.law.u(v_be) > I_MAX) {
            return Err((t.piece, BiasFault::Unlimited));
        }
    }
    let mut x = vec![0.0; net.m];
    net.cold_start(&laws, &mut x);
    let first_piece = net
        .transistors
        .first()
        .map(|t| t.piece)
        .into_iter()
        .chain(net.fets.first().map(|f| f.piece))
        .min()
        .unwrap_or(0);
    let solved = match net.newton(&laws, v_t, &mut x, MAX_ITERATIONS) {
        Err(fault) if laws.has_early() => net.early_continuation(&laws, v_t, &mut x).ok_or(fault),
        other => other,
    };
    let iterations = match solved {
        Ok(n) => n,
        Err(fault) => {
            // Newton crawling up a junction that nothing limits (each step's rise is
            // compressed by the limiter): say so for the first such device. A JFET
            // whose channel Newton kept closing is pinched off.
            let runaway = net.transistors.iter().find(|t| {
                let u = t.law.u(t.v_be_ce(&x).0);
                u > I_MAX || u.is_nan()
            });
            let pinched = net.fets.iter().find_map(|f| {
                let op = Network::fet_operating_point(f, &x);
                (op.i_c < I_CUTOFF).then_some((f.piece, op))
            });
            return Err(match (runaway, pinched) {
                (Some(t), _) => (t.piece, BiasFault::Unlimited),
                (None, Some((p, op))) => (p, pinched_off(&op, &pieces[p])),
                (None, None) => (first_piece, fault),
            });
        }
    };
    // An op-amp's pin out of reach sets every stage it drives: named first.
    let mut pin_currents = vec![0.0; pieces.len()];
    for o in &net.opamps {
        let piece = &pieces[o.piece];
        let i_out = x[o.current];
        if let Some(amp) = piece.opamp.map(|p| p.amp) {
            let rails = (piece.rails.top, piece.rails.bottom);
            if let Some(fault) = rest_fault(&amp, rails, o.out.voltage(&x), i_out) {
                return Err((o.piece, fault));
            }
        }
        pin_currents[o.piece] = i_out;
    }
    let mut ops = vec![None; pieces.len()];
    for t in &net.transistors {
        let op = Network::operating_point(t, &x);
        let device = pieces[t.piece].device;
        let fault = if op.i_c > I_MAX || op.i_c.is_nan() {
            Some(BiasFault::Unlimited)
        } else if op.i_c < I_CUTOFF {
            Some(BiasFault::NoForwardBias {
                v_be: op.v_be,
                i_c: op.i_c,
            })
        } else if op.v_ce < device.vce_sat {
            Some(BiasFault::Saturated {
                v_ce: op.v_ce,
                i_c: op.i_c,
                vce_sat: device.vce_sat,
            })
        } else {
            None
        };
        if let Some(fault) = fault {
            return Err((t.piece, fault));
        }
        ops[t.piece] = Some(op);
    }
    for f in &net.fets {
        let op = Network::fet_operating_point(f, &x);
        // Cut off (the channel pinched), then the ohmic edge at the device's nodes.
        if op.i_c < I_CUTOFF || op.i_c.is_nan() {
            return Err((f.piece, pinched_off(&op, &pieces[f.piece])));
        }
        f.law.check_ohmic(&op).map_err(|fault| (f.piece, fault))?;
        ops[f.piece] = Some(op);
    }
    let volts = net
        .pins
        .iter()
        .map(|pins| pins.iter().map(|p| p.voltage(&x)).collect())
        .collect();
    Ok((
        NetworkSolution {
            ops,
            volts,
            pin_currents,
        },
        iterations,
    ))
}

/// The fault of a JFET found cut off at `op` (its solved frame).
fn pinched_off(op: &OperatingPoint, piece: &Piece) -> BiasFault {
    BiasFault::PinchedOff {
        v_gs: op.v_be,
        v_p: piece.device.jfet_model().map_or(0.0, |j| j.v_p),
    }
}

impl SubCircuit {
    /// DC operating point of the stage's transistor on its own nodal network
    /// ([`solve_network`] with this one piece): `at_input` hung on the input node and
    /// `at_output` on the output node (Thevenin sources; r = ∞ is nothing, r = 0 an
    /// ideal source). Exact for any stage, coupled or not
    /// ([`SubCircuit::terminals_coupled`]).
    pub fn solve_coupled(
        &self,
        device: &Device,
        v_t: f64,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
    ) -> Result<CoupledSolution, BiasFault> {
        self.solve_coupled_counted(device, v_t, rails, at_input, at_output)
            .map(|(s, _)| s)
    }

    /// [`SubCircuit::solve_coupled`] and the number of Newton steps it took.
    fn solve_coupled_counted(
        &self,
        device: &Device,
        v_t: f64,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
    ) -> Result<(CoupledSolution, usize), BiasFault> {
        let piece = Piece {
            circuit: self,
            rails,
            device,
            opamp: None,
        };
        let ties = [
            Tie::Source((0, self.input), at_input),
            Tie::Source((0, self.output), at_output),
        ];
        let (mut s, iterations) =
            solve_network_counted(&[piece], &ties, v_t).map_err(|(_, fault)| fault)?;
        let op = s.ops[0].ok_or(BiasFault::NoDcPath { terminal: "base" })?;
        let mut volts = s.volts.swap_remove(0);
        // The outside handles stand for the sources' own voltages.
        volts[OUTSIDE_IN] = at_input.v;
        volts[OUTSIDE_OUT] = at_output.v;
        Ok((CoupledSolution { op, volts }, iterations))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::{BjtNodes, FIXED};
    use crate::device::{solve_bjt, thermal_voltage};

    use crate::device::test_npn as npn;

    fn rails(v_cc: f64) -> Rails {
        Rails {
            top: v_cc,
            bottom: 0.0,
        }
    }

    fn v_t() -> f64 {
        thermal_voltage(298.15)
    }

    /// Base, collector and emitter nodes, input at the base and output at the collector.
    fn transistor(c: &mut SubCircuit) -> BjtNodes {
        let d = BjtNodes {
            b: c.node("base"),
            c: c.node("collector"),
            e: c.node("emitter"),
        };
        c.bjt(d, d);
        c.input = d.b;
        c.output = d.c;
        d
    }

    /// Common emitter as `stages/common_emitter.rs` describes it: divider, R_C, R_E1 to a
    /// tap, R_E2 ∥ C_E from the tap to the bottom rail.
    fn common_emitter() -> SubCircuit {
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        c.resistor("r_top", d.b, TOP, Some(82e3));
        c.resistor("r_bottom", d.b, BOTTOM, Some(15e3));
        c.resistor("r_collector", d.c, TOP, Some(4.7e3));
        let tap = c.node("emitter tap");
        c.resistor("r_emitter", d.e, tap, Some(220.0));
        c.resistor("r_emitter_bypassed", tap, BOTTOM, Some(820.0));
        c.capacitor("c_bypass", "bypass capacitor", tap, BOTTOM, Some(100e-6));
        c
    }

    /// Collector-to-base feedback: R_C to the top rail, R_F from collector to base,
    /// R_E (0: a wire) to the bottom rail, no divider.
    fn feedback(r_c: f64, r_f: f64, r_e: f64) -> SubCircuit {
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        c.resistor("r_collector", d.c, TOP, Some(r_c));
        c.resistor("r_feedback", d.c, d.b, Some(r_f));
        c.resistor("r_emitter", d.e, BOTTOM, Some(r_e));
        c
    }

    /// A supply filter: R_f from the top rail to "filtered top", which feeds the
    /// divider's r_top and r_collector; a capacitor from it to ground (open at DC).
    fn supply_filter(r_c: f64) -> SubCircuit {
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        let f = c.node("filtered top");
        c.resistor("r_filter", TOP, f, Some(1e3));
        c.capacitor("c_filter", "filter capacitor", f, GROUND, Some(100e-6));
        c.resistor("r_top", d.b, f, Some(68e3));
        c.resistor("r_bottom", d.b, BOTTOM, Some(15e3));
        c.resistor("r_collector", d.c, f, Some(r_c));
        c.resistor("r_emitter", d.e, BOTTOM, Some(1e3));
        c
    }

    fn close(a: f64, b: f64, rel: f64) -> bool {
        (a - b).abs() <= rel * b.abs()
    }

    /// Independent check of the feedback stage: the base and collector KCL equations
    /// solved for V_BE by bisection, written here from the circuit, not from the code
    /// under test. For a given V_BE (u = I_S·e^(V_BE/V_T), I_B = u/β): base KCL
    /// (V_C − V_B)/R_F = I_B, emitter V_E = (I_B + I_C)·R_E, V_B = V_E + V_BE, and
    /// collector KCL (V_CC − V_C)/R_C = I_C + I_B give the network's
    /// I_C = (V_CC − V_BE − I_B·R_F)/(R_C + R_E) − I_B; the device asks
    /// I_C = u·(1 + V_CE/V_A) with V_CE = V_BE + I_B·R_F. Their difference falls with
    /// V_BE. Returns (I_C, V_B, V_C, V_E).
    fn feedback_by_bisection(d: &Device, v_cc: f64, r_c: f64, r_f: f64, r_e: f64) -> [f64; 4] {
        let inv_va = if d.v_a.is_finite() { 1.0 / d.v_a } else { 0.0 };
        let at = |v_be: f64| {
            let u = d.i_s * (v_be / v_t()).exp();
            let i_b = u / d.beta;
            let network = (v_cc - v_be - i_b * r_f) / (r_c + r_e) - i_b;
            let device = u * (1.0 + (v_be + i_b * r_f) * inv_va);
            (network - device, device, i_b)
        };
        let (mut lo, mut hi) = (0.0, v_cc);
        loop {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                break;
            }
            if at(mid).0 > 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        let v_be = 0.5 * (lo + hi);
        let (_, i_c, i_b) = at(v_be);
        let v_e = (i_b + i_c) * r_e;
        let v_b = v_e + v_be;
        [i_c, v_b, v_b + i_b * r_f, v_e]
    }

    #[test]
    fn uncoupled_stage_agrees_with_the_thevenin_solver() {
        // Reference: the project's v1 solver (`solve_bjt` on the Thevenin networks of
        // `dc_networks`, node voltages from `dc_voltages`), itself checked against an
        // independent solver in tests/reference. Without coupling both are exact.
        let c = common_emitter();
        assert!(!c.terminals_coupled());
        let cases = [
            (npn(200.0, 80.0), Thevenin::OPEN, Thevenin::OPEN),
            (npn(120.0, f64::INFINITY), Thevenin::OPEN, Thevenin::OPEN),
            // A driver on the base and a successor on the collector.
            (
                npn(200.0, 80.0),
                Thevenin::new(1.0, 10e3),
                Thevenin::new(3.0, 22e3),
            ),
            // An ideal source on the base (merged with it).
            (npn(250.0, 100.0), Thevenin::new(2.2, 0.0), Thevenin::OPEN),
        ];
        for (dev, at_in, at_out) in cases {
            let t = c.dc_networks(rails(12.0), at_in, at_out);
            let op_ref = solve_bjt(&dev, v_t(), t.base, t.emitter, t.collector, None).unwrap();
            let volts_ref = c.dc_voltages(
                rails(12.0),
                at_in,
                at_out,
                [op_ref.v_b, op_ref.v_c, op_ref.v_e],
                None,
            );
            let (s, iterations) = c
                .solve_coupled_counted(&dev, v_t(), rails(12.0), at_in, at_out)
                .unwrap();
            assert!(iterations <= 10, "{iterations}");
            assert!(close(s.op.i_c, op_ref.i_c, 1e-12), "{s:?} vs {op_ref:?}");
            assert!(close(s.op.i_b, op_ref.i_b, 1e-12), "{s:?} vs {op_ref:?}");
            assert_eq!(s.volts.len(), volts_ref.len());
            for (v, r) in s.volts.iter().zip(&volts_ref) {
                assert!(close(*v, *r, 1e-12), "{:?} vs {volts_ref:?}", s.volts);
            }
        }
    }

    #[test]
    fn collector_feedback_bias_matches_the_textbook_and_its_own_kcl() {
        let v_cc = 12.0;
        let (r_c, r_f) = (4.7e3, 330e3);
        // Without R_E: I_C ≈ (V_CC − V_BE)/(R_C + R_F/β) (collector-feedback bias,
        // textbook formula, from memory). It drops the base current in R_C and the
        // Early factor q = 1 + V_CE/V_A (it takes V_BE from the solution). Exactly,
        // V_CC − V_BE = (I_C + I_B)·R_C + I_B·R_F with I_B = I_C/(β·q), so the
        // denominators differ by R_C/(β·q) + (R_F/β)·(1/q − 1), at most
        // R_C/β + (R_F/β)·V_CE/V_A: relative to R_C + R_F/β the formula is off by at
        // most 1/β + V_CE/V_A.
        for dev in [npn(200.0, f64::INFINITY), npn(150.0, 100.0)] {
            let c = feedback(r_c, r_f, 0.0);
            assert!(c.terminals_coupled());
            let s = c
                .solve_coupled(&dev, v_t(), rails(v_cc), Thevenin::OPEN, Thevenin::OPEN)
                .unwrap();
            let textbook = (v_cc - s.op.v_be) / (r_c + r_f / dev.beta);
            let bound = 1.0 / dev.beta + s.op.v_ce / dev.v_a;
            assert!(
                close(s.op.i_c, textbook, bound),
                "{} vs {textbook}",
                s.op.i_c
            );
            // And exactly, against the scalar solve of the same KCL equations.
            let [i_c, v_b, v_c, v_e] = feedback_by_bisection(&dev, v_cc, r_c, r_f, 0.0);
            assert!(close(s.op.i_c, i_c, 1e-9), "{} vs {i_c}", s.op.i_c);
            assert!(close(s.op.v_b, v_b, 1e-9) && close(s.op.v_c, v_c, 1e-9));
            assert_eq!(s.op.v_e, v_e);
        }
        // With R_E, only the independent check.
        let dev = npn(180.0, 60.0);
        let c = feedback(r_c, r_f, 680.0);
        let s = c
            .solve_coupled(&dev, v_t(), rails(v_cc), Thevenin::OPEN, Thevenin::OPEN)
            .unwrap();
        let [i_c, v_b, v_c, v_e] = feedback_by_bisection(&dev, v_cc, r_c, r_f, 680.0);
        assert!(close(s.op.i_c, i_c, 1e-9), "{} vs {i_c}", s.op.i_c);
        assert!(close(s.op.v_b, v_b, 1e-9) && close(s.op.v_c, v_c, 1e-9));
        assert!(close(s.op.v_e, v_e, 1e-9));
        assert!(close(s.op.i_e, s.op.i_c + s.op.i_b, 1e-15));
    }

    #[test]
    fn supply_filter_obeys_ohms_law() {
        // The filtered node sits R_f·I_f below the supply (Ohm's law), I_f being what
        // leaves it through r_top and r_collector (KCL there, the capacitor open at DC).
        let c = supply_filter(3.3e3);
        assert!(c.terminals_coupled());
        let dev = npn(200.0, 80.0);
        let s = c
            .solve_coupled(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN)
            .unwrap();
        let f = FIXED + 3;
        let v = &s.volts;
        let i_f = (v[f] - s.op.v_b) / 68e3 + (v[f] - s.op.v_c) / 3.3e3;
        assert!(
            (v[f] - (12.0 - 1e3 * i_f)).abs() <= 1e-12 * 12.0,
            "{} vs {}",
            v[f],
            12.0 - 1e3 * i_f
        );
        // Ohm's law on the collector and emitter resistors against the device currents.
        assert!(close((v[f] - s.op.v_c) / 3.3e3, s.op.i_c, 1e-12));
        assert!(close(s.op.v_e / 1e3, s.op.i_e, 1e-12));
        // The filter drops the collector supply below the rail.
        assert!(v[f] < 12.0 - 1e3 * s.op.i_c);
    }

    #[test]
    fn far_operating_points_converge_from_the_cold_start() {
        // Reference: the scalar bisection of the feedback stage's KCL (above), which
        // does not depend on any starting point.
        for (v_cc, r_c, r_f, r_e) in [
            // About 0.45 A: V_BE near 0.8 V.
            (100.0, 100.0, 10e3, 1.0),
            // About 1 µA: V_BE near 0.45 V.
            (3.0, 1e6, 10e6, 0.0),
            (12.0, 4.7e3, 330e3, 470.0),
        ] {
            let dev = npn(100.0, 50.0);
            let c = feedback(r_c, r_f, r_e);
            let (s, iterations) = c
                .solve_coupled_counted(&dev, v_t(), rails(v_cc), Thevenin::OPEN, Thevenin::OPEN)
                .unwrap();
            assert!(iterations < MAX_ITERATIONS);
            let [i_c, ..] = feedback_by_bisection(&dev, v_cc, r_c, r_f, r_e);
            assert!(close(s.op.i_c, i_c, 1e-9), "{} vs {i_c}", s.op.i_c);
        }
    }

    #[test]
    fn faults_are_named() {
        let dev = npn(200.0, 80.0);
        let solve = |c: &SubCircuit| {
            c.solve_coupled(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN)
        };
        // A collector resistor far too large for the current the divider sets.
        let r = solve(&supply_filter(100e3));
        assert!(
            matches!(r, Err(BiasFault::Saturated { v_ce, .. }) if v_ce < dev.vce_sat),
            "{r:?}"
        );
        // Far into saturation with a finite V_A: the first guess puts V_CE below −V_A,
        // where the Early factor changes sign, and the fallback (the Early effect
        // switched on in steps) finds the forward-active solution, q > 0.
        let deep = npn(350.0, 70.0);
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        let f = c.node("filtered top");
        c.resistor("r_filter", TOP, f, Some(6.8e3));
        c.resistor("r_top", d.b, f, Some(2.2e3));
        c.resistor("r_bottom", d.b, BOTTOM, Some(12e3));
        c.resistor("r_collector", d.c, f, Some(47e3));
        c.resistor("r_emitter", d.e, BOTTOM, Some(0.0));
        let r = c.solve_coupled(&deep, v_t(), rails(24.0), Thevenin::OPEN, Thevenin::OPEN);
        assert!(
            matches!(r, Err(BiasFault::Saturated { v_ce, .. }) if v_ce < 0.0 && v_ce > -deep.v_a),
            "{r:?}"
        );
        // The base tied only by a capacitor: no DC path.
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        c.resistor("r_collector", d.c, TOP, Some(4.7e3));
        c.capacitor("c_feedback", "feedback capacitor", d.c, d.b, Some(1e-9));
        c.resistor("r_emitter", d.e, BOTTOM, Some(1e3));
        assert_eq!(solve(&c), Err(BiasFault::NoDcPath { terminal: "base" }));
        // The emitter on nothing.
        let mut c = feedback(4.7e3, 330e3, 1e3);
        c.clear();
        let d = transistor(&mut c);
        c.resistor("r_collector", d.c, TOP, Some(4.7e3));
        c.resistor("r_feedback", d.c, d.b, Some(330e3));
        assert_eq!(
            solve(&c),
            Err(BiasFault::NoDcPath {
                terminal: "emitter"
            })
        );
        // The base pulled to the bottom rail: cut off.
        let mut c = feedback(4.7e3, 330e3, 1e3);
        c.resistor("r_bottom", FIXED, BOTTOM, Some(1.0));
        assert!(matches!(solve(&c), Err(BiasFault::NoForwardBias { .. })));
        // An ideal 2 V on the base, the emitter wired to ground: nothing limits I_C.
        let c = feedback(4.7e3, 330e3, 0.0);
        let r = c.solve_coupled(
            &dev,
            v_t(),
            rails(12.0),
            Thevenin::new(2.0, 0.0),
            Thevenin::OPEN,
        );
        assert_eq!(r, Err(BiasFault::Unlimited));
    }
    /// A JFET device: I_DSS, |V_P|, V_A (∞: none), n- or p-channel.
    fn jfet(i_dss: f64, v_p: f64, v_a: f64, n: bool) -> Device {
        Device {
            name: "j".into(),
            polarity: if n {
                crate::device::Polarity::Npn
            } else {
                crate::device::Polarity::Pnp
            },
            v_a,
            jfet: Some(Jfet {
                i_dss,
                v_p,
                v_a,
                c_gs: 0.0,
                c_gd: 0.0,
                sign: if n { 1.0 } else { -1.0 },
            }),
            ..Default::default()
        }
    }

    /// A common source on `rails(12)`: the gate resistor R_G = 1 MΩ and R_S to the
    /// source's rail, R_D from the drain through a supply filter R_F (0: none) to the
    /// drain's rail (an n-channel stage's top, a p-channel stage's bottom), and with
    /// `r_top` a divider's upper resistor from the filtered rail to the gate.
    fn common_source(r_top: Option<f64>, r_s: f64, r_d: f64, r_f: f64, n: bool) -> SubCircuit {
        let (drain_rail, source_rail) = if n { (TOP, BOTTOM) } else { (BOTTOM, TOP) };
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        c.resistor("r_gate", d.b, source_rail, Some(R_G));
        c.resistor("r_source", d.e, source_rail, Some(r_s));
        let f = if r_f > 0.0 {
            let f = c.node("filtered rail");
            c.resistor("r_filter", drain_rail, f, Some(r_f));
            c.capacitor("c_filter", "filter capacitor", f, GROUND, Some(100e-6));
            f
        } else {
            drain_rail
        };
        c.resistor("r_drain", d.c, f, Some(r_d));
        if let Some(r_t) = r_top {
            c.resistor("r_top", d.b, f, Some(r_t));
        }
        c
    }

    const R_G: f64 = 1e6;

    /// Independent check of `common_source` with its divider on a supply V, in the
    /// n-channel frame (a p-channel stage is its mirror image): the gate draws no
    /// current, so the filtered rail is V_F = (V − R_F·I_D)/(1 + R_F/(R_T + R_G)), the
    /// gate V_G = V_F·R_G/(R_T + R_G), V_S = I_D·R_S and V_D = V_F − I_D·R_D (Ohm's law
    /// and KCL at the filtered rail, the filter capacitor open), and I_D solves
    /// I_D = I_DSS·(1 − V_GS/V_P)²·(1 + V_DS/V_A) (docs/definitions.md "JFET"), found by
    /// bisection from 0 to where V_GS reaches V_P. Written here from the circuit, not
    /// from the code under test. Returns (I_D, V_F).
    fn divider_by_bisection(
        d: &Device,
        v: f64,
        r_t: f64,
        r_s: f64,
        r_d: f64,
        r_f: f64,
    ) -> [f64; 2] {
        let j = d.jfet.unwrap();
        let inv_va = if j.v_a.is_finite() { 1.0 / j.v_a } else { 0.0 };
        let v_f = |i_d: f64| (v - r_f * i_d) / (1.0 + r_f / (r_t + R_G));
        let excess = |i_d: f64| {
            let v_gs = v_f(i_d) * R_G / (r_t + R_G) - i_d * r_s;
            let v_ds = v_f(i_d) - i_d * (r_d + r_s);
            let x = (1.0 + v_gs / j.v_p).max(0.0);
            j.i_dss * x * x * (1.0 + v_ds * inv_va) - i_d
        };
        let (mut lo, mut hi) = (0.0, (v + j.v_p) / r_s);
        loop {
            let mid = 0.5 * (lo + hi);
            if mid <= lo || mid >= hi {
                return [mid, v_f(mid)];
            }
            if excess(mid) > 0.0 {
                lo = mid;
            } else {
                hi = mid;
            }
        }
    }

    #[test]
    fn uncoupled_jfet_stage_agrees_with_its_thevenin_solve() {
        // Reference: the JFET's own Thevenin solve (`Jfet::solve`, the quadratic then
        // Newton, on the networks of `dc_networks`), itself checked against the
        // textbook quadratic in tests/jfet.rs. Without coupling both are exact.
        for (dev, n) in [
            (jfet(6e-3, 2.0, f64::INFINITY, true), true),
            (jfet(12e-3, 3.5, 60.0, true), true),
            (jfet(4e-3, 1.2, 100.0, false), false),
        ] {
            let c = common_source(None, 820.0, 1.5e3, 0.0, n);
            assert!(!c.terminals_coupled());
            let t = c.dc_networks(rails(12.0), Thevenin::OPEN, Thevenin::OPEN);
            let s_ = dev.sign();
            let mirror = |th: Thevenin| Thevenin::new(s_ * th.v, th.r);
            let op_ref = dev
                .jfet_model()
                .unwrap()
                .solve(mirror(t.base), mirror(t.emitter), mirror(t.collector))
                .unwrap();
            let (s, iterations) = c
                .solve_coupled_counted(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN)
                .unwrap();
            assert!(iterations <= 10, "{iterations}");
            assert!(close(s.op.i_c, op_ref.i_c, 1e-12), "{s:?} vs {op_ref:?}");
            assert_eq!(s.op.i_b, 0.0);
            for (a, b) in [(s.op.v_be, op_ref.v_be), (s.op.v_ce, op_ref.v_ce)] {
                assert!((a - b).abs() <= 1e-12 * 12.0, "{a} vs {b}");
            }
        }
    }

    #[test]
    fn jfet_on_a_supply_filter_matches_its_loop_equations_and_ohms_law() {
        for (dev, n) in [
            (jfet(8e-3, 2.0, 80.0, true), true),
            (jfet(3e-3, 0.8, f64::INFINITY, true), true),
            (jfet(10e-3, 3.0, 50.0, false), false),
        ] {
            let (r_t, r_s, r_d, r_f) = (10e6, 1.5e3, 1.5e3, 470.0);
            let c = common_source(Some(r_t), r_s, r_d, r_f, n);
            assert!(c.terminals_coupled());
            let (s, iterations) = c
                .solve_coupled_counted(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN)
                .unwrap();
            assert!(iterations <= 12, "{iterations}");
            let [i_d, v_f] = divider_by_bisection(&dev, 12.0, r_t, r_s, r_d, r_f);
            assert!(close(s.op.i_c, i_d, 1e-9), "{} vs {i_d}", s.op.i_c);
            // The filtered rail, in the n-channel frame from the source's rail.
            let f = FIXED + 3;
            let rail = if n { 0.0 } else { 12.0 };
            let mine = dev.sign() * (s.volts[f] - rail);
            assert!(close(mine, v_f, 1e-9), "{mine} vs {v_f}");
            // Ohm's law on the filter: it drops the drain's and the divider's current.
            let i_divider = v_f / (r_t + R_G);
            assert!(close(12.0 - mine, (i_d + i_divider) * r_f, 1e-9));
            assert!(close(s.op.v_ce, v_f - i_d * (r_d + r_s), 1e-9));
        }
    }

    #[test]
    fn random_jfet_filter_stages_converge_to_their_loop_equations() {
        // Reference: the bisection of the loop equations above, which needs no start.
        // 4000 random stages over decades of every value (xorshift, fixed seed); each
        // that the bisection puts in saturation with I_D above the cut-off current
        // must converge to it from the cold start.
        let mut state: u64 = 0x9e37_79b9_7f4a_7c15;
        let mut unit = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64
        };
        let (mut solved, mut most) = (0, 0);
        for case in 0..4000 {
            let mut log = |lo: f64, hi: f64| (lo.ln() + (hi.ln() - lo.ln()) * unit()).exp();
            let n = case % 3 != 0;
            let (i_dss, v_p) = (log(0.3e-3, 50e-3), log(0.3, 8.0));
            let v_a = if case % 2 == 0 {
                f64::INFINITY
            } else {
                log(10.0, 300.0)
            };
            let (r_t, r_s, r_d, r_f) =
                (log(1e5, 1e8), log(10.0, 1e5), log(10.0, 1e5), log(1.0, 1e5));
            let dev = jfet(i_dss, v_p, v_a, n);
            let [i_d, v_f] = divider_by_bisection(&dev, 24.0, r_t, r_s, r_d, r_f);
            let y = v_f * R_G / (r_t + R_G) - i_d * r_s + v_p;
            let v_ds = v_f - i_d * (r_d + r_s);
            if i_d < 2.0 * I_CUTOFF || v_ds < y * 1.01 {
                continue;
            }
            let c = common_source(Some(r_t), r_s, r_d, r_f, n);
            let (s, iterations) = c
                .solve_coupled_counted(&dev, v_t(), rails(24.0), Thevenin::OPEN, Thevenin::OPEN)
                .unwrap_or_else(|e| panic!("case {case}: {e:?}"));
            assert!(
                close(s.op.i_c, i_d, 1e-9),
                "case {case}: {} vs {i_d}",
                s.op.i_c
            );
            solved += 1;
            most = most.max(iterations);
        }
        assert!(solved >= 1000, "only {solved} stages in saturation");
        assert!(most < MAX_ITERATIONS, "{most} Newton steps");
    }

    #[test]
    fn jfet_faults_are_named() {
        let dev = jfet(6e-3, 2.0, 100.0, true);
        // A drain resistor far too large for the self-bias current: ohmic.
        let c = common_source(None, 470.0, 47e3, 1e3, true);
        let r = c.solve_coupled(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN);
        assert!(matches!(r, Err(BiasFault::Ohmic { .. })), "{r:?}");
        // The gate held 5 V below the source's rail: pinched off.
        let c = common_source(None, 470.0, 2.2e3, 1e3, true);
        let r = c.solve_coupled(
            &dev,
            v_t(),
            rails(12.0),
            Thevenin::new(-5.0, 0.0),
            Thevenin::OPEN,
        );
        assert!(matches!(r, Err(BiasFault::PinchedOff { .. })), "{r:?}");
        // The gate on nothing.
        let mut c = SubCircuit::new();
        let d = transistor(&mut c);
        c.resistor("r_source", d.e, BOTTOM, Some(1e3));
        c.resistor("r_drain", d.c, TOP, Some(1e3));
        let r = c.solve_coupled(&dev, v_t(), rails(12.0), Thevenin::OPEN, Thevenin::OPEN);
        assert_eq!(r, Err(BiasFault::NoDcPath { terminal: "gate" }));
    }
}
