//! The bias designer (`ampchain bias`) against outside references: a load-line
//! construction and the classic handbook formula for the centred Q point, the
//! independent flat-network solver of tests/reference for the limits of designed and
//! written chains, and `ampchain plan` on the written chain file.

mod common;
mod reference;

use ampchain::bias::edit::{self, Edit};
use ampchain::bias::{design, Knob, Outcome, Proposal, Request, Target};
use ampchain::eseries::Series;
use ampchain::Chain;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Output;

fn demo(name: &str) -> (PathBuf, String) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("chains")
        .join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    (path, text)
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

/// The chain text with continuous (unrounded) values written as plain ohms.
fn with_values(text: &str, values: &[(Knob, f64)]) -> String {
    let edits: Vec<Edit> = values
        .iter()
        .map(|(k, v)| Edit {
            stage: k.stage,
            key: k.field.key(),
            code: format!("{v}"),
        })
        .collect();
    edit::apply(text, &edits).expect("the test chain can be edited")
}

/// The best proposal's values written into the chain text, as `--write` does.
fn with_proposal(text: &str, o: &Outcome) -> String {
    with_proposal_of(text, &o.proposals[0])
}

/// A proposal's values written into the chain text, as `--write` does.
fn with_proposal_of(text: &str, p: &Proposal) -> String {
    edit::apply(text, &p.edits()).expect("the chain can be edited")
}

/// Limits up and down of stage `i`, from the independent flat-network solve.
fn reference_limits(text: &str, i: usize) -> (f64, f64) {
    let chain = reference::Chain::from_text(text).expect("reference reads the chain");
    let dc = reference::solve_dc(&chain).expect("reference DC solve");
    let a = reference::analyse(&chain, dc).expect("reference analysis");
    (a.stages[i].limit_up, a.stages[i].limit_down)
}

const SINGLE_CE: &str = r#"{
  "supply": "15 V",
  "devices": { "q": { "polarity": "npn", "beta": 250, "saturation_current": "10f",
                      "early_voltage": "100 V", "vce_sat": "0.2 V" } },
  "source": { "resistance": "1k", "level": "10 mV rms" },
  "stages": [ { "id": "s", "type": "common_emitter", "device": "q",
                "r_top": "150k", "r_bottom": "22k", "r_collector": "10k",
                "r_emitter": "220", "r_emitter_bypassed": "1k8", "c_bypass": "100u" } ],
  "loads": [ { "id": "out", "resistance": "20k" } ],
  "links": [ { "from": "source", "to": "s", "coupling": "10u" },
             { "from": "s", "to": "out", "coupling": "10u" } ]
}"#;

#[test]
fn centred_q_point_matches_a_load_line_construction() {
    let chain = Chain::from_json_str(SINGLE_CE).unwrap();
    let o = design(&chain, &Request::new(0, Target::Centre, Series::E24)).unwrap();
    let op = o.ideal.op;
    let alpha = op.i_c / op.i_e;
    // Load-line construction (docs/definitions.md's definitions drawn on paper): the DC load line
    // V_CE = V_CC − I_C·(R_C + R_E/α); the AC load line through Q with slope
    // −1/(R_C∥R_L + R_E1/α) meets cutoff (I_C = 0) at V_CEQ + I_CQ·r_line. The swing is
    // centred when Q halves the line between V_CE,sat and that point. Walk Q along the
    // DC load line by bisection until it does.
    let (v_cc, r_c, r_e1, r_e2, r_l, vce_sat) = (15.0, 10e3, 220.0, 1.8e3, 20e3, 0.2);
    let r_dc = r_c + (r_e1 + r_e2) / alpha;
    let r_line = r_c * r_l / (r_c + r_l) + r_e1 / alpha;
    let (mut lo, mut hi) = (0.0, v_cc / r_dc);
    for _ in 0..200 {
        let i_q = 0.5 * (lo + hi);
        let v_q = v_cc - i_q * r_dc;
        let v_cutoff = v_q + i_q * r_line;
        let midpoint = 0.5 * (vce_sat + v_cutoff);
        if v_q > midpoint {
            lo = i_q;
        } else {
            hi = i_q;
        }
    }
    let i_construction = 0.5 * (lo + hi);
    assert!(
        rel(op.i_c, i_construction) < 1e-9,
        "designed {} A, construction {i_construction} A",
        op.i_c
    );
    // The independent flat-network solve of the chain with the ideal values finds the
    // two limits equal (its own Newton, its own limits from docs/definitions.md).
    let (up, down) = reference_limits(&with_values(SINGLE_CE, &o.ideal_values), 0);
    assert!(rel(up, down) < 1e-6, "reference limits +{up} / −{down}");
    // The present point was off-centre: the test cannot pass by leaving it alone.
    let present = o.present.as_ref().unwrap();
    assert!(rel(present.limit_up, present.limit_down) > 0.1);
}

