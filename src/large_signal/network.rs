//! The chain's nonlinear network: the flat netlist of `flat.rs` (every stage's
//! description, the source EMF behind its resistance, the links and the loads) with every
//! transistor in the Ebers–Moll transport model (`device::ebers_moll::currents`, through the device interface). A PNP
//! transistor uses the same law mirrored: with s = −1 the currents into its terminals
//! are s·f(s·V_BE, s·V_BC), f the NPN law (docs/definitions.md "PNP").
//! Every op-amp is its midband source clipped at the pin (`device::opamp::ClippedOutput`,
//! docs/definitions.md "Large signal"), with its auxiliary current as one more unknown.
//!
//! Two views of the same network are solved by one Newton iteration:
//! - DC: capacitors open (the EMF at zero): the operating point.
//! - Signal (quasi-static midband): every capacitor of the netlist (coupling, bypass,
//!   `c_base`, the supply filter's) holds the voltage it has at the operating point,
//!   i.e. it is a DC voltage source. The two ends of a capacitor, like the two ends of a
//!   wire, then form one unknown (node elimination: V(b) = V(a) + offset), and
//!   Kirchhoff's current law is written for the merged group (the source's current
//!   cancels in the sum).
//!
//! Each node's voltage is `v[slot] + offset`, where `v` holds the fixed voltages
//! (ground, one per rail voltage, the EMF) in the first slots and the unknowns after
//! them. The unknowns are numbered by reverse Cuthill–McKee (`nodal::band_ordering`),
//! which along a chain runs stage by stage down the signal path, so each couples only to
//! unknowns a few stages away: the Jacobian is a band matrix whose width does not grow
//! with the chain's length, assembled straight into band storage and solved by band
//! elimination on the nodal core (`nodal::Band`) in buffers allocated once; a solve
//! allocates nothing, and time and memory per Newton step grow linearly with the stages.

use super::flat::{FixedVoltage, Netlist};
use crate::chain::Chain;
use crate::circuit::dc::Rails;
use crate::circuit::SubCircuit;
use crate::device::ebers_moll::Currents;
use crate::device::opamp::ClippedOutput;
use crate::device::DeviceModel;
use crate::device::{Device, OperatingPoint};
use crate::network::Thevenin;
use crate::nodal::{Band, Numbering};

/// Newton has converged when an undamped step moves no unknown by more than this.
const TOLERANCE_V: f64 = 1e-10;
/// … or when two undamped steps in a row stay below the network's rounding floor and
/// the second is not smaller than half the first: the steps have reached the rounding
/// of a high-gain network (rounding of the KCL sums at the input, times the gain,
/// moves the output by more than `TOLERANCE_V`), where Newton no longer converges
/// quadratically. The floor is this, or more for a chain of higher gain
/// ([`rounding_floor`]).
pub const ROUNDING_FLOOR_V: f64 = 1e-8;
/// A node's voltage carries rounding of about f64's ε times the voltages it is summed
/// from (the rails' span); the gain from the source to a node multiplies what that
/// rounding does at the input. The floor allows this many times ε·span·gain, so that
/// the steps stagnate below it (our choice, a factor of 16 above the estimate).
const ROUNDING_GAIN_MARGIN: f64 = 16.0;
/// Largest rounding floor a waveform is solved with: 1 mV of rounding on a node that
/// swings volts is distortion products of 0.1 %, the most a sweep may carry unseen
/// (our choice). A chain of more gain is refused (`LargeSignalError::GainBeyondRounding`).
pub const MAX_ROUNDING_FLOOR_V: f64 = 1e-3;

/// The rounding floor of Newton's steps in a chain of the largest gain `gain` (|v/EMF|
/// over its nodes) across rails `span` volts apart: [`ROUNDING_FLOOR_V`], or
/// `ROUNDING_GAIN_MARGIN`·ε·span·gain when that is larger.
pub fn rounding_floor(gain: f64, span: f64) -> f64 {
    ROUNDING_FLOOR_V.max(ROUNDING_GAIN_MARGIN * f64::EPSILON * span * gain)
}
/// How far beyond the sources' range (and the held capacitors' span) a node may lie
/// and still count as inside the no-gain range (`View::inside`): far above rounding.
const NO_GAIN_MARGIN_V: f64 = 1.0;
/// Newton iterations allowed for one solve.
const MAX_ITERATIONS: usize = 100;
/// A junction may rise by this many V_T per Newton step unlimited; larger rises are
/// compressed logarithmically (the exponential would otherwise overflow or overshoot).
const JUNCTION_FREE_STEPS: f64 = 4.0;
/// gmin stepping (common practice in circuit solving, no source; `gmin_stepping`): the
/// first shunt conductance from every unknown to its last voltage. 1 mS outweighs the
/// junction conductance of a transistor cut off (I_S/V_T, about 1e-13 S) by ten orders
/// of magnitude and is about that of a 1 kΩ resistor.
const G_MIN_START: f64 = 1e-3;
/// … divided by this at each step while the steps converge (by its square root, and
/// so on, after a failed step, back to it after a success) …
const G_MIN_RATIO: f64 = 10.0;
/// … until the ratio falls below this (gmin stepping has failed) …
const G_MIN_RATIO_LEAST: f64 = 1.01;
/// … and from any g_min at or below this the exact network (g_min = 0) is tried: well
/// below the I_S/V_T of any junction (the leakage that holds a cut-off node).
const G_MIN_TRY_EXACT: f64 = 1e-12;
/// Below this g_min the exact network's failure is final.
const G_MIN_LAST: f64 = 1e-30;

/// Where a node's voltage comes from: `v[slot] + offset`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pin {
    pub slot: usize,
    pub offset: f64,
}

impl Pin {
    #[inline]
    fn voltage(self, v: &[f64]) -> f64 {
        v[self.slot] + self.offset
    }
}

/// Why the network could not be built or solved.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NetworkError {
    #[error(transparent)]
    Flat(#[from] super::flat::FlatError),
    #[error("{at} is wired straight to {other} ({via}), which holds another fixed voltage; expected an element between them")]
    Short {
        at: String,
        other: String,
        via: &'static str,
    },
    #[error("the DC operating point of the Ebers–Moll network did not settle after {iterations} Newton steps (largest step at {at}); expected a chain with one operating point")]
    DcNoConvergence { iterations: usize, at: String },
    #[error("sample {sample} of {samples} (source EMF {emf:.4e} V): Newton did not converge at {at}, neither in 64 steps of the EMF from the last sample nor by gmin stepping; expected a level whose waveform can be solved sample by sample (a lower level, or a resistance that limits the current when the drive forces a junction past a rail, such as the source's)")]
    SampleNoConvergence {
        sample: usize,
        samples: usize,
        emf: f64,
        at: String,
    },
    #[error("the network's equations are singular at {at} (a node with no DC path?)")]
    Singular { at: String },
}

