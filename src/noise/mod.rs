//! Noise (docs/definitions.md "Noise"): every resistor's thermal noise and every
//! transistor's shot and flicker noise, carried to every load and stage output through
//! the exact small-signal network at each frequency, integrated over a band with an
//! optional weighting.
//!
//! - `sources.rs`: the sources and their densities;
//! - `network.rs`: the chain's network at f and the adjoint solve (one solve per
//!   output gives every source's transfer);
//! - `integrate.rs`: adaptive Gauss–Kronrod in ln f with a stated error bound;
//! - `weighting.rs`: IEC 61672-1 A-weighting;
//! - `optimum.rs`: the collector current with the lowest noise figure (`noise --optimum`).

pub mod integrate;
pub mod network;
pub mod optimum;
pub mod sources;
pub mod weighting;

pub use network::{NoiseNetwork, Singular};
pub use sources::{Mechanism, NoiseSource, Spectrum};
pub use weighting::Weighting;

use crate::chain::Chain;
use crate::dc::DcError;
use crate::evaluate::{check_gains, Evaluation, GainOverflow, GainUse};
use crate::large_signal::flat::{FlatError, Netlist};
use num_complex::Complex64;

/// Default band: 20 Hz to 20 kHz (the audio band, common practice).
pub const DEFAULT_BAND: NoiseBand = NoiseBand {
    from: 20.0,
    to: 20e3,
};
/// Relative accuracy of every integrated contribution and total.
pub const TOLERANCE: f64 = 1e-7;

/// The band noise is integrated over, in hertz.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseBand {
    pub from: f64,
    pub to: f64,
}

