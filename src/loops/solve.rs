//! A loop group inside the AC pass (docs/definitions.md "Feedback links"). The chain
//! outside the loop meets the group only at its first stage's input, where the group
//! is a one-port: its input admittance (driver link cut, feedback kept) is all the
//! backward pass needs. In the forward pass the driver is known as a Thevenin source
//! and the group's network gives every loop stage's quantities in their readings:
//! `gain` in the closed loop, `r_out` with the forward outgoing links cut and the
//! feedback kept, `r_in` with the forward driver link cut (the driver's output
//! grounded) and the feedback kept, `load` the forward successors only.
//!
//! The loop's figures: Bode's return ratio of the g_m of the loop's first device. With
//! that controlled source taken as an independent current i_x (collector to emitter
//! inside the device) the network is linear in the EMF e and i_x:
//! v_out = A_0·e + b·i_x, v_b'e = c·e + d·i_x, so T = −g_m·d, A_∞ = A_0 − b·c/d (the
//! control nulled), A_0 the gain with g_m = 0, and the closed-loop gain
//! A_f = A_0 + g_m·b·c/(1 + T) = A_∞·T/(1 + T) + A_0/(1 + T) (Rosenstark's
//! asymptotic-gain form).

use super::group::{admittance_at, outside_successors, GroupNet, Setup, Upstream, Workspace};
use crate::ac::{branch_of, AcState};
use crate::chain::Chain;
use crate::dc::DcState;
use crate::network::{cdiv, Freq};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);
const ONE: Complex64 = Complex64::new(1.0, 0.0);

/// One loop's figures at the evaluation's frequency, per volt of source EMF.
#[derive(Debug, Clone, Default)]
pub struct LoopAc {
    /// T: Bode's return ratio of the loop's first device's g_m (signed).
    pub return_ratio: Complex64,
    /// A_∞: v(last stage's output)/EMF with the first device's control nulled.
    pub asymptotic_gain: Complex64,
    /// A_0: the same with that device's g_m = 0.
    pub direct_gain: Complex64,
    /// A_f = A_∞·T/(1 + T) + A_0/(1 + T).
    pub closed_loop_gain: Complex64,
    /// Every node voltage per volt of EMF of the stage the feedback returns to, by
    /// its description's node (its emitter carries the feedback current).
    pub to_volts: Vec<Complex64>,
    /// Loop position of the first device, `None` for a loop without any.
    pub first_device: Option<usize>,
    /// Each op-amp on the loop: its loop position and di_pin/dv_out, the pin current
    /// (into load, feedback network and successors) per volt of its output in the
    /// closed loop (its current-limit edge, docs/definitions.md "Op-amp").
    pub pin_rates: Vec<(usize, Complex64)>,
    /// The loop's network and solutions, reused by every evaluation.
    pub work: Workspace,
}

/// The admittance each loop position's successors outside the loop hang on its
/// output (their branches, filled by the backward pass).
pub fn outside(chain: &Chain, freq: Freq, ac: &[AcState], k: usize) -> Vec<Complex64> {
    let mut y = Vec::new();
    outside_into(chain, freq, ac, k, &mut y);
    y
}

/// [`outside`] into `y`.
fn outside_into(chain: &Chain, freq: Freq, ac: &[AcState], k: usize, y: &mut Vec<Complex64>) {
    y.clear();
    y.extend((0..chain.topology.feedback[k].stages.len()).map(|p| {
        outside_successors(chain, k, p)
            .map(|b| branch_of(chain, freq, ac, b))
            .sum::<Complex64>()
    }));
}

/// Backward pass at loop `k`'s first stage: its input admittance with the driver
/// link cut and the feedback kept, and the branch its driver sees. `work`: the
/// loop's buffers (a fresh set when `None`).
#[allow(clippy::too_many_arguments)]
pub fn backward(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    dc: &[DcState],
    ac: &mut [AcState],
    k: usize,
    work: Option<&mut Workspace>,
) {
    let l = &chain.topology.feedback[k];
    let mut fresh = Workspace::default();
    let ws = work.unwrap_or(&mut fresh);
    outside_into(chain, freq, ac, k, &mut ws.outside);
    ws.net.refill(chain, freq, v_t, dc, k, &ws.outside);
    let net = &ws.net;
    let setup = Setup {
        inject: Some((net.input[0], 0)),
        ..Setup::new(Upstream::Open)
    };
    let solved = net.solve_into(&setup, &mut ws.buffers, &mut ws.v);
    let y_in = admittance_at(solved.then_some(&ws.v[..]), net.input[0]);
    let b = l.to;
    ac[b].y_in = y_in;
    ac[b].y_branch =
        crate::ac::branch_admittance(freq.coupling(chain.topology.stage_driver[b].1), y_in);
}