/// A transistor in one view: base, collector and emitter pins (its own nodes), its
/// device and polarity sign s (+1 NPN, −1 PNP).
#[derive(Debug, Clone, Copy)]
struct ViewBjt {
    pins: [Pin; 3],
    device: usize,
    s: f64,
    /// Its control law is exponential (a BJT's junctions: Newton's rises limited);
    /// false for a JFET, whose square law needs only a bound on each step.
    exponential: bool,
}

/// An op-amp in one view: its inputs and output pin, the unknown k of its auxiliary
/// current j and its clipped output law (docs/definitions.md "Large signal").
#[derive(Debug, Clone, Copy)]
struct ViewOpamp {
    plus: Pin,
    minus: Pin,
    pin: Pin,
    j: usize,
    law: ClippedOutput,
}

/// Largest change of a JFET's V_GS or V_GD in one Newton step (common practice for
/// piecewise-quadratic laws, no source): keeps a step from jumping across regions.
const JFET_STEP: f64 = 0.5;

/// One view (DC or signal) of the network: every element's pins resolved.
#[derive(Debug, Clone)]
struct View {
    /// Fixed slots come first; unknown k is slot `n_fixed + k`.
    n_fixed: usize,
    /// Pin of every netlist node.
    pins: Vec<Pin>,
    /// The netlist node that names each unknown in messages.
    names: Vec<usize>,
    /// Resistors as (pin a, pin b, conductance).
    resistors: Vec<(Pin, Pin, f64)>,
    bjts: Vec<ViewBjt>,
    opamps: Vec<ViewOpamp>,
    /// The Jacobian's band in the unknowns' numbering, and its storage.
    band: Band,
    /// Σ|V| over the capacitors held as sources (0 in the DC view): how far the
    /// no-gain range of `View::inside` reaches beyond the fixed voltages.
    held_span: f64,
    /// Newton's rounding floor in this view ([`rounding_floor`]).
    rounding_floor: f64,
}

impl View {
    fn unknowns(&self) -> usize {
        self.names.len()
    }
    #[inline]
    fn unknown(&self, p: Pin) -> Option<usize> {
        p.slot.checked_sub(self.n_fixed)
    }

    /// Whether the solution in `v` lies in the no-gain range. A network
    /// of resistors, sources and transistors whose terminal currents flow from the
    /// higher terminals to the lower ones (Ebers–Moll with a positive Early factor
    /// 1 + V_CE/V_A) keeps every node between its lowest and highest source voltage
    /// (the no-gain property, from memory); each held capacitor can carry a node
    /// beyond by at most its own voltage, hence `held_span` on either side, and
    /// `NO_GAIN_MARGIN_V` for rounding. So a root outside the range has a transistor
    /// with V_CE below −V_A, where the linear Early factor turns negative and the
    /// transport current flows against its junctions' drive: a root of the equations,
    /// but outside what the model describes. The cascode's shared node (only
    /// transistors touch it) lands on such roots, kilovolts to megavolts away, when
    /// one Newton step throws it there while its transistors are cut off.
    fn inside(&self, v: &[f64]) -> bool {
        let fixed = &v[..self.n_fixed];
        let reach = self.held_span + NO_GAIN_MARGIN_V;
        let lo = fixed.iter().copied().fold(f64::INFINITY, f64::min) - reach;
        let hi = fixed.iter().copied().fold(f64::NEG_INFINITY, f64::max) + reach;
        // Each unknown's own slot is a node's voltage (its group's root), except an
        // op-amp's auxiliary current, which no voltage range bounds.
        v[self.n_fixed..self.n_fixed + self.unknowns()]
            .iter()
            .enumerate()
            .all(|(k, x)| (lo..=hi).contains(x) || self.opamps.iter().any(|o| o.j == k))
    }
}

/// The chain's nonlinear network, built once per chain.
#[derive(Debug, Clone)]
pub struct Network {
    netlist: Netlist,
    v_t: f64,
    devices: Vec<Device>,
    /// Each stage's description and rails (for the starting point from the planner).
    circuits: Vec<(SubCircuit, Rails)>,
    /// Fixed voltages; the EMF's slot is set per solve.
    fixed: Vec<f64>,
    dc: View,
    /// Node voltages at the operating point (after [`Network::solve_dc`]).
    dc_voltages: Vec<f64>,
    /// Each op-amp's pin current at the operating point.
    dc_pin_currents: Vec<f64>,
    signal: Option<View>,
}

/// A stage's nodes and transistor currents at one solution: terminal voltages (signed),
/// the input and output nodes, V_CE at the terminals and the currents as magnitudes
/// (positive in forward active for either polarity, docs/definitions.md "PNP").
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct StageSample {
    pub v_b: f64,
    pub v_c: f64,
    pub v_e: f64,
    /// The stage's input and output nodes (from its description).
    pub v_in: f64,
    pub v_out: f64,
    /// s·(V_C − V_E) at the terminals.
    pub v_ce: f64,
    pub i_c: f64,
    pub i_b: f64,
}

/// Preallocated buffers for Newton solves (one per thread of work).
#[derive(Debug, Clone)]
pub struct Workspace {
    /// Fixed voltages then unknowns.
    v: Vec<f64>,
    /// Unknowns at the start of a solve (for sub-stepping).
    start: Vec<f64>,
    /// Unknowns at the last converged step of gmin stepping.
    held: Vec<f64>,
    /// A sample's first root outside the no-gain range (fixed voltages, then
    /// unknowns) and its transistors' currents, kept while other attempts run.
    aside: Vec<f64>,
    aside_currents: Vec<Currents>,
    /// The Jacobian in its view's band storage.
    jac: Vec<f64>,
    rhs: Vec<f64>,
    currents: Vec<Currents>,
}

impl Workspace {
    fn new(n_fixed: usize, n: usize, jac: usize, n_bjts: usize) -> Self {
        Workspace {
            v: vec![0.0; n_fixed + n],
            start: vec![0.0; n],
            held: vec![0.0; n],
            aside: vec![0.0; n_fixed + n],
            jac: vec![0.0; jac],
            rhs: vec![0.0; n],
            currents: vec![Currents::default(); n_bjts],
            aside_currents: vec![Currents::default(); n_bjts],
        }
    }
}

