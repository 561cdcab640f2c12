//! Onset levels: for every stage the source level at which its output reaches 1 % and
//! 10 % THD, at which its gain has dropped 1 dB below the small-signal gain, and at
//! which the transistor leaves the active region (the waveform clips). Each is found
//! by a bracketing search on the input level: a scan upward in fixed decibel steps
//! finds the first step where the criterion holds, then bisection (on a log scale)
//! narrows the bracket to the tolerance.

use super::network::NetworkError;
use super::{LargeSignal, LargeSignalError, StageLevel};
use crate::graph::Port;
use crate::report::LevelReport;
use crate::stages::Toward;
use crate::units::Level;
use serde::Serialize;

/// What a stage's output reaches.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Threshold {
    /// 1 % THD at the output.
    Thd1Percent,
    /// 10 % THD at the output.
    Thd10Percent,
    /// Gain 1 dB below its small-signal value.
    Compression1Db,
    /// The transistor saturates or cuts off somewhere in the period (an op-amp: its
    /// pin reaches a rail edge or its current limit).
    Clip,
}

impl Threshold {
    pub const ALL: [Threshold; 4] = [
        Threshold::Thd1Percent,
        Threshold::Thd10Percent,
        Threshold::Compression1Db,
        Threshold::Clip,
    ];

    /// Whether stage `s` has reached the threshold.
    pub fn reached(self, s: &StageLevel) -> bool {
        match self {
            Threshold::Thd1Percent => s.output.thd_percent >= 1.0,
            Threshold::Thd10Percent => s.output.thd_percent >= 10.0,
            Threshold::Compression1Db => s.compression_db <= -1.0,
            Threshold::Clip => s.clips(),
        }
    }

    /// Plain words: "reaches 1 % THD", "clips".
    pub fn verb(self) -> &'static str {
        match self {
            Threshold::Thd1Percent => "reaches 1 % THD",
            Threshold::Thd10Percent => "reaches 10 % THD",
            Threshold::Compression1Db => "loses 1 dB of gain",
            Threshold::Clip => "clips",
        }
    }

    fn index(self) -> usize {
        self as usize
    }
}

/// Settings of the search.
#[derive(Debug, Clone)]
pub struct SearchOptions {
    /// Scan step, dB.
    pub step_db: f64,
    /// Bracket width at which bisection stops, dB.
    pub tolerance_db: f64,
    /// Scan from this far below the planner's lowest clip level, dB …
    pub below_db: f64,
    /// … to this far above its highest, dB.
    pub above_db: f64,
    pub thresholds: Vec<Threshold>,
}

impl Default for SearchOptions {
    fn default() -> Self {
        SearchOptions {
            step_db: 2.0,
            tolerance_db: 0.01,
            below_db: 60.0,
            above_db: 20.0,
            thresholds: Threshold::ALL.to_vec(),
        }
    }
}

/// The level where one threshold is reached (peak EMF), or `None` within the range.
#[derive(Debug, Clone, Serialize)]
pub struct StageOnsets {
    pub id: String,
    pub thd_1_percent: Option<LevelReport>,
    pub thd_10_percent: Option<LevelReport>,
    pub compression_1_db: Option<LevelReport>,
    /// The waveform clips: V_CE down to `vce_sat` or I_C below 1 % of I_CQ.
    pub clip: Option<LevelReport>,
    /// Side the waveform first flattens on.
    pub clip_toward: Option<Toward>,
    /// The planner's load-line clip level and side.
    pub plan_clip: LevelReport,
    pub plan_toward: Toward,
    /// 20·log10(waveform clip level / load-line clip level), dB.
    pub clip_vs_plan_db: Option<f64>,
    /// Where the waveform disagrees with the load lines, in words.
    pub flags: Vec<String>,
}

/// Which stage limits the chain at one threshold.
#[derive(Debug, Clone, Serialize)]
pub struct Limiting {
    pub threshold: Threshold,
    /// The stage that limits the chain (for THD, the one adding the most distortion
    /// of its own among those within 0.5 dB of the first).
    pub stage: String,
    /// Where the chain first reaches the threshold (at stage `first`).
    pub level: LevelReport,
    /// The stage that reaches it first.
    pub first: String,
    /// Where `stage` itself reaches it.
    pub stage_level: LevelReport,
}

