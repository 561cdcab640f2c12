//! Speed of the large-signal sweep.
//!
//! - `large_signal/sweep 30 levels x 1024 samples, four stages`: the four-stage demo
//!   chain (chains/field-recorder.json), from 40 dB below to 10 dB above its first
//!   load-line clip level. Target: below one second.
//! - `large_signal_stages/<n>`: chains of 10, 30, 100 and 1000 emitter followers, the
//!   buffer stage of chains/boost-pedal.json repeated (`common::repeated_stages`; the
//!   whole demo repeated compounds its gain beyond what f64 resolves), 3 levels × 128
//!   samples from 40 dB below to the first load-line clip level: the cost must grow
//!   linearly with the stage count (the per-sample solve is banded, DEVELOPERS.md
//!   "Large signal").
//!
//! Run: `cargo bench --bench sweep` (the figures are in DEVELOPERS.md).

#[path = "common/mod.rs"]
mod common;

use ampchain::large_signal::{level_steps, LargeSignal, DEFAULT_SAMPLES};
use ampchain::Chain;
use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use std::hint::black_box;
use std::time::Duration;

/// A chain's evaluator and its `n` levels from `below_db` under to `above_db` over its
/// first load-line clip level (peak EMF).
fn prepared(
    chain: &Chain,
    samples: usize,
    n: usize,
    below_db: f64,
    above_db: f64,
) -> (LargeSignal, Vec<f64>) {
    let ev = chain.evaluate().expect("operating point");
    let ls = LargeSignal::new(chain, &ev, samples).expect("network");
    let first = ev.headroom[ev.first_clip].clip_input_vpeak;
    let db = |x: f64| 10f64.powf(x / 20.0);
    (
        ls,
        level_steps(first / db(below_db), first * db(above_db), n),
    )
}

fn sweep(c: &mut Criterion) {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/chains/field-recorder.json");
    let chain = ampchain::io::read_chain(path).expect("demo chain");
    assert_eq!(chain.stages.len(), 4, "a four-stage chain");
    let (mut ls, levels) = prepared(&chain, DEFAULT_SAMPLES, 30, 40.0, 10.0);
    let mut group = c.benchmark_group("large_signal");
    group.sample_size(10);
    group.bench_function("sweep 30 levels x 1024 samples, four stages", |b| {
        b.iter(|| black_box(ls.sweep(black_box(&levels)).expect("sweep")))
    });
    group.finish();
}

fn stages(c: &mut Criterion) {
    let mut group = c.benchmark_group("large_signal_stages");
    group.sample_size(10);
    group.warm_up_time(Duration::from_millis(500));
    for n in [10, 30, 100, 1000] {
        let chain = Chain::from_json_str(&common::repeated_stages(n, &["buffer"]))
            .expect("generated chain");
        let (mut ls, levels) = prepared(&chain, 128, 3, 40.0, 0.0);
        group.bench_with_input(BenchmarkId::from_parameter(n), &levels, |b, levels| {
            b.iter(|| black_box(ls.sweep(black_box(levels)).expect("sweep")))
        });
    }
    group.finish();
}

criterion_group!(benches, sweep, stages);
criterion_main!(benches);
