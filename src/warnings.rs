//! Warnings a designer expects: soft bias dividers, a Q point near saturation, part
//! dissipation, hazardous supply voltages, a stage that clips at the planned input,
//! device capacitances that do not fit together (C_π clamped at zero), a JFET gate
//! that would conduct or a drain near the ohmic edge, an op-amp that would slew.

use crate::chain::Chain;
use crate::evaluate::Evaluation;
use crate::units::{format_si, Level};
use serde::Serialize;

/// DC extra-low voltage: at most 60 V ripple-free DC (IEC 61140 / IEC 60449 band I; from memory).
pub const ELV_DC_LIMIT: f64 = 60.0;
/// A stiff divider carries at least ten times the base current (common practice, no source).
pub const STIFF_DIVIDER_RATIO: f64 = 10.0;
/// V_CE margin above saturation below which the Q point is flagged.
pub const SATURATION_MARGIN: f64 = 1.0;
/// Collector current below which a stage is practically cut off.
pub const LOW_CURRENT: f64 = 1e-6;

/// Every kind [`collect`] gives, in a fixed order (`spread --require "warnings@KIND …"`
/// counts them per build).
pub const KINDS: [&str; 11] = [
    "hazardous_voltage",
    "soft_divider",
    "gate_forward",
    "near_ohmic",
    "near_saturation",
    "c_pi_clamped",
    "low_current",
    "transistor_dissipation",
    "resistor_dissipation",
    "clips_at_planned_input",
    "slew_rate",
];

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Warning {
    /// Stage id, or None for the whole chain.
    pub stage: Option<String>,
    pub kind: &'static str,
    pub message: String,
}

/// The hazardous-voltage caution, shared by the table, `check` and the README.
pub fn hazard_caution(v_cc: f64) -> String {
    format!(
        "supply {} is above the {} V DC extra-low-voltage limit: hazardous voltage. Build and test only under the electrical codes in force where you work and with licensed practice; ampchain's numbers are no safety assessment",
        format_si(v_cc, "V"),
        ELV_DC_LIMIT
    )
}