impl Network {
    /// Build the network of `chain` at thermal voltage `v_t`.
    pub fn build(chain: &Chain, v_t: f64) -> Result<Network, NetworkError> {
        let netlist = Netlist::build(chain)?;
        let fixed = netlist
            .fixed
            .iter()
            .map(|f| match f {
                FixedVoltage::Volts(v) => *v,
                FixedVoltage::Emf => 0.0,
            })
            .collect();
        let circuits = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, s)| {
                (
                    s.kind.model().circuit(chain.device_of(i)),
                    chain.stage_rails(i),
                )
            })
            .collect();
        let mut net = Network {
            netlist,
            v_t,
            devices: chain.devices.clone(),
            circuits,
            fixed,
            dc: View {
                n_fixed: 0,
                pins: Vec::new(),
                names: Vec::new(),
                resistors: Vec::new(),
                bjts: Vec::new(),
                opamps: Vec::new(),
                band: Band::dense(0),
                held_span: 0.0,
                rounding_floor: ROUNDING_FLOOR_V,
            },
            dc_voltages: Vec::new(),
            dc_pin_currents: Vec::new(),
            signal: None,
        };
        net.dc = net.view(&[])?;
        Ok(net)
    }

    /// Solve with Newton's rounding floor `floor` ([`rounding_floor`]) from now on.
    pub fn set_rounding_floor(&mut self, floor: f64) {
        self.dc.rounding_floor = floor;
        if let Some(v) = self.signal.as_mut() {
            v.rounding_floor = floor;
        }
    }

    /// The flat netlist the network is built on.
    pub fn netlist(&self) -> &Netlist {
        &self.netlist
    }

    /// Netlist node `n` in words, for messages: `stage "gain", collector`.
    fn at(&self, n: usize) -> String {
        self.netlist.node_phrase(n)
    }

    /// Resolve every node to a pin, with the capacitors held at `cap_voltages`
    /// (V(a) − V(b) for each capacitor) or open when the slice is empty.
    fn view(&self, cap_voltages: &[f64]) -> Result<View, NetworkError> {
        let nl = &self.netlist;
        let n_nodes = nl.nodes.len();
        let n_fixed = nl.fixed.len();
        // Union–find with potentials: pot[t] = V(t) − V(parent[t]); `fixed[root]` is
        // the fixed node in the root's group, if any.
        let mut parent: Vec<usize> = (0..n_nodes).collect();
        let mut pot = vec![0.0; n_nodes];
        let mut fixed: Vec<Option<usize>> =
            (0..n_nodes).map(|t| (t < n_fixed).then_some(t)).collect();
        fn find(parent: &[usize], pot: &[f64], t: usize) -> (usize, f64) {
            let mut root = t;
            let mut offset = 0.0;
            while parent[root] != root {
                offset += pot[root];
                root = parent[root];
            }
            (root, offset)
        }
        // Join so that V(b) = V(a) + off. Two fixed groups may meet only through a
        // held capacitor between constant voltages (its held voltage is their
        // difference); anything else is a short between fixed voltages.
        let mut join = |a: usize, b: usize, off: f64, held: bool, via: &'static str| {
            let (ra, pa) = find(&parent, &pot, a);
            let (rb, pb) = find(&parent, &pot, b);
            if ra == rb {
                return Ok(());
            }
            if let (Some(fa), Some(fb)) = (fixed[ra], fixed[rb]) {
                if held && fa != nl.emf && fb != nl.emf {
                    return Ok(());
                }
                return Err(NetworkError::Short {
                    at: self.at(a),
                    other: self.at(b),
                    via,
                });
            }
            parent[rb] = ra;
            pot[rb] = pa + off - pb;
            fixed[ra] = fixed[ra].or(fixed[rb]);
            Ok(())
        };
        for r in nl.resistors.iter().filter(|r| r.r == 0.0) {
            join(r.a, r.b, 0.0, false, r.name)?;
        }
        for (c, &v_ab) in nl.capacitors.iter().zip(cap_voltages) {
            // Open at midband (a low-pass's shunt C): open here too.
            if !c.open_at_midband {
                join(c.a, c.b, -v_ab, true, c.name)?;
            }
        }
        if cap_voltages.is_empty() {
            // At DC, an island of resistors that no fixed node and no transistor
            // reaches (a passive stage between two capacitors) carries no current: its
            // voltage is arbitrary, and it is held at 0 V (node 0 is ground).
            let mut island: Vec<usize> = (0..n_nodes).collect();
            fn top(island: &[usize], mut x: usize) -> usize {
                while island[x] != x {
                    x = island[x];
                }
                x
            }
            let mut tie = |a: usize, b: usize| {
                let (ra, rb) = (top(&island, a), top(&island, b));
                island[ra.max(rb)] = ra.min(rb);
            };
            for r in &nl.resistors {
                tie(r.a, r.b);
            }
            for t in &nl.transistors {
                tie(t.nodes.b, t.nodes.c);
                tie(t.nodes.b, t.nodes.e);
                tie(t.nodes.b, 0);
            }
            // An op-amp's source holds its pin against ground; r_in joins its inputs.
            for o in &nl.opamps {
                tie(o.pin, 0);
                if self.opamp_of(o).r_in.is_finite() {
                    tie(o.plus, o.minus);
                }
            }
            for f in 0..n_fixed {
                tie(f, 0);
            }
            for t in 0..n_nodes {
                if top(&island, t) == t && t != 0 {
                    join(0, t, 0.0, false, "island")?;
                }
            }
        }
        // Fixed groups: V(root) = V_f − p_f, with p_f the fixed node's potential.
        let mut group_slot: Vec<Option<(usize, f64)>> = vec![None; n_nodes];
        for f in 0..n_fixed {
            let (root, p) = find(&parent, &pot, f);
            if fixed[root] == Some(f) {
                group_slot[root] = Some((f, -p));
            }
        }
        let mut names = Vec::new();
        let mut pins = Vec::with_capacity(n_nodes);
        for t in 0..n_nodes {
            let (root, p) = find(&parent, &pot, t);
            let (slot, root_offset) = match group_slot[root] {
                Some(s) => s,
                None => {
                    let k = names.len();
                    names.push(root);
                    group_slot[root] = Some((n_fixed + k, 0.0));
                    (n_fixed + k, 0.0)
                }
            };
            pins.push(Pin {
                slot,
                offset: root_offset + p,
            });
        }
        // Each op-amp's auxiliary current is one more unknown, named by its pin.
        let mut currents: Vec<usize> = Vec::with_capacity(nl.opamps.len());
        for o in &nl.opamps {
            currents.push(names.len());
            names.push(o.pin);
        }
        let (names, band) = number_for_band(nl, n_fixed, &mut pins, &names, &mut currents);
        let mut resistors: Vec<(Pin, Pin, f64)> = nl
            .resistors
            .iter()
            .filter(|r| r.r != 0.0)
            .map(|r| (pins[r.a], pins[r.b], 1.0 / r.r))
            .collect();
        let mut opamps = Vec::with_capacity(nl.opamps.len());
        for (o, &j) in nl.opamps.iter().zip(&currents) {
            let amp = self.opamp_of(o);
            // `input_resistance` between + and − (docs/definitions.md "Op-amp wiring").
            if amp.r_in.is_finite() {
                resistors.push((pins[o.plus], pins[o.minus], 1.0 / amp.r_in));
            }
            let rails = self.circuits[o.stage].1;
            opamps.push(ViewOpamp {
                plus: pins[o.plus],
                minus: pins[o.minus],
                pin: pins[o.pin],
                j,
                law: ClippedOutput::new(&amp, rails.top, rails.bottom),
            });
        }
        let bjts = nl
            .transistors
            .iter()
            .map(|t| ViewBjt {
                pins: [pins[t.nodes.b], pins[t.nodes.c], pins[t.nodes.e]],
                device: t.device,
                s: self.devices[t.device].sign(),
                exponential: self.devices[t.device].jfet.is_none(),
            })
            .collect();
        let view = View {
            n_fixed,
            pins,
            names,
            resistors,
            bjts,
            opamps,
            band,
            held_span: cap_voltages.iter().map(|v| v.abs()).sum(),
            rounding_floor: self.dc.rounding_floor,
        };
        self.check_dc_paths(&view)?;
        Ok(view)
    }

    /// Every unknown must reach a fixed voltage through resistors and transistors, or
    /// its row of the Jacobian is zero; name the first that does not.
    fn check_dc_paths(&self, view: &View) -> Result<(), NetworkError> {
        let n = view.unknowns();
        // Union–find over the unknowns, with one extra element for "fixed".
        let fixed = n;
        let mut parent: Vec<usize> = (0..=n).collect();
        fn root(parent: &[usize], mut x: usize) -> usize {
            while parent[x] != x {
                x = parent[x];
            }
            x
        }
        let slot = |p: &Pin| view.unknown(*p).unwrap_or(fixed);
        let mut link = |a: usize, b: usize| {
            let (ra, rb) = (root(&parent, a), root(&parent, b));
            parent[ra.max(rb)] = ra.min(rb);
        };
        for (a, b, _) in &view.resistors {
            link(slot(a), slot(b));
        }
        for t in &view.bjts {
            link(slot(&t.pins[0]), slot(&t.pins[1]));
            link(slot(&t.pins[0]), slot(&t.pins[2]));
        }
        // The op-amp's source, referenced to ground, fixes its pin and its current.
        for o in &view.opamps {
            link(slot(&o.pin), fixed);
            link(o.j, fixed);
        }
        let grounded = root(&parent, fixed);
        for k in 0..n {
            if root(&parent, k) != grounded {
                return Err(NetworkError::Singular {
                    at: self.at(view.names[k]),
                });
            }
        }
        Ok(())
    }

    /// The op-amp of a netlist op-amp entry.
    fn opamp_of(&self, o: &super::flat::FlatOpamp) -> crate::device::opamp::OpAmp {
        self.devices[o.device]
            .opamp
            .expect("the netlist places an op-amp only for an op-amp device")
    }

    /// A workspace sized for this network's views.
    pub fn workspace(&self) -> Workspace {
        let views = || std::iter::once(&self.dc).chain(&self.signal);
        let n = views().map(View::unknowns).max().unwrap_or(0);
        let jac = views().map(|v| v.band.len()).max().unwrap_or(0);
        Workspace::new(self.fixed.len(), n, jac, self.netlist.transistors.len())
    }

    /// Starting voltages of the netlist's nodes: per stage, every node of its
    /// description at the planner's operating point (`SubCircuit::dc_voltages`);
    /// `None` elsewhere (source and load nodes) and where the description leaves a node
    /// open, so such a node never overwrites the estimate of a stage node it is wired
    /// to (a load direct-coupled to a collector).
    fn estimate(&self, ops: &[OperatingPoint]) -> Vec<Option<f64>> {
        let mut estimate = vec![None; self.netlist.nodes.len()];
        for (i, op) in ops.iter().enumerate() {
            let (c, rails) = &self.circuits[i];
            let Some(t) = self.netlist.stages[i].transistor else {
                continue;
            };
            let device = &self.devices[self.netlist.transistors[t].device];
            let volts = c.dc_voltages(
                *rails,
                Thevenin::OPEN,
                Thevenin::OPEN,
                crate::stages::device_voltages(op, device),
                Some([op.v_b, op.v_c, op.v_e]),
            );
            for (n, flat) in self.netlist.stages[i].nodes.iter().enumerate() {
                if let (Some(flat), Some(&v)) = (flat, volts.get(n)) {
                    if v.is_finite() && *flat >= self.fixed.len() {
                        estimate[*flat] = Some(v);
                    }
                }
            }
        }
        estimate
    }

    /// Solve the operating point (EMF = 0, capacitors open) by Newton from `guess`
    /// (per stage: the planner's operating point, or `None` for a cold start at 0 V),
    /// then hold every capacitor at its operating-point voltage for the signal.
    pub fn solve_dc(
        &mut self,
        guess: Option<&[OperatingPoint]>,
        ws: &mut Workspace,
    ) -> Result<(), NetworkError> {
        let estimate = match guess {
            Some(ops) => self.estimate(ops),
            None => vec![None; self.netlist.nodes.len()],
        };
        self.set_fixed(&mut ws.v, 0.0);
        let view = &self.dc;
        ws.v[view.n_fixed..].iter_mut().for_each(|x| *x = 0.0);
        for (t, p) in view.pins.iter().enumerate() {
            if let (Some(_), Some(v)) = (view.unknown(*p), estimate[t]) {
                ws.v[p.slot] = v - p.offset;
            }
        }
        if let Err(k) = newton(view, &self.devices, self.v_t, ws, MAX_ITERATIONS * 4, 0.0) {
            return Err(match view.names.get(k) {
                // A singular matrix (`usize::MAX`) names no unknown.
                None => NetworkError::Singular {
                    at: "some node".into(),
                },
                Some(&n) => NetworkError::DcNoConvergence {
                    iterations: MAX_ITERATIONS * 4,
                    at: self.at(n),
                },
            });
        }
        self.dc_voltages = view.pins.iter().map(|p| p.voltage(&ws.v)).collect();
        self.dc_pin_currents = view
            .opamps
            .iter()
            .map(|o| o.law.current(ws.v[view.n_fixed + o.j]))
            .collect();
        let caps: Vec<f64> = self
            .netlist
            .capacitors
            .iter()
            .map(|c| self.dc_voltages[c.a] - self.dc_voltages[c.b])
            .collect();
        self.signal = Some(self.view(&caps)?);
        *ws = self.workspace();
        Ok(())
    }

    /// Stage `i` from node voltages `volts` and its transistor's currents `cur` (in
    /// the transistor's own frame), or its op-amp's pin current `i_pin`.
    fn sample_of(
        &self,
        i: usize,
        volt: impl Fn(usize) -> f64,
        cur: Option<&Currents>,
        i_pin: f64,
    ) -> StageSample {
        let st = &self.netlist.stages[i];
        let (mut v_b, mut v_c, mut v_e, mut s) = (0.0, 0.0, 0.0, 1.0);
        if let Some(j) = st.transistor {
            let t = &self.netlist.transistors[j];
            (v_b, v_c, v_e) = (
                volt(t.terminals.b),
                volt(t.terminals.c),
                volt(t.terminals.e),
            );
            s = self.devices[t.device].sign();
        }
        StageSample {
            v_b,
            v_c,
            v_e,
            v_in: volt(st.input),
            v_out: volt(st.output),
            v_ce: s * (v_c - v_e),
            i_c: cur.map_or(i_pin, |c| c.i_c),
            i_b: cur.map_or(0.0, |c| c.i_b),
        }
    }

    /// The operating point of stage `i` in the Ebers–Moll network.
    pub fn dc_stage(&self, i: usize) -> StageSample {
        let v = |n: usize| self.dc_voltages[n];
        let cur = self.netlist.stages[i].transistor.map(|j| {
            let t = &self.netlist.transistors[j];
            let s = self.devices[t.device].sign();
            let (vb, vc, ve) = (v(t.nodes.b), v(t.nodes.c), v(t.nodes.e));
            self.devices[t.device].large_signal(self.v_t, s * (vb - ve), s * (vb - vc))
        });
        let i_pin = self.netlist.stages[i]
            .opamp
            .map_or(0.0, |o| self.dc_pin_currents[o]);
        self.sample_of(i, v, cur.as_ref(), i_pin)
    }

    /// Operating-point voltage of load `k`'s node.
    pub fn dc_load(&self, k: usize) -> f64 {
        self.dc_voltages[self.netlist.loads[k]]
    }

    /// Start a waveform: the unknowns of the signal view at the operating point.
    pub fn start_signal(&self, ws: &mut Workspace) {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        self.set_fixed(&mut ws.v, 0.0);
        for (t, p) in view.pins.iter().enumerate() {
            if view.unknown(*p).is_some() {
                ws.v[p.slot] = self.dc_voltages[t] - p.offset;
            }
        }
        // An op-amp inside its limits at rest: its auxiliary current is its pin current.
        for (o, &i) in view.opamps.iter().zip(&self.dc_pin_currents) {
            ws.v[view.n_fixed + o.j] = i;
        }
    }

    /// Solve the signal view at source EMF `emf`, warm-started from the workspace's
    /// last solution. When Newton fails, the EMF step from `previous_emf` is cut into
    /// up to 64 sub-steps (source stepping); when that fails too, gmin stepping from
    /// the last solution ([`gmin_stepping`]) before the sample is reported as failed.
    /// A root outside the no-gain range (`View::inside`) counts as a failure while
    /// another attempt remains; if none finds a root inside, the first root found is
    /// the answer (as it was before the range was checked). Either way the answer is
    /// Newton's on the exact network.
    pub fn solve_sample(
        &self,
        emf: f64,
        previous_emf: f64,
        sample: usize,
        samples: usize,
        ws: &mut Workspace,
    ) -> Result<(), NetworkError> {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        let n = view.unknowns();
        let first = view.n_fixed;
        ws.start[..n].copy_from_slice(&ws.v[first..first + n]);
        let mut aside = false;
        // True when `ws` holds a root that ends the search; the first root outside
        // the no-gain range is kept aside.
        let mut accept = |ws: &mut Workspace| {
            if view.inside(&ws.v) {
                return true;
            }
            if !aside {
                ws.aside[..first + n].copy_from_slice(&ws.v[..first + n]);
                ws.aside_currents.clone_from(&ws.currents);
                aside = true;
            }
            false
        };
        let mut failed = usize::MAX;
        for halvings in 0..=6 {
            let steps = 1usize << halvings;
            ws.v[first..first + n].copy_from_slice(&ws.start[..n]);
            let mut ok = true;
            for s in 1..=steps {
                let e = previous_emf + (emf - previous_emf) * s as f64 / steps as f64;
                self.set_fixed(&mut ws.v, e);
                if let Err(k) = newton(view, &self.devices, self.v_t, ws, MAX_ITERATIONS, 0.0) {
                    failed = k;
                    ok = false;
                    break;
                }
            }
            if ok && accept(ws) {
                return Ok(());
            }
        }
        ws.v[first..first + n].copy_from_slice(&ws.start[..n]);
        self.set_fixed(&mut ws.v, emf);
        match gmin_stepping(view, &self.devices, self.v_t, ws) {
            Ok(()) if accept(ws) => return Ok(()),
            Ok(()) => {}
            Err(k) => failed = k,
        }
        if aside {
            ws.v[..first + n].copy_from_slice(&ws.aside[..first + n]);
            ws.currents.clone_from(&ws.aside_currents);
            return Ok(());
        }
        let at = view
            .names
            .get(failed)
            .map_or_else(|| "some node (singular equations)".into(), |&n| self.at(n));
        Err(NetworkError::SampleNoConvergence {
            sample,
            samples,
            emf,
            at,
        })
    }

    /// Stage `i` at the workspace's last signal solution.
    pub fn stage_sample(&self, i: usize, ws: &Workspace) -> StageSample {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        let st = &self.netlist.stages[i];
        let cur = st.transistor.map(|j| &ws.currents[j]);
        // An op-amp's delivered current: its auxiliary current clamped.
        let i_pin = st.opamp.map_or(0.0, |o| {
            let o = &view.opamps[o];
            o.law.current(ws.v[view.n_fixed + o.j])
        });
        self.sample_of(i, |n| view.pins[n].voltage(&ws.v), cur, i_pin)
    }

    /// Voltage of load `k` at the workspace's last signal solution.
    pub fn load_voltage(&self, k: usize, ws: &Workspace) -> f64 {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        view.pins[self.netlist.loads[k]].voltage(&ws.v)
    }

    /// Unknowns in the signal view (a few per stage).
    pub fn signal_unknowns(&self) -> usize {
        self.signal.as_ref().map_or(0, View::unknowns)
    }

    /// The fixed voltages, with the source EMF at `emf`.
    fn set_fixed(&self, v: &mut [f64], emf: f64) {
        v[..self.fixed.len()].copy_from_slice(&self.fixed);
        v[self.netlist.emf] = emf;
    }
}

