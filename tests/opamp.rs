//! Op-amp stages (docs/definitions.md "Op-amp", "Op-amp wiring"): the stage networks of
//! `opamp_noninverting` and `opamp_inverting`, solved by `circuit::opamp`, against the
//! textbook closed-loop forms of the one-pole model (any op-amp text, from memory), an
//! independent dense modified nodal analysis in nalgebra, KCL by hand, and the
//! full-power bandwidth SR/(2π·V_peak) (textbook, from memory). Bad device values and
//! references are in tests/error_catalogue.rs.

use ampchain::circuit::opamp::{pin_swing, Drive, Edge, OpAmpNetwork, Pin};
use ampchain::device::opamp::OpAmp;
use ampchain::stages::{OpampInverting, OpampNoninverting, StageModel};
use ampchain::units::{parse_gain, parse_value, Kind};
use ampchain::Freq;
use nalgebra::{DMatrix, DVector};
use num_complex::Complex64;
use std::f64::consts::PI;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);
const ONE: Complex64 = Complex64::new(1.0, 0.0);

fn amp(a_0: f64, r_in: f64, r_out: f64) -> OpAmp {
    OpAmp {
        a_0,
        gain_bandwidth: 3e6,
        r_in,
        r_out,
        swing_margin: 1.0,
        i_limit: 20e-3,
        slew_rate: Some(13e6),
        voltage_noise: 0.0,
        current_noise: 0.0,
    }
}

fn noninverting(r_f: Option<f64>, r_g: Option<f64>, r_b: Option<f64>) -> OpAmpNetwork {
    OpampNoninverting {
        r_feedback: r_f,
        r_ground: r_g,
        r_bias: r_b,
    }
    .opamp_network()
    .expect("an op-amp kind has its network")
}

fn inverting(r_i: f64, r_f: f64) -> OpAmpNetwork {
    OpampInverting {
        r_input: r_i,
        r_feedback: r_f,
    }
    .opamp_network()
    .expect("an op-amp kind has its network")
}

fn close(a: Complex64, b: Complex64, rel: f64) -> bool {
    (a - b).norm() <= rel * b.norm().max(1e-300)
}

#[test]
fn noninverting_gain_is_a0_over_one_plus_a0_beta() {
    // A_f = A_0/(1 + A_0·β), β = R_g/(R_g + R_f) (textbook series-shunt feedback, ideal
    // inputs and output: r_in = ∞, r_out = 0, where the form is exact).
    for &(a_0, r_f, r_g) in &[(2e5, 10e3, 4.7e3), (1e3, 100e3, 1e3), (50.0, 22e3, 22e3)] {
        let net = noninverting(Some(r_f), Some(r_g), Some(100e3));
        let beta = r_g / (r_g + r_f);
        let want = a_0 / (1.0 + a_0 * beta);
        for y_load in [ZERO, Complex64::new(1.0 / 600.0, 0.0)] {
            let g = net
                .voltage_gain(&amp(a_0, f64::INFINITY, 0.0), Freq::Midband, y_load)
                .expect("solvable");
            assert!(close(g, Complex64::new(want, 0.0), 1e-12), "{g} vs {want}");
        }
    }
    // The follower: A_0/(1 + A_0) (β = 1).
    let g = noninverting(None, None, Some(1e6))
        .voltage_gain(&amp(2e5, f64::INFINITY, 0.0), Freq::Midband, ZERO)
        .expect("solvable");
    assert!(close(g, Complex64::new(2e5 / (1.0 + 2e5), 0.0), 1e-14));
}

#[test]
fn inverting_gain_is_the_textbook_form() {
    // A_f = −(R_f/R_i)·1/(1 + (1 + R_f/R_i)/A_0) (textbook inverting amplifier with
    // finite open-loop gain); input impedance R_i + R_f/(1 + A_0) (the Miller form of
    // the feedback resistor, textbook).
    for &(a_0, r_i, r_f) in &[(2e5, 10e3, 47e3), (100.0, 1e3, 100e3)] {
        let net = inverting(r_i, r_f);
        let a = amp(a_0, f64::INFINITY, 0.0);
        let want = -(r_f / r_i) / (1.0 + (1.0 + r_f / r_i) / a_0);
        let g = net.voltage_gain(&a, Freq::Midband, ZERO).expect("solvable");
        assert!(close(g, Complex64::new(want, 0.0), 1e-12), "{g} vs {want}");
        let y = net
            .input_admittance(&a, Freq::Midband, ZERO)
            .expect("solvable");
        let z_want = r_i + r_f / (1.0 + a_0);
        assert!(close(1.0 / y, Complex64::new(z_want, 0.0), 1e-12));
    }
}

#[test]
fn closed_loop_corner_is_gbw_over_noise_gain() {
    // One pole: A_f(s) = A_0/(1 + A_0·β + s·A_0/ω_t), so the closed-loop corner is
    // GBW·(β + 1/A_0) exactly (by hand from the one-pole law) and GBW/(1 + R_f/R_g)
    // (textbook) within a part 1/(A_0·β) of it. Found here by bisection on |A_f(f)|.
    let (r_f, r_g) = (10e3, 1e3);
    let a = amp(2e5, f64::INFINITY, 0.0);
    let net = noninverting(Some(r_f), Some(r_g), None);
    let mid = net
        .voltage_gain(&a, Freq::Midband, ZERO)
        .expect("solvable")
        .norm();
    let at = |f: f64| {
        net.voltage_gain(&a, Freq::Hz(f), ZERO)
            .expect("solvable")
            .norm()
    };
    let (mut lo, mut hi) = (1.0f64, 1e9f64);
    for _ in 0..200 {
        let mid_f = (lo * hi).sqrt();
        if at(mid_f) > mid / 2f64.sqrt() {
            lo = mid_f;
        } else {
            hi = mid_f;
        }
    }
    let corner = (lo * hi).sqrt();
    let beta = r_g / (r_g + r_f);
    let exact = a.gain_bandwidth * (beta + 1.0 / a.a_0);
    assert!((corner - exact).abs() < 1e-9 * exact, "{corner} vs {exact}");
    let textbook = a.gain_bandwidth / (1.0 + r_f / r_g);
    assert!((corner - textbook).abs() < 1.0 / (a.a_0 * beta) * textbook * 1.01);
    // At midband the pole does not act: A = A_0 (docs/definitions.md "Midband").
    let follower = noninverting(None, None, None);
    let g = follower
        .voltage_gain(&a, Freq::Midband, ZERO)
        .expect("solvable");
    assert!(close(g, Complex64::new(2e5 / (1.0 + 2e5), 0.0), 1e-14));
}

