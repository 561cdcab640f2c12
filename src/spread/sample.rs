//! Drawing one build: each trial has its own random stream, derived from the seed and
//! the trial's index alone, so a result never depends on how trials are shared out
//! between threads.
//!
//! The generator is Xoshiro256++ (`rand_xoshiro`): a trial's 256-bit state is
//! SplitMix64's expansion of the run's key XOR the trial's index, the key itself
//! SplitMix64's first output from the seed. A trial draws a few dozen numbers, so
//! setting up its stream must cost little: four SplitMix64 steps, against a 256-byte
//! block for ChaCha8.

use super::model::Spread;
use crate::spec::Distribution;
use rand::{Rng, RngCore, SeedableRng};
use rand_distr::StandardNormal;
use rand_xoshiro::{SplitMix64, Xoshiro256PlusPlus};

/// The generator of a trial's stream.
pub type TrialRng = Xoshiro256PlusPlus;

/// A normal spread's limits sit at ±3σ.
pub const SIGMAS_AT_LIMIT: f64 = 3.0;

/// The key of a run: SplitMix64's first output from the seed.
pub fn key_from_seed(seed: u64) -> u64 {
    SplitMix64::seed_from_u64(seed).next_u64()
}

/// The random stream of trial `trial`: Xoshiro256++ seeded (by SplitMix64) from the
/// run's key XOR the trial's index (distinct for every trial of a run).
pub fn trial_rng(key: u64, trial: u64) -> TrialRng {
    Xoshiro256PlusPlus::seed_from_u64(key ^ trial)
}

/// A standard normal deviate cut off at ±3 (drawn again beyond; 0.27 % of draws).
fn truncated_standard_normal(rng: &mut TrialRng) -> f64 {
    loop {
        let z: f64 = rng.sample(StandardNormal);
        if z.abs() <= SIGMAS_AT_LIMIT {
            return z;
        }
    }
}

impl Spread {
    /// Draw a value: uniform over [min, max]; or normal around the nominal value with
    /// σ = (max − nominal)/3 above it and (nominal − min)/3 below (one σ for a
    /// symmetric tolerance), cut off at the limits.
    pub fn sample(&self, rng: &mut TrialRng) -> f64 {
        match self.distribution {
            Distribution::Uniform => {
                let u: f64 = rng.random();
                self.min + u * (self.max - self.min)
            }
            Distribution::Normal => {
                let z = truncated_standard_normal(rng) / SIGMAS_AT_LIMIT;
                if z >= 0.0 {
                    self.nominal + z * (self.max - self.nominal)
                } else {
                    self.nominal + z * (self.nominal - self.min)
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spread::model::Param;

    fn spread(distribution: Distribution) -> Spread {
        Spread {
            param: Param::Supply,
            parameter: "r".into(),
            min: 9_500.0,
            nominal: 10_000.0,
            max: 10_500.0,
            distribution,
            unit: "Ω",
        }
    }

    /// Sample mean and variance of `n` draws, each trial on its own stream.
    fn moments(s: &Spread, n: u64) -> (f64, f64, f64, f64) {
        let key = key_from_seed(7);
        let xs: Vec<f64> = (0..n).map(|i| s.sample(&mut trial_rng(key, i))).collect();
        let mean = xs.iter().sum::<f64>() / n as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
        let lo = xs.iter().cloned().fold(f64::INFINITY, f64::min);
        let hi = xs.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
        (mean, var, lo, hi)
    }

    #[test]
    fn uniform_tolerance_has_the_closed_form_mean_and_variance() {
        // Uniform on [a, b]: mean (a+b)/2, variance (b−a)²/12 (handbook formulas, from
        // memory). Standard errors for n draws: σ/√n for the mean; for the variance
        // √((μ4 − σ⁴)/n) with μ4 = (b−a)⁴/80, i.e. σ²·√(0.8/n). Bound: 5 standard errors.
        let s = spread(Distribution::Uniform);
        let n = 100_000;
        let (mean, var, lo, hi) = moments(&s, n);
        let var0 = (s.max - s.min).powi(2) / 12.0;
        assert!(
            (mean - 10_000.0).abs() < 5.0 * (var0 / n as f64).sqrt(),
            "{mean}"
        );
        assert!(
            (var - var0).abs() < 5.0 * var0 * (0.8 / n as f64).sqrt(),
            "{var} vs {var0}"
        );
        assert!(lo >= s.min && hi <= s.max && lo < 9_501.0 && hi > 10_499.0);
    }

    #[test]
    fn normal_tolerance_is_three_sigma_cut_off_at_the_limits() {
        // Normal with the tolerance at 3σ, cut off at ±3σ: mean μ; variance of a
        // normal truncated symmetrically at ±a: σ²·(1 − 2a·φ(a)/(2Φ(a) − 1)), with
        // φ(3) = 0.004431848 and Φ(3) = 0.998650102 (handbook formula and table
        // values, from memory): 0.973337·σ². Standard errors for n draws: σ/√n for the
        // mean, σ²·√(2/n) for the variance (normal approximation). Bound: 5 standard
        // errors; the untruncated σ² lies 8 of them away at this n, so the cut shows.
        let s = spread(Distribution::Normal);
        let n = 200_000;
        let (mean, var, lo, hi) = moments(&s, n);
        let sigma = 500.0 / 3.0;
        let (phi, cdf) = (0.004_431_848, 0.998_650_102);
        let var0 = sigma * sigma * (1.0 - 2.0 * 3.0 * phi / (2.0 * cdf - 1.0));
        assert!(
            (mean - 10_000.0).abs() < 5.0 * sigma / (n as f64).sqrt(),
            "{mean}"
        );
        let se = sigma * sigma * (2.0 / n as f64).sqrt();
        assert!((var - var0).abs() < 5.0 * se, "{var} vs {var0} (±{se})");
        assert!(lo >= s.min && hi <= s.max);
    }

    #[test]
    fn a_trial_draws_the_same_values_whatever_came_before() {
        let key = key_from_seed(42);
        let s = spread(Distribution::Normal);
        let a: Vec<f64> = (0..4).map(|_| s.sample(&mut trial_rng(key, 3))).collect();
        assert!(a.iter().all(|x| *x == a[0]));
        let b = s.sample(&mut trial_rng(key, 4));
        assert_ne!(a[0], b);
        assert_ne!(a[0], s.sample(&mut trial_rng(key_from_seed(43), 3)));
    }
}