/// All warnings for an evaluated chain; `level` is the planned input, if any.
pub fn collect(chain: &Chain, ev: &Evaluation, level: Option<Level>) -> Vec<Warning> {
    let mut out = Vec::new();
    // The largest voltage between any two rails (or a rail and ground).
    if chain.span() > ELV_DC_LIMIT {
        out.push(Warning {
            stage: None,
            kind: "hazardous_voltage",
            message: hazard_caution(chain.span()),
        });
    }
    for (i, stage) in chain.stages.iter().enumerate() {
        let op = &ev.dc[i].op;
        let device = chain.device_of(i);
        let model = stage.kind.model();
        let mut warn = |kind: &'static str, message: String| {
            out.push(Warning {
                stage: Some(stage.id.clone()),
                kind,
                message,
            })
        };
        // A stage without a device (passive) has no operating point to judge; an op-amp
        // stage has no transistor's (its own warning follows).
        if let (Some(amp), Some(level)) = (device.opamp, level) {
            slew_rate_warning(chain, ev, i, &amp, level, &mut warn);
        }
        if stage.device.is_some() && device.opamp.is_none() {
            let bias = model.bias();
            match (bias.r_top, bias.r_bottom) {
                (Some(_), Some(r_bottom)) => {
                    let i_divider = crate::stages::divider_current(
                        op,
                        r_bottom,
                        chain.stage_rails(i).bottom,
                        device,
                    );
                    if i_divider < STIFF_DIVIDER_RATIO * op.i_b {
                        warn(
                            "soft_divider",
                            format!(
                                "bias divider carries {}, less than {}× the base current {}; the Q point will follow β (a stiff divider carries at least {}×)",
                                format_si(i_divider, "A"),
                                STIFF_DIVIDER_RATIO,
                                format_si(op.i_b, "A"),
                                STIFF_DIVIDER_RATIO
                            ),
                        );
                    }
                }
                (Some(_), None)
                    if ev.dc[i].op.i_b > 0.0 && chain.topology.stage_driver[i].1.is_some() =>
                {
                    warn(
                        "soft_divider",
                        "base fed through r_top alone: the Q point follows β directly".to_string(),
                    )
                }
                _ => {}
            }
            if let Some(j) = device.jfet_model() {
                // V_GS outside (V_P, 0): at V_GS > 0 the gate–channel junction is
                // forward biased (it conducts from about 0.5 V; the model draws no gate
                // current, docs/definitions.md "JFET").
                if op.v_be > 0.0 {
                    warn(
                        "gate_forward",
                        format!(
                            "V_GS = {} at the Q point, outside (V_P, 0): the gate–channel junction is forward biased and would conduct (from about 0.5 V), which the square law does not model",
                            format_si(j.sign * op.v_be, "V")
                        ),
                    );
                }
                let edge = j.overdrive(op.v_be);
                if op.v_ce - edge < SATURATION_MARGIN {
                    warn(
                        "near_ohmic",
                        format!(
                            "V_DS = {} at the Q point, within {} V of the ohmic edge V_GS − V_P = {}",
                            format_si(op.v_ce, "V"),
                            SATURATION_MARGIN,
                            format_si(edge, "V")
                        ),
                    );
                }
            } else if op.v_ce - device.vce_sat < SATURATION_MARGIN {
                warn(
                    "near_saturation",
                    format!(
                        "V_CE = {} at the Q point, within {} V of saturation (vce_sat {})",
                        format_si(op.v_ce, "V"),
                        SATURATION_MARGIN,
                        format_si(device.vce_sat, "V")
                    ),
                );
            }
            if let Some(c_pi) = device.c_pi_unclamped(op.i_c / ev.v_t) {
                if c_pi < 0.0 {
                    warn(
                        "c_pi_clamped",
                        format!(
                            "C_π = g_m/(2π·f_T) − C_μ comes out at {} at I_C = {} (device \"{}\": transition_frequency {}, c_bc {}); taken as 0. f_T falls at low currents: give the f_T the device has at this current",
                            format_si(c_pi, "F"),
                            format_si(op.i_c, "A"),
                            device.name,
                            format_si(device.f_t.unwrap_or(f64::NAN), "Hz"),
                            format_si(device.c_bc, "F"),
                        ),
                    );
                }
            }
            if op.i_c < LOW_CURRENT {
                warn(
                    "low_current",
                    format!(
                        "I_C = {} at the Q point: the stage is practically cut off",
                        format_si(op.i_c, "A")
                    ),
                );
            }
            let p_transistor = op.transistor_power();
            if p_transistor > device.max_dissipation {
                warn(
                    "transistor_dissipation",
                    format!(
                        "transistor dissipates {}, above its {} rating (device \"{}\"): it will overheat",
                        format_si(p_transistor, "W"),
                        format_si(device.max_dissipation, "W"),
                        device.name
                    ),
                );
            }
        }
        let powers = crate::stages::stage_resistor_power(chain, ev, i);
        for (name, p) in powers {
            if p > chain.resistor_rating {
                warn(
                    "resistor_dissipation",
                    format!(
                        "{name} dissipates {} at DC, above the {} resistor rating",
                        format_si(p, "W"),
                        format_si(chain.resistor_rating, "W")
                    ),
                );
            }
        }
        if let Some(level) = level {
            let h = &ev.headroom[i];
            if level.vpeak() > h.clip_input_vpeak {
                warn(
                    "clips_at_planned_input",
                    format!(
                        "clips toward {} at the planned input: it takes only {} peak at the source",
                        h.toward,
                        format_si(h.clip_input_vpeak, "V")
                    ),
                );
            }
        }
    }
    out
}

