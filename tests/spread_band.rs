//! `spread --at` and `spread --band`: capacitor and device-capacitance tolerances, the
//! gains at one frequency and every build's −3 dB corners. Each check names its
//! outside reference: the first-order RC high-pass (handbook formula), the quantiles
//! of a transformed uniform distribution (closed form), and the independent complex
//! nodal solve of the flattened network in tests/reference.

mod common;

mod reference;

use ampchain::network::Freq;
use ampchain::report::spread::SpreadReport;
use ampchain::spec::parse_chain_text;
use ampchain::spread::{self, corners::At, Measure, Requirement, SpreadModel, SpreadRun};
use std::f64::consts::{FRAC_1_SQRT_2, PI};

fn run(text: &str, freq: Freq, band: bool, runs: usize) -> (ampchain::Chain, SpreadRun) {
    let spec = parse_chain_text(text).expect("chain parses");
    let chain = ampchain::Chain::from_spec(&spec).expect("chain is valid");
    let measure = Measure::new(&chain, freq, band).expect("nominal chain evaluates");
    let model = SpreadModel::build(&spec, &chain, None, measure.at_frequency()).expect("model");
    let run = spread::run(&chain, model, measure, runs, 9, &|_| {}).expect("runs");
    (chain, run)
}

/// One common-emitter stage behind a coupling capacitor: the only capacitor, so the
/// response is a first-order high-pass. `coupling` is the JSON of that value.
fn rc_highpass(coupling: &str) -> String {
    format!(
        r#"{{
  "supply": "15 V",
  "devices": {{ "q": {{ "polarity": "npn", "beta": 200, "saturation_current": "10f" }} }},
  "source": {{ "resistance": "2k2", "level": "10 mV rms" }},
  "stages": [
    {{ "id": "s", "type": "common_emitter", "device": "q",
      "r_top": "100k", "r_bottom": "22k", "r_collector": "4k7", "r_emitter": "1k" }}
  ],
  "loads": [ {{ "id": "out", "resistance": "100k" }} ],
  "links": [
    {{ "from": "source", "to": "s",   "coupling": {coupling} }},
    {{ "from": "s",      "to": "out", "coupling": "direct" }}
  ]
}}"#
    )
}

