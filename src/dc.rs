//! DC pass: the operating point of every stage, in signal order.
//!
//! A capacitor-coupled stage sees only its own bias divider. A direct link hands the
//! driver's output node to the stage as a Thevenin source, and the stage's input
//! (divider plus base current) loads that node. Because the load depends on the
//! stage's own solution, such chains are swept repeatedly: each driver is solved with
//! its direct successors' inputs linearised at their last solution, each successor
//! with its driver's output linearised at the driver's new solution, until every node
//! voltage stops moving (the fixed point is the exact solution of the whole network;
//! the linearisation only decides how fast it is reached).

use crate::chain::Chain;
use crate::circuit::coupled::CoupledSolution;
use crate::circuit::dc::Rails;
use crate::circuit::plan::{KnownNode, Plan};
use crate::circuit::{Element, SubCircuit};
use crate::device::Polarity;
use crate::device::{
    check_saturation, solve_junction_from, BiasFault, Device, OperatingPoint, Start,
};
use crate::graph::Port;
use crate::network::Thevenin;
use crate::stages::{device_voltages, DcTerminals, StageKind};

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
    #[error("stage \"{stage}\": the DC operating point did not settle after {passes} passes; expected a chain whose direct-coupled stages have a single operating point")]
    NoConvergence { stage: String, passes: usize },
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
    /// The last nodal solution of a coupled stage (its next solve starts there).
    coupled: Option<CoupledSolution>,
    /// What `circuit` and `plan` were made from: the stage's values, the device values
    /// its description reads and its rails. The description and its own DC networks
    /// are a pure function of these, so an evaluation with the same values (a
    /// frequency sweep, a stage a spread build leaves alone) reuses them.
    described: Option<(StageKind, Polarity, f64, f64, Rails)>,
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
    let mut op = solve_junction_from(
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
    [op.v_b, op.v_c, op.v_e] = terminals;
    op.v_be = op.v_b - op.v_e;
    op.v_ce = op.v_c - op.v_e;
    check_saturation(op, device)?;
    let s = device.sign();
    op.v_b *= s;
    op.v_c *= s;
    op.v_e *= s;
    Ok(())
}

/// A stage whose transistor terminals are coupled (collector-to-base feedback, a
/// supply filter) solved as one nodal network (`SubCircuit::solve_coupled`), a PNP as
/// the NPN with every voltage negated. Returns the solution in the solved (NPN) frame
/// for the next warm start, and the operating point at the terminals as
/// [`solve_transistor`] reports it.
fn solve_coupled_stage(
    c: &SubCircuit,
    device: &Device,
    v_t: f64,
    rails: Rails,
    at_input: Thevenin,
    at_output: Thevenin,
    warm: Option<&CoupledSolution>,
) -> Result<(CoupledSolution, OperatingPoint), BiasFault> {
    let s = device.sign();
    let mirror = |th: Thevenin| Thevenin::new(s * th.v, th.r);
    let mirrored = Rails {
        top: s * rails.top,
        bottom: s * rails.bottom,
    };
    let solution = c.solve_coupled(
        device,
        v_t,
        mirrored,
        mirror(at_input),
        mirror(at_output),
        warm,
    )?;
    let mut op = solution.op;
    let terminals = c.bjt_terminals().map_or([op.v_b, op.v_c, op.v_e], |t| {
        [
            solution.volts[t.b],
            solution.volts[t.c],
            solution.volts[t.e],
        ]
    });
    at_terminals(&mut op, terminals, device)?;
    Ok((solution, op))
}