#[test]
fn output_impedance_is_exact_for_both_output_models() {
    // KCL at the pin by hand: 1 A into the pin, v_pin = V; the source sits at −A·β·V, so
    // Y_out = (1 + A·β)/r_out + 1/(R_f + R_g). With r_out = 0 the pin is the source
    // itself: Z_out = 0 exactly, no stand-in resistance.
    let (r_f, r_g) = (10e3, 4.7e3);
    let net = noninverting(Some(r_f), Some(r_g), Some(100e3));
    let beta = r_g / (r_f + r_g);
    let a = amp(2e5, f64::INFINITY, 75.0);
    let z = net
        .output_impedance(&a, Freq::Midband, Complex64::new(600.0, 0.0))
        .expect("solvable");
    let y_want = (1.0 + 2e5 * beta) / 75.0 + 1.0 / (r_f + r_g);
    // To 1e-10: the network carries A_0 = 2e5, whose rounding the solve amplifies.
    assert!(close(z, Complex64::new(1.0 / y_want, 0.0), 1e-10), "{z}");
    let ideal = amp(2e5, f64::INFINITY, 0.0);
    let z0 = net
        .output_impedance(&ideal, Freq::Hz(1e4), Complex64::new(600.0, 0.0))
        .expect("solvable");
    assert!(z0.norm() < 1e-15, "{z0}");
}

#[test]
fn dc_output_rests_at_the_reference() {
    // The source is referenced to ground (docs/definitions.md "Op-amp wiring"), so with
    // the input open the output rests at V_ref·A_0β/(1 + A_0β) (non-inverting, + held at
    // V_ref by r_bias, − at V_ref + β(v_out − V_ref)) and V_ref·A_0/(1 + A_0) (inverting,
    // no current in r_feedback with the input open); by hand.
    let a = amp(1e4, f64::INFINITY, 0.0);
    let v_ref = 7.5;
    let (r_f, r_g) = (22e3, 10e3);
    let beta = r_g / (r_f + r_g);
    let net = noninverting(Some(r_f), Some(r_g), Some(100e3));
    let s = net
        .solve(&a, Freq::Dc, v_ref, Drive::Open, ZERO, ZERO)
        .expect("solvable");
    let want = v_ref * 1e4 * beta / (1.0 + 1e4 * beta);
    assert!((s.v[net.output].re - want).abs() < 1e-12 * want);
    // The pin current: into the feedback network only, (v_out − V_ref)/(R_f + R_g).
    let i_want = (want - v_ref) / (r_f + r_g);
    assert!(
        (s.i_pin.re - i_want).abs() < 1e-9 * i_want.abs(),
        "{} vs {i_want}",
        s.i_pin
    );
    let inv = inverting(10e3, 47e3);
    let s = inv
        .solve(&a, Freq::Dc, v_ref, Drive::Open, ZERO, ZERO)
        .expect("solvable");
    assert!((s.v[inv.output].re - v_ref * 1e4 / (1.0 + 1e4)).abs() < 1e-12 * v_ref);
    // Without r_bias and with the input open, + has no DC path: no solution.
    let floating = noninverting(Some(r_f), Some(r_g), None);
    assert!(floating
        .solve(&a, Freq::Dc, v_ref, Drive::Open, ZERO, ZERO)
        .is_none());
}

#[test]
fn swing_limits_by_hand() {
    // Region limits at the pin (docs/definitions.md "Op-amp"): ±15 V rails, 1 V margin,
    // Q at +2 V sourcing 1 mA, 20 mA limit, pin current moving 1/500 A per volt (a
    // 600 Ω load and 3 kΩ of feedback network): up, the rail at 12 V, the current at
    // (20 − 1) mA·500 = 9.5 V first; down, the rail at 16 V, the current at 10.5 V.
    let a = amp(2e5, f64::INFINITY, 0.0);
    let s = pin_swing(&a, (15.0, -15.0), 2.0, 1e-3, 1.0 / 500.0);
    assert!((s.up.0 - 9.5).abs() < 1e-12 && s.up.1 == Edge::CurrentLimit);
    assert!((s.down.0 - 10.5).abs() < 1e-12 && s.down.1 == Edge::CurrentLimit);
    // A light load: the rails come first (15 − 1 − 2 = 12 up, 2 + 15 − 1 = 16 down).
    let s = pin_swing(&a, (15.0, -15.0), 2.0, 0.0, 1.0 / 100e3);
    assert_eq!(s.up, (12.0, Edge::Rail));
    assert_eq!(s.down, (16.0, Edge::Rail));
}

#[test]
fn full_power_bandwidth_and_the_datasheet_units() {
    // SR/(2π·V_peak) (textbook): 13 V/µs at 10 V peak is 206.9 kHz; "106 dB" is
    // 10^(106/20) = 199 526 (the voltage-ratio decibel).
    let sr = parse_value("13 V/us", Kind::SlewRate).expect("a slew rate");
    assert_eq!(sr, 13e6);
    assert_eq!(parse_value("13 V/µs", Kind::SlewRate), Ok(13e6));
    assert_eq!(parse_value("0.5 MV/s", Kind::SlewRate), Ok(0.5e6));
    let a = OpAmp {
        slew_rate: Some(sr),
        ..amp(2e5, f64::INFINITY, 0.0)
    };
    let f = a.full_power_bandwidth(10.0).expect("slew rate given");
    assert!((f - 13e6 / (2.0 * PI * 10.0)).abs() < 1e-9 * f);
    assert!((f - 206_901.4).abs() < 0.1);
    let g = parse_gain("106 dB").expect("a gain");
    assert!((g - 199_526.231_496_887_9).abs() < 1e-6);
    assert_eq!(parse_gain("200k"), Ok(2e5));
    assert_eq!(parse_gain("2e5 V/V"), Ok(2e5));
    assert!(parse_gain("106 dBu").is_err());
    let e_n = parse_value("8 nV/rtHz", Kind::VoltageDensity).expect("a density");
    assert!((e_n - 8e-9).abs() < 1e-24);
    let i_n = parse_value("0.3 pA/√Hz", Kind::CurrentDensity).expect("a density");
    assert!((i_n - 0.3e-12).abs() < 1e-27);
}

