//! docs/errors.md, the catalogue of every error a user can meet, is checked here: each
//! entry's example is reproduced by running the binary, and its exit status and message
//! must be exactly what the catalogue shows. An entry without a recipe below, or a
//! recipe without an entry, fails the test, so the catalogue and the program cannot
//! drift apart.
//!
//! Each recipe edits the fixture chain `tests/fixtures/ce_ef_pair.json` (a valid
//! common-emitter stage direct-coupled into an emitter follower), writes it as
//! `chain.json` into a fresh folder and runs `ampchain plan chain.json` there (plus
//! any extra arguments), so messages name `chain.json`.
//!
//! `AMPCHAIN_PRINT_CATALOGUE=1 cargo test --test error_catalogue -- --nocapture`
//! prints what every recipe gives, to write new entries from.

mod common;

use serde_json::{json, Value};
use std::path::Path;
use std::process::{Command, Output, Stdio};

/// How to produce one catalogue entry.
enum Recipe {
    /// Replace each `(from, to)` in the fixture (each `from` must occur), then plan
    /// with the extra arguments.
    Edit(
        &'static [(&'static str, &'static str)],
        &'static [&'static str],
    ),
    /// Change the fixture as JSON, then plan with the extra arguments.
    Json(fn(&mut Value), &'static [&'static str]),
    /// Plan a file that does not exist.
    Missing,
    /// Plan a file one byte over the size limit.
    TooLarge,
    /// A list in the file one entry over its limit (`"stages"`, `"loads"`, `"devices"`).
    TooMany(&'static str),
    /// Plan the fixture with standard output on a full device.
    FullOutput,
    /// Write the fixture as `chain.json`, then run this `sh` line in the folder with
    /// `$AMPCHAIN` naming the binary (for FIFOs, closed descriptors, other commands).
    Shell(&'static str),
    /// Change the fixture as JSON, then run these arguments (the command first) on
    /// `chain.json`.
    JsonRun(fn(&mut Value), &'static [&'static str]),
    /// Covered elsewhere (a unit test, or not reachable from a chain file); the
    /// reason is shown when printing.
    Elsewhere(&'static str),
}

use Recipe::*;

/// The fixture with its first stage a self-biased common-source stage on the n-JFET
/// `j` (the follower after it keeps its bipolar device).
fn jfet_amp(c: &mut Value) {
    c["devices"]["j"] =
        json!({ "polarity": "n_jfet", "i_dss": "6 mA", "pinch_off_voltage": "-2 V" });
    c["stages"][0] = json!({ "id": "amp", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "4k7", "r_source": "680" });
}

/// [`jfet_amp`] without its source resistor: a JFET stage `bias` has nothing to move.
fn jfet_bare_amp(c: &mut Value) {
    jfet_amp(c);
    c["stages"][0]
        .as_object_mut()
        .expect("stage")
        .remove("r_source");
}

/// A cascode: the gain stage without its collector resistor, direct-coupled into the
/// emitter of a common-base stage `upper` (in place of the follower).
fn cascode(c: &mut Value) {
    c["stages"][0]
        .as_object_mut()
        .expect("stage")
        .remove("r_collector");
    c["stages"][1] = json!({ "id": "upper", "type": "common_base", "device": "q_pair",
        "r_top": "39k", "r_bottom": "47k", "c_base": "47u", "r_collector": "3k9" });
    c["links"][1]["to"] = json!("upper");
    c["links"][2]["from"] = json!("upper");
}

/// The follower replaced by an op-amp line driver on split rails ±15 V.
fn opamp_line(c: &mut Value) {
    c.as_object_mut().expect("chain").remove("supply");
    c["supplies"] = json!({ "vcc": "15 V", "vee": "-15 V" });
    c["devices"]["u"] = json!({ "polarity": "opamp", "open_loop_gain": "100 dB",
        "gain_bandwidth": "3 MHz" });
    c["stages"][1] = json!({ "id": "follow", "type": "opamp_noninverting", "device": "u",
        "r_feedback": "10k", "r_ground": "10k", "r_bias": "100k",
        "rails": { "top": "vcc", "bottom": "vee" } });
    c["links"][1]["coupling"] = json!("1u");
}

/// Both stages replaced by passive ones (a pad, then a low-pass filter): a chain with
/// no transistor or op-amp.
fn passive_only(c: &mut Value) {
    c["version"] = json!(2);
    c["stages"] = json!([
        { "id": "amp", "type": "attenuator", "r_series": "10k", "r_shunt": "1k" },
        { "id": "follow", "type": "low_pass", "resistance": "1k", "capacitance": "10n" }
    ]);
}

const RECIPES: &[(&str, Recipe)] = &[
    // Reading the file
    ("cannot-read", Missing),
    ("file-too-large", TooLarge),
    // JSON shape
    (
        "json-syntax",
        Edit(&[("\"supply\": \"15 V\",", "\"supply\": \"15 V\"")], &[]),
    ),
    ("text-after-chain", Edit(&[("\n}\n", "\n}\n}\n")], &[])),
    (
        "unterminated-comment",
        Edit(&[("\"temperature\": \"35 C\",", "\"temperature\": \"35 C\", /* open")], &[]),
    ),
    ("unknown-key", Edit(&[("\"temperature\"", "\"temprature\"")], &[])),
    (
        "missing-key",
        Edit(
            &[(
                "\"device\": \"q_pair\",\n      \"r_emitter\": \"3k3\"",
                "\"device\": \"q_pair\"",
            )],
            &[],
        ),
    ),
    (
        "wrong-type",
        Edit(&[("\"beta\": 150", "\"beta\": [150]")], &[]),
    ),
    ("not-a-chain-object", Json(|c| *c = json!([]), &[])),
    (
        "not-an-object",
        Edit(
            &[(
                "{ \"id\": \"line\", \"resistance\": \"2k2\" }",
                "[ \"line\", \"2k2\" ]",
            )],
            &[],
        ),
    ),
    (
        "not-a-name",
        Edit(
            &[(
                "\"r_collector\": \"8k2\"",
                "\"r_collector\": { \"value\": \"8k2\", \"tolerance\": \"5%\", \"distribution\": { \"normal\": null } }",
            )],
            &[],
        ),
    ),
    (
        "not-a-stage-object",
        Json(|c| c["stages"][1] = json!("follow"), &[]),
    ),
    (
        "stage-type-not-a-name",
        Edit(&[("\"emitter_follower\"", "5")], &[]),
    ),
    (
        "unknown-stage-type",
        Edit(&[("\"emitter_follower\"", "\"totem_pole\"")], &[]),
    ),
    (
        "duplicate-device-name",
        Edit(
            &[(
                "\"q_pair\": {",
                "\"q_pair\": { \"polarity\": \"npn\", \"beta\": 99 }, \"q_pair\": {",
            )],
            &[],
        ),
    ),
    // Values
    (
        "unparseable-value",
        Edit(&[("\"r_bottom\": \"20k\"", "\"r_bottom\": \"twenty k\"")], &[]),
    ),
    (
        "two-multipliers",
        Edit(&[("\"r_collector\": \"8k2\"", "\"r_collector\": \"8k2k\"")], &[]),
    ),
    (
        "multiplier-and-r",
        Edit(&[("\"r_collector\": \"8k2\"", "\"r_collector\": \"8.2kR\"")], &[]),
    ),
    (
        "wrong-unit",
        Edit(&[("\"r_collector\": \"8k2\"", "\"r_collector\": \"10uF\"")], &[]),
    ),
    (
        "not-finite",
        Edit(&[("\"r_top\": \"120k\"", "\"r_top\": \"1e400\"")], &[]),
    ),
    (
        "not-positive",
        Edit(&[("\"r_emitter\": \"3k3\"", "\"r_emitter\": \"-3.3k\"")], &[]),
    ),
    (
        "temperature-without-unit",
        Edit(&[("\"35 C\"", "\"35\"")], &[]),
    ),
    (
        "temperature-plain-number",
        Edit(&[("\"35 C\"", "35")], &[]),
    ),
    (
        "beta-not-a-number",
        Edit(&[("\"beta\": 150", "\"beta\": \"lots\"")], &[]),
    ),
    (
        "unknown-polarity",
        Edit(&[("\"polarity\": \"npn\"", "\"polarity\": \"nqn\"")], &[]),
    ),
    // JFET devices and stages
    ("jfet-pinch-off-sign", Json(|c| { jfet_amp(c); c["devices"]["j"]["pinch_off_voltage"] = json!("2 V") }, &[])),
    ("jfet-i-dss-not-positive", Json(|c| { jfet_amp(c); c["devices"]["j"]["i_dss"] = json!("0 mA") }, &[])),
    ("jfet-missing-value", Json(|c| { jfet_amp(c); c["devices"]["j"].as_object_mut().expect("device").remove("i_dss"); }, &[])),
    ("opamp-missing-value", Json(|c| { opamp_line(c); c["devices"]["u"].as_object_mut().expect("device").remove("gain_bandwidth"); }, &[])),
    ("opamp-gain-not-positive", Json(|c| { opamp_line(c); c["devices"]["u"]["open_loop_gain"] = json!(0) }, &[])),
    ("open-loop-gain-out-of-range", Json(|c| { opamp_line(c); c["devices"]["u"]["open_loop_gain"] = json!("-6 dB") }, &[])),
    ("gain-bandwidth-out-of-range", Json(|c| { opamp_line(c); c["devices"]["u"]["gain_bandwidth"] = json!("10 Hz") }, &[])),
    ("swing-margin-out-of-range", Json(|c| { opamp_line(c); c["devices"]["u"]["swing_margin"] = json!("200 V") }, &[])),
    ("unparseable-gain", Json(|c| { opamp_line(c); c["devices"]["u"]["open_loop_gain"] = json!("high") }, &[])),
    ("opamp-reference", Json(|c| { opamp_line(c); c["stages"][1]["reference"] = json!("vdd") }, &[])),
    ("opamp-reference-unreachable", Json(|c| { opamp_line(c); c["stages"][1]["reference"] = json!("vcc") }, &[])),
    ("opamp-no-dc-path", Json(|c| { opamp_line(c); c["stages"][1].as_object_mut().expect("stage").remove("r_bias"); }, &[])),
    (
        "opamp-output-out-of-reach",
        Json(
            |c| {
                // The source direct into an inverting stage whose + sits at 5 V: the
                // output rests at 5 V times the noise gain, beyond the 15 V rail.
                c["devices"]["u"] = json!({ "polarity": "opamp", "open_loop_gain": "100 dB",
                    "gain_bandwidth": "3 MHz" });
                c["stages"] = json!([{ "id": "amp", "type": "opamp_inverting", "device": "u",
                    "r_input": "10k", "r_feedback": "47k", "reference": "5 V" }]);
                c["links"] = json!([{ "from": "source", "to": "amp", "coupling": "direct" },
                    { "from": "amp", "to": "line", "coupling": "10u" }]);
            },
            &[],
        ),
    ),
    (
        "opamp-output-current-limited",
        Json(
            |c| {
                // The pin rests at its 5 V reference with the 2k2 load direct on it:
                // 2.3 mA at DC, beyond a 1 mA output current limit.
                opamp_line(c);
                c["devices"]["u"]["output_current_limit"] = json!("1 mA");
                c["stages"][1]["reference"] = json!("5 V");
                c["links"][2]["coupling"] = json!("direct");
            },
            &[],
        ),
    ),
    ("bias-opamp", JsonRun(opamp_line, &["bias", "chain.json", "--stage", "follow"])),
    ("optimum-opamp", JsonRun(opamp_line, &["noise", "chain.json", "--optimum", "follow"])),
    ("missing-beta", Json(|c| { c["devices"]["q_pair"].as_object_mut().expect("device").remove("beta"); }, &[])),
    ("key-of-other-device-kind", Json(|c| { jfet_amp(c); c["devices"]["j"]["beta"] = json!(100) }, &[])),
    ("stage-device-kind-mismatch", Json(|c| { jfet_amp(c); c["stages"][1]["device"] = json!("j") }, &[])),
    ("i-dss-out-of-range", Json(|c| { jfet_amp(c); c["devices"]["j"]["i_dss"] = json!("100 A") }, &[])),
    ("pinch-off-out-of-range", Json(|c| { jfet_amp(c); c["devices"]["j"]["pinch_off_voltage"] = json!("-1 mV") }, &[])),
    (
        "jfet-starved",
        Json(
            |c| {
                // 100 GΩ in the drain: 15 V pass at most 150 pA.
                jfet_amp(c);
                c["devices"]["j"]["early_voltage"] = json!("100 V");
                c["stages"][0]["r_drain"] = json!("100G");
            },
            &[],
        ),
    ),
    (
        "pinched-off",
        Json(
            |c| {
                // The follower's source returns to a 12 V rail above its gate.
                c["devices"]["j"] = json!({ "polarity": "n_jfet", "i_dss": "6 mA", "pinch_off_voltage": "-2 V" });
                c.as_object_mut().expect("chain").remove("supply");
                c["supplies"] = json!({ "vcc": "15 V", "mid": "12 V" });
                c["stages"][1] = json!({ "id": "follow", "type": "source_follower", "device": "j",
                    "r_source": "3k3", "rails": { "top": "vcc", "bottom": "mid" } });
            },
            &[],
        ),
    ),
    ("ohmic", Json(|c| { jfet_amp(c); c["stages"][0]["r_drain"] = json!("47k") }, &[])),
    ("bias-jfet", JsonRun(jfet_bare_amp, &["bias", "chain.json", "--stage", "amp"])),
    (
        "bias-cascode-lower",
        JsonRun(cascode, &["bias", "chain.json", "--stage", "amp"]),
    ),
    (
        "bias-unreachable",
        Shell("\"$AMPCHAIN\" bias chain.json --stage amp --target ic=100mA"),
    ),
    (
        "bias-in-loop",
        JsonRun(
            |c| add_feedback(c, "follow", "amp", "emitter"),
            &["bias", "chain.json", "--stage", "amp"],
        ),
    ),
    (
        "negative-base-resistance",
        Json(
            |c| c["devices"]["q_pair"]["base_resistance"] = json!("-47"),
            &[],
        ),
    ),
    ("unknown-version", Json(|c| c["version"] = json!(3), &[])),
    (
        "no-emitter-path",
        Json(
            |c| {
                c["stages"][1] = json!({"id": "follow", "type": "common_base",
                    "device": "q_pair", "r_top": "100k", "r_bottom": "47k",
                    "c_base": "10u", "r_collector": "3k3"});
                c["links"][1]["coupling"] = json!("1u");
            },
            &[],
        ),
    ),
    (
        "no-collector-path",
        Edit(&[("\"r_collector\": \"8k2\",", "")], &[]),
    ),
    (
        "supply-and-supplies",
        Json(|c| c["supplies"] = json!({"vcc": "15 V"}), &[]),
    ),
    (
        "no-supply",
        Json(
            |c| {
                c.as_object_mut().unwrap().remove("supply");
            },
            &[],
        ),
    ),
    (
        "rail-voltage-out-of-range",
        Json(
            |c| {
                c.as_object_mut().unwrap().remove("supply");
                c["supplies"] = json!({"vcc": "15 V", "vee": "0 V"});
            },
            &[],
        ),
    ),
    (
        "unknown-rail",
        Json(
            |c| {
                c.as_object_mut().unwrap().remove("supply");
                c["supplies"] = json!({"vcc": "15 V", "vee": "-15 V"});
                c["stages"][0]["rails"] = json!({"bottom": "vne"});
            },
            &[],
        ),
    ),
    (
        "rails-reversed",
        Json(
            |c| {
                c.as_object_mut().unwrap().remove("supply");
                c["supplies"] = json!({"vcc": "15 V", "vee": "-15 V"});
                c["stages"][0]["rails"] = json!({"top": "vee", "bottom": "ground"});
            },
            &[],
        ),
    ),
    (
        "unknown-device",
        Edit(
            &[("\"device\": \"q_pair\",\n      \"r_emitter\"", "\"device\": \"q_par\",\n      \"r_emitter\"")],
            &[],
        ),
    ),
    (
        "bypass-without-capacitor",
        Edit(&[(", \"c_bypass\": \"100u\"", "")], &[]),
    ),
    (
        "capacitor-without-bypassed-resistor",
        Edit(&[("\"r_emitter_bypassed\": \"1k5\", ", "")], &[]),
    ),
    (
        "bad-level",
        Edit(&[("\"-30 dBu\"", "\"loud\"")], &[]),
    ),
    (
        "bad-coupling",
        Edit(&[("\"coupling\": \"direct\"", "\"coupling\": \"drect\"")], &[]),
    ),
    (
        "range-out-of-order",
        Json(
            |c| c["temperature"] = json!({ "min": "0 C", "typical": "-100 C", "max": "40 C" }),
            &[],
        ),
    ),
    // Limits (src/limits.rs)
    ("too-many-stages", TooMany("stages")),
    ("too-many-loads", TooMany("loads")),
    ("too-many-devices", TooMany("devices")),
    ("too-many-links", TooMany("links")),
    (
        "resistance-out-of-range",
        Edit(&[("\"r_collector\": \"8k2\"", "\"r_collector\": \"1T\"")], &[]),
    ),
    (
        "capacitance-out-of-range",
        Edit(&[("\"coupling\": \"2u2\"", "\"coupling\": \"100 F\"")], &[]),
    ),
    (
        "supply-out-of-range",
        Edit(&[("\"15 V\"", "\"20 kV\"")], &[]),
    ),
    (
        "beta-out-of-range",
        Edit(&[("\"beta\": 150", "\"beta\": 1e7")], &[]),
    ),
    (
        "beta-reverse-out-of-range",
        Edit(&[("\"beta\": 150", "\"beta\": 150, \"beta_reverse\": 1e9")], &[]),
    ),
    (
        "saturation-current-out-of-range",
        Edit(&[("\"5f\"", "\"1 mA\"")], &[]),
    ),
    (
        "early-voltage-out-of-range",
        Edit(&[("\"5f\"", "\"5f\", \"early_voltage\": \"0.1 V\"")], &[]),
    ),
    (
        "vce-sat-out-of-range",
        Edit(&[("\"5f\"", "\"5f\", \"vce_sat\": \"20 V\"")], &[]),
    ),
    (
        "power-out-of-range",
        Edit(&[("\"5f\"", "\"5f\", \"max_dissipation\": \"1 MW\"")], &[]),
    ),
    (
        "temperature-out-of-range",
        Edit(&[("\"35 C\"", "\"500 C\"")], &[]),
    ),
    (
        "level-out-of-range",
        Edit(&[("\"-30 dBu\"", "\"2 kV rms\"")], &[]),
    ),
    ("level-zero", Edit(&[("\"-30 dBu\"", "\"0 V\"")], &[])),
    (
        "transition-frequency-out-of-range",
        Edit(&[("\"5f\"", "\"5f\", \"transition_frequency\": \"1 Hz\"")], &[]),
    ),
    (
        "flicker-corner-out-of-range",
        Edit(&[("\"5f\"", "\"5f\", \"flicker_corner\": \"10 MHz\"")], &[]),
    ),
    // The graph of stages, loads and links
    ("no-stages", Json(|c| c["stages"] = json!([]), &[])),
    ("duplicate-id", Json(|c| c["loads"][0]["id"] = json!("amp"), &[])),
    ("reserved-id", Json(|c| c["loads"][0]["id"] = json!("source"), &[])),
    ("empty-name", Json(|c| c["loads"][0]["id"] = json!(""), &[])),
    (
        "control-character-in-name",
        Json(|c| c["stages"][1]["id"] = json!("follow\nerror: fake"), &[]),
    ),
    (
        "lookalike-name",
        Json(|c| c["links"][2]["to"] = json!("l\u{456}ne"), &[]),
    ),
    ("unknown-id", Json(|c| c["links"][2]["to"] = json!("lnie"), &[])),
    ("self-link", Json(|c| c["links"][2]["to"] = json!("follow"), &[])),
    ("link-into-source", Json(|c| c["links"][2]["to"] = json!("source"), &[])),
    ("link-from-load", Json(|c| add_link(c, "line", "amp", "1u"), &[])),
    ("fan-in", Json(|c| add_link(c, "source", "follow", "1u"), &[])),
    (
        "cycle",
        Json(
            |c| {
                // follow → amp closes a loop; the source drives a second load instead.
                c["links"][0]["to"] = json!("line2");
                add_load(c, "line2");
                add_link(c, "follow", "amp", "1u");
            },
            &[],
        ),
    ),
    (
        "unreachable",
        Json(
            |c| {
                c["links"][0]["to"] = json!("line2");
                add_load(c, "line2");
            },
            &[],
        ),
    ),
    (
        "drives-nothing",
        Json(|c| c["links"][2]["from"] = json!("amp"), &[]),
    ),
    (
        "no-dc-path-to-base",
        Json(|c| c["links"][1]["coupling"] = json!("1u"), &[]),
    ),
    // Feedback links: "follow" back to "amp" closes a valid loop; each recipe breaks it once.
    (
        "feedback-key-on-forward-link",
        Json(|c| c["links"][0]["resistance"] = json!("1k"), &[]),
    ),
    (
        "feedback-missing-key",
        Json(
            |c| {
                add_feedback(c, "follow", "amp", "emitter");
                c["links"][3].as_object_mut().expect("link").remove("resistance");
            },
            &[],
        ),
    ),
    (
        "feedback-end",
        Json(|c| add_feedback(c, "amp", "line", "input"), &[]),
    ),
    (
        "loop-no-solution",
        Json(
            |c| {
                // 100 Ω from the follower back into the emitter, closed at DC: the
                // feedback adds to the bias.
                add_feedback(c, "follow", "amp", "emitter");
                c["links"][3]["resistance"] = json!("100");
                c["links"][3].as_object_mut().expect("link").remove("capacitance");
            },
            &[],
        ),
    ),
    (
        "feedback-not-backward",
        Json(|c| add_feedback(c, "amp", "follow", "input"), &[]),
    ),
    (
        "feedback-no-emitter",
        Json(
            |c| {
                // A potentiometer between the source and "amp": the loop returns into it.
                c["stages"]
                    .as_array_mut()
                    .expect("stages")
                    .push(json!({ "id": "level", "type": "potentiometer", "resistance": "10k", "position": 0.5 }));
                c["links"][0]["to"] = json!("level");
                add_link(c, "level", "amp", "1u");
                add_feedback(c, "follow", "level", "emitter");
            },
            &[],
        ),
    ),
    (
        "feedback-overlap",
        Json(
            |c| {
                add_feedback(c, "follow", "amp", "emitter");
                add_feedback(c, "follow", "amp", "input");
            },
            &[],
        ),
    ),
    ("source-drives-nothing", Elsewhere("every valid graph has a stage, and a stage is reached only from the source; the check is a guard in src/graph.rs")),
    // The DC operating point
    (
        "saturated",
        Edit(&[("\"r_collector\": \"8k2\"", "\"r_collector\": \"100k\"")], &[]),
    ),
    (
        "inside-collector-resistance",
        Edit(
            &[(
                "\"saturation_current\": \"5f\" }",
                "\"saturation_current\": \"5f\", \"collector_resistance\": \"100M\" }",
            )],
            &[],
        ),
    ),
    (
        "cut-off",
        Edit(&[("\"r_top\": \"120k\"", "\"r_top\": \"2M\"")], &[]),
    ),
    (
        "unlimited",
        Json(
            |c| {
                // Base on the supply through 1 mΩ, emitter straight to ground.
                let amp = c["stages"][0].as_object_mut().expect("stage");
                for key in ["r_bottom", "r_emitter", "r_emitter_bypassed", "c_bypass"] {
                    amp.remove(key);
                }
                amp.insert("r_top".into(), json!(0.001));
            },
            &[],
        ),
    ),
    (
        "milliohm-hint",
        Edit(&[("\"r_top\": \"120k\"", "\"r_top\": \"1m\"")], &[]),
    ),
    ("no-convergence", Elsewhere("no chain is known to reach it: Newton's method on a coupled stage or a direct-coupled group converges in a few steps; it is reported rather than a wrong answer")),
    ("gain-overflow", Json(long_cascade, &[])),
    (
        "noise-gain-overflow",
        JsonRun(noise_cascade, &["noise", "chain.json"]),
    ),
    ("no-dc-path", Elsewhere("the graph checks (no-dc-path-to-base) and the required resistors leave no terminal open; the check is a guard in src/device/mod.rs")),
    // The command line
    (
        "no-planned-level",
        Edit(&[(", \"level\": \"-30 dBu\"", "")], &[]),
    ),
    ("bad-input-option", Edit(&[], &["--input", "loud"])),
    ("usage", Edit(&[], &["--frmat", "json"])),
    ("refusing-output", Shell("\"$AMPCHAIN\" plot levels chain.json -o chain.json")),
    (
        "output-fifo-without-reader",
        Shell("mkfifo levels.svg && \"$AMPCHAIN\" plot levels chain.json -o levels.svg"),
    ),
    ("output-block-device", Elsewhere("making a block device node needs root; tests/hostile.rs makes one when it may")),
    ("output-beside-report", Shell("\"$AMPCHAIN\" response chain.json --plot -")),
    (
        "loop-plot-without-loop",
        Shell("\"$AMPCHAIN\" response chain.json --loop-plot t.svg"),
    ),
    ("one-chart-on-stdout", Shell("\"$AMPCHAIN\" plot loadlines chain.json -o -")),
    (
        "loadlines-no-device",
        JsonRun(passive_only, &["plot", "loadlines", "chain.json", "-o", "charts"]),
    ),
    (
        "loadlines-stage-no-device",
        JsonRun(pad_before_line, &["plot", "loadlines", "chain.json", "--stage", "pad", "-o", "pad.svg"]),
    ),
    ("sweep-position-stage", Shell("\"$AMPCHAIN\" plan chain.json --sweep-position follow")),
    (
        "frequency-out-of-range",
        Shell("\"$AMPCHAIN\" response chain.json --from 1e-299"),
    ),
    (
        "per-decade-too-dense",
        Shell("\"$AMPCHAIN\" response chain.json --per-decade 100000"),
    ),
    (
        "response-too-large",
        JsonRun(
            |c| {
                for k in 0..8 {
                    add_load(c, &format!("meter{k}"));
                    add_link(c, "follow", &format!("meter{k}"), "1u");
                }
            },
            &["response", "chain.json", "--per-decade", "10000", "--from", "1m", "--to", "100G"],
        ),
    ),
    ("too-many-threads", Shell("\"$AMPCHAIN\" spread chain.json --threads 10000")),
    ("nothing-spreads", Shell("\"$AMPCHAIN\" spread chain.json --runs 10")),
    (
        "report-nothing-spreads",
        Shell("\"$AMPCHAIN\" report chain.json --spread 10 -o page.html"),
    ),
    (
        "no-builds",
        JsonRun(
            |c| c["stages"][0]["r_collector"] = json!({ "value": "8k2", "tolerance": "5%" }),
            &["report", "chain.json", "--spread", "0", "-o", "page.html"],
        ),
    ),
    ("sweep-gain-beyond-rounding", JsonRun(cascade_16, &["sweep", "chain.json"])),
    ("sweep-loop-adds", JsonRun(feedback_that_adds, &["sweep", "chain.json"])),
    (
        "sweep-levels-reversed",
        Shell("\"$AMPCHAIN\" sweep chain.json --from 0dBu --to -20dBu"),
    ),
    ("sweep-no-device", JsonRun(passive_only, &["sweep", "chain.json"])),
    (
        "sweep-no-waveform",
        JsonRun(
            |c| c["source"]["resistance"] = json!("0"),
            &["sweep", "chain.json", "--from", "50 V rms", "--to", "100 V rms", "--steps", "2"],
        ),
    ),
    ("noise-band", Shell("\"$AMPCHAIN\" noise chain.json --band 20k..20")),
    ("optimum-unknown-stage", Shell("\"$AMPCHAIN\" noise chain.json --optimum nope")),
    ("optimum-no-bias-resistor", Shell("\"$AMPCHAIN\" noise chain.json --optimum follow")),
    (
        "optimum-no-source-resistance",
        JsonRun(
            |c| c["source"]["resistance"] = json!("0"),
            &["noise", "chain.json", "--optimum", "amp"],
        ),
    ),
    ("optimum-never-biases", Elsewhere("a stage that plans biases at its own value, which lies in the sweep; the check is a guard in src/noise/optimum.rs")),
    (
        "stiffness-out-of-range",
        Shell("\"$AMPCHAIN\" bias chain.json --stage amp --stiffness 1e6"),
    ),
    ("bias-write-does-not-plan", Elsewhere("a guard: with --stiffness bounded no proposal is known to give a chain that does not plan")),
    ("tune-vary-unknown-stage", Shell("\"$AMPCHAIN\" tune chain.json --vary ampp.r_top")),
    ("tune-vary-unknown-part", Shell("\"$AMPCHAIN\" tune chain.json --vary amp.r_colector")),
    ("tune-vary-absent-part", Shell("\"$AMPCHAIN\" tune chain.json --vary follow.r_top")),
    (
        "tune-vary-range-outside-series",
        Shell("\"$AMPCHAIN\" tune chain.json --vary amp.r_collector=8k3..8k6"),
    ),
    (
        "tune-vary-range-out-of-limits",
        Shell("\"$AMPCHAIN\" tune chain.json --vary amp.r_collector=1k..1T"),
    ),
    ("tune-nothing-to-vary", JsonRun(jfet_bare_amp, &["tune", "chain.json", "--vary", "amp.*"])),
    (
        "tune-not-active-as-written",
        JsonRun(
            |c| c["stages"][0]["r_collector"] = json!("82k"),
            &["tune", "chain.json", "--vary", "all"],
        ),
    ),
    ("tune-goal-needs-keep", Shell("\"$AMPCHAIN\" tune chain.json --vary all --goal margin")),
    (
        "tune-yield-nothing-spreads",
        Shell("\"$AMPCHAIN\" tune chain.json --vary amp.r_top --goal yield --keep 'gain 20dB..'"),
    ),
    ("tune-option-out-of-range", Shell("\"$AMPCHAIN\" tune chain.json --vary all --width 0")),
    (
        "require-unknown-warning-kind",
        Shell("\"$AMPCHAIN\" tune chain.json --vary all --keep 'warnings@near_saturaton ..0'"),
    ),
    (
        "require-unknown-resistor",
        Shell("\"$AMPCHAIN\" tune chain.json --vary all --keep 'resistor_power@amp.r_colector ..125mW'"),
    ),
    (
        "require-dissipation-no-transistor",
        JsonRun(opamp_line, &["spread", "chain.json", "--require", "dissipation@follow ..50mW"]),
    ),
    (
        "require-no-device",
        JsonRun(pad_before_line, &["spread", "chain.json", "--require", "i_c@pad 1mA.."]),
    ),
    // Findings
    ("clips", Edit(&[], &["--input", "0 dBu", "--fail-on-clip"])),
    (
        "tune-keep-unmet",
        Shell("\"$AMPCHAIN\" tune chain.json --vary amp.r_top --keep 'gain 80dB..' >/dev/null"),
    ),
    // Internal
    ("cannot-write", FullOutput),
    ("stdout-closed", Shell("\"$AMPCHAIN\" plan chain.json >&-")),
    ("cannot-write-file", Shell("\"$AMPCHAIN\" plot levels chain.json -o /dev/full")),
    ("noise-network-singular", Elsewhere("no chain is known to reach it; the check is a guard in src/noise/network.rs")),
    ("internal", Elsewhere("a panic is a bug; none is known (the fuzzers found none left)")),
];

/// The fixture with an attenuator `pad` between the follower and the load.
fn pad_before_line(c: &mut Value) {
    c["stages"]
        .as_array_mut()
        .expect("stages")
        .push(json!({ "id": "pad", "type": "attenuator", "r_series": "1k", "r_shunt": "10k" }));
    c["links"][2]["to"] = json!("pad");
    add_link(c, "pad", "line", "direct");
}

/// 16 copies of the fixture's common-emitter stage in a row.
fn cascade_16(chain: &mut Value) {
    common::cascade(chain, 16);
}

/// 400 copies of the fixture's common-emitter stage in a row.
fn long_cascade(chain: &mut Value) {
    common::cascade(chain, 400);
}

/// 250 copies of the fixture's common-emitter stage in a row: within the levels'
/// 6000 dB, beyond the 3000 dB noise powers allow.
fn noise_cascade(chain: &mut Value) {
    common::cascade(chain, 250);
}

/// The follower's output fed back through 100 Ω and 10 µF into the inverting stage's
/// emitter: feedback that adds (T ≈ −100 at midband).
fn feedback_that_adds(chain: &mut Value) {
    let links = chain["links"].as_array_mut().expect("links");
    links.push(
        json!({ "from": "follow", "to": "amp", "coupling": "feedback",
                       "resistance": "100", "capacitance": "10u", "into": "emitter" }),
    );
}

fn add_link(chain: &mut Value, from: &str, to: &str, coupling: &str) {
    let links = chain["links"].as_array_mut().expect("links");
    links.push(json!({ "from": from, "to": to, "coupling": coupling }));
}

fn add_feedback(chain: &mut Value, from: &str, to: &str, into: &str) {
    let links = chain["links"].as_array_mut().expect("links");
    links.push(json!({ "from": from, "to": to, "coupling": "feedback",
                       "resistance": "10k", "capacitance": "10u", "into": into }));
}

fn add_load(chain: &mut Value, id: &str) {
    let loads = chain["loads"].as_array_mut().expect("loads");
    loads.push(json!({ "id": id, "resistance": "10k" }));
}

fn fixture() -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/ce_ef_pair.json");
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

fn fresh_dir(id: &str) -> tempfile::TempDir {
    common::scratch(&format!("catalogue-{id}"))
}

fn plan(dir: &Path, args: &[&str], stdout: Stdio) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .current_dir(dir)
        .arg("plan")
        .args(args)
        .stdin(Stdio::null())
        .stdout(stdout)
        .stderr(Stdio::piped())
        .output()
        .expect("the ampchain binary runs")
}

