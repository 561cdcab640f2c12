//! Self-tests of the flat-network reference solver (tests/reference), against hand
//! calculations done another way: Thevenin base bias with a fixed-point V_BE iteration
//! and the hybrid-π handbook formulas. They run without the planner.

mod reference;

use reference::*;

/// The reference solves to ~1e-12 V; the hand calculations iterate to machine precision.
const TOL: f64 = 1e-9;

fn assert_close(what: &str, got: f64, want: f64) {
    let diff = (got - want).abs();
    assert!(
        diff <= TOL * want.abs().max(got.abs()),
        "{what}: reference {got:.12e}, hand calculation {want:.12e} (rel. diff {:.2e})",
        diff / want.abs()
    );
}

fn fixture(name: &str) -> String {
    let path = format!("{}/tests/fixtures/{name}", env!("CARGO_MANIFEST_DIR"));
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"))
}

fn analyse_text(text: &str) -> (Chain, Analysis) {
    let chain = Chain::from_text(text).expect("reference reads the chain");
    let dc = solve_dc(&chain).expect("DC converges from a cold start");
    let analysis = analyse(&chain, dc).expect("midband solve");
    (chain, analysis)
}

fn par(a: f64, b: f64) -> f64 {
    a * b / (a + b)
}

/// Divider base bias, solved by hand: Thevenin equivalent of the divider
/// (V_th = V_CC·R2/(R1+R2), R_th = R1∥R2), then
/// I_B = (V_th − V_BE − I_E·R_E)/R_th with I_C = β·I_B·(1 + V_CE/V_A), I_E = I_B + I_C,
/// V_CE = V_CC − I_C·R_C − I_E·R_E, and V_BE = V_T·ln(β·I_B/I_S) from the model,
/// iterated to a fixed point (handbook method, e.g. Sedra & Smith, from memory).
struct HandBias {
    i_c: f64,
    i_b: f64,
    i_e: f64,
    v_be: f64,
    v_ce: f64,
}

#[allow(clippy::too_many_arguments)]
fn hand_bias(
    v_cc: f64,
    r_top: f64,
    r_bottom: f64,
    r_c: f64,
    r_e: f64,
    d: &Device,
    v_t: f64,
) -> HandBias {
    let v_th = v_cc * r_bottom / (r_top + r_bottom);
    let r_th = par(r_top, r_bottom);
    let (mut v_be, mut v_ce) = (0.65, v_cc / 2.0);
    let mut result = None;
    for _ in 0..200 {
        let early = d.v_a.map_or(1.0, |v_a| 1.0 + v_ce / v_a);
        let i_b = (v_th - v_be) / (r_th + (1.0 + d.beta * early) * r_e);
        let i_c = d.beta * early * i_b;
        let i_e = i_b + i_c;
        v_ce = v_cc - i_c * r_c - i_e * r_e;
        v_be = v_t * (d.beta * i_b / d.i_s).ln();
        result = Some(HandBias {
            i_c,
            i_b,
            i_e,
            v_be,
            v_ce,
        });
    }
    result.expect("iterated")
}

#[test]
fn thermal_voltage_at_25_c() {
    // kT/q at 298.15 K = 25.693 mV (CODATA constants; value from memory).
    let chain = Chain::from_text(&fixture("single_ce.json")).unwrap();
    assert!((chain.v_t - 25.693e-3).abs() < 1e-6, "V_T = {}", chain.v_t);
}

#[test]
fn single_common_emitter_dc_matches_thevenin_hand_calculation() {
    let (chain, a) = analyse_text(&fixture("single_ce.json"));
    let s = &chain.stages[0];
    let r_e = s.r_emitter + s.r_emitter_bypassed;
    let h = hand_bias(chain.v_cc, 100e3, 22e3, 4.7e3, r_e, &s.device, chain.v_t);
    let op = a.stages[0].op;
    assert_close("I_C", op.i_c, h.i_c);
    assert_close("I_B", op.i_b, h.i_b);
    assert_close("I_E", op.i_e, h.i_e);
    assert_close("V_BE", op.v_be, h.v_be);
    assert_close("V_CE", op.v_ce, h.v_ce);
    assert_close("V_E", op.v_e, h.i_e * r_e);
    assert_close("V_C", op.v_c, 12.0 - h.i_c * 4.7e3);
    assert_close("V_B", op.v_b, h.i_e * r_e + h.v_be);
    // Figures for the record: about 1.33 mA and 4.3 V.
    assert!((1.2e-3..1.5e-3).contains(&op.i_c), "I_C = {}", op.i_c);
    assert!((4.0..4.8).contains(&op.v_ce), "V_CE = {}", op.v_ce);
}

