//! DC pass: the operating point of every stage, in signal order.
//!
//! Capacitors block DC, so the chain falls into DC groups: stages joined by direct
//! links (`Topology::dc_groups`). A group of one stage is solved on its own DC
//! networks: the Thevenin equivalent on each transistor terminal
//! (`circuit::dc`), or, when its terminals are coupled (collector feedback, a supply
//! filter), its nodal network by Newton's method (`circuit::coupled`). A group of
//! several stages is solved as one nodal network by Newton's method, every direct link
//! a wire. Afterwards each stage is linearised at DC about the solution, so that every
//! stage's DC networks (the DC load lines) include its direct neighbours.

use crate::chain::Chain;
use crate::circuit::coupled::{solve_network, Piece, PieceNode, PieceOpamp, Tie};
use crate::circuit::dc::Rails;
use crate::circuit::opamp::rest_fault;
use crate::circuit::plan::{KnownNode, Plan};
use crate::circuit::{Element, SubCircuit, FIRST_OWN};
use crate::device::DeviceModel;
use crate::device::Polarity;
use crate::device::{check_active, solve_active_from, BiasFault, Device, OperatingPoint, Start};
use crate::graph::Port;
use crate::network::{Freq, Thevenin};
use crate::stages::{device_voltages, DcTerminals, StageKind};
use num_complex::Complex64;

/// Passes allowed before the DC pass gives up.
const MAX_PASSES: usize = 200;
/// A direct link is settled when the driver's node voltage and the base voltage of the
/// stage it feeds differ by less than this, relative to the supply (a few units of
/// rounding of a node voltage).
const SETTLED: f64 = 1e-15;
/// Below this (relative to the supply) a sweep that no longer improves has reached
/// the rounding floor of f64 and is accepted.
const ROUNDING_FLOOR: f64 = 1e-10;

/// A stage without a forward-active operating point.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DcError {
    #[error("stage \"{stage}\" {fault}")]
    Bias { stage: String, fault: BiasFault },
    /// Not a DC fault, but found by the same evaluation (`crate::evaluate`).
    #[error(transparent)]
    Gain(#[from] crate::evaluate::GainOverflow),
}

/// Per-stage DC results and the linearisations the sweep hands between stages.
#[derive(Debug, Clone, Default)]
pub struct DcState {
    pub op: OperatingPoint,
    pub terminals: Option<DcTerminals>,
    /// What drives the input node at DC (the driver's node linearised, or open).
    external: Thevenin,
    /// The stage's description with this evaluation's values, and its compiled plan
    /// (kept across evaluations: it depends only on the description's shape).
    pub circuit: SubCircuit,
    pub plan: Plan,
    /// An op-amp stage's own network (`circuit::opamp`), solved in place of the
    /// description's device; `None` for every other kind (boxed: the state of the
    /// other kinds stays small).
    pub opamp: Option<Box<crate::circuit::opamp::OpAmpNetwork>>,
    /// An op-amp stage's node voltages at DC (its network's numbering).
    pub opamp_nodes: [f64; crate::circuit::opamp::MAX_NODES],
    /// The output node has a DC path on the stage's own resistors
    /// (`SubCircuit::rests_on_rails`), found when `plan` was compiled for the
    /// description's shape (`SubCircuit::shape`: which elements join which nodes,
    /// wires and capacitors told apart; `rests_known`); values never change it
    /// (resistors are positive).
    output_rests: bool,
    rests_known: bool,
    /// What `circuit` and `plan` were made from: the stage's values, the device values
    /// its description reads and its rails. The description and its own DC networks
    /// are a pure function of these, so an evaluation with the same values (a
    /// frequency sweep, a stage a spread build leaves alone) reuses them.
    described: Option<(StageKind, Polarity, f64, f64, Rails)>,
    /// What the last solve of this stage alone in its DC group read besides its
    /// description (`None` after any other solve, or a failed one): with
    /// [`solve_reusing`], the same inputs keep the solution.
    solved_from: Option<SoloInputs>,
    /// DC voltages of the input and output nodes at the last solution.
    pub v_in: f64,
    pub v_out: f64,
    /// Current drawn by the input network (divider + base) at its last solution.
    i_in: f64,
    /// Incremental conductance of the input network at DC.
    g_in: f64,
    /// Incremental conductance of the output node, the stage's own loads excluded.
    g_out: f64,
}

impl DcState {
    fn output_voltage(&self) -> f64 {
        self.v_out
    }

    /// An op-amp stage's resistor powers at DC (its reference at `v_ref`); `None` for
    /// every other kind.
    pub fn opamp_resistor_power(
        &self,
        v_ref: f64,
    ) -> Option<arrayvec::ArrayVec<(&'static str, f64), 4>> {
        let net = self.opamp.as_ref()?;
        Some(net.resistor_power(&self.opamp_nodes, v_ref))
    }
}

