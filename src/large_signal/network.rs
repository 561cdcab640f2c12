//! The chain's nonlinear network, built once per chain: every stage's base, collector,
//! emitter and emitter tap (between `r_emitter` and `r_emitter_bypassed`), the
//! resistors, the supply, the source EMF behind its resistance, the loads, and every
//! transistor in the Ebers–Moll transport model.
//!
//! Two views of the same network are solved by one Newton iteration:
//! - DC: capacitors open (the EMF at zero): the operating point.
//! - Signal (quasi-static midband): every coupling and bypass capacitor holds the
//!   voltage it has at the operating point, i.e. it is a DC voltage source. The two
//!   ends of a capacitor, like the two ends of a wire, then form one unknown
//!   (node elimination: V(b) = V(a) + offset), and Kirchhoff's current law is written
//!   for the merged group (the source's current cancels in the sum).
//!
//! Each terminal's voltage is `v[slot] + offset`, where `v` holds the fixed voltages
//! (ground, supply, EMF) in slots 0–2 and the unknowns from slot 3 on. The Jacobian is
//! dense (a few unknowns per stage) and solved by LU with partial pivoting in buffers
//! allocated once; a solve allocates nothing.

use crate::chain::Chain;
use crate::device::ebers_moll::{self, Currents};
use crate::device::{Device, OperatingPoint};
use crate::graph::Port;
use crate::network::OutputTerminal;
use crate::stages::StageKind;

/// Slots of the fixed voltages.
const GROUND: usize = 0;
const SUPPLY: usize = 1;
const EMF: usize = 2;
const FIXED: usize = 3;

/// Newton has converged when an undamped step moves no unknown by more than this.
const TOLERANCE_V: f64 = 1e-10;
/// Newton iterations allowed for one solve.
const MAX_ITERATIONS: usize = 100;
/// A junction may rise by this many V_T per Newton step unlimited; larger rises are
/// compressed logarithmically (the exponential would otherwise overflow or overshoot).
const JUNCTION_FREE_STEPS: f64 = 4.0;

/// A terminal of the flat network.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Term {
    Ground,
    Supply,
    /// Top of the source EMF (its bottom is ground).
    Emf,
    /// After the source resistance: the source node of the chain.
    SourceOut,
    Base(usize),
    Collector(usize),
    Emitter(usize),
    /// Between `r_emitter` and `r_emitter_bypassed` (a common-emitter stage).
    Tap(usize),
    Load(usize),
}

/// Which stage terminal a node is, for messages.
impl Term {
    pub fn name(self) -> &'static str {
        match self {
            Term::Ground => "ground",
            Term::Supply => "supply",
            Term::Emf => "source EMF",
            Term::SourceOut => "source node",
            Term::Base(_) => "base",
            Term::Collector(_) => "collector",
            Term::Emitter(_) => "emitter",
            Term::Tap(_) => "emitter tap",
            Term::Load(_) => "load",
        }
    }
}

/// Where a terminal's voltage comes from: `v[slot] + offset`.
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
    /// Row/column of the unknown, if the pin is not fixed.
    #[inline]
    fn unknown(self) -> Option<usize> {
        (self.slot >= FIXED).then(|| self.slot - FIXED)
    }
}

#[derive(Debug, Clone, Copy)]
struct Resistor {
    a: Term,
    b: Term,
    g: f64,
}

#[derive(Debug, Clone, Copy)]
struct Bjt {
    stage: usize,
    device: usize,
}

/// A capacitor: `a` is the driving side (the driver's output node, or the tap).
#[derive(Debug, Clone, Copy)]
struct Capacitor {
    a: Term,
    b: Term,
}

/// Why the network could not be built or solved.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NetworkError {
    #[error("stage \"{stage}\": its {terminal} is wired straight to {other}; expected a resistor between them")]
    Short {
        stage: String,
        terminal: &'static str,
        other: &'static str,
    },
    #[error("the DC operating point of the Ebers–Moll network did not settle after {iterations} Newton steps (largest step at stage \"{stage}\", {terminal}); expected a chain with one operating point")]
    DcNoConvergence {
        iterations: usize,
        stage: String,
        terminal: &'static str,
    },
    #[error("sample {sample} of {samples} (source EMF {emf:.6} V): Newton did not converge at stage \"{stage}\", {terminal}; expected the waveform to be solvable sample by sample")]
    SampleNoConvergence {
        sample: usize,
        samples: usize,
        emf: f64,
        stage: String,
        terminal: &'static str,
    },
    #[error("stage \"{stage}\" is a {kind} stage, which the large-signal network does not model yet; expected common_emitter and emitter_follower stages")]
    Kind { stage: String, kind: &'static str },
    #[error("the network's equations are singular at stage \"{stage}\", {terminal} (a node with no DC path?)")]
    Singular {
        stage: String,
        terminal: &'static str,
    },
}

