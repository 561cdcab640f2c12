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
use crate::device::{solve_bjt, BiasFault, OperatingPoint};
use crate::graph::Port;
use crate::network::{Freq, Thevenin, TwoPort};
use crate::stages::DcTerminals;
use num_complex::Complex64;

/// Passes allowed before the DC pass gives up.
const MAX_PASSES: usize = 200;
/// Node voltages agree when they move less than this, relative to the supply.
const TOLERANCE: f64 = 1e-12;
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
    /// Current drawn by the input network (divider + base) at its last solution.
    i_in: f64,
    /// Incremental conductance of the input network at DC.
    g_in: f64,
    /// Incremental conductance of the output node, the stage's own loads excluded.
    g_out: f64,
}

impl DcState {
    fn output_voltage(&self, chain: &Chain, stage: usize) -> f64 {
        match chain.stages[stage].kind.model().output() {
            crate::network::OutputTerminal::Collector => self.op.v_c,
            crate::network::OutputTerminal::Emitter => self.op.v_e,
        }
    }
}

/// Linearised current drawn by stage `d`'s input at node voltage `v`: i_in + g_in·(v − V_B).
fn input_draw(st: &DcState, v: f64) -> f64 {
    st.i_in + st.g_in * (v - st.op.v_b)
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
                load.with_norton_load(st.g_in, st.g_in * st.op.v_b - st.i_in)
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
                        state[s].g_in * state[s].op.v_b - state[s].i_in,
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
            let v_n = state[u].output_voltage(chain, u);
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

/// Solve the operating points of all stages into `state` (one entry per stage).
pub fn solve(chain: &Chain, v_t: f64, state: &mut [DcState]) -> Result<(), DcError> {
    let topo = &chain.topology;
    let passes = if topo.dc_needs_iteration {
        MAX_PASSES
    } else {
        1
    };
    let tolerance = TOLERANCE * chain.v_cc;
    // Start cold: the result must not depend on what was evaluated before.
    state.iter_mut().for_each(|s| *s = DcState::default());
    let mut last_moved = f64::INFINITY;
    for pass in 0..passes {
        let mut moved: f64 = 0.0;
        for &i in &topo.order {
            let stage = &chain.stages[i];
            let model = stage.kind.model();
            let device = &chain.devices[stage.device];
            let bias = model.bias();
            let (driver, coupling) = topo.stage_driver[i];
            let external = if coupling.is_none() {
                node_source_for(chain, state, driver, i)
            } else {
                Thevenin::OPEN
            };
            let base = bias.thevenin(chain.v_cc).parallel(external);
            let out_load = direct_load(chain, state, Port::Stage(i));
            let terminals = model.dc_terminals(chain.v_cc, out_load);
            let warm = (state[i].op.i_c > 0.0).then_some(state[i].op.v_be);
            let op = solve_bjt(
                device,
                v_t,
                base,
                terminals.emitter,
                terminals.collector,
                warm,
            )
            .map_err(|fault| DcError::Bias {
                stage: stage.id.clone(),
                fault,
            })?;
            let prev = state[i].op;
            moved = moved
                .max((op.v_b - prev.v_b).abs())
                .max((op.v_c - prev.v_c).abs())
                .max((op.v_e - prev.v_e).abs());

            // Linearise this stage at DC (capacitors open) for its neighbours.
            let hp = op.hybrid_pi(device, v_t);
            let ac = model.ac_terminals(Freq::Dc);
            let zero = Complex64::new(0.0, 0.0);
            let tp = TwoPort::from_hybrid_pi(
                &hp,
                zero,
                model.output(),
                Complex64::new(bias.conductance(), 0.0),
                ac.y_output,
                ac.third,
            );
            let y_load = if out_load.is_open() {
                zero
            } else {
                Complex64::new(1.0 / out_load.r, 0.0)
            };
            let z_ext = Complex64::new(
                if external.is_open() {
                    f64::INFINITY
                } else {
                    external.r
                },
                0.0,
            );
            let st = &mut state[i];
            st.op = op;
            st.terminals = Some(terminals);
            st.i_in = bias.current(op.v_b, chain.v_cc) + op.i_b;
            st.g_in = tp.input_admittance(y_load).re;
            st.g_out = if external.is_open() {
                tp.y22.re
            } else {
                tp.output_admittance(z_ext).re
            };
        }
        if !topo.dc_needs_iteration {
            return Ok(());
        }
        if pass > 0
            && (moved <= tolerance || (moved >= last_moved && moved <= ROUNDING_FLOOR * chain.v_cc))
        {
            return Ok(());
        }
        last_moved = moved;
    }
    let stage = topo
        .order
        .first()
        .map(|&i| chain.stages[i].id.clone())
        .unwrap_or_default();
    Err(DcError::NoConvergence {
        stage,
        passes: MAX_PASSES,
    })
}