/// The stage's input and output node voltages and the current its input draws from
/// the driver's node: the current in every resistor at the input node, plus the
/// transistor's own terminal current when its terminal is the input node (I_B into an
/// NPN base, I_E out of its emitter, I_C into its collector; the other way for a PNP).
fn port_state(
    c: &SubCircuit,
    plan: &Plan,
    op: &OperatingPoint,
    device: &Device,
    rails: Rails,
) -> (f64, f64, f64) {
    let mut i_in = 0.0;
    let (v_in, v_out) = if let Some(ports) = plan.ports() {
        // Every node at the input's resistors is a rail or a transistor node.
        let fixed = [0.0, rails.top, rails.bottom];
        let terminals = [op.v_b, op.v_c, op.v_e];
        let own = device_voltages(op, device);
        let volts = |k: Option<KnownNode>| k.map_or(f64::NAN, |k| k.voltage(fixed, terminals, own));
        let v_in = volts(ports.input);
        for &(e, other) in &ports.edges {
            i_in += (v_in - volts(Some(other))) * plan.conductance(e as usize);
        }
        (v_in, volts(ports.output))
    } else {
        let full = c.dc_voltages(
            rails,
            Thevenin::OPEN,
            Thevenin::OPEN,
            device_voltages(op, device),
            Some([op.v_b, op.v_c, op.v_e]),
        );
        for e in c.elements() {
            if let Element::Resistor { a, b, r, .. } = *e {
                if r > 0.0 && (a == c.input) != (b == c.input) {
                    let other = if a == c.input { b } else { a };
                    i_in += (full[c.input] - full[other]) / r;
                }
            }
        }
        (full[c.input], full[c.output])
    };
    if let Some(d) = c.bjt_nodes() {
        let s = device.sign();
        if d.b == c.input {
            i_in += s * op.i_b;
        } else if d.e == c.input {
            i_in -= s * op.i_e;
        } else if d.c == c.input {
            i_in += s * op.i_c;
        }
    }
    (v_in, v_out, i_in)
}

/// A stage without a device in a solved network: its input and output voltages and
/// the current its input draws (through every resistor at the input node), read from
/// its nodes' voltages `volts` (NaN where a node floats: no current).
fn passive_ports(c: &SubCircuit, volts: &[f64]) -> (f64, f64, f64) {
    let v_in = volts[c.input];
    let mut i_in = 0.0;
    for e in c.elements() {
        if let Element::Resistor { a, b, r, .. } = *e {
            if r > 0.0 && (a == c.input) != (b == c.input) {
                let other = if a == c.input { b } else { a };
                let i = (v_in - volts[other]) / r;
                if i.is_finite() {
                    i_in += i;
                }
            }
        }
    }
    (v_in, volts[c.output], i_in)
}

/// The DC networks as the transistor's own frame sees them at its terminals: for a
/// PNP every voltage negated (magnitudes, as its operating point reports them), and
/// the collector network without the device's r_c (V_CE is taken at the terminals).
/// The DC load line reads these.
fn terminal_frame(t: DcTerminals, device: &Device) -> DcTerminals {
    let s = device.sign();
    let mirror = |th: Thevenin| Thevenin::new(s * th.v, th.r);
    let mut collector = mirror(t.collector);
    collector.r -= device.collector_resistance;
    DcTerminals {
        base: mirror(t.base),
        collector,
        emitter: mirror(t.emitter),
    }
}

/// Linearised current drawn by stage `d`'s input at node voltage `v`: i_in + g_in·(v − V_B).
fn input_draw(st: &DcState, v: f64) -> f64 {
    st.i_in + st.g_in * (v - st.v_in)
}

/// What the direct-coupled successors of `driver` hang on its output node.
fn direct_load(chain: &Chain, state: &[DcState], driver: Port) -> Thevenin {
    let mut load = Thevenin::OPEN;
    for b in chain.topology.successors(driver) {
        if b.coupling.is_some() {
            continue;
        }
        load = match b.to {
            Port::Stage(d) => {
                let st = &state[d];
                // Draw g_in·V − (g_in·V_B − i_in): a Norton source into the node.
                load.with_norton_load(st.g_in, st.g_in * st.v_in - st.i_in)
            }
            Port::Load(k) => load.parallel(Thevenin::new(0.0, chain.loads[k].r_l)),
            Port::Source => load,
        };
    }
    load
}

/// The driver's node as seen by its direct successor `d`: everything on the node but d.
fn node_source_for(chain: &Chain, state: &[DcState], driver: Port, d: usize) -> Thevenin {
    let others = chain
        .topology
        .successors(driver)
        .iter()
        .filter(|b| b.coupling.is_none() && b.to != Port::Stage(d));
    match driver {
        Port::Source => {
            let mut th = Thevenin::new(0.0, chain.source.r_s);
            for b in others {
                th = match b.to {
                    Port::Stage(s) => th.with_norton_load(
                        state[s].g_in,
                        state[s].g_in * state[s].v_in - state[s].i_in,
                    ),
                    Port::Load(k) => th.parallel(Thevenin::new(0.0, chain.loads[k].r_l)),
                    Port::Source => th,
                };
            }
            th
        }
        Port::Stage(u) => {
            // Linearised at the driver's solution V_N: the node conductance without d is
            // g = g_out + Σ others, and the node sits at V_N while d draws I_d(V_N), so
            // V_th = V_N + I_d(V_N)/g.
            let v_n = state[u].output_voltage();
            let mut g = state[u].g_out;
            for b in others {
                g += match b.to {
                    Port::Stage(s) => state[s].g_in,
                    Port::Load(k) => 1.0 / chain.loads[k].r_l,
                    Port::Source => 0.0,
                };
            }
            if g <= 0.0 {
                return Thevenin::OPEN;
            }
            Thevenin::new(v_n + input_draw(&state[d], v_n) / g, 1.0 / g)
        }
        Port::Load(_) => Thevenin::OPEN,
    }
}