/// Renumber the unknowns of `pins` (slots from `n_fixed` on, first named by the
/// netlist nodes `names`) in reverse Cuthill–McKee order over the Jacobian's pattern
/// (a resistor couples its two ends, a transistor its three nodes), and return the
/// names in the new numbering and the Jacobian's band. `currents` are the op-amps'
/// auxiliary unknowns (an op-amp couples its inputs, pin and current), renumbered too.
fn number_for_band(
    nl: &Netlist,
    n_fixed: usize,
    pins: &mut [Pin],
    names: &[usize],
    currents: &mut [usize],
) -> (Vec<usize>, Band) {
    let unknown = |node: usize| pins[node].slot.checked_sub(n_fixed);
    let mut edges = Vec::new();
    for r in nl.resistors.iter().filter(|r| r.r != 0.0) {
        if let (Some(a), Some(b)) = (unknown(r.a), unknown(r.b)) {
            edges.push((a, b));
        }
    }
    for t in &nl.transistors {
        let [b, c, e] = [t.nodes.b, t.nodes.c, t.nodes.e].map(unknown);
        for pair in [(b, c), (b, e), (c, e)] {
            if let (Some(p), Some(q)) = pair {
                edges.push((p, q));
            }
        }
    }
    for (o, &j) in nl.opamps.iter().zip(currents.iter()) {
        let ends = [o.plus, o.minus, o.pin].map(unknown);
        let ends = [ends[0], ends[1], ends[2], Some(j)];
        for (x, p) in ends.iter().enumerate() {
            for q in &ends[x + 1..] {
                if let (Some(p), Some(q)) = (p, q) {
                    edges.push((*p, *q));
                }
            }
        }
    }
    let Numbering {
        order,
        number,
        band,
    } = Numbering::of(names.len(), &edges);
    for j in currents.iter_mut() {
        *j = number[*j];
    }
    for p in pins.iter_mut() {
        if let Some(k) = p.slot.checked_sub(n_fixed) {
            p.slot = n_fixed + number[k];
        }
    }
    (order.iter().map(|&old| names[old]).collect(), band)
}

