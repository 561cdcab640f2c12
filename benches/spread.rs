//! Speed of the spread command's parts (`cargo bench --bench spread`).
//!
//! The target (issue 20): one million trials of the four-stage demo
//! (`spread chains/hydrophone-spread.json --runs 1000000`) in at most 0.5 s on a
//! two-core machine, i.e. 2 000 000 trials/s with both cores (issue 5 asked for 2 s).
//! Criterion prints the Monte Carlo throughput as elements/s = trials/s.

use ampchain::network::Freq;
use ampchain::report::spread::SpreadReport;
use ampchain::spec::parse_chain_text;
use ampchain::spread::{self, Measure, SpreadModel};
use ampchain::{Chain, Evaluation};
use criterion::{black_box, criterion_group, criterion_main, Criterion, Throughput};
use std::path::Path;

fn demo(name: &str) -> (ampchain::spec::ChainSpec, Chain) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("chains")
        .join(name);
    let text = std::fs::read_to_string(&path).expect("demo chain");
    let spec = parse_chain_text(&text).expect("demo chain parses");
    let chain = Chain::from_spec(&spec).expect("demo chain is valid");
    (spec, chain)
}

/// One evaluation (DC + AC + headroom) of each demo chain: what a trial costs.
fn evaluate(c: &mut Criterion) {
    let mut g = c.benchmark_group("evaluate");
    for name in [
        "hydrophone-spread.json",
        "mic-preamp.json",
        "line-driver.json",
        "piezo-frontend.json",
    ] {
        let (_, chain) = demo(name);
        let mut ev = Evaluation::new(&chain);
        g.throughput(Throughput::Elements(1));
        g.bench_function(name, |b| {
            b.iter(|| ev.run(black_box(&chain), Freq::Midband).expect("evaluates"))
        });
    }
    g.finish();
}

/// Monte Carlo trials of the four-stage demo chain on all cores.
fn monte_carlo(c: &mut Criterion) {
    let (spec, chain) = demo("hydrophone-spread.json");
    let model = SpreadModel::build(&spec, &chain, None, false).expect("spread model");
    let runs = 50_000;
    let mut g = c.benchmark_group("spread");
    g.sample_size(10);
    g.throughput(Throughput::Elements(runs as u64));
    g.bench_function("monte_carlo hydrophone 4 stages", |b| {
        b.iter(|| spread::trials::monte_carlo(&chain, &model, &Measure::MIDBAND, runs, 1, &|_| {}))
    });
    let run = spread::run(&chain, model.clone(), Measure::MIDBAND, runs, 1, &|_| {}).expect("runs");
    g.bench_function("report of 50 000 trials", |b| {
        b.iter(|| SpreadReport::new(&chain, &run, &[], 0.0))
    });
    g.throughput(Throughput::Elements(1));
    g.bench_function("corners hydrophone (reduced set)", |b| {
        b.iter(|| spread::corners::run(&chain, &model, &Measure::MIDBAND))
    });
    // `--band`: every build's −3 dB corners too (capacitors spread as well).
    let band = Measure::new(&chain, Freq::Midband, true).expect("nominal corners");
    let band_model = SpreadModel::build(&spec, &chain, None, true).expect("spread model");
    let band_runs = 2_000;
    g.throughput(Throughput::Elements(band_runs as u64));
    g.bench_function("monte_carlo hydrophone --band", |b| {
        b.iter(|| spread::trials::monte_carlo(&chain, &band_model, &band, band_runs, 1, &|_| {}))
    });
    g.finish();
}

criterion_group!(benches, evaluate, monte_carlo);
criterion_main!(benches);
