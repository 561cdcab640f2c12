//! Op-amp stages in `sweep` (docs/definitions.md "Large signal"): the clipped source at
//! midband against the planner's linear gains (the linear limit, themselves checked
//! against the textbook closed-loop forms in tests/opamp.rs), the Fourier series of a
//! symmetrically clipped sine (textbook, derived by quarter-wave symmetry; from
//! memory), the clip onset (rail − margin − V_rest)/|gain| by hand, and the side and
//! level the region-limit method of `plan` predicts for `rail` and `current_limit`.

use ampchain::large_signal::onset::{SearchOptions, Threshold};
use ampchain::large_signal::LargeSignal;
use ampchain::stages::Toward;
use ampchain::Chain;
use std::f64::consts::PI;

mod common;

/// One op-amp stage between a source and a load. `device` and `stage` are JSON
/// fragments; the supply, the source resistance and the load vary by test.
fn single(supplies: &str, device: &str, stage: &str, r_s: &str, r_l: &str) -> Chain {
    let text = format!(
        r#"{{ "version": 2, {supplies},
          "devices": {{ "u": {{ "polarity": "opamp", {device} }} }},
          "source": {{ "resistance": "{r_s}", "level": "10 mV" }},
          "stages": [ {{ "id": "amp", "device": "u", {stage} }} ],
          "loads": [ {{ "id": "out", "resistance": "{r_l}" }} ],
          "links": [ {{ "from": "source", "to": "amp", "coupling": "10u" }},
                     {{ "from": "amp", "to": "out", "coupling": "direct" }} ] }}"#
    );
    Chain::from_json_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"))
}

const SPLIT: &str = r#""supplies": { "vcc": "15 V", "vee": "-15 V" }"#;
const IDEAL_OUT: &str = r#""open_loop_gain": "1e6", "gain_bandwidth": "10 MHz""#;
const NONINV: &str = r#""type": "opamp_noninverting", "r_feedback": "22k", "r_ground": "10k",
    "r_bias": "100k", "rails": { "top": "vcc", "bottom": "vee" }"#;

fn demo() -> Chain {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/chains/stage-monitor-pickup.json"
    );
    ampchain::io::read_chain(path).unwrap()
}

/// The onset search, clip only, at a tight tolerance.
fn clip_onsets(chain: &Chain) -> ampchain::large_signal::onset::Onsets {
    let ev = chain.evaluate().unwrap();
    let mut ls = LargeSignal::new(chain, &ev, 256).unwrap();
    let opt = SearchOptions {
        thresholds: vec![Threshold::Clip],
        tolerance_db: 0.002,
        ..SearchOptions::default()
    };
    ls.onsets(&opt).unwrap()
}

#[test]
fn small_signal_gains_equal_the_planners() {
    // At 60 dB below the first clip every network is linear to well within 1e-6: the
    // op-amp's gain from its input node and from the EMF equals plan's `gain` and
    // `cumulative_gain` (the linear limit of the same network). The transistor stages
    // of the demo distort a little even there, so its op-amp stage is held to 1e-4.
    let inverting = r#""type": "opamp_inverting", "r_input": "4k7", "r_feedback": "47k",
        "rails": { "top": "vcc", "bottom": "vee" }"#;
    let with_r_out = r#""open_loop_gain": "100 dB", "gain_bandwidth": "3 MHz",
        "input_resistance": "2M", "output_resistance": "75""#;
    for (chain, stage, rel) in [
        (single(SPLIT, IDEAL_OUT, NONINV, "600", "10k"), 0, 1e-7),
        (single(SPLIT, with_r_out, NONINV, "600", "2k"), 0, 1e-7),
        (single(SPLIT, with_r_out, inverting, "50", "2k"), 0, 1e-7),
        (demo(), 2, 1e-4),
    ] {
        let ev = chain.evaluate().unwrap();
        let mut ls = LargeSignal::new(&chain, &ev, 1024).unwrap();
        // The rest: the large-signal network's DC against plan's own solve of the
        // stage network (`dc::solve_opamp_stage`, the same model, another solver).
        let (q, v_rest) = (ls.quiescent[stage], ev.dc[stage].op.v_c);
        assert!(
            (q.v_out - v_rest).abs() < 1e-9,
            "rest {} vs {v_rest}",
            q.v_out
        );
        assert!(
            (q.i_c - ev.dc[stage].op.i_c).abs() < 1e-12,
            "pin current at rest"
        );
        let clip = ev.headroom[ev.first_clip].clip_input_vpeak;
        let r = ls.level(clip * 1e-3).unwrap();
        let s = &r.stages[stage];
        let plan_gain = ev.ac[stage].gain.norm().copysign(ev.ac[stage].gain.re);
        let plan_cum = ev.ac[stage]
            .cumulative
            .norm()
            .copysign(ev.ac[stage].cumulative.re);
        assert!(
            (s.gain - plan_gain).abs() <= rel * plan_gain.abs(),
            "{}: gain {} vs plan {plan_gain}",
            s.id,
            s.gain
        );
        assert!(
            (s.cumulative_gain - plan_cum).abs() <= rel * plan_cum.abs(),
            "{}: cumulative {} vs plan {plan_cum}",
            s.id,
            s.cumulative_gain
        );
        assert_eq!((s.rail, s.current_limit), (Some(false), Some(false)));
    }
}