/// The stage network as an independent dense modified nodal analysis (nalgebra): node
/// voltages of input, +, −, source and pin (ground and the reference at 0 V for AC),
/// plus the source's current, written from docs/definitions.md "Op-amp wiring" without
/// the program's code. Returns v(pin)/v(input) with the input held at 1 V.
fn reference_gain(
    inverting_stage: bool,
    r1: f64,
    r2: Option<f64>,
    r_bias: Option<f64>,
    a: &OpAmp,
    f: Option<f64>,
    y_load: Complex64,
) -> Complex64 {
    // Unknowns: 0 input, 1 plus, 2 minus, 3 source node, 4 pin, 5 source current,
    // 6 input drive current. The reference is ground (AC).
    let n = 7;
    let mut y = DMatrix::<Complex64>::zeros(n, n);
    let mut b = DVector::<Complex64>::zeros(n);
    let mut g = |p: Option<usize>, q: Option<usize>, x: Complex64| {
        if let Some(p) = p {
            y[(p, p)] += x;
        }
        if let Some(q) = q {
            y[(q, q)] += x;
        }
        if let (Some(p), Some(q)) = (p, q) {
            y[(p, q)] -= x;
            y[(q, p)] -= x;
        }
    };
    let c = |r: f64| Complex64::new(1.0 / r, 0.0);
    // A 1 µΩ-free wire: nodes tied by a unit equation pair below instead.
    let mut wires: Vec<(usize, usize)> = Vec::new();
    if inverting_stage {
        // r_input input–minus, r_feedback pin–minus, plus on the reference.
        g(Some(0), Some(2), c(r1));
        g(Some(4), Some(2), c(r2.expect("r_feedback")));
        wires.push((1, usize::MAX));
    } else {
        // Input is plus; r_feedback pin–minus (or a wire), r_ground minus–ref, r_bias plus–ref.
        wires.push((0, 1));
        match r2 {
            Some(r_f) => g(Some(4), Some(2), c(r_f)),
            None => wires.push((4, 2)),
        }
        g(Some(2), None, c(r1));
        if let Some(r_b) = r_bias {
            g(Some(1), None, c(r_b));
        }
    }
    if a.r_in.is_finite() {
        g(Some(1), Some(2), c(a.r_in));
    }
    if a.r_out > 0.0 {
        g(Some(3), Some(4), c(a.r_out));
    } else {
        wires.push((3, 4));
    }
    g(Some(4), None, y_load);
    let a_s = match f {
        None => Complex64::new(a.a_0, 0.0),
        Some(f) => {
            a.a_0
                / (1.0 + Complex64::new(0.0, 2.0 * PI * f) * a.a_0 / (2.0 * PI * a.gain_bandwidth))
        }
    };
    // Source current leaves node 3 into the network: KCL row 3 gets −i; the source
    // equation v3 − A·(v1 − v2) = 0.
    y[(3, 5)] -= ONE;
    y[(5, 3)] += ONE;
    y[(5, 1)] -= a_s;
    y[(5, 2)] += a_s;
    y[(0, 6)] -= ONE;
    y[(6, 0)] += ONE;
    b[6] = ONE;
    // Wires as MNA zero-volt sources: replace the tie by merging rows (each wire adds
    // its current to the pair and forces equal voltages), done by a Lagrange unknown.
    let extra = wires.len();
    let mut yy = DMatrix::<Complex64>::zeros(n + extra, n + extra);
    yy.view_mut((0, 0), (n, n)).copy_from(&y);
    let mut bb = DVector::<Complex64>::zeros(n + extra);
    bb.rows_mut(0, n).copy_from(&b);
    for (k, &(p, q)) in wires.iter().enumerate() {
        let j = n + k;
        yy[(p, j)] += ONE;
        yy[(j, p)] += ONE;
        if q != usize::MAX {
            yy[(q, j)] -= ONE;
            yy[(j, q)] -= ONE;
        }
    }
    // Unused unknowns (plus of the inverting stage is tied to the reference by its wire).
    let x = yy.lu().solve(&bb).expect("reference network solvable");
    x[4]
}

#[test]
fn stage_networks_agree_with_an_independent_nodal_analysis() {
    // The program's exact MNA against the nalgebra one above, to 1e-9, over finite and
    // infinite r_in, zero and finite r_out, loads, midband and frequencies up to past GBW.
    let amps = [
        amp(2e5, f64::INFINITY, 0.0),
        amp(2e5, 1e6, 50.0),
        amp(300.0, 20e3, 0.0),
        amp(1e4, f64::INFINITY, 200.0),
    ];
    let freqs = [None, Some(1.0), Some(1e3), Some(1e5), Some(2e6), Some(5e7)];
    let loads = [
        ZERO,
        Complex64::new(1.0 / 600.0, 0.0),
        Complex64::new(1e-3, 2e-3),
    ];
    let mut checked = 0;
    for a in &amps {
        for &f in &freqs {
            let freq = f.map_or(Freq::Midband, Freq::Hz);
            for &y_l in &loads {
                for &(r1, r2, r_b) in &[
                    (4.7e3, Some(10e3), Some(100e3)),
                    (1e3, Some(100e3), None),
                    (10e3, None, Some(47e3)),
                ] {
                    let net = noninverting(r2, Some(r1), r_b);
                    let got = net.voltage_gain(a, freq, y_l).expect("solvable");
                    let want = reference_gain(false, r1, r2, r_b, a, f, y_l);
                    assert!(close(got, want, 1e-9), "non-inverting {got} vs {want}");
                    checked += 1;
                }
                for &(r_i, r_f) in &[(10e3, 47e3), (1e3, 220e3), (33e3, 33e3)] {
                    let net = inverting(r_i, r_f);
                    let got = net.voltage_gain(a, freq, y_l).expect("solvable");
                    let want = reference_gain(true, r_i, Some(r_f), None, a, f, y_l);
                    assert!(close(got, want, 1e-9), "inverting {got} vs {want}");
                    checked += 1;
                }
            }
        }
    }
    assert_eq!(checked, 4 * 6 * 3 * 6);
}

#[test]
fn the_network_names_its_resistors_and_pins() {
    // docs/definitions.md "Op-amp wiring": non-inverting input = +, r_bias + to
    // reference, r_ground − to reference, r_feedback output to −; inverting + on the
    // reference, r_input from the input node to −.
    let net = noninverting(Some(10e3), Some(4.7e3), Some(100e3));
    assert_eq!(net.plus, Pin::Node(net.input));
    assert!(net
        .resistors
        .iter()
        .any(|&(n, a, b, _)| n == "r_bias" && a == Pin::Node(net.input) && b == Pin::Reference));
    assert!(net
        .resistors
        .iter()
        .any(|&(n, a, b, _)| n == "r_feedback" && a == Pin::Node(net.output) && b == net.minus));
    let follower = noninverting(None, None, Some(1e6));
    assert_eq!(follower.minus, Pin::Node(follower.output));
    let inv = inverting(10e3, 47e3);
    assert_eq!(inv.plus, Pin::Reference);
    assert!(inv
        .resistors
        .iter()
        .any(|&(n, a, b, _)| n == "r_input" && a == Pin::Node(inv.input) && b == inv.minus));
}