#[test]
fn single_common_emitter_midband_matches_hybrid_pi_formulas() {
    let (chain, a) = analyse_text(&fixture("single_ce.json"));
    let d = &chain.stages[0].device;
    let st = &a.stages[0];
    let (r_s, r_th, r_c, r_e, r_l) = (1e3, par(100e3, 22e3), 4.7e3, 220.0, 10e3);
    let beta = d.beta;
    // Hybrid-π without Early effect (Sedra & Smith, from memory):
    // r_π = β/g_m, R_in = R_B ∥ (r_π + (β+1)·R_E), A_v = −β·(R_C∥R_L)/(r_π + (β+1)·R_E),
    // R_out = R_C.
    let g_m = st.op.i_c / chain.v_t;
    let r_pi = beta / g_m;
    assert_close("g_m", st.g_m, g_m);
    assert_close("r_pi", st.r_pi, r_pi);
    assert!(st.r_o.is_none());
    let r_in = par(r_th, r_pi + (beta + 1.0) * r_e);
    assert_close("r_in", st.r_in, r_in);
    let gain = -beta * par(r_c, r_l) / (r_pi + (beta + 1.0) * r_e);
    assert_close("gain", st.gain, gain);
    // Source divider: v_b/EMF = R_in/(R_in + R_s).
    let cumulative = r_in / (r_in + r_s) * gain;
    assert_close("cumulative_gain", st.cumulative_gain, cumulative);
    assert_close("load gain", a.load_gains[0], cumulative);
    assert_close("r_out", st.r_out, r_c);
    assert_close("load", st.load.unwrap(), r_l);
    // Figures for the record: about −13.3 V/V.
    assert!((-14.0..-12.5).contains(&st.gain), "gain = {}", st.gain);
}

#[test]
fn single_common_emitter_swing_limits_from_the_ac_load_line() {
    // AC load line through Q with slope −1/(R_ac + R_E/α) (docs/definitions.md). It meets
    // I_C = 0 (cutoff) where the collector has risen by I_CQ·R_ac, and V_CE = V_CE,sat
    // where I_C has grown by (V_CEQ − V_CE,sat)/(R_ac + R_E/α), i.e. the collector has
    // fallen by that times R_ac (load-line construction, handbook, from memory).
    let (chain, a) = analyse_text(&fixture("single_ce.json"));
    let st = &a.stages[0];
    let r_ac = par(4.7e3, 10e3);
    let alpha = st.op.i_c / st.op.i_e;
    let r_total = r_ac + 220.0 / alpha;
    assert_close("limit_up", st.limit_up, st.op.i_c * r_ac);
    let i_c_at_saturation = st.op.i_c + (st.op.v_ce - 0.2) / r_total;
    assert_close(
        "limit_down",
        st.limit_down,
        (i_c_at_saturation - st.op.i_c) * r_ac,
    );
    assert_close("AC load line slope", st.ac_load_line.slope, -1.0 / r_total);
    // The line reaches I_C = 0 at V_CEQ + I_CQ·(R_ac + R_E/α).
    assert_close(
        "AC load line V_CE intercept",
        st.ac_load_line.v_ce_intercept,
        st.op.v_ce + st.op.i_c * r_total,
    );
    let smaller = st.limit_up.min(st.limit_down);
    assert_close(
        "clip input",
        st.clip_input_vpeak,
        smaller / st.cumulative_gain.abs(),
    );
    let expected_side = if st.limit_up < st.limit_down {
        "cutoff"
    } else {
        "saturation"
    };
    assert_eq!(st.clip_toward, expected_side);
    assert_eq!(a.first_clip, 0);
    let _ = chain;
}

