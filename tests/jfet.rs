//! JFET devices and stages (docs/definitions.md "JFET") against outside references:
//! the self-bias quadratic solved by hand (algebra), a bisection of the drain and
//! source loops written here, the textbook common-source and source-follower gains,
//! the textbook g_m, the mirror image of a p-JFET, the region limits worked out on the
//! linearised edges, and the channel thermal noise 4kT·(2/3)·g_m.

mod common;

use serde_json::{json, Value};

const I_DSS: f64 = 6e-3;
const V_P: f64 = 2.0; // |V_P|

/// A chain of one JFET stage `stage` on a 12 V supply, driven through 1 kΩ and a
/// 10 µF capacitor, into a 10 kΩ load (`direct`: the load on the output node itself,
/// else through 100 µF).
fn chain(device: Value, stage: Value, direct: bool) -> Value {
    json!({
        "version": 2,
        "title": "test: one JFET stage",
        "supply": "12 V",
        "devices": { "j": device },
        "source": { "resistance": "1k", "level": "-40 dBu" },
        "stages": [stage],
        "loads": [ { "id": "out", "resistance": "10k" } ],
        "links": [
            { "from": "source", "to": "s", "coupling": "10u" },
            { "from": "s", "to": "out", "coupling": if direct { "direct" } else { "100u" } }
        ]
    })
}

fn n_jfet(early: Option<&str>) -> Value {
    let mut d = json!({ "polarity": "n_jfet", "i_dss": "6 mA", "pinch_off_voltage": "-2 V" });
    if let Some(v_a) = early {
        d["early_voltage"] = json!(v_a);
    }
    d
}