#[test]
fn with_everything_bypassed_it_is_the_classic_formula() {
    // No unbypassed emitter resistor and no Early effect: the handbook's
    // I_CQ = (V_CC − V_CE,sat)/(R_DC + R_AC), R_DC = R_C + R_E, R_AC = R_C ∥ R_L
    // (handbook, from memory). The handbook takes I_E ≈ I_C, so it differs from the
    // exact value by about R_E/(β·(R_DC + R_AC)): allow 1/β.
    let text = SINGLE_CE
        .replace(r#""early_voltage": "100 V", "#, "")
        .replace(
            r#""r_emitter": "220", "r_emitter_bypassed": "1k8""#,
            r#""r_emitter_bypassed": "2k2""#,
        );
    let chain = Chain::from_json_str(&text).unwrap();
    let o = design(&chain, &Request::new(0, Target::Centre, Series::E24)).unwrap();
    let r_ac = 10e3 * 20e3 / 30e3;
    let handbook = (15.0 - 0.2) / (10e3 + 2.2e3 + r_ac);
    assert!(
        rel(o.ideal.op.i_c, handbook) < 1.0 / 250.0,
        "designed {} A, handbook {handbook} A",
        o.ideal.op.i_c
    );
    assert!(rel(o.ideal.limit_up, o.ideal.limit_down) < 1e-9);
}

#[test]
fn proposals_centre_the_swing_within_the_series_rounding() {
    // Every demo stage with a divider, in three series: the best proposal's limits are
    // equal within one step of the series (10^(1/n) − 1, the series' definition in
    // IEC 60063), and the independent flat-network solve of the chain with the
    // proposal written in finds the limits the designer reports.
    let mut checked = 0;
    for name in [
        "contact-pickup.json",
        "mic-preamp.json",
        "line-driver.json",
        "piezo-frontend.json",
        "actuator-driver.json",
    ] {
        let (_, text) = demo(name);
        let chain = Chain::from_json_str(&text).unwrap();
        for i in 0..chain.stages.len() {
            if !chain.stages[i].kind.model().bias().is_present() {
                continue;
            }
            for series in [Series::E12, Series::E24, Series::E96] {
                let o = design(&chain, &Request::new(i, Target::Centre, series)).unwrap();
                let best = &o.proposals[0].metrics;
                let step = 10f64.powf(1.0 / series.per_decade() as f64) - 1.0;
                let what = format!("{name} stage {} {}", chain.stages[i].id, series);
                let imbalance =
                    best.limit_up.max(best.limit_down) / best.limit_up.min(best.limit_down) - 1.0;
                assert!(
                    imbalance <= step,
                    "{what}: limits +{} / −{} differ by {:.1} %, more than the series step {:.1} %",
                    best.limit_up,
                    best.limit_down,
                    100.0 * imbalance,
                    100.0 * step
                );
                let (up, down) = reference_limits(&with_proposal(&text, &o), i);
                assert!(
                    rel(best.limit_up, up) < 1e-6,
                    "{what}: up {} vs {up}",
                    best.limit_up
                );
                assert!(
                    rel(best.limit_down, down) < 1e-6,
                    "{what}: down {} vs {down}",
                    best.limit_down
                );
                checked += 1;
            }
        }
    }
    assert!(checked >= 15, "only {checked} designs checked");
}

fn run(args: &[&str]) -> Output {
    common::run(args, None)
}

fn stdout_of(what: &str, out: &Output) -> String {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{what}: {stderr}");
    String::from_utf8(out.stdout.clone()).unwrap()
}

fn temp_dir(tag: &str) -> tempfile::TempDir {
    common::scratch(&format!("bias-{tag}"))
}

/// `plan`'s JSON for the written chain must hold exactly (bit for bit) the Q point,
/// limits, gain and clip levels `bias` reported for proposal `p` of stage `stage`.
fn assert_plan_reproduces(name: &str, stage: &str, p: &Value, plan: &Value) {
    let s = plan["stages"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == stage)
        .unwrap();
    for key in ["i_c", "v_ce", "v_b", "i_b"] {
        assert_eq!(
            p["operating_point"][key], s["operating_point"][key],
            "{name} {key}"
        );
    }
    for (ours, theirs) in [
        ("limit_up", "limit_up"),
        ("limit_down", "limit_down"),
        ("gain", "gain"),
        ("r_in", "r_in"),
    ] {
        assert_eq!(p[ours], s[theirs], "{name} {ours}");
    }
    assert_eq!(
        p["stage_clip"]["input_vpeak"], s["clip_input_vpeak"],
        "{name} stage clip"
    );
    // plan's first_clip carries the level through rms and back; its stage row has it raw.
    let first = plan["stages"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == plan["first_clip"]["stage"])
        .unwrap();
    assert_eq!(
        p["chain_clip"]["input_vpeak"], first["clip_input_vpeak"],
        "{name} chain clip"
    );
    assert_eq!(
        p["chain_clip"]["stage"], plan["first_clip"]["stage"],
        "{name}"
    );
}

#[test]
fn a_written_proposal_reproduces_its_numbers_in_plan() {
    // `plan` on the chain `--write` saved must print exactly (bit for bit) the Q point,
    // limits, gain and clip levels `bias` reported for proposal 1.
    let tmp = temp_dir("write");
    let dir = tmp.path();
    for (name, stage, extra) in [
        ("contact-pickup.json", "gain", vec![]),
        ("mic-preamp.json", "input", vec!["--target", "ic=1mA"]),
        (
            "line-driver.json",
            "amp",
            vec!["--also", "r_collector", "--series", "E96"],
        ),
        (
            "mic-preamp.json",
            "output",
            vec!["--also", "second.r_collector"],
        ),
    ] {
        let (path, text) = demo(name);
        let new = dir.join(format!("{stage}-{name}"));
        let path_s = path.to_str().unwrap();
        let new_s = new.to_str().unwrap();
        let mut args = vec![
            "bias", path_s, "--stage", stage, "--format", "json", "--write", new_s,
        ];
        args.extend(extra.iter().copied());
        let report: Value = serde_json::from_str(&stdout_of(name, &run(&args))).unwrap();
        let plan: Value = serde_json::from_str(&stdout_of(
            "plan",
            &run(&["plan", new_s, "--format", "json"]),
        ))
        .unwrap();
        let p = &report["proposals"][0];
        assert_plan_reproduces(name, stage, p, &plan);
        // Only the changed values differ from the original file, line by line.
        let written = std::fs::read_to_string(&new).unwrap();
        let changed: Vec<&Value> = p["values"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|v| v["changed"] == true)
            .collect();
        assert!(!changed.is_empty(), "{name}: proposal 1 changes something");
        assert_eq!(written.lines().count(), text.lines().count());
        for (a, b) in text.lines().zip(written.lines()) {
            if a != b {
                assert!(
                    changed.iter().any(|v| b.contains(&format!(
                        "\"{}\": \"{}\"",
                        v["key"].as_str().unwrap(),
                        v["code"].as_str().unwrap()
                    ))),
                    "{name}: unexpected change\n- {a}\n+ {b}"
                );
            }
        }
    }
}

/// SINGLE_CE with parts written with their tolerances (README "Spread in the chain
/// file"), one of them over several lines, one with a plain-number value.
fn single_ce_with_tolerances() -> String {
    let text = SINGLE_CE.replace(
        r#""r_top": "150k", "r_bottom": "22k", "r_collector": "10k","#,
        r#""r_top": {
                  "value": "150k",
                  "tolerance": "1%", "distribution": "normal"
                },
                "r_bottom": { "value": "22k", "tolerance": "5%" },
                "r_collector": {"value": 10000, "tolerance": "2%"},"#,
    );
    assert_ne!(text, SINGLE_CE, "the tolerances are in");
    text
}

#[test]
fn a_written_proposal_keeps_every_tolerance() {
    // README "Spread in the chain file": a tolerance belongs to the part, so `--write`
    // replaces only the "value" of a {"value", "tolerance"} object. References: the
    // README's format (the object must still be there, tolerance and all) and `ampchain
    // plan` on the written file, which must print bias's numbers bit for bit.
    let tmp = temp_dir("tolerance");
    let dir = tmp.path();
    let text = single_ce_with_tolerances();
    let input = dir.join("chain.json");
    std::fs::write(&input, &text).unwrap();
    let original: Value = serde_json::from_str(&text).unwrap();
    let mut objects_changed = 0;
    for (tag, extra) in [
        ("divider", vec![]),
        ("collector", vec!["--also", "r_collector"]),
    ] {
        let new = dir.join(format!("{tag}.json"));
        let (input_s, new_s) = (input.to_str().unwrap(), new.to_str().unwrap());
        let mut args = vec![
            "bias", input_s, "--stage", "s", "--format", "json", "--write", new_s,
        ];
        args.extend(extra.iter().copied());
        let report: Value = serde_json::from_str(&stdout_of(tag, &run(&args))).unwrap();
        let plan: Value = serde_json::from_str(&stdout_of(
            "plan",
            &run(&["plan", new_s, "--format", "json"]),
        ))
        .unwrap();
        let p = &report["proposals"][0];
        assert_plan_reproduces(tag, "s", p, &plan);

        let written: Value = serde_json::from_str(&std::fs::read_to_string(&new).unwrap()).unwrap();
        for v in p["values"].as_array().unwrap() {
            let key = v["key"].as_str().unwrap();
            let (before, after) = (&original["stages"][0][key], &written["stages"][0][key]);
            if v["changed"] != true {
                assert_eq!(after, before, "{tag}: {key} untouched");
                continue;
            }
            // Only "value" differs: the tolerance, the distribution, every other key stay.
            let mut expected = before.clone();
            expected["value"] = v["code"].clone();
            assert_eq!(after, &expected, "{tag}: {key}");
            assert_ne!(after, before, "{tag}: {key} changed");
            objects_changed += 1;
        }
        // Everything outside the stage is as it was.
        let mut rest = written.clone();
        rest["stages"][0] = original["stages"][0].clone();
        assert_eq!(rest, original, "{tag}: nothing else changed");
    }
    // Both runs changed a part written with its tolerance (r_top, then r_collector).
    assert!(
        objects_changed >= 2,
        "only {objects_changed} objects changed"
    );
}

