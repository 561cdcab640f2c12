//! The planner against handbook formulas for single stages. Each check names its
//! source; formulas marked "from memory" are the standard small-signal results found in
//! any BJT amplifier text.

use ampchain::device::DeviceModel;
use ampchain::Chain;

fn stage_chain(stage: &str, early: &str, load: &str) -> Chain {
    let text = format!(
        r#"{{
          "supply": "15 V",
          "devices": {{ "q": {{ "polarity": "npn", "beta": 200, "saturation_current": "10f" {early} }} }},
          "source": {{ "resistance": "1k", "level": "10 mV rms" }},
          "stages": [ {stage} ],
          "loads": [ {{ "id": "out", "resistance": "{load}" }} ],
          "links": [ {{ "from": "source", "to": "s", "coupling": "10u" }},
                     {{ "from": "s", "to": "out", "coupling": "10u" }} ]
        }}"#
    );
    Chain::from_json_str(&text).expect("valid test chain")
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

const CE_UNBYPASSED: &str = r#"{ "id": "s", "type": "common_emitter", "device": "q",
    "r_top": "100k", "r_bottom": "22k", "r_collector": "4k7", "r_emitter": "1k" }"#;
const CE_BYPASSED: &str = r#"{ "id": "s", "type": "common_emitter", "device": "q",
    "r_top": "100k", "r_bottom": "22k", "r_collector": "4k7",
    "r_emitter_bypassed": "1k", "c_bypass": "100u" }"#;
const EF: &str = r#"{ "id": "s", "type": "emitter_follower", "device": "q",
    "r_top": "47k", "r_bottom": "47k", "r_emitter": "2k2" }"#;