fn plan(chain: &Value) -> Value {
    let text = serde_json::to_vec(chain).unwrap();
    let out = common::run(&["plan", "-", "--format", "json"], Some(&text));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

fn close(x: f64, y: f64, rel: f64) -> bool {
    (x - y).abs() <= rel * y.abs().max(1e-300)
}

fn num(v: &Value, key: &str) -> f64 {
    v[key].as_f64().unwrap_or_else(|| panic!("{key} in {v}"))
}

#[test]
fn self_bias_matches_the_textbook_quadratic_and_textbook_g_m() {
    // Reference: I_D = I_DSS(1 − V_GS/V_P)² = −V_GS/R_S solved by hand (algebra):
    // with u = −V_GS, (I_DSS·R_S/V_P²)·u² − (2·I_DSS·R_S/|V_P| + 1)·u + I_DSS·R_S = 0,
    // the root below |V_P|; g_m = 2·I_DSS/|V_P|·(1 − V_GS/V_P) (textbook, no Early effect).
    for r_s in [220.0, 680.0, 2200.0] {
        let stage = json!({ "id": "s", "type": "common_source", "device": "j",
            "r_bottom": "1M", "r_drain": "1k", "r_source": r_s });
        let p = plan(&chain(n_jfet(None), stage, false));
        let s = &p["stages"][0];
        let (a, b, c) = (
            I_DSS * r_s / (V_P * V_P),
            -(2.0 * I_DSS * r_s / V_P + 1.0),
            I_DSS * r_s,
        );
        let u = (-b - (b * b - 4.0 * a * c).sqrt()) / (2.0 * a);
        let op = &s["operating_point"];
        assert!(close(num(op, "v_gs"), -u, 1e-12), "{op}");
        assert!(close(num(op, "i_d"), u / r_s, 1e-12), "{op}");
        assert!(close(num(op, "v_s"), u, 1e-12), "{op}");
        assert!(close(num(op, "v_g"), 0.0, 1e-12) || num(op, "v_g").abs() < 1e-12);
        let g_m = 2.0 * I_DSS / V_P * (1.0 - u / V_P);
        assert!(close(num(&s["small_signal"], "g_m"), g_m, 1e-12), "{s}");
        assert!(
            s["small_signal"]["r_o"].is_null(),
            "r_o without Early effect"
        );
        let mut keys: Vec<&str> = op.as_object().unwrap().keys().map(|k| k.as_str()).collect();
        keys.sort_unstable();
        assert_eq!(keys, ["i_d", "v_d", "v_ds", "v_g", "v_gs", "v_s"]);
    }
}

#[test]
fn divider_bias_with_early_effect_matches_a_bisection_of_the_loops() {
    // Reference: nested bisection of V_G − V_GS − R_S·I_D = 0 and of
    // I_D = I_DSS(1 + V_GS/|V_P|)²(1 + V_DS/V_A) with V_DS = 12 − I_D(R_D + R_S),
    // written here (KCL at source and drain, no gate current).
    let (r_top, r_bottom, r_d, r_s, v_a) = (3.3e6, 1e6, 2200.0, 1500.0, 50.0);
    let stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_top": r_top, "r_bottom": r_bottom, "r_drain": r_d, "r_source": r_s });
    let p = plan(&chain(n_jfet(Some("50 V")), stage, false));
    let op = &p["stages"][0]["operating_point"];
    let v_g = 12.0 * r_bottom / (r_top + r_bottom);
    let i_d_at = |v_gs: f64| {
        let (mut lo, mut hi) = (0.0, 1.0);
        for _ in 0..200 {
            let i = 0.5 * (lo + hi);
            let law = I_DSS * (1.0 + v_gs / V_P).powi(2) * (1.0 + (12.0 - i * (r_d + r_s)) / v_a);
            if law > i {
                lo = i
            } else {
                hi = i
            }
        }
        0.5 * (lo + hi)
    };
    let (mut lo, mut hi) = (-V_P, v_g);
    for _ in 0..200 {
        let v = 0.5 * (lo + hi);
        if v_g - v - r_s * i_d_at(v) > 0.0 {
            lo = v
        } else {
            hi = v
        }
    }
    let v_gs = 0.5 * (lo + hi);
    assert!(close(num(op, "v_gs"), v_gs, 1e-11), "{op} vs {v_gs}");
    assert!(close(num(op, "i_d"), i_d_at(v_gs), 1e-11), "{op}");
    // g_m = 2·I_D/|V_GS − V_P|, r_o = (V_A + V_DS)/I_D (docs/definitions.md).
    let ss = &p["stages"][0]["small_signal"];
    let (i_d, v_ds) = (num(op, "i_d"), num(op, "v_ds"));
    assert!(close(num(ss, "g_m"), 2.0 * i_d / (v_gs + V_P), 1e-12));
    assert!(close(num(ss, "r_o"), (v_a + v_ds) / i_d, 1e-12));
}

#[test]
fn common_source_gain_is_the_textbook_value() {
    // Reference: −g_m·(R_D ∥ R_L ∥ r_o) with the source bypassed, and
    // −g_m·R/(1 + g_m·R_S1) with R_S1 unbypassed and no Early effect (textbook).
    let bypassed = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "2k2", "r_source_bypassed": "470", "c_bypass": "470u" });
    let p = plan(&chain(n_jfet(Some("60 V")), bypassed, false));
    let s = &p["stages"][0];
    let (g_m, r_o) = (
        num(&s["small_signal"], "g_m"),
        num(&s["small_signal"], "r_o"),
    );
    let r = 1.0 / (1.0 / 2200.0 + 1.0 / 10e3 + 1.0 / r_o);
    assert!(
        close(num(s, "gain"), -g_m * r, 1e-9),
        "{} vs {}",
        s["gain"],
        -g_m * r
    );

    let split = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "2k2", "r_source": "150",
        "r_source_bypassed": "330", "c_bypass": "470u" });
    let p = plan(&chain(n_jfet(None), split, false));
    let s = &p["stages"][0];
    let g_m = num(&s["small_signal"], "g_m");
    let r = 1.0 / (1.0 / 2200.0 + 1.0 / 10e3);
    let textbook = -g_m * r / (1.0 + g_m * 150.0);
    assert!(
        close(num(s, "gain"), textbook, 1e-9),
        "{} vs {textbook}",
        s["gain"]
    );
    // The input is the gate resistor alone (no gate current).
    assert!(close(num(s, "r_in"), 1e6, 1e-9));
}

#[test]
fn source_follower_gain_is_the_textbook_value() {
    // Reference: g_m·R/(1 + g_m·R), R = R_S ∥ R_L (textbook, no Early effect).
    let stage = json!({ "id": "s", "type": "source_follower", "device": "j",
        "r_bottom": "10M", "r_source": "2k2" });
    let p = plan(&chain(n_jfet(None), stage, false));
    let s = &p["stages"][0];
    let g_m = num(&s["small_signal"], "g_m");
    let r = 1.0 / (1.0 / 2200.0 + 1.0 / 10e3);
    assert!(
        close(num(s, "gain"), g_m * r / (1.0 + g_m * r), 1e-9),
        "{s}"
    );
    // r_out = R_S ∥ 1/g_m (textbook).
    let r_out = 1.0 / (1.0 / 2200.0 + g_m);
    assert!(close(num(s, "r_out"), r_out, 1e-9), "{s}");
}

