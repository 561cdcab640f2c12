//! Bad chain files must be refused with exit status 2 and a message that names the file
//! and the field, stage or id that is wrong; never a panic, never output on stdout.
//!
//! Every file in `tests/malformed/` is the valid two-stage chain [`BASE`] (a common-emitter
//! gain stage direct-coupled into an emitter follower) with exactly one thing wrong. The
//! table [`CASES`] says, per file, which substrings the error must contain. They follow the
//! command-line contract: `error: <file>: <detail>`, where the detail names the JSON path
//! (`stages[1].r_emitter`) or the stage (`stage "gain"`), what was found and what was
//! expected. Only what a user needs is pinned down (path, id, quantity), not the wording.

mod common;
use common::run;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::Output;

/// The chain every malformed file starts from. It must be accepted (see
/// `the_base_chain_is_accepted`), so each file's error comes from its one change.
const BASE: &str = r#"{
  "title": "Two-stage test chain: gain stage into an emitter follower",
  "supply": "15 V",
  "temperature": "25 C",
  "devices": {
    "npn_small": { "polarity": "npn", "beta": 250, "saturation_current": "10f",
                   "early_voltage": "100 V", "vce_sat": "0.2 V" }
  },
  "source": { "resistance": "10k", "level": "50 mV rms" },
  "stages": [
    { "id": "gain", "type": "common_emitter", "device": "npn_small",
      "r_top": "150k", "r_bottom": "22k", "r_collector": "10k",
      "r_emitter": "220", "r_emitter_bypassed": "1k8", "c_bypass": "100u" },
    { "id": "buffer", "type": "emitter_follower", "device": "npn_small",
      "r_emitter": "4k7" }
  ],
  "loads": [ { "id": "out", "resistance": "20k" } ],
  "links": [
    { "from": "source", "to": "gain",   "coupling": "1u" },
    { "from": "gain",   "to": "buffer", "coupling": "direct" },
    { "from": "buffer", "to": "out",    "coupling": "10u" }
  ]
}
"#;

