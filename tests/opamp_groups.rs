//! Op-amp stages joined to transistor stages by direct links (docs/definitions.md
//! "Op-amp": one DC group, solved as one network), against hand analysis: the
//! textbook non-inverting form A_0/(1 + A_0·β) and its ideal limit 1 + R_f/R_g, the
//! textbook emitter-follower gain (β + 1)·R_E/(r_π + (β + 1)·R_E) (hybrid-π, no Early
//! effect), and KCL and Ohm's law at the nodes (any circuits text, from memory).

mod common;

use serde_json::Value;

fn plan_json(text: &str) -> Value {
    let out = common::run(&["plan", "-", "--format", "json"], Some(text.as_bytes()));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON output")
}

/// A BJT follower (divider-biased) direct into a non-inverting op-amp stage without
/// `r_bias` (its + input takes the follower's emitter level), whose pin drives a
/// second follower's base directly; split ±15 V rails, op-amp reference at `v_ref`.
fn buffer_opamp_follower(a_0: f64, v_ref: f64) -> String {
    format!(
        r#"{{ "version": 2, "supplies": {{ "vcc": "15 V", "vee": "-15 V" }},
  "devices": {{
    "q": {{ "polarity": "npn", "beta": 200, "saturation_current": "10f" }},
    "u": {{ "polarity": "opamp", "open_loop_gain": {a_0}, "gain_bandwidth": "3 MHz" }} }},
  "source": {{ "resistance": "1k", "level": "100 mV" }},
  "stages": [
    {{ "id": "buf", "type": "emitter_follower", "device": "q", "r_top": "100k", "r_bottom": "100k",
       "r_emitter": "10k", "rails": {{ "top": "vcc", "bottom": "vee" }} }},
    {{ "id": "gain", "type": "opamp_noninverting", "device": "u", "r_feedback": "22k",
       "r_ground": "2k2", "reference": {v_ref}, "rails": {{ "top": "vcc", "bottom": "vee" }} }},
    {{ "id": "out", "type": "emitter_follower", "device": "q", "r_emitter": "4k7",
       "rails": {{ "top": "vcc", "bottom": "vee" }} }} ],
  "loads": [ {{ "id": "line", "resistance": "10k" }} ],
  "links": [
    {{ "from": "source", "to": "buf", "coupling": "4u7" }},
    {{ "from": "buf", "to": "gain", "coupling": "direct" }},
    {{ "from": "gain", "to": "out", "coupling": "direct" }},
    {{ "from": "out", "to": "line", "coupling": "10u" }} ] }}"#
    )
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("a number, found {v}"))
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * b.abs()
}

#[test]
fn a_follower_direct_into_a_noninverting_stage_by_hand() {
    let (r_f, r_g, r_e) = (22e3, 2.2e3, 10e3);
    let beta_fb = r_g / (r_g + r_f);
    for (a_0, v_ref) in [(1e5, 0.0), (3e4, -0.5), (1e5, -1.5)] {
        let v = plan_json(&buffer_opamp_follower(a_0, v_ref));
        let (buf, amp, out) = (&v["stages"][0], &v["stages"][1], &v["stages"][2]);
        // The + input sits on the follower's emitter (a direct link is a wire). With
        // r_in = ∞ and r_out = 0: v_out = A_0·(v₊ − v₋), v₋ = V_ref + β·(v_out − V_ref),
        // so v_out = A_0·(v₊ − (1 − β)·V_ref)/(1 + A_0·β) (textbook, solved by hand).
        let v_plus = num(&buf["operating_point"]["v_e"]);
        let v_out = num(&amp["operating_point"]["v_out"]);
        let want = a_0 * (v_plus - (1.0 - beta_fb) * v_ref) / (1.0 + a_0 * beta_fb);
        assert!(close(v_out, want, 1e-12), "{v_out} vs {want}");
        // The pin feeds R_f + R_g to the reference and the second follower's base:
        // KCL at the pin (Ohm's law; r_in = ∞ carries nothing).
        let i_b = num(&out["operating_point"]["i_b"]);
        let i_out = num(&amp["operating_point"]["i_out"]);
        let want = (v_out - v_ref) / (r_f + r_g) + i_b;
        assert!(close(i_out, want, 1e-12), "{i_out} vs {want}");
        // The second follower's base is the pin.
        assert!(close(num(&out["operating_point"]["v_b"]), v_out, 1e-14));
        // Gains: the op-amp stage A_0/(1 + A_0·β) whatever it drives (r_out = 0); the
        // first follower unloaded by the + input (r_in = ∞, no r_bias): the textbook
        // (β + 1)·R_E/(r_π + (β + 1)·R_E), r_π = β/g_m, g_m = I_C/V_T (no Early effect).
        let gain = num(&amp["gain"]);
        let want = a_0 / (1.0 + a_0 * beta_fb);
        assert!(close(gain, want, 1e-12), "{gain} vs {want}");
        assert!(
            buf["load"].is_null(),
            "the + input loads nothing: {}",
            buf["load"]
        );
        let r_pi = num(&buf["small_signal"]["r_pi"]);
        let g_m = num(&buf["small_signal"]["g_m"]);
        assert!(close(r_pi, 200.0 / g_m, 1e-12));
        let follower = 201.0 * r_e / (r_pi + 201.0 * r_e);
        assert!(close(num(&buf["gain"]), follower, 1e-12));
        // So the pair gains (1 + R_f/R_g)·follower gain within 1/(A_0·β) (the ideal
        // op-amp limit, textbook).
        let pair = num(&buf["gain"]) * gain;
        let ideal = (1.0 + r_f / r_g) * follower;
        assert!(
            ((pair - ideal) / ideal).abs() <= 1.0 / (a_0 * beta_fb),
            "{pair} vs {ideal}"
        );
    }
}

#[test]
fn the_ideal_op_amp_limit_holds_within_one_over_the_loop_gain() {
    // A_0 = 10^9: the op-amp stage's gain and rest level reach the ideal
    // 1 + R_f/R_g and V_ref + (1 + R_f/R_g)·(v₊ − V_ref) within 1/(A_0·β) (textbook).
    let (r_f, r_g) = (22e3, 2.2e3);
    let a_0 = 1e9;
    let t = a_0 * r_g / (r_g + r_f);
    let v = plan_json(&buffer_opamp_follower(a_0, 0.0));
    let (buf, amp) = (&v["stages"][0], &v["stages"][1]);
    let ideal_gain = 1.0 + r_f / r_g;
    assert!(((num(&amp["gain"]) - ideal_gain) / ideal_gain).abs() <= 1.0 / t);
    let v_plus = num(&buf["operating_point"]["v_e"]);
    let ideal_out = ideal_gain * v_plus;
    let v_out = num(&amp["operating_point"]["v_out"]);
    assert!(
        ((v_out - ideal_out) / ideal_out).abs() <= 1.0 / t,
        "{v_out} vs {ideal_out}"
    );
}

#[test]
fn an_op_amp_pin_out_of_reach_in_a_group_names_the_op_amp() {
    // V_ref = 0 with the + input at the follower's emitter (about −0.95 V) and a
    // gain of 11 rests the pin near −10.4 V; a reference of 10 V asks for
    // 10 + 11·(−0.95 − 10) ≈ −110 V: refused naming the op-amp stage, not the
    // follower it would cut off (exit 2).
    let out = common::run(
        &["plan", "-"],
        Some(buffer_opamp_follower(1e5, 10.0).as_bytes()),
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("stage \"gain\""), "{err}");
    assert!(err.contains("op-amp output"), "{err}");
}
