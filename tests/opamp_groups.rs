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

// ---------------------------------------------------------------------------------
// Op-amp stages on a feedback loop (docs/definitions.md "Feedback links": the loop's
// first device may be an op-amp, A·(v₊ − v₋) with A in the place of g_m).

const R_S: f64 = 10e3;
const R_I: f64 = 10e3;
const R_F: f64 = 10e6;
const R_FB: f64 = 47e3;
const R_L: f64 = 10e3;
const A_1: f64 = 2e4;
const GBW_1: f64 = 1e6;
const A_2: f64 = 1e5;
const GBW_2: f64 = 3e5;
const I_LIMIT: f64 = 1e-3;

/// An inverting op-amp stage (the loop's first device, + on ground) direct into an
/// op-amp follower whose output returns through R_FB into the inverting stage's input
/// node: shunt feedback around both op-amps (a DC loop: no series capacitor).
fn opamp_loop() -> String {
    format!(
        r#"{{ "version": 2, "supplies": {{ "vcc": "15 V", "vee": "-15 V" }},
  "devices": {{
    "u1": {{ "polarity": "opamp", "open_loop_gain": {A_1}, "gain_bandwidth": {GBW_1} }},
    "u2": {{ "polarity": "opamp", "open_loop_gain": {A_2}, "gain_bandwidth": {GBW_2},
             "output_current_limit": {I_LIMIT} }} }},
  "source": {{ "resistance": {R_S}, "level": "10 mV" }},
  "stages": [
    {{ "id": "inv", "type": "opamp_inverting", "device": "u1", "r_input": {R_I}, "r_feedback": {R_F},
       "rails": {{ "top": "vcc", "bottom": "vee" }} }},
    {{ "id": "buf", "type": "opamp_noninverting", "device": "u2",
       "rails": {{ "top": "vcc", "bottom": "vee" }} }} ],
  "loads": [ {{ "id": "out", "resistance": {R_L} }} ],
  "links": [
    {{ "from": "source", "to": "inv", "coupling": "direct" }},
    {{ "from": "inv", "to": "buf", "coupling": "direct" }},
    {{ "from": "buf", "to": "out", "coupling": "10u" }},
    {{ "from": "buf", "to": "inv", "coupling": "feedback", "resistance": {R_FB}, "into": "input" }} ] }}"#
    )
}

/// The one-pole A(jω) = A_0/(1 + jω·A_0/(2π·GBW)) (docs/definitions.md "Op-amp").
fn one_pole(a_0: f64, gbw: f64, f: f64) -> num_complex::Complex64 {
    a_0 / num_complex::Complex64::new(1.0, f * a_0 / gbw)
}

/// T(jω) of the loop by hand: the first op-amp's source replaced by 1 V (EMF dead,
/// r_in = ∞, r_out = 0). The follower gives g₂ = A₂/(1 + A₂) at the pin; KCL at the
/// input node X (R_S, R_FB, R_I) and at − (R_I, R_F) give
/// v₋ = (g₂/R_FB + (R_I/R_F)·G_X)/((1 + R_I/R_F)·G_X − 1/R_I), G_X = 1/R_S + 1/R_FB + 1/R_I,
/// and T = −A₁·(0 − v₋) = A₁·v₋.
fn return_ratio_by_hand(f: Option<f64>) -> num_complex::Complex64 {
    let (a_1, a_2) = match f {
        None => (A_1.into(), A_2.into()),
        Some(f) => (one_pole(A_1, GBW_1, f), one_pole(A_2, GBW_2, f)),
    };
    let g_2 = a_2 / (1.0 + a_2);
    let g_x = 1.0 / R_S + 1.0 / R_FB + 1.0 / R_I;
    let v_minus = (g_2 / R_FB + R_I / R_F * g_x) / ((1.0 + R_I / R_F) * g_x - 1.0 / R_I);
    a_1 * v_minus
}

#[test]
fn an_op_amp_loop_gains_its_asymptotic_gain_within_one_over_t() {
    // A_∞ by hand: the first op-amp's v₊ − v₋ nulled puts − at 0 V, so the pin is
    // −(R_F/R_I)·v_X and the follower's output g₂ times that; KCL at X then gives
    // v_X/e = (1/R_S)/(1/R_S + 1/R_FB + 1/R_I + g₂·R_F/(R_I·R_FB)). With the
    // controlled source off (A₁ = 0, r_out = 0) nothing reaches the output: A_0 = 0,
    // so A_f = A_∞·T/(1 + T) (Rosenstark, from memory), within 1/T of A_∞ — the
    // shunt-feedback limit −R_FB/R_S as R_F and T grow (textbook).
    let v = plan_json(&opamp_loop());
    let l = &v["loops"][0];
    assert_eq!(l["device_stage"], "inv");
    let g_2 = A_2 / (1.0 + A_2);
    let v_x = (1.0 / R_S) / (1.0 / R_S + 1.0 / R_FB + 1.0 / R_I + g_2 * R_F / (R_I * R_FB));
    let a_inf = -g_2 * R_F / R_I * v_x;
    assert!(
        close(num(&l["asymptotic_gain"]), a_inf, 1e-9),
        "{} vs {a_inf}",
        l["asymptotic_gain"]
    );
    assert!(
        num(&l["direct_gain"]).abs() <= 1e-12 * a_inf.abs(),
        "{}",
        l["direct_gain"]
    );
    let t = return_ratio_by_hand(None).re;
    assert!(
        close(num(&l["return_ratio"]), t, 1e-9),
        "{} vs {t}",
        l["return_ratio"]
    );
    let a_f = num(&l["closed_loop_gain"]);
    assert!(
        ((a_f - a_inf) / a_inf).abs() <= 1.0 / t,
        "{a_f} vs {a_inf}, T = {t}"
    );
    assert!(
        ((a_inf + R_FB / R_S) / (R_FB / R_S)).abs() < 0.02,
        "{a_inf}"
    );
}

