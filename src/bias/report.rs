//! What `ampchain bias` reports: the target, the present and the ideal Q point, the
//! ranked proposals with their new Q point, limits, gain, clip levels and the change
//! of headroom, and one sentence a designer can act on. As a table or as JSON.

use super::code::resistor_code;
use super::design::{series_step, Metrics, Outcome, Proposal};
use super::target::{QNames, Target};
use crate::chain::Chain;
use crate::device::{DeviceModel, OperatingPoint, Quantities};
use crate::report::table::up_down;
use crate::report::{db, Exporter, TableExporter};
use crate::stages::Toward;
use crate::units::{format_si, Level};
use crate::warnings::Warning;
use prettytable::{Cell, Row, Table};
use serde::Serialize;

#[derive(Debug, Clone, Serialize)]
pub struct ClipReport {
    /// The stage that clips (for the chain: the first one to clip).
    pub stage: String,
    pub input_vpeak: f64,
    pub input_vrms: f64,
    pub input_dbu: f64,
    pub toward: Toward,
}

/// A Q point and what it gives.
#[derive(Debug, Clone, Serialize)]
pub struct PointReport {
    /// By the device's own names (`DeviceModel::operating_quantities`).
    pub operating_point: Quantities,
    /// The operating point itself, for the table.
    #[serde(skip)]
    pub op: OperatingPoint,
    pub limit_up: f64,
    pub limit_down: f64,
    pub gain: f64,
    pub gain_db: f64,
    /// Gain from the source EMF to the stage's output, dB.
    pub cumulative_gain_db: f64,
    pub r_in: f64,
    /// Divider current over base current (null without r_bottom).
    pub divider_ratio: Option<f64>,
    pub stage_clip: ClipReport,
    pub chain_clip: ClipReport,
}

#[derive(Debug, Clone, Serialize)]
pub struct ValueReport {
    /// `r_top`, or `second.r_collector` for another stage's resistor.
    pub resistor: String,
    pub stage: String,
    pub key: &'static str,
    pub from: f64,
    pub to: f64,
    /// IEC 60062 code of `to`, as written with `--write`.
    pub code: String,
    pub changed: bool,
}

#[derive(Debug, Clone, Serialize)]
pub struct ProposalReport {
    pub rank: usize,
    pub values: Vec<ValueReport>,
    #[serde(flatten)]
    pub point: PointReport,
    /// Largest relative error over the conditions.
    pub miss: f64,
    pub changed: usize,
    /// Change of this stage's clip input level, dB (null without a present point).
    pub stage_clip_change_db: Option<f64>,
    /// Change of the chain's clip input level = change of its headroom at any planned input, dB.
    pub headroom_change_db: Option<f64>,
    pub sentence: String,
    pub warnings: Vec<Warning>,
}