#[test]
fn emitter_follower_matches_handbook_formulas() {
    let text = r#"{
      "supply": "12 V",
      "devices": { "q": { "polarity": "npn", "beta": 120, "saturation_current": "20f" } },
      "source": { "resistance": "5k", "level": "100 mV rms" },
      "stages": [ { "id": "buf", "type": "emitter_follower", "device": "q",
                    "r_top": "47k", "r_bottom": "68k", "r_emitter": "2k2" } ],
      "loads": [ { "id": "out", "resistance": "1k" } ],
      "links": [ { "from": "source", "to": "buf", "coupling": "1u" },
                 { "from": "buf", "to": "out", "coupling": "47u" } ]
    }"#;
    let (chain, a) = analyse_text(text);
    let d = &chain.stages[0].device;
    let (r_s, r_th, r_e, r_l) = (5e3, par(47e3, 68e3), 2.2e3, 1e3);
    let h = hand_bias(chain.v_cc, 47e3, 68e3, 0.0, r_e, d, chain.v_t);
    let st = &a.stages[0];
    assert_close("I_C", st.op.i_c, h.i_c);
    assert_close("V_E", st.op.v_e, h.i_e * r_e);
    assert_close("V_CE", st.op.v_ce, h.v_ce);
    // Emitter follower, hybrid-π without Early effect (handbook, from memory):
    // R_in = R_B ∥ (r_π + (β+1)·(R_E∥R_L)), A_v = (β+1)·R_E'/(r_π + (β+1)·R_E'),
    // R_out = R_E ∥ (r_π + R_s∥R_B)/(β+1).
    let beta = d.beta;
    let r_pi = chain.v_t / h.i_b;
    let r_e_load = par(r_e, r_l);
    let r_in = par(r_th, r_pi + (beta + 1.0) * r_e_load);
    assert_close("r_in", st.r_in, r_in);
    let gain = (beta + 1.0) * r_e_load / (r_pi + (beta + 1.0) * r_e_load);
    assert_close("gain", st.gain, gain);
    assert_close(
        "r_out",
        st.r_out,
        par(r_e, (r_pi + par(r_s, r_th)) / (beta + 1.0)),
    );
    assert_close(
        "cumulative_gain",
        st.cumulative_gain,
        r_in / (r_in + r_s) * gain,
    );
    // Swing limits of the follower (docs/definitions.md): toward cutoff I_EQ·(R_E∥R_L); toward
    // saturation with R_C = 0 the whole V_CEQ − V_CE,sat.
    assert_close("limit_down", st.limit_down, h.i_e * r_e_load);
    assert_close("limit_up", st.limit_up, h.v_ce - 0.2);
    // Figures for the record: gain just under 1, r_in around 20 kΩ.
    assert!((0.95..1.0).contains(&st.gain), "gain = {}", st.gain);
}

#[test]
fn resistive_divider_source_into_load() {
    // No transistor at all: v(load)/EMF = R_L/(R_L + R_s) (voltage divider, Ohm's law).
    let text = r#"{
      "supply": "9 V",
      "devices": {},
      "source": { "resistance": "3k3", "level": "1 V rms" },
      "stages": [],
      "loads": [ { "id": "out", "resistance": "6k8" } ],
      "links": [ { "from": "source", "to": "out", "coupling": "1u" } ]
    }"#;
    let (_, a) = analyse_text(text);
    assert_close("load gain", a.load_gains[0], 6.8e3 / (6.8e3 + 3.3e3));
}