mod common;

fn plan_json(args: &[&str], text: &str) -> serde_json::Value {
    let mut all = args.to_vec();
    all.extend(["-", "--format", "json"]);
    let out = common::run(&all, Some(text.as_bytes()));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON output")
}

/// A single-rail line driver: the source direct into an inverting stage (+ at a 6 V
/// reference on a 12 V rail), capacitor-coupled into a load.
fn inverting_chain(extra_device: &str, r_load: &str) -> String {
    format!(
        r#"{{ "version": 2, "supply": "12 V",
  "devices": {{ "u": {{ "polarity": "opamp", "open_loop_gain": 100000, "gain_bandwidth": "1 MHz"{extra_device} }} }},
  "source": {{ "resistance": "1k", "level": "100 mV" }},
  "stages": [ {{ "id": "inv", "type": "opamp_inverting", "device": "u",
                 "r_input": "9k", "r_feedback": "47k", "reference": "6 V" }} ],
  "loads": [ {{ "id": "out", "resistance": "{r_load}" }} ],
  "links": [ {{ "from": "source", "to": "inv", "coupling": "direct" }},
             {{ "from": "inv", "to": "out", "coupling": "10u" }} ] }}"#
    )
}

#[test]
fn an_inverting_stage_in_a_chain() {
    // With the source's 1 kΩ driving r_input directly, the stage (its own r_input 9k)
    // gains −(R_f/R_i)/(1 + (1 + R_f/R_i)/A_0) (textbook); its input resistance is
    // R_i + R_f/(1 + A_0) (textbook Miller form); the EMF-to-load gain divides by the
    // source's divider.
    let text = inverting_chain("", "10k")
        .replace(
            r#""reference": "6 V""#,
            r#""reference": "0 V", "rails": { "top": "vcc", "bottom": "vee" }"#,
        )
        .replace(
            r#""supply": "12 V""#,
            r#""supplies": { "vcc": "12 V", "vee": "-12 V" }"#,
        );
    let v = plan_json(&["plan"], &text);
    let s = &v["stages"][0];
    let (a_0, r_i, r_f) = (1e5, 9e3, 47e3);
    let gain = -(r_f / r_i) / (1.0 + (1.0 + r_f / r_i) / a_0);
    assert!((s["gain"].as_f64().unwrap() - gain).abs() < 1e-9 * gain.abs());
    let r_in = r_i + r_f / (1.0 + a_0);
    assert!((s["r_in"].as_f64().unwrap() - r_in).abs() < 1e-9 * r_in);
    let emf_gain = gain * r_in / (r_in + 1e3);
    assert!((v["loads"][0]["gain"].as_f64().unwrap() - emf_gain).abs() < 1e-9 * emf_gain.abs());
    // output_resistance 0: an ideal source, r_out exactly 0.
    assert_eq!(s["r_out"].as_f64(), Some(0.0));
    assert_eq!(s["operating_point"]["v_out"].as_f64(), Some(0.0));
    // On one 12 V rail with + at 6 V, the direct-coupled source (0 V behind 1k) makes
    // the output rest at 6·(1 + R_f/(R_i + R_S))·A_0β'/(1 + A_0β'), β' = (R_i + R_S)/
    // (R_i + R_S + R_f) (textbook non-inverting gain of the reference, by hand):
    // 34.2 V, beyond the rail. Refused as a DC fault naming the level (exit 2).
    let out = common::run(&["plan", "-"], Some(inverting_chain("", "10k").as_bytes()));
    assert_eq!(out.status.code(), Some(2));
    let (r_g, beta) = (r_i + 1e3, (r_i + 1e3) / (r_i + 1e3 + r_f));
    let v_out = 6.0 * (1.0 + r_f / r_g) * a_0 * beta / (1.0 + a_0 * beta);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains(&ampchain::units::format_si(v_out, "V")),
        "{err}"
    );
}

