//! Band integration of noise densities: adaptive Gauss–Kronrod (7-point Gauss,
//! 15-point Kronrod) in u = ln f, on a vector of densities at once (every source at
//! every output), so each frequency costs one network solve for all of them.
//!
//! ∫ S(f) df over [f_lo, f_hi] = ∫ S(e^u)·e^u du: noise densities are rational in f,
//! smooth in ln f over decades, and 1/f flicker is constant there. On each interval
//! |K15 − G7| bounds the error of the Kronrod sum (a pessimistic bound for smooth
//! integrands: the Kronrod sum is far more accurate than the Gauss sum it is compared
//! with; Piessens et al., QUADPACK, 1983, from memory). The interval with the largest
//! error against its allowance is halved until every component c meets
//! E_c ≤ tol·(|I_c| + FLOOR·T_g), T_g the total of c's group (its output): relative
//! accuracy `tol` for every component above a millionth of its output's total.
//!
//! An integrand known only to a few parts in 10⁷ (the network solved beside a 10 F
//! capacitor: its admittance swamps the node's conductances, whose last digits are
//! lost) cannot be integrated to 1e-7: halving its intervals only halves the noise
//! each carries. As QUADPACK's qagse does (from memory), a halving whose halves
//! agree with the whole to 1e-5 but whose error bounds add up to at least 0.99 of
//! the whole's is counted as rounding; after [`ROUNDOFF_HALVINGS`] of them the
//! refinement stops and `relative_error` reports the accuracy reached.

/// Components below this fraction of their group's total need only that absolute
/// accuracy (they change no reported figure).
pub const FLOOR: f64 = 1e-6;
/// Most intervals before the integration stops and reports the error it reached.
pub const MAX_INTERVALS: usize = 4000;
/// Halvings that only met the integrand's rounding noise before the refinement stops
/// (QUADPACK's count, from memory).
pub const ROUNDOFF_HALVINGS: usize = 6;

/// Kronrod nodes on [−1, 1] (positive half, the centre last) and weights; the Gauss
/// nodes are every second one (xgk[1], xgk[3], xgk[5], xgk[7]). QUADPACK's qk15
/// tables, from memory; `tests` check them on polynomials.
const XGK: [f64; 8] = [
    0.991_455_371_120_812_6,
    0.949_107_912_342_758_5,
    0.864_864_423_359_769_1,
    0.741_531_185_599_394_4,
    0.586_087_235_467_691_1,
    0.405_845_151_377_397_2,
    0.207_784_955_007_898_5,
    0.0,
];
const WGK: [f64; 8] = [
    0.022_935_322_010_529_22,
    0.063_092_092_629_978_55,
    0.104_790_010_322_250_2,
    0.140_653_259_715_525_9,
    0.169_004_726_639_267_9,
    0.190_350_578_064_785_4,
    0.204_432_940_075_298_9,
    0.209_482_141_084_727_8,
];
const WG: [f64; 4] = [
    0.129_484_966_168_869_7,
    0.279_705_391_489_276_7,
    0.381_830_050_505_118_9,
    0.417_959_183_673_469_4,
];

/// The integrals of every component over the band, with their error bounds.
#[derive(Debug, Clone, PartialEq)]
pub struct Integral {
    pub values: Vec<f64>,
    /// Σ over intervals of |K15 − G7| per component.
    pub errors: Vec<f64>,
    /// Largest E_c/(|I_c| + FLOOR·T_g) over the components: the relative accuracy
    /// reached (at most `tol` unless [`MAX_INTERVALS`] stopped the refinement).
    pub relative_error: f64,
    /// Frequencies evaluated.
    pub points: usize,
}

/// One interval [u0, u1] of ln f with its Kronrod sums and error bounds.
struct Piece {
    u0: f64,
    u1: f64,
    k: Vec<f64>,
    err: Vec<f64>,
}

