//! Speed of the large-signal sweep: 30 levels × 1024 samples per period on the
//! four-stage demo chain (chains/field-recorder.json), from 40 dB below to 10 dB above
//! its first load-line clip level. Target: below one second.

use ampchain::large_signal::{level_steps, LargeSignal, DEFAULT_SAMPLES};
use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;

fn sweep(c: &mut Criterion) {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/chains/field-recorder.json");
    let chain = ampchain::io::read_chain(path).expect("demo chain");
    assert_eq!(chain.stages.len(), 4, "a four-stage chain");
    let ev = chain.evaluate().expect("operating point");
    let mut ls = LargeSignal::new(&chain, &ev, DEFAULT_SAMPLES).expect("network");
    let first = ev.headroom[ev.first_clip].clip_input_vpeak;
    let levels = level_steps(first * 0.01, first * 10f64.powf(0.5), 30);
    let mut group = c.benchmark_group("large_signal");
    group.sample_size(10);
    group.bench_function("sweep 30 levels x 1024 samples, four stages", |b| {
        b.iter(|| black_box(ls.sweep(black_box(&levels)).expect("sweep")))
    });
    group.finish();
}

criterion_group!(benches, sweep);
criterion_main!(benches);