/// Peak amplitude of harmonic n (odd) of A·sin θ clipped at ±A·sin α (textbook
/// Fourier series, from memory, by quarter-wave symmetry: b_n = (4/π)∫₀^{π/2} x sin nθ dθ
/// = (4/π)[(A/2)(sin((n−1)α)/(n−1) − sin((n+1)α)/(n+1)) + A·sin α·cos(nα)/n], and for
/// n = 1 b_1 = (A/π)(2α + sin 2α)); even harmonics vanish.
fn clipped_sine_harmonic(n: usize, a: f64, alpha: f64) -> f64 {
    let nf = n as f64;
    if n % 2 == 0 {
        return 0.0;
    }
    if n == 1 {
        return a / PI * (2.0 * alpha + (2.0 * alpha).sin());
    }
    4.0 / PI
        * (a / 2.0
            * (((nf - 1.0) * alpha).sin() / (nf - 1.0) - ((nf + 1.0) * alpha).sin() / (nf + 1.0))
            + a * alpha.sin() * (nf * alpha).cos() / nf)
}

#[test]
fn a_hard_clipped_sine_has_the_fourier_series_of_a_clipped_sine() {
    // An op-amp with r_out = 0 and no current limit, split rails, output resting at
    // 0 V: v_out = clamp(G·e, ±13.5 V) exactly (the + input sees e through R_S and
    // r_bias only, r_in = ∞), G the closed-loop gain from the EMF (plan's
    // cumulative gain). Driven to twice the clip level, α = arcsin(1/2) = 30°. The
    // sampled period aliases harmonics near N = 4096, whose amplitudes fall as 1/n²:
    // far below 1e-5 of the fundamental.
    let chain = single(SPLIT, IDEAL_OUT, NONINV, "600", "10k");
    let ev = chain.evaluate().unwrap();
    let g = ev.ac[0].cumulative.re;
    let edge = 15.0 - 1.0;
    let e_clip = edge / g.abs();
    let mut ls = LargeSignal::new(&chain, &ev, 4096).unwrap();
    let r = ls.level(2.0 * e_clip).unwrap();
    let s = &r.stages[0];
    let (a, alpha) = (2.0 * edge, (0.5f64).asin());
    let b1 = clipped_sine_harmonic(1, a, alpha);
    assert!(
        (s.output.fundamental - b1).abs() <= 1e-6 * b1,
        "fundamental {} vs {b1}",
        s.output.fundamental
    );
    for (k, &h) in s.output.harmonics.iter().enumerate() {
        let n = k + 2;
        let want = clipped_sine_harmonic(n, a, alpha);
        assert!(
            (h - want.abs()).abs() <= 1e-5 * b1,
            "harmonic {n}: {h} vs {want}"
        );
    }
    // Flat tops exactly at the rail edges, and the output is symmetric.
    assert!((s.output.peak_positive - edge).abs() < 1e-9);
    assert!((s.output.peak_negative - edge).abs() < 1e-9);
    assert!(s.output.dc_shift.abs() < 1e-9);
    assert_eq!((s.rail, s.current_limit), (Some(true), Some(false)));
    assert!(!s.saturates && !s.cuts_off);
}