/// One resistor by its label and value (ohms): a present value, or one of the
/// continuous (unrounded) solution.
#[derive(Debug, Clone, Serialize)]
pub struct ResistorValue {
    pub resistor: String,
    pub value: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct IdealReport {
    pub values: Vec<ResistorValue>,
    #[serde(flatten)]
    pub point: PointReport,
}

#[derive(Debug, Clone, Serialize)]
pub struct TargetReport {
    /// `centre`, `current` or `vce`.
    pub kind: &'static str,
    /// The asked current (A) or V_CE (V); null for centre.
    pub value: Option<f64>,
    pub description: String,
    /// The condition each moved resistor meets, in the order of `moved`.
    pub conditions: Vec<String>,
    pub moved: Vec<String>,
    pub keep_gain_db: Option<f64>,
    /// True when the gain band held the centred target back.
    pub limited_by_gain: bool,
    pub min_input: Option<f64>,
    pub stiffness: f64,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct SearchReport {
    pub candidates: usize,
    pub no_operating_point: usize,
    pub not_stiff: usize,
    pub below_input_floor: usize,
    pub outside_gain_band: usize,
    pub resolution: f64,
    pub evaluations: usize,
}

/// Everything `ampchain bias` reports.
#[derive(Debug, Clone, Serialize)]
pub struct BiasReport {
    pub title: Option<String>,
    pub stage: String,
    #[serde(rename = "type")]
    pub kind: &'static str,
    pub series: String,
    pub target: TargetReport,
    pub present: Option<PointReport>,
    /// Why the present values have no operating point (null when they have one).
    pub present_error: Option<String>,
    /// The present value of every resistor the design lists (those it moves and those
    /// it keeps), whether or not there is a proposal.
    pub present_values: Vec<ResistorValue>,
    pub ideal: IdealReport,
    pub proposals: Vec<ProposalReport>,
    /// The sentence for the best proposal, or why there is none.
    pub summary: String,
    pub search: SearchReport,
    pub notes: Vec<String>,
    /// The chain file written with `--write`.
    pub written: Option<String>,
    /// The stage's Q-point names, for the table.
    #[serde(skip)]
    pub names: QNames,
}

/// What `--keep-gain`, `--min-input` and `--stiffness` were.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Limits {
    pub keep_gain_db: Option<f64>,
    pub min_input: Option<f64>,
    pub stiffness: f64,
}

fn clip(chain: &Chain, stage: usize, vpeak: f64, toward: Toward) -> ClipReport {
    let l = Level::from_vpeak(vpeak);
    ClipReport {
        stage: chain.stages[stage].id.clone(),
        input_vpeak: vpeak,
        input_vrms: l.vrms,
        input_dbu: l.dbu(),
        toward,
    }
}

fn point(chain: &Chain, stage: usize, m: &Metrics) -> PointReport {
    PointReport {
        operating_point: chain.device_of(stage).operating_quantities(&m.op),
        op: m.op,
        limit_up: m.limit_up,
        limit_down: m.limit_down,
        gain: m.gain,
        gain_db: db(m.gain),
        cumulative_gain_db: db(m.cumulative_gain),
        r_in: m.r_in,
        divider_ratio: m.divider_ratio,
        stage_clip: clip(chain, stage, m.stage_clip_vpeak, m.stage_toward),
        chain_clip: clip(chain, m.chain_first, m.chain_clip_vpeak, m.chain_toward),
    }
}

/// The smaller limit over the larger one is within one series step of 1.
/// How much larger the larger limit is than the smaller one (0 = symmetrical).
fn imbalance(m: &Metrics) -> f64 {
    m.limit_up.max(m.limit_down) / m.limit_up.min(m.limit_down) - 1.0
}

fn limits_text(m: &Metrics) -> String {
    up_down(m.limit_up, m.limit_down)
}

/// "move stage "gain" from I_C 631 µA to 823 µA: r_top 150k → 120k, r_bottom 22k stays;
/// the stage then clips at 4.1 dB more input, symmetrically (+5.92 V / -5.90 V)".
fn sentence(chain: &Chain, o: &Outcome, p: &Proposal) -> String {
    let id = &chain.stages[o.stage].id;
    let q = QNames::of(chain, o.stage).current;
    let m = &p.metrics;
    if p.changed == 0 && p.miss <= o.resolution {
        // Within the tie window (a quarter series step) fewer changes rank first; say
        // so when a proposal with changes comes closer (docs/definitions.md "Bias").
        let closer = o
            .proposals
            .iter()
            .enumerate()
            .filter(|(_, c)| c.changed > 0 && c.miss < 0.75 * p.miss)
            .min_by(|a, b| a.1.miss.total_cmp(&b.1.miss));
        let within = format!(
            "stage \"{id}\" already meets the target within a quarter {} step (misses by {:.1} %, ties within {:.1} %): nothing to change ({q} {}, limits {})",
            o.series,
            100.0 * p.miss,
            100.0 * o.resolution,
            format_si(m.op.i_c, "A"),
            limits_text(m)
        );
        return match closer {
            Some((k, c)) => format!(
                "{within}; proposal {} comes closer (misses by {:.1} %) by changing {} part{}",
                k + 1,
                100.0 * c.miss,
                c.changed,
                if c.changed == 1 { "" } else { "s" }
            ),
            None => within,
        };
    }
    if p.changed == 0 {
        // First by the ties rule, though missing by more than a quarter step: a proposal
        // with changes comes closer, within a quarter step of the present miss.
        let closest = o
            .proposals
            .iter()
            .enumerate()
            .filter(|(_, c)| c.changed > 0 && c.miss < p.miss)
            .min_by(|a, b| a.1.miss.total_cmp(&b.1.miss));
        if let Some((k, c)) = closest {
            return format!(
                "stage \"{id}\" keeps its present values: they miss by {:.1} %, within a quarter {} step ({:.1} %) of proposal {}, which comes closer (misses by {:.1} %) by changing {} part{}, and ties go to fewer changes ({q} {}, limits {})",
                100.0 * p.miss,
                o.series,
                100.0 * o.resolution,
                k + 1,
                100.0 * c.miss,
                c.changed,
                if c.changed == 1 { "" } else { "s" },
                format_si(m.op.i_c, "A"),
                limits_text(m)
            );
        }
        return format!(
            "no {} values within the rules come closer than the present ones, which miss the target by {:.0} % ({q} {}, limits {}); relax --stiffness or --min-input, or free another resistor with --also",
            o.series,
            100.0 * p.miss,
            format_si(m.op.i_c, "A"),
            limits_text(m)
        );
    }
    let values = p
        .settings
        .iter()
        .map(|s| {
            let label = s.knob.label(chain, o.stage);
            if s.changed() {
                format!(
                    "{label} {} → {}",
                    resistor_code(s.from),
                    resistor_code(s.to)
                )
            } else {
                format!("{label} {} stays", resistor_code(s.from))
            }
        })
        .collect::<Vec<_>>()
        .join(", ");
    let mut out = match &o.present {
        // A current within half a percent of the present one counts as kept.
        Ok(m0) if (m.op.i_c / m0.op.i_c - 1.0).abs() < 0.005 => format!(
            "keep stage \"{id}\" at {q} {}: {values}",
            format_si(m.op.i_c, "A")
        ),
        Ok(m0) => format!(
            "move stage \"{id}\" from {q} {} to {}: {values}",
            format_si(m0.op.i_c, "A"),
            format_si(m.op.i_c, "A")
        ),
        Err(_) => format!(
            "bias stage \"{id}\" at {q} {}: {values}",
            format_si(m.op.i_c, "A")
        ),
    };
    // Within half a series step the limits are as equal as the series allows;
    // within a step, nearly so.
    let step = series_step(o.series);
    let side = if imbalance(m) <= step / 2.0 {
        "symmetrically,".to_string()
    } else if imbalance(m) <= step {
        format!("nearly symmetrically, toward {} first,", m.stage_toward)
    } else {
        format!("toward {} first,", m.stage_toward)
    };
    match &o.present {
        Ok(m0) => {
            let change = db(m.stage_clip_vpeak / m0.stage_clip_vpeak);
            let more = if change >= 0.0 { "more" } else { "less" };
            out.push_str(&format!(
                "; the stage then clips at {:.1} dB {more} input, {side} limits {}",
                change.abs(),
                limits_text(m)
            ));
            // Moving another stage's resistor, or the input resistance, changes the gain
            // up to here; say so, since it moves every clip level with it.
            let gain_change = db(m.cumulative_gain / m0.cumulative_gain);
            if gain_change.abs() >= 0.1 {
                out.push_str(&format!(
                    "; its gain from the source changes by {gain_change:+.1} dB"
                ));
            }
            let chain_change = db(m.chain_clip_vpeak / m0.chain_clip_vpeak);
            if chain_change.abs() >= 0.05 {
                let clip = Level::from_vpeak(m.chain_clip_vpeak);
                out.push_str(&format!(
                    "; the chain's headroom {} by {:.1} dB (first to clip: stage \"{}\" at {:+.1} dBu)",
                    if chain_change >= 0.0 { "grows" } else { "shrinks" },
                    chain_change.abs(),
                    chain.stages[m.chain_first].id,
                    clip.dbu()
                ));
            }
        }
        Err(_) => out.push_str(&format!(
            "; the stage then clips {side} limits {}",
            limits_text(m)
        )),
    }
    out
}

impl BiasReport {
    pub fn new(chain: &Chain, o: &Outcome, limits: Limits) -> BiasReport {
        let i = o.stage;
        let names = QNames::of(chain, i);
        let present = o.present.as_ref().ok();
        let proposals: Vec<ProposalReport> = o
            .proposals
            .iter()
            .enumerate()
            .map(|(k, p)| ProposalReport {
                rank: k + 1,
                values: p
                    .settings
                    .iter()
                    .map(|s| ValueReport {
                        resistor: s.knob.label(chain, i),
                        stage: chain.stages[s.knob.stage].id.clone(),
                        key: s.knob.field.key(),
                        from: s.from,
                        to: s.to,
                        code: resistor_code(s.to),
                        changed: s.changed(),
                    })
                    .collect(),
                point: point(chain, i, &p.metrics),
                miss: p.miss,
                changed: p.changed,
                stage_clip_change_db: present
                    .map(|m0| db(p.metrics.stage_clip_vpeak / m0.stage_clip_vpeak)),
                headroom_change_db: present
                    .map(|m0| db(p.metrics.chain_clip_vpeak / m0.chain_clip_vpeak)),
                sentence: sentence(chain, o, p),
                warnings: p.warnings.clone(),
            })
            .collect();
        let summary = match proposals.first() {
            Some(p) => p.sentence.clone(),
            None => no_proposal_reason(chain, o, limits),
        };
        let (kind, value) = match o.target {
            Target::Centre => ("centre", None),
            Target::Current(x) => ("current", Some(x)),
            Target::Vce(x) => ("vce", Some(x)),
        };
        BiasReport {
            title: chain.title.clone(),
            stage: chain.stages[i].id.clone(),
            kind: chain.stages[i].kind.model().type_name(),
            series: o.series.to_string(),
            target: TargetReport {
                kind,
                value,
                description: o.target.describe(names),
                conditions: o.conditions.iter().map(|c| c.describe(names)).collect(),
                moved: o.moved.iter().map(|k| k.label(chain, i)).collect(),
                keep_gain_db: limits.keep_gain_db,
                limited_by_gain: o.limited_by_gain_db.is_some(),
                min_input: limits.min_input,
                stiffness: limits.stiffness,
            },
            present: present.map(|m| point(chain, i, m)),
            present_error: o.present.as_ref().err().cloned(),
            present_values: o
                .present_values
                .iter()
                .map(|(k, v)| ResistorValue {
                    resistor: k.label(chain, i),
                    value: *v,
                })
                .collect(),
            ideal: IdealReport {
                values: o
                    .ideal_values
                    .iter()
                    .map(|(k, v)| ResistorValue {
                        resistor: k.label(chain, i),
                        value: *v,
                    })
                    .collect(),
                point: point(chain, i, &o.ideal),
            },
            proposals,
            summary,
            search: SearchReport {
                candidates: o.candidates,
                no_operating_point: o.rejected.no_operating_point,
                not_stiff: o.rejected.not_stiff,
                below_input_floor: o.rejected.below_input_floor,
                outside_gain_band: o.rejected.outside_gain_band,
                resolution: o.resolution,
                evaluations: o.evaluations,
            },
            notes: o.notes.clone(),
            written: None,
            names,
        }
    }
}

/// Why the candidate list is empty.
fn no_proposal_reason(chain: &Chain, o: &Outcome, limits: Limits) -> String {
    let r = &o.rejected;
    let mut why = Vec::new();
    if r.not_stiff > 0 {
        // At the ideal Q point a stiff divider needs its divider current at least
        // stiffness·I_B (docs/definitions.md "Bias divider").
        let op = &o.ideal.op;
        let (device, v_bottom) = (chain.device_of(o.stage), chain.stage_rails(o.stage).bottom);
        why.push(format!(
            "{} not stiff (divider current below {}× I_B; at the target that needs r_bottom ≤ {})",
            r.not_stiff,
            limits.stiffness,
            format_si(
                crate::stages::stiff_r_bottom(op, v_bottom, device, limits.stiffness),
                "Ω"
            )
        ));
    }
    if r.below_input_floor > 0 {
        why.push(format!(
            "{} below the input floor of {}",
            r.below_input_floor,
            format_si(limits.min_input.unwrap_or(0.0), "Ω")
        ));
    }
    if r.outside_gain_band > 0 {
        why.push(format!(
            "{} outside the ±{} dB gain band",
            r.outside_gain_band,
            limits.keep_gain_db.unwrap_or(0.0)
        ));
    }
    if r.no_operating_point > 0 {
        why.push(format!(
            "{} leave a stage without an operating point",
            r.no_operating_point
        ));
    }
    let names = QNames::of(chain, o.stage);
    let conditions: Vec<String> = o.conditions.iter().map(|c| c.describe(names)).collect();
    format!(
        "of {} candidate sets for {}, {}; relax --stiffness, --min-input or --keep-gain, or free another resistor with --also",
        o.candidates,
        conditions.join(" and "),
        if why.is_empty() { "none passed".into() } else { why.join(", ") }
    )
}

/// The bias table for people (the JSON is `JsonExporter`).
impl Exporter<BiasReport> for TableExporter {
    fn export(&self, report: &BiasReport, w: &mut dyn std::io::Write) -> std::io::Result<()> {
        w.write_all(table_text(report).as_bytes())
    }
}

/// The bias table as text.
fn table_text(report: &BiasReport) -> String {
    let mut out = String::new();
    let line = |out: &mut String, s: String| {
        out.push_str(&s);
        out.push('\n');
    };
    if let Some(t) = &report.title {
        line(&mut out, t.clone());
    }
    line(
        &mut out,
        format!(
            "Bias for stage \"{}\" ({}), {} values",
            report.stage,
            report.kind.replace('_', " "),
            report.series
        ),
    );
    let t = &report.target;
    let mut aim = format!("target: {}", t.description);
    if let Some(band) = t.keep_gain_db {
        aim.push_str(&format!(", gain within ±{band} dB of the present"));
        if t.limited_by_gain {
            aim.push_str(" (the gain band holds the Q point short of the centre)");
        }
    }
    if let Some(r) = t.min_input {
        aim.push_str(&format!(", input at least {}", format_si(r, "Ω")));
    }
    // A self-biased JFET has no divider to keep stiff.
    if report.names == QNames::BIPOLAR {
        aim.push_str(&format!(", divider current ≥ {}× I_B", t.stiffness));
    }
    line(&mut out, aim);
    line(
        &mut out,
        format!(
            "solved for: {}",
            t.moved
                .iter()
                .zip(&t.conditions)
                .map(|(m, c)| format!("{m} → {c}"))
                .collect::<Vec<_>>()
                .join(", ")
        ),
    );
    line(&mut out, String::new());

    let mut table = Table::new();
    table.set_format(crate::report::table_format());
    table.set_titles(Row::new(
        [
            "#",
            "values",
            report.names.current,
            report.names.voltage,
            "limit up / down",
            "gain",
            "r_in",
            "I_div/I_B",
            "stage clips at",
            "chain clips at",
        ]
        .iter()
        .map(|c| Cell::new(c))
        .collect(),
    ));
    let row = |label: String,
               values: String,
               p: &PointReport,
               d_stage: Option<f64>,
               d_chain: Option<f64>| {
        let delta = |d: Option<f64>| d.map_or(String::new(), |d| format!(" ({d:+.1} dB)"));
        Row::new(
            [
                label,
                values,
                format_si(p.op.i_c, "A"),
                format_si(p.op.v_ce, "V"),
                up_down(p.limit_up, p.limit_down),
                format!("{:.3} V/V ({:+.1} dB)", p.gain, p.gain_db),
                format_si(p.r_in, "Ω"),
                p.divider_ratio.map_or("—".into(), |r| format!("{r:.0}")),
                format!("{:+.1} dBu{}", p.stage_clip.input_dbu, delta(d_stage)),
                format!(
                    "{:+.1} dBu{} {}",
                    p.chain_clip.input_dbu,
                    delta(d_chain),
                    p.chain_clip.stage
                ),
            ]
            .iter()
            .map(|c| Cell::new(c))
            .collect(),
        )
    };
    let present_values = report
        .present_values
        .iter()
        .map(|v| format!("{} {}", v.resistor, resistor_code(v.value)))
        .collect::<Vec<_>>()
        .join(", ");
    match &report.present {
        Some(p) => table.add_row(row("now".into(), present_values, p, None, None)),
        // No operating point now (the line under the table says why): the values alone.
        None => {
            let mut cells = vec!["now".to_string(), present_values];
            cells.extend(std::iter::repeat("—".to_string()).take(8));
            table.add_row(Row::new(cells.iter().map(|c| Cell::new(c)).collect()))
        }
    };
    let ideal_values = report
        .ideal
        .values
        .iter()
        .map(|v| format!("{} {}", v.resistor, format_si(v.value, "Ω")))
        .collect::<Vec<_>>()
        .join(", ");
    table.add_row(row(
        "ideal".into(),
        ideal_values,
        &report.ideal.point,
        None,
        None,
    ));
    for p in &report.proposals {
        let values = p
            .values
            .iter()
            .map(|v| {
                if v.changed {
                    format!("{} {}→{}", v.resistor, resistor_code(v.from), v.code)
                } else {
                    format!("{} {}", v.resistor, v.code)
                }
            })
            .collect::<Vec<_>>()
            .join(", ");
        table.add_row(row(
            p.rank.to_string(),
            values,
            &p.point,
            p.stage_clip_change_db,
            p.headroom_change_db,
        ));
    }
    let mut buf = Vec::new();
    table
        .print(&mut buf)
        .expect("writing a table to memory cannot fail");
    out.push_str(&String::from_utf8_lossy(&buf));
    line(&mut out, String::new());
    if let Some(e) = &report.present_error {
        line(&mut out, format!("Now: {e}."));
    }
    match report.proposals.first() {
        Some(_) => line(&mut out, format!("Proposal: {}.", report.summary)),
        None => line(&mut out, format!("No proposal: {}.", report.summary)),
    }
    if let Some(p) = report.proposals.first() {
        if !p.warnings.is_empty() {
            line(&mut out, "With proposal 1:".into());
            for w in &p.warnings {
                match &w.stage {
                    Some(s) => line(&mut out, format!("  - stage \"{s}\": {}", w.message)),
                    None => line(&mut out, format!("  - {}", w.message)),
                }
            }
        }
    }
    for n in &report.notes {
        line(&mut out, format!("Note: {n}."));
    }
    let s = &report.search;
    line(
            &mut out,
            format!(
                "{} candidate sets evaluated with the whole chain ({} without an operating point, {} not stiff, {} below the input floor, {} outside the gain band); misses within {:.2} % of the closest rank as equal.",
                s.candidates,
                s.no_operating_point,
                s.not_stiff,
                s.below_input_floor,
                s.outside_gain_band,
                100.0 * s.resolution
            ),
        );
    if let Some(w) = &report.written {
        line(&mut out, format!("Wrote proposal 1 to {w}."));
    }
    out
}