/// Stage `i`'s direct neighbours as they stand in `state`: the driver's node seen
/// from its input (open behind a capacitor) and its direct successors on its output.
fn neighbours(chain: &Chain, state: &[DcState], i: usize) -> (Thevenin, Thevenin) {
    let (driver, coupling) = chain.topology.stage_driver[i];
    let external = if coupling.is_none() {
        node_source_for(chain, state, driver, i)
    } else {
        Thevenin::OPEN
    };
    (external, direct_load(chain, state, Port::Stage(i)))
}

/// Node voltage of `driver`'s output as its own solution gives it: a stage's output
/// terminal, or for the source the Thevenin source (0 V behind R_S, with any loads on
/// it) less the current its direct successors actually draw.
fn node_voltage(chain: &Chain, state: &[DcState], driver: Port) -> f64 {
    match driver {
        Port::Stage(u) => state[u].output_voltage(),
        Port::Source => {
            let mut th = Thevenin::new(0.0, chain.source.r_s);
            let mut drawn = 0.0;
            for b in chain.topology.successors(Port::Source) {
                if b.coupling.is_some() {
                    continue;
                }
                match b.to {
                    Port::Stage(d) => drawn += state[d].i_in,
                    Port::Load(k) => th = th.parallel(Thevenin::new(0.0, chain.loads[k].r_l)),
                    Port::Source => {}
                }
            }
            th.v - th.r * drawn
        }
        Port::Load(_) => 0.0,
    }
}

/// The transistor's operating point on its DC networks (at its own nodes, inside
/// r_bb' and r_c): a PNP is solved as the NPN with every voltage negated (its device
/// values are magnitudes); the result reports the terminals, V_BE and V_CE as
/// magnitudes, node voltages signed, and the saturation edge is checked at the
/// terminals (docs/definitions.md).
fn solve_transistor(
    device: &Device,
    v_t: f64,
    networks: DcTerminals,
    warm: Option<Start>,
) -> Result<OperatingPoint, BiasFault> {
    let s = device.sign();
    let mirror = |th: Thevenin| Thevenin::new(s * th.v, th.r);
    let mut op = solve_active_from(
        device,
        v_t,
        mirror(networks.base),
        mirror(networks.emitter),
        mirror(networks.collector),
        warm,
    )?;
    // To the terminals: the base current drops I_B·r_bb', the collector current I_C·r_c.
    let terminals = [
        op.v_b + op.i_b * device.base_resistance,
        op.v_c + op.i_c * device.collector_resistance,
        op.v_e,
    ];
    at_terminals(&mut op, terminals, device)?;
    Ok(op)
}

/// Move an operating point solved in the NPN frame to the transistor's terminals
/// (`terminals`: base, collector, emitter voltages in that frame): V_BE and V_CE at
/// the terminals, the junction's V_BE kept as `v_be_junction`, the saturation edge
/// checked there (docs/definitions.md), then node voltages back to the real signs.
fn at_terminals(
    op: &mut OperatingPoint,
    terminals: [f64; 3],
    device: &Device,
) -> Result<(), BiasFault> {
    op.v_be_junction = op.v_be;
    // The forward-active law needs the junction's own V_CE above zero; the terminals'
    // V_CE alone is checked against vce_sat (docs/definitions.md "Bipolar").
    if device.collector_resistance > 0.0 && op.v_ce <= 0.0 {
        return Err(BiasFault::InsideCollectorResistance {
            v_ce_inside: op.v_ce,
            i_c: op.i_c,
            r_c: device.collector_resistance,
        });
    }
    [op.v_b, op.v_c, op.v_e] = terminals;
    op.v_be = op.v_b - op.v_e;
    op.v_ce = op.v_c - op.v_e;
    check_active(op, device)?;
    let s = device.sign();
    op.v_b *= s;
    op.v_c *= s;
    op.v_e *= s;
    Ok(())
}

/// A stage whose transistor terminals are coupled (collector-to-base feedback, a
/// supply filter) solved as one nodal network (`SubCircuit::solve_coupled`). Returns
/// the operating point at the terminals as [`solve_transistor`] reports it.
fn solve_coupled_stage(
    c: &SubCircuit,
    device: &Device,
    v_t: f64,
    rails: Rails,
    at_input: Thevenin,
    at_output: Thevenin,
) -> Result<OperatingPoint, BiasFault> {
    let solution = c.solve_coupled(device, v_t, rails, at_input, at_output)?;
    let mut op = solution.op;
    let terminals = solved_terminals(c, &op, &solution.volts, device);
    at_terminals(&mut op, terminals, device)?;
    Ok(op)
}

