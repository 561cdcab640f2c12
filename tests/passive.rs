//! Passive stages (attenuator, potentiometer, low-pass, high-pass) against Ohm's law,
//! the voltage divider and the closed forms of first-order RC sections (any circuits
//! text, from memory): loading both ways, gains, impedances and corners, alone and
//! between transistor stages.

mod common;

use common::run;
use serde_json::Value;

fn json(args: &[&str], text: &str) -> Value {
    let mut all = args.to_vec();
    all.extend(["-", "--format", "json"]);
    let out = run(&all, Some(text.as_bytes()));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("JSON output")
}

fn f(v: &Value, path: &[&str]) -> f64 {
    let mut v = v;
    for k in path {
        v = &v[*k];
    }
    v.as_f64().unwrap_or_else(|| panic!("{path:?}: {v}"))
}

fn close(what: &str, got: f64, want: f64, tol: f64) {
    assert!(
        (got - want).abs() <= tol * want.abs(),
        "{what}: got {got}, want {want}"
    );
}

fn par(a: f64, b: f64) -> f64 {
    a * b / (a + b)
}

/// One passive stage between a source and a load, both direct.
fn alone(stage: &str, r_s: f64, r_l: f64) -> String {
    format!(
        r#"{{ "version": 2, "supply": "12 V",
  "source": {{ "resistance": {r_s}, "level": "-20 dBu" }},
  "stages": [ {stage} ],
  "loads": [ {{ "id": "out", "resistance": {r_l} }} ],
  "links": [ {{ "from": "source", "to": "p", "coupling": "direct" }},
             {{ "from": "p", "to": "out", "coupling": "direct" }} ] }}"#
    )
}

#[test]
fn attenuator_is_a_loaded_voltage_divider() {
    let (r_s, r_se, r_sh, r_l) = (600.0, 1e3, 2.2e3, 10e3);
    let text = alone(
        r#"{ "id": "p", "type": "attenuator", "r_series": "1k", "r_shunt": "2k2" }"#,
        r_s,
        r_l,
    );
    let plan = json(&["plan"], &text);
    let s = &plan["stages"][0];
    // Ohm's law: the load sees R_sh ∥ R_L behind R_se; looking back, R_sh ∥ (R_se + R_S).
    let low = par(r_sh, r_l);
    close("r_in", f(s, &["r_in"]), r_se + low, 1e-12);
    close("r_out", f(s, &["r_out"]), par(r_sh, r_se + r_s), 1e-12);
    close("stage gain", f(s, &["gain"]), low / (r_se + low), 1e-12);
    close(
        "overall gain",
        f(&plan["loads"][0], &["gain"]),
        low / (r_s + r_se + low),
        1e-12,
    );
    // A passive stage has no device, no operating point and never clips.
    assert!(
        s["device"].is_null() && s["operating_point"].is_null(),
        "{s}"
    );
    assert!(s["limit_up"].is_null() && s["clip_toward"].is_null(), "{s}");
}

#[test]
fn potentiometer_output_resistance_follows_the_wiper() {
    let (r_s, r, r_l) = (1e3, 10e3, 47e3);
    for (position, taper, a) in [
        (0.3, "linear", 0.3),
        // Audio taper, docs/definitions.md: a = (100^x − 1)/99.
        (0.5, "audio", 9.0 / 99.0),
        (0.9, "audio", (100f64.powf(0.9) - 1.0) / 99.0),
    ] {
        let text = alone(
            &format!(
                r#"{{ "id": "p", "type": "potentiometer", "resistance": "10k", "position": {position}, "taper": "{taper}" }}"#
            ),
            r_s,
            r_l,
        );
        let plan = json(&["plan"], &text);
        let s = &plan["stages"][0];
        let (upper, lower) = (r * (1.0 - a), r * a);
        let what = format!("{taper} at {position}");
        close(&what, f(s, &["r_out"]), par(lower, upper + r_s), 1e-12);
        close(&what, f(s, &["r_in"]), upper + par(lower, r_l), 1e-12);
        let g = par(lower, r_l) / (upper + par(lower, r_l));
        close(&what, f(s, &["gain"]), g, 1e-12);
    }
}