#[test]
fn direct_coupled_pair_matches_hand_calculation() {
    let (chain, a) = analyse_text(&fixture("ce_ef_pair.json"));
    let d = &chain.stages[0].device;
    let v_t = chain.v_t;
    // 35 °C: V_T = k·308.15 K/q.
    assert_close("V_T", v_t, 1.380649e-23 * 308.15 / 1.602176634e-19);
    let (r_s, r_top, r_bottom, r_c1, r_e1u, r_e1b, r_e2, r_l) =
        (2.2e3, 120e3, 20e3, 8.2e3, 330.0, 1.5e3, 3.3e3, 2.2e3);
    let beta = d.beta;
    // First stage: its collector does not act on its own current (no Early effect).
    let h1 = hand_bias(15.0, r_top, r_bottom, 0.0, r_e1u + r_e1b, d, v_t);
    // Collector node shared with the follower's base (KCL, by hand):
    // V_C1 = V_CC − R_C1·(I_C1 + I_B2), I_B2 = (V_C1 − V_BE2)/((β+1)·R_E2), and
    // V_BE2 = V_T·ln(I_C2/I_S), iterated to a fixed point.
    let k = r_c1 / ((beta + 1.0) * r_e2);
    let mut v_be2 = 0.65;
    let mut v_c1 = 0.0;
    for _ in 0..200 {
        v_c1 = (15.0 - r_c1 * h1.i_c + k * v_be2) / (1.0 + k);
        let i_e2 = (v_c1 - v_be2) / r_e2;
        let i_c2 = i_e2 * beta / (beta + 1.0);
        v_be2 = v_t * (i_c2 / d.i_s).ln();
    }
    let i_e2 = (v_c1 - v_be2) / r_e2;
    let i_b2 = i_e2 / (beta + 1.0);
    let (amp, follow) = (&a.stages[0], &a.stages[1]);
    assert_close("amp I_C", amp.op.i_c, h1.i_c);
    assert_close("amp V_C", amp.op.v_c, v_c1);
    assert_close("follow V_BE", follow.op.v_be, v_be2);
    assert_close("follow I_E", follow.op.i_e, i_e2);
    assert_close("follow V_CE", follow.op.v_ce, 15.0 - (v_c1 - v_be2));

    // Midband, hybrid-π (handbook formulas, from memory):
    let r_pi1 = v_t / h1.i_b;
    let r_pi2 = v_t / i_b2;
    let r_e2_load = par(r_e2, r_l);
    // follower input, no bias network: r_π2 + (β+1)·(R_E2∥R_L)
    let r_in2 = r_pi2 + (beta + 1.0) * r_e2_load;
    assert_close("follow r_in", follow.r_in, r_in2);
    assert_close("amp load", amp.load.unwrap(), r_in2);
    let gain1 = -beta * par(r_c1, r_in2) / (r_pi1 + (beta + 1.0) * r_e1u);
    assert_close("amp gain", amp.gain, gain1);
    let gain2 = (beta + 1.0) * r_e2_load / (r_pi2 + (beta + 1.0) * r_e2_load);
    assert_close("follow gain", follow.gain, gain2);
    let r_in1 = par(par(r_top, r_bottom), r_pi1 + (beta + 1.0) * r_e1u);
    assert_close("amp r_in", amp.r_in, r_in1);
    let cumulative = r_in1 / (r_in1 + r_s) * gain1 * gain2;
    assert_close("follow cumulative_gain", follow.cumulative_gain, cumulative);
    assert_close("load gain", a.load_gains[0], cumulative);
    // The follower is driven from the collector: source resistance R_C1.
    assert_close(
        "follow r_out",
        follow.r_out,
        par(r_e2, (r_pi2 + r_c1) / (beta + 1.0)),
    );
    assert_close("amp r_out", amp.r_out, r_c1);
    // Figures for the record.
    assert!(
        (-20.0..-16.5).contains(&follow.cumulative_gain),
        "{}",
        follow.cumulative_gain
    );
}

fn early_chain(r_emitter: &str, r_emitter_bypassed: &str, bypass: bool) -> String {
    let c_bypass = if bypass {
        r#", "c_bypass": "100u""#
    } else {
        ""
    };
    format!(
        r#"{{
      "supply": "20 V",
      "devices": {{ "q": {{ "polarity": "npn", "beta": 180, "saturation_current": "8f",
                        "early_voltage": "60 V" }} }},
      "source": {{ "resistance": "600", "level": "5 mV rms" }},
      "stages": [ {{ "id": "amp", "type": "common_emitter", "device": "q",
                    "r_top": "82k", "r_bottom": "12k", "r_collector": "6k8",
                    "r_emitter": "{r_emitter}", "r_emitter_bypassed": "{r_emitter_bypassed}"{c_bypass} }} ],
      "loads": [ {{ "id": "out", "resistance": "47k" }} ],
      "links": [ {{ "from": "source", "to": "amp", "coupling": "4u7" }},
                 {{ "from": "amp", "to": "out", "coupling": "4u7" }} ]
    }}"#
    )
}

