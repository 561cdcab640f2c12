//! Phase and gain margin of a loop from its return ratio T(jω), by the scan
//! docs/definitions.md fixes ("Margins"): T at 40 log-spaced points per decade from
//! 10 mHz to 10 GHz (both ends included); each sign change of |T| − 1 between
//! neighbours refined by bisection to a crossing, phase margin = min over those of
//! 180° − |arg T|; each sign change of Im T where Re T < 0 at either neighbour refined
//! likewise, gain margin = min over those where Re T < 0 of −20·log10|T|. Crossings
//! outside the scan do not count; no crossing gives `None` (JSON null).

use num_complex::Complex64;

/// Lowest frequency of the scan, Hz.
pub const SCAN_FROM: f64 = 10e-3;
/// Highest frequency of the scan, Hz.
pub const SCAN_TO: f64 = 10e9;
/// Scan points per decade.
pub const PER_DECADE: usize = 40;
/// Bisection steps in log f: 12 decades / 40 per decade halved 60 times is far below
/// the resolution of f64.
const BISECTIONS: usize = 60;

/// Margins of one loop; `None` where the scan finds no crossing.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Margins {
    /// min over the unity-gain crossings of 180° − |arg T|, degrees.
    pub phase_margin_deg: Option<f64>,
    /// Frequency of that crossing, Hz.
    pub phase_crossing_hz: Option<f64>,
    /// min over the phase crossings (Im T = 0, Re T < 0) of −20·log10|T|, dB.
    pub gain_margin_db: Option<f64>,
    /// Frequency of that crossing, Hz.
    pub gain_crossing_hz: Option<f64>,
}

/// The scan's frequencies: 10^(−2 + k/40), k = 0 … 480.
pub fn scan_frequencies() -> impl Iterator<Item = f64> {
    let decades = (SCAN_TO / SCAN_FROM).log10().round() as usize;
    (0..=decades * PER_DECADE).map(|k| SCAN_FROM * 10f64.powf(k as f64 / PER_DECADE as f64))
}

/// Bisect in log f between `lo` and `hi`, where `side(T)` differs at the ends, to the
/// crossing; returns its frequency and T there.
fn bisect(
    t: &mut impl FnMut(f64) -> Complex64,
    side: impl Fn(Complex64) -> bool,
    mut lo: f64,
    mut hi: f64,
) -> (f64, Complex64) {
    let low_side = side(t(lo));
    for _ in 0..BISECTIONS {
        let mid = (lo * hi).sqrt();
        if side(t(mid)) == low_side {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let f = (lo * hi).sqrt();
    (f, t(f))
}

/// The margins of the return ratio `t` (a function of frequency in Hz).
pub fn margins(mut t: impl FnMut(f64) -> Complex64) -> Margins {
    let mut out = Margins {
        phase_margin_deg: None,
        phase_crossing_hz: None,
        gain_margin_db: None,
        gain_crossing_hz: None,
    };
    let above_one = |x: Complex64| x.norm() - 1.0 > 0.0;
    let im_positive = |x: Complex64| x.im > 0.0;
    let mut prev: Option<(f64, Complex64)> = None;
    for f in scan_frequencies() {
        let here = t(f);
        if let Some((f0, t0)) = prev {
            if above_one(t0) != above_one(here) {
                let (fc, tc) = bisect(&mut t, above_one, f0, f);
                // 180° − |arg T|, arg in (−180°, 180°].
                let pm = 180.0 - tc.arg().to_degrees().abs();
                if out.phase_margin_deg.map_or(true, |m| pm < m) {
                    out.phase_margin_deg = Some(pm);
                    out.phase_crossing_hz = Some(fc);
                }
            }
            if im_positive(t0) != im_positive(here) && (t0.re < 0.0 || here.re < 0.0) {
                let (fc, tc) = bisect(&mut t, im_positive, f0, f);
                if tc.re < 0.0 {
                    let gm = -20.0 * tc.norm().log10();
                    if out.gain_margin_db.map_or(true, |m| gm < m) {
                        out.gain_margin_db = Some(gm);
                        out.gain_crossing_hz = Some(fc);
                    }
                }
            }
        }
        prev = Some((f, here));
    }
    out
}