#[test]
fn a_coupling_capacitor_tolerance_moves_the_low_corner_as_the_rc_formula_says() {
    // First-order RC high-pass (handbook formula, from memory): the corner is
    // f_L = 1/(2π·(R_S + R_in)·C) and |H(f)|/|H_mid| = 1/√(1 + (f_L/f)²). R_in is the
    // stage's midband input resistance, taken from the independent reference solve.
    let nominal_text = rc_highpass(r#""1u""#);
    let rc = reference::Chain::from_text(&nominal_text).expect("reference reads the chain");
    let dc = reference::solve_dc(&rc).expect("reference DC");
    let r_in = reference::analyse(&rc, dc)
        .expect("reference midband")
        .stages[0]
        .r_in;
    let f_l = 1.0 / (2.0 * PI * (2_200.0 + r_in) * 1e-6);

    let text = rc_highpass(r#"{ "value": "1u", "tolerance": "20%" }"#);
    let runs = 4_000;
    let (chain, r) = run(&text, Freq::Midband, true, runs);
    let layout = r.trials.layout;
    let low = layout.low_corner(0);
    assert!(
        (r.nominal[low] / f_l - 1.0).abs() < 1e-7,
        "nominal corner {} Hz, RC formula {f_l} Hz",
        r.nominal[low]
    );
    // Only C spreads: the corner pass has 2 builds, C at 0.8 µF and at 1.2 µF; the
    // highest low corner is at the smallest C.
    assert!(r.corners.full && r.corners.settings.len() == 2);
    let report = SpreadReport::new(&chain, &r, &[], 0.0);
    let worst = report.corners.loads[0]
        .highest_low_corner
        .as_ref()
        .expect("a highest low corner");
    assert!(
        (worst.value / (f_l / 0.8) - 1.0).abs() < 1e-7,
        "{}",
        worst.value
    );
    // Monte Carlo: C uniform on [0.8, 1.2] µF, so f = f_L·(1 µF/C) has its quantile p
    // at f_L/c(1 − p) with c(q) = 0.8 + 0.4·q (a decreasing transform of a uniform,
    // closed form). Sample quantiles of 4 000 draws sit within ±0.8 % in probability
    // (about 5 standard errors at p = 0.01), i.e. within 0.3 % in f here; we allow 0.5 %.
    let s = report.loads[0].low_corner.expect("corner statistics");
    let at = |p: f64| f_l / (0.8 + 0.4 * (1.0 - p));
    assert!(s.min >= f_l / 1.2 * (1.0 - 1e-9) && s.max <= f_l / 0.8 * (1.0 + 1e-9));
    for (p, x) in [(0.01, s.p1), (0.5, s.median), (0.99, s.p99)] {
        assert!(
            (x / at(p) - 1.0).abs() < 5e-3,
            "quantile {p}: {x} Hz, closed form {} Hz",
            at(p)
        );
    }
    // Requirements on the corner read the same column.
    let req = Requirement::parse("low_corner ..4.5Hz", &chain, &layout).expect("parses");
    let missed = r.trials.rows().filter(|row| !req.met(&layout, row)).count() as f64;
    // Share of builds with f > 4.5 Hz: P(C < f_L·1 µF/4.5 Hz), uniform C (closed form).
    let c_limit = f_l / 4.5;
    let expected = ((c_limit - 0.8) / 0.4).clamp(0.0, 1.0);
    let se = (expected * (1.0 - expected) / runs as f64).sqrt();
    assert!(
        (missed / runs as f64 - expected).abs() < 5.0 * se + 1e-9,
        "missed {missed} of {runs}, expected share {expected}"
    );

    // At one frequency (--at f_L): each build's gain is |H_mid|/√(1 + (f_L·1 µF/C/f)²);
    // the corner pass's lowest gain is the build with C = 0.8 µF.
    let (chain, r) = run(&text, Freq::Hz(f_l), false, 200);
    let report = SpreadReport::new(&chain, &r, &[], 0.0);
    let h_mid = reference::analyse(&rc, reference::solve_dc(&rc).unwrap())
        .unwrap()
        .load_gains[0]
        .abs();
    let lowest = report.corners.loads[0].lowest_gain.as_ref().unwrap().value;
    let expected = h_mid / (1.0 + (1.0 / 0.8f64).powi(2)).sqrt();
    assert!(
        (lowest / expected - 1.0).abs() < 1e-6,
        "{lowest} vs {expected}"
    );
    let nominal = report.loads[0].gain.unwrap().nominal;
    assert!((nominal / (h_mid * FRAC_1_SQRT_2) - 1.0).abs() < 1e-6);
}

/// Two common-emitter stages with a bypass capacitor, three coupling capacitors and
/// device capacitances. `c(name, farads)` writes each capacitance; `ft` the
/// transition frequency.
fn two_stages(c: &dyn Fn(f64) -> String, ft: &str) -> String {
    format!(
        r#"{{
  "supply": "12 V",
  "devices": {{ "q": {{ "polarity": "npn", "beta": 180, "saturation_current": "12f",
                        "early_voltage": "80 V", "transition_frequency": {ft}, "c_bc": {cbc} }} }},
  "source": {{ "resistance": "1k", "level": "-50 dBV", "capacitance": {cs} }},
  "stages": [
    {{ "id": "a", "type": "common_emitter", "device": "q", "r_top": "82k", "r_bottom": "15k",
      "r_collector": "6k8", "r_emitter": "220", "r_emitter_bypassed": "1k", "c_bypass": {cb} }},
    {{ "id": "b", "type": "common_emitter", "device": "q", "r_top": "56k", "r_bottom": "12k",
      "r_collector": "4k7", "r_emitter": "1k" }}
  ],
  "loads": [ {{ "id": "out", "resistance": "22k", "capacitance": {cl} }} ],
  "links": [
    {{ "from": "source", "to": "a", "coupling": {c1} }},
    {{ "from": "a", "to": "b", "coupling": {c2} }},
    {{ "from": "b", "to": "out", "coupling": {c3} }}
  ]
}}"#,
        cbc = c(3e-12),
        cs = c(100e-12),
        cb = c(47e-6),
        cl = c(470e-12),
        c1 = c(2.2e-6),
        c2 = c(1e-6),
        c3 = c(4.7e-6),
    )
}