#[test]
fn potentiometer_at_its_ends_is_a_wire_or_a_short() {
    let (r_s, r, r_l) = (1e3, 10e3, 47e3);
    // Full position: the wiper is the input, the whole track to ground.
    let plan = json(
        &["plan"],
        &alone(
            r#"{ "id": "p", "type": "potentiometer", "resistance": "10k", "position": 1 }"#,
            r_s,
            r_l,
        ),
    );
    let s = &plan["stages"][0];
    close("gain at 1", f(s, &["gain"]), 1.0, 1e-15);
    close("r_in at 1", f(s, &["r_in"]), par(r, r_l), 1e-12);
    close("r_out at 1", f(s, &["r_out"]), par(r, r_s), 1e-12);
    // Zero: the wiper on ground.
    let plan = json(
        &["plan"],
        &alone(
            r#"{ "id": "p", "type": "potentiometer", "resistance": "10k", "position": 0 }"#,
            r_s,
            r_l,
        ),
    );
    let s = &plan["stages"][0];
    assert_eq!(f(s, &["gain"]), 0.0);
    close("r_in at 0", f(s, &["r_in"]), r, 1e-12);
    assert_eq!(f(s, &["r_out"]), 0.0);
}

#[test]
fn rc_sections_have_their_first_order_corners() {
    let (r_s, r, c, r_l) = (1e3, 10e3, 10e-9, 100e3);
    // Low-pass: H = H_0/(1 + jωC·((R_S + R) ∥ R_L)), exactly first order, so the
    // −3 dB corner is 1/(2π·C·((R_S + R) ∥ R_L)); flat (C open) at midband.
    let text = alone(
        r#"{ "id": "p", "type": "low_pass", "resistance": "10k", "capacitance": "10n" }"#,
        r_s,
        r_l,
    );
    let resp = json(&["response"], &text);
    let want = 1.0 / (2.0 * std::f64::consts::PI * c * par(r_s + r, r_l));
    close(
        "low-pass corner",
        f(&resp["loads"][0], &["high_corner", "frequency"]),
        want,
        1e-8,
    );
    close(
        "low-pass midband",
        f(&resp["loads"][0], &["midband_gain"]),
        r_l / (r_s + r + r_l),
        1e-12,
    );
    // High-pass: H = jωC·(R ∥ R_L)/(1 + jωC·(R_S + R ∥ R_L)): corner
    // 1/(2π·C·(R_S + R ∥ R_L)); a wire (C shorted) at midband.
    let text = alone(
        r#"{ "id": "p", "type": "high_pass", "resistance": "10k", "capacitance": "10n" }"#,
        r_s,
        r_l,
    );
    let resp = json(&["response"], &text);
    let want = 1.0 / (2.0 * std::f64::consts::PI * c * (r_s + par(r, r_l)));
    close(
        "high-pass corner",
        f(&resp["loads"][0], &["low_corner", "frequency"]),
        want,
        1e-8,
    );
    close(
        "high-pass midband",
        f(&resp["loads"][0], &["midband_gain"]),
        par(r, r_l) / (r_s + par(r, r_l)),
        1e-12,
    );
}

