//! What `spread` reports, gathered from a [`SpreadRun`], and its table and CSV
//! exporters (one file per format; JSON is [`super::JsonExporter`] for any report).
//! Values in SI units:
//! gains in V/V (magnitudes; dB alongside), clip input levels as peak EMF in volts
//! (dBu alongside), currents in A, voltages in V, temperatures in K.

mod csv;
pub mod table;

pub use table::percent;

use super::db;
use crate::chain::Chain;
use crate::spread::corners::{self, At, CornerPass};
use crate::spread::model::{NotSampled, Spread};
use crate::spread::trials::{status_of, Fault, Layout};
use crate::spread::{Requirement, SpreadRun, Stats};
use crate::units::Level;
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeMap;

#[derive(Debug, Clone, Serialize)]
pub struct TemperatureReport {
    pub nominal: f64,
    pub min: f64,
    pub max: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct StageSpread {
    pub id: String,
    /// The table's names of `i_c` and `v_ce` for this stage's device (JSON keeps the
    /// keys).
    #[serde(skip)]
    pub names: crate::bias::target::QNames,
    /// `null` when no build has this stage in its active region.
    pub i_c: Option<Stats>,
    pub v_ce: Option<Stats>,
    /// |v(output)/v(input)| of the stage, loaded.
    pub gain: Option<Stats>,
    pub gain_db: Option<Stats>,
    pub clip_input_vpeak: Option<Stats>,
    pub clip_input_dbu: Option<Stats>,
    /// Share of all builds in which this stage is the first to clip.
    pub first_to_clip_share: f64,
    /// Share of all builds in which this stage is out of its active region at DC.
    pub dc_failure_share: f64,
    /// The same by fault: `saturated`, `cut_off`, `other`.
    pub dc_failures: BTreeMap<&'static str, f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct LoadSpread {
    pub id: String,
    /// |v(load)/EMF|.
    pub gain: Option<Stats>,
    pub gain_db: Option<Stats>,
    /// The −3 dB corners (Hz) over the builds where one was found; `null` without
    /// `--band` or when the nominal chain has no such corner.
    pub low_corner: Option<Stats>,
    pub high_corner: Option<Stats>,
    /// With `--noise`: the EIN (V rms and dBu) and the SNR (dB) over the builds
    /// (docs/definitions.md "Noise").
    #[serde(skip_serializing_if = "Option::is_none")]
    pub ein_vrms: Option<Stats>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub ein_dbu: Option<Stats>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub snr_db: Option<Stats>,
}

/// One spread's place in a corner.
#[derive(Debug, Clone, Serialize)]
pub struct CornerEntry {
    pub parameter: String,
    pub at: At,
    pub value: f64,
}

/// A corner and the value it gives.
#[derive(Debug, Clone, Serialize)]
pub struct CornerValue {
    pub value: f64,
    /// The value in dB (gains) or dBu (clip levels, from the peak EMF); absent for
    /// frequencies.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub value_db: Option<f64>,
    /// Index of the corner in the pass.
    pub index: usize,
    /// The spreads away from nominal in this corner.
    pub corner: Vec<CornerEntry>,
}

#[derive(Debug, Clone, Serialize)]
pub struct LoadCorners {
    pub id: String,
    pub lowest_gain: Option<CornerValue>,
    pub highest_gain: Option<CornerValue>,
    /// With `--band`: the highest low −3 dB corner and the lowest high one (the
    /// narrowest band), in Hz.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub highest_low_corner: Option<CornerValue>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lowest_high_corner: Option<CornerValue>,
}

#[derive(Debug, Clone, Serialize)]
pub struct CornersReport {
    /// `"all"` (2^n corners) or `"reduced"` (see DEVELOPERS.md).
    pub set: &'static str,
    pub evaluated: usize,
    pub loads: Vec<LoadCorners>,
    /// The chain's clip input level (peak EMF): the worst (lowest) and the highest.
    pub lowest_clip: Option<CornerValue>,
    pub highest_clip: Option<CornerValue>,
    /// Corners with a stage out of its active region at DC.
    pub dc_failures: usize,
    pub first_dc_failure: Option<CornerFailure>,
}

#[derive(Debug, Clone, Serialize)]
pub struct CornerFailure {
    pub stage: String,
    pub fault: &'static str,
    pub corner: Vec<CornerEntry>,
}

#[derive(Debug, Clone, Serialize)]
pub struct RequirementReport {
    pub requirement: String,
    pub missed: usize,
    pub missed_share: f64,
    pub passed: bool,
}

/// One feedback loop's spread: its return ratio T beside its closed-loop gain, and
/// their relative spreads (σ/mean): with feedback the closed-loop gain's is about
/// T's over |1 + T| (the desensitivity, docs/definitions.md "Feedback links").
#[derive(Debug, Clone, Serialize)]
pub struct LoopSpread {
    pub from: String,
    pub to: String,
    pub return_ratio: Option<Stats>,
    pub closed_loop_gain: Option<Stats>,
    pub closed_loop_gain_db: Option<Stats>,
    /// σ/|mean| of T and of the closed-loop gain over the good builds.
    pub return_ratio_relative_spread: Option<f64>,
    pub closed_loop_relative_spread: Option<f64>,
}

/// Everything `spread` reports.
#[derive(Debug, Clone, Serialize)]
pub struct SpreadReport {
    pub title: Option<String>,
    pub runs: usize,
    pub seed: u64,
    /// Frequency of the gains and clip levels in Hz; `null` for midband.
    pub frequency: Option<f64>,
    /// True when every build's −3 dB corners were measured (`--band`).
    pub band: bool,
    pub temperature: TemperatureReport,
    pub spreads: Vec<Spread>,
    pub not_sampled: Vec<NotSampled>,
    /// Builds with every stage in its active region at DC.
    pub builds_in_active_region: usize,
    pub dc_failure_share: f64,
    pub stages: Vec<StageSpread>,
    pub loads: Vec<LoadSpread>,
    /// Every feedback loop (empty without one).
    pub loops: Vec<LoopSpread>,
    /// Source level at which the chain clips (its lowest stage clip level), peak EMF.
    pub clip_input_vpeak: Option<Stats>,
    pub clip_input_dbu: Option<Stats>,
    pub corners: CornersReport,
    pub requirements: Vec<RequirementReport>,
    /// Share of builds that meet every requirement (`null` without requirements).
    #[serde(rename = "yield")]
    pub yield_share: Option<f64>,
    /// Largest share of builds allowed to miss a requirement.
    pub max_failure: f64,
    /// False when a requirement is missed by more than `max_failure` of the builds.
    pub passed: bool,
}

fn dbu_of_vpeak(v: f64) -> f64 {
    Level::from_vpeak(v).dbu()
}

fn corner_entries(run: &SpreadRun, setting: &[At]) -> Vec<CornerEntry> {
    run.model
        .spreads
        .iter()
        .zip(setting)
        .filter(|(_, at)| **at != At::Nominal)
        .map(|(s, at)| CornerEntry {
            parameter: s.parameter.clone(),
            at: *at,
            value: if *at == At::Min { s.min } else { s.max },
        })
        .collect()
}

fn corner_values(
    run: &SpreadRun,
    pass: &CornerPass,
    column: usize,
    to_db: Option<fn(f64) -> f64>,
) -> (Option<CornerValue>, Option<CornerValue>) {
    let make = |(value, index): (f64, usize)| CornerValue {
        value,
        value_db: to_db.map(|f| f(value)),
        index,
        corner: corner_entries(run, &pass.settings[index]),
    };
    match corners::extremes(pass, column) {
        Some((lo, hi)) => (Some(make(lo)), Some(make(hi))),
        None => (None, None),
    }
}

impl SpreadReport {
    /// Gather the report of a run; `max_failure` is the share of builds allowed to
    /// miss each requirement.
    pub fn new(
        chain: &Chain,
        run: &SpreadRun,
        requirements: &[Requirement],
        max_failure: f64,
    ) -> SpreadReport {
        let trials = &run.trials;
        let layout: Layout = trials.layout;
        let n = trials.runs.max(1) as f64;
        let nominal = &run.nominal;

        // Statistics of every numeric column, in parallel; ordered results, indexed
        // by column. Each thread gathers a column's good values into one buffer it
        // keeps for every column it takes (no fresh memory per column).
        let numeric = layout.numeric_columns();
        let mut stats: Vec<Option<Stats>> = vec![None; layout.width()];
        let computed: Vec<Option<Stats>> = numeric
            .par_iter()
            .map_init(Vec::new, |values, &c| {
                trials.good_values_into(c, values);
                Stats::of(values, nominal[c])
            })
            .collect();
        for (&c, s) in numeric.iter().zip(computed) {
            stats[c] = s;
        }
        let db_stats = |s: &Option<Stats>| s.map(|s| s.map(db));
        let dbu_stats = |s: &Option<Stats>| s.map(|s| s.map(dbu_of_vpeak));

        // Counts in trial order.
        let mut first = vec![0usize; layout.stages];
        let mut faults = vec![[0usize; 3]; layout.stages];
        let mut good = 0usize;
        let mut missed = vec![0usize; requirements.len()];
        let mut all_met = 0usize;
        let mut row = vec![0.0; layout.width()];
        for t in 0..trials.runs {
            trials.row_into(t, &mut row);
            let row = row.as_slice();
            match status_of(&layout, row) {
                None => {
                    good += 1;
                    first[row[layout.first_clip()] as usize] += 1;
                }
                Some((stage, fault)) => faults[stage][fault as usize] += 1,
            }
            let mut ok = true;
            for (m, r) in missed.iter_mut().zip(requirements) {
                if !r.met(&layout, row) {
                    *m += 1;
                    ok = false;
                }
            }
            all_met += ok as usize;
        }

        let stages = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, s)| {
                let gain = stats[layout.gain(i)];
                let clip = stats[layout.clip(i)];
                StageSpread {
                    id: s.id.clone(),
                    names: crate::bias::target::QNames::of(chain, i),
                    i_c: stats[layout.i_c(i)],
                    v_ce: stats[layout.v_ce(i)],
                    gain,
                    gain_db: db_stats(&gain),
                    clip_input_vpeak: clip,
                    clip_input_dbu: dbu_stats(&clip),
                    first_to_clip_share: first[i] as f64 / n,
                    dc_failure_share: faults[i].iter().sum::<usize>() as f64 / n,
                    dc_failures: Fault::ALL
                        .iter()
                        .map(|f| (f.name(), faults[i][*f as usize] as f64 / n))
                        .collect(),
                }
            })
            .collect();
        let loads = chain
            .loads
            .iter()
            .enumerate()
            .map(|(k, l)| {
                let gain = stats[layout.load_gain(k)];
                let corner = |c: usize| if layout.band { stats[c] } else { None };
                let noise = |c: usize| if layout.noise { stats[c] } else { None };
                let ein = noise(layout.ein(k));
                LoadSpread {
                    id: l.id.clone(),
                    gain,
                    gain_db: db_stats(&gain),
                    low_corner: corner(layout.low_corner(k)),
                    high_corner: corner(layout.high_corner(k)),
                    ein_vrms: ein,
                    ein_dbu: ein.map(|s| s.map(|v| Level::from_vrms(v).dbu())),
                    snr_db: noise(layout.snr(k)),
                }
            })
            .collect();
        let relative = |s: &Option<Stats>| {
            s.and_then(|s| Some(s.std_dev? / s.mean?.abs()))
                .filter(|x| x.is_finite())
        };
        let loops = chain
            .topology
            .feedback
            .iter()
            .enumerate()
            .map(|(k, l)| {
                let t = stats[layout.return_ratio(k)];
                let a_f = stats[layout.closed_loop_gain(k)];
                LoopSpread {
                    from: chain.stages[l.from].id.clone(),
                    to: chain.stages[l.to].id.clone(),
                    return_ratio: t,
                    closed_loop_gain: a_f,
                    closed_loop_gain_db: db_stats(&a_f),
                    return_ratio_relative_spread: relative(&t),
                    closed_loop_relative_spread: relative(&a_f),
                }
            })
            .collect();
        let clip = stats[layout.chain_clip()];