#[test]
fn early_effect_bypassed_stage_matches_handbook() {
    let (chain, a) = analyse_text(&early_chain("0", "1k2", true));
    let d = &chain.stages[0].device;
    let h = hand_bias(20.0, 82e3, 12e3, 6.8e3, 1.2e3, d, chain.v_t);
    let st = &a.stages[0];
    assert_close("I_C", st.op.i_c, h.i_c);
    assert_close("V_CE", st.op.v_ce, h.v_ce);
    assert_close("V_BE", st.op.v_be, h.v_be);
    // Hybrid-π with Early effect (handbook, from memory): g_m = I_C/V_T,
    // r_o = (V_A + V_CE)/I_C, r_π = V_T/I_B; with the emitter at AC ground
    // A_v = −g_m·(R_C∥r_o∥R_L), R_in = R_B ∥ r_π, R_out = R_C ∥ r_o.
    let g_m = h.i_c / chain.v_t;
    let r_o = (60.0 + h.v_ce) / h.i_c;
    let r_pi = chain.v_t / h.i_b;
    assert_close("g_m", st.g_m, g_m);
    assert_close("r_o", st.r_o.unwrap(), r_o);
    assert_close("r_pi", st.r_pi, r_pi);
    assert_close("gain", st.gain, -g_m * par(par(6.8e3, r_o), 47e3));
    assert_close("r_in", st.r_in, par(par(82e3, 12e3), r_pi));
    assert_close("r_out", st.r_out, par(6.8e3, r_o));
    // α = I_C/I_E = β(1+V_CE/V_A)/(β(1+V_CE/V_A)+1) with the Early factor.
    let beta_eff = 180.0 * (1.0 + h.v_ce / 60.0);
    assert_close("alpha", st.op.i_c / st.op.i_e, beta_eff / (beta_eff + 1.0));
}

#[test]
fn early_effect_degenerated_output_resistance_matches_handbook() {
    let (chain, a) = analyse_text(&early_chain("1k", "0", false));
    let d = &chain.stages[0].device;
    let h = hand_bias(20.0, 82e3, 12e3, 6.8e3, 1e3, d, chain.v_t);
    let st = &a.stages[0];
    assert_close("I_C", st.op.i_c, h.i_c);
    assert_close("V_CE", st.op.v_ce, h.v_ce);
    // Looking into the collector of a degenerated stage (handbook, from memory):
    // R_o = r_o + R_E'·(1 + g_m·r_o·r_π/(r_π + R_b)), R_E' = R_E ∥ (r_π + R_b),
    // R_b = R_s ∥ R_B; the stage's r_out is R_C ∥ R_o.
    let g_m = h.i_c / chain.v_t;
    let r_o = (60.0 + h.v_ce) / h.i_c;
    let r_pi = chain.v_t / h.i_b;
    let r_b = par(600.0, par(82e3, 12e3));
    let r_e_eff = par(1e3, r_pi + r_b);
    let r_o_collector = r_o + r_e_eff * (1.0 + g_m * r_o * r_pi / (r_pi + r_b));
    assert_close("r_out", st.r_out, par(6.8e3, r_o_collector));
}