/// The transistor's terminal voltages in its solved frame (times the device's sign),
/// read from a nodal solution's node voltages `volts`.
fn solved_terminals(
    c: &SubCircuit,
    op: &OperatingPoint,
    volts: &[f64],
    device: &Device,
) -> [f64; 3] {
    let s = device.sign();
    c.bjt_terminals().map_or([op.v_b, op.v_c, op.v_e], |t| {
        [s * volts[t.b], s * volts[t.c], s * volts[t.e]]
    })
}

/// Solve stage `i` with its neighbours as they stand in `state` (the driver's node and
/// the direct successors' inputs linearised at their last solutions). With `in_group`
/// (a stage of a swept DC group), also record its port voltages, input current and DC
/// linearisation for its neighbours; a group of one needs none of them.
fn solve_stage(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    i: usize,
    in_group: bool,
) -> Result<(), DcError> {
    let stage = &chain.stages[i];
    let device = chain.device_of(i);
    let rails = chain.stage_rails(i);
    let (external, out_load) = neighbours(chain, state, i);
    let st = &state[i];
    let networks = st.plan.dc_networks(&st.circuit, rails, external, out_load);
    let fault = |fault| DcError::Bias {
        stage: stage.id.clone(),
        fault,
    };
    let op = if st.plan.coupled() {
        solve_coupled_stage(&st.circuit, device, v_t, rails, external, out_load).map_err(fault)?
    } else {
        // Within a sweep, start from this stage's previous solution.
        let warm = (state[i].op.i_c > 0.0).then(|| Start::from_solution(&state[i].op, device));
        solve_transistor(device, v_t, networks, warm).map_err(fault)?
    };
    let st = &mut state[i];
    st.op = op;
    st.terminals = Some(terminal_frame(networks, device));
    st.external = external;
    if !in_group {
        return Ok(());
    }
    let (v_in, v_out, i_in) = port_state(&st.circuit, &st.plan, &st.op, device, rails);
    st.v_in = v_in;
    st.v_out = v_out;
    st.i_in = i_in;
    let (g_in, g_out) = linearise(chain, v_t, &state[i], i, external, out_load);
    state[i].g_in = g_in;
    state[i].g_out = g_out;
    Ok(())
}

/// Transistor stage `i` alone in its DC group, its description current: kept when
/// its last solve read the same inputs, else solved cold.
fn solve_solo(chain: &Chain, v_t: f64, state: &mut [DcState], i: usize) -> Result<(), DcError> {
    let inputs = SoloInputs::of(chain, v_t, state, i);
    if state[i].solved_from == Some(inputs) {
        return Ok(());
    }
    let st = &mut state[i];
    st.solved_from = None;
    st.op = OperatingPoint::default();
    solve_stage(chain, v_t, state, i, false)?;
    state[i].solved_from = Some(inputs);
    Ok(())
}

/// Stage `i` linearised at DC (capacitors open) about its solution in `st`: the
/// incremental conductance into its input with its direct successors (`out_load`) on
/// its output, and the conductance back into its output node (its own elements only,
/// successors excluded) with `external` driving its input.
///
/// This is the stage's two-port at DC from its description (`SubCircuit::two_port`
/// with capacitors open); it runs on every pass of the DC sweep and only sets how fast
/// the sweep converges.
fn linearise(
    chain: &Chain,
    v_t: f64,
    st: &DcState,
    i: usize,
    external: Thevenin,
    out_load: Thevenin,
) -> (f64, f64) {
    let hp = chain.device_of(i).small_signal(&st.op, v_t);
    let g_l = if out_load.is_open() {
        0.0
    } else {
        1.0 / out_load.r
    };
    let Some([y11, y12, y21, y22]) = st.plan.two_port_dc(&st.circuit, &hp) else {
        // A passive stage's wire or grounded output: the two-port's limits.
        let tp = st.plan.two_port(&st.circuit, &hp, Freq::Dc);
        let r_s = if external.is_open() {
            f64::INFINITY
        } else {
            external.r
        };
        return (
            tp.input_admittance(Complex64::new(g_l, 0.0)).re,
            tp.output_admittance(Complex64::new(r_s, 0.0)).re,
        );
    };
    // Input conductance with the successors' conductance G_L on the output:
    // y11 − y12·y21/(y22 + G_L); output conductance with the driver's R_S on the
    // input: y22 − y12·y21·R_S/(1 + y11·R_S), and with nothing outside on the input
    // (R_S = ∞) its limit y22 − y12·y21/y11 (`TwoPort`'s relations, here in real
    // numbers: this runs on every pass of the DC sweep).
    let g_in = y11 - y12 * y21 / (y22 + g_l);
    let g_out = if !external.is_open() {
        y22 - y12 * y21 * external.r / (1.0 + y11 * external.r)
    } else if y11 != 0.0 {
        y22 - y12 * y21 / y11
    } else {
        y22
    };
    (g_in, g_out)
}