#[test]
fn a_range_to_move_is_refused_and_nothing_is_written() {
    // A range {"min", "typical", "max"} holds the designer's own limits for that part;
    // no rule says where they go for another value, so `--write` refuses (bad input,
    // exit status 2) and names the stage and key.
    let tmp = temp_dir("range");
    let dir = tmp.path();
    let text = SINGLE_CE.replace(
        r#""r_collector": "10k""#,
        r#""r_collector": {"min": "9k5", "typical": "10k", "max": "10k5"}"#,
    );
    assert_ne!(text, SINGLE_CE);
    let input = dir.join("chain.json");
    std::fs::write(&input, &text).unwrap();
    let new = dir.join("new.json");
    let (input_s, new_s) = (input.to_str().unwrap(), new.to_str().unwrap());
    let out = run(&[
        "bias",
        input_s,
        "--stage",
        "s",
        "--also",
        "r_collector",
        "--write",
        new_s,
    ]);
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("stage \"s\": r_collector: found a range"),
        "{stderr}"
    );
    assert!(!new.exists(), "nothing written");
    // Without --also the range is not moved, and the file is written with it intact.
    let out = run(&["bias", input_s, "--stage", "s", "--write", new_s]);
    stdout_of("range untouched", &out);
    let written: Value = serde_json::from_str(&std::fs::read_to_string(&new).unwrap()).unwrap();
    let original: Value = serde_json::from_str(&text).unwrap();
    assert_eq!(
        written["stages"][0]["r_collector"],
        original["stages"][0]["r_collector"]
    );
}

#[test]
fn a_written_proposal_keeps_a_byte_order_mark_and_crlf_line_ends() {
    // A UTF-8 byte-order mark (EF BB BF, the Unicode standard's encoding of U+FEFF) and
    // CRLF line ends are the file's, as some editors write it: `--write` keeps both and
    // changes only the values. Reference: the same command on the plain (LF, no mark)
    // text, whose written file must be this one's once the mark and CRs are taken off.
    let tmp = temp_dir("bom");
    let dir = tmp.path();
    let plain_in = dir.join("plain.json");
    let marked_in = dir.join("marked.json");
    std::fs::write(&plain_in, SINGLE_CE).unwrap();
    let marked = format!("\u{feff}{}", SINGLE_CE.replace('\n', "\r\n"));
    std::fs::write(&marked_in, &marked).unwrap();
    let mut written = Vec::new();
    for (tag, input) in [("plain", &plain_in), ("marked", &marked_in)] {
        let new = dir.join(format!("{tag}-new.json"));
        let (input_s, new_s) = (input.to_str().unwrap(), new.to_str().unwrap());
        stdout_of(
            tag,
            &run(&["bias", input_s, "--stage", "s", "--write", new_s]),
        );
        written.push(std::fs::read(&new).unwrap());
    }
    let (plain, marked_out) = (&written[0], &written[1]);
    assert_ne!(
        plain.as_slice(),
        SINGLE_CE.as_bytes(),
        "proposal 1 changes something"
    );
    assert!(
        marked_out.starts_with(&[0xEF, 0xBB, 0xBF]),
        "the mark is kept"
    );
    let expected = format!(
        "\u{feff}{}",
        String::from_utf8(plain.clone())
            .unwrap()
            .replace('\n', "\r\n")
    );
    assert_eq!(String::from_utf8(marked_out.clone()).unwrap(), expected);
}

#[test]
fn refuses_to_write_over_its_input() {
    let tmp = temp_dir("refuse");
    let dir = tmp.path();
    let (_, text) = demo("contact-pickup.json");
    let input = dir.join("chain.json");
    std::fs::write(&input, &text).unwrap();
    let input_s = input.to_str().unwrap();
    let out = run(&["bias", input_s, "--stage", "gain", "--write", input_s]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("input file"));
    assert_eq!(std::fs::read_to_string(&input).unwrap(), text);
}

#[test]
fn bad_requests_name_what_is_wrong() {
    let (path, _) = demo("mic-preamp.json");
    let p = path.to_str().unwrap();
    for (args, expected) in [
        (
            vec!["--stage", "nope"],
            vec!["--stage", "\"nope\"", "\"input\", \"second\", \"output\""],
        ),
        (
            vec!["--stage", "input", "--target", "gain=3"],
            vec!["--target", "centre"],
        ),
        (
            vec!["--stage", "input", "--series", "E7"],
            vec!["--series", "E7"],
        ),
        (
            vec!["--stage", "input", "--also", "r_base"],
            vec!["r_base", "r_collector"],
        ),
        (
            vec!["--stage", "input", "--also", "r_top"],
            vec!["divider", "always"],
        ),
        (
            vec!["--stage", "input", "--keep-gain", "loud"],
            vec!["--keep-gain", "dB"],
        ),
        (
            vec!["--stage", "input", "--min-input", "10uF"],
            vec!["--min-input", "resistance"],
        ),
        // A current the DC load line cannot reach: say where the line runs.
        (
            vec!["--stage", "input", "--target", "ic=100mA"],
            vec!["no values of r_top reach I_C = 100 mA", "DC load line"],
        ),
        // A direct-coupled follower has no divider: say what can move it instead.
        (
            vec!["--stage", "output"],
            vec![
                "no bias divider",
                "\"second\"",
                "--also r_emitter",
                "--also second.r_collector",
            ],
        ),
    ] {
        let mut all = vec!["bias", p];
        all.extend(args.iter().copied());
        let out = run(&all);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {stderr}");
        assert!(!stderr.contains("panicked"), "{stderr}");
        for e in expected {
            assert!(stderr.contains(e), "{args:?}: expected {e:?} in: {stderr}");
        }
    }
}