/// A list of `n` copies of the fixture's last stage, load or device, ids numbered.
fn too_many(base: &str, list: &str, n: usize) -> String {
    let mut chain: Value = serde_json::from_str(base).expect("fixture parses");
    match list {
        "devices" => {
            let devices = chain["devices"].as_object_mut().expect("object");
            let one = devices["q_pair"].clone();
            for k in 0..n {
                devices.insert(format!("q{k}"), one.clone());
            }
        }
        _ => {
            let items = chain[list].as_array_mut().expect("list");
            let one = items.last().expect("an entry").clone();
            for k in 0..n {
                let mut item = one.clone();
                if list != "links" {
                    item["id"] = json!(format!("extra{k}"));
                }
                items.push(item);
            }
        }
    }
    chain.to_string()
}

/// Run the recipe; `None` for entries covered elsewhere.
fn run(id: &str, recipe: &Recipe) -> Option<(Option<i32>, String)> {
    let tmp = fresh_dir(id);
    let dir = tmp.path();
    let base = fixture();
    let out = match recipe {
        Edit(edits, args) => {
            let mut text = base;
            for (from, to) in *edits {
                assert!(text.contains(from), "{id}: the fixture has no {from:?}");
                text = text.replacen(from, to, 1);
            }
            std::fs::write(dir.join("chain.json"), text).expect("write");
            let mut all = vec!["chain.json"];
            all.extend_from_slice(args);
            plan(dir, &all, Stdio::null())
        }
        Json(edit, args) => {
            let mut chain: Value = serde_json::from_str(&base).expect("fixture parses");
            edit(&mut chain);
            std::fs::write(
                dir.join("chain.json"),
                serde_json::to_string_pretty(&chain).expect("JSON"),
            )
            .expect("write");
            let mut all = vec!["chain.json"];
            all.extend_from_slice(args);
            plan(dir, &all, Stdio::null())
        }
        Missing => plan(dir, &["missing.json"], Stdio::null()),
        TooLarge => {
            let mut text = base;
            let max = ampchain::limits::MAX_FILE_BYTES as usize;
            text.push_str(&" ".repeat(max + 1 - text.len()));
            std::fs::write(dir.join("chain.json"), text).expect("write");
            plan(dir, &["chain.json"], Stdio::null())
        }
        TooMany(list) => {
            let max = match *list {
                "stages" => ampchain::limits::MAX_STAGES,
                "loads" => ampchain::limits::MAX_LOADS,
                "links" => ampchain::limits::MAX_STAGES + ampchain::limits::MAX_LOADS,
                _ => ampchain::limits::MAX_DEVICES,
            };
            std::fs::write(dir.join("chain.json"), too_many(&base, list, max)).expect("write");
            plan(dir, &["chain.json"], Stdio::null())
        }
        FullOutput => {
            std::fs::write(dir.join("chain.json"), base).expect("write");
            let full = std::fs::OpenOptions::new()
                .write(true)
                .open("/dev/full")
                .expect("/dev/full (Linux)");
            plan(dir, &["chain.json"], Stdio::from(full))
        }
        Shell(line) => {
            std::fs::write(dir.join("chain.json"), base).expect("write");
            Command::new("sh")
                .current_dir(dir)
                .arg("-c")
                .arg(line)
                .env("AMPCHAIN", env!("CARGO_BIN_EXE_ampchain"))
                .stdin(Stdio::null())
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .output()
                .expect("sh runs")
        }
        JsonRun(edit, args) => {
            let mut chain: Value = serde_json::from_str(&base).expect("fixture parses");
            edit(&mut chain);
            std::fs::write(
                dir.join("chain.json"),
                serde_json::to_string_pretty(&chain).expect("JSON"),
            )
            .expect("write");
            Command::new(env!("CARGO_BIN_EXE_ampchain"))
                .current_dir(dir)
                .args(*args)
                .stdin(Stdio::null())
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .output()
                .expect("the ampchain binary runs")
        }
        Elsewhere(_) => return None,
    };
    let stderr = String::from_utf8_lossy(&out.stderr);
    Some((out.status.code(), stderr.trim_end().to_string()))
}

