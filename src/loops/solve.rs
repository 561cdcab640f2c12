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

use super::group::{admittance_at, outside_successors, GroupNet, Setup, Upstream};
use crate::ac::{branch_of, AcState};
use crate::chain::Chain;
use crate::dc::DcState;
use crate::network::{cdiv, Freq};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);
const ONE: Complex64 = Complex64::new(1.0, 0.0);

/// One loop's figures at the evaluation's frequency, per volt of source EMF.
#[derive(Debug, Clone, Default, PartialEq)]
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
}

/// The admittance each loop position's successors outside the loop hang on its
/// output (their branches, filled by the backward pass).
pub fn outside(chain: &Chain, freq: Freq, ac: &[AcState], k: usize) -> Vec<Complex64> {
    (0..chain.topology.feedback[k].stages.len())
        .map(|p| {
            outside_successors(chain, k, p)
                .map(|b| branch_of(chain, freq, ac, b))
                .sum()
        })
        .collect()
}

/// Backward pass at loop `k`'s first stage: its input admittance with the driver
/// link cut and the feedback kept, and the branch its driver sees.
pub fn backward(chain: &Chain, freq: Freq, v_t: f64, dc: &[DcState], ac: &mut [AcState], k: usize) {
    let l = &chain.topology.feedback[k];
    let net = GroupNet::build(chain, freq, v_t, dc, k, &outside(chain, freq, ac, k));
    let setup = Setup {
        inject: Some((net.input[0], 0)),
        ..Setup::new(Upstream::Open)
    };
    let y_in = admittance_at(net.solve(&setup), net.input[0]);
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
    let out_y = outside(chain, freq, ac, k);
    let net = GroupNet::build(chain, freq, v_t, dc, k, &out_y);
    let dead = upstream.dead();
    let v = net.solve(&Setup::new(upstream));
    for (p, &i) in l.stages.iter().enumerate() {
        let (v_in, v_out) = v
            .as_ref()
            .map_or((ZERO, ZERO), |v| (v[net.input[p]], v[net.output[p]]));
        // r_out: forward outgoing links cut, feedback kept, EMF dead.
        let y_out = admittance_at(
            net.solve(&Setup {
                cut_after: Some(p),
                inject: Some((net.output[p], 0)),
                ..Setup::new(dead)
            }),
            net.output[p],
        );
        // The node's admittance with the outside successors removed (what an
        // outside successor's branch sees besides the others).
        let y_inner = if out_y[p] == ZERO {
            ZERO
        } else {
            admittance_at(
                net.solve(&Setup {
                    outside_off: Some(p),
                    inject: Some((net.output[p], 0)),
                    ..Setup::new(dead)
                }),
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
            let y_in = admittance_at(
                net.solve(&Setup {
                    cut_before: Some(p),
                    inject: Some((net.input[p], 0)),
                    ..Setup::new(dead)
                }),
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
    if let Some(fig) = figures {
        let to = net.node_of[0].len();
        fig.to_volts.clear();
        fig.to_volts
            .extend((0..to).map(|x| v.as_ref().map_or(ZERO, |v| v[net.node_of[0][x]])));
        fig.first_device = net.first_device();
        let last = net.output[n - 1];
        let closed = v.as_ref().map_or(ZERO, |v| v[last]);
        match net
            .first_device()
            .and_then(|p| net.device(p).map(|d| (p, d)))
        {
            Some((p, ([b, c, e], hp))) => {
                // g_m zeroed; EMF on: A_0 and c. Unit i_x from collector to emitter
                // inside the device (it leaves the network at c, enters at e): b, d.
                let with_emf = net.solve(&Setup {
                    dead_gm: Some(p),
                    ..Setup::new(upstream)
                });
                let with_ix = net.solve(&Setup {
                    dead_gm: Some(p),
                    inject: Some((e, c)),
                    ..Setup::new(dead)
                });
                let (a_0, cc) = with_emf.map_or((ZERO, ZERO), |v| (v[last], v[b] - v[e]));
                let (bb, dd) = with_ix.map_or((ZERO, ZERO), |v| (v[last], v[b] - v[e]));
                let g_m = Complex64::new(hp.g_m, 0.0);
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
    let freq = Freq::Midband;
    let net = GroupNet::build(
        chain,
        freq,
        mid.v_t,
        &mid.dc,
        k,
        &outside(chain, freq, &mid.ac, k),
    );
    let b_first = chain.topology.feedback[k].to;
    let z = mid.ac[b_first].z_source;
    let upstream = if z.is_finite() {
        Upstream::Impedance(z)
    } else {
        Upstream::Open
    };
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
