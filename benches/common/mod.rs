//! Chains shared by the benches and the tests: the demo files and long chains made by
//! repeating the four-stage demo's stages (`#[path]`-included, so no crate of its own).

// Each includer uses some of these.
#![allow(dead_code)]
use serde_json::{json, Value};

/// The four-stage demo (`chains/boost-pedal.json`) whose stages `repeated_chain` repeats.
pub const FOUR_STAGE: &str = "boost-pedal.json";

/// The text of demo chain `name` in `chains/`.
pub fn chain_text(name: &str) -> String {
    let path = format!("{}/chains/{name}", env!("CARGO_MANIFEST_DIR"));
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"))
}

/// A chain of `n` stages: the four-stage demo's stages repeated in order, each link
/// coupled as in the demo (the follower back into the next buffer through 1 µF).
pub fn repeated_chain(n: usize) -> String {
    repeated_stages(n, &["buffer", "gain1", "gain2", "output"])
}

/// A chain of `n` stages: the four-stage demo's stages named in `ids` repeated in that
/// order, each link coupled as in the demo where it has that link, else through 1 µF.
/// Its gain compounds as the pattern's does: 21 dB per four-stage pattern, so a chain
/// of `repeated_chain` beyond about 20 stages has levels no f64 Newton step resolves;
/// `["buffer"]` (emitter followers, -0.08 dB each) makes long chains that sweep.
pub fn repeated_stages(n: usize, ids: &[&str]) -> String {
    let demo: Value = serde_json::from_str(&chain_text(FOUR_STAGE)).expect("demo parses");
    let stages = demo["stages"].as_array().expect("stages");
    let pattern: Vec<Value> = ids
        .iter()
        .map(|id| {
            let s = stages.iter().find(|s| s["id"] == *id);
            s.unwrap_or_else(|| panic!("no stage {id} in the demo"))
                .clone()
        })
        .collect();
    let links = demo["links"].as_array().expect("links");
    let coupling_between = |from: &str, to: &str| -> Value {
        links
            .iter()
            .find(|l| l["from"] == from && l["to"] == to)
            .map(|l| l["coupling"].clone())
            .unwrap_or(json!("1u"))
    };
    let base_id = |k: usize| {
        pattern[k % pattern.len()]["id"]
            .as_str()
            .unwrap()
            .to_string()
    };
    let id = |k: usize| format!("{}_{k}", base_id(k));
    let mut stages = Vec::with_capacity(n);
    let mut new_links = vec![json!({ "from": "source", "to": id(0), "coupling": "100n" })];
    for k in 0..n {
        let mut s = pattern[k % pattern.len()].clone();
        s["id"] = json!(id(k));
        stages.push(s);
        if k + 1 < n {
            let c = coupling_between(&base_id(k), &base_id(k + 1));
            new_links.push(json!({ "from": id(k), "to": id(k + 1), "coupling": c }));
        }
    }
    new_links.push(json!({ "from": id(n - 1), "to": "amp", "coupling": "2u2" }));
    let mut chain = demo.clone();
    chain["title"] = json!(format!(
        "{n} stages: {} of the four-stage demo repeated",
        ids.join(", ")
    ));
    chain["stages"] = Value::Array(stages);
    chain["links"] = Value::Array(new_links);
    chain.to_string()
}