/// An op-amp stage linearised at DC (docs/definitions.md "Op-amp": A = A_0), as
/// [`linearise`] does for the other kinds: its input conductance with `out_load` on
/// the pin, and its output conductance with `external` on its input (∞ where the
/// op-amp's own source holds the pin, `output_resistance` = 0).
fn linearise_opamp(
    net: &crate::circuit::opamp::OpAmpNetwork,
    amp: &crate::device::opamp::OpAmp,
    external: Thevenin,
    out_load: Thevenin,
) -> (f64, f64) {
    let g_l = if out_load.is_open() {
        0.0
    } else {
        1.0 / out_load.r
    };
    // An ideal source on the input (R_S = 0) as a milliohm: the stage's own network
    // takes a driver only through an impedance.
    let r_s = if external.is_open() {
        f64::INFINITY
    } else {
        external.r.max(1e-3)
    };
    let real = |z: Option<Complex64>| z.map_or(0.0, |z| z.re);
    let g_in = real(net.input_admittance(amp, Freq::Dc, Complex64::new(g_l, 0.0)));
    let z_out = real(net.output_impedance(amp, Freq::Dc, Complex64::new(r_s, 0.0)));
    (g_in, 1.0 / z_out)
}

/// Everything the solve of a stage alone in its DC group reads besides its
/// description (the stage's values, polarity, r_bb', r_c and rails, which
/// `DcState::described` keys): the device's other DC values, V_T and the networks on
/// its ports.
#[derive(Debug, Clone, Copy, PartialEq)]
struct SoloInputs {
    beta: f64,
    i_s: f64,
    v_a: f64,
    vce_sat: f64,
    jfet: Option<crate::device::jfet::Jfet>,
    v_t: f64,
    external: Thevenin,
    out_load: Thevenin,
}

impl SoloInputs {
    fn of(chain: &Chain, v_t: f64, state: &[DcState], i: usize) -> SoloInputs {
        let device = chain.device_of(i);
        let (external, out_load) = neighbours(chain, state, i);
        SoloInputs {
            beta: device.beta,
            i_s: device.i_s,
            v_a: device.v_a,
            vce_sat: device.vce_sat,
            jfet: device.jfet,
            v_t,
            external,
            out_load,
        }
    }
}

/// Solve the operating points of all stages into `state` (one entry per stage).
///
/// Capacitors block DC, so each DC group (stages joined by direct links) is solved on
/// its own; a group of one stage is solved once.
pub fn solve(chain: &Chain, v_t: f64, state: &mut [DcState]) -> Result<(), DcError> {
    solve_reusing(chain, v_t, state, false)
}

/// [`solve`]; with `reuse`, a transistor stage alone in its DC group whose
/// description and every other input of its solve (`SoloInputs`) equal those of its
/// last solve in `state` keeps that solution. The solve starts cold and is a pure
/// function of those inputs, so the result is bit for bit [`solve`]'s; worth it where
/// one evaluation differs from the last in a part or two (`tune`).
pub fn solve_reusing(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    reuse: bool,
) -> Result<(), DcError> {
    // Start cold: the result must not depend on what was evaluated before. The
    // description is read afresh (values may have changed in place); its plan is
    // recompiled only when its shape changed.
    for (i, (st, stage)) in state.iter_mut().zip(&chain.stages).enumerate() {
        if !(reuse && st.solved_from.is_some()) {
            st.op = OperatingPoint::default();
            st.terminals = None;
            st.external = Thevenin::OPEN;
            st.solved_from = None;
        }
        st.v_in = 0.0;
        st.v_out = 0.0;
        st.i_in = 0.0;
        st.g_in = 0.0;
        st.g_out = 0.0;
        let device = chain.device_of(i);
        let rails = chain.stage_rails(i);
        let key = (
            device.polarity,
            device.base_resistance,
            device.collector_resistance,
            rails,
        );
        let unchanged = st
            .described
            .as_ref()
            .is_some_and(|(kind, p, r_bb, r_c, r)| {
                *kind == stage.kind && (*p, *r_bb, *r_c, *r) == key
            });
        if !unchanged {
            st.solved_from = None;
            st.op = OperatingPoint::default();
            st.terminals = None;
            st.external = Thevenin::OPEN;
            st.circuit.clear();
            stage.kind.model().describe(&mut st.circuit, device);
            let compiled = st.plan.refresh(&st.circuit);
            st.plan.solve_own_dc(&st.circuit, rails);
            if compiled || !st.rests_known {
                st.output_rests = st.circuit.rests_on_rails(st.circuit.output);
                st.rests_known = true;
            }
            st.opamp = stage.kind.model().opamp_network().map(Box::new);
            st.described = Some((stage.kind.clone(), key.0, key.1, key.2, key.3));
        }
    }
    for group in chain.topology.dc_groups() {
        if !chain.topology.feedback.is_empty() && closes_a_loop(chain, group) {
            // A loop closed at DC (a feedback link without a series capacitor) is
            // one network with the feedback resistor in it.
            network_group(chain, v_t, state, group)?;
            finish_group(chain, v_t, state, group);
        } else if let [i] = *group {
            // A stage without a device on its own has no operating point to find.
            if state[i].circuit.bjt_nodes().is_some() {
                if reuse {
                    solve_solo(chain, v_t, state, i)?;
                } else {
                    solve_stage(chain, v_t, state, i, false)?;
                }
            } else if state[i].opamp.is_some() {
                solve_opamp_stage(chain, &mut state[i], i)?;
            }
        } else {
            solve_group(chain, v_t, state, group)?;
        }
    }
    Ok(())
}

