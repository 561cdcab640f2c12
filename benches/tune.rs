//! Speed of the chain-wide search (`cargo bench --bench tune`).
//!
//! The target (issue 20): at least one million candidate builds of the four-stage
//! chain (`chains/boost-pedal.json`) per second on two cores, search overhead
//! included. One iteration is a whole `tune::search` (coordinate descent, the
//! enumeration of a neighbourhood of about 80 000 builds with a `--keep` on the gain,
//! the polish); criterion prints elements/s = candidate builds evaluated per second.

use ampchain::spread::{Layout, Requirement};
use ampchain::tune::{self, Goal, Objective, SeriesChoice, Settings};
use ampchain::Chain;
use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use std::path::Path;
use std::time::Duration;

fn search(c: &mut Criterion) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let text = std::fs::read_to_string(&path).expect("demo chain");
    let chain = Chain::from_json_str(&text).expect("demo chain is valid");
    let vary: Vec<String> = [
        "gain1.r_top",
        "gain1.r_bottom",
        "gain1.r_collector",
        "gain2.r_top",
        "gain2.r_bottom",
        "gain2.r_collector",
        "output.r_emitter",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let choice = SeriesChoice {
        resistors: ampchain::eseries::Series::E24,
        capacitors: ampchain::eseries::Series::E12,
    };
    let selection = tune::vary::parse(&chain, &vary, choice).expect("parts to vary");
    let mut objective = Objective::new(&chain, Goal::Headroom);
    let layout = Layout::new(&chain, &objective.measure);
    objective.keep =
        vec![Requirement::parse_as("--keep", "gain 19dB..23dB", &chain, &layout).expect("keep")];
    let settings = Settings {
        kicks: 0,
        ..Settings::default()
    };
    let run = || tune::search(&chain, &objective, &selection.variables, settings, &|_| {});
    let once = run();
    let evaluations = once.continuous_evaluations + once.discrete_evaluations;
    let mut g = c.benchmark_group("tune");
    g.sample_size(10);
    g.measurement_time(Duration::from_secs(3));
    g.throughput(Throughput::Elements(evaluations as u64));
    g.bench_function("four-stage", |b| b.iter(run));
    g.finish();
}

criterion_group!(benches, search);
criterion_main!(benches);