/// (id, exit status, message) of every entry in docs/errors.md: a heading
/// "### `id`: …", a line "Exit status N.", and the message in the next ```text block.
fn catalogue() -> Vec<(String, i32, String)> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/errors.md");
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut entries = Vec::new();
    let mut lines = text.lines();
    while let Some(line) = lines.next() {
        let Some(rest) = line.strip_prefix("### `") else {
            continue;
        };
        let id = rest.split('`').next().expect("id").to_string();
        let mut status = None;
        let mut message = Vec::new();
        let mut in_block = false;
        for l in lines.by_ref() {
            if let Some(s) = l.strip_prefix("Exit status ") {
                status = s.trim_end_matches('.').parse::<i32>().ok();
            } else if l == "```text" {
                in_block = true;
            } else if in_block && l == "```" {
                break;
            } else if in_block {
                message.push(l);
            }
        }
        let status = status.unwrap_or_else(|| panic!("{id}: no \"Exit status N.\" line"));
        entries.push((id, status, message.join("\n")));
    }
    entries
}

#[test]
fn every_catalogued_error_is_what_the_program_says() {
    let print = std::env::var_os("AMPCHAIN_PRINT_CATALOGUE").is_some();
    let entries = if print { Vec::new() } else { catalogue() };
    let mut problems = Vec::new();
    for (id, recipe) in RECIPES {
        let got = run(id, recipe);
        if print {
            match (&got, recipe) {
                (Some((status, message)), _) => {
                    println!(
                        "### `{id}`\nExit status {}.\n```text\n{message}\n```\n",
                        status.unwrap_or(-1)
                    )
                }
                (None, Elsewhere(why)) => println!("### `{id}`\n(elsewhere: {why})\n"),
                _ => {}
            }
            continue;
        }
        let Some((_, status, message)) = entries.iter().find(|(e, _, _)| e == id) else {
            problems.push(format!("{id}: no entry in docs/errors.md"));
            continue;
        };
        if let Some((got_status, got_message)) = got {
            if got_status != Some(*status) {
                problems.push(format!(
                    "{id}: exit status {got_status:?}, the catalogue says {status}"
                ));
            }
            if got_message != *message {
                problems.push(format!(
                    "{id}: the program says\n{got_message}\nthe catalogue says\n{message}"
                ));
            }
            if got_message.contains("panicked") {
                problems.push(format!("{id}: a panic"));
            }
        }
    }
    for (id, _, _) in &entries {
        if !RECIPES.iter().any(|(r, _)| r == id) {
            problems.push(format!("{id}: in docs/errors.md but without a recipe here"));
        }
    }
    assert!(problems.is_empty(), "{}", problems.join("\n\n"));
}
