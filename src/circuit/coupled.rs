//! A stage whose device terminals are coupled at DC: a collector-to-base feedback
//! resistor, or a supply filter that feeds both the divider and the collector
//! resistor ([`SubCircuit::terminals_coupled`]). The Thevenin reduction of `dc.rs`
//! treats each terminal's network as independent, which such a stage is not, so here
//! the stage's nodal network is solved with the transistor in it, by Newton's method.
//!
//! Unknowns: the voltages of the merged nodes that are not held (ground, rails, the
//! outside sources) and have a DC path to a held node. Residual: KCL at each, the
//! currents leaving the node through its resistors, through the outside Thevenin
//! sources and into the device summing to zero. The device is docs/definitions.md's
//! forward-active NPN, u = I_S·e^(V_BE/V_T), I_C = u·(1 + V_CE/V_A), I_B = u/β.
//!
//! The first guess is the linear network with the junction replaced by a V_BE source
//! and the collector by β·I_B (biasing by hand, done on the nodes), V_BE corrected a
//! few times from the current it carries. Each Newton step is scaled so that V_BE
//! rises no more than the large-signal limiter allows
//! (`large_signal::network::limit_junction`) and the Early factor stays positive.
//! Should Newton still fail with a finite V_A (a collector driven far into
//! saturation), the Early effect is switched on in steps. Over 200 000 random
//! feedback, supply-filter and divider stages (decades of every value), a cold start
//! took 3 or 4 steps in 9 cases of 10 and at most 18.

use super::dc::Rails;
use super::{Element, SubCircuit, FIXED, MAX_ELEMENTS, OUTSIDE_IN, OUTSIDE_OUT};
use crate::device::{BiasFault, Device, OperatingPoint, I_CUTOFF, I_MAX, V_BE_TYPICAL};
use crate::large_signal::network::limit_junction;
use crate::network::Thevenin;
use crate::nodal::{self, merge::MAX_NODES, Merge};
use arrayvec::ArrayVec;

/// Most Newton steps before the solve gives up (or, with a finite V_A, falls back to
/// the Early continuation). A cold start takes 3 to 5; a warm start with the junction
/// far forward loses about one step per V_T it must fall.
const MAX_ITERATIONS: usize = 50;
/// Converged when the undamped step moves no node by more than this times the largest
/// held voltage (at least 1 V); the last step is still taken, which leaves an error of
/// about step²/V_T, far below rounding.
const STEP_TOLERANCE: f64 = 1e-12;
/// The residual is at rounding level when every node's KCL sum is below this (about
/// 450 ε) times the size of its terms.
const RESIDUAL_ROUNDING: f64 = 1e-13;
/// Most continuation steps of the Early fallback, and Newton steps in each.
const CONTINUATION_STEPS: usize = 40;
const CONTINUATION_ITERATIONS: usize = 30;
/// Most the Early factor may shrink in one Newton step.
const EARLY_SHRINK: f64 = 8.0;
/// Most passes of the first guess's V_BE correction.
const START_PASSES: usize = 4;
/// The first guess stops correcting V_BE once a correction is below this many V_T
/// (Newton takes it from there).
const START_CLOSE: f64 = 0.01;

/// A coupled stage's DC solution: the device's operating point and every node's voltage.
#[derive(Debug, Clone, PartialEq)]
pub struct CoupledSolution {
    pub op: OperatingPoint,
    /// Voltage of every node of the description (held nodes included); NaN for a node
    /// with no DC path to a held node.
    pub volts: ArrayVec<f64, MAX_NODES>,
}

/// Where a node sits in the nodal system.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Pin {
    /// Unknown number k.
    Unknown(usize),
    /// Held at a known voltage (ground, a rail, an outside source, or wired to one).
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

/// The device's currents at one bias point and their small-signal conductances.
#[derive(Debug, Clone, Copy)]
struct Junction {
    i_b: f64,
    i_c: f64,
    /// ∂I_B/∂V_BE = I_B/V_T.
    g_pi: f64,
    /// ∂I_C/∂V_BE = I_C/V_T.
    g_m: f64,
    /// ∂I_C/∂V_CE = u/V_A.
    g_o: f64,
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

    /// I_C = u·(1 + V_CE/V_A), I_B = u/β, and their partials.
    fn at(&self, v_be: f64, v_ce: f64) -> Junction {
        let u = self.u(v_be);
        let i_c = u * (1.0 + v_ce * self.inv_v_a);
        let i_b = u * self.inv_beta;
        Junction {
            i_b,
            i_c,
            g_pi: i_b * self.inv_v_t,
            g_m: i_c * self.inv_v_t,
            g_o: u * self.inv_v_a,
        }
    }
}