#[test]
fn common_emitter_gain_is_alpha_r_ac_over_r_e_plus_r_e() {
    // A = −α·R_ac/(r_e + R_E), r_e = V_T/I_E (handbook, from memory); exact for the
    // hybrid-π model without r_o, so the tolerance is rounding only.
    let chain = stage_chain(CE_UNBYPASSED, "", "10k");
    let ev = chain.evaluate().unwrap();
    let op = ev.dc[0].op;
    let r_ac = 4.7e3 * 10e3 / (4.7e3 + 10e3);
    let r_e = ev.v_t / op.i_e;
    let a_handbook = -op.alpha() * r_ac / (r_e + 1e3);
    assert!(
        rel(ev.ac[0].gain.re, a_handbook) < 1e-9,
        "{} vs {a_handbook}",
        ev.ac[0].gain.re
    );

    // With Early effect (V_A = 100 V) r_o ≈ 100 kΩ shunts little: within 2 %
    // (the approximation ignores r_o).
    let chain = stage_chain(CE_UNBYPASSED, r#", "early_voltage": "100 V""#, "10k");
    let ev = chain.evaluate().unwrap();
    let op = ev.dc[0].op;
    let a_handbook = -op.alpha() * r_ac / (ev.v_t / op.i_e + 1e3);
    assert!(rel(ev.ac[0].gain.re, a_handbook) < 0.02);
}

#[test]
fn divider_bias_obeys_the_base_loop() {
    // I_E = (V_th − V_BE)/(R_E + R_th/(β+1)) with V_th, R_th the divider's Thevenin
    // equivalent (KVL around the base loop; any handbook), using the planner's V_BE.
    let chain = stage_chain(CE_UNBYPASSED, "", "10k");
    let op = chain.evaluate().unwrap().dc[0].op;
    let v_th = 15.0 * 22e3 / 122e3;
    let r_th = 100e3 * 22e3 / 122e3;
    let i_e = (v_th - op.v_be) / (1e3 + r_th / 201.0);
    assert!(rel(op.i_e, i_e) < 1e-9);
    // And r_π = V_T/I_B (docs/definitions.md definition; ≈ β/g_m).
    let ev = chain.evaluate().unwrap();
    let hp = chain.device_of(0).small_signal(&op, ev.v_t);
    assert!(rel(1.0 / hp.g_pi, ev.v_t / op.i_b) < 1e-12);
    assert!(rel(1.0 / hp.g_pi, 200.0 / hp.g_m) < 1e-12);
}

#[test]
fn emitter_follower_input_resistance_reflects_the_emitter_load() {
    // R_in = R_B ∥ (r_π + (β+1)(R_E ∥ R_L)) (handbook, from memory); exact without r_o.
    let chain = stage_chain(EF, "", "1k");
    let ev = chain.evaluate().unwrap();
    let op = ev.dc[0].op;
    let r_pi = ev.v_t / op.i_b;
    let r_el = 2.2e3 * 1e3 / 3.2e3;
    let into_base = r_pi + 201.0 * r_el;
    let r_b = 47e3 / 2.0;
    let r_in = r_b * into_base / (r_b + into_base);
    let r_in_planner = (1.0 / ev.ac[0].y_in).re;
    assert!(rel(r_in_planner, r_in) < 1e-9, "{r_in_planner} vs {r_in}");
    // Follower gain (β+1)(R_E∥R_L)/(r_π + (β+1)(R_E∥R_L)): below 1, positive (handbook, from memory).
    let a = ev.ac[0].gain.re;
    assert!(rel(a, 201.0 * r_el / into_base) < 1e-9);
    assert!(a > 0.0 && a < 1.0);
}

#[test]
fn bypassing_raises_gain_and_lowers_input_resistance() {
    // Bypassing R_E raises the gain by about (1 + g_m·R_E) and pulls the input
    // resistance down toward r_π ∥ R_B (handbook, from memory). Exactly, without r_o,
    // the ratio is (r_e + R_E)/r_e = 1 + g_m·R_E/α, so "about" here means within 1 %.
    let unb = stage_chain(CE_UNBYPASSED, "", "10k").evaluate().unwrap();
    let byp = stage_chain(CE_BYPASSED, "", "10k").evaluate().unwrap();
    let op = byp.dc[0].op;
    assert!(
        rel(op.i_c, unb.dc[0].op.i_c) < 1e-12,
        "same DC point either way"
    );
    let g_m = op.i_c / byp.v_t;
    let ratio = byp.ac[0].gain.re / unb.ac[0].gain.re;
    assert!(rel(ratio, 1.0 + g_m * 1e3) < 0.01, "{ratio}");
    let r_pi = byp.v_t / op.i_b;
    let r_b = 100e3 * 22e3 / 122e3;
    let r_in = (1.0 / byp.ac[0].y_in).re;
    assert!(rel(r_in, r_pi * r_b / (r_pi + r_b)) < 1e-9);
    assert!(r_in < (1.0 / unb.ac[0].y_in).re);
}

#[test]
fn source_divider_sets_the_input_level() {
    // v_in/E = R_in/(R_S + R_in): the voltage divider (any circuit-theory text).
    let chain = stage_chain(CE_UNBYPASSED, "", "10k");
    let ev = chain.evaluate().unwrap();
    let r_in = (1.0 / ev.ac[0].y_in).re;
    assert!(rel(ev.ac[0].v_in.re, r_in / (1e3 + r_in)) < 1e-12);
    assert!(rel(ev.ac[0].cumulative.re, ev.ac[0].v_in.re * ev.ac[0].gain.re) < 1e-12);
}

#[test]
fn ce_limits_match_the_load_line_construction() {
    // Toward cutoff the collector can rise by I_CQ·R_ac: the AC load line meets I_C = 0
    // at V_CEQ + I_CQ·(R_ac + R_E/α), and the collector takes the R_ac share of that
    // (load-line construction, any handbook). Check limit_up and the intercept agree.
    let chain = stage_chain(CE_UNBYPASSED, "", "10k");
    let ev = chain.evaluate().unwrap();
    let h = ev.headroom[0];
    let op = ev.dc[0].op;
    let r_ac = 4.7e3 * 10e3 / 14.7e3;
    assert!(rel(h.swing.limit_up, op.i_c * r_ac) < 1e-12);
    let span = h.ac_line.unwrap().v_ce_intercept - op.v_ce;
    assert!(rel(span * r_ac / (r_ac + 1e3 / op.alpha()), h.swing.limit_up) < 1e-12);
    // DC load line meets V_CE = V_CC at I_C = 0 for a capacitor-coupled stage.
    assert!(rel(h.dc_line.unwrap().v_ce_intercept, 15.0) < 1e-12);
    assert!(
        rel(
            h.dc_line.unwrap().i_c_intercept,
            15.0 / (4.7e3 + 1e3 / op.alpha())
        ) < 1e-12
    );
}