/// An op-amp stage alone in its DC group (in a group of several, `network_group`
/// solves it with the others): its network at DC with the reference at its voltage, the input open behind
/// its coupling capacitor (or on the source's 0 V behind R_S when direct), and the
/// loads direct-coupled to its output. The operating point keeps the pin's voltage in
/// `v_c` and its current in `i_c` (docs/definitions.md "Op-amp").
fn solve_opamp_stage(chain: &Chain, st: &mut DcState, i: usize) -> Result<(), DcError> {
    use crate::circuit::opamp::Drive;
    let (Some(net), Some(amp)) = (&st.opamp, chain.device_of(i).opamp) else {
        return Ok(());
    };
    let zero = Complex64::new(0.0, 0.0);
    let drive = match chain.topology.stage_driver[i] {
        (Port::Source, None) if chain.source.r_s > 0.0 => {
            Drive::Dead(Complex64::new(chain.source.r_s, 0.0))
        }
        (Port::Source, None) => Drive::Voltage(zero),
        _ => Drive::Open,
    };
    let g_loads: f64 = chain
        .topology
        .successors(Port::Stage(i))
        .iter()
        .filter(|b| b.coupling.is_none())
        .map(|b| match b.to {
            Port::Load(k) => 1.0 / chain.loads[k].r_l,
            _ => 0.0,
        })
        .sum();
    let s = net
        .solve(
            &amp,
            Freq::Dc,
            chain.reference_voltage(i),
            drive,
            Complex64::new(g_loads, 0.0),
            zero,
        )
        .ok_or_else(|| DcError::Bias {
            stage: chain.stages[i].id.clone(),
            fault: BiasFault::NoDcPath {
                terminal: "+ input",
            },
        })?;
    set_opamp_point(chain, st, i, s.v.map(|v| v.re), s.i_pin.re)
}

/// An op-amp stage's operating point from its solved network: node voltages `v` (its
/// network's numbering) and the pin current `i_out`; the pin's voltage in `v_c`, its
/// current in `i_c`. A pin outside the rails less `swing_margin`, or a pin current at
/// rest beyond ± `output_current_limit` (the op-amp sits in current limiting, no
/// linear operating point), is a fault (docs/definitions.md "Op-amp").
fn set_opamp_point(
    chain: &Chain,
    st: &mut DcState,
    i: usize,
    v: [f64; crate::circuit::opamp::MAX_NODES],
    i_out: f64,
) -> Result<(), DcError> {
    let (Some(net), Some(amp)) = (&st.opamp, chain.device_of(i).opamp) else {
        return Ok(());
    };
    let rails = chain.stage_rails(i);
    let v_out = v[net.output];
    if let Some(fault) = rest_fault(&amp, (rails.top, rails.bottom), v_out, i_out) {
        return Err(DcError::Bias {
            stage: chain.stages[i].id.clone(),
            fault,
        });
    }
    st.i_in = net.input_current(&amp, &v, chain.reference_voltage(i));
    st.opamp_nodes = v;
    st.v_in = v[net.input];
    st.v_out = v_out;
    st.op = OperatingPoint {
        v_c: v_out,
        i_c: i_out,
        ..OperatingPoint::default()
    };
    Ok(())
}

/// True when a feedback link without a series capacitor ends in `group` (both its
/// ends are then in it: docs/definitions.md "Feedback links").
fn closes_a_loop(chain: &Chain, group: &[usize]) -> bool {
    let topo = &chain.topology;
    group.iter().any(|&i| {
        topo.loop_of[i].is_some_and(|k| {
            let l = &topo.feedback[k];
            l.capacitance.is_none() && l.from == i
        })
    })
}

/// Where feedback link `l` ends in its `to` stage's description: the input node, or
/// the transistor's emitter terminal (where `r_emitter` starts).
pub fn feedback_end(c: &SubCircuit, l: &crate::graph::Feedback) -> usize {
    match l.into {
        crate::graph::FeedbackInto::Input => c.input,
        crate::graph::FeedbackInto::Emitter => c.bjt_terminals().map_or(c.input, |t| t.e),
    }
}

/// A group of direct-coupled stages: swept stage by stage when every direct driver
/// holds its output node on its own resistors (fast, and the way v1 solved it),
/// otherwise, or when the sweep does not settle, solved as one network (a driver
/// whose output is only its collector, as in a cascode, is a current source the
/// sweep's Thevenin linearisation cannot carry).
fn solve_group(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    group: &[usize],
) -> Result<(), DcError> {
    let sweepable = group.iter().all(|&i| {
        state[i].circuit.bjt_nodes().is_some()
            && match chain.topology.stage_driver[i] {
                (Port::Stage(u), None) => state[u].output_rests,
                _ => true,
            }
    });
    if !(sweepable && sweep_group(chain, v_t, state, group)?) {
        network_group(chain, v_t, state, group)?;
        finish_group(chain, v_t, state, group);
    }
    Ok(())
}

