//! What `noise --optimum STAGE` reports: the sweep of the stage's bias resistor, the
//! collector current with the lowest noise figure, and the textbook optimum beside it.

use super::BandReport;
use crate::chain::Chain;
use crate::noise::optimum::Optimum;
use crate::noise::{NoiseBand, Weighting};
use serde::Serialize;

#[derive(Debug, Clone, Serialize)]
pub struct OptimumPointReport {
    /// The bias resistor's value (Ω).
    pub resistance: f64,
    pub i_c: f64,
    pub noise_figure_db: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct OptimumReport {
    pub stage: String,
    /// The swept resistor's chain-file key.
    pub resistor: &'static str,
    /// The load whose noise figure is minimised (the first).
    pub load: String,
    pub band: BandReport,
    pub weighting: &'static str,
    pub source_resistance: f64,
    /// The build with the lowest noise figure.
    pub optimum: OptimumPointReport,
    /// The optimum lies at an end of the builds that bias: the minimum may lie beyond.
    pub at_edge: bool,
    /// (V_T/R_S)·√β, the textbook optimum of one transistor fed from R_S (A).
    pub textbook_i_c: f64,
    /// Every build that biases, by rising resistance.
    pub sweep: Vec<OptimumPointReport>,
}

impl OptimumReport {
    pub fn new(chain: &Chain, o: &Optimum, band: NoiseBand, weighting: Weighting) -> Self {
        let point = |p: &crate::noise::optimum::OptimumPoint| OptimumPointReport {
            resistance: p.resistance,
            i_c: p.i_c,
            noise_figure_db: p.noise_figure_db,
        };
        OptimumReport {
            stage: chain.stages[o.stage].id.clone(),
            resistor: o.field.key(),
            load: chain.loads[0].id.clone(),
            band: BandReport {
                from: band.from,
                to: band.to,
            },
            weighting: weighting.name(),
            source_resistance: chain.source.r_s,
            optimum: point(&o.best),
            at_edge: o.at_edge,
            textbook_i_c: o.textbook_i_c,
            sweep: o.points.iter().map(point).collect(),
        }
    }
}
