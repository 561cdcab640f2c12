//! The bipolar family on named rails: PNP stages, split rails, the device's series
//! resistances. Each check names its outside reference.

mod common;

use serde_json::{json, Value};
use std::process::Command;

/// `ampchain plan --format json` on a chain given as JSON.
fn plan(chain: &Value) -> Value {
    json_of("plan", chain)
}

/// `ampchain COMMAND CHAIN --format json` on a chain given as JSON; panics unless it
/// succeeds.
fn json_of(command: &str, chain: &Value) -> Value {
    let out = run(&[command], chain, &["--format", "json"]);
    assert!(
        out.status.success(),
        "{command} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// `ampchain ARGS CHAIN EXTRA` on a chain given as JSON, written to a folder of its own
/// (tests run in parallel); its output as it is.
fn run(args: &[&str], chain: &Value, extra: &[&str]) -> std::process::Output {
    let tmp = common::scratch("bipolar");
    let dir = tmp.path();
    let path = dir.join("chain.json");
    std::fs::write(&path, serde_json::to_string_pretty(chain).unwrap()).unwrap();
    Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(args)
        .arg(&path)
        .args(extra)
        .output()
        .unwrap()
}

fn close(a: f64, b: f64, rel: f64, what: &str) {
    assert!(
        (a - b).abs() <= rel * a.abs().max(b.abs()),
        "{what}: {a} against {b} (allowed {rel} relative)"
    );
}

fn f(v: &Value, path: &[&str]) -> f64 {
    let mut x = v;
    for p in path {
        x = &x[*p];
    }
    x.as_f64()
        .unwrap_or_else(|| panic!("{path:?} is not a number: {x}"))
}

/// A two-stage NPN chain on one positive supply: a divider-biased common emitter
/// capacitor-coupled into a follower.
fn npn_chain() -> Value {
    json!({
        "supply": "12 V",
        "devices": { "q": { "polarity": "npn", "beta": 180, "saturation_current": "8f",
                             "early_voltage": "90 V" } },
        "source": { "resistance": "2k2", "level": "20 mV" },
        "stages": [
            { "id": "gain", "type": "common_emitter", "device": "q",
              "r_top": "82k", "r_bottom": "15k", "r_collector": "5k6",
              "r_emitter": "180", "r_emitter_bypassed": "820", "c_bypass": "100u" },
            { "id": "buffer", "type": "emitter_follower", "device": "q",
              "r_top": "47k", "r_bottom": "47k", "r_emitter": "2k2" }
        ],
        "loads": [ { "id": "out", "resistance": "10k" } ],
        "links": [
            { "from": "source", "to": "gain", "coupling": "1u" },
            { "from": "gain", "to": "buffer", "coupling": "4u7" },
            { "from": "buffer", "to": "out", "coupling": "10u" }
        ]
    })
}

#[test]
fn a_pnp_stage_is_its_mirrored_npn_stage() {
    // Reference: the device equations with every voltage negated (docs/definitions.md: a PNP's
    // values are magnitudes, I_C = I_S·e^(V_EB/V_T)(1 + V_EC/V_A)). The mirror image of
    // the NPN chain on +12 V is a PNP chain on −12 V whose collector sides go to the
    // bottom rail: r_top/r_bottom keep their sides, so their values swap. Every
    // magnitude must agree to 1e-12, node voltages must be negated, and each stage's
    // limits swap sides (the output moves the other way).
    let npn = npn_chain();
    let mut pnp = npn.clone();
    pnp.as_object_mut().unwrap().remove("supply");
    pnp["supplies"] = json!({ "vee": "-12 V" });
    pnp["devices"]["q"]["polarity"] = json!("pnp");
    for s in pnp["stages"].as_array_mut().unwrap() {
        let (top, bottom) = (s["r_top"].clone(), s["r_bottom"].clone());
        s["r_top"] = bottom;
        s["r_bottom"] = top;
        s["rails"] = json!({ "top": "ground", "bottom": "vee" });
    }
    let (a, b) = (plan(&npn), plan(&pnp));
    for k in 0..2 {
        let (sa, sb) = (&a["stages"][k], &b["stages"][k]);
        for key in ["i_c", "i_b", "i_e", "v_be", "v_ce", "v_be_junction"] {
            close(
                f(sa, &["operating_point", key]),
                f(sb, &["operating_point", key]),
                1e-12,
                key,
            );
        }
        for key in ["v_b", "v_c", "v_e"] {
            close(
                f(sa, &["operating_point", key]),
                -f(sb, &["operating_point", key]),
                1e-12,
                key,
            );
        }
        for key in [
            "r_in",
            "r_out",
            "load",
            "gain",
            "cumulative_gain",
            "clip_input_vpeak",
        ] {
            close(f(sa, &[key]), f(sb, &[key]), 1e-12, key);
        }
        close(
            f(sa, &["limit_up"]),
            f(sb, &["limit_down"]),
            1e-12,
            "limit_up",
        );
        close(
            f(sa, &["limit_down"]),
            f(sb, &["limit_up"]),
            1e-12,
            "limit_down",
        );
        assert_eq!(sa["clip_toward"], sb["clip_toward"]);
        for line in ["dc_load_line", "ac_load_line"] {
            for key in ["v_ce_intercept", "i_c_intercept", "slope"] {
                close(f(sa, &[line, key]), f(sb, &[line, key]), 1e-12, key);
            }
        }
    }
    close(
        f(&a["loads"][0], &["gain"]),
        f(&b["loads"][0], &["gain"]),
        1e-12,
        "load gain",
    );
}

#[test]
fn split_rails_move_node_voltages_and_nothing_else() {
    // Reference: Kirchhoff's laws see only voltage differences. The NPN chain on
    // +12 V against ground equals the same chain on rails +6 V / −6 V with every
    // stage's bottom on −6 V: every current, gain and limit agrees, every node voltage
    // is 6 V lower (the source and load are capacitor-coupled, and every rail is AC
    // ground in both).
    let single = npn_chain();
    let mut split = single.clone();
    split.as_object_mut().unwrap().remove("supply");
    split["supplies"] = json!({ "vcc": "+6 V", "vee": "-6 V" });
    for s in split["stages"].as_array_mut().unwrap() {
        s["rails"] = json!({ "top": "vcc", "bottom": "vee" });
    }
    let (a, b) = (plan(&single), plan(&split));
    for k in 0..2 {
        let (sa, sb) = (&a["stages"][k], &b["stages"][k]);
        for key in ["i_c", "i_b", "v_be", "v_ce"] {
            close(
                f(sa, &["operating_point", key]),
                f(sb, &["operating_point", key]),
                1e-12,
                key,
            );
        }
        for key in ["v_b", "v_c", "v_e"] {
            close(
                f(sa, &["operating_point", key]) - 6.0,
                f(sb, &["operating_point", key]),
                1e-12,
                key,
            );
        }
        for key in ["r_in", "r_out", "gain", "limit_up", "limit_down"] {
            close(f(sa, &[key]), f(sb, &[key]), 1e-12, key);
        }
    }
}

#[test]
fn base_resistance_drops_the_base_current() {
    // Reference: Ohm's law, V_B(terminal) − V_B'(junction side) = I_B·r_bb'; and the
    // handbook input resistance of a grounded-emitter stage without a divider,
    // r_in = r_bb' + r_π (r_π = V_T/I_B, docs/definitions.md), from memory.
    let chain = json!({
        "supply": "9 V",
        "devices": { "q": { "polarity": "npn", "beta": 250, "base_resistance": "330" } },
        "source": { "resistance": "600", "level": "1 mV" },
        "stages": [
            { "id": "amp", "type": "common_emitter", "device": "q",
              "r_top": "2M2", "r_collector": "4k7", "r_emitter": "1k",
              "r_emitter_bypassed": "0.001", "c_bypass": "1" }
        ],
        "loads": [ { "id": "out", "resistance": "1G" } ],
        "links": [
            { "from": "source", "to": "amp", "coupling": "10u" },
            { "from": "amp", "to": "out", "coupling": "10u" }
        ]
    });
    let p = plan(&chain);
    let op = &p["stages"][0]["operating_point"];
    let (v_be, v_j, i_b) = (f(op, &["v_be"]), f(op, &["v_be_junction"]), f(op, &["i_b"]));
    close(v_be - v_j, i_b * 330.0, 1e-9, "I_B·r_bb'");
    // AC: the 1 mΩ bypassed part is shorted at midband and r_emitter = 1 kΩ stays, so
    // r_in = r_top ∥ (r_bb' + r_π + (β+1)·R_E) without r_o.
    let v_t = f(&p, &["thermal_voltage"]);
    let r_pi = v_t / i_b;
    let alpha_ratio = f(op, &["i_e"]) / i_b; // β+1 at the Q point (no Early effect)
    let into_base = 330.0 + r_pi + alpha_ratio * 1e3;
    let expected = 1.0 / (1.0 / 2.2e6 + 1.0 / into_base);
    close(f(&p["stages"][0], &["r_in"]), expected, 1e-9, "r_in");
}

#[test]
fn collector_resistance_moves_vce_to_the_terminals_only() {
    // Reference: a resistor in series with an ideal current source changes no current
    // (without the Early effect the collector is one): I_C, the gain −g_m·(R_C ∥ R_L)
    // and r_in are those of the stage without r_c, and V_CE at the terminals is the
    // same, since r_c sits between the terminal and the device (docs/definitions.md: V_CE and
    // the saturation edge at the terminals).
    let plain = npn_chain();
    let mut with_rc = plain.clone();
    with_rc["devices"]["q"]
        .as_object_mut()
        .unwrap()
        .remove("early_voltage");
    let mut no_va = plain.clone();
    no_va["devices"]["q"]
        .as_object_mut()
        .unwrap()
        .remove("early_voltage");
    with_rc["devices"]["q"]["collector_resistance"] = json!("15");
    let (a, b) = (plan(&no_va), plan(&with_rc));
    for k in 0..2 {
        let (sa, sb) = (&a["stages"][k], &b["stages"][k]);
        for key in ["i_c", "v_ce", "v_c"] {
            close(
                f(sa, &["operating_point", key]),
                f(sb, &["operating_point", key]),
                1e-12,
                key,
            );
        }
        for key in ["gain", "r_in", "limit_up", "limit_down"] {
            close(f(sa, &[key]), f(sb, &[key]), 1e-9, key);
        }
    }
}

/// A common-base stage fed from a source through a capacitor, into a load.
fn common_base_chain(early: Option<&str>) -> Value {
    let mut device = json!({ "polarity": "npn", "beta": 150, "saturation_current": "12f" });
    if let Some(v_a) = early {
        device["early_voltage"] = json!(v_a);
    }
    json!({
        "supply": "15 V",
        "devices": { "q": device },
        "source": { "resistance": "50", "level": "5 mV" },
        "stages": [
            { "id": "cb", "type": "common_base", "device": "q",
              "r_top": "56k", "r_bottom": "22k", "c_base": "47u",
              "r_emitter": "3k3", "r_collector": "6k8" }
        ],
        "loads": [ { "id": "out", "resistance": "22k" } ],
        "links": [
            { "from": "source", "to": "cb", "coupling": "22u" },
            { "from": "cb", "to": "out", "coupling": "10u" }
        ]
    })
}

#[test]
fn common_base_input_and_gain_are_the_textbook_ones() {
    // Reference (textbook, from memory): looking into the emitter of a grounded-base
    // transistor, r_e = V_T/I_E, so r_in = R_E ∥ r_e; the gain is
    // g_m·(R_C ∥ R_L). Both are exact for the hybrid-π without r_o (r_π/(β+1) = V_T/I_E
    // when I_E = (β+1)·I_B), so they must agree to 1e-9.
    let p = plan(&common_base_chain(None));
    let s = &p["stages"][0];
    let v_t = f(&p, &["thermal_voltage"]);
    let (i_e, i_c) = (
        f(s, &["operating_point", "i_e"]),
        f(s, &["operating_point", "i_c"]),
    );
    let r_e = v_t / i_e;
    close(f(s, &["r_in"]), 3.3e3 * r_e / (3.3e3 + r_e), 1e-9, "r_in");
    let r_ac = 6.8e3 * 22e3 / (6.8e3 + 22e3);
    close(f(s, &["gain"]), i_c / v_t * r_ac, 1e-9, "gain");
    // With r_o, a hand analysis of the grounded-base hybrid-π (KCL at the collector,
    // whose load is G_L = 1/(R_C ∥ R_L); derivation by hand): the emitter admits
    // Y = g_π + (g_m + g_o)·G_L/(G_L + g_o), exact, so to 1e-9 again; r_e = V_T/I_E
    // alone is then about 8 % low here (r_o ≈ 47 kΩ against R_C ∥ R_L ≈ 5.2 kΩ).
    let p = plan(&common_base_chain(Some("60 V")));
    let s = &p["stages"][0];
    let op = &s["operating_point"];
    let (i_c, i_b, v_ce) = (f(op, &["i_c"]), f(op, &["i_b"]), f(op, &["v_ce"]));
    let (g_m, g_pi, g_o) = (i_c / v_t, i_b / v_t, i_c / (60.0 + v_ce));
    let g_l = 1.0 / r_ac;
    let y = g_pi + (g_m + g_o) * g_l / (g_l + g_o);
    close(
        f(s, &["r_in"]),
        1.0 / (1.0 / 3.3e3 + y),
        1e-9,
        "r_in with r_o",
    );
}

#[test]
fn common_base_limits_are_its_region_limits() {
    // Reference: the load-line construction (common practice, no source). Without
    // r_o the collector current follows the emitter's, and the collector moves by
    // −i_c·(R_C ∥ R_L): I_C reaches 0 when the output has risen by I_CQ·(R_C ∥ R_L)
    // (cutoff, "up"). V_CE falls both by the collector's fall and by the emitter's rise
    // v_e = v_out/gain, which falls with it (the stage does not invert): saturation is
    // reached when the output has fallen by (V_CEQ − V_CE,sat)/(1 − 1/gain) ("down").
    let p = plan(&common_base_chain(None));
    let s = &p["stages"][0];
    let op = &s["operating_point"];
    let r_ac = 6.8e3 * 22e3 / (6.8e3 + 22e3);
    close(
        f(s, &["limit_up"]),
        f(op, &["i_c"]) * r_ac,
        1e-9,
        "limit_up",
    );
    let gain = f(s, &["gain"]);
    let expected_down = (f(op, &["v_ce"]) - 0.2) / (1.0 - 1.0 / gain);
    close(f(s, &["limit_down"]), expected_down, 1e-9, "limit_down");
    let toward = if f(s, &["limit_up"]) < expected_down {
        "cutoff"
    } else {
        "saturation"
    };
    assert_eq!(s["clip_toward"], json!(toward));
}

/// A collector-feedback common emitter: R_F from collector to base, no divider.
fn feedback_chain(r_emitter: Option<&str>) -> Value {
    let mut stage = json!({ "id": "fb", "type": "common_emitter", "device": "q",
                            "r_collector": "4k7", "r_feedback": "330k" });
    if let Some(r) = r_emitter {
        stage["r_emitter"] = json!(r);
    }
    json!({
        "supply": "12 V",
        "devices": { "q": { "polarity": "npn", "beta": 200, "saturation_current": "10f" } },
        "source": { "resistance": "1k", "level": "1 mV" },
        "stages": [ stage ],
        "loads": [ { "id": "out", "resistance": "47k" } ],
        "links": [
            { "from": "source", "to": "fb", "coupling": "1u" },
            { "from": "fb", "to": "out", "coupling": "10u" }
        ]
    })
}

#[test]
fn collector_feedback_bias_is_the_textbook_one() {
    // Reference (textbook, from memory): I_C ≈ (V_CC − V_BE)/(R_C + R_F/β). It drops
    // the base current in R_C, i.e. takes (I_C + I_B)·R_C as I_C·R_C: exactly
    // V_CC − V_BE = I_C·(R_C·(1 + 1/β) + R_F/β) without the Early effect, with V_BE from
    // the solution. So the formula is high by the factor (R_C(1 + 1/β) + R_F/β)/(R_C + R_F/β),
    // and the exact form must hold to 1e-9.
    let p = plan(&feedback_chain(None));
    let op = &p["stages"][0]["operating_point"];
    let (i_c, v_be) = (f(op, &["i_c"]), f(op, &["v_be"]));
    let (r_c, r_f, beta) = (4.7e3, 330e3, 200.0);
    let exact = (12.0 - v_be) / (r_c * (1.0 + 1.0 / beta) + r_f / beta);
    close(i_c, exact, 1e-9, "I_C (exact loop)");
    let textbook = (12.0 - v_be) / (r_c + r_f / beta);
    let dropped = (r_c * (1.0 + 1.0 / beta) + r_f / beta) / (r_c + r_f / beta) - 1.0;
    close(i_c, textbook, 1.01 * dropped, "I_C (textbook)");
}

#[test]
fn collector_feedback_input_is_the_miller_form() {
    // Reference (textbook, from memory): R_F seen from the base is R_F/(1 + |A_v|)
    // (Miller), in parallel with the transistor's own r_π (grounded emitter). The Miller
    // form takes the gain with R_F's own loading of the collector; it is exact for the
    // node equations, so r_in = (R_F/(1 + |A_v|)) ∥ r_π to 1e-9 with A_v the reported gain.
    let p = plan(&feedback_chain(None));
    let s = &p["stages"][0];
    let v_t = f(&p, &["thermal_voltage"]);
    let r_pi = v_t / f(s, &["operating_point", "i_b"]);
    let miller = 330e3 / (1.0 + f(s, &["gain"]).abs());
    close(
        f(s, &["r_in"]),
        1.0 / (1.0 / miller + 1.0 / r_pi),
        1e-9,
        "r_in",
    );
    // A feedback stage uses region limits: its cutoff side is where I_C reaches 0.
    assert!(f(s, &["limit_up"]) > 0.0 && f(s, &["limit_down"]) > 0.0);
}

#[test]
fn supply_filter_drops_the_stage_current() {
    // Reference: Ohm's law and Kirchhoff's current law, exact. The filtered top node
    // sits at V_supply − R·I_total, I_total the current of every top connection
    // (r_top and R_C). Its voltage is not reported, so it is found here from the
    // reported base and collector voltages by KCL; then the program's own figures must
    // agree with it: the dissipation it reports for R (from its node voltages) is
    // R·I_total², and its transistor's I_C is the current through R_C.
    let mut chain = npn_chain();
    chain["stages"][0]["supply_filter"] = json!({ "resistance": "1k", "capacitance": "100u" });
    let p = plan(&chain);
    let s = &p["stages"][0];
    let op = &s["operating_point"];
    let (v_b, v_c) = (f(op, &["v_b"]), f(op, &["v_c"]));
    // V_top from KCL: (12 − V_top)/1k = (V_top − V_B)/82k + (V_top − V_C)/5k6.
    let (g_f, g_t, g_c) = (1.0 / 1e3, 1.0 / 82e3, 1.0 / 5.6e3);
    let v_top = (12.0 * g_f + v_b * g_t + v_c * g_c) / (g_f + g_t + g_c);
    let i_total = (12.0 - v_top) * g_f;
    let p_f = f(
        &s["dissipation"]["resistors"],
        &["supply_filter.resistance"],
    );
    close(p_f, 1e3 * i_total * i_total, 1e-9, "P(R_f)");
    // I_C = (V_top − V_C)/R_C: the collector's only DC path.
    close(
        f(op, &["i_c"]),
        (v_top - v_c) * g_c,
        1e-9,
        "I_C through R_C",
    );
}

#[test]
fn response_names_each_stage_capacitor_by_its_key() {
    // The attribution lists c_base and the supply filter's capacitor under their
    // chain-file keys (a report-format check: element "bypass", field the key).
    let mut chain = common_base_chain(None);
    chain["stages"][0]["supply_filter"] = json!({ "resistance": "470", "capacitance": "47u" });
    let text = serde_json::to_string_pretty(&json_of("response", &chain)).unwrap();
    for key in [
        "\"field\": \"c_base\"",
        "\"field\": \"supply_filter.capacitance\"",
    ] {
        assert!(text.contains(key), "response JSON lacks {key}");
    }
}

/// A cascode: a common emitter (fully bypassed emitter) without `r_collector`, its
/// collector wired to a common-base emitter without `r_emitter`; `early` sets V_A.
fn cascode_chain(early: Option<&str>) -> Value {
    let mut device = json!({ "polarity": "npn", "beta": 250, "saturation_current": "9f" });
    if let Some(v_a) = early {
        device["early_voltage"] = json!(v_a);
    }
    json!({
        "version": 2,
        "supply": "15 V",
        "devices": { "q": device },
        "source": { "resistance": "600", "level": "1 mV" },
        "stages": [
            { "id": "lower", "type": "common_emitter", "device": "q",
              "r_top": "68k", "r_bottom": "15k",
              "r_emitter_bypassed": "2k2", "c_bypass": "220u" },
            { "id": "upper", "type": "common_base", "device": "q",
              "r_top": "39k", "r_bottom": "47k", "c_base": "47u", "r_collector": "3k9" }
        ],
        "loads": [ { "id": "out", "resistance": "47k" } ],
        "links": [
            { "from": "source", "to": "lower", "coupling": "10u" },
            { "from": "lower", "to": "upper", "coupling": "direct" },
            { "from": "upper", "to": "out", "coupling": "10u" }
        ]
    })
}

#[test]
fn cascode_gain_is_the_textbook_one() {
    // Reference (textbook, from memory): the cascode's gain from the lower base to the
    // upper collector is −g_m1·R_C (here R_C ∥ R_L), the lower collector current
    // passing the upper transistor with its α₂ = β/(β + 1). Without r_o (no Early
    // effect) that is exact for the hybrid-π: −α₂·g_m1·(R_C ∥ R_L), to 1e-9.
    let p = plan(&cascode_chain(None));
    let v_t = f(&p, &["thermal_voltage"]);
    let (lower, upper) = (&p["stages"][0], &p["stages"][1]);
    let g_m1 = f(lower, &["operating_point", "i_c"]) / v_t;
    let alpha2 = 250.0 / 251.0;
    let r_ac = 3.9e3 * 47e3 / (3.9e3 + 47e3);
    let a = f(lower, &["gain"]) * f(upper, &["gain"]);
    close(a, -alpha2 * g_m1 * r_ac, 1e-9, "cascode gain without r_o");
    // The upper transistor carries the lower one's whole collector current:
    // I_C2 = α₂·I_C1 (KCL at the shared node, exact).
    close(
        f(upper, &["operating_point", "i_c"]),
        alpha2 * f(lower, &["operating_point", "i_c"]),
        1e-12,
        "I_C2 = α₂·I_C1",
    );
    // The lower stage's load is the upper emitter: r_e2 = V_T/I_E2 (textbook, exact
    // without r_o), so the lower collector hardly moves (gain about −1).
    close(
        f(lower, &["load"]),
        v_t / f(upper, &["operating_point", "i_e"]),
        1e-9,
        "lower load = r_e2",
    );
    // With r_o (V_A = 60 V) the textbook form drops the terms in R_C/r_o; here
    // R_C ∥ R_L ≈ 3.6 kΩ against r_o ≈ 65 kΩ, so it holds within 3 %.
    let p = plan(&cascode_chain(Some("60 V")));
    let (lower, upper) = (&p["stages"][0], &p["stages"][1]);
    let g_m1 = f(lower, &["operating_point", "i_c"]) / v_t;
    let a = f(lower, &["gain"]) * f(upper, &["gain"]);
    close(a, -g_m1 * r_ac, 0.03, "cascode gain with r_o");
    // The lower collector alone is a current source: with its emitter at AC ground
    // and no C_bc at midband nothing feeds back (y12 = 0), so r_out is the hybrid-π's
    // r_o = (V_A + V_CE)/I_C (textbook, from memory), exact.
    let op = &lower["operating_point"];
    close(
        f(lower, &["r_out"]),
        (60.0 + f(op, &["v_ce"])) / f(op, &["i_c"]),
        1e-9,
        "lower r_out = r_o",
    );
}

#[test]
fn a_collector_without_a_dc_path_is_refused() {
    // The cascode's lower stage capacitor-coupled to the upper: its collector has no
    // DC path at all (Kirchhoff's current law leaves I_C nowhere to go).
    let mut chain = cascode_chain(None);
    chain["links"][1]["coupling"] = json!("1u");
    chain["stages"][1]["r_emitter"] = json!("3k3");
    let out = run_plan(&chain);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("stage \"lower\": found no DC path to its collector")
            && err.contains("r_collector"),
        "{err}"
    );
    // The cascode's upper stage without r_collector: the same, named for it.
    let mut chain = cascode_chain(None);
    chain["stages"][1]
        .as_object_mut()
        .unwrap()
        .remove("r_collector");
    let err = String::from_utf8_lossy(&run_plan(&chain).stderr).into_owned();
    assert!(
        err.contains("stage \"upper\": found no DC path to its collector"),
        "{err}"
    );
}

/// `ampchain plan` on a chain given as JSON, its output as it is.
fn run_plan(chain: &Value) -> std::process::Output {
    run(&["plan"], chain, &[])
}

#[test]
fn a_current_fed_emitter_has_a_flat_dc_load_line_and_draws() {
    // Without the Early effect the lower collector is an ideal current source: the
    // upper transistor's I_C cannot move with V_CE, so its DC load line is I_C = I_CQ
    // (KCL at the emitter, exact; docs/definitions.md).
    let chain = cascode_chain(None);
    let p = plan(&chain);
    let upper = &p["stages"][1];
    let line = &upper["dc_load_line"];
    assert!(line["v_ce_intercept"].is_null(), "{line}");
    assert_eq!(f(line, &["slope"]), 0.0);
    close(
        f(line, &["i_c_intercept"]),
        f(upper, &["operating_point", "i_c"]),
        1e-15,
        "I_C intercept = I_CQ",
    );
    // The load-line charts are drawn (the flat line to the chart's edge), within
    // seconds: an infinite intercept once kept the chart's axis search running.
    let tmp = common::scratch("flat-line");
    let dir = tmp.path();
    let path = dir.join("chain.json");
    std::fs::write(&path, serde_json::to_string(&chain).unwrap()).unwrap();
    let mut child = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(["plot", "loadlines", path.to_str().unwrap(), "-o"])
        .arg(dir.join("charts"))
        .spawn()
        .unwrap();
    let start = std::time::Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break status;
        }
        if start.elapsed() > std::time::Duration::from_secs(30) {
            child.kill().ok();
            panic!("plot loadlines did not finish in 30 s");
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    };
    assert!(status.success());
    let svg = std::fs::read_to_string(dir.join("charts").join("upper.svg")).unwrap();
    assert!(!svg.contains("NaN") && !svg.contains("inf"));
}
