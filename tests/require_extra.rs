//! `spread --require` / `tune --keep` on a stage's transistor dissipation and on the
//! warnings of a kind, against outside references: the definition of electric power
//! (P = V·I per junction: V_CE·I_C + V_BE·I_B) on `plan`'s operating point, and
//! `check`'s warnings on the same chain file.

mod common;

use ampchain::spread::{self, require::measure_for, Layout, Measure, Requirement};
use ampchain::warnings::KINDS;
use ampchain::Chain;
use serde_json::Value;
use std::path::Path;

fn chain_of(path: &Path) -> Chain {
    Chain::from_json_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn json(args: &[&str]) -> Value {
    serde_json::from_slice(&common::run_ok(args)).unwrap()
}

/// The nominal record with what `requirements` ask for measured, and its layout.
fn nominal(chain: &Chain, requirements: &[&str]) -> (Layout, Vec<f64>) {
    let texts: Vec<String> = requirements.iter().map(|s| s.to_string()).collect();
    let mut measure = Measure::MIDBAND;
    measure_for(&texts, &mut measure, chain.source.level);
    let row = spread::nominal_record(chain, &measure).unwrap();
    (Layout::new(chain, &measure), row)
}

/// Every demo chain that plans, with `plan --format json`'s report of it.
fn planned_demos() -> Vec<(std::path::PathBuf, Chain, Value)> {
    common::demo_chains()
        .into_iter()
        .map(|path| (chain_of(&path), path))
        .filter(|(chain, _)| chain.evaluate().is_ok())
        .map(|(chain, path)| {
            let plan = json(&["plan", path.to_str().unwrap(), "--format", "json"]);
            (path, chain, plan)
        })
        .collect()
}

/// P = V_CE·I_C + V_BE·I_B from the operating point `plan --format json` prints (a
/// JFET's: V_DS·I_D, its gate drawing no current).
fn power_from_plan(op: &Value) -> f64 {
    let f = |k: &str| op[k].as_f64().unwrap();
    if op.get("i_d").is_some() {
        return f("v_ds") * f("i_d");
    }
    f("v_ce") * f("i_c") + f("v_be") * f("i_b")
}

#[test]
fn dissipation_is_the_electric_power_of_plans_operating_point() {
    // Reference: the definition of electric power, P = V·I for each junction's
    // current (collector–emitter and base–emitter), on the operating point `plan`
    // reports; every demo chain, every stage with a transistor.
    let mut checked = 0;
    for (path, chain, plan) in planned_demos() {
        let (layout, row) = nominal(&chain, &["dissipation@x ..1W"]);
        for (i, stage) in plan["stages"].as_array().unwrap().iter().enumerate() {
            let Some(expected) = stage["dissipation"]["transistor"].as_f64() else {
                assert!(row[layout.dissipation(i)].is_nan());
                continue;
            };
            let p = power_from_plan(&stage["operating_point"]);
            assert!((p - expected).abs() <= 1e-12 * p.abs(), "{path:?} {i}");
            let x = row[layout.dissipation(i)];
            assert!(
                (x - p).abs() <= 1e-12 * p.abs(),
                "{path:?} stage {i}: {x} vs {p}"
            );
            checked += 1;
        }
    }
    assert!(checked >= 20, "{checked} stages checked");
}

#[test]
fn a_build_plan_shows_over_the_bound_misses_and_one_under_it_meets() {
    // Reference: `plan`'s dissipation of the chain as written, P from its operating
    // point (definition of electric power); a bound 1 % under P must miss, 1 % over
    // must hold.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let chain = chain_of(&path);
    let plan = json(&["plan", path.to_str().unwrap(), "--format", "json"]);
    for (i, stage) in plan["stages"].as_array().unwrap().iter().enumerate() {
        if stage["dissipation"]["transistor"].is_null() {
            continue;
        }
        let p = power_from_plan(&stage["operating_point"]);
        let id = stage["id"].as_str().unwrap();
        let under = format!("dissipation@{id} ..{}W", p * 0.99);
        let over = format!("dissipation@{id} ..{}W", p * 1.01);
        let (layout, row) = nominal(&chain, &[&under]);
        let r = Requirement::parse(&under, &chain, &layout).unwrap();
        assert!(!r.met(&layout, &row), "{under}");
        assert!(r.miss(&layout, &row) > 0.0);
        assert_eq!(r.column, layout.dissipation(i));
        let r = Requirement::parse(&over, &chain, &layout).unwrap();
        assert!(r.met(&layout, &row), "{over}");
    }
    // Through the command: a bound under the buffer's nominal dissipation by a
    // factor of three misses in every build (the tolerances move it by far less).
    let p = power_from_plan(&plan["stages"][0]["operating_point"]);
    let bound = format!("dissipation@buffer ..{}W", p / 3.0);
    let out = common::run(
        &[
            "spread",
            path.to_str().unwrap(),
            "--runs",
            "200",
            "--require",
            &bound,
        ],
        None,
    );
    assert_eq!(out.status.code(), Some(1));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("missed by 100.0 % of builds"), "{text}");
}