/// File → substrings that must all appear on stderr. An entry `"a|b"` is met by either
/// alternative (where the contract allows more than one way to name the culprit).
/// Stage 0 is "gain", stage 1 is "buffer"; links[3] is the link each graph case adds.
const CASES: &[(&str, &[&str])] = &[
    // `"r_top": "150k" "r_bottom"`: missing comma; the user needs the line.
    ("01-json-syntax.json", &["line 12"]),
    // A stray `}` after the closing brace, on line 24.
    ("02-trailing-garbage.json", &["line 24"]),
    // Optional key misspelt: must not silently fall back to the default 25 °C.
    ("03-unknown-top-level-key.json", &["temprature"]),
    ("04-unknown-stage-key.json", &["stages[0]", "r_colector"]),
    ("05-unknown-stage-type.json", &["stages[1]", "totem_pole"]),
    (
        "06-missing-r-collector.json",
        &["stage \"gain\"", "collector", "r_collector"],
    ),
    (
        "07-resistor-in-farads.json",
        &["stages[0].r_collector (stage \"gain\"): found", "10uF"],
    ),
    (
        "08-capacitor-in-ohms.json",
        &["stages[0].c_bypass (stage \"gain\"): found", "4k7 Ω"],
    ),
    (
        "09-negative-resistance.json",
        &["stages[1].r_emitter (stage \"buffer\"): found"],
    ),
    (
        "10-zero-r-collector.json",
        &["stages[0].r_collector (stage \"gain\"): found"],
    ),
    (
        "11-nan-value.json",
        &["stages[0].r_top (stage \"gain\"): found", "NaN"],
    ),
    (
        "12-unparseable-value.json",
        &["stages[0].r_bottom (stage \"gain\"): found", "ten k"],
    ),
    ("13-temperature-without-unit.json", &["temperature"]),
    ("14-negative-supply.json", &["supply"]),
    ("15-zero-beta.json", &["devices.npn_small.beta"]),
    // Quoted: the bare typo "npn_smal" is a substring of the real name.
    (
        "16-unknown-device.json",
        &["stages[1].device (stage \"buffer\"): found", "\"npn_smal\""],
    ),
    (
        "17-unknown-polarity.json",
        &[
            "devices.npn_small.polarity",
            "npm",
            "\"npn\", \"pnp\", \"n_jfet\", \"p_jfet\" or \"opamp\"",
        ],
    ),
    // A third stage reuses the id "buffer".
    ("18-duplicate-stage-id.json", &["\"buffer\"", "stages[2]"]),
    (
        "19-duplicate-device-name.json",
        &["devices", "\"npn_small\""],
    ),
    ("20-dangling-link.json", &["links[3]", "\"monitor\""]),
    ("21-self-link.json", &["links[3]", "\"buffer\""]),
    // buffer → gain closes a loop (and so also gives "gain" a second driver).
    ("22-cycle.json", &["\"gain\"", "\"buffer\""]),
    // source → buffer beside gain → buffer.
    ("23-fan-in.json", &["\"buffer\"", "links[3]|links[1]"]),
    // Stage "spare" drives load "aux" but nothing drives it.
    ("24-unreachable-stage.json", &["\"spare\""]),
    // Stage "spare" is driven by "gain" and drives nothing.
    ("25-stage-drives-nothing.json", &["\"spare\""]),
    ("26-load-drives.json", &["\"out\"", "links[3]|\"scope\""]),
    // gain → buffer through 1 µF, and the buffer has no r_top / r_bottom.
    (
        "27-no-dc-path-to-base.json",
        &["\"buffer\"|stages[1]", "r_top|r_bottom|bias|DC path"],
    ),
    (
        "28-bypassed-without-capacitor.json",
        &["stages[0]|\"gain\"", "c_bypass"],
    ),
    // r_collector 100k: I_C ≈ 0.6 mA would drop 60 V across it on a 15 V supply.
    ("29-saturated.json", &["\"gain\"", "V_CE"]),
    // 1M over 10k from 15 V puts 0.15 V on the base: no forward bias.
    ("30-cut-off.json", &["\"gain\"", "I_C|V_BE|cut"]),
    ("31-bad-source-level.json", &["source.level", "loud"]),
    ("32-misspelt-direct.json", &["links[1].coupling", "dirct"]),
    ("33-empty-stages.json", &["stages"]),
    // A feedback link must go back along the signal path: "gain" comes before "buffer".
    (
        "34-feedback-forward.json",
        &["links[3]", "\"gain\"", "\"buffer\""],
    ),
    ("35-feedback-without-into.json", &["links[3]", "into"]),
    // A stage's shape errors name the field inside the stage, the stage's id and the
    // line.
    (
        "36-stage-value-an-array.json",
        &["line 12", "stages[0].r_collector (stage \"gain\"): "],
    ),
    ("37-stage-id-a-number.json", &["line 14", "stages[1].id: "]),
    (
        "38-unknown-key-in-stage-tolerance.json",
        &["line 12", "stages[0].r_collector (stage \"gain\"): ", "`x`"],
    ),
    (
        "39-stage-type-a-number.json",
        &[
            "stages[1].type (stage \"buffer\"): ",
            "found the number 5",
            "\"emitter_follower\"",
        ],
    ),
    (
        "40-stage-a-string.json",
        &["stages[1]: ", "found the string \"buffer\"", "\"type\""],
    ),
    ("41-chain-an-array.json", &["found an array", "\"stages\""]),
    (
        "42-two-multipliers.json",
        &["stages[0].r_collector", "\"10k2k\"", "one multiplier"],
    ),
    // An entry written as an array (serde would read it by field order) is refused,
    // with the object it was meant as.
    (
        "43-load-an-array.json",
        &[
            "line 17",
            "loads[0]: ",
            "found an array",
            "{\"id\": \"out\", \"resistance\": \"20k\"}",
        ],
    ),
    (
        "44-stage-entry-an-array.json",
        &[
            "line 12",
            "stages[0].supply_filter (stage \"gain\"): ",
            "found an array",
            "{\"resistance\": \"1k\", \"capacitance\": \"100u\"}",
        ],
    ),
    // A distribution is a name, not an object naming it.
    (
        "45-distribution-an-object.json",
        &[
            "stages[0].r_collector.distribution (stage \"gain\"): ",
            "found an object",
            "\"uniform\", \"normal\"",
        ],
    ),
    // "4.7kR": a multiplier before R, IEC 60062's decimal point in ohms.
    (
        "46-multiplier-before-r.json",
        &[
            "stages[0].r_collector",
            "\"4.7kR\"",
            "\"4k7\"",
            "\"4.7 kΩ\"",
        ],
    ),
];