/// Why noise cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum NoiseError {
    #[error(transparent)]
    Dc(#[from] DcError),
    #[error(transparent)]
    Flat(#[from] FlatError),
    #[error(transparent)]
    Singular(#[from] Singular),
    /// A gain beyond the range noise powers can be computed in.
    #[error(transparent)]
    Gain(#[from] GainOverflow),
}

/// The chain prepared for noise: its midband evaluation, netlist, sources and network.
#[derive(Debug, Clone)]
pub struct NoiseModel {
    pub midband: Evaluation,
    pub netlist: Netlist,
    pub sources: Vec<NoiseSource>,
    pub network: NoiseNetwork,
    /// The outputs: every load's node, then every stage's output node (netlist nodes).
    pub outputs: Vec<usize>,
    /// Each source's two ends as unknowns of the network.
    ends: Vec<(Option<usize>, Option<usize>)>,
    z: Vec<Complex64>,
}

impl NoiseModel {
    /// Solve the operating points and build the noise sources and network of `chain`.
    pub fn new(chain: &Chain) -> Result<NoiseModel, NoiseError> {
        let midband = chain.evaluate()?;
        // Noise powers square the gain (docs/definitions.md "Range of gains and levels").
        check_gains(chain, &midband.ac, &midband.load_gain, GainUse::Noise)?;
        let netlist = Netlist::build(chain)?;
        let sources = sources::noise_sources(chain, &netlist, &midband);
        let network = NoiseNetwork::build(chain, &netlist, &midband);
        let outputs = netlist
            .loads
            .iter()
            .copied()
            .chain(netlist.stages.iter().map(|s| s.output))
            .collect();
        let ends = sources
            .iter()
            .map(|s| (network.unknown(s.a), network.unknown(s.b)))
            .collect();
        Ok(NoiseModel {
            z: vec![Complex64::new(0.0, 0.0); network.size()],
            midband,
            netlist,
            sources,
            network,
            outputs,
            ends,
        })
    }

    /// The index of the source resistance's thermal noise in `sources` (none when R_S = 0).
    pub fn source_resistance(&self) -> Option<usize> {
        self.sources
            .iter()
            .position(|s| s.element == "source_resistance")
    }

    /// Number of loads (the first outputs).
    pub fn n_loads(&self) -> usize {
        self.netlist.loads.len()
    }

    /// Length of the output of [`NoiseModel::densities`].
    pub fn density_len(&self) -> usize {
        self.n_loads() * self.sources.len() + self.netlist.stages.len()
    }

    /// Output noise densities (V²/Hz) at `f` hertz, weighted by `weight` (a power
    /// factor): `out[k·n + s]` for load k and source s (n sources), then
    /// `out[loads·n + i]` the total at stage i's output node.
    pub fn densities(&mut self, f: f64, weight: f64, out: &mut [f64]) -> Result<(), Singular> {
        self.network.stamp(f)?;
        let n = self.sources.len();
        let n_loads = self.n_loads();
        for o in 0..self.outputs.len() {
            if o < n_loads {
                let row = &mut out[o * n..(o + 1) * n];
                self.output_density(o, f, weight, |s, p| row[s] = p)?;
            } else {
                out[n_loads * n + (o - n_loads)] = self.output_density(o, f, weight, |_, _| {})?;
            }
        }
        Ok(())
    }

    /// The total noise density (V²/Hz) at every load at `f` hertz, weighted by
    /// `weight`: `out[k]` for load k, without the split by source or the stage
    /// outputs (what EIN and SNR need).
    pub fn load_densities(&mut self, f: f64, weight: f64, out: &mut [f64]) -> Result<(), Singular> {
        self.network.stamp(f)?;
        for (k, x) in out.iter_mut().enumerate().take(self.n_loads()) {
            *x = self.output_density(k, f, weight, |_, _| {})?;
        }
        Ok(())
    }

    /// The noise density at output `o` (of `outputs`) with the network stamped at `f`:
    /// every source through the adjoint solution (docs/definitions.md "Noise"), each
    /// source's power handed to `each(s, p)`, their sum returned. An output at AC
    /// ground carries no noise.
    fn output_density(
        &mut self,
        o: usize,
        f: f64,
        weight: f64,
        mut each: impl FnMut(usize, f64),
    ) -> Result<f64, Singular> {
        let Some(u) = self.network.unknown(self.outputs[o]) else {
            (0..self.sources.len()).for_each(|s| each(s, 0.0));
            return Ok(0.0);
        };
        self.network
            .adjoint(u, &mut self.z)
            .ok_or(Singular { frequency: f })?;
        let mut total = 0.0;
        for (s, src) in self.sources.iter().enumerate() {
            let h = match src.series {
                Some(k) => self.network.series_transfer(k, &self.z, f),
                None => {
                    let (a, b) = self.ends[s];
                    network::transfer(&self.z, a, b)
                }
            };
            let p = h.norm_sqr() * src.spectrum.at(f) * weight;
            each(s, p);
            total += p;
        }
        Ok(total)
    }

    /// v(node)/EMF at `f` hertz from the network (the source EMF behind R_S is a
    /// current EMF/R_S into the source node, Norton); `None` when R_S = 0.
    pub fn emf_transfer(&mut self, f: f64, node: usize) -> Option<Complex64> {
        let r_s = self
            .netlist
            .resistors
            .iter()
            .find(|r| r.a == self.netlist.emf && r.b == self.netlist.source)?
            .r;
        if r_s == 0.0 {
            return None;
        }
        self.network.stamp(f).ok()?;
        let u = self.network.unknown(node)?;
        self.network.adjoint(u, &mut self.z)?;
        let src = self.network.unknown(self.netlist.source)?;
        Some(self.z[src] / r_s)
    }
}

/// Band noise of every source at every load, and the total at every stage output.
#[derive(Debug, Clone)]
pub struct BandNoise {
    pub band: NoiseBand,
    pub weighting: Weighting,
    /// `power[k][s]`: the noise power (V²) of source s at load k.
    pub power: Vec<Vec<f64>>,
    /// The noise power (V²) at each stage's output node.
    pub stage_power: Vec<f64>,
    /// The integration's relative accuracy reached (at most [`TOLERANCE`]).
    pub relative_error: f64,
    /// Frequencies evaluated.
    pub points: usize,
}

impl BandNoise {
    /// Total noise power at load k (V²).
    pub fn total(&self, k: usize) -> f64 {
        self.power[k].iter().sum()
    }
}

/// The total noise power (V²) at every load over `band` with `weighting`, each to
/// [`TOLERANCE`]: what EIN and SNR need, without the split by source or the stage
/// outputs (one adjoint solve per load and frequency, one component per load to
/// converge). `spread` and `tune` measure noise this way.
pub fn band_load_totals(
    model: &mut NoiseModel,
    band: NoiseBand,
    weighting: Weighting,
) -> Result<Vec<f64>, Singular> {
    let group: Vec<usize> = (0..model.n_loads()).collect();
    let integral = integrate_model(model, band, weighting, &group, NoiseModel::load_densities)?;
    Ok(integral.values)
}

/// Integrate the densities `fill` gives (one per entry of `group`) over `band` with
/// `weighting`, to [`TOLERANCE`]; the first singular frequency is the error.
fn integrate_model(
    model: &mut NoiseModel,
    band: NoiseBand,
    weighting: Weighting,
    group: &[usize],
    fill: fn(&mut NoiseModel, f64, f64, &mut [f64]) -> Result<(), Singular>,
) -> Result<integrate::Integral, Singular> {
    let mut failure = None;
    let integral = integrate::integrate_band(band.from, band.to, group, TOLERANCE, |f, out| {
        if let Err(e) = fill(model, f, weighting.power(f), out) {
            failure.get_or_insert(e);
            out.iter_mut().for_each(|x| *x = 0.0);
        }
    });
    match failure {
        Some(e) => Err(e),
        None => Ok(integral),
    }
}

/// Integrate every source's noise at every load, and the total at every stage output,
/// over `band` with `weighting`. Each load's contributions and each stage total is
/// held to [`TOLERANCE`] (stage outputs by their totals only, so a long chain's
/// integrand grows with stages + sources, not their product).
pub fn band_noise(
    model: &mut NoiseModel,
    band: NoiseBand,
    weighting: Weighting,
) -> Result<BandNoise, Singular> {
    let n = model.sources.len();
    let n_loads = model.n_loads();
    // Group of each component: its load, or its stage output (a group of its own).
    let group: Vec<usize> = (0..model.density_len())
        .map(|c| {
            if c < n_loads * n {
                c / n
            } else {
                c - n_loads * n + n_loads
            }
        })
        .collect();
    let integral = integrate_model(model, band, weighting, &group, NoiseModel::densities)?;
    Ok(BandNoise {
        band,
        weighting,
        power: (0..n_loads)
            .map(|k| integral.values[k * n..(k + 1) * n].to_vec())
            .collect(),
        stage_power: integral.values[n_loads * n..].to_vec(),
        relative_error: integral.relative_error,
        points: integral.points,
    })
}