/// An op-amp whose full-power bandwidth SR/(2π·V_peak) at the planned level (the peak
/// at its output pin) lies below the chain's high corner (docs/definitions.md
/// "Op-amp"): a full-level signal in the pass band would slew. Judged at midband only.
fn slew_rate_warning(
    chain: &Chain,
    ev: &Evaluation,
    i: usize,
    amp: &crate::device::opamp::OpAmp,
    level: Level,
    warn: &mut impl FnMut(&'static str, String),
) {
    if ev.freq != crate::network::Freq::Midband {
        return;
    }
    let v_peak = ev.ac[i].cumulative.norm() * level.vpeak();
    let Some(f_power) = amp.full_power_bandwidth(v_peak) else {
        return;
    };
    let Some(f_high) = high_corner(chain, ev) else {
        return;
    };
    if f_power < f_high {
        warn(
            "slew_rate",
            format!(
                "swings {} peak at the planned input; its slew rate {} carries that swing only up to {} (SR/(2π·V_peak)), below the chain's high corner {}: a full-level signal near the top of the band will slew",
                format_si(v_peak, "V"),
                format_si(amp.slew_rate.unwrap_or(f64::NAN), "V/s"),
                format_si(f_power, "Hz"),
                format_si(f_high, "Hz"),
            ),
        );
    }
}

/// The chain's high corner: the lowest −3 dB high corner of any load, exact
/// (`response::corners`), `None` when no load has one in the search range.
fn high_corner(chain: &Chain, mid: &Evaluation) -> Option<f64> {
    use crate::response::{corners, AtFrequency, SearchRange};
    let search = SearchRange {
        from: corners::SEARCH_FROM,
        to: corners::SEARCH_TO,
        per_decade: corners::SEARCH_PER_DECADE,
    };
    let mut at = AtFrequency::new(chain, mid);
    corners::find_all(chain, mid, &mut at, &search)
        .iter()
        .filter_map(|c| c.high.frequency)
        .min_by(f64::total_cmp)
}

/// A loop's phase margin below which it is flagged: 45° (common practice, no source).
pub const LOW_PHASE_MARGIN_DEG: f64 = 45.0;

/// Loops whose phase margin is below [`LOW_PHASE_MARGIN_DEG`], and unstable loops, from
/// their reports (docs/definitions.md "Feedback links"): a gain margin below 0 dB (|T|
/// above one where its phase reaches 180°), or, when `midband`, T below −1 (feedback that
/// adds and outgrows the signal: a real closed-loop pole in the right half-plane).
pub fn loop_margins(loops: &[crate::report::LoopReport], midband: bool) -> Vec<Warning> {
    let mut out = Vec::new();
    for l in loops {
        let (from, to) = (crate::text::quote(&l.from), crate::text::quote(&l.to));
        let adds = midband && l.return_ratio < -1.0;
        let margin = l
            .gain_margin_db
            .zip(l.gain_crossing_hz)
            .filter(|(gm, _)| *gm < 0.0);
        let why = match (adds, margin) {
            (true, _) => Some(format!(
                "has T = {:.4} at midband: its feedback adds and outgrows the signal (T below −1; count the inverting stages on the loop and check \"into\"), so the closed loop is unstable",
                l.return_ratio
            )),
            (false, Some((gm, f))) => Some(format!(
                "has a gain margin of {gm:.1} dB at {}: |T| is above one where its phase reaches 180°, so the closed loop is unstable (at best conditionally stable)",
                format_si(f, "Hz")
            )),
            (false, None) => None,
        };
        if let Some(why) = why {
            out.push(Warning {
                stage: Some(l.to.clone()),
                kind: "unstable_loop",
                message: format!(
                    "the loop from {from} back to {to} {why}: the built circuit oscillates or latches into saturation or cutoff, and the figures above are those of an equilibrium it does not stay at"
                ),
            });
        }
        if let Some(pm) = l.phase_margin_deg {
            if pm < LOW_PHASE_MARGIN_DEG {
                out.push(Warning {
                    stage: Some(l.to.clone()),
                    kind: "low_phase_margin",
                    message: format!(
                        "the loop from {from} back to {to} has {pm:.1}° of phase margin at {} (below {}°): the closed-loop response peaks and the loop may oscillate; a compensation capacitor or less loop gain gives more",
                        format_si(l.phase_crossing_hz.unwrap_or(f64::NAN), "Hz"),
                        LOW_PHASE_MARGIN_DEG
                    ),
                });
            }
        }
    }
    out
}