#[test]
fn rail_and_current_limits_at_the_pin() {
    // Capacitor-coupled input (r_input's free end open at DC): the output rests at
    // 6·A_0/(1 + A_0) (by hand). Rails 0 and 12 V less the 1 V margin: up 5 V, down
    // 5 V from there. With a 10 mA limit and a 330 Ω load in parallel with the 47k
    // feedback resistor (its far end at the virtual ground, AC), the pin current moves
    // by 1/(330 ∥ 47k) per volt: 10 mA is reached after 3.28 V, before the rails.
    let text = inverting_chain(r#", "output_current_limit": "10 mA""#, "330")
        .replace(r#""coupling": "direct""#, r#""coupling": "1u""#);
    let v = plan_json(&["plan"], &text);
    let s = &v["stages"][0];
    let v_q = 6.0 * 1e5 / (1.0 + 1e5);
    let q = &s["operating_point"];
    assert!((q["v_out"].as_f64().unwrap() - v_q).abs() < 1e-12 * v_q);
    // Virtual ground: the inverting input moves by 1/(1 + A_0·β)·v_out, so the feedback
    // resistor sees v_out·(1 − 1/(A_0 + …)); to 1e-4 the textbook 330 ∥ 47k.
    let r_pin = 330.0 * 47e3 / (330.0 + 47e3);
    for key in ["limit_up", "limit_down"] {
        let l = s[key].as_f64().unwrap();
        assert!((l - 10e-3 * r_pin).abs() < 1e-4 * l, "{key} {l}");
    }
    assert_eq!(s["clip_toward"], "current_limit");
    // Without the limit the rails decide: 11 − v_q up, v_q − 1 down.
    let v = plan_json(
        &["plan"],
        &inverting_chain("", "330").replace(r#""coupling": "direct""#, r#""coupling": "1u""#),
    );
    let s = &v["stages"][0];
    assert!((s["limit_up"].as_f64().unwrap() - (11.0 - v_q)).abs() < 1e-12);
    assert!((s["limit_down"].as_f64().unwrap() - (v_q - 1.0)).abs() < 1e-12);
    assert_eq!(s["clip_toward"], "rail");
}

#[test]
fn response_names_the_op_amp_pole_and_finds_its_corner() {
    // Non-inverting gain 1 + 47k/4.7k = 11 on a 1 MHz op-amp, nothing else with a pole:
    // the high corner is GBW·(β + 1/A_0) (one-pole law, by hand) and the attribution
    // names the op-amp pole; at midband the pole does not act (|A_f| = A_0/(1 + A_0β)).
    let text = r#"{ "version": 2, "supplies": { "vcc": "15 V", "vee": "-15 V" },
      "devices": { "u": { "polarity": "opamp", "open_loop_gain": "100 dB", "gain_bandwidth": "1 MHz",
                          "slew_rate": "0.5 V/us" } },
      "source": { "resistance": "600", "level": "0.5 V" },
      "stages": [ { "id": "amp", "type": "opamp_noninverting", "device": "u",
                    "r_feedback": "47k", "r_ground": "4k7", "r_bias": "1M",
                    "rails": { "top": "vcc", "bottom": "vee" } } ],
      "loads": [ { "id": "out", "resistance": "100k" } ],
      "links": [ { "from": "source", "to": "amp", "coupling": "10u" },
                 { "from": "amp", "to": "out", "coupling": "direct" } ] }"#;
    let v = plan_json(&["response"], text);
    let high = &v["loads"][0]["high_corner"];
    let beta = 4.7e3 / (4.7e3 + 47e3);
    let exact = 1e6 * (beta + 1.0 / 1e5);
    let f = high["frequency"].as_f64().unwrap();
    assert!((f - exact).abs() < 1e-6 * exact, "{f} vs {exact}");
    assert_eq!(high["contributions"][0]["element"], "opamp_pole");
    let est = high["estimate"].as_f64().unwrap();
    assert!((est - exact).abs() < 1e-9 * exact, "{est}");
    // Full-power bandwidth at the planned level: 0.5 V rms · |A_f|·√2 at the pin; SR/(2π·V_peak)
    // = 0.5e6/(2π·7.78) = 10.2 kHz, below the 91 kHz corner: the plan warns (textbook).
    let p = plan_json(&["plan"], text);
    let w = p["warnings"].as_array().unwrap();
    let slew = w
        .iter()
        .find(|w| w["kind"] == "slew_rate")
        .expect("a slew-rate warning");
    let a_f = 1e5 / (1.0 + 1e5 * beta);
    let r_in = 1e6;
    let v_peak = 0.5 * 2f64.sqrt() * r_in / (r_in + 600.0) * a_f;
    let f_p = 0.5e6 / (2.0 * PI * v_peak);
    assert!(slew["message"]
        .as_str()
        .unwrap()
        .contains(&ampchain::units::format_si(f_p, "Hz")));
    // At 1/20 of the level the full-power bandwidth passes the corner: no warning.
    let p = plan_json(&["plan", "--input", "25 mV"], text);
    assert!(p["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .all(|w| w["kind"] != "slew_rate"));
}

#[test]
fn an_op_amp_stage_loaded_by_a_pad_matches_the_independent_network() {
    // Source → non-inverting stage (r_in 1 MΩ, r_out 50 Ω or 0) → pad → load: the
    // stage's gain and r_out in the chain against the nalgebra network above with the
    // pad and load as y_load (coupling capacitors short at midband), the pad's output
    // resistance by Ohm's law with the stage's r_out as its source, the load's gain as
    // the product of the dividers and gains (1e-9).
    for r_out in ["50", "0"] {
        let text = format!(
            r#"{{ "version": 2, "supplies": {{ "vcc": "15 V", "vee": "-15 V" }},
          "devices": {{ "u": {{ "polarity": "opamp", "open_loop_gain": 20000, "gain_bandwidth": "2 MHz",
                              "input_resistance": "1M", "output_resistance": "{r_out}" }} }},
          "source": {{ "resistance": "2k2", "level": "100 mV" }},
          "stages": [ {{ "id": "amp", "type": "opamp_noninverting", "device": "u",
                        "r_feedback": "33k", "r_ground": "3k3", "r_bias": "220k",
                        "rails": {{ "top": "vcc", "bottom": "vee" }} }},
                      {{ "id": "pad", "type": "attenuator", "r_series": "1k", "r_shunt": "470" }} ],
          "loads": [ {{ "id": "out", "resistance": "2k" }} ],
          "links": [ {{ "from": "source", "to": "amp", "coupling": "4u7" }},
                     {{ "from": "amp", "to": "pad", "coupling": "47u" }},
                     {{ "from": "pad", "to": "out", "coupling": "direct" }} ] }}"#
        );
        let v = plan_json(&["plan"], &text);
        let r_o: f64 = if r_out == "0" { 0.0 } else { 50.0 };
        let a = OpAmp {
            a_0: 2e4,
            gain_bandwidth: 2e6,
            r_in: 1e6,
            r_out: r_o,
            swing_margin: 1.0,
            i_limit: f64::INFINITY,
            slew_rate: None,
            voltage_noise: 0.0,
            current_noise: 0.0,
        };
        let r_pad_in = 1e3 + 470.0 * 2e3 / 2470.0;
        let y_l = Complex64::new(1.0 / r_pad_in, 0.0);
        let want = reference_gain(false, 3.3e3, Some(33e3), Some(220e3), &a, None, y_l);
        let s = &v["stages"][0];
        let got = Complex64::new(s["gain"].as_f64().unwrap(), 0.0);
        assert!(close(got, want, 1e-9), "r_out {r_out}: {got} vs {want}");
        // With r_out = 0 the stage's output is an ideal source: its r_out is exactly 0.
        let z_amp = s["r_out"].as_f64().unwrap();
        if r_o == 0.0 {
            assert_eq!(z_amp, 0.0);
        }
        // The pad: r_out = r_shunt ∥ (r_series + z_amp) (Ohm's law).
        let pad = &v["stages"][1];
        let want_pad = 470.0 * (1e3 + z_amp) / (470.0 + 1e3 + z_amp);
        let got_pad = pad["r_out"].as_f64().unwrap();
        assert!(
            (got_pad - want_pad).abs() < 1e-9 * want_pad,
            "{got_pad} vs {want_pad}"
        );
        // The chain: EMF → + input divider (r_in of the stage), stage gain, pad ratio.
        let r_in = s["r_in"].as_f64().unwrap();
        let pad_ratio = (470.0 * 2e3 / 2470.0) / r_pad_in;
        let emf = want.re * r_in / (r_in + 2.2e3) * pad_ratio;
        let load = v["loads"][0]["gain"].as_f64().unwrap();
        assert!((load - emf).abs() < 1e-9 * emf.abs(), "{load} vs {emf}");
    }
}

#[test]
fn op_amp_noise_sources_reach_the_load_as_by_hand() {
    // docs/definitions.md "Noise": e_n in series with +, i_n from each input pin to
    // ground. At 1 kHz, at the load: e_n·|G| with G the stage's gain from + (the
    // nalgebra network above), i_n·|R_S ∥ r_bias|·|G| at +, and at − (r_out = 0)
    // i_n·R_f/|1 + 1/(A·β)| (virtual-ground KCL at −, by hand).
    use ampchain::noise::NoiseModel;
    for r_out in [0.0, 100.0] {
        let text = format!(
            r#"{{ "version": 2, "supplies": {{ "vcc": "15 V", "vee": "-15 V" }},
          "devices": {{ "u": {{ "polarity": "opamp", "open_loop_gain": 100000, "gain_bandwidth": "1 MHz",
                "output_resistance": {r_out}, "voltage_noise": "4 nV/rtHz", "current_noise": "1 pA/rtHz" }} }},
          "source": {{ "resistance": "100", "level": "10 mV" }},
          "stages": [ {{ "id": "amp", "type": "opamp_noninverting", "device": "u",
                        "r_feedback": "9k", "r_ground": "1k", "r_bias": "10k",
                        "rails": {{ "top": "vcc", "bottom": "vee" }} }} ],
          "loads": [ {{ "id": "out", "resistance": "10k" }} ],
          "links": [ {{ "from": "source", "to": "amp", "coupling": "direct" }},
                     {{ "from": "amp", "to": "out", "coupling": "direct" }} ] }}"#
        );
        let chain = ampchain::Chain::from_json_str(&text).expect("valid chain");
        let mut model = NoiseModel::new(&chain).expect("noise model");
        let mut out = vec![0.0; model.density_len()];
        let f = 1e3;
        model.densities(f, 1.0, &mut out).expect("solvable");
        let density = |name: &str| {
            let s = model
                .sources
                .iter()
                .position(|s| s.element == name)
                .unwrap_or_else(|| panic!("{name} listed"));
            out[s]
        };
        let a = OpAmp {
            a_0: 1e5,
            gain_bandwidth: 1e6,
            r_in: f64::INFINITY,
            r_out,
            swing_margin: 1.0,
            i_limit: f64::INFINITY,
            slew_rate: None,
            voltage_noise: 4e-9,
            current_noise: 1e-12,
        };
        let y_l = Complex64::new(1.0 / 10e3, 0.0);
        let g = reference_gain(false, 1e3, Some(9e3), Some(10e3), &a, Some(f), y_l).norm();
        let want_e = (4e-9 * g).powi(2);
        assert!((density("voltage_noise") - want_e).abs() < 1e-9 * want_e);
        let z_plus = 100.0 * 10e3 / (100.0 + 10e3);
        let want_plus = (1e-12 * z_plus * g).powi(2);
        assert!((density("current_noise_plus") - want_plus).abs() < 1e-9 * want_plus);
        if r_out == 0.0 {
            let a_f = a.open_loop_gain(Freq::Hz(f));
            let beta = 1e3 / 10e3;
            let want_minus = (1e-12 * 9e3 / (1.0 + 1.0 / (a_f * beta)).norm()).powi(2);
            assert!((density("current_noise_minus") - want_minus).abs() < 1e-9 * want_minus);
        }
    }
}