fn malformed_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/malformed")
}

/// Every way `out` falls short of a refusal of bad input: empty when it is one.
/// `needles` are the substrings of [`CASES`]; `file` is what must be named, if anything.
fn refusal_problems(out: &Output, file: Option<&str>, needles: &[&str]) -> Vec<String> {
    let stderr = String::from_utf8_lossy(&out.stderr);
    let mut problems = Vec::new();
    if out.status.code() != Some(2) {
        problems.push(format!("exit status {:?}, expected 2", out.status.code()));
    }
    if stderr.contains("panicked") {
        problems.push("stderr shows a panic".into());
    }
    if !out.stdout.is_empty() {
        problems.push(format!(
            "stdout not empty: {:?}",
            String::from_utf8_lossy(&out.stdout)
        ));
    }
    if !stderr.contains("error:") {
        problems.push("stderr lacks \"error:\"".into());
    }
    if let Some(file) = file {
        if !stderr.contains(file) {
            problems.push(format!("stderr does not name the file {file:?}"));
        }
    }
    for needle in needles {
        if !needle.split('|').any(|alt| stderr.contains(alt)) {
            problems.push(format!("stderr lacks {needle:?}"));
        }
    }
    if !problems.is_empty() {
        problems.push(format!("stderr was: {stderr:?}"));
    }
    problems
}

fn needles_for(name: &str) -> &'static [&'static str] {
    CASES
        .iter()
        .find(|(n, _)| *n == name)
        .unwrap_or_else(|| panic!("{name} is not in CASES"))
        .1
}

/// Check every named file with `ampchain <command> FILE`, and report all failures at once.
fn check_files(command: &str, names: &[&str]) {
    let mut failures = Vec::new();
    for name in names {
        let path = malformed_dir().join(name);
        let out = run(&[command, path.to_str().expect("UTF-8 path")], None);
        let problems = refusal_problems(&out, Some(name), needles_for(name));
        if !problems.is_empty() {
            failures.push(format!(
                "{command} {name}:\n    {}",
                problems.join("\n    ")
            ));
        }
    }
    assert!(
        failures.is_empty(),
        "{} of {} files not refused as expected:\n{}",
        failures.len(),
        names.len(),
        failures.join("\n")
    );
}

#[test]
fn table_and_directory_agree() {
    let on_disk: BTreeSet<String> = std::fs::read_dir(malformed_dir())
        .expect("tests/malformed exists")
        .map(|e| {
            e.expect("readable entry")
                .file_name()
                .into_string()
                .unwrap()
        })
        .filter(|n| n.ends_with(".json"))
        .collect();
    let in_table: BTreeSet<String> = CASES.iter().map(|(n, _)| n.to_string()).collect();
    assert_eq!(in_table.len(), CASES.len(), "a file is listed twice");
    assert_eq!(on_disk, in_table, "every file needs its expectations");
    assert!(CASES.len() >= 24);
    for (name, needles) in CASES {
        assert!(!needles.is_empty(), "{name}: no expectations");
    }
}

