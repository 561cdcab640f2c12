//! Every input the fuzzers (fuzz/, cargo-fuzz) found to crash, hang or panic, kept as
//! a regression test: each file in `tests/fuzz_regressions/` is run through the same
//! code as its fuzz target (`value-*`, `chain-*`, `plan-*`) and must now give the
//! answer listed in [`CASES`] (an error naming what is wrong, or a result), never a
//! panic. A new crasher goes into the folder and into the table.

use ampchain::report::{Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::units::{parse_level, parse_value, Kind, Level};
use ampchain::{Chain, Freq};
use std::path::Path;

/// What each target answers for an input, as text to check against [`CASES`].
fn value_target(text: &str) -> String {
    let mut answers = Vec::new();
    for kind in Kind::ALL {
        match parse_value(text, kind) {
            Ok(x) => {
                assert!(x.is_finite(), "{text:?} as {kind:?} gave {x}");
                answers.push(format!("{kind:?}: {x}"));
            }
            Err(e) => answers.push(format!("{kind:?}: {e}")),
        }
    }
    match parse_level(text) {
        Ok(level) => {
            assert!(level.vrms.is_finite() && level.vrms >= 0.0, "{level:?}");
            answers.push(format!("level: {} V rms", level.vrms));
        }
        Err(e) => answers.push(format!("level: {e}")),
    }
    answers.join("\n")
}

fn chain_target(text: &str) -> String {
    match Chain::from_json_str(text) {
        Ok(chain) => format!("valid chain of {} stages", chain.stages.len()),
        Err(e) => e.to_string(),
    }
}

fn plan_target(text: &str) -> String {
    let chain = match Chain::from_json_str(text) {
        Ok(c) => c,
        Err(e) => return e.to_string(),
    };
    let level = chain.source.level.unwrap_or(Level::from_vrms(0.01));
    let ev = match chain.evaluate() {
        Ok(ev) => ev,
        Err(e) => return e.to_string(),
    };
    let report = PlanReport::new(&chain, &ev, level);
    let mut out = Vec::new();
    TableExporter.export(&report, &mut out).expect("table");
    JsonExporter.export(&report, &mut out).expect("json");
    let _ = chain.evaluate_at(Freq::Hz(1e3));
    String::from_utf8(out).expect("UTF-8 report")
}

/// File → substrings its answer must contain.
const CASES: &[(&str, &[&str])] = &[
    // +55 million dBV overflowed to an infinite level.
    ("value-huge-dbv.txt", &["level: found \"55015001dbv\""]),
];

#[test]
fn every_fuzz_finding_is_answered() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz_regressions");
    let mut files: Vec<String> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    files.sort();
    let listed: Vec<&str> = CASES.iter().map(|(f, _)| *f).collect();
    assert_eq!(
        files, listed,
        "every file in tests/fuzz_regressions must be listed in CASES, in order"
    );
    for (file, wanted) in CASES {
        let bytes = std::fs::read(dir.join(file)).expect("readable");
        let text = String::from_utf8_lossy(&bytes);
        let answer = match file.split('-').next() {
            Some("value") => value_target(&text),
            Some("chain") => chain_target(&text),
            Some("plan") => plan_target(&text),
            other => panic!("{file}: unknown target {other:?}"),
        };
        for w in *wanted {
            assert!(answer.contains(w), "{file}: expected {w:?} in:\n{answer}");
        }
    }
}