/// Integrate `m` densities over `f_lo`…`f_hi` hertz. `density(f, out)` fills `out`
/// with the m densities at f (per hertz); `group[c]` is component c's group; `tol` is
/// the relative accuracy asked for.
pub fn integrate_band(
    f_lo: f64,
    f_hi: f64,
    group: &[usize],
    tol: f64,
    mut density: impl FnMut(f64, &mut [f64]),
) -> Integral {
    let m = group.len();
    let n_groups = group.iter().map(|&g| g + 1).max().unwrap_or(0);
    let mut at = vec![0.0; m];
    let mut points = 0;
    // Kronrod and Gauss sums on [u0, u1].
    let mut piece = |u0: f64, u1: f64, points: &mut usize| -> Piece {
        let (c, h) = (0.5 * (u0 + u1), 0.5 * (u1 - u0));
        let (mut k, mut g) = (vec![0.0; m], vec![0.0; m]);
        for (j, &x) in XGK.iter().enumerate() {
            let offsets: &[f64] = if x == 0.0 { &[0.0] } else { &[-x, x] };
            for &dx in offsets {
                let u = c + h * dx;
                let f = u.exp();
                density(f, &mut at);
                *points += 1;
                for i in 0..m {
                    // ∫ S(f) df = ∫ S(e^u)·e^u du
                    let y = at[i] * f;
                    k[i] += WGK[j] * y;
                    if j % 2 == 1 {
                        g[i] += WG[j / 2] * y;
                    }
                }
            }
        }
        let err = k.iter().zip(&g).map(|(k, g)| (h * (k - g)).abs()).collect();
        k.iter_mut().for_each(|x| *x *= h);
        Piece { u0, u1, k, err }
    };

    let (lo, hi) = (f_lo.ln(), f_hi.ln());
    let decades = (f_hi / f_lo).log10();
    let n0 = (decades.ceil() as usize).max(1);
    let mut pieces: Vec<Piece> = (0..n0)
        .map(|j| {
            let u0 = lo + (hi - lo) * j as f64 / n0 as f64;
            let u1 = if j + 1 == n0 {
                hi
            } else {
                lo + (hi - lo) * (j + 1) as f64 / n0 as f64
            };
            piece(u0, u1, &mut points)
        })
        .collect();
    let mut roundoff = 0;
    loop {
        let mut values = vec![0.0; m];
        let mut errors = vec![0.0; m];
        for p in &pieces {
            for i in 0..m {
                values[i] += p.k[i];
                errors[i] += p.err[i];
            }
        }
        let mut totals = vec![0.0; n_groups];
        for i in 0..m {
            totals[group[i]] += values[i].abs();
        }
        let allow: Vec<f64> = (0..m)
            .map(|i| values[i].abs() + FLOOR * totals[group[i]])
            .collect();
        let relative_error = (0..m)
            .map(|i| match allow[i] {
                a if a > 0.0 => errors[i] / a,
                _ => 0.0,
            })
            .fold(0.0, f64::max);
        if relative_error <= tol || pieces.len() >= MAX_INTERVALS || roundoff >= ROUNDOFF_HALVINGS {
            return Integral {
                values,
                errors,
                relative_error,
                points,
            };
        }
        // Halve the interval whose error is largest against its component's allowance
        // (j the interval, c the component, w its error over its allowance).
        let (mut worst, mut c, mut w) = (0, 0, -1.0);
        for (j, p) in pieces.iter().enumerate() {
            for i in (0..m).filter(|&i| allow[i] > 0.0) {
                if p.err[i] / allow[i] > w {
                    (worst, c, w) = (j, i, p.err[i] / allow[i]);
                }
            }
        }
        let p = pieces.swap_remove(worst);
        let mid = 0.5 * (p.u0 + p.u1);
        let (a, b) = (piece(p.u0, mid, &mut points), piece(mid, p.u1, &mut points));
        let (halves, halves_err) = (a.k[c] + b.k[c], a.err[c] + b.err[c]);
        if (p.k[c] - halves).abs() <= 1e-5 * halves.abs() && halves_err >= 0.99 * p.err[c] {
            roundoff += 1;
        }
        pieces.push(a);
        pieces.push(b);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kronrod_rule_is_exact_on_polynomials() {
        // A 15-point Kronrod rule integrates polynomials up to degree 22 exactly, the
        // 7-point Gauss rule up to degree 13 (Gauss–Kronrod theory, from memory):
        // ∫_{−1}^{1} x^n dx = 2/(n + 1) for even n.
        for n in (0..=22).step_by(2) {
            let exact = 2.0 / (n as f64 + 1.0);
            let k: f64 = XGK
                .iter()
                .zip(&WGK)
                .map(|(&x, &w)| {
                    if x == 0.0 {
                        w * x.powi(n)
                    } else {
                        2.0 * w * x.powi(n)
                    }
                })
                .sum();
            assert!((k - exact).abs() < 1e-14, "Kronrod, degree {n}: {k}");
            if n <= 13 {
                let g: f64 = (0..4)
                    .map(|j| {
                        let x = XGK[2 * j + 1];
                        if x == 0.0 {
                            WG[j] * x.powi(n)
                        } else {
                            2.0 * WG[j] * x.powi(n)
                        }
                    })
                    .sum();
                assert!((g - exact).abs() < 1e-14, "Gauss, degree {n}: {g}");
            }
        }
    }

    #[test]
    fn a_first_order_low_pass_integrates_to_its_closed_form() {
        // ∫_0^B df/(1 + (f/f_c)²) = f_c·atan(B/f_c) (calculus); here from f_lo to f_hi.
        let f_c = 1e3;
        let exact = |f: f64| f_c * (f / f_c).atan();
        let r = integrate_band(20.0, 20e3, &[0], 1e-9, |f, out| {
            out[0] = 1.0 / (1.0 + (f / f_c).powi(2))
        });
        let want = exact(20e3) - exact(20.0);
        assert!((r.values[0] - want).abs() < 1e-9 * want, "{r:?} vs {want}");
        assert!(r.relative_error <= 1e-9);
    }

    #[test]
    fn an_integrand_known_to_a_few_parts_in_a_million_stops_at_its_rounding_floor() {
        // The low pass above with a deterministic jitter of ±1e-6 of its value (what a
        // network beside a 10 F capacitor gives): no halving can reach 1e-9, so the
        // refinement must stop after a few hundred intervals, not at MAX_INTERVALS,
        // with the value still within the jitter of f_c·atan(f/f_c) (calculus).
        let f_c = 1e3;
        let exact = |f: f64| f_c * (f / f_c).atan();
        let jitter = |f: f64| {
            // SplitMix64's finaliser on the bits of f: a fixed pseudo-random ±1.
            let mut z = f.to_bits().wrapping_add(0x9e37_79b9_7f4a_7c15);
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            z ^= z >> 31;
            2.0 * (z >> 11) as f64 / (1u64 << 53) as f64 - 1.0
        };
        let r = integrate_band(20.0, 20e3, &[0], 1e-9, |f, out| {
            out[0] = (1.0 + 1e-6 * jitter(f)) / (1.0 + (f / f_c).powi(2))
        });
        let want = exact(20e3) - exact(20.0);
        assert!((r.values[0] - want).abs() < 1e-6 * want, "{r:?} vs {want}");
        assert!(r.points < 100 * 15, "{} points", r.points);
        assert!(r.relative_error > 1e-9, "the accuracy reached is reported");
    }
}