#[test]
fn clip_onset_is_the_rail_edge_over_the_gain() {
    // One 12 V rail, `reference` 5 V (so the rest is off centre and the flat netlist's
    // reference node carries it), swing_margin 1.5 V: the pin rests at V_rest (plan's
    // operating point, 5 V to within A_0's error) and reaches the nearer edge first,
    // 0 + 1.5 V (3.5 V away; 12 − 1.5 = 10.5 V is 5.5 V away): e_clip =
    // (V_rest − 1.5)/|G| by hand, G plan's cumulative gain. The search brackets it to
    // 0.002 dB; the side is `rail`, as plan says.
    let device = r#""open_loop_gain": "110 dB", "gain_bandwidth": "1 MHz",
        "swing_margin": "1.5 V", "output_resistance": "20""#;
    let stage = r#""type": "opamp_noninverting", "r_feedback": "33k", "r_ground": "10k",
        "r_bias": "220k", "reference": "5 V""#;
    let chain = single(r#""supply": "12 V""#, device, stage, "1k", "47k");
    let ev = chain.evaluate().unwrap();
    let v_rest = ev.dc[0].op.v_c;
    assert!((v_rest - 5.0).abs() < 1e-3, "rest {v_rest}");
    let g = ev.ac[0].cumulative.norm();
    let by_hand = (v_rest - 1.5).min(12.0 - 1.5 - v_rest) / g;
    let o = clip_onsets(&chain);
    let s = &o.stages[0];
    let clip = s.clip.as_ref().expect("clips in range").vpeak;
    let db = 20.0 * (clip / by_hand).log10();
    assert!(
        db.abs() < 0.002,
        "{clip} V vs {by_hand} V by hand ({db} dB)"
    );
    assert_eq!(s.clip_toward, Some(Toward::Rail));
    assert_eq!(s.plan_toward, Toward::Rail);
}

#[test]
fn the_current_limit_is_named_and_never_passed() {
    // 8 mA limit into 1 kΩ in parallel with the 32 kΩ feedback path, r_out = 50 Ω: the
    // pin current reaches 8 mA at about 7.75 V, before the 13.5 V rail edge. The
    // region-limit method of `plan` (linear network up to the edge) predicts the side
    // `current_limit` and the level; the sweep's clip onset agrees to the search
    // tolerance, and driven to three times that level the pin current never passes
    // the limit (it cannot: the limit is exact, docs/definitions.md "Large signal").
    let device = r#""open_loop_gain": "100 dB", "gain_bandwidth": "3 MHz",
        "output_resistance": "50", "output_current_limit": "8 mA""#;
    let chain = single(SPLIT, device, NONINV, "600", "1k");
    let ev = chain.evaluate().unwrap();
    assert_eq!(ev.headroom[0].toward, Toward::CurrentLimit);
    let o = clip_onsets(&chain);
    let s = &o.stages[0];
    assert_eq!(s.clip_toward, Some(Toward::CurrentLimit));
    let db = s.clip_vs_plan_db.expect("clips in range");
    assert!(db.abs() < 0.002, "{db} dB from plan");

    let mut ls = LargeSignal::new(&chain, &ev, 1024).unwrap();
    let r = ls.level(3.0 * ev.headroom[0].clip_input_vpeak).unwrap();
    assert_eq!(
        (r.stages[0].rail, r.stages[0].current_limit),
        (Some(false), Some(true))
    );
    let peak = ls.stage_waves[..1024]
        .iter()
        .fold(0.0f64, |m, w| m.max(w.i_c.abs()));
    assert!(peak <= 8e-3 * (1.0 + 1e-12), "{peak} A");
    assert!(peak >= 8e-3 * (1.0 - 1e-9), "{peak} A");
}

#[test]
fn the_demo_names_the_rail_side_in_json() {
    // chains/stage-monitor-pickup.json: the line driver's rail edge (13.5 V) comes long
    // before its 25 mA limit (about 2.3 mA at the edge into 10 kΩ and the 14.7 kΩ
    // feedback path, by Ohm's law): plan and sweep both name `rail`.
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/chains/stage-monitor-pickup.json"
    );
    let o = common::run(&["sweep", path, "--steps", "3", "--format", "json"], None);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let line = v["onsets"]["stages"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == "line")
        .expect("the line stage");
    assert_eq!(line["clip_toward"], "rail");
    assert_eq!(line["plan_toward"], "rail");
    let level = &v["levels"][0]["stages"][2];
    assert_eq!(level["rail"], false);
    assert_eq!(level["current_limit"], false);
    // A transistor stage carries no op-amp keys.
    assert!(v["levels"][0]["stages"][1].get("rail").is_none());
    // The CSV's last two columns: false for the op-amp stage, empty for the others.
    let o = common::run(&["sweep", path, "--steps", "3", "--format", "csv"], None);
    let text = String::from_utf8_lossy(&o.stdout);
    let mut rows = text.lines();
    assert!(rows.next().unwrap().ends_with(",rail,current_limit"));
    for row in rows.take(3) {
        let tail = if row.contains(",line,") {
            ",false,false"
        } else {
            ",,"
        };
        assert!(row.ends_with(tail), "{row}");
    }
}

