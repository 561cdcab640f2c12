//! What each build measures: its gains and clip levels at midband or at one frequency
//! (`--at`), and on request (`--band`) the −3 dB corners of every load.
//!
//! Corners of a build are found like `response` finds them (|H(f)|/|H_mid| = 1/√2 on
//! the exact response), but starting from the nominal chain's corner instead of a scan
//! over thirteen decades: a walk in steps of [`WALK_STEP`] from there to the first
//! frequency on the other side of −3 dB, then bisection in ln f to [`REFINE_TOLERANCE`].
//! A build's corner sits near the nominal one, so this takes about 30 AC passes per
//! corner instead of about 320. Where the response crosses −3 dB more than once near
//! the corner (peaking), the walk finds the crossing nearest the nominal corner.

use crate::ac::{self, AcState};
use crate::chain::Chain;
use crate::dc::DcError;
use crate::evaluate::Evaluation;
use crate::network::Freq;
use crate::response::corners::{find_all, SearchRange, SEARCH_FROM, SEARCH_TO};
use crate::response::AtFrequency;
use num_complex::Complex64;
use std::f64::consts::FRAC_1_SQRT_2;

/// Ratio between successive frequencies of the walk from the nominal corner.
pub const WALK_STEP: f64 = 1.25;
/// Width of the final bracket in ln f (relative width of the corner frequency).
pub const REFINE_TOLERANCE: f64 = 1e-9;

/// The nominal corners of one load, where each build's search starts (`None`: the
/// nominal chain has no such corner in the search range, nor does any build then).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BandStart {
    pub low: Option<f64>,
    pub high: Option<f64>,
}

/// What every build of a run measures.
#[derive(Debug, Clone, PartialEq)]
pub struct Measure {
    /// Where gains and clip levels are evaluated: [`Freq::Midband`] or [`Freq::Hz`].
    pub freq: Freq,
    /// Corner search per load (`None`: corners are not measured).
    pub band: Option<Vec<BandStart>>,
    /// Band noise of every build (`--noise`; `None`: not measured).
    pub noise: Option<NoiseMeasure>,
    /// Every stage's transistor dissipation (a `dissipation@STAGE` requirement).
    pub dissipation: bool,
    /// Every stage's resistor powers (a `resistor_power@STAGE.PART` requirement).
    pub resistor_power: bool,
    /// Warnings counted by kind (a `warnings@KIND` requirement; `None`: not counted).
    pub warnings: Option<WarningMeasure>,
}

/// What a `warnings@KIND` requirement counts per build: `warnings::collect` at the
/// planned level.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WarningMeasure {
    pub level: Option<crate::units::Level>,
}

/// What `spread --noise` measures per build: every load's EIN over `band` with
/// `weighting`, and its SNR at the planned level (docs/definitions.md "Noise").
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseMeasure {
    pub band: crate::noise::NoiseBand,
    pub weighting: crate::noise::Weighting,
    /// The planned source EMF (V rms); `None`: no SNR.
    pub planned_vrms: Option<f64>,
}

impl Measure {
    /// Gains and clip levels at midband, no corners: what `plan` reports.
    pub const MIDBAND: Measure = Measure {
        freq: Freq::Midband,
        band: None,
        noise: None,
        dissipation: false,
        resistor_power: false,
        warnings: None,
    };

    /// Measure at `freq`, and the corners of every load when `band`, their searches
    /// starting from the nominal chain's corners. Fails when the nominal chain has no
    /// operating point.
    pub fn new(chain: &Chain, freq: Freq, band: bool) -> Result<Measure, DcError> {
        let band = if band {
            let mid = chain.evaluate()?;
            let mut at = AtFrequency::new(chain, &mid);
            let search = SearchRange {
                from: SEARCH_FROM,
                to: SEARCH_TO,
                per_decade: crate::response::corners::SEARCH_PER_DECADE,
            };
            let corners = find_all(chain, &mid, &mut at, &search);
            Some(
                corners
                    .iter()
                    .map(|c| BandStart {
                        low: c.low.frequency,
                        high: c.high.frequency,
                    })
                    .collect(),
            )
        } else {
            None
        };
        Ok(Measure {
            freq,
            band,
            noise: None,
            dissipation: false,
            resistor_power: false,
            warnings: None,
        })
    }