/// A junction's new voltage with large rises compressed: up to `JUNCTION_FREE_STEPS`·V_T
/// a rise is taken as it is, beyond that only logarithmically, so one Newton step
/// never multiplies a junction current by more than about e^4 times the ratio of the
/// steps (the usual cure for the exponential's overshoot; from memory).
pub(crate) fn limit_junction(v_old: f64, v_new: f64, v_t: f64) -> f64 {
    let free = JUNCTION_FREE_STEPS * v_t;
    let rise = v_new - v_old;
    // Below about 0.3 V a junction carries nothing that could overflow.
    if rise <= free || v_new < 0.3 {
        return v_new;
    }
    let from = v_old.max(0.3);
    let rise = v_new - from;
    if rise <= free {
        return v_new;
    }
    from + free * (1.0 + (rise / free).ln())
}

/// gmin stepping from the unknowns in `ws.v`: Newton with a conductance g_min from
/// every unknown to its voltage at the last solution (`ws.start`), g_min stepped down
/// from `G_MIN_START`, each solve warm from the last, and finally with g_min = 0: the
/// exact network, whose answer is left in `ws` to Newton's tolerance.
///
/// Why: a node that only transistors touch (a cascode's shared collector and emitter)
/// carries nothing but junction leakage when they are cut off, so its row of the
/// Jacobian is of order I_S/V_T (1e-13 S) and Newton's linear step may throw it volts
/// away. With g_min the row is at least g_min; at 1 mS the solution stays within
/// about (KCL residual)/g_min of the last one, and it moves continuously as g_min falls
/// (each node's KCL changes by g_min·(V − V_last)). The shunt goes to the last solution
/// rather than to ground (the textbook choice) so that the large-g_min end is the last
/// sample, with every transistor in the region it was in, not every node near 0 V.
/// A failed step is retried with the square root of the ratio.
fn gmin_stepping(
    view: &View,
    devices: &[Device],
    v_t: f64,
    ws: &mut Workspace,
) -> Result<(), usize> {
    let n = view.unknowns();
    let first = view.n_fixed;
    newton(view, devices, v_t, ws, MAX_ITERATIONS, G_MIN_START)?;
    let (mut g, mut ratio) = (G_MIN_START, G_MIN_RATIO);
    loop {
        // ws.v holds the solution at g.
        ws.held[..n].copy_from_slice(&ws.v[first..first + n]);
        if g <= G_MIN_TRY_EXACT {
            let exact = newton(view, devices, v_t, ws, MAX_ITERATIONS, 0.0);
            if exact.is_ok() || g < G_MIN_LAST {
                return exact;
            }
            ws.v[first..first + n].copy_from_slice(&ws.held[..n]);
        }
        loop {
            let next = g / ratio;
            match newton(view, devices, v_t, ws, MAX_ITERATIONS, next) {
                Ok(()) => {
                    (g, ratio) = (next, G_MIN_RATIO);
                    break;
                }
                Err(k) => {
                    ws.v[first..first + n].copy_from_slice(&ws.held[..n]);
                    ratio = ratio.sqrt();
                    if ratio < G_MIN_RATIO_LEAST {
                        return Err(k);
                    }
                }
            }
        }
    }
}