#[test]
fn dc_load_lines_from_thevenin_networks() {
    // Single stage: the DC load line V_CE = V_CC − I_C·(R_C + R_E/α) meets the V_CE axis
    // at V_CC and the I_C axis at V_CC/(R_C + R_E/α) (handbook load line, from memory).
    let (_, a) = analyse_text(&fixture("single_ce.json"));
    let st = &a.stages[0];
    let alpha = st.op.i_c / st.op.i_e;
    let r_total = 4.7e3 + 1040.0 / alpha;
    assert_close("DC slope", st.dc_load_line.slope, -1.0 / r_total);
    assert_close("DC V_CE intercept", st.dc_load_line.v_ce_intercept, 12.0);
    assert_close(
        "DC I_C intercept",
        st.dc_load_line.i_c_intercept,
        12.0 / r_total,
    );

    // Direct pair: the follower's base hangs on the amplifier's collector. Its DC input
    // resistance about Q is r_π2 + (β+1)·R_E2 (no load at DC: the load is capacitor
    // coupled), so R_Cth = R_C1 ∥ (r_π2 + (β+1)·R_E2) and V_Cth = V_C1 + I_C1·R_Cth
    // (Thevenin's theorem). The follower's collector is at the supply: R_Cth = 0.
    let (chain, a) = analyse_text(&fixture("ce_ef_pair.json"));
    let (amp, follow) = (&a.stages[0], &a.stages[1]);
    let beta = chain.stages[1].device.beta;
    let r_in2_dc = follow.r_pi + (beta + 1.0) * 3.3e3;
    let r_c_th = par(8.2e3, r_in2_dc);
    let alpha1 = amp.op.i_c / amp.op.i_e;
    let r_total = r_c_th + 1830.0 / alpha1;
    assert_close("amp DC slope", amp.dc_load_line.slope, -1.0 / r_total);
    assert_close(
        "amp DC V_CE intercept",
        amp.dc_load_line.v_ce_intercept,
        amp.op.v_c + amp.op.i_c * r_c_th,
    );
    let alpha2 = follow.op.i_c / follow.op.i_e;
    assert_close(
        "follower DC slope",
        follow.dc_load_line.slope,
        -alpha2 / 3.3e3,
    );
    assert_close(
        "follower DC V_CE intercept",
        follow.dc_load_line.v_ce_intercept,
        15.0,
    );
}

/// Mirror image (an identity of the device model, docs/definitions.md: a PNP is the NPN with
/// every voltage and current reversed): a two-stage NPN chain on +12 V against the
/// same chain with PNP devices on a −12 V rail, the stage hung between ground (top) and
/// −12 V (bottom), r_top and r_bottom exchanged (they keep their sides). Every
/// magnitude must be equal, every node voltage negated, every gain equal, and the two
/// load-line limits exchanged. Checks the reference's PNP signs, rails, r_bb' and r_c.
#[test]
fn pnp_on_a_negative_rail_mirrors_the_npn_chain() {
    let chain = |pnp: bool| {
        let (polarity, rails, top, bottom) = if pnp {
            (
                "pnp",
                r#""supplies": { "vneg": "-12 V" },"#,
                "r_bottom",
                "r_top",
            )
        } else {
            ("npn", r#""supply": "12 V","#, "r_top", "r_bottom")
        };
        let rails_of = if pnp {
            r#""rails": { "top": "ground", "bottom": "vneg" },"#
        } else {
            ""
        };
        format!(
            r#"{{ "version": 2, {rails}
  "devices": {{ "q": {{ "polarity": "{polarity}", "beta": 150, "saturation_current": "5f",
                      "early_voltage": "80 V", "base_resistance": "120",
                      "collector_resistance": "15" }} }},
  "source": {{ "resistance": "1k", "level": "10 mV" }},
  "stages": [
    {{ "id": "a", "type": "common_emitter", "device": "q", {rails_of}
      "{top}": "82k", "{bottom}": "15k", "r_collector": "4k7",
      "r_emitter": "220", "r_emitter_bypassed": "820", "c_bypass": "100u" }},
    {{ "id": "b", "type": "emitter_follower", "device": "q", {rails_of}
      "r_emitter": "3k3" }} ],
  "loads": [ {{ "id": "out", "resistance": "10k" }} ],
  "links": [ {{ "from": "source", "to": "a", "coupling": "10u" }},
             {{ "from": "a", "to": "b", "coupling": "direct" }},
             {{ "from": "b", "to": "out", "coupling": "22u" }} ] }}"#
        )
    };
    let (_, n) = analyse_text(&chain(false));
    let (_, p) = analyse_text(&chain(true));
    for (i, (sn, sp)) in n.stages.iter().zip(&p.stages).enumerate() {
        let w = |q: &str| format!("stage {i} {q}");
        for (q, a, b) in [
            ("i_c", sn.op.i_c, sp.op.i_c),
            ("i_b", sn.op.i_b, sp.op.i_b),
            ("v_ce", sn.op.v_ce, sp.op.v_ce),
            ("v_be", sn.op.v_be, sp.op.v_be),
            ("v_be_junction", sn.op.v_be_junction, sp.op.v_be_junction),
            ("v_b", sn.op.v_b, -sp.op.v_b),
            ("v_c", sn.op.v_c, -sp.op.v_c),
            ("r_in", sn.r_in, sp.r_in),
            ("r_out", sn.r_out, sp.r_out),
            ("gain", sn.gain, sp.gain),
            ("cumulative_gain", sn.cumulative_gain, sp.cumulative_gain),
            ("limit_up ↔ limit_down", sn.limit_up, sp.limit_down),
            ("limit_down ↔ limit_up", sn.limit_down, sp.limit_up),
            (
                "dc load line slope",
                sn.dc_load_line.slope,
                sp.dc_load_line.slope,
            ),
        ] {
            assert_close(&w(q), b, a);
        }
        assert!((sn.op.v_e + sp.op.v_e).abs() <= 1e-12 + TOL * sn.op.v_e.abs());
        // The terminal V_BE carries I_B·r_bb' beyond the junction's.
        assert_close(
            &w("v_be − v_be_junction"),
            sp.op.v_be - sp.op.v_be_junction,
            sp.op.i_b * 120.0,
        );
    }
    assert_close("load gain", p.load_gains[0], n.load_gains[0]);
}