#[test]
fn the_base_chain_is_accepted() {
    let out = run(&["plan", "-"], Some(BASE.as_bytes()));
    assert_eq!(
        out.status.code(),
        Some(0),
        "stderr: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    let out = run(&["check", "-"], Some(BASE.as_bytes()));
    assert_eq!(
        out.status.code(),
        Some(0),
        "stderr: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn plan_refuses_every_malformed_file() {
    let names: Vec<&str> = CASES.iter().map(|(n, _)| *n).collect();
    check_files("plan", &names);
}

#[test]
fn check_refuses_malformed_files() {
    // One from each layer: syntax, shape, value, graph, DC operating point.
    check_files(
        "check",
        &[
            "01-json-syntax.json",
            "04-unknown-stage-key.json",
            "07-resistor-in-farads.json",
            "22-cycle.json",
            "29-saturated.json",
        ],
    );
}

#[test]
fn malformed_chains_on_stdin_are_refused() {
    let mut failures = Vec::new();
    for name in [
        "02-trailing-garbage.json",
        "12-unparseable-value.json",
        "20-dangling-link.json",
        "30-cut-off.json",
    ] {
        let text = std::fs::read(malformed_dir().join(name)).expect("readable file");
        for command in ["plan", "check"] {
            let out = run(&[command, "-"], Some(&text));
            let problems = refusal_problems(&out, None, needles_for(name));
            if !problems.is_empty() {
                failures.push(format!(
                    "{command} - < {name}:\n    {}",
                    problems.join("\n    ")
                ));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn shape_errors_speak_of_the_file_not_of_rust_types() {
    // Whatever JSON value stands where the chain or a stage belongs, the message says
    // what was found and what belongs there, never a Rust type such as
    // "struct ChainSpec" or "internally tagged enum StageSpec".
    let stage = r#"{ "id": "buffer", "type": "emitter_follower", "device": "npn_small",
      "r_emitter": "4k7" }"#;
    assert!(BASE.contains(stage));
    let mut texts: Vec<String> = ["[]", "null", "\"x\"", "true", "5", "[1, 2]"]
        .iter()
        .map(|t| t.to_string())
        .collect();
    for value in ["\"buffer\"", "[]", "null", "7", "false", "{}"] {
        texts.push(BASE.replace(stage, value));
    }
    texts.push(BASE.replace("\"type\": \"emitter_follower\"", "\"type\": null"));
    texts.push(BASE.replace("\"type\": \"emitter_follower\"", "\"type\": [\"x\"]"));
    // Every other entry (a device, the source, a load, a link) given as no object.
    let mut chain: serde_json::Value = serde_json::from_str(BASE).unwrap();
    let device = common::first_device(&chain);
    for (pointer, value) in [
        (format!("/devices/{device}"), serde_json::json!("npn")),
        ("/source".to_string(), serde_json::json!(5)),
        ("/loads/0".to_string(), serde_json::json!([])),
        ("/links/0".to_string(), serde_json::json!(null)),
    ] {
        let old = chain.pointer(&pointer).unwrap().clone();
        *chain.pointer_mut(&pointer).unwrap() = value;
        texts.push(chain.to_string());
        *chain.pointer_mut(&pointer).unwrap() = old;
    }
    let mut failures = Vec::new();
    for text in &texts {
        let out = run(&["plan", "-"], Some(text.as_bytes()));
        let err = String::from_utf8_lossy(&out.stderr);
        let mut problems = refusal_problems(&out, None, &["found ", "expected "]);
        for rust in [
            "struct",
            "enum",
            "Spec",
            "variant identifier",
            "invalid length",
        ] {
            if err.contains(rust) {
                problems.push(format!("names {rust:?}: {err:?}"));
            }
        }
        if !problems.is_empty() {
            failures.push(format!("{text:.60}…: {}", problems.join("; ")));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn an_entry_written_as_an_array_is_refused_at_every_place() {
    // serde's derive reads a struct from an array too, by field order; the chain file
    // has objects only. Each entry that is an object, written as the array serde would
    // have read, is refused with its path and the object it was meant as.
    use serde_json::json;
    // What the case is, the edit, the path and the object the message shows.
    type Case = (
        &'static str,
        fn(&mut serde_json::Value),
        &'static str,
        &'static str,
    );
    let cases: [Case; 8] = [
        (
            "a device",
            |c| c["devices"]["npn_small"] = json!(["npn", 250]),
            "devices.npn_small: ",
            "{\"polarity\": \"npn\", \"beta\": 250}",
        ),
        (
            "the source",
            |c| c["source"] = json!(["10k", "50 mV rms"]),
            "source: ",
            "{\"resistance\": \"10k\", \"level\": \"50 mV rms\"}",
        ),
        (
            "a load",
            |c| c["loads"][0] = json!(["out", "20k"]),
            "loads[0]: ",
            "{\"id\": \"out\", \"resistance\": \"20k\"}",
        ),
        (
            "a link",
            |c| c["links"][0] = json!(["source", "gain", "1u"]),
            "links[0]: ",
            "{\"from\": \"source\", \"to\": \"gain\", \"coupling\": \"1u\"}",
        ),
        (
            "the default tolerances",
            |c| c["tolerance"] = json!(["5%", "20%"]),
            "tolerance: ",
            "{\"resistors\": \"5%\", \"capacitors\": \"20%\"}",
        ),
        (
            "a stage's rails",
            |c| c["stages"][1]["rails"] = json!(["supply"]),
            "stages[1].rails (stage \"buffer\"): ",
            "{\"top\": \"supply\"}",
        ),
        (
            "a stage's supply filter",
            |c| c["stages"][0]["supply_filter"] = json!([]),
            "stages[0].supply_filter (stage \"gain\"): ",
            "{\"resistance\": …, \"capacitance\": …}",
        ),
        (
            "a stage",
            |c| c["stages"][1] = json!(["buffer", "emitter_follower"]),
            "stages[1]: ",
            "a stage object",
        ),
    ];
    let base: serde_json::Value = serde_json::from_str(BASE).unwrap();
    assert!(base["devices"].get("npn_small").is_some());
    let mut failures = Vec::new();
    for (what, edit, path, object) in cases {
        let mut chain = base.clone();
        edit(&mut chain);
        let out = run(&["plan", "-"], Some(chain.to_string().as_bytes()));
        let needles = [path, "found an array, expected ", object];
        let problems = refusal_problems(&out, None, &needles);
        if !problems.is_empty() {
            failures.push(format!("{what}: {}", problems.join("; ")));
        }
    }
    // Values, named maps and the chain itself never took arrays; still refused.
    for (what, edit) in [
        (
            "a value",
            (|c| c["supply"] = json!(["15 V"])) as fn(&mut serde_json::Value),
        ),
        ("a spread", |c| {
            c["stages"][0]["r_top"] = json!(["150k", "5%"])
        }),
        ("the rails by name", |c| {
            c.as_object_mut().unwrap().remove("supply");
            c["supplies"] = json!([["vcc", "15 V"]]);
        }),
        ("a distribution", |c| {
            c["tolerance"] = json!({ "resistors": "5%", "distribution": ["normal"] })
        }),
    ] {
        let mut chain = base.clone();
        edit(&mut chain);
        let out = run(&["plan", "-"], Some(chain.to_string().as_bytes()));
        let problems = refusal_problems(&out, None, &["found an array|invalid type: sequence"]);
        if !problems.is_empty() {
            failures.push(format!("{what}: {}", problems.join("; ")));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn a_distribution_is_a_name_only() {
    // serde's derive reads a unit enum from {"normal": null} as well; the chain file
    // names it as a string only (the schema's enum of strings).
    let text = BASE.replace(
        "\"temperature\": \"25 C\",",
        "\"temperature\": \"25 C\", \"tolerance\": { \"resistors\": \"5%\", \"distribution\": DIST },",
    );
    let out = run(
        &["plan", "-"],
        Some(text.replace("DIST", "{ \"normal\": null }").as_bytes()),
    );
    let problems = refusal_problems(
        &out,
        None,
        &[
            "tolerance.distribution: ",
            "found an object, expected one of \"uniform\", \"normal\"",
        ],
    );
    assert!(problems.is_empty(), "{}", problems.join("\n"));
    let out = run(
        &["plan", "-"],
        Some(text.replace("DIST", "\"normal\"").as_bytes()),
    );
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn a_missing_file_is_named() {
    let path = malformed_dir().join("no-such-chain.json");
    let path = path.to_str().expect("UTF-8 path");
    for command in ["plan", "check"] {
        let out = run(&[command, path], None);
        let problems = refusal_problems(&out, Some(path), &[]);
        assert!(problems.is_empty(), "{command}: {}", problems.join("\n"));
    }
}
