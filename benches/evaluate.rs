//! Speed of one evaluation (`Evaluation::run`: DC + AC + headroom), and the same chain
//! solved the slow, general way as a baseline.
//!
//! - `evaluate/<demo>`: every chain in `chains/`, midband; `four-stage` is
//!   `chains/boost-pedal.json` (target: at most 2 µs).
//! - `response/1000-points`: `Evaluation::run(&chain, Freq::Hz(f))` at 1000
//!   log-spaced frequencies from 10 Hz to 100 kHz on the four-stage chain.
//! - `stages/<n>`: chains of 10, 100 and 1000 stages made by repeating the four-stage
//!   demo's stages (the cost must grow linearly; target: 1000 stages in at most 1 ms).
//! - `baseline/*`: the independent flattened-network solver of the tests
//!   (tests/reference): the whole chain as one dense nodal network per evaluation.
//!   `full` computes everything the planner reports (DC Newton, the midband transfer,
//!   r_in, r_out, load and the DC Thevenin resistances of every stage);
//!   `dc+transfer` only the DC Newton and one midband solve (a lower bound for any
//!   dense approach). Before timing, the planner's and the baseline's results are
//!   checked equal (1e-9 relative), so the ratio compares equal results.
//!
//! Run: `cargo bench --bench evaluate` (the figures are in DEVELOPERS.md).

#[path = "../tests/reference/mod.rs"]
mod reference;

#[path = "common/mod.rs"]
mod common;

use ampchain::{Chain, Evaluation, Freq};
use common::{chain_text, repeated_chain, FOUR_STAGE};
use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use std::hint::black_box;
use std::time::Duration;

fn demo_names() -> Vec<String> {
    let dir = format!("{}/chains", env!("CARGO_MANIFEST_DIR"));
    let mut names: Vec<String> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{dir}: {e}"))
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".json"))
        .collect();
    names.sort();
    names
}

fn agree(what: &str, planner: f64, baseline: f64) {
    let diff = (planner - baseline).abs();
    assert!(
        diff <= 1e-9 * planner.abs().max(baseline.abs()) + 1e-15,
        "{what}: planner {planner:e}, flat-network baseline {baseline:e}"
    );
}

/// The planner and the flat-network baseline give the same numbers for `text`.
fn check_equal(text: &str) {
    let chain = Chain::from_json_str(text).expect("planner reads the chain");
    let ev = chain.evaluate().expect("planner evaluates the chain");
    let flat = reference::Chain::from_text(text).expect("reference reads the chain");
    let dc = reference::solve_dc(&flat).expect("reference DC");
    let a = reference::analyse(&flat, dc).expect("reference midband");
    for (i, r) in a.stages.iter().enumerate() {
        let (op, ac, h) = (&ev.dc[i].op, &ev.ac[i], &ev.headroom[i]);
        agree("i_c", op.i_c, r.op.i_c);
        agree("v_ce", op.v_ce, r.op.v_ce);
        agree("v_b", op.v_b, r.op.v_b);
        agree("r_in", 1.0 / ac.y_in.re, r.r_in);
        agree("r_out", 1.0 / ac.y_out.re, r.r_out);
        agree("gain", ac.gain.re, r.gain);
        agree("cumulative_gain", ac.cumulative.re, r.cumulative_gain);
        agree("limit_up", h.swing.limit_up, r.limit_up);
        agree("limit_down", h.swing.limit_down, r.limit_down);
        agree("clip_input_vpeak", h.clip_input_vpeak, r.clip_input_vpeak);
        agree(
            "dc_load_line.slope",
            h.dc_line.expect("a transistor stage").slope,
            r.dc_load_line.slope,
        );
    }
    assert_eq!(ev.first_clip, a.first_clip, "first stage to clip");
}

fn evaluate_demos(c: &mut Criterion) {
    let mut g = c.benchmark_group("evaluate");
    for name in demo_names() {
        let chain = Chain::from_json_str(&chain_text(&name)).expect("demo chain");
        let mut ev = Evaluation::new(&chain);
        let label = if name == FOUR_STAGE {
            "four-stage".to_string()
        } else {
            name.trim_end_matches(".json").to_string()
        };
        g.bench_function(label, |b| {
            b.iter(|| {
                ev.run(black_box(&chain), Freq::Midband).expect("evaluates");
                black_box(ev.first_clip)
            })
        });
    }
    g.finish();
}

