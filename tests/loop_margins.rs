//! The margin scan (`ampchain::loops::margins`, docs/definitions.md "Feedback links")
//! against the analytic margins of return ratios with known poles (Bode's gain and
//! phase of real poles, textbook, from memory): T(jf) = T_0·Π 1/(1 + jf/p_k).

use ampchain::loops::margins::{margins, scan_frequencies};
use num_complex::Complex64;

fn poles(t0: f64, p: &[f64]) -> impl Fn(f64) -> Complex64 + '_ {
    move |f| {
        p.iter().fold(Complex64::new(t0, 0.0), |t, &pk| {
            t / Complex64::new(1.0, f / pk)
        })
    }
}

fn close(what: &str, got: Option<f64>, want: f64, tol: f64) {
    let got = got.unwrap_or_else(|| panic!("{what}: no crossing found, expected {want}"));
    assert!(
        (got - want).abs() <= tol,
        "{what}: scan {got}, analytic {want}"
    );
}

#[test]
fn the_scan_runs_from_10_mhz_to_10_ghz_at_40_points_per_decade() {
    let f: Vec<f64> = scan_frequencies().collect();
    assert_eq!(f.len(), 12 * 40 + 1);
    assert!((f[0] - 10e-3).abs() < 1e-18 && (f[480] / 10e9 - 1.0).abs() < 1e-12);
    assert!((f[40] / 0.1 - 1.0).abs() < 1e-12);
}

#[test]
fn two_poles_phase_margin_analytic_and_no_gain_margin() {
    // |T| = 1 where (1 + x/p1²)(1 + x/p2²) = T0², x = f²: a quadratic in x.
    let (t0, p1, p2) = (1000.0_f64, 100.0_f64, 1e6_f64);
    let (a, b, c) = (
        1.0 / (p1 * p2).powi(2),
        1.0 / p1.powi(2) + 1.0 / p2.powi(2),
        1.0 - t0 * t0,
    );
    let x = (-b + (b * b - 4.0 * a * c).sqrt()) / (2.0 * a);
    let fc = x.sqrt();
    let pm = 180.0 - ((fc / p1).atan() + (fc / p2).atan()).to_degrees();
    let m = margins(poles(t0, &[p1, p2]));
    println!(
        "two poles: f_c = {fc:.1} Hz, PM = {pm:.6}°, scan {:?}",
        m.phase_margin_deg
    );
    close("phase margin", m.phase_margin_deg, pm, 1e-6);
    close("crossing", m.phase_crossing_hz.map(|f| f / fc), 1.0, 1e-9);
    // Two real poles never reach −180°: no phase crossing.
    assert_eq!(m.gain_margin_db, None);
}

#[test]
fn three_equal_poles_both_margins_analytic() {
    // Three poles at p: arg T = −3·atan(f/p); −180° at f = p·√3 where |T| = T0/8,
    // so GM = 20·log10(8/T0); |T| = 1 at f/p = √(T0^(2/3) − 1), PM = 180° − 3·atan(f/p).
    let (t0, p) = (4.0_f64, 1e4_f64);
    let m = margins(poles(t0, &[p, p, p]));
    let x = (t0.powf(2.0 / 3.0) - 1.0).sqrt();
    let pm = 180.0 - 3.0 * x.atan().to_degrees();
    let gm = 20.0 * (8.0 / t0).log10();
    println!("three poles: PM {pm:.6}° GM {gm:.6} dB, scan {m:?}");
    close("phase margin", m.phase_margin_deg, pm, 1e-6);
    close("gain margin", m.gain_margin_db, gm, 1e-6);
    close(
        "phase crossing",
        m.gain_crossing_hz.map(|f| f / (p * 3f64.sqrt())),
        1.0,
        1e-9,
    );
    // T0 = 10 > 8: unstable, the gain margin negative, 20·log10(8/10). (The phase
    // margin, 180° − |arg T| with arg in (−180°, 180°], wraps: arg T = −187° there reads
    // +173°, a margin of 7°; the definition is followed as written.)
    let m = margins(poles(10.0, &[p, p, p]));
    close("gain margin", m.gain_margin_db, 20.0 * 0.8f64.log10(), 1e-6);
    let x = (10f64.powf(2.0 / 3.0) - 1.0).sqrt();
    close(
        "wrapped phase margin",
        m.phase_margin_deg,
        3.0 * x.atan().to_degrees() - 180.0,
        1e-6,
    );
}

#[test]
fn no_crossing_gives_none() {
    // Below unity everywhere with two poles; and a loop whose crossing lies above the
    // scan (a pole at 1 THz with T0 = 2 crosses near 1.7 THz): crossings outside the
    // scan do not count.
    for m in [
        margins(poles(0.5, &[1e3, 1e5])),
        margins(poles(2.0, &[1e12])),
    ] {
        assert_eq!((m.phase_margin_deg, m.gain_margin_db), (None, None));
    }
    // Below unity with three poles: no unity crossing, but a phase crossing with
    // |T| = T0/8, so GM = 20·log10(8/T0) = 24.08 dB.
    let m = margins(poles(0.5, &[1e3, 1e3, 1e3]));
    assert_eq!(m.phase_margin_deg, None);
    close("gain margin", m.gain_margin_db, 20.0 * 16f64.log10(), 1e-6);
}

#[test]
fn the_smallest_margin_over_several_crossings() {
    // A coupling capacitor in the loop: T = T0·(jf/f_l)/(1 + jf/f_l)·1/(1 + jf/f_h)².
    // Below f_l, |T| rises through 1 with arg T near +90°; above f_h it falls through 1
    // with arg T near −180°. Each crossing's PM from its own frequency, analytic.
    let (t0, f_l, f_h) = (100.0_f64, 10.0_f64, 1e5_f64);
    let t = |f: f64| {
        let s = Complex64::new(0.0, f / f_l);
        Complex64::new(t0, 0.0) * s / (1.0 + s) / Complex64::new(1.0, f / f_h).powi(2)
    };
    let m = margins(t);
    let fc = m.phase_crossing_hz.expect("a crossing");
    let want = 180.0 - t(fc).arg().to_degrees().abs();
    // The upper crossing has the smaller margin: f_c ≈ f_h·√(T0 − 1) (for f ≫ f_l).
    assert!(fc > f_h, "the upper crossing is the worse one: {fc}");
    close("phase margin", m.phase_margin_deg, want, 1e-9);
    let x2 = t0 - 1.0; // (f/f_h)² at |T| = 1 when f/f_l ≫ 1: 1 + x² = T0
    let approx = 180.0 - 2.0 * x2.sqrt().atan().to_degrees() + (f_l / fc).atan().to_degrees();
    close(
        "phase margin (closed form)",
        m.phase_margin_deg,
        approx,
        0.05,
    );
}