/// The onset table of a chain.
#[derive(Debug, Clone, Serialize)]
pub struct Onsets {
    pub stages: Vec<StageOnsets>,
    pub limiting: Vec<Limiting>,
    /// Scanned range, peak EMF.
    pub range: [LevelReport; 2],
    /// The scan step at which the waveform had no solution, where the range then ends
    /// (docs/definitions.md "Large signal"); absent when the scan ran its course.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unsolved_from: Option<LevelReport>,
    /// Which stage limits the chain, in a sentence.
    pub summary: String,
    /// Full evaluations the search took.
    pub evaluations: usize,
}

fn db(x: f64) -> f64 {
    20.0 * x.log10()
}

fn dbu(e_pk: f64) -> String {
    format!("{:+.1} dBu", Level::from_vpeak(e_pk).dbu())
}

/// One bracketed level per (stage, threshold).
type Found = Vec<[Option<f64>; 4]>;

impl LargeSignal {
    /// Find every stage's onset levels and name the stage that limits the chain.
    pub fn onsets(&mut self, opt: &SearchOptions) -> Result<Onsets, LargeSignalError> {
        let n_stages = self.plan.len();
        // Stages that never clip (passive: an infinite clip level) set no range.
        let clips = || {
            self.plan
                .iter()
                .map(|p| p.clip_vpeak)
                .filter(|c| c.is_finite())
        };
        let clip_min = clips().fold(f64::INFINITY, f64::min);
        let clip_max = clips().fold(0.0, f64::max);
        let step = 10f64.powf(opt.step_db / 20.0);
        // An onset beyond the levels a file may plan is reported as not reached.
        let (least, most) = super::level_bounds_vpeak();
        let mut hi = (clip_max * 10f64.powf(opt.above_db / 20.0)).clamp(least, most);
        let mut lo = (clip_min * 10f64.powf(-opt.below_db / 20.0)).clamp(least, hi);
        let mut evaluations = 0;

        // Start where no stage has reached anything yet.
        let mut first = self.level(lo)?;
        evaluations += 1;
        for _ in 0..3 {
            let any = first
                .stages
                .iter()
                .any(|s| opt.thresholds.iter().any(|t| t.reached(s)));
            if !any {
                break;
            }
            lo /= 10.0;
            first = self.level(lo)?;
            evaluations += 1;
        }

        // Scan upward until every wanted threshold is bracketed or the range ends.
        let mut found: Found = vec![[None; 4]; n_stages];
        let mut brackets: Vec<[Option<(f64, f64)>; 4]> = vec![[None; 4]; n_stages];
        let mut e = lo;
        let mut unsolved_from = None;
        while e < hi {
            let next = (e * step).min(hi);
            evaluations += 1;
            let r = match self.level(next) {
                Ok(r) => r,
                // Far above the clip levels a sample may have no solution (an ideal
                // source forcing a junction far past a rail): the range ends below it.
                Err(LargeSignalError::Network(NetworkError::SampleNoConvergence { .. })) => {
                    unsolved_from = Some(next);
                    hi = e;
                    break;
                }
                Err(other) => return Err(other),
            };
            for (i, s) in r.stages.iter().enumerate() {
                for t in opt.thresholds.iter().copied() {
                    // The first level where it holds, with the level before it.
                    let b = &mut brackets[i][t.index()];
                    if b.is_none() && t.reached(s) {
                        *b = Some((e, next));
                    }
                }
            }
            let done = brackets
                .iter()
                .all(|b| opt.thresholds.iter().all(|t| b[t.index()].is_some()));
            e = next;
            if done {
                break;
            }
        }

        // Bisect every bracket on a log scale, all together: each round evaluates each
        // distinct midpoint once (brackets from the same scan step share their
        // midpoints, so a long chain of alike stages costs about what one stage does);
        // each bracket's sequence of halvings is the one it would have on its own.
        let tol = 10f64.powf(opt.tolerance_db / 20.0);
        let mut sides: Vec<Option<(Toward, f64)>> = vec![None; n_stages];
        struct Search {
            stage: usize,
            threshold: Threshold,
            a: f64,
            b: f64,
            /// The stage at level `b` once a midpoint has reached the threshold.
            at_b: Option<StageLevel>,
        }
        let mut searches: Vec<Search> = Vec::new();
        for (i, stage_brackets) in brackets.iter().enumerate() {
            for t in opt.thresholds.iter().copied() {
                if let Some((a, b)) = stage_brackets[t.index()] {
                    searches.push(Search {
                        stage: i,
                        threshold: t,
                        a,
                        b,
                        at_b: None,
                    });
                }
            }
        }
        loop {
            let mut mids: Vec<f64> = searches
                .iter()
                .filter(|s| s.b / s.a > tol)
                .map(|s| (s.a * s.b).sqrt())
                .collect();
            if mids.is_empty() {
                break;
            }
            mids.sort_by(f64::total_cmp);
            mids.dedup();
            let mut results = Vec::with_capacity(mids.len());
            for &mid in &mids {
                results.push(self.level(mid)?);
                evaluations += 1;
            }
            for s in searches.iter_mut().filter(|s| s.b / s.a > tol) {
                let mid = (s.a * s.b).sqrt();
                let k = mids
                    .binary_search_by(|m| m.total_cmp(&mid))
                    .expect("every midpoint was evaluated");
                let at = &results[k].stages[s.stage];
                if s.threshold.reached(at) {
                    s.b = mid;
                    s.at_b = Some(at.clone());
                } else {
                    s.a = mid;
                }
            }
        }
        for s in searches {
            found[s.stage][s.threshold.index()] = Some((s.a * s.b).sqrt());
            if s.threshold == Threshold::Clip {
                let at = match s.at_b {
                    Some(at) => at,
                    None => {
                        evaluations += 1;
                        self.level(s.b)?.stages[s.stage].clone()
                    }
                };
                sides[s.stage] = Some(self.clip_side(s.stage, &at));
            }
        }

        let stages: Vec<StageOnsets> = (0..n_stages)
            .map(|i| {
                let p = &self.plan[i];
                let at = |t: Threshold| found[i][t.index()].map(|e| Level::from_vpeak(e).into());
                let clip = found[i][Threshold::Clip.index()];
                StageOnsets {
                    id: p.id.clone(),
                    thd_1_percent: at(Threshold::Thd1Percent),
                    thd_10_percent: at(Threshold::Thd10Percent),
                    compression_1_db: at(Threshold::Compression1Db),
                    clip: at(Threshold::Clip),
                    clip_toward: sides[i].map(|s| s.0),
                    plan_clip: Level::from_vpeak(p.clip_vpeak).into(),
                    plan_toward: p.toward,
                    clip_vs_plan_db: clip.map(|c| db(c / p.clip_vpeak)),
                    flags: Vec::new(),
                }
            })
            .collect();
        let mut onsets = Onsets {
            stages,
            limiting: Vec::new(),
            range: [Level::from_vpeak(lo).into(), Level::from_vpeak(hi).into()],
            unsolved_from: unsolved_from.map(|e| Level::from_vpeak(e).into()),
            summary: String::new(),
            evaluations,
        };
        self.flag(&mut onsets, &found, &sides, opt)?;
        self.limiting(&mut onsets, &found, opt)?;
        onsets.summary = self.summary(&onsets, &found);
        if let Some(e) = unsolved_from {
            onsets.summary.push_str(&format!(
                " The waveform has no solution at {} (Newton fails on a sample, as when a junction is forced far past a rail), so the scan ends at {}.",
                dbu(e),
                dbu(hi)
            ));
        }
        Ok(onsets)
    }