/// One view (DC or signal) of the network: every element's pins resolved.
#[derive(Debug, Clone)]
struct View {
    /// Pin of every terminal (indexed by `Network::index`).
    pins: Vec<Pin>,
    /// The terminal that names each unknown in messages.
    names: Vec<Term>,
    /// Resistors as (pin a, pin b, conductance).
    resistors: Vec<(Pin, Pin, f64)>,
    /// Transistors as (base, collector, emitter) pins.
    bjts: Vec<[Pin; 3]>,
}

impl View {
    fn unknowns(&self) -> usize {
        self.names.len()
    }
}

/// The chain's nonlinear network, built once per chain.
#[derive(Debug, Clone)]
pub struct Network {
    n_stages: usize,
    n_loads: usize,
    v_cc: f64,
    v_t: f64,
    devices: Vec<Device>,
    stage_ids: Vec<String>,
    resistors: Vec<Resistor>,
    bjts: Vec<Bjt>,
    /// Zero-ohm connections (direct links, absent resistors).
    wires: Vec<(Term, Term)>,
    capacitors: Vec<Capacitor>,
    outputs: Vec<OutputTerminal>,
    dc: View,
    /// Terminal voltages at the operating point (after [`Network::solve_dc`]).
    dc_voltages: Vec<f64>,
    signal: Option<View>,
}

/// Terminal voltages and transistor currents at one solution.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct StageSample {
    pub v_b: f64,
    pub v_c: f64,
    pub v_e: f64,
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
    jac: Vec<f64>,
    rhs: Vec<f64>,
    currents: Vec<Currents>,
}

impl Workspace {
    fn new(n: usize, n_bjts: usize) -> Self {
        Workspace {
            v: vec![0.0; FIXED + n],
            start: vec![0.0; n],
            jac: vec![0.0; n * n],
            rhs: vec![0.0; n],
            currents: vec![
                Currents {
                    i_c: 0.0,
                    i_b: 0.0,
                    dic_dvbe: 0.0,
                    dic_dvbc: 0.0,
                    dib_dvbe: 0.0,
                    dib_dvbc: 0.0,
                };
                n_bjts
            ],
        }
    }
}

impl Network {
    /// Number of terminals: ground, supply, EMF, source node, four per stage, one per load.
    fn terminal_count(n_stages: usize, n_loads: usize) -> usize {
        4 + 4 * n_stages + n_loads
    }

    fn index(&self, t: Term) -> usize {
        match t {
            Term::Ground => 0,
            Term::Supply => 1,
            Term::Emf => 2,
            Term::SourceOut => 3,
            Term::Base(i) => 4 + 4 * i,
            Term::Collector(i) => 5 + 4 * i,
            Term::Emitter(i) => 6 + 4 * i,
            Term::Tap(i) => 7 + 4 * i,
            Term::Load(k) => 4 + 4 * self.n_stages + k,
        }
    }

    fn term(&self, index: usize) -> Term {
        match index {
            0 => Term::Ground,
            1 => Term::Supply,
            2 => Term::Emf,
            3 => Term::SourceOut,
            i if i < 4 + 4 * self.n_stages => {
                let s = (i - 4) / 4;
                match (i - 4) % 4 {
                    0 => Term::Base(s),
                    1 => Term::Collector(s),
                    2 => Term::Emitter(s),
                    _ => Term::Tap(s),
                }
            }
            i => Term::Load(i - 4 - 4 * self.n_stages),
        }
    }

    /// The terminal a link ends on at its driver.
    fn output_term(&self, p: Port) -> Term {
        match p {
            Port::Source => Term::SourceOut,
            Port::Stage(i) => match self.outputs[i] {
                OutputTerminal::Collector => Term::Collector(i),
                OutputTerminal::Emitter => Term::Emitter(i),
            },
            Port::Load(k) => Term::Load(k),
        }
    }

    fn input_term(p: Port) -> Term {
        match p {
            Port::Source => Term::SourceOut,
            Port::Stage(i) => Term::Base(i),
            Port::Load(k) => Term::Load(k),
        }
    }