/// Newton on the view's KCL equations from the unknowns in `ws.v`, with a shunt
/// conductance `g_min` from every unknown to ground (0: the network as it is). On
/// failure returns the index of the unknown that moved most in the last step (or
/// `usize::MAX` for a singular matrix).
fn newton(
    view: &View,
    devices: &[Device],
    v_t: f64,
    ws: &mut Workspace,
    max_iterations: usize,
    g_min: f64,
) -> Result<(), usize> {
    let n = view.unknowns();
    let first = view.n_fixed;
    let mut worst = 0;
    // The last undamped step (∞ when the last step was damped).
    let mut previous = f64::INFINITY;
    for _ in 0..max_iterations {
        assemble(view, devices, v_t, ws, g_min);
        // The nodal core's band elimination (crate::nodal::Band).
        let jac = &mut ws.jac[..view.band.len()];
        if view.band.solve_in_place(jac, &mut ws.rhs[..n]).is_none() {
            return Err(usize::MAX);
        }
        // ws.rhs now holds the Newton step dx (J·dx = −f).
        let mut lambda: f64 = 1.0;
        for t in &view.bjts {
            let [b, c, e] = t.pins;
            let step = |p: Pin| view.unknown(p).map_or(0.0, |k| ws.rhs[k]);
            let (vb, vc, ve) = (b.voltage(&ws.v), c.voltage(&ws.v), e.voltage(&ws.v));
            let (db, dc, de) = (step(b), step(c), step(e));
            // Junction voltages in the transistor's own frame (s·V for a PNP).
            let s = t.s;
            for (old, d) in [
                (s * (vb - ve), s * (db - de)),
                (s * (vb - vc), s * (db - dc)),
            ] {
                let limited = if t.exponential {
                    limit_junction(old, old + d, v_t)
                } else {
                    old + d.clamp(-JFET_STEP, JFET_STEP)
                };
                if limited != old + d && d != 0.0 {
                    lambda = lambda.min((limited - old) / d);
                }
            }
        }
        for o in &view.opamps {
            let step = |p: Pin| view.unknown(p).map_or(0.0, |k| ws.rhs[k]);
            let j = ws.v[first + o.j];
            let old = o
                .law
                .wanted(o.plus.voltage(&ws.v) - o.minus.voltage(&ws.v), j);
            let d = o.law.a_0 * (step(o.plus) - step(o.minus)) - o.law.r_out * ws.rhs[o.j];
            if let Some(to) = o.law.leave_clip(old, old + d) {
                lambda = lambda.min((to - old) / d);
            }
            let dj = ws.rhs[o.j];
            if let Some(to) = o.law.leave_limit(j, j + dj) {
                lambda = lambda.min((to - j) / dj);
            }
        }
        let mut largest: f64 = 0.0;
        for k in 0..n {
            let d = ws.rhs[k];
            if d.abs() > largest {
                largest = d.abs();
                worst = k;
            }
            ws.v[first + k] += lambda * d;
        }
        if !largest.is_finite() {
            return Err(worst);
        }
        let at_floor = largest <= view.rounding_floor
            && previous <= view.rounding_floor
            && largest >= 0.5 * previous;
        if lambda == 1.0 && (largest <= TOLERANCE_V || at_floor) {
            // Currents at the final voltages, for the caller.
            for (j, t) in view.bjts.iter().enumerate() {
                let [b, c, e] = t.pins;
                let (vb, vc, ve) = (b.voltage(&ws.v), c.voltage(&ws.v), e.voltage(&ws.v));
                ws.currents[j] =
                    devices[t.device].large_signal(v_t, t.s * (vb - ve), t.s * (vb - vc));
            }
            return Ok(());
        }
        previous = if lambda == 1.0 {
            largest
        } else {
            f64::INFINITY
        };
    }
    Err(worst)
}