#[test]
fn keep_gain_holds_the_largest_symmetrical_swing_inside_the_band() {
    // The target's own definition (issue 6): the largest min(limit up, limit down) whose
    // gain stays within the band of the present gain. Centring the pickup stage raises
    // its gain by about 0.1 dB; a 0.02 dB band must stop short of the centre, at the
    // band's edge, and every proposal must stay inside the band.
    let (_, text) = demo("contact-pickup.json");
    let chain = Chain::from_json_str(&text).unwrap();
    let mut req = Request::new(0, Target::Centre, Series::E96);
    req.keep_gain_db = Some(0.02);
    req.count = 20;
    let o = design(&chain, &req).unwrap();
    let g0 = o.present.as_ref().unwrap().gain.abs();
    let off = |g: f64| 20.0 * (g.abs() / g0).log10();
    assert!(
        o.limited_by_gain_db.is_some(),
        "the band must limit this target"
    );
    assert!(
        (off(o.ideal.gain).abs() - 0.02).abs() < 1e-6,
        "ideal at {} dB",
        off(o.ideal.gain)
    );
    assert!(!o.proposals.is_empty());
    for p in &o.proposals {
        assert!(off(p.metrics.gain).abs() <= 0.02 + 1e-9);
    }
    // Without the band the centre is reached and the smaller limit is larger.
    let free = design(&chain, &Request::new(0, Target::Centre, Series::E96)).unwrap();
    assert!(
        free.ideal.limit_up.min(free.ideal.limit_down) > o.ideal.limit_up.min(o.ideal.limit_down)
    );
    assert!(off(free.ideal.gain).abs() > 0.02);
}

#[test]
fn a_freed_collector_resistor_centres_at_the_present_current() {
    // --also r_collector with a centred target: the divider keeps I_C, R_C centres the
    // swing; the flat-network reference confirms equal limits at the ideal values.
    let (_, text) = demo("contact-pickup.json");
    let chain = Chain::from_json_str(&text).unwrap();
    let mut req = Request::new(0, Target::Centre, Series::E24);
    req.also = Knob::parse_list(&chain, 0, &["r_collector".to_string()]).unwrap();
    let o = design(&chain, &req).unwrap();
    let present = o.present.as_ref().unwrap();
    assert!(rel(o.ideal.op.i_c, present.op.i_c) < 1e-9);
    let (up, down) = reference_limits(&with_values(&text, &o.ideal_values), 0);
    assert!(rel(up, down) < 1e-6, "reference limits +{up} / −{down}");
}

#[test]
fn a_saturated_stage_gets_a_working_bias() {
    // The piezo front end's gain stage with r_top 22k instead of 82k is saturated at
    // DC (plan refuses it); bias still finds values, and the flat-network reference
    // confirms the written proposal is forward-active with equal limits within the
    // series step (IEC 60063 E24: 10^(1/24) − 1).
    let (_, text) = demo("piezo-frontend.json");
    let text = text.replace(
        r#""r_top": "82k", "r_bottom": "15k""#,
        r#""r_top": "22k", "r_bottom": "15k""#,
    );
    let chain = Chain::from_json_str(&text).unwrap();
    assert!(
        chain.evaluate().is_err(),
        "the test chain must start saturated"
    );
    let o = design(&chain, &Request::new(1, Target::Centre, Series::E24)).unwrap();
    assert!(o.present.is_err());
    let (up, down) = reference_limits(&with_proposal(&text, &o), 1);
    assert!(
        up.max(down) / up.min(down) - 1.0 <= 10f64.powf(1.0 / 24.0) - 1.0,
        "+{up} / −{down}"
    );
}

/// A one-stage chain: an NPN common emitter between +12 V and ground, or its mirror, a
/// PNP between ground and −12 V (every voltage negated, so the resistor that went to
/// +12 V goes to −12 V: the NPN's `r_top` is the PNP's `r_bottom`).
fn mirrored_pair(divider: &str, pnp_divider: &str) -> (String, String) {
    let body = |polarity: &str, supply: &str, rails: &str, divider: &str| {
        format!(
            r#"{{ "version": 2, {supply},
  "devices": {{ "q": {{ "polarity": "{polarity}", "beta": 200, "saturation_current": "10f",
                      "early_voltage": "80 V" }} }},
  "source": {{ "resistance": "1k", "level": "5 mV" }},
  "stages": [ {{ "id": "s", "type": "common_emitter", "device": "q", {rails}
    {divider}, "r_collector": "4k7", "r_emitter": "330", "r_emitter_bypassed": "680",
    "c_bypass": "100u" }} ],
  "loads": [ {{ "id": "out", "resistance": "22k" }} ],
  "links": [ {{ "from": "source", "to": "s", "coupling": "4u7" }},
             {{ "from": "s", "to": "out", "coupling": "10u" }} ] }}"#
        )
    };
    (
        body("npn", r#""supply": "12 V""#, "", divider),
        body(
            "pnp",
            r#""supplies": { "vee": "-12 V" }"#,
            r#""rails": { "top": "ground", "bottom": "vee" },"#,
            pnp_divider,
        ),
    )
}

#[test]
fn a_pnp_divider_is_designed_as_its_mirrored_npn_one() {
    // Reference: mirror symmetry (exact). A base fed through one resistor: the NPN's
    // r_top to +12 V is the PNP's r_bottom to −12 V, and the designer moves it alone
    // in both, so the ideal values agree to the root finder's tolerance.
    let (npn, pnp) = mirrored_pair(r#""r_top": "680k""#, r#""r_bottom": "680k""#);
    let target = Target::Current(1.5e-3);
    let design_of = |text: &str| {
        let chain = Chain::from_json_str(text).unwrap();
        design(&chain, &Request::new(0, target, Series::E24)).unwrap()
    };
    let (a, b) = (design_of(&npn), design_of(&pnp));
    assert!(rel(a.ideal_values[0].1, b.ideal_values[0].1) < 1e-6);
    assert!(rel(a.ideal.op.i_c, 1.5e-3) < 1e-6 && rel(b.ideal.op.i_c, 1.5e-3) < 1e-6);
    assert_eq!(a.proposals[0].settings[0].to, b.proposals[0].settings[0].to);
    // A full divider: the PNP moves its r_top (to ground) with r_bottom kept. The
    // ideal point meets the target. Every proposal satisfies KCL at the base, with
    // the PNP's base current delivered into the node (I_bottom − I_top = I_B, exact),
    // and its divider current (the smaller of the two, here I_top) is stiff.
    let (_, pnp) = mirrored_pair(
        r#""r_top": "100k", "r_bottom": "22k""#,
        r#""r_top": "22k", "r_bottom": "100k""#,
    );
    let o = design_of(&pnp);
    assert!(rel(o.ideal.op.i_c, 1.5e-3) < 1e-6, "{}", o.ideal.op.i_c);
    assert!(!o.proposals.is_empty());
    for p in &o.proposals {
        let value = |key: &str| {
            p.settings
                .iter()
                .find(|s| s.knob.field.key() == key)
                .map(|s| s.to)
                .unwrap()
        };
        let op = p.metrics.op;
        let i_top = (0.0 - op.v_b) / value("r_top");
        let i_bottom = (op.v_b + 12.0) / value("r_bottom");
        assert!(rel(i_bottom - i_top, op.i_b) < 1e-6, "KCL at the base");
        assert!(i_top.min(i_bottom) >= 10.0 * op.i_b);
        // Within the series' rounding of the target (E24: about ±5 % per step).
        assert!(rel(op.i_c, 1.5e-3) < 0.1, "{}", op.i_c);
    }
}

#[test]
fn a_collector_feedback_stage_moves_r_feedback() {
    // Reference: KCL at the collector of a collector-feedback stage with its emitter
    // grounded and no Early effect (textbook form I_C = (V_CC − V_BE)/(R_C + R_F/β),
    // from memory, with the base current's drop in R_C kept):
    // V_CC − (I_C + I_B)·R_C − I_B·R_F = V_BE, so R_F = β·(V_CC − V_BE)/I_C − (β + 1)·R_C,
    // exact given the solution's V_BE.
    let text = r#"{ "version": 2, "supply": "9 V",
      "devices": { "q": { "polarity": "npn", "beta": 300, "saturation_current": "20f" } },
      "source": { "resistance": "10k", "level": "10 mV" },
      "stages": [ { "id": "boost", "type": "common_emitter", "device": "q",
                    "r_collector": "6k8", "r_feedback": "1M" } ],
      "loads": [ { "id": "out", "resistance": "47k" } ],
      "links": [ { "from": "source", "to": "boost", "coupling": "1u" },
                 { "from": "boost", "to": "out", "coupling": "2u2" } ] }"#;
    let chain = Chain::from_json_str(text).unwrap();
    let o = design(
        &chain,
        &Request::new(0, Target::Current(0.6e-3), Series::E24),
    )
    .unwrap();
    assert_eq!(o.moved[0].field.key(), "r_feedback");
    let op = o.ideal.op;
    let r_f = 300.0 * (9.0 - op.v_be) / op.i_c - 301.0 * 6.8e3;
    assert!(
        rel(o.ideal_values[0].1, r_f) < 1e-6,
        "{} vs {r_f}",
        o.ideal_values[0].1
    );
    assert!(rel(op.i_c, 0.6e-3) < 1e-6);
    // The best proposal is a neighbouring E24 value of the ideal one.
    let to = o.proposals[0].settings[0].to;
    assert!(rel(to, r_f) < 0.1, "{to} vs {r_f}");
    // `--also r_feedback` on its own stage is refused: it is the stage's bias resistor.
    let err = Knob::parse_list(&chain, 0, &["r_feedback".to_string()]).unwrap_err();
    assert!(err.to_string().contains("always designed"), "{err}");
}