#[test]
fn corner_builds_agree_with_the_reference_at_a_frequency_and_at_their_corners() {
    // Independent reference: the complex nodal solve of the flattened network
    // (tests/reference, nalgebra LU) on the same chain with every capacitance and f_T
    // set to the corner's values. Each of the 7 capacitances and f_T spreads by 10 %,
    // so the full corner pass has 2^8 builds; corner 0 has every one at its minimum,
    // the last every one at its maximum.
    let spread_text = two_stages(
        &|x| format!(r#"{{ "value": "{x:e}", "tolerance": "10%" }}"#),
        r#"{ "value": "300M", "tolerance": "10%" }"#,
    );
    let plain = |scale: f64| {
        two_stages(
            &|x| format!(r#""{:e}""#, x * scale),
            &format!(r#""{:e}""#, 300e6 * scale),
        )
    };
    let f_at = 40.0;
    for (band, freq) in [(true, Freq::Midband), (false, Freq::Hz(f_at))] {
        let (_, r) = run(&spread_text, freq, band, 50);
        assert_eq!(r.model.spreads.len(), 8, "every capacitance and f_T spread");
        let pass = &r.corners;
        assert!(pass.full);
        let layout = pass.records.layout;
        let last = pass.settings.len() - 1;
        for (c, scale) in [(0, 0.9), (last, 1.1)] {
            let expect_at = if scale < 1.0 { At::Min } else { At::Max };
            assert!(pass.settings[c].iter().all(|a| *a == expect_at));
            let row = pass.records.row(c);
            let rc = reference::Chain::from_text(&plain(scale)).expect("reference chain");
            let dc = reference::solve_dc(&rc).expect("reference DC");
            let h_mid = reference::analyse(&rc, dc.clone()).unwrap().load_gains[0].abs();
            let out = rc.term_index(reference::Term::Load(0));
            let h = |f: f64| reference::transfer_at(&rc, &dc, f).unwrap()[out].norm();
            if band {
                for column in [layout.low_corner(0), layout.high_corner(0)] {
                    let f = row[column];
                    // The half-power point: |H(f)|/|H_mid| = 1/√2 (definition).
                    let q = h(f) / h_mid;
                    assert!(
                        (q / FRAC_1_SQRT_2 - 1.0).abs() < 1e-6,
                        "scale {scale}: corner {f} Hz has reference ratio {q}"
                    );
                }
            } else {
                let g = row[layout.load_gain(0)];
                assert!(
                    (g / h(f_at) - 1.0).abs() < 1e-6,
                    "scale {scale}: gain at {f_at} Hz {g}, reference {}",
                    h(f_at)
                );
            }
        }
    }
}

#[test]
fn at_midband_capacitances_are_listed_as_not_sampled() {
    // docs/definitions.md: capacitors are shorts and device capacitances absent at midband, so
    // their tolerances cannot move a midband figure; they are named, not drawn.
    let text = two_stages(
        &|x| format!(r#"{{ "value": "{x:e}", "tolerance": "10%" }}"#),
        r#"{ "value": "300M", "tolerance": "10%" }"#,
    );
    let (_, r) = run(&text, Freq::Midband, false, 10);
    assert!(r.model.spreads.is_empty());
    assert_eq!(r.model.not_sampled.len(), 8);
    assert!(r
        .model
        .not_sampled
        .iter()
        .any(|n| n.parameter == "devices.q.transition_frequency"));
}

/// The RC high-pass chain with a 20 % coupling capacitor, in a folder of its own.
fn temp_rc_chain(tag: &str) -> (tempfile::TempDir, std::path::PathBuf) {
    let dir = common::scratch(&format!("spread-{tag}"));
    let path = dir.path().join("rc.json");
    std::fs::write(
        &path,
        rc_highpass(r#"{ "value": "1u", "tolerance": "20%" }"#),
    )
    .unwrap();
    (dir, path)
}

fn ampchain(args: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(args)
        .output()
        .expect("runs")
}

#[test]
fn the_command_reports_corners_in_every_format_and_refuses_corner_requirements_without_band() {
    let (dir, path) = temp_rc_chain("band");
    let chain = path.to_str().unwrap();

    // JSON: the new keys beside the old ones (the contract only grows).
    let out = ampchain(&[
        "spread", chain, "--runs", "300", "--band", "--format", "json",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["band"], true);
    assert!(v["frequency"].is_null());
    let low = &v["loads"][0]["low_corner"];
    let (min, max) = (low["min"].as_f64().unwrap(), low["max"].as_f64().unwrap());
    assert!(min < low["nominal"].as_f64().unwrap() && low["nominal"].as_f64().unwrap() < max);
    assert!(
        v["loads"][0]["high_corner"].is_null(),
        "no device capacitance: no high corner"
    );
    assert!(v["loads"][0]["gain"]["median"].is_number());
    let worst = &v["corners"]["loads"][0]["highest_low_corner"];
    // The corner pass bounds the Monte Carlo builds (f_L falls as C rises: monotone).
    assert!(worst["value"].as_f64().unwrap() >= max * (1.0 - 1e-9));
    assert!(
        worst.get("value_db").is_none(),
        "a frequency has no dB value"
    );

    // Table and CSV name the corners.
    let out = ampchain(&["spread", chain, "--runs", "300", "--band"]);
    let table = String::from_utf8_lossy(&out.stdout);
    assert!(
        table.contains("low corner") && table.contains("low −3 dB corner highest"),
        "{table}"
    );
    let out = ampchain(&[
        "spread", chain, "--runs", "300", "--band", "--format", "csv",
    ]);
    let csv = String::from_utf8_lossy(&out.stdout);
    assert!(
        csv.lines().any(|l| l.starts_with("out,low_corner,Hz,")),
        "{csv}"
    );

    // The picture gets a histogram of the corner (the SVG names its axis).
    let svg = dir.path().join("band.svg");
    let out = ampchain(&[
        "spread",
        chain,
        "--runs",
        "300",
        "--band",
        "--plot",
        svg.to_str().unwrap(),
    ]);
    assert!(out.status.success());
    let text = std::fs::read_to_string(&svg).unwrap();
    assert!(text.contains("low −3 dB corner to") && !text.contains("high −3 dB"));

    // --at: the frequency is reported and the capacitor spreads.
    let out = ampchain(&[
        "spread", chain, "--runs", "50", "--at", "10Hz", "--format", "json",
    ]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["frequency"].as_f64(), Some(10.0));
    assert_eq!(v["spreads"].as_array().unwrap().len(), 1);
    assert!(v["not_sampled"].as_array().unwrap().is_empty());

    // A corner requirement needs --band; bad input (exit 2) naming the requirement.
    let out = ampchain(&[
        "spread",
        chain,
        "--runs",
        "50",
        "--require",
        "low_corner ..20Hz",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("low_corner ..20Hz") && err.contains("--band"),
        "{err}"
    );
    // A bad --at names the option.
    let out = ampchain(&["spread", chain, "--at", "loud"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--at"));
    // A requirement on a corner the nominal chain lacks (no device capacitance here,
    // so no high corner) is refused rather than missed by every build.
    let out = ampchain(&[
        "spread",
        chain,
        "--runs",
        "50",
        "--band",
        "--require",
        "high_corner 20kHz..",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("found no high −3 dB corner of load \"out\""),
        "{err}"
    );
    // With --band the requirement is checked: every build's corner is under 20 Hz.
    let out = ampchain(&[
        "spread",
        chain,
        "--runs",
        "50",
        "--band",
        "--require",
        "low_corner ..20Hz",
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn a_midband_run_of_capacitor_tolerances_alone_says_how_to_spread_them() {
    // Bad input (exit 2): the message names what was found and what would make it count.
    let (_dir, path) = temp_rc_chain("caps");
    let out = ampchain(&["spread", path.to_str().unwrap(), "--runs", "10"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("links[0].coupling (source → s)") && err.contains("--band"),
        "{err}"
    );
}

#[test]
fn a_corner_within_a_walk_step_of_the_search_range_is_found() {
    // First-order RC high-pass (handbook formula, as above) with its corner at 8.3 GHz,
    // within one walk step (×1.25) of the top of the search range (10 GHz): a walk that
    // would step past the range must stop at its edge, not give up (the nominal build
    // recorded no corner while every other build had one).
    let rc = reference::Chain::from_text(&rc_highpass(r#""1u""#)).expect("reference reads");
    let dc = reference::solve_dc(&rc).expect("reference DC");
    let r_in = reference::analyse(&rc, dc)
        .expect("reference midband")
        .stages[0]
        .r_in;
    let f_l = 8.3e9;
    let c = 1.0 / (2.0 * PI * (2_200.0 + r_in) * f_l);
    let text = rc_highpass(&format!(r#"{{ "value": {c:e}, "tolerance": "1%" }}"#));
    let (_, r) = run(&text, Freq::Midband, true, 50);
    let low = r.trials.layout.low_corner(0);
    assert!(
        (r.nominal[low] / f_l - 1.0).abs() < 1e-6,
        "nominal corner {} Hz, RC formula {f_l} Hz",
        r.nominal[low]
    );
    for row in r.trials.rows() {
        assert!(row[low].is_finite(), "a build without its corner");
    }
}
