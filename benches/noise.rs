//! Speed of band noise (`noise::band_noise`): every source at every load and stage
//! output of the four-stage demo (`chains/boost-pedal.json`), integrated over 20 Hz …
//! 20 kHz to 1e-7 relative (target: at most 200 µs).
//!
//! - `noise/band-four-stage`: the integration alone on a prepared `NoiseModel`;
//! - `noise/whole-four-stage`: with the operating points, netlist and network built.
//!
//! Run: `cargo bench --bench noise` (the figures are in DEVELOPERS.md).

#[path = "common/mod.rs"]
mod common;

use ampchain::noise::{self, NoiseModel, Weighting};
use ampchain::Chain;
use common::{chain_text, FOUR_STAGE};
use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;
use std::time::Duration;

fn band(c: &mut Criterion) {
    let chain = Chain::from_json_str(&chain_text(FOUR_STAGE)).expect("the demo parses");
    let mut model = NoiseModel::new(&chain).expect("the demo biases");
    let first = noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::None).unwrap();
    assert!(first.relative_error <= noise::TOLERANCE);
    println!(
        "four-stage: {} frequencies, relative error {:e}",
        first.points, first.relative_error
    );
    c.bench_function("noise/band-four-stage", |b| {
        b.iter(|| {
            noise::band_noise(&mut model, black_box(noise::DEFAULT_BAND), Weighting::None).unwrap()
        })
    });
    c.bench_function("noise/whole-four-stage", |b| {
        b.iter(|| {
            let mut model = NoiseModel::new(black_box(&chain)).unwrap();
            noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::None).unwrap()
        })
    });
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(20)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2));
    targets = band
}
criterion_main!(benches);