/// Region limits of a common base (docs/definitions.md "Swing limits of any kind") against
/// the hand analysis: with the base grounded at midband by c_base, no Early effect and
/// no r_bb', the collector current's change i_c = α·i_e goes wholly into R_C ∥ R_L, so
/// the output rises by I_C·(R_C ∥ R_L) when I_C reaches 0 (cutoff, `limit_up`); toward
/// saturation V_CE = V_C − V_E falls by (V_CE − V_CE,sat), which the output reaches after
/// moving (V_CE − V_CE,sat)·A/(A − A_e), A = v_c/v_s and A_e = v_e/v_s (handbook
/// common-base small-signal analysis, from memory).
#[test]
fn common_base_region_limits_match_hand_analysis() {
    let text = r#"{ "version": 2, "supply": "12 V",
  "devices": { "q": { "polarity": "npn", "beta": 120, "saturation_current": "5f" } },
  "source": { "resistance": "50", "level": "2 mV" },
  "stages": [ { "id": "cb", "type": "common_base", "device": "q",
      "r_top": "56k", "r_bottom": "22k", "c_base": "10u",
      "r_emitter": "2k7", "r_collector": "5k6" } ],
  "loads": [ { "id": "out", "resistance": "4k7" } ],
  "links": [ { "from": "source", "to": "cb", "coupling": "10u" },
             { "from": "cb", "to": "out", "coupling": "10u" } ] }"#;
    let (chain, a) = analyse_text(text);
    let s = &a.stages[0];
    assert_close(
        "limit_up (cutoff)",
        s.limit_up,
        s.op.i_c * par(5.6e3, 4.7e3),
    );
    let a_out = s.cumulative_gain;
    let a_e = s.input_gain;
    assert_close(
        "limit_down (saturation)",
        s.limit_down,
        (s.op.v_ce - chain.stages[0].device.vce_sat) * a_out / (a_out - a_e),
    );
    // Gain emitter → collector: α·(R_C ∥ R_L)/r_e with r_e = 1/(g_m + g_π) (handbook).
    assert_close(
        "gain",
        s.gain,
        par(5.6e3, 4.7e3) * (s.g_m + 1.0 / s.r_pi) * s.op.i_c / s.op.i_e,
    );
}