/// Fill the Jacobian and the right-hand side −f of KCL (currents leaving each unknown
/// node through its elements sum to zero), with `g_min` from each unknown (its group's
/// root node, `v[slot]`) to ground.
fn assemble(view: &View, devices: &[Device], v_t: f64, ws: &mut Workspace, g_min: f64) {
    let n = view.unknowns();
    let band = view.band;
    let jac = &mut ws.jac[..band.len()];
    jac.iter_mut().for_each(|x| *x = 0.0);
    ws.rhs[..n].iter_mut().for_each(|x| *x = 0.0);
    let v = &ws.v;
    let rhs = &mut ws.rhs;
    if g_min > 0.0 {
        for k in 0..n {
            rhs[k] -= g_min * (v[view.n_fixed + k] - ws.start[k]);
            jac[band.at(k, k)] += g_min;
        }
    }
    for &(a, b, g) in &view.resistors {
        // Current a → b: i = g·(V_a − V_b).
        let i = g * (a.voltage(v) - b.voltage(v));
        let (ka, kb) = (view.unknown(a), view.unknown(b));
        if let Some(ka) = ka {
            rhs[ka] -= i;
        }
        if let Some(kb) = kb {
            rhs[kb] += i;
        }
        band.stamp_between(jac, ka, kb, g);
    }
    for (j, t) in view.bjts.iter().enumerate() {
        let [b, c, e] = t.pins;
        let s = t.s;
        let (vb, vc, ve) = (b.voltage(v), c.voltage(v), e.voltage(v));
        // The NPN law in the transistor's own frame: f(s·V_BE, s·V_BC).
        let cur = devices[t.device].large_signal(v_t, s * (vb - ve), s * (vb - vc));
        ws.currents[j] = cur;
        // Currents leaving the nodes into the device: s·I_C at the collector, s·I_B at
        // the base, −s·(I_C + I_B) at the emitter. Their partials by the node voltages
        // are s·(∂f/∂(s·V))·s = ∂f/∂V (s² = 1), with V_BE = V_B − V_E, V_BC = V_B − V_C.
        let d_ic = [
            cur.dic_dvbe + cur.dic_dvbc, // ∂/∂V_B
            -cur.dic_dvbc,               // ∂/∂V_C
            -cur.dic_dvbe,               // ∂/∂V_E
        ];
        let d_ib = [cur.dib_dvbe + cur.dib_dvbc, -cur.dib_dvbc, -cur.dib_dvbe];
        let d_ie = [
            -(d_ic[0] + d_ib[0]),
            -(d_ic[1] + d_ib[1]),
            -(d_ic[2] + d_ib[2]),
        ];
        // (node, current leaving it into the device, its partials by V_B, V_C, V_E)
        let rows = [
            (b, s * cur.i_b, d_ib),
            (c, s * cur.i_c, d_ic),
            (e, -s * (cur.i_c + cur.i_b), d_ie),
        ];
        for (p, i, d) in rows {
            let Some(r) = view.unknown(p) else { continue };
            rhs[r] -= i;
            for (col, pin) in t.pins.iter().enumerate() {
                if let Some(k) = view.unknown(*pin) {
                    jac[band.at(r, k)] += d[col];
                }
            }
        }
    }
    for o in &view.opamps {
        let j = o.j;
        let out = o
            .law
            .at(o.plus.voltage(v) - o.minus.voltage(v), v[view.n_fixed + j]);
        // KCL at the pin: the delivered current i enters it (leaves it as −i).
        if let Some(r) = view.unknown(o.pin) {
            rhs[r] += out.i;
            jac[band.at(r, j)] -= out.di_dj;
        }
        // The branch: E = v_pin − v(v₊ − v₋, j) = 0.
        rhs[j] -= o.pin.voltage(v) - out.v;
        if let Some(k) = view.unknown(o.pin) {
            jac[band.at(j, k)] += 1.0;
        }
        if let Some(k) = view.unknown(o.plus) {
            jac[band.at(j, k)] -= out.dv_dvd;
        }
        if let Some(k) = view.unknown(o.minus) {
            jac[band.at(j, k)] += out.dv_dvd;
        }
        jac[band.at(j, j)] -= out.dv_dj;
    }
}

#[cfg(test)]
#[path = "../../benches/common/mod.rs"]
mod chains;

#[cfg(test)]
mod tests {
    use super::*;

