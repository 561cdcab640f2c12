//! Preferred values: the E6, E12, E24, E48, E96 and E192 series of IEC 60063.
//!
//! The tables below are one decade (1.0 … 9.x) exactly as the standard lists them,
//! written from memory of the published lists (not generated from a formula).
//! E6/E12/E24 carry two significant digits, E48/E96/E192 three.
//!
//! The series are spaced geometrically (step 10^(1/N)), so "nearest" here means
//! nearest in ratio, i.e. in log10, not in absolute difference.
//!
//! Where the published values differ from round(10^(i/N)):
//! - E24 (and so E12, E6): 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2, where the
//!   formula gives 2.6, 2.9, 3.2, 3.5, 3.8, 4.2, 4.6 and 8.3 (the older values were
//!   kept when the series was standardised).
//! - E192: 9.20, where the formula gives 9.19. E48 and E96 follow the formula.

use std::fmt;
use std::str::FromStr;

/// Relative tolerance for recognising a value as a member of a series
/// (so that 4.7e3 computed as 4699.999… still counts as 4k7).
const REL_TOL: f64 = 1e-9;

// IEC 60063, from memory.
const E6: [f64; 6] = [1.0, 1.5, 2.2, 3.3, 4.7, 6.8];

const E12: [f64; 12] = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2];

const E24: [f64; 24] = [
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6,
    6.2, 6.8, 7.5, 8.2, 9.1,
];

const E48: [f64; 48] = [
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69, 1.78, 1.87, 1.96, 2.05,
    2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01, 3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42,
    4.64, 4.87, 5.11, 5.36, 5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
];

const E96: [f64; 96] = [
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30, 1.33, 1.37, 1.40, 1.43,
    1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74, 1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10,
    2.15, 2.21, 2.26, 2.32, 2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12, 4.22, 4.32, 4.42, 4.53,
    4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49, 5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65,
    6.81, 6.98, 7.15, 7.32, 7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
];

const E192: [f64; 192] = [
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14, 1.15, 1.17, 1.18, 1.20,
    1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32, 1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45,
    1.47, 1.49, 1.50, 1.52, 1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03, 2.05, 2.08, 2.10, 2.13,
    2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34, 2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58,
    2.61, 2.64, 2.67, 2.71, 2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61, 3.65, 3.70, 3.74, 3.79,
    3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17, 4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59,
    4.64, 4.70, 4.75, 4.81, 4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42, 6.49, 6.57, 6.65, 6.73,
    6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41, 7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16,
    8.25, 8.35, 8.45, 8.56, 8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
];

/// Exact powers of ten representable in f64 (10^0 … 10^22).
const POW10: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// One of the IEC 60063 preferred-value series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Series {
    E6,
    E12,
    E24,
    E48,
    E96,
    E192,
}

impl Series {
    pub const ALL: [Series; 6] = [
        Series::E6,
        Series::E12,
        Series::E24,
        Series::E48,
        Series::E96,
        Series::E192,
    ];

    /// The preferred values of one decade, 1.0 … 9.x, ascending.
    pub fn values(self) -> &'static [f64] {
        match self {
            Series::E6 => &E6,
            Series::E12 => &E12,
            Series::E24 => &E24,
            Series::E48 => &E48,
            Series::E96 => &E96,
            Series::E192 => &E192,
        }
    }

    /// Number of values per decade (the N in E-N).
    pub fn per_decade(self) -> usize {
        self.values().len()
    }

    /// Its name, "E6" … "E192" (what `Display` writes and `FromStr` reads, in any case).
    pub fn name(self) -> &'static str {
        match self {
            Series::E6 => "E6",
            Series::E12 => "E12",
            Series::E24 => "E24",
            Series::E48 => "E48",
            Series::E96 => "E96",
            Series::E192 => "E192",
        }
    }
}

impl fmt::Display for Series {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Series {
    type Err = ESeriesError;

    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let trimmed = text.trim();
        Series::ALL
            .into_iter()
            .find(|series| series.to_string().eq_ignore_ascii_case(trimmed))
            .ok_or_else(|| ESeriesError::UnknownSeries {
                found: text.to_string(),
            })
    }
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ESeriesError {
    #[error(
        "unknown preferred-value series \"{found}\": expected one of E6, E12, E24, E48, E96, E192"
    )]
    UnknownSeries { found: String },
    #[error("cannot round {found} to a preferred value: expected a positive finite number")]
    NotPositive { found: f64 },
    #[error("cannot round {found} to a preferred value: outside the range of f64 decades")]
    OutOfRange { found: f64 },
    #[error(
        "asked for {found} {series} values on each side: expected at most {limit} (ten decades)"
    )]
    TooManyCandidates {
        series: Series,
        found: usize,
        limit: usize,
    },
}

