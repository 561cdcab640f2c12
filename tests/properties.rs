//! Properties every evaluation must have, on random valid chains (the generator of
//! tests/reference/generate.rs, driven by proptest): no panic; every impedance
//! positive; an emitter follower's gain between 0 and 1; each cumulative gain equal to
//! the source divider times the stage gains on the way; bypassing part of an emitter
//! resistor never lowers a stage's gain; the first stage to clip has the lowest clip
//! level. The laws are the textbook ones named beside each check.

mod reference;

use ampchain::stages::StageKind;
use ampchain::{Chain, Evaluation, Freq};
use num_complex::Complex64;
use proptest::prelude::*;
use proptest::test_runner::FileFailurePersistence;
use reference::generate::{generate_chain, Dice};

/// Relative agreement for quantities computed two ways from the same numbers.
const REL: f64 = 1e-9;

fn chain_from(dice: Vec<f64>) -> (String, Chain) {
    let text = generate_chain(&mut Dice {
        values: dice,
        next: 0,
    })
    .to_string();
    let chain = Chain::from_json_str(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    (text, chain)
}

/// The gain from the source EMF to stage `i`'s output, rebuilt as a cascade: the source
/// divider R_in/(R_S + R_in) (R_in: the source's branches in parallel; coupling
/// capacitors are shorts at midband) times every stage gain from the source to `i`
/// (the gain of a cascade is the product of the loaded stage gains; any electronics
/// text, from memory).
fn cascade(chain: &Chain, ev: &Evaluation, i: usize) -> Complex64 {
    use ampchain::graph::Port;
    let topo = &chain.topology;
    let y_source: Complex64 = topo
        .successors(Port::Source)
        .iter()
        .map(|b| match b.to {
            Port::Stage(d) => ev.ac[d].y_branch,
            Port::Load(k) => Complex64::new(1.0 / chain.loads[k].r_l, 0.0),
            Port::Source => Complex64::new(0.0, 0.0),
        })
        .sum();
    let z_in = 1.0 / y_source;
    let divider = z_in / (chain.source.r_s + z_in);
    let mut gain = Complex64::new(1.0, 0.0);
    let mut stage = i;
    loop {
        gain *= ev.ac[stage].gain;
        match topo.stage_driver[stage].0 {
            Port::Stage(u) => stage = u,
            _ => break,
        }
    }
    divider * gain
}

fn close(a: Complex64, b: Complex64) -> bool {
    (a - b).norm() <= REL * a.norm().max(b.norm())
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 96,
        failure_persistence: Some(Box::new(FileFailurePersistence::WithSource("proptest-regressions"))),
        ..ProptestConfig::default()
    })]

    #[test]
    fn evaluations_obey_the_circuit_laws(dice in prop::collection::vec(0.0..1.0f64, 256)) {
        let (text, chain) = chain_from(dice);
        // No panic: a chain evaluates or is refused with a named stage.
        let ev = match chain.evaluate() {
            Ok(ev) => ev,
            Err(e) => {
                prop_assert!(e.to_string().contains("stage \""), "{e}");
                return Ok(());
            }
        };
        let mut lowest = f64::INFINITY;
        for (i, stage) in chain.stages.iter().enumerate() {
            let ac = &ev.ac[i];
            // Passive bias networks and a forward-active transistor: every impedance
            // at midband is a positive resistance.
            prop_assert!(ac.y_in.re > 0.0 && ac.y_in.im == 0.0, "{}: y_in {}\n{text}", stage.id, ac.y_in);
            prop_assert!(ac.y_out.re > 0.0, "{}: y_out {}\n{text}", stage.id, ac.y_out);
            prop_assert!(ac.y_load.re > 0.0, "{}: y_load {}\n{text}", stage.id, ac.y_load);
            if let StageKind::EmitterFollower(_) = stage.kind {
                // A follower's gain is g_m·R/(1 + g_m·R)-like: between 0 and 1
                // (handbook formula, from memory).
                prop_assert!(ac.gain.re > 0.0 && ac.gain.re < 1.0, "{}: gain {}\n{text}", stage.id, ac.gain);
            }
            let rebuilt = cascade(&chain, &ev, i);
            prop_assert!(close(ac.cumulative, rebuilt), "{}: cumulative {} vs cascade {}\n{text}", stage.id, ac.cumulative, rebuilt);
            lowest = lowest.min(ev.headroom[i].clip_input_vpeak);
        }
        // docs/definitions.md: the first stage to clip is the one with the lowest clip level.
        prop_assert_eq!(ev.headroom[ev.first_clip].clip_input_vpeak, lowest);
    }

    #[test]
    fn bypassing_an_emitter_resistor_never_lowers_the_gain(
        dice in prop::collection::vec(0.0..1.0f64, 256),
        share in 0.05..1.0f64,
    ) {
        let (text, chain) = chain_from(dice);
        let Ok(before) = chain.evaluate() else { return Ok(()); };
        for i in 0..chain.stages.len() {
            let StageKind::CommonEmitter(ce) = &chain.stages[i].kind else { continue };
            if ce.r_emitter == 0.0 {
                continue;
            }
            // Move part of the unbypassed resistor under the bypass capacitor: the DC
            // network is unchanged, the AC degeneration smaller, so |A| = g_m·R_C/(1 +
            // g_m·R_E,ac) can only grow (handbook formula, from memory).
            let mut changed = chain.clone();
            let StageKind::CommonEmitter(ce) = &mut changed.stages[i].kind else { unreachable!() };
            let moved = share * ce.r_emitter;
            ce.r_emitter -= moved;
            ce.r_emitter_bypassed += moved;
            ce.c_bypass.get_or_insert(100e-6);
            let mut after = Evaluation::new(&changed);
            after.run(&changed, Freq::Midband).expect("same DC network, same operating point");
            let (a, b) = (before.ac[i].gain.norm(), after.ac[i].gain.norm());
            prop_assert!(b >= a * (1.0 - REL), "stage {}: |A| {a} → {b} after bypassing {moved} Ω\n{text}", chain.stages[i].id);
            let (op_a, op_b) = (before.dc[i].op, after.dc[i].op);
            prop_assert!((op_a.i_c - op_b.i_c).abs() <= REL * op_a.i_c, "DC moved: {} → {}", op_a.i_c, op_b.i_c);
        }
    }
}