    /// Build the network of `chain` at thermal voltage `v_t`.
    pub fn build(chain: &Chain, v_t: f64) -> Result<Network, NetworkError> {
        let n_stages = chain.stages.len();
        let mut net = Network {
            n_stages,
            n_loads: chain.loads.len(),
            v_cc: chain.v_cc,
            v_t,
            devices: chain.devices.clone(),
            stage_ids: chain.stages.iter().map(|s| s.id.clone()).collect(),
            resistors: Vec::new(),
            bjts: Vec::new(),
            wires: Vec::new(),
            capacitors: Vec::new(),
            outputs: chain
                .stages
                .iter()
                .map(|s| s.kind.model().output())
                .collect(),
            dc: View {
                pins: Vec::new(),
                names: Vec::new(),
                resistors: Vec::new(),
                bjts: Vec::new(),
            },
            dc_voltages: Vec::new(),
            signal: None,
        };
        // A resistor, or a wire when its value is zero.
        let resistor = |net: &mut Network, a: Term, b: Term, r: f64| {
            if r > 0.0 {
                net.resistors.push(Resistor { a, b, g: 1.0 / r });
            } else {
                net.wires.push((a, b));
            }
        };
        resistor(&mut net, Term::Emf, Term::SourceOut, chain.source.r_s);
        for (i, stage) in chain.stages.iter().enumerate() {
            net.bjts.push(Bjt {
                stage: i,
                device: stage.device,
            });
            let bias = stage.kind.model().bias();
            if let Some(r) = bias.r_top {
                resistor(&mut net, Term::Supply, Term::Base(i), r);
            }
            if let Some(r) = bias.r_bottom {
                resistor(&mut net, Term::Base(i), Term::Ground, r);
            }
            match &stage.kind {
                StageKind::CommonEmitter(ce) => {
                    if let Some(r) = ce.r_collector {
                        resistor(&mut net, Term::Supply, Term::Collector(i), r);
                    }
                    resistor(&mut net, Term::Emitter(i), Term::Tap(i), ce.r_emitter);
                    resistor(&mut net, Term::Tap(i), Term::Ground, ce.r_emitter_bypassed);
                    if ce.c_bypass.is_some() && ce.r_emitter_bypassed > 0.0 {
                        net.capacitors.push(Capacitor {
                            a: Term::Tap(i),
                            b: Term::Ground,
                        });
                    }
                }
                StageKind::EmitterFollower(ef) => {
                    resistor(&mut net, Term::Supply, Term::Collector(i), ef.r_collector);
                    resistor(&mut net, Term::Emitter(i), Term::Ground, ef.r_emitter);
                    // The follower has no tap: tie it to the emitter so no node floats.
                    net.wires.push((Term::Emitter(i), Term::Tap(i)));
                }
                other => {
                    return Err(NetworkError::Kind {
                        stage: stage.id.clone(),
                        kind: other.model().type_name(),
                    })
                }
            }
        }
        for (k, load) in chain.loads.iter().enumerate() {
            resistor(&mut net, Term::Load(k), Term::Ground, load.r_l);
        }
        let topo = &chain.topology;
        for driver in std::iter::once(Port::Source).chain((0..n_stages).map(Port::Stage)) {
            for b in topo.successors(driver) {
                let a = net.output_term(driver);
                let to = Network::input_term(b.to);
                match b.coupling {
                    None => net.wires.push((a, to)),
                    Some(_) => net.capacitors.push(Capacitor { a, b: to }),
                }
            }
        }
        net.dc = net.view(&[])?;
        Ok(net)
    }