    /// The side a stage clips on at a level where it clips: saturation when V_CE fell to
    /// `vce_sat`, cutoff when I_C fell below 1 % of I_CQ; when both, the deeper one.
    /// Also returns the output's DC shift at that level.
    /// An op-amp stage: `rail` or `current_limit`, the edge held for more samples.
    fn clip_side(&self, i: usize, s: &StageLevel) -> (Toward, f64) {
        if self.plan[i].opamp.is_some() {
            let (rail, limit) = s.opamp_edge_samples;
            let side = if limit > rail {
                Toward::CurrentLimit
            } else {
                Toward::Rail
            };
            return (side, s.output.dc_shift);
        }
        // A JFET's voltage edge is the ohmic edge, its depth past it relative to |V_P|.
        let (sat_depth, saturation) = match self.plan[i].ohmic {
            Some((_, v_p)) => (-s.ohmic_margin_min / v_p, Toward::Ohmic),
            None => (
                (self.plan[i].vce_sat - s.v_ce_min) / self.plan[i].vce_sat.max(1e-3),
                Toward::Saturation,
            ),
        };
        let cut_ref = super::CUTOFF_FRACTION * self.quiescent[i].i_c;
        let cut_depth = (cut_ref - s.i_c_min) / cut_ref;
        let side = match (s.saturates, s.cuts_off) {
            (true, false) => saturation,
            (false, true) => Toward::Cutoff,
            _ if sat_depth >= cut_depth => saturation,
            _ => Toward::Cutoff,
        };
        (side, s.output.dc_shift)
    }

