//! Headroom: load lines, swing limits on the AC load line, clip input level of every
//! stage and the first stage to clip (docs/definitions.md "Device model and definitions").

use crate::ac::AcState;
use crate::chain::Chain;
use crate::dc::DcState;
use crate::device::DeviceModel;
use crate::device::{OperatingPoint, Polarity};
use crate::loops::LoopAc;
use crate::network::Freq;
use crate::stages::{DcTerminals, Swing, Toward};
use num_complex::Complex64;

/// A straight line in the (V_CE, I_C) plane through its two axis intercepts.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct LoadLine {
    pub v_ce_intercept: f64,
    pub i_c_intercept: f64,
    /// dI_C/dV_CE in A/V (negative).
    pub slope: f64,
}

impl LoadLine {
    /// The line through the Q point with V_CE falling by `r` volts per ampere of I_C.
    pub fn through(op: &OperatingPoint, r: f64) -> LoadLine {
        LoadLine {
            v_ce_intercept: op.v_ce + op.i_c * r,
            i_c_intercept: op.i_c + op.v_ce / r,
            slope: -1.0 / r,
        }
    }

    /// DC load line from the Thevenin networks on collector and emitter:
    /// V_CE = (V_Cth − V_Eth) − I_C·(R_Cth + R_Eth/α), with α at the Q point. An open
    /// network (a terminal that only a current source feeds: a cascode's upper emitter
    /// over a lower stage without Early effect) makes R_DC infinite: I_C cannot move,
    /// and the line is I_C = I_CQ (docs/definitions.md).
    pub fn dc(op: &OperatingPoint, t: &DcTerminals) -> LoadLine {
        let r_dc = t.collector.r + t.emitter.r / op.alpha();
        if r_dc.is_infinite() {
            return LoadLine {
                v_ce_intercept: f64::INFINITY,
                i_c_intercept: op.i_c,
                slope: 0.0,
            };
        }
        let v_open = t.collector.v - t.emitter.v;
        LoadLine {
            v_ce_intercept: v_open,
            i_c_intercept: v_open / r_dc,
            slope: -1.0 / r_dc,
        }
    }
}

/// Headroom of one stage.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Headroom {
    pub swing: Swing,
    /// Peak source EMF at which the output reaches its smaller limit.
    pub clip_input_vpeak: f64,
    pub toward: Toward,
    /// The load lines; `None` for a stage without a device.
    pub dc_line: Option<LoadLine>,
    pub ac_line: Option<LoadLine>,
}

impl Default for Headroom {
    fn default() -> Self {
        Headroom {
            swing: Swing {
                limit_up: 0.0,
                up_toward: Toward::Cutoff,
                limit_down: 0.0,
                down_toward: Toward::Saturation,
                r_line: 0.0,
            },
            clip_input_vpeak: 0.0,
            toward: Toward::Cutoff,
            dc_line: None,
            ac_line: None,
        }
    }
}

/// |z|; at midband every quantity is real and |z| = |Re z| (no hypot needed).
fn magnitude(z: Complex64) -> f64 {
    if z.im == 0.0 {
        z.re.abs()
    } else {
        z.norm()
    }
}

/// Fill `out` for every stage; returns the index of the first stage to clip (the
/// lowest clip input level).
pub fn solve(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    dc: &[DcState],
    ac: &[AcState],
    loops: &[LoopAc],
    out: &mut [Headroom],
) -> usize {
    let mut first = 0;
    let topo = &chain.topology;
    for (i, stage) in chain.stages.iter().enumerate() {
        let op = &dc[i].op;
        // Every stage on a loop uses region limits; the stage a loop returns to reads
        // its nodes from the loop's network (the feedback current enters inside it).
        let looped = topo.loop_of[i];
        let swing = if stage.kind.model().keeps_load_lines() && looped.is_none() {
            load_line_swing(chain, i, op, &ac[i])
        } else if let Some(net) = &dc[i].opamp {
            // On a loop the pin's current per volt comes from the closed loop.
            let on_loop = looped.and_then(|k| {
                let l = loops.get(k)?;
                let p = topo.feedback[k].stages.iter().position(|&s| s == i)?;
                l.pin_rates.iter().find(|r| r.0 == p).map(|r| r.1)
            });
            opamp_swing(chain, freq, i, net, &dc[i], &ac[i], on_loop)
        } else {
            let own = looped
                .filter(|&k| topo.feedback[k].to == i)
                .and_then(|k| loops.get(k))
                .map(|l| &l.to_volts[..]);
            region_swing(chain, freq, v_t, i, &dc[i], &ac[i], own)
        };
        let (limit, toward) = swing.limiting();
        // A stage without a device has no load lines and never clips.
        let (dc_line, ac_line) = match dc[i].terminals {
            Some(terminals) => (
                Some(LoadLine::dc(op, &terminals)),
                Some(LoadLine::through(op, swing.r_line)),
            ),
            None => (None, None),
        };
        out[i] = Headroom {
            swing,
            clip_input_vpeak: limit / magnitude(ac[i].cumulative),
            toward,
            dc_line,
            ac_line,
        };
        if out[i].clip_input_vpeak < out[first].clip_input_vpeak {
            first = i;
        }
    }
    first
}