#[test]
fn p_jfet_is_the_mirrored_n_jfet() {
    // Reference: the mirror image (docs/definitions.md): the same stage with every
    // voltage negated; magnitudes and gains equal, node voltages and V_GS negated,
    // limits swapping sides.
    let n_stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "2k2", "r_source": "220",
        "r_source_bypassed": "330", "c_bypass": "470u" });
    let n = plan(&chain(n_jfet(Some("70 V")), n_stage, false));
    let mut p_chain = chain(
        json!({ "polarity": "p_jfet", "i_dss": "6 mA", "pinch_off_voltage": "2 V",
                "early_voltage": "70 V" }),
        json!({ "id": "s", "type": "common_source", "device": "j",
            "rails": { "top": "ground", "bottom": "neg" },
            "r_top": "1M", "r_drain": "2k2", "r_source": "220",
            "r_source_bypassed": "330", "c_bypass": "470u" }),
        false,
    );
    p_chain.as_object_mut().unwrap().remove("supply");
    p_chain["supplies"] = json!({ "neg": "-12 V" });
    let p = plan(&p_chain);
    let (a, b) = (&n["stages"][0], &p["stages"][0]);
    for key in ["i_d", "v_ds"] {
        assert!(close(
            num(&b["operating_point"], key),
            num(&a["operating_point"], key),
            1e-12
        ));
    }
    for key in ["v_gs", "v_g", "v_d", "v_s"] {
        let (x, y) = (
            num(&a["operating_point"], key),
            num(&b["operating_point"], key),
        );
        assert!(
            (x + y).abs() <= 1e-12 * x.abs().max(1.0),
            "{key}: {x} vs {y}"
        );
    }
    for key in ["g_m", "r_o"] {
        assert!(close(
            num(&b["small_signal"], key),
            num(&a["small_signal"], key),
            1e-12
        ));
    }
    for key in ["gain", "r_in", "r_out"] {
        assert!(close(num(b, key), num(a, key), 1e-12), "{key}");
    }
    assert!(close(num(b, "limit_up"), num(a, "limit_down"), 1e-12));
    assert!(close(num(b, "limit_down"), num(a, "limit_up"), 1e-12));
}

#[test]
fn region_limits_sit_at_the_linearised_edges() {
    // Reference (algebra on the linearised network, source bypassed, no Early
    // effect): the drain moves by −g_m·R_ac·v_gs. Cutoff: I_D falls to 0 when the
    // drain has risen by I_DQ·R_ac ("cutoff", up). Ohmic: V_DS − (V_GS − V_P) falls
    // by (g_m·R_ac + 1)·v_gs, so the drain falls by (V_DSQ − (V_GSQ − V_P))·g_m·R_ac/
    // (1 + g_m·R_ac) ("ohmic", down).
    let stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "1k5", "r_source_bypassed": "330", "c_bypass": "470u" });
    let p = plan(&chain(n_jfet(None), stage, false));
    let s = &p["stages"][0];
    let op = &s["operating_point"];
    let g_m = num(&s["small_signal"], "g_m");
    let r_ac = 1.0 / (1.0 / 1500.0 + 1.0 / 10e3);
    let up = num(op, "i_d") * r_ac;
    let edge = num(op, "v_ds") - (num(op, "v_gs") + V_P);
    let down = edge * g_m * r_ac / (1.0 + g_m * r_ac);
    assert!(close(num(s, "limit_up"), up, 1e-9), "{s}");
    assert!(close(num(s, "limit_down"), down, 1e-9), "{s}");
    let toward = if down < up { "ohmic" } else { "cutoff" };
    assert_eq!(s["clip_toward"], toward);
}

#[test]
fn channel_thermal_noise_is_four_kt_two_thirds_g_m() {
    // Reference: the channel's 4kT·(2/3)·g_m (long-channel textbook value, from
    // memory) through R_D ∥ R_L to the load (direct-coupled), flat over the band: its share of the
    // output noise power is 4kT·(2/3)·g_m·(R_D ∥ R_L)²·(f_high − f_low), k from the
    // SI Brochure.
    let stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "1k" });
    let c = chain(n_jfet(None), stage, true);
    let g_m = num(&plan(&c)["stages"][0]["small_signal"], "g_m");
    let text = serde_json::to_vec(&c).unwrap();
    let out = common::run(&["noise", "-", "--format", "json"], Some(&text));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let noise: Value = serde_json::from_slice(&out.stdout).unwrap();
    let load = &noise["loads"][0];
    let total = num(load, "output_noise_vrms");
    let channel = load["contributions"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["element"] == "channel_thermal")
        .expect("a channel_thermal contribution");
    assert_eq!(channel["stage"], "s");
    let k = 1.380649e-23;
    let t = 298.15;
    let r = 1.0 / (1.0 / 1000.0 + 1.0 / 10e3);
    let expected = 4.0 * k * t * (2.0 / 3.0) * g_m * r * r * (20e3 - 20.0);
    let got = num(channel, "share") * total * total;
    assert!(close(got, expected, 1e-6), "{got} vs {expected}");
}