    /// True when capacitors act on what is measured, so their tolerances count.
    pub fn at_frequency(&self) -> bool {
        self.freq != Freq::Midband || self.band.is_some() || self.noise.is_some()
    }
}

/// Which side of a corner is outside the band.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Edge {
    Low,
    High,
}

/// Scratch space of a corner search (one per worker thread).
#[derive(Debug, Clone)]
pub struct BandSearch {
    ac: Vec<AcState>,
    load_gain: Vec<Complex64>,
    h_mid: Vec<f64>,
}

impl BandSearch {
    pub fn new(chain: &Chain) -> Self {
        BandSearch {
            ac: vec![AcState::default(); chain.stages.len()],
            load_gain: vec![Complex64::new(0.0, 0.0); chain.loads.len()],
            h_mid: vec![0.0; chain.loads.len()],
        }
    }

    /// |H_k(f)|/|H_k,mid| on the operating points of `ev`.
    fn ratio(&mut self, chain: &Chain, ev: &Evaluation, k: usize, f: f64) -> f64 {
        self.pass(chain, ev, Freq::Hz(f));
        self.load_gain[k].norm() / self.h_mid[k]
    }

    fn pass(&mut self, chain: &Chain, ev: &Evaluation, freq: Freq) {
        ac::solve(
            chain,
            freq,
            ev.v_t,
            &ev.dc,
            &mut self.ac,
            &mut self.load_gain,
        );
    }

    /// The corners of every load of the build evaluated in `ev` (any frequency: only
    /// its operating points are used), `[low, high]` per load; `None` where there is
    /// no start or the walk leaves the search range.
    pub fn corners(
        &mut self,
        chain: &Chain,
        ev: &Evaluation,
        starts: &[BandStart],
        out: &mut [[Option<f64>; 2]],
    ) {
        if ev.freq == Freq::Midband {
            for (h, g) in self.h_mid.iter_mut().zip(&ev.load_gain) {
                *h = g.norm();
            }
        } else {
            self.pass(chain, ev, Freq::Midband);
            for (h, g) in self.h_mid.iter_mut().zip(&self.load_gain) {
                *h = g.norm();
            }
        }
        for (k, (s, o)) in starts.iter().zip(out.iter_mut()).enumerate() {
            o[0] = s
                .low
                .and_then(|f0| self.crossing(chain, ev, k, f0, Edge::Low));
            o[1] = s
                .high
                .and_then(|f0| self.crossing(chain, ev, k, f0, Edge::High));
        }
    }

    /// The −3 dB crossing of load `k` nearest `f0` on the `edge` side of the band.
    fn crossing(
        &mut self,
        chain: &Chain,
        ev: &Evaluation,
        k: usize,
        f0: f64,
        edge: Edge,
    ) -> Option<f64> {
        if self.h_mid[k].is_nan() || self.h_mid[k] <= 0.0 {
            return None;
        }
        // One step away from the band: down for the low corner, up for the high one.
        let outward = match edge {
            Edge::Low => 1.0 / WALK_STEP,
            Edge::High => WALK_STEP,
        };
        let mut f = f0;
        let start_outside = self.ratio(chain, ev, k, f) < FRAC_1_SQRT_2;
        // Walk until the other side of −3 dB: inward when the start is outside the
        // band, outward when it is inside.
        let step = if start_outside {
            1.0 / outward
        } else {
            outward
        };
        let (mut outside, mut inside) = loop {
            // The last step stops at the range's edge; past the edge there is no corner.
            let g = (f * step).clamp(SEARCH_FROM, SEARCH_TO);
            if g == f {
                return None;
            }
            let g_outside = self.ratio(chain, ev, k, g) < FRAC_1_SQRT_2;
            if g_outside != start_outside {
                break if start_outside { (f, g) } else { (g, f) };
            }
            f = g;
        };
        // Bisection in ln f.
        while (outside / inside).ln().abs() > REFINE_TOLERANCE {
            let mid = (outside * inside).sqrt();
            if self.ratio(chain, ev, k, mid) < FRAC_1_SQRT_2 {
                outside = mid;
            } else {
                inside = mid;
            }
        }
        Some((outside * inside).sqrt())
    }
}