/// A follower direct-coupled into a pad: the pad carries DC from the emitter, which
/// KCL at the emitter must include, and the follower's load is the pad's input.
#[test]
fn a_pad_on_a_follower_loads_it_at_dc_and_ac() {
    let text = r#"{ "version": 2, "supply": "12 V",
      "devices": { "q": { "polarity": "npn", "beta": 200, "saturation_current": "10f" } },
      "source": { "resistance": "1k", "level": "-20 dBu" },
      "stages": [
        { "id": "ef", "type": "emitter_follower", "device": "q",
          "r_top": "47k", "r_bottom": "47k", "r_emitter": "4k7" },
        { "id": "pad", "type": "attenuator", "r_series": "1k", "r_shunt": "3k3" } ],
      "loads": [ { "id": "out", "resistance": "10k" } ],
      "links": [ { "from": "source", "to": "ef", "coupling": "1u" },
                 { "from": "ef", "to": "pad", "coupling": "direct" },
                 { "from": "pad", "to": "out", "coupling": "10u" } ] }"#;
    let plan = json(&["plan"], text);
    let ef = &plan["stages"][0];
    let pad = &plan["stages"][1];
    let v_e = f(ef, &["operating_point", "v_e"]);
    // KCL at the emitter (DC: the load is behind a capacitor): I_E = V_E/R_E +
    // V_E/(R_se + R_sh).
    close(
        "I_E",
        f(ef, &["operating_point", "i_e"]),
        v_e / 4.7e3 + v_e / 4.3e3,
        1e-9,
    );
    // Ohm's law in the pad at DC: V_E²·R/(R_se + R_sh)² in each resistor.
    let i_pad = v_e / 4.3e3;
    close(
        "r_series power",
        f(pad, &["dissipation", "resistors", "r_series"]),
        i_pad * i_pad * 1e3,
        1e-9,
    );
    close(
        "r_shunt power",
        f(pad, &["dissipation", "resistors", "r_shunt"]),
        i_pad * i_pad * 3.3e3,
        1e-9,
    );
    // AC: the follower's load is the pad's input, R_se + R_sh ∥ R_L.
    let r_in_pad = 1e3 + par(3.3e3, 10e3);
    close("pad r_in", f(pad, &["r_in"]), r_in_pad, 1e-12);
    close("follower load", f(ef, &["load"]), r_in_pad, 1e-12);
    // The pad's gain with the follower's r_out behind it is the divider's.
    close(
        "pad gain",
        f(pad, &["gain"]),
        par(3.3e3, 10e3) / r_in_pad,
        1e-12,
    );
}

#[test]
fn bad_position_and_taper_name_the_field() {
    for (stage, field) in [
        (
            r#"{ "id": "p", "type": "potentiometer", "resistance": "10k", "position": 1.5 }"#,
            "stages[0].position",
        ),
        (
            r#"{ "id": "p", "type": "potentiometer", "resistance": "10k", "position": 0.5, "taper": "log" }"#,
            "taper",
        ),
        (
            r#"{ "id": "p", "type": "attenuator", "r_series": "1k", "r_shunt": "0" }"#,
            "stages[0].r_shunt",
        ),
    ] {
        let out = run(&["plan", "-"], Some(alone(stage, 600.0, 10e3).as_bytes()));
        assert_eq!(out.status.code(), Some(2), "{stage}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(field), "{stage}: {err}");
    }
}

/// Commands that need a transistor refuse a passive stage by name.
#[test]
fn transistor_commands_refuse_passive_stages_by_name() {
    let path =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/passive-controls.json");
    let chain = path.to_str().unwrap();
    let out = run(&["bias", chain, "--stage", "volume"], None);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("stage \"volume\" has no transistor"));
    let out = run(
        &["plot", "loadlines", chain, "--stage", "pad", "-o", "-"],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("no load lines"));
}

/// Nyquist's theorem for a passive network (any noise text, from memory): the noise
/// of a resistive network at a node is 4kT·R_eq, R_eq the resistance seen there. A
/// source, a pad and a load: R_eq = R_L ∥ R_sh ∥ (R_se + R_S), flat over the band.
#[test]
fn a_resistive_chain_makes_the_noise_of_its_output_resistance() {
    let text = alone(
        r#"{ "id": "p", "type": "attenuator", "r_series": "1k", "r_shunt": "2k2" }"#,
        600.0,
        10e3,
    )
    .replacen(
        "\"supply\": \"12 V\",",
        "\"supply\": \"12 V\", \"temperature\": \"300 K\",",
        1,
    );
    let v = json(&["noise"], &text);
    let r_eq = par(10e3, par(2.2e3, 1e3 + 600.0));
    // k_B exact in the 2019 SI; band 20 Hz … 20 kHz (the default).
    let k = 1.380_649e-23;
    let want = (4.0 * k * 300.0 * r_eq * (20e3 - 20.0)).sqrt();
    close(
        "output noise",
        f(&v["loads"][0], &["output_noise_vrms"]),
        want,
        1e-6,
    );
}