    /// Resolve every terminal to a pin, with the capacitors held at `cap_voltages`
    /// (V(a) − V(b) for each capacitor) or open when the slice is empty.
    fn view(&self, cap_voltages: &[f64]) -> Result<View, NetworkError> {
        let n_terms = Network::terminal_count(self.n_stages, self.n_loads);
        // Union–find with potentials: pot[t] = V(t) − V(parent[t]).
        let mut parent: Vec<usize> = (0..n_terms).collect();
        let mut pot = vec![0.0; n_terms];
        fn find(parent: &mut [usize], pot: &mut [f64], t: usize) -> (usize, f64) {
            let mut root = t;
            let mut offset = 0.0;
            while parent[root] != root {
                offset += pot[root];
                root = parent[root];
            }
            (root, offset)
        }
        // Join so that V(b) = V(a) + off.
        let mut join = |a: usize, b: usize, off: f64| {
            let (ra, pa) = find(&mut parent, &mut pot, a);
            let (rb, pb) = find(&mut parent, &mut pot, b);
            if ra != rb {
                parent[rb] = ra;
                pot[rb] = pa + off - pb;
            }
        };
        for &(a, b) in &self.wires {
            join(self.index(a), self.index(b), 0.0);
        }
        for (c, &v_ab) in self.capacitors.iter().zip(cap_voltages) {
            join(self.index(c.a), self.index(c.b), -v_ab);
        }
        // Fixed groups: ground, supply, EMF.
        let mut group_slot: Vec<Option<(usize, f64)>> = vec![None; n_terms];
        for (slot, t) in [
            (GROUND, Term::Ground),
            (SUPPLY, Term::Supply),
            (EMF, Term::Emf),
        ] {
            let (root, p) = find(&mut parent, &mut pot, self.index(t));
            if let Some((other, _)) = group_slot[root] {
                // Ground and the EMF meet only through the source resistance or a
                // capacitor; anything else is a short between fixed voltages.
                let name = |s: usize| ["ground", "the supply", "the source EMF"][s];
                return Err(NetworkError::Short {
                    stage: self.stage_ids.first().cloned().unwrap_or_default(),
                    terminal: name(other),
                    other: name(slot),
                });
            }
            // V(root) = V_slot − p.
            group_slot[root] = Some((slot, -p));
        }
        let mut names = Vec::new();
        let mut pins = Vec::with_capacity(n_terms);
        for t in 0..n_terms {
            let (root, p) = find(&mut parent, &mut pot, t);
            let (slot, root_offset) = match group_slot[root] {
                Some(s) => s,
                None => {
                    let k = names.len();
                    names.push(self.term(root));
                    group_slot[root] = Some((FIXED + k, 0.0));
                    (FIXED + k, 0.0)
                }
            };
            pins.push(Pin {
                slot,
                offset: root_offset + p,
            });
        }
        let pin = |t: Term| pins[self.index(t)];
        let resistors = self
            .resistors
            .iter()
            .map(|r| (pin(r.a), pin(r.b), r.g))
            .collect();
        let bjts = self
            .bjts
            .iter()
            .map(|b| {
                [
                    pin(Term::Base(b.stage)),
                    pin(Term::Collector(b.stage)),
                    pin(Term::Emitter(b.stage)),
                ]
            })
            .collect();
        Ok(View {
            pins,
            names,
            resistors,
            bjts,
        })
    }

    /// A workspace sized for this network's views.
    pub fn workspace(&self) -> Workspace {
        let n = self
            .dc
            .unknowns()
            .max(self.signal.as_ref().map_or(0, View::unknowns));
        Workspace::new(n, self.bjts.len())
    }

    /// Solve the operating point (EMF = 0, capacitors open) by Newton from `guess`
    /// (per stage: the forward-active operating point, or `None` for a cold start at
    /// 0 V), then hold every capacitor at its operating-point voltage for the signal.
    pub fn solve_dc(
        &mut self,
        guess: Option<&[OperatingPoint]>,
        ws: &mut Workspace,
    ) -> Result<(), NetworkError> {
        let n_terms = Network::terminal_count(self.n_stages, self.n_loads);
        let mut estimate = vec![0.0; n_terms];
        if let Some(ops) = guess {
            for (i, op) in ops.iter().enumerate() {
                estimate[self.index(Term::Base(i))] = op.v_b;
                estimate[self.index(Term::Collector(i))] = op.v_c;
                estimate[self.index(Term::Emitter(i))] = op.v_e;
                estimate[self.index(Term::Tap(i))] = op.v_e;
            }
        }
        set_fixed(&mut ws.v, self.v_cc, 0.0);
        let view = &self.dc;
        for (t, p) in view.pins.iter().enumerate() {
            if let Some(k) = p.unknown() {
                ws.v[FIXED + k] = estimate[t] - p.offset;
            }
        }
        if let Err(k) = newton(
            view,
            &self.devices,
            &self.bjts,
            self.v_t,
            ws,
            MAX_ITERATIONS * 4,
        ) {
            let t = view.names.get(k).copied().unwrap_or(Term::SourceOut);
            return Err(if k == usize::MAX {
                NetworkError::Singular {
                    stage: self.stage_of(t),
                    terminal: t.name(),
                }
            } else {
                NetworkError::DcNoConvergence {
                    iterations: MAX_ITERATIONS * 4,
                    stage: self.stage_of(t),
                    terminal: t.name(),
                }
            });
        }
        self.dc_voltages = view.pins.iter().map(|p| p.voltage(&ws.v)).collect();
        let caps: Vec<f64> = self
            .capacitors
            .iter()
            .map(|c| self.dc_voltages[self.index(c.a)] - self.dc_voltages[self.index(c.b)])
            .collect();
        self.signal = Some(self.view(&caps)?);
        *ws = self.workspace();
        Ok(())
    }