/// Three stages joined by direct links: a cascode (a common emitter without
/// `r_collector` into a common base) whose collector drives a follower directly. The
/// lower collector is a current source, so the group is solved as one network by
/// Newton's method on the nodal core (`circuit::coupled::solve_network`).
const CASCODE_TRIO: &str = r#"{
  "version": 2, "supply": "15 V",
  "devices": { "q": { "polarity": "npn", "beta": 300, "saturation_current": "8f",
                      "early_voltage": "90 V" } },
  "source": { "resistance": "1k", "level": "1 mV" },
  "stages": [
    { "id": "lower", "type": "common_emitter", "device": "q", "r_top": "68k", "r_bottom": "15k",
      "r_emitter": "220", "r_emitter_bypassed": "1k8", "c_bypass": "100u" },
    { "id": "upper", "type": "common_base", "device": "q", "r_top": "39k", "r_bottom": "47k",
      "c_base": "47u", "r_collector": "3k9" },
    { "id": "buffer", "type": "emitter_follower", "device": "q", "r_emitter": "4k7" } ],
  "loads": [ { "id": "out", "resistance": "10k" } ],
  "links": [ { "from": "source", "to": "lower", "coupling": "4u7" },
             { "from": "lower", "to": "upper", "coupling": "direct" },
             { "from": "upper", "to": "buffer", "coupling": "direct" },
             { "from": "buffer", "to": "out", "coupling": "10u" } ] }"#;

/// The same three stages with `r_collector` on the lower one (4k7) and a resistor on
/// the upper emitter: every driver holds its output node, so the group is swept stage
/// by stage (the v1 way).
fn swept_trio() -> String {
    CASCODE_TRIO
        .replace(
            r#""r_top": "68k""#,
            r#""r_collector": "4k7", "r_top": "68k""#,
        )
        .replace(
            r#""c_base": "47u""#,
            r#""c_base": "47u", "r_emitter": "10k""#,
        )
}

fn direct_groups(c: &mut Criterion) {
    let mut g = c.benchmark_group("group");
    for (label, text) in [
        ("three-direct-network", CASCODE_TRIO.to_string()),
        ("three-direct-swept", swept_trio()),
    ] {
        check_equal(&text);
        let chain = Chain::from_json_str(&text).expect("trio chain");
        let mut ev = Evaluation::new(&chain);
        g.bench_function(label, |b| {
            b.iter(|| {
                ev.run(black_box(&chain), Freq::Midband).expect("evaluates");
                black_box(ev.first_clip)
            })
        });
    }
    g.finish();
}

fn response(c: &mut Criterion) {
    let chain = Chain::from_json_str(&chain_text(FOUR_STAGE)).expect("demo chain");
    let mut ev = Evaluation::new(&chain);
    // 1000 points, log-spaced from 10 Hz to 100 kHz.
    let freqs: Vec<f64> = (0..1000)
        .map(|k| 10.0 * 10f64.powf(4.0 * k as f64 / 999.0))
        .collect();
    let mut g = c.benchmark_group("response");
    g.bench_function("1000-points", |b| {
        b.iter(|| {
            let mut sum = 0.0;
            for &f in &freqs {
                ev.run(black_box(&chain), Freq::Hz(f)).expect("evaluates");
                sum += ev.load_gain[0].norm();
            }
            black_box(sum)
        })
    });
    g.finish();
}

fn long_chains(c: &mut Criterion) {
    let mut g = c.benchmark_group("stages");
    for n in [10usize, 100, 1000] {
        let chain = Chain::from_json_str(&repeated_chain(n)).expect("generated chain");
        let mut ev = Evaluation::new(&chain);
        g.bench_with_input(BenchmarkId::from_parameter(n), &n, |b, _| {
            b.iter(|| {
                ev.run(black_box(&chain), Freq::Midband).expect("evaluates");
                black_box(ev.first_clip)
            })
        });
    }
    g.finish();
}

fn baseline(c: &mut Criterion) {
    let mut g = c.benchmark_group("baseline");
    for (label, text) in [
        ("four-stage", chain_text(FOUR_STAGE)),
        ("10-stages", repeated_chain(10)),
    ] {
        check_equal(&text);
        let chain = Chain::from_json_str(&text).expect("planner reads");
        let mut ev = Evaluation::new(&chain);
        g.bench_function(format!("planner/{label}"), |b| {
            b.iter(|| {
                ev.run(black_box(&chain), Freq::Midband).expect("evaluates");
                black_box(ev.first_clip)
            })
        });
        let flat = reference::Chain::from_text(&text).expect("reference reads");
        g.bench_function(format!("dense-full/{label}"), |b| {
            b.iter(|| {
                let dc = reference::solve_dc(black_box(&flat)).expect("dc");
                black_box(reference::analyse(&flat, dc).expect("ac").first_clip)
            })
        });
        let transfer = reference::Setup {
            emf: 1.0,
            ..reference::Setup::default()
        };
        g.bench_function(format!("dense-dc+transfer/{label}"), |b| {
            b.iter(|| {
                let dc = reference::solve_dc(black_box(&flat)).expect("dc");
                black_box(
                    reference::solve_ac(&flat, &dc, &transfer)
                        .expect("ac")
                        .len(),
                )
            })
        });
    }
    g.finish();
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(40)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));
    targets = evaluate_demos, direct_groups, response, long_chains, baseline
}
criterion_main!(benches);