#[test]
fn description_and_network_number_nodes_alike() {
    // The flat netlist (noise) places an op-amp by its network's node numbers read as
    // the description's own nodes in order: the two must agree.
    use ampchain::circuit::FIRST_OWN;
    let device = ampchain::device::Device::default();
    let kinds: [&dyn StageModel; 3] = [
        &OpampNoninverting {
            r_feedback: Some(10e3),
            r_ground: Some(1e3),
            r_bias: Some(1e5),
        },
        &OpampNoninverting {
            r_feedback: None,
            r_ground: None,
            r_bias: Some(1e5),
        },
        &OpampInverting {
            r_input: 1e3,
            r_feedback: 1e4,
        },
    ];
    for k in kinds {
        let c = k.circuit(&device);
        let net = k.opamp_network().expect("an op-amp kind");
        assert_eq!(c.input, FIRST_OWN + net.input);
        assert_eq!(c.output, FIRST_OWN + net.output);
        for &(name, a, b, r) in &net.resistors {
            let e = c.element(name).expect("the description has the resistor");
            let node = |p: Pin| match p {
                Pin::Reference => ampchain::circuit::GROUND,
                Pin::Node(k) => FIRST_OWN + k,
            };
            assert_eq!(e.nodes(), (node(a), node(b)), "{name}");
            assert!(matches!(*e, ampchain::circuit::Element::Resistor { r: x, .. } if x == r));
        }
    }
}

