//! Reports: the numbers of one evaluation gathered for people and scripts, and the
//! exporters that write them (one file per format behind [`Exporter`]).

pub mod check;
pub mod csv;
pub mod fit;
mod json;
pub mod noise;
mod position;
mod response;
pub mod response_table;
pub mod spread;
pub mod table;

pub use csv::CsvExporter;
pub use json::JsonExporter;
pub use response::{LoadResponse, ResponseReport, StageResponse, SweepReport};
pub use table::table_format;
pub use table::TableExporter;

use crate::chain::Chain;
use crate::device::opamp::OpAmp;
use crate::device::DeviceModel;
use crate::device::{OperatingPoint, Quantities};
use crate::evaluate::Evaluation;
use crate::graph::Port;
use crate::headroom::LoadLine;
use crate::stages::Toward;
use crate::units::Level;
use crate::warnings::{self, Warning};
use serde::Serialize;
use std::collections::BTreeMap;

/// A format a report can be written in (`R`: the report, `plan`'s by default).
pub trait Exporter<R = PlanReport> {
    fn export(&self, report: &R, out: &mut dyn std::io::Write) -> std::io::Result<()>;
}

#[derive(Debug, Clone, Serialize)]
pub struct LevelReport {
    pub vrms: f64,
    pub vpeak: f64,
    pub dbu: f64,
}

impl From<Level> for LevelReport {
    fn from(l: Level) -> Self {
        LevelReport {
            vrms: l.vrms,
            vpeak: l.vpeak(),
            dbu: l.dbu(),
        }
    }
}