/// Sweep a group of direct-coupled stages until every direct link agrees: the node
/// voltage the driver's solution gives equals the input voltage of the stage it feeds.
/// (That mismatch is R_node·(linearised − actual input current) of the fed stage, so
/// when it vanishes every stage's solution holds with its real neighbours.)
///
/// The fast way for a group whose every direct driver holds its output node on its
/// own resistors; returns false when the sweep does not settle. The last pass's
/// linearisations serve the DC networks (input conductances refreshed where a stage
/// has direct successors).
fn sweep_group(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    group: &[usize],
) -> Result<bool, DcError> {
    let settled = SETTLED * chain.span();
    let mut last_mismatch = f64::INFINITY;
    for _ in 0..MAX_PASSES {
        for &i in group {
            solve_stage(chain, v_t, state, i, true)?;
        }
        let mut mismatch: f64 = 0.0;
        for &i in group {
            let (driver, coupling) = chain.topology.stage_driver[i];
            if coupling.is_none() {
                let v_node = node_voltage(chain, state, driver);
                mismatch = mismatch.max((state[i].v_in - v_node).abs());
            }
        }
        if mismatch <= settled
            || (mismatch >= last_mismatch && mismatch <= ROUNDING_FLOOR * chain.span())
        {
            // The DC networks on each output (for the DC load lines) with the direct
            // successors linearised at the solution itself: from the last stage back,
            // each stage's input conductance with its own successors refreshed.
            for &i in group.iter().rev() {
                let out_load = direct_load(chain, state, Port::Stage(i));
                let st = &state[i];
                let networks =
                    st.plan
                        .dc_networks(&st.circuit, chain.stage_rails(i), st.external, out_load);
                let device = chain.device_of(i);
                state[i].terminals = Some(terminal_frame(networks, device));
                // A stage without direct successors kept its linearisation from the
                // last pass; one with them and a direct driver needs it refreshed.
                let (driver, coupling) = chain.topology.stage_driver[i];
                if coupling.is_none() && driver != Port::Source && !out_load.is_open() {
                    let (g_in, _) = linearise(chain, v_t, &state[i], i, Thevenin::OPEN, out_load);
                    state[i].g_in = g_in;
                }
            }
            return Ok(true);
        }
        last_mismatch = mismatch;
    }
    Ok(false)
}

/// A group of direct-coupled stages solved as one nodal network
/// (`circuit::coupled::solve_network`): each direct link a wire, the source's R_S
/// and each direct load's R_L on its node.
fn network_group(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    group: &[usize],
) -> Result<(), DcError> {
    let piece_of = |i: usize| group.iter().position(|&g| g == i);
    let pieces: Vec<Piece> =
        group
            .iter()
            .map(|&i| Piece {
                circuit: &state[i].circuit,
                rails: chain.stage_rails(i),
                device: chain.device_of(i),
                opamp: state[i].opamp.as_deref().zip(chain.device_of(i).opamp).map(
                    |(network, amp)| PieceOpamp {
                        network,
                        amp,
                        v_ref: chain.reference_voltage(i),
                    },
                ),
            })
            .collect();
    let mut ties = Vec::new();
    let mut source_node: Option<PieceNode> = None;
    for (p, &i) in group.iter().enumerate() {
        let input = (p, state[i].circuit.input);
        let (driver, coupling) = chain.topology.stage_driver[i];
        if coupling.is_none() {
            match driver {
                Port::Stage(u) => {
                    let u_piece = piece_of(u).expect("a direct driver is in its stage's DC group");
                    ties.push(Tie::Wire((u_piece, state[u].circuit.output), input));
                }
                Port::Source => match source_node {
                    Some(node) => ties.push(Tie::Wire(node, input)),
                    None => {
                        source_node = Some(input);
                        ties.push(Tie::Source(input, Thevenin::new(0.0, chain.source.r_s)));
                    }
                },
                Port::Load(_) => {}
            }
        }
        for b in chain.topology.successors(Port::Stage(i)) {
            if let (None, Port::Load(k)) = (b.coupling, b.to) {
                let output = (p, state[i].circuit.output);
                ties.push(Tie::Source(output, Thevenin::new(0.0, chain.loads[k].r_l)));
            }
        }
    }
    for l in chain.topology.feedback.iter() {
        if let (None, Some(a), Some(b)) = (l.capacitance, piece_of(l.from), piece_of(l.to)) {
            let end = feedback_end(&state[l.to].circuit, l);
            ties.push(Tie::Resistor(
                (a, state[l.from].circuit.output),
                (b, end),
                l.resistance,
            ));
        }
    }
    if let Some(node) = source_node {
        for b in chain.topology.successors(Port::Source) {
            if let (None, Port::Load(k)) = (b.coupling, b.to) {
                ties.push(Tie::Source(node, Thevenin::new(0.0, chain.loads[k].r_l)));
            }
        }
    }
    // A runaway or unsettled Newton with a feedback resistor in the network is the
    // loop's doing far more often than the stage's own (docs/errors.md `loop-no-solution`).
    let loop_closed = ties.iter().any(|t| matches!(t, Tie::Resistor(..)));
    let solution = solve_network(&pieces, &ties, v_t).map_err(|(p, fault)| DcError::Bias {
        stage: chain.stages[group[p]].id.clone(),
        fault: match fault {
            BiasFault::Unlimited | BiasFault::NoConvergence { .. } if loop_closed => {
                BiasFault::LoopNoSolution
            }
            other => other,
        },
    })?;
    for (p, &i) in group.iter().enumerate() {
        let device = chain.device_of(i);
        let fault = |fault| DcError::Bias {
            stage: chain.stages[i].id.clone(),
            fault,
        };
        let st = &state[i];
        let volts = &solution.volts[p];
        if st.opamp.is_some() {
            // Node k of the op-amp's network is node FIRST_OWN + k of its description.
            let mut v = [0.0; crate::circuit::opamp::MAX_NODES];
            for (k, v) in v.iter_mut().enumerate() {
                *v = volts.get(FIRST_OWN + k).copied().unwrap_or(0.0);
            }
            set_opamp_point(chain, &mut state[i], i, v, solution.pin_currents[p])?;
            continue;
        }
        let (op, (v_in, v_out, i_in)) = if st.circuit.bjt_nodes().is_none() {
            // No device: the ports straight from the node voltages.
            (OperatingPoint::default(), passive_ports(&st.circuit, volts))
        } else {
            let mut op = solution.ops[p].ok_or(fault(BiasFault::NoDcPath { terminal: "base" }))?;
            let terminals = solved_terminals(&st.circuit, &op, volts, device);
            at_terminals(&mut op, terminals, device).map_err(fault)?;
            let ports = port_state(&st.circuit, &st.plan, &op, device, chain.stage_rails(i));
            (op, ports)
        };
        let st = &mut state[i];
        st.op = op;
        st.v_in = v_in;
        st.v_out = v_out;
        st.i_in = i_in;
    }
    Ok(())
}