#[test]
fn transfer_chart_marks_come_from_the_plan() {
    // The chart of an op-amp stage: its legend and the plan's figures in its text, and
    // the transfer line's corners at the inputs where the output meets its limits,
    // limit/gain (the plan's numbers; the chart parsed back with roxmltree).
    let text = r#"{ "version": 2, "supplies": { "vcc": "15 V", "vee": "-15 V" },
      "devices": { "u": { "polarity": "opamp", "open_loop_gain": "100 dB", "gain_bandwidth": "1 MHz",
                          "swing_margin": "1.5 V" } },
      "source": { "resistance": "600", "level": "0.5 V" },
      "stages": [ { "id": "amp", "type": "opamp_inverting", "device": "u",
                    "r_input": "10k", "r_feedback": "47k", "rails": { "top": "vcc", "bottom": "vee" } } ],
      "loads": [ { "id": "out", "resistance": "100k" } ],
      "links": [ { "from": "source", "to": "amp", "coupling": "10u" },
                 { "from": "amp", "to": "out", "coupling": "direct" } ] }"#;
    let out = common::run(
        &["plot", "loadlines", "-", "--stage", "amp", "-o", "-"],
        Some(text.as_bytes()),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = String::from_utf8(out.stdout).expect("UTF-8");
    let doc = roxmltree::Document::parse(&svg).expect("the chart is XML");
    let texts: Vec<&str> = doc.descendants().filter_map(|n| n.text()).collect();
    let all = texts.join("\n");
    assert!(all.contains("rail limits −13.5 V and 13.5 V"), "{all}");
    assert!(all.contains("rail limits (rails less swing_margin)"));
    let v = plan_json(&["plan"], text);
    let s = &v["stages"][0];
    assert!(all.contains(&format!(
        "gain {} V/V",
        format!("{:.4}", s["gain"].as_f64().unwrap()).replace('-', "−")
    )));
    // One minus sign in the label lines: U+2212, as "−3 dB" and "/ −" of the charts
    // (typographic convention, ISO 80000-2 writes the minus sign as −); a hyphen
    // before a digit is a second kind of minus.
    for line in texts
        .iter()
        .filter(|t| t.starts_with("stage ") || t.starts_with("rail limits "))
    {
        assert!(line.contains('−'), "{line}");
        let chars: Vec<char> = line.chars().collect();
        assert!(
            !chars
                .windows(2)
                .any(|w| w[0] == '-' && w[1].is_ascii_digit()),
            "{line}"
        );
    }
    // The transfer model: clipped exactly at the plan's limits.
    let chain = ampchain::Chain::from_json_str(text).expect("valid");
    let ev = chain.evaluate().expect("plans");
    let report =
        ampchain::report::PlanReport::new(&chain, &ev, ampchain::units::Level::from_vrms(0.5));
    let t = ampchain::plot::transfer::Transfer::new(&chain, &report.stages[0], 0);
    let (up, down) = (
        s["limit_up"].as_f64().unwrap(),
        s["limit_down"].as_f64().unwrap(),
    );
    // Inverting: a large positive input drives the output to its lower limit.
    assert!(t.gain < 0.0);
    assert_eq!(t.output(1e3), t.v_q - down);
    assert_eq!(t.output(-1e3), t.v_q + up);
    let (x_up, x_down) = t.input_at_limits();
    assert!((t.output(x_up) - (t.v_q + up)).abs() < 1e-9);
    assert!((t.output(x_down) - (t.v_q - down)).abs() < 1e-9);
    assert!((t.rail_high - 13.5).abs() < 1e-12 && (t.rail_low + 13.5).abs() < 1e-12);
}

#[test]
fn the_pickup_demo_runs_through_the_commands() {
    // chains/stage-monitor-pickup.json (JFET buffer, BJT gain, op-amp line
    // driver on ±15 V): every command succeeds (`sweep` with its op-amp stage in the
    // large-signal network); `bias` on the op-amp stage refuses it by name (exit 2).
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/chains/stage-monitor-pickup.json"
    );
    let tmp = common::scratch("opamp-demo");
    let dir = tmp.path();
    let out = |name: &str| dir.join(name).to_string_lossy().into_owned();
    let (levels, chart, charts, report) = (
        out("levels.svg"),
        out("line.svg"),
        out("charts"),
        out("r.html"),
    );
    for args in [
        vec!["plan", path],
        vec!["plan", path, "--noise"],
        vec!["plan", path, "--at", "20k"],
        vec!["check", path],
        vec!["response", path],
        vec!["noise", path],
        vec!["plot", "levels", path, "-o", &levels],
        vec!["plot", "loadlines", path, "--stage", "line", "-o", &chart],
        vec!["plot", "loadlines", path, "-o", &charts],
        vec!["report", path, "-o", &report],
        vec!["bias", path, "--stage", "gain"],
        vec!["spread", path, "--runs", "200"],
        vec!["sweep", path, "--steps", "3"],
    ] {
        let o = common::run(&args, None);
        assert!(
            o.status.success(),
            "{args:?}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
    }
    let o = common::run(&["bias", path, "--stage", "line"], None);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("op-amp stage"));
}

/// A flat modified nodal analysis of a whole chain of op-amp and attenuator stages,
/// written from docs/definitions.md ("Op-amp wiring", "Passive stages") without the
/// program's code: node voltages, plus one current per voltage source (the EMF, each
/// op-amp's source, each wire).
struct Flat {
    n: usize,
    y: Vec<(usize, usize, Complex64)>,
    rhs: Vec<(usize, Complex64)>,
}

/// Ground: no unknown.
const GND: usize = usize::MAX;

impl Flat {
    fn node(&mut self) -> usize {
        self.n += 1;
        self.n - 1
    }
    fn admittance(&mut self, a: usize, b: usize, g: Complex64) {
        for (p, q, s) in [(a, a, 1.0), (b, b, 1.0), (a, b, -1.0), (b, a, -1.0)] {
            if p != GND && q != GND {
                self.y.push((p, q, s * g));
            }
        }
    }
    /// v_a − v_b = Σ coeff·v_node + value, as one more unknown: the source's current
    /// (leaving a inside the network, entering b).
    fn source(&mut self, a: usize, b: usize, control: &[(usize, Complex64)], value: Complex64) {
        let k = self.node();
        for (p, s) in [(a, 1.0), (b, -1.0)] {
            if p != GND {
                self.y.push((p, k, Complex64::new(s, 0.0)));
                self.y.push((k, p, Complex64::new(s, 0.0)));
            }
        }
        for &(p, c) in control {
            if p != GND {
                self.y.push((k, p, -c));
            }
        }
        self.rhs.push((k, value));
    }
    fn solve(&self) -> DVector<Complex64> {
        let mut y = DMatrix::<Complex64>::zeros(self.n, self.n);
        let mut b = DVector::<Complex64>::zeros(self.n);
        for &(p, q, v) in &self.y {
            y[(p, q)] += v;
        }
        for &(p, v) in &self.rhs {
            b[p] += v;
        }
        y.lu().solve(&b).expect("flat network solvable")
    }
}