#[test]
fn the_asymptotic_gain_identity_holds_with_an_op_amp_first() {
    // A_f = A_∞·T/(1 + T) + A_0/(1 + T) (Rosenstark's formulation, from memory) against
    // the direct solve (the last loop stage's cumulative gain), to 1e-9; at midband and
    // at frequencies where both op-amp poles act (`plan --at`: magnitudes signed by
    // their real parts, so the identity is checked at midband only in full).
    let text = opamp_loop();
    let v = plan_json(&text);
    let l = &v["loops"][0];
    let (t, a_inf, a_0) = (
        num(&l["return_ratio"]),
        num(&l["asymptotic_gain"]),
        num(&l["direct_gain"]),
    );
    let identity = a_inf * t / (1.0 + t) + a_0 / (1.0 + t);
    let direct = num(&v["stages"][1]["cumulative_gain"]);
    assert!(close(num(&l["closed_loop_gain"]), identity, 1e-9));
    assert!(close(direct, identity, 1e-9), "{direct} vs {identity}");
    assert!(close(
        num(&l["desensitivity_db"]),
        20.0 * (1.0 + t).log10(),
        1e-12
    ));
}

#[test]
fn an_op_amp_loops_phase_margin_matches_its_poles() {
    // T(jω) by hand from the two one-pole op-amps (`return_ratio_by_hand`); its unity
    // crossing found here by bisection in log f on the closed form, the margin
    // 180° − |arg T| there (docs/definitions.md "Margins").
    let v = plan_json(&opamp_loop());
    let l = &v["loops"][0];
    let magnitude = |f: f64| return_ratio_by_hand(Some(f)).norm() - 1.0;
    let (mut lo, mut hi) = (1e3_f64, 1e8_f64);
    assert!(magnitude(lo) > 0.0 && magnitude(hi) < 0.0);
    for _ in 0..200 {
        let mid = (lo * hi).sqrt();
        if magnitude(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let f_c = (lo * hi).sqrt();
    let margin = 180.0 - return_ratio_by_hand(Some(f_c)).arg().to_degrees().abs();
    let planner = num(&l["phase_margin_deg"]);
    assert!((planner - margin).abs() < 1e-6, "{planner} vs {margin}");
    assert!(close(num(&l["phase_crossing_hz"]), f_c, 1e-9));
    // The follower's pole (GBW_2) within a decade of the crossing pulls the margin
    // below the one-pole 90°.
    assert!(margin < 80.0 && margin > 30.0, "{margin}");
}

#[test]
fn the_follower_on_the_loop_reaches_its_current_limit_by_kcl() {
    // Region limits at the follower's pin (docs/definitions.md "Op-amp"): the pin
    // feeds the load through its capacitor and R_FB back to X, so per volt of output
    // di/dv = 1/R_L + (1 − v_X/v_out)/R_FB (KCL by hand, v_X and v_out per volt of EMF
    // from the plan); at rest nothing flows (every node at 0 V), so the current limit
    // is reached after I_LIMIT/(di/dv) volts of output, below the 14 V to either rail.
    let v = plan_json(&opamp_loop());
    let (inv, buf) = (&v["stages"][0], &v["stages"][1]);
    assert!(num(&buf["operating_point"]["i_out"]).abs() < 1e-15);
    let v_x = num(&inv["cumulative_gain"]) / num(&inv["gain"]);
    let v_out = num(&buf["cumulative_gain"]);
    let di_dv = 1.0 / R_L + (1.0 - v_x / v_out) / R_FB;
    let limit = I_LIMIT / di_dv;
    for side in ["limit_up", "limit_down"] {
        assert!(
            close(num(&buf[side]), limit, 1e-9),
            "{side}: {} vs {limit}",
            buf[side]
        );
    }
    assert_eq!(buf["clip_toward"], "current_limit");
}

#[test]
fn sweep_clips_the_loop_where_the_plan_puts_it() {
    // `sweep` solves the whole chain as one nonlinear network (docs/definitions.md
    // "Large signal": each op-amp a hard-clipped source at its pin), independently of
    // the plan's loop network: inside its limits every op-amp is linear, so the
    // smallest level's gain is the plan's closed-loop gain to rounding, and the first
    // clip is the follower's current limit at the plan's level (within the onset
    // search's 0.01 dB).
    let text = opamp_loop();
    let plan = plan_json(&text);
    let out = common::run(&["sweep", "-", "--format", "json"], Some(text.as_bytes()));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let sweep: Value = serde_json::from_slice(&out.stdout).expect("JSON");
    let small = num(&sweep["levels"][0]["stages"][1]["cumulative_gain"]);
    let closed = num(&plan["loops"][0]["closed_loop_gain"]);
    assert!(close(small, closed, 1e-9), "{small} vs {closed}");
    let onsets = &sweep["onsets"]["stages"][1];
    assert_eq!(onsets["id"], "buf");
    assert_eq!(onsets["clip_toward"], "current_limit");
    assert_eq!(plan["first_clip"]["stage"], "buf");
    let db = num(&onsets["clip"]["dbu"]) - num(&plan["first_clip"]["input_dbu"]);
    assert!(db.abs() <= 0.01, "{db} dB");
}