/// mantissa_hundredths × 10^exponent, built from integers so that 470 × 10^1 is
/// exactly 4700.0 and 470 / 10^5 is the f64 closest to 4.7e-3.
fn scaled(hundredths: u32, exponent: i32) -> f64 {
    let h = f64::from(hundredths);
    let e = exponent.unsigned_abs() as usize;
    match (exponent >= 0, POW10.get(e)) {
        (true, Some(p)) => h * p,
        (false, Some(p)) => h / p,
        // Far outside any component value; exactness no longer matters.
        _ => h * 10f64.powi(exponent),
    }
}

/// The preferred value with global index `index`: position `index mod N` in the table,
/// decade `index div N` (index 0 is 1.0).
fn member(series: Series, index: i64) -> f64 {
    let table = series.values();
    let n = table.len() as i64;
    let decade = index.div_euclid(n);
    let position = index.rem_euclid(n) as usize;
    let hundredths = (table[position] * 100.0).round() as u32;
    // Clamp keeps the i32 conversion total; such decades give 0 or inf, caught by callers.
    scaled(hundredths, (decade - 2).clamp(-400, 400) as i32)
}

fn check_input(value: f64) -> Result<(), ESeriesError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(ESeriesError::NotPositive { found: value })
    }
}

/// Equal within the relative tolerance; an infinite member (past f64's range) is
/// never equal to a finite value.
fn same(a: f64, b: f64) -> bool {
    a.is_finite() && b.is_finite() && (a - b).abs() <= REL_TOL * a.abs().max(b.abs())
}

/// Global index of the largest member ≤ value (within the relative tolerance).
fn index_at_or_below(series: Series, value: f64) -> Result<i64, ESeriesError> {
    check_input(value)?;
    let n = series.per_decade() as i64;
    // First guess from the geometric spacing (off by at most a step or two), then walk
    // to the exact position; the walk is bounded so that no input can make it hang.
    let mut index = (value.log10() * n as f64).floor() as i64;
    let mut steps = 0;
    while member(series, index) > value && !same(member(series, index), value) {
        index -= 1;
        steps += 1;
        if steps > 4 * n {
            return Err(ESeriesError::OutOfRange { found: value });
        }
    }
    while member(series, index + 1) <= value || same(member(series, index + 1), value) {
        index += 1;
        steps += 1;
        if steps > 4 * n {
            return Err(ESeriesError::OutOfRange { found: value });
        }
    }
    let (low, high) = (member(series, index), member(series, index + 1));
    if low > 0.0 && high.is_finite() {
        Ok(index)
    } else {
        Err(ESeriesError::OutOfRange { found: value })
    }
}

/// The preferred values just below-or-equal and just above-or-equal to `value`, in
/// any decade. If `value` is itself preferred, both equal it.
/// Example: 9.9k in E12 gives (8.2k, 10k).
pub fn bracket(series: Series, value: f64) -> Result<(f64, f64), ESeriesError> {
    let index = index_at_or_below(series, value)?;
    let low = member(series, index);
    if same(low, value) {
        Ok((low, low))
    } else {
        Ok((low, member(series, index + 1)))
    }
}

/// The nearest preferred value, nearest in ratio (log10), as the series is spaced
/// geometrically. At the geometric midpoint exactly, the upper value is taken.
pub fn nearest(series: Series, value: f64) -> Result<f64, ESeriesError> {
    let (low, high) = bracket(series, value)?;
    // Compare value/low with high/value, i.e. the log distances.
    if value / low < high / value {
        Ok(low)
    } else {
        Ok(high)
    }
}

/// Preferred values from `lo` to `hi` (both included), ascending; none for a range
/// that is not positive and finite, or holds no preferred value.
pub fn between(series: Series, lo: f64, hi: f64) -> Vec<f64> {
    if !(lo > 0.0 && hi >= lo && hi.is_finite()) {
        return Vec::new();
    }
    // Enough values each side of the geometric middle to cover the span.
    let each_side = ((hi / lo).log10() / 2.0 * series.per_decade() as f64).ceil() as usize + 1;
    candidates(series, (lo * hi).sqrt(), each_side)
        .unwrap_or_default()
        .into_iter()
        .filter(|x| (lo..=hi).contains(x))
        .collect()
}

/// Preferred values around `value`, ascending: `n` below and `n` above it. If `value`
/// is itself preferred it is included in the middle (2n + 1 values), otherwise 2n.
/// `n` may span at most ten decades each way.
pub fn candidates(series: Series, value: f64, n: usize) -> Result<Vec<f64>, ESeriesError> {
    let limit = 10 * series.per_decade();
    if n > limit {
        return Err(ESeriesError::TooManyCandidates {
            series,
            found: n,
            limit,
        });
    }
    let index = index_at_or_below(series, value)?;
    let n = n as i64;
    let exact = same(member(series, index), value);
    let (first, last) = if exact {
        (index - n, index + n)
    } else {
        (index - n + 1, index + n)
    };
    let values: Vec<f64> = (first..=last).map(|i| member(series, i)).collect();
    if values.iter().all(|v| *v > 0.0 && v.is_finite()) {
        Ok(values)
    } else {
        Err(ESeriesError::OutOfRange { found: value })
    }
}