#[test]
fn bad_jfet_values_name_their_field() {
    // Common practice, no source: a wrong-signed V_P or an I_DSS of zero is refused.
    for (device, field) in [
        (
            json!({ "polarity": "n_jfet", "i_dss": "6 mA", "pinch_off_voltage": "2 V" }),
            "devices.j.pinch_off_voltage",
        ),
        (
            json!({ "polarity": "p_jfet", "i_dss": "6 mA", "pinch_off_voltage": "-2 V" }),
            "devices.j.pinch_off_voltage",
        ),
        (
            json!({ "polarity": "n_jfet", "i_dss": "-1 mA", "pinch_off_voltage": "-2 V" }),
            "devices.j.i_dss",
        ),
    ] {
        let stage = json!({ "id": "s", "type": "source_follower", "device": "j",
            "r_bottom": "1M", "r_source": "1k" });
        let text = serde_json::to_vec(&chain(device, stage, false)).unwrap();
        let out = common::run(&["plan", "-"], Some(&text));
        assert_eq!(out.status.code(), Some(2));
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(field), "{err}");
    }
}

#[test]
fn sweep_of_both_polarities_agrees_with_plan_at_small_levels() {
    // Reference: `plan`'s small-signal gain (the linearisation of the same square law)
    // for the large-signal network at a level 60 dB below clipping; the p-JFET the
    // mirror image of the n-JFET (docs/definitions.md).
    let n_stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_bottom": "1M", "r_drain": "2k2", "r_source": "220",
        "r_source_bypassed": "330", "c_bypass": "470u" });
    let n = chain(n_jfet(Some("70 V")), n_stage, false);
    let mut p = chain(
        json!({ "polarity": "p_jfet", "i_dss": "6 mA", "pinch_off_voltage": "2 V",
                "early_voltage": "70 V" }),
        json!({ "id": "s", "type": "common_source", "device": "j",
            "rails": { "top": "ground", "bottom": "neg" },
            "r_top": "1M", "r_drain": "2k2", "r_source": "220",
            "r_source_bypassed": "330", "c_bypass": "470u" }),
        false,
    );
    p.as_object_mut().unwrap().remove("supply");
    p["supplies"] = json!({ "neg": "-12 V" });
    let mut gains = Vec::new();
    for c in [&n, &p] {
        let planned = num(&plan(c)["stages"][0], "cumulative_gain");
        let text = serde_json::to_vec(c).unwrap();
        let out = common::run(
            &[
                "sweep", "-", "--format", "json", "--from", "-80 dBu", "--to", "-80 dBu",
            ],
            Some(&text),
        );
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let sweep: Value = serde_json::from_slice(&out.stdout).unwrap();
        let g = num(&sweep["levels"][0]["stages"][0], "cumulative_gain");
        assert!(close(g, planned, 1e-4), "{g} vs {planned}");
        gains.push(g);
    }
    assert!(close(gains[1], gains[0], 1e-9), "{gains:?}");
}

#[test]
fn a_forward_biased_gate_is_warned_about() {
    // Common practice, no source: V_GS above 0 forward-biases the gate junction.
    let stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_top": "1M", "r_bottom": "1M", "r_drain": "100", "r_source": "470" });
    let p = plan(&chain(n_jfet(None), stage, false));
    assert!(num(&p["stages"][0]["operating_point"], "v_gs") > 0.0);
    let warnings = p["warnings"].as_array().expect("warnings");
    assert!(
        warnings.iter().any(|w| w["kind"] == "gate_forward"),
        "{warnings:?}"
    );
}