/// Solve stage `i` with its neighbours as they stand in `state` (the driver's node and
/// the direct successors' inputs linearised at their last solutions). With `linearise`,
/// also record this stage's DC linearisation for its neighbours.
fn solve_stage(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    i: usize,
    with_linearisation: bool,
) -> Result<(), DcError> {
    let stage = &chain.stages[i];
    let device = &chain.devices[stage.device];
    let rails = chain.stage_rails(i);
    let (driver, coupling) = chain.topology.stage_driver[i];
    let external = if coupling.is_none() {
        node_source_for(chain, state, driver, i)
    } else {
        Thevenin::OPEN
    };
    let out_load = direct_load(chain, state, Port::Stage(i));
    let st = &state[i];
    let networks = st.plan.dc_networks(&st.circuit, rails, external, out_load);
    let fault = |fault| DcError::Bias {
        stage: stage.id.clone(),
        fault,
    };
    let op = if st.plan.coupled() {
        let solution = solve_coupled_stage(
            &st.circuit,
            device,
            v_t,
            rails,
            external,
            out_load,
            st.coupled.as_ref(),
        )
        .map_err(fault)?;
        let op = solution.1;
        state[i].coupled = Some(solution.0);
        op
    } else {
        // Within a sweep, start from this stage's previous solution.
        let warm = (state[i].op.i_c > 0.0).then(|| Start::from_solution(&state[i].op, device));
        solve_transistor(device, v_t, networks, warm).map_err(fault)?
    };
    let (v_in, v_out, i_in) = port_state(&state[i].circuit, &state[i].plan, &op, device, rails);
    let st = &mut state[i];
    st.op = op;
    st.terminals = Some(terminal_frame(networks, device));
    st.external = external;
    st.v_in = v_in;
    st.v_out = v_out;
    st.i_in = i_in;
    if !with_linearisation {
        return Ok(());
    }
    let (g_in, g_out) = linearise(chain, v_t, &state[i], i, external, out_load);
    state[i].g_in = g_in;
    state[i].g_out = g_out;
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
    let stage = &chain.stages[i];
    let hp = st.op.hybrid_pi(&chain.devices[stage.device], v_t);
    let [y11, y12, y21, y22] = st.plan.two_port_dc(&st.circuit, &hp);
    // Input conductance with the successors' conductance G_L on the output:
    // y11 − y12·y21/(y22 + G_L); output conductance with the driver's R_S on the
    // input: y22 − y12·y21·R_S/(1 + y11·R_S) (the two-port relations of network.rs).
    let g_l = if out_load.is_open() {
        0.0
    } else {
        1.0 / out_load.r
    };
    let g_in = y11 - y12 * y21 / (y22 + g_l);
    let g_out = if external.is_open() {
        y22
    } else {
        y22 - y12 * y21 * external.r / (1.0 + y11 * external.r)
    };
    (g_in, g_out)
}

/// Solve the operating points of all stages into `state` (one entry per stage).
///
/// Capacitors block DC, so each DC group (stages joined by direct links) is solved on
/// its own; a group of one stage is solved once.
pub fn solve(chain: &Chain, v_t: f64, state: &mut [DcState]) -> Result<(), DcError> {
    // Start cold: the result must not depend on what was evaluated before. The
    // description is read afresh (values may have changed in place); its plan is
    // recompiled only when its shape changed.
    for (i, (st, stage)) in state.iter_mut().zip(&chain.stages).enumerate() {
        st.op = OperatingPoint::default();
        st.terminals = None;
        st.external = Thevenin::OPEN;
        st.i_in = 0.0;
        st.g_in = 0.0;
        st.g_out = 0.0;
        st.coupled = None;
        let device = &chain.devices[stage.device];
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
            st.circuit.clear();
            stage.kind.model().describe(&mut st.circuit, device);
            st.plan.refresh(&st.circuit);
            st.plan.solve_own_dc(&st.circuit, rails);
            st.described = Some((stage.kind.clone(), key.0, key.1, key.2, key.3));
        }
    }
    for group in chain.topology.dc_groups() {
        if let [i] = *group {
            solve_stage(chain, v_t, state, i, false)?;
        } else {
            solve_group(chain, v_t, state, group)?;
        }
    }
    Ok(())
}

/// Sweep a group of direct-coupled stages until every direct link agrees: the node
/// voltage the driver's solution gives equals the base voltage of the stage it feeds.
/// (That mismatch is R_node·(linearised − actual input current) of the fed stage, so
/// when it vanishes every stage's solution holds with its real neighbours.)
fn solve_group(
    chain: &Chain,
    v_t: f64,
    state: &mut [DcState],
    group: &[usize],
) -> Result<(), DcError> {
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
            return Ok(());
        }
        last_mismatch = mismatch;
    }
    Err(DcError::NoConvergence {
        stage: chain.stages[group[0]].id.clone(),
        passes: MAX_PASSES,
    })
}