#[test]
fn warning_counts_agree_with_check_on_every_demo() {
    // Reference: `ampchain check --format json` on the same file (its warnings, at
    // the file's planned level), counted by kind.
    let reqs: Vec<String> = KINDS.iter().map(|k| format!("warnings@{k} ..0")).collect();
    let refs: Vec<&str> = reqs.iter().map(String::as_str).collect();
    let mut seen = 0;
    for path in common::demo_chains() {
        let chain = chain_of(&path);
        if chain.evaluate().is_err() {
            continue;
        }
        let check = json(&["check", path.to_str().unwrap(), "--format", "json"]);
        let (layout, row) = nominal(&chain, &refs);
        for (k, kind) in KINDS.iter().enumerate() {
            let expected = check["warnings"]
                .as_array()
                .unwrap()
                .iter()
                .filter(|w| w["kind"] == *kind)
                .count();
            assert_eq!(
                row[layout.warning_count(k)],
                expected as f64,
                "{path:?} {kind}"
            );
            let r = Requirement::parse(&reqs[k], &chain, &layout).unwrap();
            assert_eq!(r.met(&layout, &row), expected == 0, "{path:?} {kind}");
            seen += expected;
        }
    }
    assert!(seen > 0, "the demos give some warnings to compare");
}

#[test]
fn tune_keeps_dissipation_under_the_bound_as_plan_confirms() {
    // Reference: `plan` on the file `tune --write` wrote, its operating point's
    // V_CE·I_C + V_BE·I_B (definition of electric power), and `check`'s warnings.
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/badly-biased-line-stage.json");
    let dir = tempfile::tempdir().unwrap();
    let written = dir.path().join("tuned.json");
    let before = json(&["plan", chain.to_str().unwrap(), "--format", "json"]);
    let p_before = power_from_plan(&before["stages"][2]["operating_point"]);
    assert!(
        p_before > 15e-3,
        "as written the output stage dissipates {p_before} W"
    );
    common::run_ok(&[
        "tune",
        chain.to_str().unwrap(),
        "--vary",
        "out.*",
        "--keep",
        "dissipation@out ..15mW",
        "--keep",
        "warnings@soft_divider ..0",
        "--write",
        written.to_str().unwrap(),
    ]);
    let after = json(&["plan", written.to_str().unwrap(), "--format", "json"]);
    let p_after = power_from_plan(&after["stages"][2]["operating_point"]);
    assert!(p_after <= 15e-3, "{p_after} W");
    let check = json(&["check", written.to_str().unwrap(), "--format", "json"]);
    assert!(check["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .all(|w| w["kind"] != "soft_divider"));
}

#[test]
fn unknown_warning_kind_and_a_stage_without_a_transistor_are_refused() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/passive-controls.json");
    let chain = chain_of(&path);
    let (layout, _) = nominal(&chain, &["warnings@x ..0", "dissipation@x ..1W"]);
    let e = Requirement::parse("warnings@near_saturaton ..0", &chain, &layout).unwrap_err();
    assert!(e.contains("\"near_saturaton\""), "{e}");
    assert!(e.contains("\"near_saturation\""), "{e}");
    assert!(e.contains("\"slew_rate\""), "{e}");
    let passive = chain
        .stages
        .iter()
        .position(|s| s.device.is_none())
        .expect("the demo has a passive stage");
    let text = format!("dissipation@{} ..1W", chain.stages[passive].id);
    let e = Requirement::parse(&text, &chain, &layout).unwrap_err();
    assert!(e.contains("without a transistor"), "{e}");
    let e = Requirement::parse("warnings@near_saturation ..1.5", &chain, &layout).unwrap_err();
    assert!(e.contains("a count"), "{e}");
    let (layout, _) = nominal(&chain, &["resistor_power@x.y ..1W"]);
    let text = format!("resistor_power@{}.r_nothing ..1W", chain.stages[passive].id);
    let e = Requirement::parse(&text, &chain, &layout).unwrap_err();
    assert!(e.contains("no resistor \"r_nothing\""), "{e}");
}

#[test]
fn resistor_power_is_plans_and_ohms_law() {
    // References: Ohm's law and P = V²/R on gain1's collector resistor of the
    // hydrophone demo (8k2 from the 12 V supply to the collector `plan` reports), and
    // `plan`'s dissipation.resistors of every resistor of every demo stage.
    let mut checked = 0;
    for (path, chain, plan) in planned_demos() {
        let (layout, row) = nominal(&chain, &["resistor_power@x.y ..1W"]);
        for (i, stage) in plan["stages"].as_array().unwrap().iter().enumerate() {
            let id = stage["id"].as_str().unwrap();
            for (name, p) in stage["dissipation"]["resistors"].as_object().unwrap() {
                let p = p.as_f64().unwrap();
                let text = format!("resistor_power@{id}.{name} ..{}W", p * 1.01);
                let r = Requirement::parse(&text, &chain, &layout).unwrap();
                assert!(
                    (row[r.column] - p).abs() <= 1e-12 * p.abs(),
                    "{path:?} {text}"
                );
                assert!(r.met(&layout, &row), "{text}");
                if p > 0.0 {
                    let under = format!("resistor_power@{id}.{name} ..{}W", p * 0.99);
                    let r = Requirement::parse(&under, &chain, &layout).unwrap();
                    assert!(!r.met(&layout, &row), "{under}");
                }
                assert!(r.column >= layout.resistor_power(i, 0));
                checked += 1;
            }
        }
    }
    assert!(checked >= 50, "{checked} resistors checked");

    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let chain = chain_of(&path);
    let plan = json(&["plan", path.to_str().unwrap(), "--format", "json"]);
    let v_c = plan["stages"][1]["operating_point"]["v_c"]
        .as_f64()
        .unwrap();
    let ohm = (12.0 - v_c).powi(2) / 8200.0;
    let text = "resistor_power@gain1.r_collector ..1W";
    let (layout, row) = nominal(&chain, &[text]);
    let r = Requirement::parse(text, &chain, &layout).unwrap();
    assert!(
        (row[r.column] - ohm).abs() <= 1e-12 * ohm,
        "{} vs {ohm}",
        row[r.column]
    );
}
