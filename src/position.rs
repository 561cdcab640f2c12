//! A potentiometer's knob against the chain's headroom (`plan --sweep-position`): at
//! evenly spaced knob positions, the whole chain is evaluated again and the planned
//! input's headroom of every stage, the first stage to clip and the gain to each load
//! are read from `plan`'s own report (docs/definitions.md "Headroom, clip level").
//! The designer's question: at which setting does the next stage clip.

use crate::chain::Chain;
use crate::dc::DcError;
use crate::network::Freq;
use crate::report::PlanReport;
use crate::stages::{StageKind, Toward};
use crate::units::Level;
use serde::Serialize;

/// The first stage to clip at one knob position (stage and side null when no stage
/// can clip there, e.g. every transistor behind a knob at zero).
#[derive(Debug, Clone, Serialize)]
pub struct PositionClip {
    pub stage: Option<String>,
    pub toward: Option<Toward>,
    /// The source level at which it clips (dBu; null when no stage can clip there).
    pub input_dbu: f64,
}

/// One knob position.
#[derive(Debug, Clone, Serialize)]
pub struct PositionRow {
    /// The knob, 0 (wiper at ground) to 1 (wiper at the input).
    pub position: f64,
    /// The track's fraction below the wiper (the taper applied).
    pub fraction: f64,
    /// Gain from the source EMF to each load (dB), in the order of `loads`.
    pub load_gain_db: Vec<f64>,
    pub first_clip: PositionClip,
    /// The chain's headroom at the planned input: the first clip's input level less
    /// the planned level (dB).
    pub headroom_db: f64,
    /// Each stage's headroom at the planned input (dB), in the order of `stages`; null
    /// for a passive stage or a stage the signal does not reach.
    pub stage_headroom_db: Vec<Option<f64>>,
}

/// The whole sweep.
#[derive(Debug, Clone, Serialize)]
pub struct PositionSweep {
    pub title: Option<String>,
    /// The potentiometer swept and its taper.
    pub stage: String,
    pub taper: &'static str,
    /// The position the file gives.
    pub written_position: f64,
    pub planned_input_dbu: f64,
    /// Hz, or null for midband.
    pub frequency: Option<f64>,
    pub stages: Vec<String>,
    pub loads: Vec<String>,
    pub rows: Vec<PositionRow>,
}

/// Why the sweep could not run.
#[derive(Debug, thiserror::Error)]
pub enum PositionError {
    #[error("no potentiometer stage at index {0}")]
    NotAPotentiometer(usize),
    #[error("at knob position {position}: {source}")]
    Dc {
        position: f64,
        #[source]
        source: DcError,
    },
}

/// Sweep the knob of potentiometer stage `stage` over `count` evenly spaced positions
/// 0…1 (both ends included), the rest of the chain as written, at `freq`, for the
/// planned input `level`.
pub fn sweep_position(
    chain: &Chain,
    stage: usize,
    count: usize,
    level: Level,
    freq: Freq,
) -> Result<PositionSweep, PositionError> {
    let StageKind::Potentiometer(pot) = &chain.stages[stage].kind else {
        return Err(PositionError::NotAPotentiometer(stage));
    };
    let taper = pot.taper;
    let written_position = pot.position;
    let mut chain = chain.clone();
    let steps = count.max(2) - 1;
    let mut rows = Vec::with_capacity(steps + 1);
    for k in 0..=steps {
        let position = k as f64 / steps as f64;
        if let StageKind::Potentiometer(p) = &mut chain.stages[stage].kind {
            p.position = position;
        }
        let ev = chain
            .evaluate_at(freq)
            .map_err(|source| PositionError::Dc { position, source })?;
        let report = PlanReport::new(&chain, &ev, level);
        let clip = &report.first_clip;
        let clips = clip.input_dbu.is_finite();
        rows.push(PositionRow {
            position,
            fraction: taper.fraction(position),
            load_gain_db: report.loads.iter().map(|l| l.gain_db).collect(),
            first_clip: PositionClip {
                stage: clips.then(|| clip.stage.clone()),
                toward: clips.then_some(clip.toward),
                input_dbu: clip.input_dbu,
            },
            headroom_db: clip.input_dbu - level.dbu(),
            stage_headroom_db: report
                .stages
                .iter()
                .map(|s| (s.device.is_some() && s.headroom_db.is_finite()).then_some(s.headroom_db))
                .collect(),
        });
    }
    Ok(PositionSweep {
        title: chain.title.clone(),
        stage: chain.stages[stage].id.clone(),
        taper: taper.name(),
        written_position,
        planned_input_dbu: level.dbu(),
        frequency: freq.hz(),
        stages: chain.stages.iter().map(|s| s.id.clone()).collect(),
        loads: chain.loads.iter().map(|l| l.id.clone()).collect(),
        rows,
    })
}