        let pass = &run.corners;
        let status = pass.records.layout.status();
        let first_failure = pass.records.rows().enumerate().find_map(|(c, row)| {
            status_of(&layout, &row).map(|(stage, fault)| CornerFailure {
                stage: chain.stages[stage].id.clone(),
                fault: fault.name(),
                corner: corner_entries(run, &pass.settings[c]),
            })
        });
        let (lowest_clip, highest_clip) =
            corner_values(run, pass, layout.chain_clip(), Some(dbu_of_vpeak));
        let corners = CornersReport {
            set: if pass.full { "all" } else { "reduced" },
            evaluated: pass.settings.len(),
            loads: chain
                .loads
                .iter()
                .enumerate()
                .map(|(k, l)| {
                    let (lo, hi) = corner_values(run, pass, layout.load_gain(k), Some(db));
                    let (highest_low_corner, lowest_high_corner) = if layout.band {
                        (
                            corner_values(run, pass, layout.low_corner(k), None).1,
                            corner_values(run, pass, layout.high_corner(k), None).0,
                        )
                    } else {
                        (None, None)
                    };
                    LoadCorners {
                        id: l.id.clone(),
                        lowest_gain: lo,
                        highest_gain: hi,
                        highest_low_corner,
                        lowest_high_corner,
                    }
                })
                .collect(),
            lowest_clip,
            highest_clip,
            dc_failures: pass.records.rows().filter(|r| r[status] >= 0.0).count(),
            first_dc_failure: first_failure,
        };

        let requirements: Vec<RequirementReport> = requirements
            .iter()
            .zip(&missed)
            .map(|(r, &m)| RequirementReport {
                requirement: r.text.clone(),
                missed: m,
                missed_share: m as f64 / n,
                passed: m as f64 / n <= max_failure,
            })
            .collect();
        let (t_min, t_max) = run.model.temperature_range();
        SpreadReport {
            title: chain.title.clone(),
            runs: trials.runs,
            seed: run.seed,
            frequency: run.measure.freq.hz(),
            band: layout.band,
            temperature: TemperatureReport {
                nominal: run.model.t0,
                min: t_min,
                max: t_max,
            },
            spreads: run.model.spreads.clone(),
            not_sampled: run.model.not_sampled.clone(),
            builds_in_active_region: good,
            dc_failure_share: (trials.runs - good) as f64 / n,
            stages,
            loops,
            loads,
            clip_input_vpeak: clip,
            clip_input_dbu: dbu_stats(&clip),
            corners,
            passed: requirements.iter().all(|r| r.passed),
            yield_share: (!requirements.is_empty()).then(|| all_met as f64 / n),
            requirements,
            max_failure,
        }
    }
}