#[test]
fn generated_stages_stay_inside_their_limits_at_every_level() {
    // 48 op-amp stages from a fixed walk over the device and circuit values (A_0 from
    // 40 to 140 dB, r_out 0 to 300 Ω, current limit none to 3 mA, both kinds, single
    // and split rails), each driven from 1/10 to 30 times plan's clip level: every
    // sample solves, the pin never passes V_lo/V_hi nor its current ± the limit
    // (docs/definitions.md "Large signal": the limits are exact); at 1/10 of the clip
    // level nothing clips, at 1.1 times the stage clips on the side plan names (the
    // region-limit method, exact for a network linear up to the edge).
    let mut n = 0;
    for a_0_db in [40.0, 80.0, 106.0, 140.0] {
        for (r_out, limit) in [(0.0, None), (75.0, Some(3e-3)), (300.0, Some(20e-3))] {
            for (kind, supply) in [
                (NONINV, SPLIT),
                (
                    r#""type": "opamp_inverting", "r_input": "2k2", "r_feedback": "47k",
                       "reference": "6 V""#,
                    r#""supply": "12 V""#,
                ),
                (
                    r#""type": "opamp_noninverting", "r_bias": "47k",
                       "reference": "4 V""#,
                    r#""supply": "9 V""#,
                ),
                (
                    r#""type": "opamp_inverting", "r_input": "10k", "r_feedback": "10k",
                       "rails": { "top": "vcc", "bottom": "vee" }"#,
                    SPLIT,
                ),
            ] {
                let limit_key = limit.map_or(String::new(), |i: f64| {
                    format!(r#", "output_current_limit": "{}""#, i)
                });
                let device = format!(
                    r#""open_loop_gain": "{a_0_db} dB", "gain_bandwidth": "2 MHz",
                       "output_resistance": "{r_out}", "input_resistance": "500k"{limit_key}"#
                );
                let chain = single(supply, &device, kind, "1k", "2k2");
                let ev = chain.evaluate().unwrap();
                let clip = ev.headroom[0].clip_input_vpeak;
                let (lo, hi, i_lim) = ls_edges(&chain);
                let mut ls = LargeSignal::new(&chain, &ev, 256).unwrap();
                for (factor, clips) in [(0.1, false), (1.1, true), (30.0, true)] {
                    let r = ls.level(factor * clip).unwrap_or_else(|e| {
                        panic!("{a_0_db} dB, {r_out} Ω, {limit:?}, {kind}: {e}")
                    });
                    for w in &ls.stage_waves[..256] {
                        assert!(w.v_out >= lo - 1e-9 && w.v_out <= hi + 1e-9, "{}", w.v_out);
                        assert!(w.i_c.abs() <= i_lim * (1.0 + 1e-12), "{}", w.i_c);
                    }
                    let s = &r.stages[0];
                    assert_eq!(
                        s.clips(),
                        clips,
                        "{a_0_db} dB, {r_out} Ω, {limit:?}, {kind} at {factor}×"
                    );
                    if factor == 1.1 {
                        let side = if s.opamp_edge_samples.1 > s.opamp_edge_samples.0 {
                            Toward::CurrentLimit
                        } else {
                            Toward::Rail
                        };
                        let plan_side = ev.headroom[0].toward;
                        assert_eq!(side, plan_side, "{a_0_db} dB, {r_out} Ω, {limit:?}, {kind}");
                    }
                }
                n += 1;
            }
        }
    }
    assert_eq!(n, 48);
}

/// The stage's pin edges as docs/definitions.md "Op-amp" defines them, from the file.
fn ls_edges(chain: &Chain) -> (f64, f64, f64) {
    let amp = chain.devices[0].opamp.expect("an op-amp");
    let r = chain.stage_rails(0);
    (
        r.bottom + amp.swing_margin,
        r.top - amp.swing_margin,
        amp.i_limit,
    )
}