#[test]
fn generated_op_amp_chains_agree_with_a_flat_nodal_analysis() {
    // 300 chains of op-amp (both kinds, ideal and resistive outputs, finite and
    // infinite r_in) and attenuator stages, capacitor-coupled between stages: every
    // stage's cumulative gain and every load's gain against the flat network above, to
    // 1e-9, at midband and at 1 kHz and 300 kHz (where the poles and the coupling
    // capacitors act).
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(17);
    let mut checked = 0;
    for _ in 0..300 {
        let n_stages = rng.random_range(1..=4);
        let r = |rng: &mut rand_chacha::ChaCha8Rng, lo: f64, hi: f64| {
            (lo.ln() + rng.random::<f64>() * (hi / lo).ln()).exp()
        };
        let a_0 = r(&mut rng, 1e3, 1e6);
        let gbw = r(&mut rng, 1e5, 1e8);
        let r_in = if rng.random::<bool>() {
            None
        } else {
            Some(r(&mut rng, 1e5, 1e7))
        };
        let r_out = if rng.random::<bool>() {
            0.0
        } else {
            r(&mut rng, 10.0, 500.0)
        };
        let r_s = r(&mut rng, 10.0, 1e5);
        // (kind, values): 0 non-inverting (r_f?, r_g?, r_b), 1 inverting (r_i, r_f), 2 pad.
        let mut stages = Vec::new();
        for _ in 0..n_stages {
            let kind = rng.random_range(0..3);
            let v = [
                r(&mut rng, 1e3, 1e5),
                r(&mut rng, 1e3, 1e5),
                r(&mut rng, 1e4, 1e6),
            ];
            let follower = kind == 0 && rng.random_range(0..4) == 0;
            stages.push((kind, v, follower));
        }
        let source_direct = rng.random::<bool>();
        let c_link = r(&mut rng, 1e-7, 1e-5);
        let r_load = r(&mut rng, 600.0, 1e5);
        let mut json_stages = Vec::new();
        for (i, &(kind, v, follower)) in stages.iter().enumerate() {
            json_stages.push(match kind {
                0 if follower => serde_json::json!({ "id": format!("s{i}"), "type": "opamp_noninverting",
                    "device": "u", "r_bias": v[2], "rails": { "top": "vcc", "bottom": "vee" } }),
                0 => serde_json::json!({ "id": format!("s{i}"), "type": "opamp_noninverting", "device": "u",
                    "r_feedback": v[0], "r_ground": v[1], "r_bias": v[2], "rails": { "top": "vcc", "bottom": "vee" } }),
                1 => serde_json::json!({ "id": format!("s{i}"), "type": "opamp_inverting", "device": "u",
                    "r_input": v[0], "r_feedback": v[1], "rails": { "top": "vcc", "bottom": "vee" } }),
                _ => serde_json::json!({ "id": format!("s{i}"), "type": "attenuator", "r_series": v[0], "r_shunt": v[1] }),
            });
        }
        let mut links = vec![if source_direct {
            serde_json::json!({ "from": "source", "to": "s0", "coupling": "direct" })
        } else {
            serde_json::json!({ "from": "source", "to": "s0", "coupling": c_link })
        }];
        for i in 1..n_stages {
            links.push(serde_json::json!({ "from": format!("s{}", i - 1), "to": format!("s{i}"), "coupling": c_link }));
        }
        links.push(serde_json::json!({ "from": format!("s{}", n_stages - 1), "to": "out", "coupling": "direct" }));
        let mut device = serde_json::json!({ "polarity": "opamp", "open_loop_gain": a_0,
            "gain_bandwidth": gbw, "output_resistance": r_out });
        if let Some(r_in) = r_in {
            device["input_resistance"] = serde_json::json!(r_in);
        }
        let chain_json = serde_json::json!({ "version": 2, "supplies": { "vcc": "15 V", "vee": "-15 V" },
            "devices": { "u": device }, "source": { "resistance": r_s, "level": "10 mV" },
            "stages": json_stages, "loads": [ { "id": "out", "resistance": r_load } ], "links": links });
        let chain = ampchain::Chain::from_json_str(&chain_json.to_string()).expect("a valid chain");
        for f in [None, Some(1e3), Some(3e5)] {
            let ev = chain
                .evaluate_at(f.map_or(Freq::Midband, Freq::Hz))
                .expect("plans");
            // The flat network at f: coupling capacitors as wires at midband.
            let mut flat = Flat {
                n: 0,
                y: Vec::new(),
                rhs: Vec::new(),
            };
            let a_s = {
                let amp = OpAmp {
                    a_0,
                    gain_bandwidth: gbw,
                    r_in: r_in.unwrap_or(f64::INFINITY),
                    r_out,
                    swing_margin: 1.0,
                    i_limit: f64::INFINITY,
                    slew_rate: None,
                    voltage_noise: 0.0,
                    current_noise: 0.0,
                };
                match f {
                    None => Complex64::new(a_0, 0.0),
                    Some(f) => {
                        amp.a_0
                            / (1.0
                                + Complex64::new(0.0, 2.0 * PI * f) * amp.a_0
                                    / (2.0 * PI * amp.gain_bandwidth))
                    }
                }
            };
            let g = |x: f64| Complex64::new(1.0 / x, 0.0);
            let emf = flat.node();
            let src = flat.node();
            flat.source(emf, GND, &[], ONE);
            flat.admittance(emf, src, g(r_s));
            let link = |flat: &mut Flat, a: usize, b: usize, direct: bool| match (direct, f) {
                (true, _) | (false, None) => flat.source(a, b, &[], ZERO),
                (false, Some(f)) => {
                    flat.admittance(a, b, Complex64::new(0.0, 2.0 * PI * f * c_link))
                }
            };
            let mut driver = src;
            let mut outputs = Vec::new();
            for (i, &(kind, v, follower)) in stages.iter().enumerate() {
                let input = flat.node();
                link(&mut flat, driver, input, i == 0 && source_direct);
                let output = flat.node();
                if kind == 2 {
                    flat.admittance(input, output, g(v[0]));
                    flat.admittance(output, GND, g(v[1]));
                } else {
                    let minus = flat.node();
                    let plus = if kind == 0 { input } else { GND };
                    if kind == 0 {
                        flat.admittance(plus, GND, g(v[2]));
                        if follower {
                            flat.source(output, minus, &[], ZERO);
                        } else {
                            flat.admittance(output, minus, g(v[0]));
                            flat.admittance(minus, GND, g(v[1]));
                        }
                    } else {
                        flat.admittance(input, minus, g(v[0]));
                        flat.admittance(output, minus, g(v[1]));
                    }
                    if let Some(r_in) = r_in {
                        flat.admittance(plus, minus, g(r_in));
                    }
                    let inner = if r_out > 0.0 { flat.node() } else { output };
                    if r_out > 0.0 {
                        flat.admittance(inner, output, g(r_out));
                    }
                    flat.source(inner, GND, &[(plus, a_s), (minus, -a_s)], ZERO);
                }
                outputs.push(output);
                driver = output;
            }
            let load = flat.node();
            flat.source(driver, load, &[], ZERO);
            flat.admittance(load, GND, g(r_load));
            let x = flat.solve();
            for (i, &o) in outputs.iter().enumerate() {
                assert!(
                    close(ev.ac[i].cumulative, x[o], 1e-9),
                    "stage {i} at {f:?}: {} vs {}\n{chain_json}",
                    ev.ac[i].cumulative,
                    x[o]
                );
            }
            assert!(
                close(ev.load_gain[0], x[load], 1e-9),
                "load at {f:?}: {} vs {}",
                ev.load_gain[0],
                x[load]
            );
            checked += 1;
        }
    }
    assert_eq!(checked, 900);
}