    /// Stage id for a terminal in messages.
    fn stage_of(&self, t: Term) -> String {
        match t {
            Term::Base(i) | Term::Collector(i) | Term::Emitter(i) | Term::Tap(i) => {
                self.stage_ids[i].clone()
            }
            Term::Load(k) => format!("load {k}"),
            _ => "source".into(),
        }
    }

    /// The operating point of stage `i` in the Ebers–Moll network.
    pub fn dc_stage(&self, i: usize) -> StageSample {
        let v = |t: Term| self.dc_voltages[self.index(t)];
        let (v_b, v_c, v_e) = (v(Term::Base(i)), v(Term::Collector(i)), v(Term::Emitter(i)));
        let c = ebers_moll::currents(
            &self.devices[self.bjts[i].device],
            self.v_t,
            v_b - v_e,
            v_b - v_c,
        );
        StageSample {
            v_b,
            v_c,
            v_e,
            i_c: c.i_c,
            i_b: c.i_b,
        }
    }

    /// Operating-point voltage of load `k`'s node.
    pub fn dc_load(&self, k: usize) -> f64 {
        self.dc_voltages[self.index(Term::Load(k))]
    }

    /// Start a waveform: the unknowns of the signal view at the operating point.
    pub fn start_signal(&self, ws: &mut Workspace) {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        set_fixed(&mut ws.v, self.v_cc, 0.0);
        for (t, p) in view.pins.iter().enumerate() {
            if let Some(k) = p.unknown() {
                ws.v[FIXED + k] = self.dc_voltages[t] - p.offset;
            }
        }
    }

    /// Solve the signal view at source EMF `emf`, warm-started from the workspace's
    /// last solution. When Newton fails, the EMF step from `previous_emf` is cut into
    /// up to 64 sub-steps before the sample is reported as failed.
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
        ws.start[..n].copy_from_slice(&ws.v[FIXED..FIXED + n]);
        let mut failed = 0;
        for halvings in 0..=6 {
            let steps = 1usize << halvings;
            ws.v[FIXED..FIXED + n].copy_from_slice(&ws.start[..n]);
            let mut ok = true;
            for s in 1..=steps {
                let e = previous_emf + (emf - previous_emf) * s as f64 / steps as f64;
                set_fixed(&mut ws.v, self.v_cc, e);
                if let Err(k) = newton(
                    view,
                    &self.devices,
                    &self.bjts,
                    self.v_t,
                    ws,
                    MAX_ITERATIONS,
                ) {
                    failed = k;
                    ok = false;
                    break;
                }
            }
            if ok {
                return Ok(());
            }
        }
        let t = view.names.get(failed).copied().unwrap_or(Term::SourceOut);
        Err(NetworkError::SampleNoConvergence {
            sample,
            samples,
            emf,
            stage: self.stage_of(t),
            terminal: t.name(),
        })
    }

    /// Stage `i` at the workspace's last signal solution.
    pub fn stage_sample(&self, i: usize, ws: &Workspace) -> StageSample {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        let [b, c, e] = view.bjts[i];
        let (v_b, v_c, v_e) = (b.voltage(&ws.v), c.voltage(&ws.v), e.voltage(&ws.v));
        let cur = &ws.currents[i];
        StageSample {
            v_b,
            v_c,
            v_e,
            i_c: cur.i_c,
            i_b: cur.i_b,
        }
    }

    /// Voltage of load `k` at the workspace's last signal solution.
    pub fn load_voltage(&self, k: usize, ws: &Workspace) -> f64 {
        let view = self
            .signal
            .as_ref()
            .expect("solve_dc builds the signal view");
        view.pins[self.index(Term::Load(k))].voltage(&ws.v)
    }

    /// Unknowns in the signal view (a few per stage).
    pub fn signal_unknowns(&self) -> usize {
        self.signal.as_ref().map_or(0, View::unknowns)
    }
}