#[test]
fn spread_of_i_dss_and_v_p_stays_between_the_quadratics_at_the_corners() {
    // Reference: the self-bias quadratic by hand (algebra, as above) at the corners:
    // I_D grows with I_DSS and with |V_P| for a fixed R_S (the root u/R_S rises with
    // both), so every build's I_D lies between the corners (4 mA, −1.2 V) and
    // (9 mA, −3 V), and the nominal build is the (6 mA, −2 V) root.
    let r_s = 550.0;
    let c = json!({
        "version": 2, "title": "test: JFET spread", "supply": "12 V",
        "devices": { "j": { "polarity": "n_jfet",
            "i_dss": { "min": "4 mA", "typical": "6 mA", "max": "9 mA" },
            "pinch_off_voltage": { "min": "-3 V", "typical": "-2 V", "max": "-1.2 V" } } },
        "source": { "resistance": "1k", "level": "-40 dBu" },
        "stages": [ { "id": "s", "type": "common_source", "device": "j", "r_bottom": "1M",
            "r_drain": "1k5", "r_source": "220", "r_source_bypassed": "330", "c_bypass": "470u" } ],
        "loads": [ { "id": "out", "resistance": "10k" } ],
        "links": [ { "from": "source", "to": "s", "coupling": "10u" },
                   { "from": "s", "to": "out", "coupling": "100u" } ]
    });
    let text = serde_json::to_vec(&c).unwrap();
    let out = common::run(
        &["spread", "-", "--runs", "400", "--format", "json"],
        Some(&text),
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let spread: Value = serde_json::from_slice(&out.stdout).unwrap();
    let i_c = &spread["stages"][0]["i_c"];
    let root = |i_dss: f64, v_p: f64| {
        let (a, b, c) = (
            i_dss * r_s / (v_p * v_p),
            -(2.0 * i_dss * r_s / v_p + 1.0),
            i_dss * r_s,
        );
        (-b - (b * b - 4.0 * a * c).sqrt()) / (2.0 * a) / r_s
    };
    let (lo, hi) = (root(4e-3, 1.2), root(9e-3, 3.0));
    assert!(close(num(i_c, "nominal"), root(6e-3, 2.0), 1e-12), "{i_c}");
    assert!(
        num(i_c, "min") >= lo * (1.0 - 1e-12) && num(i_c, "max") <= hi * (1.0 + 1e-12),
        "{i_c}: {lo} … {hi}"
    );
    assert!(
        num(i_c, "max") - num(i_c, "min") > 0.5 * (hi - lo),
        "{i_c}: the builds spread"
    );
}

#[test]
fn supply_filter_feeding_divider_and_drain_matches_the_quadratic_by_hand() {
    // A filter R_F feeding both r_top and r_drain couples gate and drain: the gate
    // draws no current, so KCL at the filtered rail (capacitor open) gives
    // V_F = (V − R_F·I_D)/(1 + R_F/(R_T + R_B)) (Ohm's law) and the divider
    // V_G = V_F·R_B/(R_T + R_B) = a − b·I_D. The source loop is then the self-bias one
    // with R_S + b and a gate at a: with y = V_GS − V_P and D = a + |V_P|,
    // k·y² + y − D = 0, k = (R_S + b)·I_DSS/V_P², physical root y = 2D/(1 + √(1 + 4kD))
    // and I_D = I_DSS·(y/V_P)² (algebra on the textbook square law, no Early effect).
    let (v, r_t, r_b, r_s, r_d, r_f) = (12.0, 4.7e6, 1e6, 1.5e3, 1e3, 1e3);
    let stage = json!({ "id": "s", "type": "common_source", "device": "j",
        "r_top": r_t, "r_bottom": r_b, "r_drain": r_d, "r_source": r_s,
        "supply_filter": { "resistance": r_f, "capacitance": "100u" } });
    let p = plan(&chain(n_jfet(None), stage, false));
    let op = &p["stages"][0]["operating_point"];
    let ratio = r_b / (r_t + r_b);
    let scale = 1.0 + r_f / (r_t + r_b);
    let (a, b) = (v * ratio / scale, r_f * ratio / scale);
    let d = a + V_P;
    let k = (r_s + b) * I_DSS / (V_P * V_P);
    let y = 2.0 * d / (1.0 + (1.0 + 4.0 * k * d).sqrt());
    let i_d = I_DSS * (y / V_P) * (y / V_P);
    let v_f = (v - r_f * i_d) / scale;
    assert!(close(num(op, "i_d"), i_d, 1e-12), "{op}");
    assert!(close(num(op, "v_gs"), y - V_P, 1e-12), "{op}");
    assert!(close(num(op, "v_g"), v_f * ratio, 1e-12), "{op}");
    assert!(close(num(op, "v_d"), v_f - i_d * r_d, 1e-12), "{op}");
    // The rail drop across the filter: the drain's and the divider's current (Ohm's law).
    let drop = v - (num(op, "v_d") + num(op, "i_d") * r_d);
    assert!(close(drop, (i_d + v_f / (r_t + r_b)) * r_f, 1e-9), "{drop}");
}
