//! The −3 dB corners of each load, on the exact response: |H(f)|/|H_mid| = 1/√2.
//!
//! Bracketing: a log-spaced scan over the search range; the passband reference is
//! the scan point closest to midband (smallest |ln(|H|/|H_mid|)|). From there the
//! scan walks down (low corner) and up (high corner) to the first point more than
//! 3 dB below midband; the crossing lies between it and its neighbour. Refinement:
//! bisection in ln f until the bracket is narrower than 1e-10 (relative), which
//! needs about 30 AC passes per corner. A scan that runs off the range means there
//! is no corner in it, which is a valid answer, reported as such.

use super::attribution::{self, Band, Contribution};
use super::{log_spaced, AtFrequency, Sweep};
use crate::chain::Chain;
use crate::evaluate::Evaluation;
use crate::units::format_si;
use serde::Serialize;
use std::f64::consts::FRAC_1_SQRT_2;

/// Default corner search: 1 mHz to 10 GHz (widened to cover the sweep), 20 points
/// per decade for the bracketing scan.
pub const SEARCH_FROM: f64 = 1e-3;
pub const SEARCH_TO: f64 = 1e10;
pub const SEARCH_PER_DECADE: usize = 20;
/// Width of the final bracket in ln f (relative width of the corner frequency).
const REFINE_TOLERANCE: f64 = 1e-10;

/// Where corners are looked for.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SearchRange {
    pub from: f64,
    pub to: f64,
    pub per_decade: usize,
}

impl SearchRange {
    /// The default range, widened to include `sweep`.
    pub fn covering(sweep: &Sweep) -> SearchRange {
        SearchRange {
            from: SEARCH_FROM.min(sweep.from),
            to: SEARCH_TO.max(sweep.to),
            per_decade: SEARCH_PER_DECADE,
        }
    }
}

/// One corner of one load.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Corner {
    /// The exact −3 dB frequency; `None` when there is none within the search range.
    pub frequency: Option<f64>,
    /// The time-constant estimate; `None` without capacitors for this corner.
    pub estimate: Option<f64>,
    /// Each capacitor's time constant and share, largest share first.
    pub contributions: Vec<Contribution>,
    /// Plain words: where the corner is and what sets it.
    pub summary: String,
}

/// Both corners of one load.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoadCorners {
    pub load: String,
    pub low: Corner,
    pub high: Corner,
}

/// |H(f)|/|H_mid| for load k.
fn ratio(at: &mut AtFrequency, k: usize, h_mid: f64, f: f64) -> f64 {
    at.run(f);
    at.load_gain[k].norm() / h_mid
}

/// Bisection in ln f between `below` (response under −3 dB) and `above` (within
/// 3 dB); returns the crossing.
fn refine(at: &mut AtFrequency, k: usize, h_mid: f64, mut below: f64, mut above: f64) -> f64 {
    // Each step halves the bracket in ln f: 200 steps reach REFINE_TOLERANCE from any
    // two finite positive ends, so the loop ends whatever the ends are.
    for _ in 0..200 {
        if (above / below).ln().abs() <= REFINE_TOLERANCE {
            break;
        }
        let mid = geometric_mean(below, above);
        if ratio(at, k, h_mid, mid) < FRAC_1_SQRT_2 {
            below = mid;
        } else {
            above = mid;
        }
    }
    geometric_mean(below, above)
}

/// √(a·b), also where the product would underflow or overflow (ends such as 1e-299
/// Hz, which made the bisection stall at 0 Hz and run forever).
fn geometric_mean(a: f64, b: f64) -> f64 {
    let product = a * b;
    if product.is_normal() {
        product.sqrt()
    } else {
        a.sqrt() * b.sqrt()
    }
}

/// Corners and attribution of every load.
pub fn find_all(
    chain: &Chain,
    mid: &Evaluation,
    at: &mut AtFrequency,
    search: &SearchRange,
) -> Vec<LoadCorners> {
    let scan = log_spaced(search.from, search.to, search.per_decade);
    let mut ratios: Vec<Vec<f64>> = vec![Vec::with_capacity(scan.len()); chain.loads.len()];
    for &f in &scan {
        at.run(f);
        for (k, r) in ratios.iter_mut().enumerate() {
            r.push(at.load_gain[k].norm() / mid.load_gain[k].norm());
        }
    }
    let range = format!(
        "between {} and {}",
        format_si(search.from, "Hz"),
        format_si(search.to, "Hz")
    );
    (0..chain.loads.len())
        .map(|k| {
            let h_mid = mid.load_gain[k].norm();
            let r = &ratios[k];
            // Passband reference: the scan point closest to midband.
            let p = (0..r.len())
                .min_by(|&a, &b| r[a].ln().abs().total_cmp(&r[b].ln().abs()))
                .unwrap_or(0);
            let in_band = r[p] >= FRAC_1_SQRT_2;
            let low = in_band
                .then(|| {
                    (1..=p)
                        .rev()
                        .find(|&j| r[j - 1] < FRAC_1_SQRT_2)
                        .map(|j| refine(at, k, h_mid, scan[j - 1], scan[j]))
                })
                .flatten();
            let high = in_band
                .then(|| {
                    (p..r.len() - 1)
                        .find(|&j| r[j + 1] < FRAC_1_SQRT_2)
                        .map(|j| refine(at, k, h_mid, scan[j + 1], scan[j]))
                })
                .flatten();
            let why_none = |band: Band| -> String {
                if !in_band {
                    format!("the response stays more than 3 dB below midband everywhere {range}")
                } else if band == Band::Low {
                    format!(
                        "no low corner {range}: the response stays within 3 dB of midband (or above it) down to {}",
                        format_si(search.from, "Hz")
                    )
                } else {
                    format!(
                        "no high corner {range}: the response stays within 3 dB of midband (or above it) up to {}",
                        format_si(search.to, "Hz")
                    )
                }
            };
            let corner = |band: Band, frequency: Option<f64>| {
                let contributions = match band {
                    Band::Low => attribution::low_frequency(chain, mid, k),
                    Band::High => attribution::high_frequency(chain, mid, k),
                };
                let estimate = attribution::estimate(band, &contributions);
                let mut summary = match frequency {
                    Some(f) => format!("{} corner at {}", band.name(), format_si(f, "Hz")),
                    None => why_none(band),
                };
                match (estimate, attribution::sentence(band, &contributions)) {
                    (Some(e), Some(s)) => summary.push_str(&format!(
                        "; time-constant estimate {}: {s}",
                        format_si(e, "Hz")
                    )),
                    _ => summary.push_str(match band {
                        Band::Low => "; no coupling or bypass capacitor on the path to this load",
                        Band::High => "; no device, source or load capacitance on the path to this load (give the devices transition_frequency and c_bc)",
                    }),
                }
                Corner {
                    frequency,
                    estimate,
                    contributions,
                    summary,
                }
            };
            LoadCorners {
                load: chain.loads[k].id.clone(),
                low: corner(Band::Low, low),
                high: corner(Band::High, high),
            }
        })
        .collect()
}