/// v1's load-line limits of stage `i` (docs/definitions.md, "Load lines and swing
/// limits") for the magnitude of its successors' load.
fn load_line_swing(chain: &Chain, i: usize, op: &OperatingPoint, ac: &AcState) -> Swing {
    let stage = &chain.stages[i];
    let y_load = magnitude(ac.y_load);
    let r_load = if y_load > 0.0 {
        1.0 / y_load
    } else {
        f64::INFINITY
    };
    let device = chain.device_of(i);
    let swing = stage.kind.model().swing(op, device.vce_sat, r_load);
    if device.polarity == Polarity::Pnp {
        // A PNP stage hangs upside down: its output moves the other way for the
        // same change of |I_C|, so the two limits swap sides.
        swing.mirrored()
    } else {
        swing
    }
}

/// Region limits of an op-amp stage (docs/definitions.md "Op-amp"): at the output
/// pin, the rails less `swing_margin` ("rail") and the pin current — into the load
/// and the feedback network — at ± `output_current_limit` ("current_limit"), the
/// current moving by di_pin/dv_out per volt of output (at a frequency: its magnitude,
/// signed by its real part; on a loop, `on_loop`: the rate in the closed loop). The pin
/// is the stage's output node, so the distances are output volts; `cumulative` turns
/// them into EMF as for every stage.
fn opamp_swing(
    chain: &Chain,
    freq: Freq,
    i: usize,
    net: &crate::circuit::opamp::OpAmpNetwork,
    st: &DcState,
    ac: &AcState,
    on_loop: Option<Complex64>,
) -> Swing {
    use crate::circuit::opamp::{pin_swing, Edge};
    let Some(amp) = chain.device_of(i).opamp else {
        return Swing::NONE;
    };
    let Some(rate) = on_loop.or_else(|| net.pin_rate(&amp, freq, ac.y_load)) else {
        return Swing::NONE;
    };
    let di_dv = if rate.im == 0.0 {
        rate.re
    } else {
        rate.norm().copysign(rate.re)
    };
    let rails = chain.stage_rails(i);
    let p = pin_swing(&amp, (rails.top, rails.bottom), st.v_out, st.op.i_c, di_dv);
    let toward = |e: Edge| match e {
        Edge::Rail => Toward::Rail,
        Edge::CurrentLimit => Toward::CurrentLimit,
    };
    Swing {
        limit_up: p.up.0,
        up_toward: toward(p.up.1),
        limit_down: p.down.0,
        down_toward: toward(p.down.1),
        r_line: f64::INFINITY,
    }
}

/// Region limits of a stage's transistor (docs/definitions.md, "Region limits"):
/// the distance of I_C to 0 ("cutoff") and of V_CE (at the terminals) to `vce_sat`
/// ("saturation"), each divided by the rate at which that quantity moves per volt of
/// source EMF in the linearised network of the whole chain. The EMF that reaches an
/// edge moves the output by `cumulative`·EMF: up or down decides which limit it is;
/// a side that no edge reaches is ∞ (null in reports). The AC load line runs through
/// Q with the ratio of the two rates.
fn region_swing(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    i: usize,
    st: &DcState,
    ac: &AcState,
    own: Option<&[Complex64]>,
) -> Swing {
    let device = chain.device_of(i);
    let op = &st.op;
    let hp = device.small_signal(op, v_t);
    let (Some(d), Some(t)) = (st.circuit.bjt_nodes(), st.circuit.bjt_terminals()) else {
        return Swing::NONE;
    };
    let v = match own {
        Some(v) if v.len() == st.circuit.n_nodes() => v.iter().copied().collect(),
        _ => match st
            .plan
            .node_voltages(&st.circuit, &hp, freq, ac.v_in, ac.cumulative)
        {
            Some(v) => v,
            None => return Swing::NONE,
        },
    };
    // Small-signal collector current into the device: g_m·v_b'e + g_o·v_c'e; for a
    // PNP the magnitudes |I_C| and |V_CE| move against the NPN-signed quantities.
    let s = device.sign();
    let rate_i = s * (hp.g_m * (v[d.b] - v[d.e]) + hp.g_o * (v[d.c] - v[d.e]));
    let edges = device.region_edges(op);
    // A JFET's ohmic edge V_DS = V_GS − V_P moves with V_GS: its distance moves by
    // the rate of V_DS less that of V_GS.
    let rate_v = s * (v[t.c] - v[t.e]);
    let rate_edge = if edges.voltage_follows_control {
        rate_v - s * (v[t.b] - v[t.e])
    } else {
        rate_v
    };
    let mut swing = Swing::NONE;
    let output = ac.cumulative;
    for ((distance, toward), rate) in [(edges.current, rate_i), (edges.voltage, rate_edge)] {
        let r = rate.norm();
        if r == 0.0 || !r.is_finite() {
            continue;
        }
        // The EMF −distance/rate reaches the edge; the output then moves by
        // cumulative·EMF, whose sign is that of −Re(cumulative·conj(rate)).
        let limit = output.norm() * distance / r;
        let up = (output * rate.conj()).re < 0.0;
        if up && limit < swing.limit_up {
            swing.limit_up = limit;
            swing.up_toward = toward;
        } else if !up && limit < swing.limit_down {
            swing.limit_down = limit;
            swing.down_toward = toward;
        }
    }
    // The AC load line: dI_C/dV_CE along the swing is rate_i/rate_v.
    let r_line = -(rate_v / rate_i).re;
    swing.r_line = if r_line.is_finite() && r_line > 0.0 {
        r_line
    } else {
        f64::INFINITY
    };
    swing
}
