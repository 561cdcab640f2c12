//! What `response` reports: the sweep, magnitude and phase at every load and of
//! every stage's own gain, the corners and their attribution, the warnings.

use super::{db, phase_deg, port_id, signed};
use crate::chain::Chain;
use crate::response::{Corner, Response, SearchRange};
use crate::warnings::{self, Warning};
use num_complex::Complex64;
use serde::Serialize;

#[derive(Debug, Clone, Serialize)]
pub struct SweepReport {
    pub from: f64,
    pub to: f64,
    pub per_decade: usize,
}

/// Gain from the source EMF to one load.
#[derive(Debug, Clone, Serialize)]
pub struct LoadResponse {
    pub id: String,
    /// The stage (or "source") that drives the load.
    pub from: String,
    /// Midband gain v(load)/EMF, signed, as `plan` reports it.
    pub midband_gain: f64,
    pub midband_gain_db: f64,
    /// |v(load)/EMF| at each frequency of the sweep.
    pub magnitude: Vec<f64>,
    pub magnitude_db: Vec<f64>,
    /// Phase in degrees, (−180, 180].
    pub phase_deg: Vec<f64>,
    pub low_corner: Corner,
    pub high_corner: Corner,
}

/// A stage's own gain v(output)/v(input) over the sweep.
#[derive(Debug, Clone, Serialize)]
pub struct StageResponse {
    pub id: String,
    #[serde(rename = "type")]
    pub kind: &'static str,
    pub midband_gain: f64,
    pub midband_gain_db: f64,
    pub magnitude: Vec<f64>,
    pub magnitude_db: Vec<f64>,
    pub phase_deg: Vec<f64>,
}

/// One feedback loop's return ratio T(jω) over the sweep (the loop-gain Bode plot) and
/// its margins from the scan docs/definitions.md fixes.
#[derive(Debug, Clone, Serialize)]
pub struct LoopResponse {
    pub from: String,
    pub to: String,
    pub magnitude_db: Vec<f64>,
    pub phase_deg: Vec<f64>,
    pub phase_margin_deg: Option<f64>,
    pub phase_crossing_hz: Option<f64>,
    pub gain_margin_db: Option<f64>,
    pub gain_crossing_hz: Option<f64>,
}

/// Everything `response` reports.
#[derive(Debug, Clone, Serialize)]
pub struct ResponseReport {
    pub title: Option<String>,
    pub sweep: SweepReport,
    /// Where corners were looked for (wider than the sweep).
    pub corner_search: SearchRange,
    /// Hz, ascending.
    pub frequencies: Vec<f64>,
    pub loads: Vec<LoadResponse>,
    pub stages: Vec<StageResponse>,
    /// Every feedback loop's T(jω) (empty without one).
    pub loops: Vec<LoopResponse>,
    pub warnings: Vec<Warning>,
}

fn columns(gains: &[Complex64]) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    (
        gains.iter().map(|g| g.norm()).collect(),
        gains.iter().map(|g| db(g.norm())).collect(),
        gains.iter().map(|g| phase_deg(*g)).collect(),
    )
}

impl ResponseReport {
    pub fn new(chain: &Chain, r: &Response) -> ResponseReport {
        let loads = chain
            .loads
            .iter()
            .enumerate()
            .map(|(k, l)| {
                let (magnitude, magnitude_db, phase_deg) = columns(&r.load_gain[k]);
                let mid = r.midband.load_gain[k];
                LoadResponse {
                    id: l.id.clone(),
                    from: port_id(chain, chain.topology.load_driver[k].0),
                    midband_gain: signed(mid),
                    midband_gain_db: db(mid.norm()),
                    magnitude,
                    magnitude_db,
                    phase_deg,
                    low_corner: r.corners[k].low.clone(),
                    high_corner: r.corners[k].high.clone(),
                }
            })
            .collect();
        let stages = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, s)| {
                let (magnitude, magnitude_db, phase_deg) = columns(&r.stage_gain[i]);
                let mid = r.midband.ac[i].gain;
                StageResponse {
                    id: s.id.clone(),
                    kind: s.kind.model().type_name(),
                    midband_gain: signed(mid),
                    midband_gain_db: db(mid.norm()),
                    magnitude,
                    magnitude_db,
                    phase_deg,
                }
            })
            .collect();
        let margins = if chain.topology.feedback.is_empty() {
            Vec::new()
        } else {
            crate::loops::solve::margins(chain, &r.midband)
        };
        let loops = chain
            .topology
            .feedback
            .iter()
            .zip(&r.loop_gain)
            .zip(margins)
            .map(|((l, t), m)| {
                let (_, magnitude_db, phase_deg) = columns(t);
                LoopResponse {
                    from: chain.stages[l.from].id.clone(),
                    to: chain.stages[l.to].id.clone(),
                    magnitude_db,
                    phase_deg,
                    phase_margin_deg: m.phase_margin_deg,
                    phase_crossing_hz: m.phase_crossing_hz,
                    gain_margin_db: m.gain_margin_db,
                    gain_crossing_hz: m.gain_crossing_hz,
                }
            })
            .collect();
        ResponseReport {
            title: chain.title.clone(),
            sweep: SweepReport {
                from: r.sweep.from,
                to: r.sweep.to,
                per_decade: r.sweep.per_decade,
            },
            corner_search: r.search,
            frequencies: r.frequencies.clone(),
            loads,
            stages,
            loops,
            warnings: warnings::collect(chain, &r.midband, chain.source.level),
        }
    }
}