/// A solved group's DC linearisations, and each stage's DC networks with its
/// neighbours linearised at the solution (for the DC load lines): input conductances
/// from the last stage back, then from the first stage on the driver's node and the
/// output conductance.
fn finish_group(chain: &Chain, v_t: f64, state: &mut [DcState], group: &[usize]) {
    // An op-amp stage linearised on its own network, every other stage on its plan.
    let linear = |st: &DcState, i: usize, external: Thevenin, out_load: Thevenin| match (
        st.opamp.as_deref(),
        chain.device_of(i).opamp,
    ) {
        (Some(net), Some(amp)) => linearise_opamp(net, &amp, external, out_load),
        _ => linearise(chain, v_t, st, i, external, out_load),
    };
    for &i in group.iter().rev() {
        let out_load = direct_load(chain, state, Port::Stage(i));
        state[i].g_in = linear(&state[i], i, Thevenin::OPEN, out_load).0;
    }
    for &i in group {
        let (external, out_load) = neighbours(chain, state, i);
        let st = &state[i];
        let g_out = linear(st, i, external, out_load).1;
        let networks = st
            .plan
            .dc_networks(&st.circuit, chain.stage_rails(i), external, out_load);
        let has_device = st.circuit.bjt_nodes().is_some();
        let st = &mut state[i];
        st.g_out = g_out;
        st.external = external;
        st.terminals = has_device.then(|| terminal_frame(networks, chain.device_of(i)));
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::thermal_voltage;

    /// Reference: the same direct-coupled networks solved two independent ways, the
    /// stage-by-stage sweep (Thevenin linearisation) and Newton on the whole group's
    /// nodal network; both solve KCL exactly, so every operating point agrees to
    /// rounding (1e-12) on every shipped chain with a direct group.
    #[test]
    fn sweep_and_group_network_agree() {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/chains");
        let mut groups = 0;
        for entry in std::fs::read_dir(dir).unwrap() {
            let path = entry.unwrap().path();
            let chain = Chain::from_json_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
            let v_t = thermal_voltage(chain.temperature);
            let mut swept = vec![DcState::default(); chain.stages.len()];
            solve(&chain, v_t, &mut swept).unwrap();
            for group in chain.topology.dc_groups().filter(|g| g.len() > 1) {
                let mut whole = swept.clone();
                network_group(&chain, v_t, &mut whole, group).unwrap();
                for &i in group {
                    let (a, b) = (&swept[i].op, &whole[i].op);
                    let what = format!("{}: stage {}", path.display(), chain.stages[i].id);
                    for (x, y) in [(a.i_c, b.i_c), (a.i_b, b.i_b)] {
                        assert!((x - y).abs() <= 1e-12 * x.abs(), "{what}: {x} vs {y}");
                    }
                    for (x, y) in [(a.v_b, b.v_b), (a.v_c, b.v_c), (a.v_e, b.v_e)] {
                        assert!((x - y).abs() <= 1e-12 * chain.span(), "{what}: {x} vs {y}");
                    }
                }
                groups += 1;
            }
        }
        assert!(groups >= 5, "only {groups} direct groups among the chains");
    }
}