#[test]
fn a_stage_behind_a_supply_filter_is_refused_by_name() {
    // The divider's top is the filter's node, which moves with the stage's own current
    // (Ohm's law in the filter resistor): the divider line does not hold there.
    let (path, _) = demo("decoupled-three-stage.json");
    let out = run(&["bias", path.to_str().unwrap(), "--stage", "first"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("stage \"first\" has a supply_filter"), "{err}");
}

/// A direct-coupled CE → CE → follower chain whose second stage saturates for most
/// r_top of the first: forward active everywhere only for r_top between about 130 kΩ and
/// 250 kΩ, so the designer's outward walk from 150 kΩ by factors of two lands in
/// saturated neighbours on both sides.
const DIRECT_THREE: &str = r#"{
  "supply": "12 V",
  "devices": { "q": { "polarity": "npn", "beta": 200, "saturation_current": "10f",
                      "early_voltage": "100 V" } },
  "source": { "resistance": "1k", "level": "-40 dBu" },
  "stages": [
    { "id": "ce1", "type": "common_emitter", "device": "q", "r_top": "150k",
      "r_bottom": "22k", "r_collector": "10k", "r_emitter": "1k" },
    { "id": "ce2", "type": "common_emitter", "device": "q", "r_collector": "3k3",
      "r_emitter": "6k8" },
    { "id": "out", "type": "emitter_follower", "device": "q", "r_emitter": "2k2" } ],
  "loads": [ { "id": "l", "resistance": "10k" } ],
  "links": [ { "from": "source", "to": "ce1", "coupling": "10u" },
             { "from": "ce1", "to": "ce2", "coupling": "direct" },
             { "from": "ce2", "to": "out", "coupling": "direct" },
             { "from": "out", "to": "l", "coupling": "10u" } ] }"#;

#[test]
fn direct_coupled_chain_is_searched_over_the_whole_range() {
    let chain = Chain::from_json_str(DIRECT_THREE).unwrap();
    let o = design(&chain, &Request::new(0, Target::Vce(4.5), Series::E24))
        .expect("a V_CE of 4.5 V is reachable with every stage active");
    assert_eq!(o.moved[0].field.key(), "r_top");
    let r_top = o.ideal_values[0].1;
    // Reference: bisection on r_top for V_CE1 = 4.5 V with the independent
    // flat-network solver of tests/reference, inside the bracket 150k…180k where the
    // whole chain is forward active (found by hand: V_CE1 = 3.05 V and 5.25 V there).
    let v_ce1 = |r: f64| {
        let text = DIRECT_THREE.replace("\"r_top\": \"150k\"", &format!("\"r_top\": \"{r}\""));
        let flat = reference::Chain::from_text(&text).expect("reference reads the chain");
        let dc = reference::solve_dc(&flat).expect("reference DC solve");
        assert!(
            dc.op.iter().all(|op| op.v_ce > 0.2),
            "every stage active at {r}"
        );
        dc.op[0].v_ce
    };
    let (mut lo, mut hi) = (150e3, 180e3);
    assert!(v_ce1(lo) < 4.5 && v_ce1(hi) > 4.5);
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if v_ce1(mid) < 4.5 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let bisected = 0.5 * (lo + hi);
    assert!(
        rel(r_top, bisected) < 1e-6,
        "designed {r_top} Ω, bisection {bisected} Ω"
    );
}

/// A self-biased common-source stage (one gate resistor, r_source alone, no Early
/// effect, so the textbook square law holds exactly) between a source and a load. The
/// p-JFET hangs upside down between ground and −15 V, its gate resistor to ground
/// (`r_top`), as the mirror image of the n-JFET one (docs/definitions.md "JFET").
fn single_cs(polarity: &str, v_p: &str) -> String {
    let (supply, rails, gate) = if polarity == "p_jfet" {
        (
            r#""supplies": { "neg": "-15 V" }"#,
            r#""rails": { "top": "ground", "bottom": "neg" },"#,
            "r_top",
        )
    } else {
        (r#""supply": "15 V""#, "", "r_bottom")
    };
    format!(
        r#"{{
  {supply},
  "devices": {{ "j": {{ "polarity": "{polarity}", "i_dss": "6 mA", "pinch_off_voltage": "{v_p}" }} }},
  "source": {{ "resistance": "1k", "level": "10 mV rms" }},
  "stages": [ {{ "id": "s", "type": "common_source", "device": "j", {rails}
                "{gate}": "1M", "r_drain": "3k3", "r_source": "150" }} ],
  "loads": [ {{ "id": "out", "resistance": "20k" }} ],
  "links": [ {{ "from": "source", "to": "s", "coupling": "10u" }},
             {{ "from": "s", "to": "out", "coupling": "10u" }} ]
}}"#
    )
}

const I_DSS: f64 = 6e-3;
const V_P: f64 = -2.0;
const V_DD: f64 = 15.0;
const R_D: f64 = 3.3e3;