    /// Issue flags: a waveform that clips on the other side than the load line says,
    /// and a stage that compresses before its own load-line clip level because a stage
    /// it drives clips and draws base current.
    fn flag(
        &mut self,
        onsets: &mut Onsets,
        found: &Found,
        sides: &[Option<(Toward, f64)>],
        opt: &SearchOptions,
    ) -> Result<(), LargeSignalError> {
        let n_stages = self.plan.len();
        for i in 0..n_stages {
            // A stage without a device has no planned clip level to compare with.
            if !self.plan[i].transistor && self.plan[i].opamp.is_none() {
                continue;
            }
            if let Some((side, shift)) = sides[i] {
                if side != self.plan[i].toward {
                    onsets.stages[i].flags.push(format!(
                        "clips toward {side} in the waveform, but its load line says {}: its output's average has moved {:+.3} V from the operating point by then",
                        self.plan[i].toward,
                        shift
                    ));
                }
            }
            if !opt.thresholds.contains(&Threshold::Compression1Db) {
                continue;
            }
            let Some(comp) = found[i][Threshold::Compression1Db.index()] else {
                continue;
            };
            let own_clip = found[i][Threshold::Clip.index()].unwrap_or(f64::INFINITY);
            let plan_clip = self.plan[i].clip_vpeak;
            // Compressing well (> 1 dB) before its own load-line clip, itself unclipped.
            if db(plan_clip / comp) <= 1.0 || own_clip <= comp {
                continue;
            }
            let culprit = (0..n_stages).find(|&j| {
                self.plan[j].driver == Port::Stage(i)
                    && self.plan[j].transistor
                    && found[j][Threshold::Clip.index()].is_some_and(|c| c <= comp * 1.0001)
            });
            if let Some(j) = culprit {
                let r = self.level(comp)?;
                onsets.evaluations += 1;
                let i_bq = self.quiescent[j].i_b;
                onsets.stages[i].flags.push(format!(
                    "loses 1 dB of gain at {} in, {:.1} dB before its own load-line clip level ({}), because stage \"{}\" after it clips and draws base current (up to {:.1} times its quiescent {:.3} µA)",
                    dbu(comp),
                    db(plan_clip / comp),
                    dbu(plan_clip),
                    self.plan[j].id,
                    r.stages[j].i_b_max / i_bq,
                    i_bq * 1e6
                ));
            }
        }
        Ok(())
    }