    /// The network of `chain` at its operating point, the signal view, a workspace at
    /// the operating point and the planner's first clip level (peak EMF).
    fn at_rest(chain: &Chain) -> (Network, View, Workspace, f64) {
        let ev = chain.evaluate().unwrap();
        let mut net = Network::build(chain, ev.v_t).unwrap();
        let mut ws = net.workspace();
        let guess: Vec<_> = ev.dc.iter().map(|d| d.op).collect();
        net.solve_dc(Some(&guess), &mut ws).unwrap();
        net.start_signal(&mut ws);
        let view = net.signal.clone().unwrap();
        (net, view, ws, ev.headroom[ev.first_clip].clip_input_vpeak)
    }

    #[test]
    fn a_long_chains_band_is_narrow_and_its_steps_equal_dense_lu() {
        // 200 emitter followers (chains/boost-pedal.json's buffer repeated), and the
        // whole four-stage demo repeated to 16 stages (84 dB: longer ones outrun f64).
        // The band is that of the chain half or a tenth as long: it does not grow with
        // the length. At every sample of a period driven to 3 times the clip level,
        // the Newton system as assembled in band storage, copied into a dense matrix,
        // is solved by dense LU with partial pivoting (`nodal::solve_in_place`); the
        // band solve gives the same step, exact up to rounding (1e-9 relative to the
        // largest step).
        let demo = ["buffer", "gain1", "gain2", "output"];
        for (ids, long, short) in [(&demo[..1], 200, 20), (&demo[..], 16, 8)] {
            let chain = |n| Chain::from_json_str(&chains::repeated_stages(n, ids)).unwrap();
            let (net, view, mut ws, clip) = at_rest(&chain(long));
            let (_, short_view, _, _) = at_rest(&chain(short));
            let (n, band) = (view.unknowns(), view.band);
            assert!(n > long, "{n} unknowns");
            assert_eq!(
                (band.lower(), band.upper()),
                (short_view.band.lower(), short_view.band.upper())
            );
            // Band storage, not n².
            assert!(band.len() < n * n, "{} entries, {n} unknowns", band.len());
            let samples = 32;
            let mut previous = 0.0;
            let mut dense = vec![0.0; n * n];
            for k in 1..samples {
                let e = 3.0 * clip * (std::f64::consts::TAU * k as f64 / samples as f64).sin();
                net.set_fixed(&mut ws.v, e);
                assemble(&view, &net.devices, net.v_t, &mut ws, 0.0);
                dense.iter_mut().for_each(|x| *x = 0.0);
                for i in 0..n {
                    for j in i.saturating_sub(band.lower())..=(i + band.upper()).min(n - 1) {
                        dense[i * n + j] = ws.jac[band.at(i, j)];
                    }
                }
                let mut step = ws.rhs[..n].to_vec();
                crate::nodal::solve_in_place(&mut dense, n, &mut step).unwrap();
                band.solve_in_place(&mut ws.jac[..band.len()], &mut ws.rhs[..n])
                    .unwrap();
                let scale = step.iter().fold(0.0f64, |m, x| m.max(x.abs()));
                for (i, (a, b)) in step.iter().zip(&ws.rhs[..n]).enumerate() {
                    assert!(
                        (a - b).abs() <= 1e-9 * scale,
                        "{long} stages, sample {k}, unknown {i}: {a} vs {b}"
                    );
                }
                net.solve_sample(e, previous, k, samples, &mut ws).unwrap();
                previous = e;
            }
            println!(
                "{long} stages: {n} unknowns, kl {}, {} entries stored",
                band.lower(),
                band.len()
            );
        }
    }

    #[test]
    fn gmin_stepping_reaches_the_exact_networks_answer() {
        // chains/cascode-input.json at 30 times the planner's clip level, where the lower
        // transistor cuts off and the node it shares with the upper one carries only
        // leakage: every sample solved by gmin stepping alone from the last sample equals
        // `solve_sample`'s answer on the exact network. Both stop when a Newton step on
        // the exact network moves nothing by more than 1e-10 V (1e-8 V at the rounding
        // floor), so they agree within 1e-8 V (one root; exact law: KCL solved twice).
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/chains/cascode-input.json");
        let chain = crate::io::read_chain(path).unwrap();
        let ev = chain.evaluate().unwrap();
        let mut net = Network::build(&chain, ev.v_t).unwrap();
        let mut ws = net.workspace();
        let guess: Vec<_> = ev.dc.iter().map(|d| d.op).collect();
        net.solve_dc(Some(&guess), &mut ws).unwrap();
        net.start_signal(&mut ws);
        let view = net.signal.clone().unwrap();
        let (first, n) = (view.n_fixed, view.unknowns());
        let e_pk = 30.0 * ev.headroom[ev.first_clip].clip_input_vpeak;
        let samples = 64;
        let (mut previous, mut worst, mut cut) = (0.0, 0.0f64, 0);
        for k in 1..samples {
            let e = e_pk * (std::f64::consts::TAU * k as f64 / samples as f64).sin();
            let mut alone = ws.clone();
            alone.start[..n].copy_from_slice(&alone.v[first..first + n]);
            net.set_fixed(&mut alone.v, e);
            gmin_stepping(&view, &net.devices, net.v_t, &mut alone)
                .unwrap_or_else(|at| panic!("sample {k}: gmin stepping failed at {at}"));
            net.solve_sample(e, previous, k, samples, &mut ws).unwrap();
            previous = e;
            for i in 0..n {
                worst = worst.max((alone.v[first + i] - ws.v[first + i]).abs());
            }
            cut += usize::from(net.stage_sample(0, &ws).i_c < 1e-6);
        }
        println!("{cut} of {samples} samples cut off, largest difference {worst:.1e} V");
        assert!(worst <= 1e-8, "{worst:e} V");
        assert!(
            cut > samples / 8,
            "the lower transistor cut off in {cut} samples"
        );
    }

    #[test]
    fn limiter_compresses_only_large_rises() {
        let v_t = 0.025;
        assert_eq!(limit_junction(0.6, 0.65, v_t), 0.65);
        assert_eq!(limit_junction(0.6, 0.2, v_t), 0.2);
        // A 1.4 V rise is cut to a rise of 4·V_T·(1 + ln(1.4/(4·V_T))) ≈ 0.36 V.
        let l = limit_junction(0.6, 2.0, v_t);
        assert!(l > 0.6 + 4.0 * v_t && l < 0.6 + 16.0 * v_t, "{l}");
        // Continuous where the compression starts, and monotone above it.
        let edge = 0.6 + 4.0 * v_t;
        assert!((limit_junction(0.6, edge + 1e-9, v_t) - edge).abs() < 1e-8);
        assert!(limit_junction(0.6, 3.0, v_t) > l);
    }
}