/// The DC pass starts cold on every run (DEVELOPERS.md, "The data flow and the passes"):
/// re-using an `Evaluation` after evaluating other values gives bit for bit what a
/// fresh one gives, so Monte Carlo results do not depend on the order of the draws.
#[test]
fn an_evaluation_does_not_remember_the_previous_one() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains");
    let mut checked = 0;
    for entry in std::fs::read_dir(&dir).expect("chains/") {
        let path = entry.expect("entry").path();
        if path.extension().and_then(|x| x.to_str()) != Some("json") {
            continue;
        }
        let chain = Chain::from_json_str(&std::fs::read_to_string(&path).expect("readable"))
            .expect("demo chain");
        let fresh = chain.evaluate().expect("demo evaluates");
        let mut reused = Evaluation::new(&chain);
        let mut other = chain.clone();
        for d in &mut other.devices {
            d.beta *= 0.7;
        }
        let _ = reused.run(&other, Freq::Midband);
        reused.run(&chain, Freq::Midband).expect("demo evaluates");
        for i in 0..chain.stages.len() {
            assert_eq!(fresh.dc[i].op, reused.dc[i].op, "{}", path.display());
            assert_eq!(fresh.ac[i].cumulative, reused.ac[i].cumulative);
            assert_eq!(fresh.headroom[i], reused.headroom[i]);
        }
        checked += 1;
    }
    assert!(checked >= 4, "only {checked} demo chains");
}