    /// The stage that limits the chain at each threshold: the lowest onset level; for
    /// THD, when several stages reach it within 0.5 dB (a stage's THD is inherited by
    /// every stage after it), the one that adds the most distortion at that level.
    fn limiting(
        &mut self,
        onsets: &mut Onsets,
        found: &Found,
        opt: &SearchOptions,
    ) -> Result<(), LargeSignalError> {
        for t in opt.thresholds.iter().copied() {
            let lowest = found
                .iter()
                .enumerate()
                .filter_map(|(i, f)| f[t.index()].map(|e| (i, e)))
                .min_by(|a, b| a.1.total_cmp(&b.1));
            let Some((first, e)) = lowest else {
                continue;
            };
            let mut stage = first;
            if matches!(t, Threshold::Thd1Percent | Threshold::Thd10Percent) {
                // Stages reaching it within 0.5 dB of the first: the one that adds the
                // most distortion of its own is the cause.
                let window = e * 10f64.powf(0.5 / 20.0);
                let close: Vec<usize> = (0..found.len())
                    .filter(|&i| found[i][t.index()].is_some_and(|x| x <= window))
                    .collect();
                if close.len() > 1 {
                    let r = self.level(e)?;
                    onsets.evaluations += 1;
                    stage = close
                        .into_iter()
                        .max_by(|&a, &b| {
                            r.stages[a]
                                .added_thd_percent
                                .total_cmp(&r.stages[b].added_thd_percent)
                        })
                        .unwrap_or(stage);
                }
            }
            onsets.limiting.push(Limiting {
                threshold: t,
                stage: self.plan[stage].id.clone(),
                level: Level::from_vpeak(e).into(),
                first: self.plan[first].id.clone(),
                stage_level: Level::from_vpeak(found[stage][t.index()].unwrap_or(e)).into(),
            });
        }
        Ok(())
    }

    /// One sentence: the earliest distortion against the first hard clip, and the
    /// planner's verdict beside it.
    fn summary(&self, onsets: &Onsets, found: &Found) -> String {
        let get = |t: Threshold| onsets.limiting.iter().find(|l| l.threshold == t);
        let first_clip = found
            .iter()
            .enumerate()
            .filter_map(|(i, f)| f[Threshold::Clip.index()].map(|e| (i, e)))
            .min_by(|a, b| a.1.total_cmp(&b.1));
        let pf = self.plan_first_clip;
        let plan = format!(
            "the load lines put stage \"{}\" first, toward {}, at {}",
            self.plan[pf].id,
            self.plan[pf].toward,
            dbu(self.plan[pf].clip_vpeak)
        );
        let clip_words = first_clip.map(|(i, e)| {
            let side = onsets.stages[i]
                .clip_toward
                .map_or(String::new(), |s| format!(" toward {s}"));
            (
                i,
                e,
                format!("stage \"{}\" clips{side} at {} in", self.plan[i].id, dbu(e)),
            )
        });
        match (get(Threshold::Thd1Percent), clip_words) {
            (Some(l), Some((_, e_clip, clip))) => {
                // The named stage's own level (the chain's `level` may be another
                // stage's, the first to reach the threshold).
                let e1 = l.stage_level.vpeak;
                let gap = db(e_clip / e1);
                if gap < 0.5 {
                    let who = if first_clip.is_some_and(|(i, _)| self.plan[i].id == l.stage) {
                        "it".to_string()
                    } else {
                        format!("stage \"{}\"", l.stage)
                    };
                    return format!(
                        "{}, and {who} reaches 1 % THD at about the same level ({}); {plan}.",
                        capitalise(&clip),
                        dbu(e1)
                    );
                }
                let relation = if gap >= 10.0 {
                    "long before"
                } else if gap >= 3.0 {
                    "before"
                } else {
                    "shortly before"
                };
                format!(
                    "Stage \"{}\" reaches 1 % THD at {} in, {relation} {} ({gap:.1} dB higher); {plan}.",
                    l.stage,
                    dbu(e1),
                    clip
                )
            }
            (Some(l), None) => format!(
                "Stage \"{}\" reaches 1 % THD at {} in; no stage clips up to {}; {plan}.",
                l.stage,
                dbu(l.stage_level.vpeak),
                dbu(onsets.range[1].vpeak)
            ),
            (None, Some((_, _, clip))) => format!("{}; {plan}.", capitalise(&clip)),
            (None, None) => format!(
                "No stage reaches 1 % THD or clips between {} and {}; {plan}.",
                dbu(onsets.range[0].vpeak),
                dbu(onsets.range[1].vpeak)
            ),
        }
    }
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().chain(c).collect(),
        None => String::new(),
    }
}
