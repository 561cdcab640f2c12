//! Reports: the numbers of one evaluation gathered for people and scripts, and the
//! exporters that write them (one file per format behind [`Exporter`]).

pub mod check;
pub mod csv;
pub mod fit;
mod json;
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
use crate::device::OperatingPoint;
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
pub struct SmallSignalReport {
    pub g_m: f64,
    pub r_pi: f64,
    /// None (JSON null) when there is no Early effect: r_o is infinite.
    pub r_o: Option<f64>,
    /// C_π = g_m/(2π·f_T) − C_μ, clamped at 0 (0 without `transition_frequency`).
    pub c_pi: f64,
    /// C_μ, the device's `c_bc`.
    pub c_mu: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct DissipationReport {
    pub transistor: f64,
    pub resistors: BTreeMap<&'static str, f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct StageReport {
    pub id: String,
    #[serde(rename = "type")]
    pub kind: &'static str,
    pub device: String,
    pub input_from: String,
    pub operating_point: OperatingPoint,
    pub small_signal: SmallSignalReport,
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
    pub clip_toward: Toward,
    pub headroom_db: f64,
    pub dc_load_line: LoadLine,
    pub ac_load_line: LoadLine,
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
    pub warnings: Vec<Warning>,
}

/// 20·log10|x|.
pub fn db(x: f64) -> f64 {
    20.0 * x.abs().log10()
}

/// An impedance 1/y as one number: the resistance at midband (where it is real),
/// its magnitude |Z| at a frequency; ∞ when y = 0.
fn impedance(y: num_complex::Complex64) -> f64 {
    if y.norm() == 0.0 {
        return f64::INFINITY;
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
                let hp = op.hybrid_pi(device, ev.v_t);
                let model = s.kind.model();
                let cumulative = signed(ac.cumulative);
                let output = Level::from_vpeak(ac.cumulative.norm() * e_pk);
                let limit = h.swing.limit_up.min(h.swing.limit_down);
                StageReport {
                    id: s.id.clone(),
                    kind: model.type_name(),
                    device: device.name.clone(),
                    input_from: port_id(chain, chain.topology.stage_driver[i].0),
                    operating_point: op,
                    small_signal: SmallSignalReport {
                        g_m: hp.g_m,
                        r_pi: 1.0 / hp.g_pi,
                        r_o: (hp.g_o > 0.0).then(|| 1.0 / hp.g_o),
                        c_pi: hp.c_pi,
                        c_mu: hp.c_mu,
                    },
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
                    clip_toward: h.toward,
                    headroom_db: db(limit / output.vpeak()),
                    dc_load_line: h.dc_line,
                    ac_load_line: h.ac_line,
                    dissipation: DissipationReport {
                        transistor: op.v_ce * op.i_c + op.v_be * op.i_b,
                        resistors: crate::stages::resistor_power(
                            model,
                            chain.device_of(i),
                            &op,
                            chain.stage_rails(i),
                        )
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
            warnings: warnings::collect(chain, ev, Some(level)),
        }
    }
}
