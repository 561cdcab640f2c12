//! What `noise` reports (docs/definitions.md "Noise"), gathered from a band
//! integration, and its table and CSV exporters (one file per format; JSON is
//! [`super::JsonExporter`]). Values in SI units: volts rms, V/√Hz, dB, hertz.

mod csv;
pub mod optimum;
mod table;

pub use table::{with_noise_column, write_snr_lines};

use crate::chain::Chain;
use crate::noise::{BandNoise, Mechanism, NoiseModel, NoiseSource, Singular};
use crate::response::AtFrequency;
use crate::text::quote;
use crate::units::{format_si, Level};
use serde::Serialize;

/// Contributions below this share of a load's output noise power are left out of the
/// JSON (docs/definitions.md "Noise JSON").
pub const LEAST_SHARE: f64 = 0.001;
/// The frequency of the spot EIN density.
pub const SPOT_EIN_HZ: f64 = 1e3;

#[derive(Debug, Clone, Serialize)]
pub struct BandReport {
    pub from: f64,
    pub to: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct ContributionReport {
    /// The source in words: "the 2.20 kΩ collector resistor of stage \"input\"".
    pub source: String,
    /// The stage id; `null` for the source resistance and the loads.
    pub stage: Option<String>,
    /// The element's name (docs/definitions.md "Noise").
    pub element: String,
    /// Its fraction of the output noise power.
    pub share: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct LoadNoise {
    pub id: String,
    pub output_noise_vrms: f64,
    /// output_noise_vrms/|midband gain EMF → load|.
    pub ein_vrms: f64,
    pub ein_dbu: f64,
    /// Output density at 1 kHz over |gain EMF → load at 1 kHz|, unweighted (V/√Hz).
    pub ein_density_at_1khz: f64,
    /// `null` without a source resistance (nothing to compare with).
    pub noise_figure_db: Option<f64>,
    /// `null` without a planned level.
    pub snr_db: Option<f64>,
    /// Every contribution of at least [`LEAST_SHARE`], largest first.
    pub contributions: Vec<ContributionReport>,
}

#[derive(Debug, Clone, Serialize)]
pub struct StageNoise {
    pub id: String,
    pub output_noise_vrms: f64,
    /// 20·log10((min(limit_up, limit_down)/√2)/output_noise_vrms); `null` when the
    /// stage has no limit.
    pub dynamic_range_db: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct SpotLoad {
    pub id: String,
    /// Output noise density (V/√Hz), unweighted.
    pub output_density: f64,
    /// Over |gain EMF → load| at this frequency.
    pub ein_density: f64,
    pub contributions: Vec<ContributionReport>,
}

/// Densities at one frequency (`noise --at`).
#[derive(Debug, Clone, Serialize)]
pub struct SpotReport {
    pub frequency: f64,
    pub loads: Vec<SpotLoad>,
}

#[derive(Debug, Clone, Serialize)]
pub struct NoiseReport {
    pub band: BandReport,
    /// `"none"` or `"a"`.
    pub weighting: &'static str,
    /// Kelvin.
    pub temperature: f64,
    /// The planned source EMF (rms) the SNR is taken at; `null` without one.
    pub planned_emf_vrms: Option<f64>,
    /// Relative accuracy the band integration reached for every contribution and total.
    pub integration_error: f64,
    pub loads: Vec<LoadNoise>,
    pub stages: Vec<StageNoise>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub at: Option<SpotReport>,
}

/// What a chain-file element is, in words ("collector resistor").
fn element_words(element: &str) -> &str {
    match element {
        "r_top" => "upper bias resistor",
        "r_bottom" => "lower bias resistor",
        "r_collector" => "collector resistor",
        "r_emitter" => "emitter resistor",
        "r_emitter_bypassed" => "bypassed emitter resistor",
        "r_feedback" => "feedback resistor",
        "supply_filter.resistance" => "supply filter resistor",
        "base_resistance" => "base spreading resistance r_bb'",
        "collector_resistance" => "collector resistance r_c",
        other => other,
    }
}

/// A source in words, a resistor's value with its unit (`format_si`, as the tables
/// write resistances): "the 2.20 kΩ collector resistor of stage \"input\"", "the
/// 150 Ω source resistance", "the 10.0 kΩ load \"out\"", "the base shot noise of
/// stage \"input\"". The one place these names are built: the table, the JSON's
/// `source`, the chart's legend and the HTML report take them from here.
pub fn describe(chain: &Chain, s: &NoiseSource) -> String {
    let of_stage = |what: &str| match s.stage {
        Some(i) => format!("the {what} of stage {}", quote(&chain.stages[i].id)),
        None => format!("the {what}"),
    };
    match s.mechanism {
        Mechanism::Thermal { r } => {
            let value = format_si(r, "Ω");
            match s.element.as_str() {
                "source_resistance" => format!("the {value} source resistance"),
                e if e.starts_with("load:") => {
                    format!("the {value} load {}", quote(&e["load:".len()..]))
                }
                e if e.starts_with("feedback:") => {
                    // `feedback:<from>-><to>` (ids may hold "->" themselves: the link
                    // names them in full).
                    match chain.topology.feedback.iter().find(|l| {
                        e == format!(
                            "feedback:{}->{}",
                            chain.stages[l.from].id, chain.stages[l.to].id
                        )
                    }) {
                        Some(l) => format!(
                            "the {value} feedback resistor from {} back to {}",
                            quote(&chain.stages[l.from].id),
                            quote(&chain.stages[l.to].id)
                        ),
                        None => format!("the {value} {e}"),
                    }
                }
                e => of_stage(&format!("{value} {}", element_words(e))),
            }
        }
        Mechanism::BaseShot => of_stage("base shot noise"),
        Mechanism::CollectorShot => of_stage("collector shot noise"),
        Mechanism::BaseFlicker => of_stage("base flicker noise"),
        Mechanism::ChannelThermal => of_stage("channel thermal noise"),
        Mechanism::OpampVoltage => of_stage("op-amp voltage noise"),
        Mechanism::OpampCurrent => of_stage(if s.element.ends_with("plus") {
            "op-amp current noise at +"
        } else {
            "op-amp current noise at −"
        }),
    }
}

/// Shares of `powers` (one per source) as contributions of at least `least`, largest first.
fn contributions(
    chain: &Chain,
    model: &NoiseModel,
    powers: &[f64],
    least: f64,
) -> Vec<ContributionReport> {
    let total: f64 = powers.iter().sum();
    let mut list: Vec<ContributionReport> = model
        .sources
        .iter()
        .zip(powers)
        .filter(|(_, &p)| total > 0.0 && p / total >= least)
        .map(|(s, &p)| ContributionReport {
            source: describe(chain, s),
            stage: s.stage.map(|i| chain.stages[i].id.clone()),
            element: s.element.clone(),
            share: p / total,
        })
        .collect();
    list.sort_by(|a, b| b.share.total_cmp(&a.share));
    list
}

/// A ratio in dB of powers, `None` unless both are positive and finite.
fn power_db(num: f64, den: f64) -> Option<f64> {
    let x = 10.0 * (num / den).log10();
    (num > 0.0 && den > 0.0 && x.is_finite()).then_some(x)
}

impl NoiseReport {
    /// Gather the report of `noise` on `model`; `planned` is the planned source level,
    /// `at` a frequency for spot densities.
    pub fn new(
        chain: &Chain,
        model: &mut NoiseModel,
        noise: &BandNoise,
        planned: Option<Level>,
        at: Option<f64>,
    ) -> Result<NoiseReport, Singular> {
        let n_loads = model.n_loads();
        let n = model.sources.len();
        let source_index = model.source_resistance();
        // Spot densities at 1 kHz (EIN density) and at `at`, unweighted.
        let spot = |f: f64, model: &mut NoiseModel| -> Result<(Vec<f64>, Vec<f64>), Singular> {
            let mut d = vec![0.0; model.density_len()];
            model.densities(f, 1.0, &mut d)?;
            let mut gains = AtFrequency::new(chain, &model.midband);
            gains.run(f);
            Ok((d, gains.load_gain.iter().map(|g| g.norm()).collect()))
        };
        let (d_1k, g_1k) = spot(SPOT_EIN_HZ, model)?;
        let mut loads = Vec::with_capacity(n_loads);
        for (k, load) in chain.loads.iter().enumerate() {
            let total = noise.total(k);
            let vrms = total.sqrt();
            let gain = model.midband.load_gain[k].norm();
            let ein = vrms / gain;
            let density_1k: f64 = d_1k[k * n..(k + 1) * n].iter().sum::<f64>().sqrt();
            loads.push(LoadNoise {
                id: load.id.clone(),
                output_noise_vrms: vrms,
                ein_vrms: ein,
                ein_dbu: Level::from_vrms(ein).dbu(),
                ein_density_at_1khz: density_1k / g_1k[k],
                // NF = 10·log10(total / the source resistance's own output noise).
                noise_figure_db: source_index.and_then(|s| power_db(total, noise.power[k][s])),
                snr_db: planned.and_then(|l| power_db(l.vrms * l.vrms, ein * ein)),
                contributions: contributions(chain, model, &noise.power[k], LEAST_SHARE),
            });
        }
        let stages = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, st)| {
                let vrms = noise.stage_power[i].sqrt();
                let sw = &model.midband.headroom[i].swing;
                let limit = sw.limit_up.min(sw.limit_down);
                StageNoise {
                    id: st.id.clone(),
                    output_noise_vrms: vrms,
                    dynamic_range_db: power_db(limit * limit / 2.0, vrms * vrms),
                }
            })
            .collect();
        let at = match at {
            None => None,
            Some(f) => {
                let (d, g) = spot(f, model)?;
                let loads = chain
                    .loads
                    .iter()
                    .enumerate()
                    .map(|(k, load)| {
                        let row = &d[k * n..(k + 1) * n];
                        let density = row.iter().sum::<f64>().sqrt();
                        SpotLoad {
                            id: load.id.clone(),
                            output_density: density,
                            ein_density: density / g[k],
                            contributions: contributions(chain, model, row, LEAST_SHARE),
                        }
                    })
                    .collect();
                Some(SpotReport {
                    frequency: f,
                    loads,
                })
            }
        };
        Ok(NoiseReport {
            band: BandReport {
                from: noise.band.from,
                to: noise.band.to,
            },
            weighting: noise.weighting.name(),
            temperature: chain.temperature,
            planned_emf_vrms: planned.map(|l| l.vrms),
            integration_error: noise.relative_error,
            loads,
            stages,
            at,
        })
    }
}

/// Output noise densities over the band for the noise chart: per load the total and
/// its largest contributors (by band power), each a curve in V/√Hz.
#[derive(Debug, Clone)]
pub struct DensityCurves {
    pub frequencies: Vec<f64>,
    /// `"none"` or `"a"`: the weighting the densities carry.
    pub weighting: &'static str,
    pub loads: Vec<LoadCurves>,
}

#[derive(Debug, Clone)]
pub struct LoadCurves {
    pub id: String,
    pub total: Vec<f64>,
    /// (the source in words, its density at each frequency).
    pub contributors: Vec<(String, Vec<f64>)>,
}

/// Points per decade of the noise chart.
pub const CURVE_PER_DECADE: usize = 40;

impl DensityCurves {
    /// The curves of `noise` (its band and weighting) with the `top` largest
    /// contributors of each load.
    pub fn new(
        chain: &Chain,
        model: &mut NoiseModel,
        noise: &BandNoise,
        top: usize,
    ) -> Result<DensityCurves, Singular> {
        let frequencies =
            crate::response::log_spaced(noise.band.from, noise.band.to, CURVE_PER_DECADE);
        let n = model.sources.len();
        let mut d = vec![0.0; model.density_len()];
        let mut loads: Vec<LoadCurves> = Vec::with_capacity(model.n_loads());
        let mut picks: Vec<Vec<usize>> = Vec::with_capacity(model.n_loads());
        for (k, load) in chain.loads.iter().enumerate() {
            let mut order: Vec<usize> = (0..n).collect();
            order.sort_by(|&a, &b| noise.power[k][b].total_cmp(&noise.power[k][a]));
            order.truncate(top);
            loads.push(LoadCurves {
                id: load.id.clone(),
                total: Vec::with_capacity(frequencies.len()),
                contributors: order
                    .iter()
                    .map(|&s| (describe(chain, &model.sources[s]), Vec::new()))
                    .collect(),
            });
            picks.push(order);
        }
        for &f in &frequencies {
            model.densities(f, noise.weighting.power(f), &mut d)?;
            for (k, curves) in loads.iter_mut().enumerate() {
                let row = &d[k * n..(k + 1) * n];
                curves.total.push(row.iter().sum::<f64>().sqrt());
                for (c, &s) in curves.contributors.iter_mut().zip(&picks[k]) {
                    c.1.push(row[s].sqrt());
                }
            }
        }
        Ok(DensityCurves {
            frequencies,
            weighting: noise.weighting.name(),
            loads,
        })
    }
}