/// Forward pass at loop `k`'s first stage, once its input voltage and `upstream` (its
/// driver through the link, per volt of EMF) are known: every loop stage's state, and
/// the loop's figures into `figures` when asked.
#[allow(clippy::too_many_arguments)]
pub fn forward(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    dc: &[DcState],
    ac: &mut [AcState],
    k: usize,
    upstream: Upstream,
    figures: Option<&mut LoopAc>,
) {
    let l = &chain.topology.feedback[k];
    let n = l.stages.len();
    // The loop's buffers: taken from its figures for this pass (a fresh set without).
    let mut figures = figures;
    let mut ws = figures
        .as_mut()
        .map_or_else(Workspace::default, |f| std::mem::take(&mut f.work));
    outside_into(chain, freq, ac, k, &mut ws.outside);
    ws.net.refill(chain, freq, v_t, dc, k, &ws.outside);
    let Workspace {
        net,
        buffers,
        outside: out_y,
        v,
        w,
        u,
    } = &mut ws;
    let net = &*net;
    let out_y = &*out_y;
    let dead = upstream.dead();
    let solved = net.solve_into(&Setup::new(upstream), buffers, v);
    let v = solved.then_some(&v[..]);
    // Admittance at `node` by a unit current in, for `setup` (into `w`).
    let mut admittance = |setup: Setup, node: usize| {
        let solved = net.solve_into(&setup, buffers, w);
        admittance_at(solved.then_some(&w[..]), node)
    };
    for (p, &i) in l.stages.iter().enumerate() {
        let (v_in, v_out) = v.map_or((ZERO, ZERO), |v| (v[net.input[p]], v[net.output[p]]));
        // r_out: forward outgoing links cut, feedback kept, EMF dead.
        let y_out = admittance(
            Setup {
                cut_after: Some(p),
                inject: Some((net.output[p], 0)),
                ..Setup::new(dead)
            },
            net.output[p],
        );
        // The node's admittance with the outside successors removed (what an
        // outside successor's branch sees besides the others).
        let y_inner = if out_y[p] == ZERO {
            ZERO
        } else {
            admittance(
                Setup {
                    outside_off: Some(p),
                    inject: Some((net.output[p], 0)),
                    ..Setup::new(dead)
                },
                net.output[p],
            )
        };
        let st = &mut ac[i];
        st.cumulative = v_out;
        st.gain = if v_in == ZERO {
            ZERO
        } else {
            cdiv(v_out, v_in)
        };
        st.y_out = y_out;
        st.y_node = if out_y[p] == ZERO {
            ZERO
        } else {
            y_inner + out_y[p]
        };
        if p > 0 {
            st.v_in = v_in;
            // r_in: driver link cut, the driver's output grounded, feedback kept.
            let y_in = admittance(
                Setup {
                    cut_before: Some(p),
                    inject: Some((net.input[p], 0)),
                    ..Setup::new(dead)
                },
                net.input[p],
            );
            st.y_in = y_in;
            let z_link = freq.coupling(chain.topology.stage_driver[i].1);
            st.y_branch = crate::ac::branch_admittance(z_link, y_in);
        }
    }
    // Loads: the forward successors' branches; the source impedance of a stage after
    // the first: its link and its driver's output (r_out with its other successors).
    for p in 0..n {
        let i = l.stages[p];
        let next = if p + 1 < n {
            ac[l.stages[p + 1]].y_branch
        } else {
            ZERO
        };
        ac[i].y_load = out_y[p] + next;
        if out_y[p] == ZERO {
            ac[i].y_node = ac[i].y_out + ac[i].y_load;
        }
        if p > 0 {
            let d = l.stages[p - 1];
            let z_link = freq.coupling(chain.topology.stage_driver[i].1);
            let z_node = crate::ac::impedance(ac[d].y_out + out_y[p - 1]);
            ac[i].z_source = z_link.map_or(Complex64::new(f64::INFINITY, 0.0), |z| z + z_node);
        }
    }
    if let Some(fig) = figures.as_deref_mut() {
        let to = net.node_of[0].len();
        fig.to_volts.clear();
        fig.to_volts
            .extend((0..to).map(|x| v.as_ref().map_or(ZERO, |v| v[net.node_of[0][x]])));
        fig.first_device = net.first_device();
        fig.pin_rates.clear();
        if let Some(v) = v.as_ref() {
            fig.pin_rates
                .extend(net.opamps.iter().enumerate().map(|(k, o)| {
                    let v_out = v[net.output[o.p]];
                    let rate = if v_out == ZERO {
                        ZERO
                    } else {
                        cdiv(v[net.source_current(k)], v_out)
                    };
                    (o.p, rate)
                }));
        }
        let last = net.output[n - 1];
        let closed = v.as_ref().map_or(ZERO, |v| v[last]);
        // The first device's controlled source as an independent one (g_m zeroed, EMF
        // on: A_0 and c; the unit source alone: b and d), and its gain: a transistor's
        // unit current i_x from collector to emitter inside the device (it leaves the
        // network at c, enters at e), control v_b'e; an op-amp's 1 V test source in
        // its source's place, control v₊ − v₋, A in the place of g_m
        // (docs/definitions.md "Feedback links").
        let first = net.first_device().and_then(|p| {
            if let Some(([b, c, e], hp)) = net.device(p) {
                let unit = Setup {
                    dead_gm: Some(p),
                    inject: Some((e, c)),
                    ..Setup::new(dead)
                };
                Some((p, Complex64::new(hp.g_m, 0.0), [b, e], unit))
            } else {
                let (_, o) = net.opamp(p)?;
                let unit = Setup {
                    test_source: Some(p),
                    ..Setup::new(dead)
                };
                Some((p, o.a, [o.plus, o.minus], unit))
            }
        });
        match first {
            Some((p, g_m, [x, y], unit)) => {
                let emf = Setup {
                    dead_gm: Some(p),
                    ..Setup::new(upstream)
                };
                let with_emf = net.solve_into(&emf, buffers, w).then_some(&w[..]);
                let with_ix = net.solve_into(&unit, buffers, u).then_some(&u[..]);
                let (a_0, cc) = with_emf.map_or((ZERO, ZERO), |v| (v[last], v[x] - v[y]));
                let (bb, dd) = with_ix.map_or((ZERO, ZERO), |v| (v[last], v[x] - v[y]));
                let t = -g_m * dd;
                fig.return_ratio = t;
                fig.direct_gain = a_0;
                // Undefined (NaN) when nothing returns to the control: d = 0.
                fig.asymptotic_gain = if dd == ZERO {
                    Complex64::new(f64::NAN, 0.0)
                } else {
                    a_0 - bb * cc / dd
                };
                fig.closed_loop_gain = a_0 + g_m * bb * cc / (ONE + t);
            }
            None => {
                fig.return_ratio = ZERO;
                fig.direct_gain = closed;
                fig.asymptotic_gain = closed;
                fig.closed_loop_gain = closed;
            }
        }
    }
    if let Some(fig) = figures {
        fig.work = ws;
    }
}

