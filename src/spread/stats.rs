//! Summary statistics of one quantity over the builds: order statistics by nearest
//! rank, mean and standard deviation summed in trial order (so the figures depend on
//! the values alone, never on how the trials were computed).

use serde::Serialize;

/// Nearest-rank percentile p (0 < p ≤ 1) of n sorted values: the value at rank
/// ⌈p·n⌉ (1-based), the smallest with at least a share p of the values at or below it.
pub fn nearest_rank(p: f64, n: usize) -> usize {
    ((p * n as f64).ceil() as usize).clamp(1, n) - 1
}

/// min / 1st percentile / median / 99th percentile / max of a quantity, with its
/// value in the nominal build; mean and standard deviation where they are meaningful.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Stats {
    pub nominal: f64,
    pub min: f64,
    pub p1: f64,
    pub median: f64,
    pub p99: f64,
    pub max: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mean: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub std_dev: Option<f64>,
}

impl Stats {
    /// Statistics of `values` (given in trial order; reordered in place). `None` when
    /// there are no values.
    pub fn of(values: &mut [f64], nominal: f64) -> Option<Stats> {
        let n = values.len();
        if n == 0 {
            return None;
        }
        // Mean and (sample) standard deviation, summed in trial order.
        let mean = values.iter().sum::<f64>() / n as f64;
        let std_dev = if n > 1 {
            (values.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
        } else {
            0.0
        };
        let min = values.iter().copied().fold(f64::INFINITY, f64::min);
        let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let (i1, i50, i99) = (
            nearest_rank(0.01, n),
            nearest_rank(0.5, n),
            nearest_rank(0.99, n),
        );
        // Selection instead of a full sort: the median first, then each tail within
        // its side of it.
        let (low, median, high) = values.select_nth_unstable_by(i50, f64::total_cmp);
        let median = *median;
        let p1 = if i1 < i50 {
            *low.select_nth_unstable_by(i1, f64::total_cmp).1
        } else {
            median
        };
        let p99 = if i99 > i50 {
            *high.select_nth_unstable_by(i99 - i50 - 1, f64::total_cmp).1
        } else {
            median
        };
        Some(Stats {
            nominal,
            min,
            p1,
            median,
            p99,
            max,
            mean: Some(mean),
            std_dev: Some(std_dev),
        })
    }

    /// The order statistics carried through an increasing function (e.g. V/V → dB);
    /// mean and standard deviation do not carry over and are dropped.
    pub fn map(&self, f: impl Fn(f64) -> f64) -> Stats {
        Stats {
            nominal: f(self.nominal),
            min: f(self.min),
            p1: f(self.p1),
            median: f(self.median),
            p99: f(self.p99),
            max: f(self.max),
            mean: None,
            std_dev: None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_rank_percentiles_of_one_to_hundred() {
        // Nearest-rank definition (common practice, no source): of 1..=100 the 1st
        // percentile is 1, the median 50, the 99th percentile 99.
        let mut v: Vec<f64> = (1..=100).rev().map(f64::from).collect();
        let s = Stats::of(&mut v, 50.0).unwrap();
        assert_eq!(
            (s.min, s.p1, s.median, s.p99, s.max),
            (1.0, 1.0, 50.0, 99.0, 100.0)
        );
        // Mean 50.5 and sample variance n(n+1)/12 = 841.67 of 1..=100 (closed forms).
        assert!((s.mean.unwrap() - 50.5).abs() < 1e-12);
        assert!((s.std_dev.unwrap() - (100.0f64 * 101.0 / 12.0).sqrt()).abs() < 1e-9);
        // Of 1..=1000: ranks 10, 500, 990.
        let mut v: Vec<f64> = (1..=1000).map(f64::from).collect();
        let s = Stats::of(&mut v, 0.0).unwrap();
        assert_eq!((s.p1, s.median, s.p99), (10.0, 500.0, 990.0));
        assert!(Stats::of(&mut [], 0.0).is_none());
        let mut one = [3.0];
        let s = Stats::of(&mut one, 3.0).unwrap();
        assert_eq!(
            (s.min, s.p1, s.median, s.p99, s.max),
            (3.0, 3.0, 3.0, 3.0, 3.0)
        );
    }
}