fn set_fixed(v: &mut [f64], v_cc: f64, emf: f64) {
    v[GROUND] = 0.0;
    v[SUPPLY] = v_cc;
    v[EMF] = emf;
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

/// Newton on the view's KCL equations from the unknowns in `ws.v`. On failure returns
/// the index of the unknown that moved most in the last step (or `usize::MAX` for a
/// singular matrix).
fn newton(
    view: &View,
    devices: &[Device],
    bjts: &[Bjt],
    v_t: f64,
    ws: &mut Workspace,
    max_iterations: usize,
) -> Result<(), usize> {
    let n = view.unknowns();
    let mut worst = 0;
    for _ in 0..max_iterations {
        assemble(view, devices, bjts, v_t, ws);
        // The nodal core's dense elimination (crate::nodal).
        if crate::nodal::solve_in_place(&mut ws.jac[..n * n], n, &mut ws.rhs[..n]).is_none() {
            return Err(usize::MAX);
        }
        // ws.rhs now holds the Newton step dx (J·dx = −f).
        let mut lambda: f64 = 1.0;
        for [b, c, e] in &view.bjts {
            let step = |p: &Pin| p.unknown().map_or(0.0, |k| ws.rhs[k]);
            let (vb, vc, ve) = (b.voltage(&ws.v), c.voltage(&ws.v), e.voltage(&ws.v));
            let (db, dc, de) = (step(b), step(c), step(e));
            for (old, d) in [(vb - ve, db - de), (vb - vc, db - dc)] {
                let limited = limit_junction(old, old + d, v_t);
                if limited != old + d && d != 0.0 {
                    lambda = lambda.min((limited - old) / d);
                }
            }
        }
        let mut largest: f64 = 0.0;
        for k in 0..n {
            let d = ws.rhs[k];
            if d.abs() > largest {
                largest = d.abs();
                worst = k;
            }
            ws.v[FIXED + k] += lambda * d;
        }
        if !largest.is_finite() {
            return Err(worst);
        }
        if lambda == 1.0 && largest <= TOLERANCE_V {
            // Currents at the final voltages, for the caller.
            for (j, [b, c, e]) in view.bjts.iter().enumerate() {
                let (vb, vc, ve) = (b.voltage(&ws.v), c.voltage(&ws.v), e.voltage(&ws.v));
                ws.currents[j] =
                    ebers_moll::currents(&devices[bjts[j].device], v_t, vb - ve, vb - vc);
            }
            return Ok(());
        }
    }
    Err(worst)
}

/// Fill the Jacobian and the right-hand side −f of KCL (currents leaving each unknown
/// node through its elements sum to zero).
fn assemble(view: &View, devices: &[Device], bjts: &[Bjt], v_t: f64, ws: &mut Workspace) {
    let n = view.unknowns();
    ws.jac[..n * n].iter_mut().for_each(|x| *x = 0.0);
    ws.rhs[..n].iter_mut().for_each(|x| *x = 0.0);
    let v = &ws.v;
    let jac = &mut ws.jac;
    let rhs = &mut ws.rhs;
    for &(a, b, g) in &view.resistors {
        // Current a → b: i = g·(V_a − V_b).
        let i = g * (a.voltage(v) - b.voltage(v));
        if let Some(ka) = a.unknown() {
            rhs[ka] -= i;
            jac[ka * n + ka] += g;
            if let Some(kb) = b.unknown() {
                jac[ka * n + kb] -= g;
            }
        }
        if let Some(kb) = b.unknown() {
            rhs[kb] += i;
            jac[kb * n + kb] += g;
            if let Some(ka) = a.unknown() {
                jac[kb * n + ka] -= g;
            }
        }
    }
    for (j, [b, c, e]) in view.bjts.iter().enumerate() {
        let (vb, vc, ve) = (b.voltage(v), c.voltage(v), e.voltage(v));
        let cur = ebers_moll::currents(&devices[bjts[j].device], v_t, vb - ve, vb - vc);
        ws.currents[j] = cur;
        // Currents leaving the nodes into the device: I_C at the collector, I_B at the
        // base, −(I_C + I_B) at the emitter. Partials by node voltage, with
        // V_BE = V_B − V_E and V_BC = V_B − V_C.
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
        let pins = [*b, *c, *e];
        // (node, current leaving it into the device, its partials by V_B, V_C, V_E)
        let rows = [
            (*b, cur.i_b, d_ib),
            (*c, cur.i_c, d_ic),
            (*e, -(cur.i_c + cur.i_b), d_ie),
        ];
        for (p, i, d) in rows {
            let Some(r) = p.unknown() else { continue };
            rhs[r] -= i;
            for (col, pin) in pins.iter().enumerate() {
                if let Some(k) = pin.unknown() {
                    jac[r * n + k] += d[col];
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