/// The margins of every loop (docs/definitions.md "Margins"), on the operating points
/// of `mid`.
pub fn margins(chain: &Chain, mid: &crate::evaluate::Evaluation) -> Vec<super::margins::Margins> {
    // One AC pass per frequency into buffers allocated once.
    let mut at = crate::response::AtFrequency::new(chain, mid);
    (0..chain.topology.feedback.len())
        .map(|k| {
            super::margins::margins(|f| {
                at.run(f);
                at.loops[k].return_ratio
            })
        })
        .collect()
}

/// The midband loop gain of the op-amp at loop position `p` of loop `k` in the closed
/// loop (docs/definitions.md "Op-amp", "Frequency response"): its source replaced by a
/// 1 V test source, the EMF dead behind the loop's driver, T = −A_0·(v₊ − v₋) produced.
/// `None` when position p has no op-amp or the network is singular.
pub fn opamp_loop_gain(
    chain: &Chain,
    mid: &crate::evaluate::Evaluation,
    k: usize,
    p: usize,
) -> Option<f64> {
    let net = midband_net(chain, mid, k);
    let (_, o) = net.opamp(p)?;
    let v = net.solve(&Setup {
        test_source: Some(p),
        ..Setup::new(driver_dead(chain, mid, k))
    })?;
    Some(-(o.a * (v[o.plus] - v[o.minus])).re)
}

/// Loop `k`'s network at midband on the evaluation `mid`, with the successors outside
/// the loop on its nodes.
fn midband_net(chain: &Chain, mid: &crate::evaluate::Evaluation, k: usize) -> GroupNet {
    let freq = Freq::Midband;
    GroupNet::build(
        chain,
        freq,
        mid.v_t,
        &mid.dc,
        k,
        &outside(chain, freq, &mid.ac, k),
    )
}

/// What drives loop `k`'s first stage with the EMF dead: its source impedance.
fn driver_dead(chain: &Chain, mid: &crate::evaluate::Evaluation, k: usize) -> Upstream {
    let z = mid.ac[chain.topology.feedback[k].to].z_source;
    if z.is_finite() {
        Upstream::Impedance(z)
    } else {
        Upstream::Open
    }
}

/// The midband resistance between description node `a` of loop position `pa` and
/// node `b` of position `pb` of loop `k` (a unit current in at `a`, out at `b`), EMF dead, with `open` left out
/// (the capacitor whose time constant is asked for); every other capacitor as at
/// midband. ∞ when no current can flow between them. For the time-constant estimates
/// of `response` (the loop closed, as the exact response has it).
pub fn resistance_between(
    chain: &Chain,
    mid: &crate::evaluate::Evaluation,
    k: usize,
    (pa, a): (usize, usize),
    (pb, b): (usize, usize),
    open: Option<(usize, usize)>,
) -> f64 {
    let net = midband_net(chain, mid, k);
    let upstream = driver_dead(chain, mid, k);
    let (na, nb) = (net.node_of[pa][a], net.node_of[pb][b]);
    match net.solve(&Setup {
        inject: Some((na, nb)),
        open,
        ..Setup::new(upstream)
    }) {
        Some(v) => (v[na] - v[nb]).re,
        None => f64::INFINITY,
    }
}