/// I_D of the textbook self-bias loop I_D = I_DSS(1 − V_GS/V_P)², V_GS = −I_D·R_S
/// (textbook, from memory), by bisection on V_GS in (V_P, 0).
fn self_bias_i_d(r_s: f64) -> f64 {
    let law = |v_gs: f64| I_DSS * (1.0 - v_gs / V_P).powi(2);
    // −V_GS/R_S − I_D(V_GS) falls from +∞… to −I_DSS as V_GS goes V_P → 0.
    let (mut lo, mut hi) = (V_P, 0.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if -mid / r_s - law(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    law(0.5 * (lo + hi))
}

/// The R_S in (lo, hi) where `f` (falling with R_S) crosses zero, by bisection in ln R_S.
fn bisect_r_s(mut lo: f64, mut hi: f64, f: impl Fn(f64) -> f64) -> f64 {
    assert!(f(lo) > 0.0 && f(hi) < 0.0, "bracket");
    for _ in 0..200 {
        let mid = (lo * hi).sqrt();
        if f(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    (lo * hi).sqrt()
}

#[test]
fn a_self_biased_jfet_current_target_matches_the_textbook_loop() {
    for (polarity, v_p) in [("n_jfet", "-2 V"), ("p_jfet", "2 V")] {
        let chain = Chain::from_json_str(&single_cs(polarity, v_p)).unwrap();
        let i_d = 2.5e-3;
        let o = design(&chain, &Request::new(0, Target::Current(i_d), Series::E24)).unwrap();
        assert_eq!(o.moved[0].field.key(), "r_source", "{polarity}");
        let r_s = o.ideal_values[0].1;
        // Reference 1: bisection on R_S of the textbook self-bias loop.
        let bisected = bisect_r_s(10.0, 10e3, |r| self_bias_i_d(r) - i_d);
        // Reference 2: the closed form R_S = −V_GS/I_D, V_GS = V_P(1 − √(I_D/I_DSS))
        // (textbook, from memory).
        let v_gs = V_P * (1.0 - (i_d / I_DSS).sqrt());
        let closed = -v_gs / i_d;
        assert!(rel(bisected, closed) < 1e-9, "{bisected} vs {closed}");
        // The root finder accepts 1e-6 of I_D; dR_S/R_S is of the same order.
        assert!(
            rel(r_s, bisected) < 1e-5,
            "{polarity}: designed {r_s} Ω, textbook {bisected} Ω"
        );
        assert!(rel(o.ideal.op.i_c, i_d) < 1e-6, "{polarity}");
    }
}

#[test]
fn a_self_biased_jfet_v_ds_target_matches_the_textbook_loop() {
    let chain = Chain::from_json_str(&single_cs("n_jfet", "-2 V")).unwrap();
    let v_ds = 6.0;
    let o = design(&chain, &Request::new(0, Target::Vce(v_ds), Series::E24)).unwrap();
    let r_s = o.ideal_values[0].1;
    // Reference: Kirchhoff's voltage law round the drain loop,
    // V_DS = V_DD − I_D·(R_D + R_S), with I_D from the textbook self-bias loop;
    // bisection on R_S (V_DS rises with R_S).
    let bisected = bisect_r_s(10.0, 10e3, |r| v_ds - (V_DD - self_bias_i_d(r) * (R_D + r)));
    assert!(
        rel(r_s, bisected) < 1e-5,
        "designed {r_s} Ω, textbook {bisected} Ω"
    );
}

#[test]
fn a_centred_jfet_design_has_equal_region_limits_in_plan() {
    for (polarity, v_p) in [("n_jfet", "-2 V"), ("p_jfet", "2 V")] {
        let text = single_cs(polarity, v_p);
        let chain = Chain::from_json_str(&text).unwrap();
        let o = design(&chain, &Request::new(0, Target::Centre, Series::E24)).unwrap();
        // `plan` on the chain with the ideal (unrounded) R_S: the limit toward cutoff
        // equals the one toward ohmic to the root tolerance (docs/definitions.md
        // "Bias": the JFET reading of a centred swing).
        let ideal = with_values(&text, &o.ideal_values);
        let out = common::run(&["plan", "-", "--format", "json"], Some(ideal.as_bytes()));
        let plan: Value = serde_json::from_str(&stdout_of("plan", &out)).unwrap();
        let s = &plan["stages"][0];
        let (up, down) = (
            s["limit_up"].as_f64().unwrap(),
            s["limit_down"].as_f64().unwrap(),
        );
        assert!(rel(up, down) < 1e-6, "{polarity}: {up} V up, {down} V down");
        // The independent flat-network solver of tests/reference agrees.
        let (r_up, r_down) = reference_limits(&ideal, 0);
        assert!(
            rel(r_up, r_down) < 1e-6,
            "{polarity}: reference {r_up} / {r_down}"
        );
    }
    let r_s = |polarity, v_p| {
        let chain = Chain::from_json_str(&single_cs(polarity, v_p)).unwrap();
        design(&chain, &Request::new(0, Target::Centre, Series::E24))
            .unwrap()
            .ideal_values[0]
            .1
    };
    let (n, p) = (r_s("n_jfet", "-2 V"), r_s("p_jfet", "2 V"));
    assert!(rel(n, p) < 1e-6, "n {n} Ω, p {p} Ω");
}

#[test]
fn a_written_jfet_proposal_plans_with_its_numbers() {
    // `bias --write` on the violin demo's common-source stage: `plan` on the written
    // file prints exactly the Q point, limits and gain the proposal reported.
    let tmp = temp_dir("jfet-write");
    let dir = tmp.path();
    let (path, text) = demo("violin-bridge-pickup.json");
    let new = dir.join("violin.json");
    let (path_s, new_s) = (path.to_str().unwrap(), new.to_str().unwrap());
    let report: Value = serde_json::from_str(&stdout_of(
        "bias",
        &run(&[
            "bias", path_s, "--stage", "fet_gain", "--format", "json", "--write", new_s,
        ]),
    ))
    .unwrap();
    let plan: Value = serde_json::from_str(&stdout_of(
        "plan",
        &run(&["plan", new_s, "--format", "json"]),
    ))
    .unwrap();
    let p = &report["proposals"][0];
    let s = plan["stages"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == "fet_gain")
        .unwrap();
    for key in ["i_d", "v_gs", "v_ds"] {
        assert_eq!(
            p["operating_point"][key], s["operating_point"][key],
            "{key}"
        );
    }
    for key in ["limit_up", "limit_down", "gain", "r_in"] {
        assert_eq!(p[key], s[key], "{key}");
    }
    let written = std::fs::read_to_string(&new).unwrap();
    let code = p["values"][0]["code"].as_str().unwrap();
    assert_eq!(p["values"][0]["key"], "r_source");
    assert!(
        written.contains(&format!("\"r_source\": \"{code}\"")),
        "{written}"
    );
    assert_eq!(written.lines().count(), text.lines().count());
    // The CSV names the Q point as plan's JSON does for a JFET.
    let csv = stdout_of(
        "csv",
        &run(&["bias", path_s, "--stage", "fet_gain", "--format", "csv"]),
    );
    assert!(csv.starts_with("row,r_source,i_d,v_ds,"), "{csv}");
}

/// A common-source stage on a gate divider (`r_top` to +15 V, `r_bottom` to ground)
/// with R_S = 1.5 kΩ, the device of [`single_cs`] (no Early effect).
fn divided_cs() -> String {
    single_cs("n_jfet", "-2 V")
        .replace(
            "\"r_bottom\": \"1M\"",
            "\"r_top\": \"4M7\", \"r_bottom\": \"1M\"",
        )
        .replace("\"r_source\": \"150\"", "\"r_source\": \"1k5\"")
}

#[test]
fn a_gate_divider_current_target_matches_the_textbook_square_law() {
    // The gate draws no DC current, so V_G = V_DD·R_B/(R_T + R_B) and
    // V_GS = V_G − I_D·R_S; the square law I_D = I_DSS(1 − V_GS/V_P)² gives
    // V_GS = V_P(1 − √(I_D/I_DSS)) (textbook, from memory), hence the r_top that
    // holds I_D with r_bottom kept: R_T = R_B·(V_DD − V_G)/V_G.
    let chain = Chain::from_json_str(&divided_cs()).unwrap();
    let i_d = 1.5e-3;
    let o = design(&chain, &Request::new(0, Target::Current(i_d), Series::E24)).unwrap();
    assert_eq!(o.moved[0].field.key(), "r_top");
    let v_gs = V_P * (1.0 - (i_d / I_DSS).sqrt());
    let v_g = i_d * 1.5e3 + v_gs;
    let r_top = 1e6 * (V_DD - v_g) / v_g;
    let designed = o.ideal_values[0].1;
    // The root finder accepts 1e-6 of I_D; dR_T/R_T is a few times that here.
    assert!(
        rel(designed, r_top) < 1e-5,
        "designed {designed} Ω, textbook {r_top} Ω"
    );
    assert!(rel(o.ideal.op.i_c, i_d) < 1e-6);
    // No gate current: no divider-current ratio, and a note saying why.
    assert!(o.ideal.divider_ratio.is_none());
    assert!(
        o.notes
            .iter()
            .any(|n| n.contains("gate draws no DC current")),
        "{:?}",
        o.notes
    );
}

#[test]
fn a_centred_gate_divider_design_has_equal_limits_in_the_reference() {
    // The ideal divider written back: the independent flat-network solver of
    // tests/reference finds equal limits toward cutoff and the ohmic edge.
    let text = divided_cs();
    let chain = Chain::from_json_str(&text).unwrap();
    let o = design(&chain, &Request::new(0, Target::Centre, Series::E24)).unwrap();
    let (up, down) = reference_limits(&with_values(&text, &o.ideal_values), 0);
    assert!(rel(up, down) < 1e-5, "reference {up} / {down}");
}

/// A self-biased source follower (gate resistor to ground, r_source to ground, drain
/// on +15 V), the device of [`single_cs`].
fn single_sf() -> String {
    single_cs("n_jfet", "-2 V")
        .replace("\"common_source\"", "\"source_follower\"")
        .replace("\"r_drain\": \"3k3\", ", "")
}

#[test]
fn a_self_biased_follower_current_target_matches_the_textbook_loop() {
    // R_S = −V_GS/I_D with V_GS = V_P(1 − √(I_D/I_DSS)) (textbook, from memory), and
    // the bisection of the self-bias loop as a second reference.
    let chain = Chain::from_json_str(&single_sf()).unwrap();
    let i_d = 1e-3;
    let o = design(&chain, &Request::new(0, Target::Current(i_d), Series::E24)).unwrap();
    assert_eq!(o.moved[0].field.key(), "r_source");
    let closed = -V_P * (1.0 - (i_d / I_DSS).sqrt()) / i_d;
    let bisected = bisect_r_s(10.0, 100e3, |r| self_bias_i_d(r) - i_d);
    assert!(rel(bisected, closed) < 1e-9, "{bisected} vs {closed}");
    let designed = o.ideal_values[0].1;
    assert!(
        rel(designed, closed) < 1e-5,
        "designed {designed} Ω, textbook {closed} Ω"
    );
}

#[test]
fn a_self_biased_follower_cannot_centre_and_says_why() {
    // I_D·R_S = |V_GS| < |V_P| = 2 V keeps the source within 2 V of ground while the
    // drain sits at 15 V: the limit toward cutoff, at most I_D·R_S, never reaches the
    // one toward the ohmic edge (KVL, from the square law's range of V_GS).
    let chain = Chain::from_json_str(&single_sf()).unwrap();
    let err = design(&chain, &Request::new(0, Target::Centre, Series::E24))
        .unwrap_err()
        .to_string();
    assert!(err.contains("|V_P| = 2.00 V"), "{err}");
    assert!(err.contains("I_D·R_S = |V_GS|"), "{err}");
}

#[test]
fn a_jfet_stage_without_divider_or_source_resistor_is_refused_by_name() {
    let bare = single_cs("n_jfet", "-2 V").replace(", \"r_source\": \"150\"", "");
    let chain = Chain::from_json_str(&bare).unwrap();
    let err = design(&chain, &Request::new(0, Target::Centre, Series::E24))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("without a gate divider or a source resistor"),
        "{err}"
    );
}

#[test]
fn a_jfet_drain_resistor_centres_at_the_asked_current() {
    // With --also r_drain, r_source holds I_D at the target and r_drain centres the
    // swing. References: I_D against the target, and the limits of the independent
    // flat-network solver of tests/reference equal on the written ideal values.
    let text = single_cs("n_jfet", "-2 V");
    let chain = Chain::from_json_str(&text).unwrap();
    let mut req = Request::new(0, Target::Current(2e-3), Series::E24);
    req.also = Knob::parse_list(&chain, 0, &["r_drain".to_string()]).unwrap();
    let o = design(&chain, &req).unwrap();
    assert!(rel(o.ideal.op.i_c, 2e-3) < 1e-6);
    let (up, down) = reference_limits(&with_values(&text, &o.ideal_values), 0);
    assert!(rel(up, down) < 1e-5, "reference {up} / {down}");
    // The other source resistor sets V_GS only through the sum: no second knob.
    let err = Knob::parse_list(&chain, 0, &["r_source_bypassed".to_string()])
        .unwrap_err()
        .to_string();
    assert!(err.contains("always designed"), "{err}");
}

#[test]
fn keeping_the_values_names_a_closer_proposal() {
    // docs/definitions.md "Bias" (ranking, our choice): within a quarter series step the
    // present values rank first with nothing changed, and the summary names the closest
    // proposal with changes when it misses by under three quarters of theirs. Its miss
    // is checked on the JSON's own figures, and that it comes closer on `plan`'s limits
    // (the centred target: the two swing limits equal, a load-line construction).
    let (path, _) = demo("mic-preamp.json");
    let path = path.to_str().unwrap();
    let out = run(&[
        "bias", path, "--stage", "second", "--series", "E12", "--format", "json",
    ]);
    let json: Value = serde_json::from_str(&stdout_of("bias", &out)).unwrap();
    let proposals = json["proposals"].as_array().unwrap();
    let kept = &proposals[0];
    assert_eq!(kept["changed"], 0);
    let summary = json["summary"].as_str().unwrap();
    assert!(summary.contains("nothing to change"), "{summary}");
    let k: usize = summary
        .split("proposal ")
        .nth(1)
        .and_then(|s| s.split(' ').next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("no proposal named: {summary}"));
    let closer = &proposals[k - 1];
    let miss = |p: &Value| p["miss"].as_f64().unwrap();
    assert!(closer["changed"].as_u64().unwrap() > 0);
    assert!(
        miss(closer) < 0.75 * miss(kept),
        "{} vs {}",
        miss(closer),
        miss(kept)
    );
    let balance = |p: &Value| {
        let (up, down) = (
            p["limit_up"].as_f64().unwrap(),
            p["limit_down"].as_f64().unwrap().abs(),
        );
        up.max(down) / up.min(down)
    };
    assert!(
        balance(closer) < balance(kept),
        "{} vs {}",
        balance(closer),
        balance(kept)
    );
}

#[test]
fn a_cascode_upper_stage_is_ranked_by_its_own_limits() {
    // docs/definitions.md "Bias": the centre target is equal limits up and down, and a
    // proposal's miss is its residual, (limit toward cutoff − limit toward saturation)
    // / limit toward cutoff (the upper stage's I_C is the lower stage's, which its
    // divider does not move). Reference: each proposal's limits from the independent flat-network solve
    // (tests/reference) of the demo with the proposal's values written; the ranking must
    // follow |limit_up − limit_down| outside the quarter-step band of ties.
    let (_, text) = demo("cascode-input.json");
    let chain = Chain::from_json_str(&text).unwrap();
    let upper = chain.stage_index("upper").unwrap();
    let mut req = Request::new(upper, Target::Centre, Series::E24);
    req.count = 100;
    let o = design(&chain, &req).unwrap();
    // The ideal divider centres the swing (the reference's limits of its values).
    let (up, down) = reference_limits(&with_values(&text, &o.ideal_values), upper);
    assert!(rel(up, down) < 1e-6, "ideal limits +{up} / -{down}");
    let best = o
        .proposals
        .iter()
        .map(|p| p.miss)
        .fold(f64::INFINITY, f64::min);
    let mut ties = Vec::new();
    let mut rest = Vec::new();
    for p in &o.proposals {
        let (up, down) = reference_limits(&with_proposal_of(&text, p), upper);
        // An NPN common base: up toward cutoff (I_C·R_ac), down toward saturation.
        assert!(
            (p.miss - ((up - down) / up).abs()).abs() < 1e-6,
            "miss {} against +{up} / -{down}",
            p.miss
        );
        if p.miss <= best + o.resolution {
            ties.push((up - down).abs());
        } else {
            rest.push((up - down).abs());
        }
    }
    assert!(!rest.is_empty(), "some proposals rank outside the ties");
    let worst_tie = ties.iter().fold(0.0, |a: f64, &b| a.max(b));
    assert!(
        rest.iter().all(|&d| d > worst_tie),
        "{ties:?} then {rest:?}"
    );
    assert!(rest.windows(2).all(|w| w[0] <= w[1]), "{rest:?}");
    // The present values (+3.58 V / -3.46 V) miss by more than the ties: something
    // changes, and the miss is not read as nought.
    let present = o.present.as_ref().unwrap();
    assert!(o.proposals[0].changed > 0);
    let present_miss = present.residuals[0].abs();
    assert!(
        present_miss > best + o.resolution,
        "{present_miss} vs {best}"
    );
    assert!(
        (present_miss - ((present.limit_up - present.limit_down) / present.limit_up).abs()).abs()
            < 1e-12,
        "{present_miss}"
    );
}

#[test]
fn a_cascode_lower_stage_takes_a_current_not_a_centre() {
    // The lower stage's collector is held by the upper stage's emitter (1/g_m of it: its
    // limit toward cutoff is I_C/g_m = V_T, about 26 mV, whatever its divider): there is
    // no swing of its own to centre, and the refusal says where to go instead.
    let (_, text) = demo("cascode-input.json");
    let chain = Chain::from_json_str(&text).unwrap();
    let lower = chain.stage_index("lower").unwrap();
    let e = design(&chain, &Request::new(lower, Target::Centre, Series::E24)).unwrap_err();
    let msg = e.to_string();
    assert!(
        matches!(e, ampchain::bias::BiasError::CascodeLower { .. }),
        "{e:?}"
    );
    assert!(
        msg.contains("--stage upper")
            && msg.contains("--target ic=")
            && msg.contains("--target vce="),
        "{msg}"
    );
    // The pair's current is the lower stage's to set. Reference: the independent
    // flat-network DC solve of the demo with the ideal values written.
    let o = design(
        &chain,
        &Request::new(lower, Target::Current(1.2e-3), Series::E24),
    )
    .unwrap();
    let written = with_values(&text, &o.ideal_values);
    let rc = reference::Chain::from_text(&written).unwrap();
    let dc = reference::solve_dc(&rc).unwrap();
    assert!(rel(dc.op[lower].i_c, 1.2e-3) < 1e-6, "{}", dc.op[lower].i_c);
    assert!(rel(o.proposals[0].metrics.op.i_c, 1.2e-3) < o.resolution);
    // Its own V_CE is a target it can take too (the refusal names it): the same
    // reference with the ideal values for V_CE = 4.5 V written.
    let o = design(&chain, &Request::new(lower, Target::Vce(4.5), Series::E24)).unwrap();
    let written = with_values(&text, &o.ideal_values);
    let dc = reference::solve_dc(&reference::Chain::from_text(&written).unwrap()).unwrap();
    assert!(rel(dc.op[lower].v_ce, 4.5) < 1e-6, "{}", dc.op[lower].v_ce);
}

#[test]
fn present_values_first_by_the_ties_rule_name_the_closer_proposal() {
    // The starter cascode's upper stage: its present values (+3.58 V / -3.48 V) miss by
    // more than a quarter step but within one of the closest proposal, so they rank
    // first (docs/definitions.md "Bias": ties go to fewer changes). The summary must not
    // claim that nothing comes closer; it names the closest shown proposal by the
    // JSON's own misses.
    let tmp = temp_dir("ties");
    let chain = tmp.path().join("cascode.json");
    std::fs::write(&chain, run_ok_text(&["new", "--kind", "cascode"])).unwrap();
    let out = run(&[
        "bias",
        chain.to_str().unwrap(),
        "--stage",
        "upper",
        "--format",
        "json",
    ]);
    let report: Value = serde_json::from_str(&stdout_of("bias", &out)).unwrap();
    let proposals = report["proposals"].as_array().unwrap();
    let miss = |p: &Value| p["miss"].as_f64().unwrap();
    assert_eq!(proposals[0]["changed"], 0, "the present values rank first");
    let (k, closest) = proposals
        .iter()
        .enumerate()
        .filter(|(_, p)| p["changed"] != 0)
        .min_by(|a, b| miss(a.1).total_cmp(&miss(b.1)))
        .unwrap();
    assert!(miss(closest) < miss(&proposals[0]));
    let summary = report["summary"].as_str().unwrap();
    assert!(
        !summary.contains("come closer than the present"),
        "{summary}"
    );
    assert!(
        summary.contains(&format!(
            "proposal {}, which comes closer (misses by {:.1} %)",
            k + 1,
            100.0 * miss(closest)
        )),
        "{summary}"
    );
}

fn run_ok_text(args: &[&str]) -> String {
    String::from_utf8(common::run_ok(args)).unwrap()
}