#[derive(Debug, Clone, Serialize)]
pub struct SourceReport {
    pub resistance: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct DissipationReport {
    /// `None` (null) for a kind without a device.
    pub transistor: Option<f64>,
    pub resistors: BTreeMap<&'static str, f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct StageReport {
    pub id: String,
    #[serde(rename = "type")]
    pub kind: &'static str,
    /// `None` (null) for a kind without a device (passive).
    pub device: Option<String>,
    pub input_from: String,
    /// The device's operating point and small-signal values by its own names
    /// (`DeviceModel::operating_quantities`, `small_signal_quantities`).
    pub operating_point: Option<Quantities>,
    pub small_signal: Option<Quantities>,
    /// The operating point itself, for the tables and charts.
    #[serde(skip)]
    pub op: OperatingPoint,
    pub r_in: f64,
    pub r_out: f64,
    pub load: f64,
    pub gain: f64,
    pub gain_db: f64,
    /// Phase of `gain` in degrees, (−180, 180]: 0 or 180 at midband.
    pub gain_phase_deg: f64,
    pub cumulative_gain: f64,
    pub input_vrms: f64,
    pub output_vrms: f64,
    pub output_dbu: f64,
    pub limit_up: f64,
    pub limit_down: f64,
    pub clip_input_vpeak: f64,
    pub clip_input_vrms: f64,
    /// `None` (null) for a stage that never clips (passive).
    pub clip_toward: Option<Toward>,
    pub headroom_db: f64,
    pub dc_load_line: Option<LoadLine>,
    pub ac_load_line: Option<LoadLine>,
    pub dissipation: DissipationReport,
}

#[derive(Debug, Clone, Serialize)]
pub struct LoadReport {
    pub id: String,
    pub from: String,
    pub resistance: f64,
    pub gain: f64,
    pub gain_db: f64,
    /// Phase of `gain` in degrees, (−180, 180].
    pub gain_phase_deg: f64,
    pub output_vrms: f64,
    pub output_dbu: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct FirstClip {
    pub stage: String,
    pub input_vrms: f64,
    pub input_vpeak: f64,
    pub input_dbu: f64,
    pub toward: Toward,
}

/// One feedback loop's figures (docs/definitions.md "Feedback links"), at the
/// evaluation's frequency; the margins from the scan of T(jω).
#[derive(Debug, Clone, Serialize)]
pub struct LoopReport {
    pub from: String,
    pub to: String,
    pub into: &'static str,
    /// The stage whose device's g_m the return ratio is taken of (null: no device).
    pub device_stage: Option<String>,
    pub return_ratio: f64,
    /// `None` (null) when nothing returns to the control (T = 0: A_∞ is undefined).
    pub asymptotic_gain: Option<f64>,
    pub direct_gain: f64,
    pub closed_loop_gain: f64,
    pub desensitivity_db: f64,
    pub phase_margin_deg: Option<f64>,
    pub phase_crossing_hz: Option<f64>,
    pub gain_margin_db: Option<f64>,
    pub gain_crossing_hz: Option<f64>,
}

impl LoopReport {
    /// The report of every loop of an evaluated chain (the margin scan runs here).
    pub fn all(chain: &Chain, ev: &Evaluation) -> Vec<LoopReport> {
        if chain.topology.feedback.is_empty() {
            return Vec::new();
        }
        let margins = crate::loops::solve::margins(chain, ev);
        chain
            .topology
            .feedback
            .iter()
            .zip(&ev.loops)
            .zip(margins)
            .map(|((l, f), m)| LoopReport {
                from: chain.stages[l.from].id.clone(),
                to: chain.stages[l.to].id.clone(),
                into: match l.into {
                    crate::graph::FeedbackInto::Input => "input",
                    crate::graph::FeedbackInto::Emitter => "emitter",
                },
                device_stage: f.first_device.map(|p| chain.stages[l.stages[p]].id.clone()),
                return_ratio: signed(f.return_ratio),
                asymptotic_gain: f
                    .asymptotic_gain
                    .is_finite()
                    .then(|| signed(f.asymptotic_gain)),
                direct_gain: signed(f.direct_gain),
                closed_loop_gain: signed(f.closed_loop_gain),
                // 20·log10|1 + T|
                desensitivity_db: db((1.0 + f.return_ratio).norm()),
                phase_margin_deg: m.phase_margin_deg,
                phase_crossing_hz: m.phase_crossing_hz,
                gain_margin_db: m.gain_margin_db,
                gain_crossing_hz: m.gain_crossing_hz,
            })
            .collect()
    }
}

/// One rail of the chain.
#[derive(Debug, Clone, Serialize)]
pub struct RailReport {
    pub name: String,
    pub voltage: f64,
}

/// Everything `plan` reports.
#[derive(Debug, Clone, Serialize)]
pub struct PlanReport {
    pub title: Option<String>,
    /// The most positive rail (a v1 file's supply).
    pub supply: f64,
    /// Every rail by name with its voltage (v2; one entry, "supply", for a v1 file).
    pub rails: Vec<RailReport>,
    pub temperature: f64,
    pub thermal_voltage: f64,
    /// Hz; None (JSON null) for midband.
    pub frequency: Option<f64>,
    pub input: LevelReport,
    pub source: SourceReport,
    pub stages: Vec<StageReport>,
    pub loads: Vec<LoadReport>,
    pub first_clip: FirstClip,
    /// Every feedback loop (empty without one).
    pub loops: Vec<LoopReport>,
    pub warnings: Vec<Warning>,
    /// With `plan --noise`: the noise report (docs/definitions.md "Noise").
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise: Option<noise::NoiseReport>,
}

/// 20·log10|x|.
pub fn db(x: f64) -> f64 {
    20.0 * x.abs().log10()
}

/// An impedance 1/y as one number: the resistance at midband (where it is real),
/// its magnitude |Z| at a frequency; ∞ when y = 0, 0 when y is infinite.
fn impedance(y: num_complex::Complex64) -> f64 {
    if y.norm() == 0.0 {
        return f64::INFINITY;
    }
    // A node on ground (a potentiometer at zero): no impedance.
    if y.norm().is_infinite() {
        return 0.0;
    }
    let z = 1.0 / y;
    if z.im == 0.0 {
        z.re
    } else {
        z.norm()
    }
}

/// Phase of a complex gain in degrees, (−180, 180].
pub fn phase_deg(g: num_complex::Complex64) -> f64 {
    let deg = g.arg().to_degrees();
    if deg == -180.0 {
        180.0
    } else {
        deg
    }
}

/// Signed real gain at midband; the magnitude with the sign of the real part elsewhere.
pub(crate) fn signed(g: num_complex::Complex64) -> f64 {
    if g.im == 0.0 {
        g.re
    } else {
        g.norm().copysign(g.re)
    }
}

pub(crate) fn port_id(chain: &Chain, p: Port) -> String {
    match p {
        Port::Source => "source".into(),
        Port::Stage(i) => chain.stages[i].id.clone(),
        Port::Load(i) => chain.loads[i].id.clone(),
    }
}

/// Stage `i`'s operating point by its device's names: an op-amp's pin (`v_out`,
/// `i_out`), a transistor's own quantities, `None` for a stage without a device.
pub fn operating_quantities(
    chain: &Chain,
    dc: &crate::dc::DcState,
    i: usize,
) -> Option<Quantities> {
    chain.stages[i].device?;
    Some(match dc.opamp {
        Some(_) => OpAmp::operating_quantities(dc.op.v_c, dc.op.i_c),
        None => chain.device_of(i).operating_quantities(&dc.op),
    })
}

impl PlanReport {
    /// Gather the report of an evaluated chain for the planned input `level`.
    pub fn new(chain: &Chain, ev: &Evaluation, level: Level) -> PlanReport {
        let e_pk = level.vpeak();
        let stages = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, s)| {
                let op = ev.dc[i].op;
                let ac = &ev.ac[i];
                let h = &ev.headroom[i];
                let device = chain.device_of(i);
                let hp = device.small_signal(&op, ev.v_t);
                let model = s.kind.model();
                let cumulative = signed(ac.cumulative);
                let output = Level::from_vpeak(ac.cumulative.norm() * e_pk);
                let limit = h.swing.limit_up.min(h.swing.limit_down);
                let has_device = s.device.is_some();
                // An op-amp stage: its network and parameters (no transistor values).
                let opamp = ev.dc[i].opamp.as_ref().zip(device.opamp);
                StageReport {
                    id: s.id.clone(),
                    kind: model.type_name(),
                    device: has_device.then(|| device.name.clone()),
                    input_from: port_id(chain, chain.topology.stage_driver[i].0),
                    operating_point: operating_quantities(chain, &ev.dc[i], i),
                    small_signal: match opamp {
                        Some((_, amp)) => Some(Quantities::new(&[
                            ("open_loop_gain", amp.open_loop_gain(ev.freq).norm()),
                            ("open_loop_pole", amp.pole()),
                        ])),
                        None => has_device.then(|| device.small_signal_quantities(&hp)),
                    },
                    op,
                    r_in: impedance(ac.y_in),
                    r_out: impedance(ac.y_out),
                    load: impedance(ac.y_load),
                    gain: signed(ac.gain),
                    gain_db: db(ac.gain.norm()),
                    gain_phase_deg: phase_deg(ac.gain),
                    cumulative_gain: cumulative,
                    input_vrms: ac.v_in.norm() * level.vrms,
                    output_vrms: output.vrms,
                    output_dbu: output.dbu(),
                    limit_up: h.swing.limit_up,
                    limit_down: h.swing.limit_down,
                    clip_input_vpeak: h.clip_input_vpeak,
                    clip_input_vrms: Level::from_vpeak(h.clip_input_vpeak).vrms,
                    clip_toward: has_device.then_some(h.toward),
                    headroom_db: db(limit / output.vpeak()),
                    dc_load_line: h.dc_line,
                    ac_load_line: h.ac_line,
                    dissipation: DissipationReport {
                        transistor: (has_device && opamp.is_none())
                            .then_some(op.transistor_power()),
                        resistors: crate::stages::stage_resistor_power(chain, ev, i)
                            .into_iter()
                            .collect(),
                    },
                }
            })
            .collect();
        let loads = chain
            .loads
            .iter()
            .enumerate()
            .map(|(k, l)| {
                let g = ev.load_gain[k];
                let out = Level::from_vrms(g.norm() * level.vrms);
                LoadReport {
                    id: l.id.clone(),
                    from: port_id(chain, chain.topology.load_driver[k].0),
                    resistance: l.r_l,
                    gain: signed(g),
                    gain_db: db(g.norm()),
                    gain_phase_deg: phase_deg(g),
                    output_vrms: out.vrms,
                    output_dbu: out.dbu(),
                }
            })
            .collect();
        let f = ev.first_clip;
        let clip = Level::from_vpeak(ev.headroom[f].clip_input_vpeak);
        let loops = LoopReport::all(chain, ev);
        let mut warnings = warnings::collect(chain, ev, Some(level));
        warnings.extend(warnings::loop_margins(
            &loops,
            ev.freq == crate::network::Freq::Midband,
        ));
        PlanReport {
            title: chain.title.clone(),
            supply: chain.v_cc,
            rails: chain
                .rails
                .iter()
                .map(|r| RailReport {
                    name: r.name.clone(),
                    voltage: r.v,
                })
                .collect(),
            temperature: chain.temperature,
            thermal_voltage: ev.v_t,
            frequency: ev.freq.hz(),
            input: level.into(),
            source: SourceReport {
                resistance: chain.source.r_s,
            },
            stages,
            loads,
            first_clip: FirstClip {
                stage: chain.stages[f].id.clone(),
                input_vrms: clip.vrms,
                // The stage's own figure, not a round trip through V rms.
                input_vpeak: ev.headroom[f].clip_input_vpeak,
                input_dbu: clip.dbu(),
                toward: ev.headroom[f].toward,
            },
            loops,
            warnings,
            noise: None,
        }
    }
}
