//! Headroom: load lines, swing limits on the AC load line, clip input level of every
//! stage and the first stage to clip (DESIGN.md "Device model and definitions").

use crate::ac::AcState;
use crate::chain::Chain;
use crate::dc::DcState;
use crate::device::{OperatingPoint, Polarity};
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
    /// V_CE = (V_Cth − V_Eth) − I_C·(R_Cth + R_Eth/α), with α at the Q point.
    pub fn dc(op: &OperatingPoint, t: &DcTerminals) -> LoadLine {
        let r_dc = t.collector.r + t.emitter.r / op.alpha();
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
    pub dc_line: LoadLine,
    pub ac_line: LoadLine,
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
            dc_line: LoadLine::default(),
            ac_line: LoadLine::default(),
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
pub fn solve(chain: &Chain, dc: &[DcState], ac: &[AcState], out: &mut [Headroom]) -> usize {
    let mut first = 0;
    for (i, stage) in chain.stages.iter().enumerate() {
        let op = &dc[i].op;
        let model = stage.kind.model();
        let y_load = magnitude(ac[i].y_load);
        let r_load = if y_load > 0.0 {
            1.0 / y_load
        } else {
            f64::INFINITY
        };
        let device = &chain.devices[stage.device];
        let mut swing = model.swing(op, device.vce_sat, r_load);
        if device.polarity == Polarity::Pnp {
            // A PNP stage hangs upside down: its output moves the other way for the
            // same change of |I_C|, so the two limits swap sides (DESIGN.md, readings).
            swing = swing.mirrored();
        }
        let (limit, toward) = swing.limiting();
        let terminals = dc[i].terminals.expect("DC pass fills every stage");
        out[i] = Headroom {
            swing,
            clip_input_vpeak: limit / magnitude(ac[i].cumulative),
            toward,
            dc_line: LoadLine::dc(op, &terminals),
            ac_line: LoadLine::through(op, swing.r_line),
        };
        if out[i].clip_input_vpeak < out[first].clip_input_vpeak {
            first = i;
        }
    }
    first
}