/// The stage's DC nodal network: capacitors open, wires merged, the outside sources
/// as conductances to held nodes (or merged when ideal).
struct Network {
    /// Number of nodes of the description.
    n: usize,
    /// Where every node of the description sits.
    pins: [Pin; MAX_NODES],
    /// Conductances with at least one end unknown: (end a, end b, g).
    edges: ArrayVec<(Pin, Pin, f64), { MAX_ELEMENTS + 2 }>,
    /// Base, collector, emitter.
    device: [Pin; 3],
    /// Number of unknowns.
    m: usize,
    /// A node standing for each unknown (its merged root), to read a warm start.
    node_of: [usize; MAX_NODES],
    /// The largest held voltage, at least 1 V: the scale of the step tolerance.
    v_scale: f64,
}

impl Network {
    fn new(
        c: &SubCircuit,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
    ) -> Result<Network, BiasFault> {
        let Some(d) = c.bjt_nodes() else {
            return Err(BiasFault::NoDcPath { terminal: "base" });
        };
        let n = c.n_nodes();
        let mut merge = Merge::new(n, FIXED);
        for e in c.elements() {
            if let Element::Resistor { a, b, r: 0.0, .. } = *e {
                merge.join(a, b);
            }
        }
        // What the chain hangs on the ports: r = 0 a wire to the handle, r = ∞ nothing.
        let mut outside = ArrayVec::<(usize, usize, f64), 2>::new();
        for (node, handle, th) in [
            (c.input, OUTSIDE_IN, at_input),
            (c.output, OUTSIDE_OUT, at_output),
        ] {
            if th.r == 0.0 {
                merge.join(node, handle);
            } else if th.r.is_finite() {
                outside.push((node, handle, 1.0 / th.r));
            }
        }
        // Held voltages by node number: ground, top, bottom, driver, successors.
        let held = [0.0, rails.top, rails.bottom, at_input.v, at_output.v];
        let resistors = c.elements().iter().filter_map(|e| match *e {
            Element::Resistor { a, b, r, .. } if r > 0.0 => Some((a, b, 1.0 / r)),
            _ => None,
        });
        let mut joins = ArrayVec::<(usize, usize, f64), { MAX_ELEMENTS + 2 }>::new();
        for (a, b, g) in resistors.chain(outside) {
            let (ra, rb) = (merge.root(a), merge.root(b));
            if ra != rb && g > 0.0 {
                joins.push((ra, rb, g));
            }
        }
        // A DC path to a held node: held roots, then whatever a conductance joins to one.
        let mut anchored = [false; MAX_NODES];
        anchored[..FIXED].fill(true);
        loop {
            let mut grew = false;
            for &(a, b, _) in &joins {
                if anchored[a] != anchored[b] {
                    anchored[a] = true;
                    anchored[b] = true;
                    grew = true;
                }
            }
            if !grew {
                break;
            }
        }
        let mut unknown_of = [None; MAX_NODES];
        let mut node_of = [0; MAX_NODES];
        let mut m = 0;
        for x in FIXED..n {
            if merge.root(x) == x && anchored[x] {
                unknown_of[x] = Some(m);
                node_of[m] = x;
                m += 1;
            }
        }
        let mut pins = [Pin::Floating; MAX_NODES];
        for (x, pin) in pins.iter_mut().enumerate().take(n) {
            let r = merge.root(x);
            *pin = if r < FIXED {
                Pin::Held(held[r])
            } else {
                unknown_of[r].map_or(Pin::Floating, Pin::Unknown)
            };
        }
        for (node, terminal) in [(d.b, "base"), (d.e, "emitter"), (d.c, "collector")] {
            if pins[node] == Pin::Floating {
                return Err(BiasFault::NoDcPath { terminal });
            }
        }
        let edges = joins
            .iter()
            .map(|&(a, b, g)| (pins[a], pins[b], g))
            .filter(|(a, b, _)| a.unknown().is_some() || b.unknown().is_some())
            .collect();
        let v_scale = held.iter().fold(1.0_f64, |s, v| s.max(v.abs()));
        Ok(Network {
            n,
            pins,
            edges,
            device: [pins[d.b], pins[d.c], pins[d.e]],
            m,
            node_of,
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

    /// The resistive network: G·V = I_held.
    fn stamp_resistive(&self, a: &mut [f64], s: usize, rhs: &mut [f64]) {
        for &(pa, pb, g) in &self.edges {
            Network::stamp(a, s, rhs, pa, pb, g);
        }
    }

    /// V_BE when held nodes fix it (both terminals held, or merged into one node).
    fn fixed_v_be(&self) -> Option<f64> {
        match (self.device[0], self.device[2]) {
            (Pin::Unknown(i), Pin::Unknown(j)) => (i == j).then_some(0.0),
            (Pin::Held(v_b), Pin::Held(v_e)) => Some(v_b - v_e),
            _ => None,
        }
    }

    /// The first guess, biasing by hand on the nodes: the linear network with the
    /// junction replaced by a V_BE source carrying I_B (one more unknown, and one more
    /// equation, V_B − V_E = V_BE) and the collector by β·I_B plus the Early part
    /// g_o·V_CE, g_o = β·I_B'/V_A from the last pass's I_B'. V_BE is first
    /// V_BE_TYPICAL, then V_T·ln(β·I_B'/I_S), so that source and junction carry the
    /// same current (a few passes; each moves V_BE by a fraction of about V_T/(I_B·R)
    /// of the last move); at a fixed point this is the solution. When held nodes fix
    /// V_BE the network is linear: I_B = u/β and I_C = u + (u/V_A)·V_CE there, one pass.
    /// Falls back to the resistive network alone.
    fn cold_start(&self, law: &Law, x: &mut [f64]) {
        let m = self.m;
        let [b, c, e] = self.device;
        let fixed = self.fixed_v_be();
        let s = if fixed.is_some() { m } else { m + 1 };
        let mut resistive = [0.0; MAX_NODES * MAX_NODES];
        let mut held = [0.0; MAX_NODES];
        self.stamp_resistive(&mut resistive[..s * s], s, &mut held);
        // The held voltages of V_B − V_E, for the right of the source's equation.
        let mut v_be_held = 0.0;
        for (p, sign) in [(b, 1.0), (e, -1.0)] {
            if let Pin::Held(v) = p {
                v_be_held += sign * v;
            }
        }
        let mut v_be = fixed.unwrap_or(V_BE_TYPICAL);
        // u = β·I_B of the last pass (none yet).
        let mut u_last = 0.0;
        let mut solved = false;
        for pass in 0..START_PASSES {
            let mut a = resistive;
            let mut rhs = held;
            // Early part of I_C: a conductance g_o = u/V_A from collector to emitter.
            let u = if fixed.is_some() { law.u(v_be) } else { u_last };
            Network::stamp(&mut a[..s * s], s, &mut rhs, c, e, u * law.inv_v_a);
            // Currents leaving the terminals into the device, per unit of I_B:
            // I_B at the base, β·I_B at the collector, −(β + 1)·I_B at the emitter.
            let share = [(b, 1.0), (c, law.beta), (e, -(law.beta + 1.0))];
            if fixed.is_some() {
                for (p, k) in share {
                    if let Some(r) = p.unknown() {
                        rhs[r] -= k * u * law.inv_beta;
                    }
                }
            } else {
                for (p, k) in share {
                    if let Some(r) = p.unknown() {
                        a[r * s + m] += k;
                    }
                }
                for (p, sign) in [(b, 1.0), (e, -1.0)] {
                    if let Some(k) = p.unknown() {
                        a[m * s + k] += sign;
                    }
                }
                rhs[m] = v_be - v_be_held;
            }
            if nodal::solve_in_place(&mut a[..s * s], s, &mut rhs[..s]).is_none() {
                break;
            }
            x[..m].copy_from_slice(&rhs[..m]);
            solved = true;
            if fixed.is_some() {
                break;
            }
            // u = β·I_B ⇒ V_BE = V_T·ln(β·I_B/I_S), at most where u reaches I_MAX.
            let u = law.beta * rhs[m];
            if u <= 0.0 {
                break;
            }
            u_last = u.min(I_MAX);
            let next = (u_last / law.i_s).ln() / law.inv_v_t;
            let moved = (next - v_be).abs();
            v_be = next;
            // Once the Early part has been in (pass ≥ 1), stop when V_BE settles.
            if pass >= 1 && moved * law.inv_v_t <= START_CLOSE {
                break;
            }
        }
        if solved {
            return;
        }
        // The resistive network alone is regular: every unknown has a DC path to a
        // held node.
        let mut a = [0.0; MAX_NODES * MAX_NODES];
        let mut rhs = [0.0; MAX_NODES];
        self.stamp_resistive(&mut a[..m * m], m, &mut rhs);
        if nodal::solve_in_place(&mut a[..m * m], m, &mut rhs[..m]).is_some() {
            x[..m].copy_from_slice(&rhs[..m]);
        } else {
            x[..m].fill(0.0);
        }
    }

    /// Start from an earlier solution: its voltages at this network's unknowns. False
    /// when it does not fit (other nodes, a node without a value, or a junction so far
    /// forward that its current passes I_MAX).
    fn warm_start(&self, warm: &CoupledSolution, law: &Law, x: &mut [f64]) -> bool {
        if warm.volts.len() != self.n {
            return false;
        }
        for (v, &node) in x[..self.m].iter_mut().zip(&self.node_of) {
            *v = warm.volts[node];
        }
        let [b, _, e] = self.device;
        x[..self.m].iter().all(|v| v.is_finite()) && law.u(b.voltage(x) - e.voltage(x)) <= I_MAX
    }

    /// The Jacobian J and −f, f the KCL residual (current leaving each unknown node),
    /// at `x`; `size` gets the size of each node's terms, for the rounding test.
    fn assemble(&self, law: &Law, x: &[f64], jac: &mut [f64], neg_f: &mut [f64], size: &mut [f64]) {
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
        let [b, c, e] = self.device;
        let (v_b, v_c, v_e) = (b.voltage(x), c.voltage(x), e.voltage(x));
        let j = law.at(v_b - v_e, v_c - v_e);
        // A device current's rounding: its own, and the terminal voltages' rounding
        // magnified by 1/V_T through the exponential.
        let spread = 1.0 + (v_b.abs() + v_e.abs()) * law.inv_v_t;
        // (terminal, current leaving it into the device, its partials by V_B, V_C, V_E),
        // with V_BE = V_B − V_E and V_CE = V_C − V_E.
        let rows = [
            (b, j.i_b, [j.g_pi, 0.0, -j.g_pi]),
            (c, j.i_c, [j.g_m, j.g_o, -j.g_m - j.g_o]),
            (
                e,
                -(j.i_b + j.i_c),
                [-j.g_pi - j.g_m, -j.g_o, j.g_pi + j.g_m + j.g_o],
            ),
        ];
        for (p, i, d) in rows {
            let Some(r) = p.unknown() else { continue };
            neg_f[r] -= i;
            size[r] += i.abs() * spread;
            for (col, q) in [b, c, e].into_iter().enumerate() {
                if let Some(k) = q.unknown() {
                    jac[r * m + k] += d[col];
                }
            }
        }
    }

    /// The share λ ≤ 1 of the Newton step `dx` that keeps V_BE's rise within what the
    /// junction limiter allows, and keeps the Early factor q = 1 + V_CE/V_A, where it is
    /// positive, from shrinking by more than EARLY_SHRINK in one step (the law's
    /// domain: below q = 0 the forward-active collector current changes sign).
    fn damping(&self, law: &Law, x: &[f64], dx: &[f64], v_t: f64) -> f64 {
        let [b, c, e] = self.device;
        let step = |p: Pin| p.unknown().map_or(0.0, |k| dx[k]);
        let v_be = b.voltage(x) - e.voltage(x);
        let d_be = step(b) - step(e);
        let limited = limit_junction(v_be, v_be + d_be, v_t);
        let mut lambda: f64 = 1.0;
        if d_be != 0.0 && limited != v_be + d_be {
            lambda = (limited - v_be) / d_be;
        }
        // q + λ·Δq ≥ q/EARLY_SHRINK with Δq = ΔV_CE/V_A.
        let q = 1.0 + (c.voltage(x) - e.voltage(x)) * law.inv_v_a;
        let d_q = (step(c) - step(e)) * law.inv_v_a;
        let floor = q / EARLY_SHRINK;
        if q > 0.0 && q + d_q < floor {
            lambda = lambda.min((floor - q) / d_q);
        }
        lambda
    }

    /// Newton's method on KCL from `x`; returns the number of steps taken.
    fn newton(
        &self,
        law: &Law,
        v_t: f64,
        x: &mut [f64],
        max_iterations: usize,
    ) -> Result<usize, BiasFault> {
        let m = self.m;
        let tolerance = STEP_TOLERANCE * self.v_scale;
        let mut jac = [0.0; MAX_NODES * MAX_NODES];
        let mut dx = [0.0; MAX_NODES];
        let mut size = [0.0; MAX_NODES];
        let mut largest = f64::INFINITY;
        for iteration in 1..=max_iterations {
            let (jac, dx, size) = (&mut jac[..m * m], &mut dx[..m], &mut size[..m]);
            self.assemble(law, x, jac, dx, size);
            let at_rounding = dx
                .iter()
                .zip(size.iter())
                .all(|(f, s)| f.abs() <= RESIDUAL_ROUNDING * s);
            // J·dx = −f, on the nodal core's elimination.
            if nodal::solve_in_place(jac, m, dx).is_none() {
                return Err(BiasFault::NoConvergence {
                    iterations: iteration,
                    step: f64::INFINITY,
                });
            }
            largest = dx.iter().fold(0.0, |l: f64, d| l.max(d.abs()));
            let lambda = self.damping(law, x, dx, v_t);
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
    /// changes sign): solve without the Early effect, then switch it on in steps,
    /// 1/V_A growing up to fourfold per step from where it changes q by a tenth, each
    /// step warm from the last; a step that fails is retried shorter (the factor's
    /// square root). Along the way the solution keeps q > 0, so each step starts
    /// inside the law's domain. Returns the Newton steps taken in all.
    fn early_continuation(&self, law: &Law, v_t: f64, x: &mut [f64]) -> Option<usize> {
        let m = self.m;
        let mut partial = Law {
            inv_v_a: 0.0,
            ..*law
        };
        self.cold_start(&partial, x);
        let mut total = self
            .newton(&partial, v_t, &mut x[..m], MAX_ITERATIONS)
            .ok()?;
        let [_, c, e] = self.device;
        let v_ce = (c.voltage(x) - e.voltage(x)).abs();
        let mut reached = law.inv_v_a.min(0.1 / v_ce.max(f64::MIN_POSITIVE)) / 4.0;
        let mut factor: f64 = 4.0;
        let mut good = [0.0; MAX_NODES];
        good[..m].copy_from_slice(&x[..m]);
        for _ in 0..CONTINUATION_STEPS {
            partial.inv_v_a = (reached * factor).min(law.inv_v_a);
            match self.newton(&partial, v_t, &mut x[..m], CONTINUATION_ITERATIONS) {
                Ok(n) => {
                    total += n;
                    if partial.inv_v_a == law.inv_v_a {
                        return Some(total);
                    }
                    reached = partial.inv_v_a;
                    good[..m].copy_from_slice(&x[..m]);
                    factor = 4.0;
                }
                Err(_) => {
                    total += CONTINUATION_ITERATIONS;
                    x[..m].copy_from_slice(&good[..m]);
                    factor = factor.sqrt();
                }
            }
        }
        None
    }

    fn operating_point(&self, law: &Law, x: &[f64]) -> OperatingPoint {
        let [b, c, e] = self.device;
        let (v_b, v_c, v_e) = (b.voltage(x), c.voltage(x), e.voltage(x));
        let j = law.at(v_b - v_e, v_c - v_e);
        OperatingPoint {
            i_c: j.i_c,
            i_b: j.i_b,
            i_e: j.i_c + j.i_b,
            v_be: v_b - v_e,
            v_be_junction: v_b - v_e,
            v_ce: v_c - v_e,
            v_b,
            v_c,
            v_e,
        }
    }
}

impl SubCircuit {
    /// DC operating point of the stage's NPN transistor by Newton's method on the stage's
    /// nodal network: capacitors open, wires merged, rails at `rails`, `at_input` hung on the
    /// input node and `at_output` on the output node (Thevenin sources; r = ∞ is nothing,
    /// r = 0 an ideal source), the transistor in forward active:
    /// I_C = I_S·e^(V_BE/V_T)·(1 + V_CE/V_A), I_B = (I_S/β)·e^(V_BE/V_T) (docs/definitions.md).
    ///
    /// Exact for any stage, coupled or not ([`SubCircuit::terminals_coupled`]). The
    /// device is treated as NPN (a PNP stage is solved mirrored, every voltage
    /// negated). `warm` starts from an earlier solution of a stage with the same
    /// nodes; otherwise, or when it does not fit, from the linear network with
    /// V_BE = 0.65 V.
    pub fn solve_coupled(
        &self,
        device: &Device,
        v_t: f64,
        rails: Rails,
        at_input: Thevenin,
        at_output: Thevenin,
        warm: Option<&CoupledSolution>,
    ) -> Result<CoupledSolution, BiasFault> {
        self.solve_coupled_counted(device, v_t, rails, at_input, at_output, warm)
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
        warm: Option<&CoupledSolution>,
    ) -> Result<(CoupledSolution, usize), BiasFault> {
        let net = Network::new(self, rails, at_input, at_output)?;
        let law = Law::new(device, v_t);
        // Held nodes fixing V_BE so far forward that nothing limits the current.
        if net.fixed_v_be().is_some_and(|v_be| law.u(v_be) > I_MAX) {
            return Err(BiasFault::Unlimited);
        }
        let mut x = [0.0; MAX_NODES];
        if !warm.is_some_and(|w| net.warm_start(w, &law, &mut x)) {
            net.cold_start(&law, &mut x);
        }
        let iterations = match net.newton(&law, v_t, &mut x[..net.m], MAX_ITERATIONS) {
            Ok(n) => n,
            Err(fault) if law.inv_v_a > 0.0 => {
                net.early_continuation(&law, v_t, &mut x).ok_or(fault)?
            }
            Err(fault) => return Err(fault),
        };
        let op = net.operating_point(&law, &x);
        if op.i_c > I_MAX || op.i_c.is_nan() {
            return Err(BiasFault::Unlimited);
        }
        if op.i_c < I_CUTOFF {
            return Err(BiasFault::NoForwardBias {
                v_be: op.v_be,
                i_c: op.i_c,
            });
        }
        if op.v_ce < device.vce_sat {
            return Err(BiasFault::Saturated {
                v_ce: op.v_ce,
                i_c: op.i_c,
                vce_sat: device.vce_sat,
            });
        }
        let volts = (0..net.n).map(|node| net.pins[node].voltage(&x)).collect();
        Ok((CoupledSolution { op, volts }, iterations))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::{BjtNodes, BOTTOM, GROUND, TOP};
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
                .solve_coupled_counted(&dev, v_t(), rails(12.0), at_in, at_out, None)
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
                .solve_coupled(
                    &dev,
                    v_t(),
                    rails(v_cc),
                    Thevenin::OPEN,
                    Thevenin::OPEN,
                    None,
                )
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
            .solve_coupled(
                &dev,
                v_t(),
                rails(v_cc),
                Thevenin::OPEN,
                Thevenin::OPEN,
                None,
            )
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
            .solve_coupled(
                &dev,
                v_t(),
                rails(12.0),
                Thevenin::OPEN,
                Thevenin::OPEN,
                None,
            )
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
    fn far_starts_converge_to_the_same_point() {
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
            let solve = |warm| {
                c.solve_coupled_counted(
                    &dev,
                    v_t(),
                    rails(v_cc),
                    Thevenin::OPEN,
                    Thevenin::OPEN,
                    warm,
                )
                .unwrap()
            };
            let (cold, _ci) = solve(None);
            let [i_c, ..] = feedback_by_bisection(&dev, v_cc, r_c, r_f, r_e);
            assert!(close(cold.op.i_c, i_c, 1e-9), "{} vs {i_c}", cold.op.i_c);
            // Warm starts far away: every node at 0 V; the junction far forward
            // (0.95 V, about 100 A); the solution of another design.
            let mut zeros = cold.clone();
            zeros.volts.iter_mut().for_each(|v| *v = 0.0);
            let mut forward = zeros.clone();
            forward.volts[FIXED] = 0.95;
            let other = feedback(470.0, 47e3, 0.0)
                .solve_coupled(
                    &dev,
                    v_t(),
                    rails(5.0),
                    Thevenin::OPEN,
                    Thevenin::OPEN,
                    None,
                )
                .unwrap();
            for warm in [&zeros, &forward, &other] {
                let (s, iterations) = solve(Some(warm));
                assert!(iterations < MAX_ITERATIONS);
                assert!(close(s.op.i_c, cold.op.i_c, 1e-12), "{s:?} vs {cold:?}");
                assert!((s.op.v_ce - cold.op.v_ce).abs() <= 1e-12 * v_cc);
            }
        }
    }

    #[test]
    fn faults_are_named() {
        let dev = npn(200.0, 80.0);
        let solve = |c: &SubCircuit| {
            c.solve_coupled(
                &dev,
                v_t(),
                rails(12.0),
                Thevenin::OPEN,
                Thevenin::OPEN,
                None,
            )
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
        let r = c.solve_coupled(
            &deep,
            v_t(),
            rails(24.0),
            Thevenin::OPEN,
            Thevenin::OPEN,
            None,
        );
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
            None,
        );
        assert_eq!(r, Err(BiasFault::Unlimited));
    }
}
