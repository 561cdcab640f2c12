//! A generator of random valid chains, shared by the tests that need many chains
//! (tests/network_check.rs, tests/properties.rs) and by the benchmarks.
//!
//! The chains are biased by hand (handbook bias design: V_BE = V_T·ln(I_C/I_S), stiff
//! dividers sized for the base current) so that most land in the active region;
//! sometimes a collector resistor is made too large on purpose (saturation).

use super::{BOLTZMANN, ELEMENTARY_CHARGE};
use serde_json::{json, Value};

/// Hands out the uniform numbers drawn by proptest, in order (wrapping around).
pub struct Dice {
    pub values: Vec<f64>,
    pub next: usize,
}

impl Dice {
    pub fn unit(&mut self) -> f64 {
        let v = self.values[self.next % self.values.len()];
        self.next += 1;
        v
    }
    pub fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }
    pub fn log_uniform(&mut self, lo: f64, hi: f64) -> f64 {
        (lo.ln() + (hi.ln() - lo.ln()) * self.unit()).exp()
    }
    pub fn chance(&mut self, p: f64) -> bool {
        self.unit() < p
    }
    pub fn index(&mut self, n: usize) -> usize {
        ((self.unit() * n as f64) as usize).min(n - 1)
    }
}

struct GenDevice {
    beta: f64,
    i_s: f64,
    v_a: Option<f64>,
    vce_sat: Option<f64>,
}

/// Collector current of the device for a given V_BE target, inverted: the V_BE that
/// carries `i_c` (model without the Early factor; an estimate for biasing).
fn v_be_for(d: &GenDevice, v_t: f64, i_c: f64) -> f64 {
    v_t * (i_c / d.i_s).ln()
}

/// A valid chain of 1–5 stages, biased by hand so that most land in the active region;
/// sometimes a collector resistor is made too large on purpose (saturation).
/// The link into stage `id` from its driver (the source when `None`): direct, or one
/// of two coupling capacitors.
fn stage_link(d: &mut Dice, driver: Option<usize>, id: &str, direct: bool) -> Value {
    let from = driver.map_or("source".to_string(), |p| format!("st{p}"));
    let coupling = if direct {
        json!("direct")
    } else if d.chance(0.5) {
        json!("10u")
    } else {
        json!(2.2e-6)
    };
    json!({ "from": from, "to": id, "coupling": coupling })
}

/// Loads on every stage that drives nothing; sometimes a second load elsewhere.
fn pick_load_drivers(d: &mut Dice, driver: &[Option<usize>], n: usize) -> Vec<usize> {
    let mut load_drivers: Vec<usize> = (0..n).filter(|&i| !driver.contains(&Some(i))).collect();
    if load_drivers.len() == 1 && d.chance(0.4) {
        load_drivers.push(d.index(n));
    }
    load_drivers
}

pub fn generate_chain(d: &mut Dice) -> Value {
    let v_cc = (d.uniform(9.0, 24.0) * 2.0).round() / 2.0;
    let temperature_c = if d.chance(0.4) {
        Some(d.uniform(-20.0, 70.0).round())
    } else {
        None
    };
    let v_t = BOLTZMANN * (temperature_c.unwrap_or(25.0) + 273.15) / ELEMENTARY_CHARGE;
    let n_devices = 1 + d.index(2);
    let devices: Vec<GenDevice> = (0..n_devices)
        .map(|_| GenDevice {
            beta: d.uniform(80.0, 400.0).round(),
            i_s: d.log_uniform(1e-15, 1e-13),
            v_a: d.chance(0.5).then(|| d.uniform(30.0, 200.0).round()),
            vce_sat: d
                .chance(0.5)
                .then(|| (d.uniform(0.1, 0.3) * 100.0).round() / 100.0),
        })
        .collect();

    let n = 1 + d.index(5);
    // Driver of each stage: the previous one, or (once per chain) an earlier one, which
    // makes a fan-out.
    let mut driver: Vec<Option<usize>> = vec![None; n];
    let mut branched = false;
    for (i, drv) in driver.iter_mut().enumerate().skip(1) {
        *drv = Some(i - 1);
        if i >= 2 && !branched && d.chance(0.3) {
            *drv = Some(d.index(i - 1));
            branched = true;
        }
    }

    let mut stages_json = Vec::new();
    let mut links_json = Vec::new();
    // Estimated DC voltage of each stage's output node, its collector resistance, kind.
    let mut est_out = vec![0.0; n];
    let mut r_c_of = vec![0.0; n];
    let mut is_ce = vec![false; n];
    for i in 0..n {
        let k_dev = d.index(n_devices);
        let dev = &devices[k_dev];
        let ce = d.chance(0.55);
        is_ce[i] = ce;
        let id = format!("st{i}");
        // Direct coupling when the driver's output voltage suits this stage.
        let mut direct_from: Option<usize> = None;
        if let Some(p) = driver[i] {
            if d.chance(0.45) {
                direct_from = Some(p);
            }
        }
        let mut stage = serde_json::Map::new();
        stage.insert("id".into(), json!(id));
        stage.insert("device".into(), json!(format!("q{k_dev}")));
        if ce {
            stage.insert("type".into(), json!("common_emitter"));
            let mut i_c = d.log_uniform(0.3e-3, 4e-3);
            // Emitter: 0 all unbypassed, 1 all bypassed, 2 both, 3 grounded (rarer, and
            // only with a divider: a grounded emitter cannot be biased from a collector).
            let mut mode = d.index(4);
            if mode == 3 && (direct_from.is_some() || d.chance(0.5)) {
                mode = d.index(3);
            }
            let mut v_b = 0.0;
            if let Some(p) = direct_from {
                // Our base current flows through the driver's collector resistor.
                if is_ce[p] {
                    i_c = i_c.min(0.4 * dev.beta / r_c_of[p]);
                }
                let drop = if is_ce[p] {
                    i_c / dev.beta * r_c_of[p]
                } else {
                    0.0
                };
                v_b = est_out[p] - drop;
                let v_e = v_b - v_be_for(dev, v_t, i_c);
                if v_e >= 0.3 && v_cc - v_e >= 4.5 {
                    est_out[p] -= drop;
                } else {
                    direct_from = None;
                }
            }
            let v_be = v_be_for(dev, v_t, i_c);
            if direct_from.is_none() {
                v_b = if mode == 3 { v_be } else { d.uniform(1.0, 3.0) };
            }
            let v_e = if mode == 3 { 0.0 } else { v_b - v_be };
            let i_e = i_c * (1.0 + 1.0 / dev.beta);
            let r_e_total = v_e / i_e;
            match mode {
                0 => {
                    stage.insert("r_emitter".into(), json!(r_e_total));
                }
                1 => {
                    stage.insert("r_emitter_bypassed".into(), json!(r_e_total));
                    stage.insert("c_bypass".into(), json!("100u"));
                }
                2 => {
                    let fraction = d.uniform(0.1, 0.5);
                    stage.insert("r_emitter".into(), json!(fraction * r_e_total));
                    stage.insert(
                        "r_emitter_bypassed".into(),
                        json!((1.0 - fraction) * r_e_total),
                    );
                    stage.insert("c_bypass".into(), json!(47e-6));
                }
                _ => {}
            }
            let v_ce = d.uniform(2.5, v_cc - v_e - 1.0);
            let early = dev.v_a.map_or(1.0, |v_a| 1.0 + v_ce / v_a);
            let i_c_expected = if mode == 3 { i_c * early } else { i_c };
            let mut r_c = (v_cc - v_e - v_ce) / i_c_expected;
            if d.chance(0.08) {
                r_c *= d.uniform(2.0, 5.0); // on purpose: likely saturated
            }
            stage.insert("r_collector".into(), json!(r_c));
            let i_b = i_c / dev.beta;
            if direct_from.is_none() {
                let r_bottom = d.log_uniform(2.2e3, 47e3);
                // Divider sized for V_B with the base current drawn from it.
                let r_top = (v_cc - v_b) / (v_b / r_bottom + i_b);
                stage.insert("r_top".into(), json!(r_top));
                stage.insert("r_bottom".into(), json!(r_bottom));
            } else if d.chance(0.2) {
                // A weak divider whose open-circuit voltage is the base voltage.
                let r_bottom = d.log_uniform(100e3, 1e6);
                stage.insert("r_top".into(), json!(r_bottom * (v_cc - v_b) / v_b));
                stage.insert("r_bottom".into(), json!(r_bottom));
            }
            est_out[i] = v_cc - i_c * r_c;
            r_c_of[i] = r_c;
        } else {
            stage.insert("type".into(), json!("emitter_follower"));
            let mut i_e = d.log_uniform(0.5e-3, 8e-3);
            let mut v_b = 0.0;
            if let Some(p) = direct_from {
                if is_ce[p] {
                    i_e = i_e.min(0.4 * (dev.beta + 1.0) / r_c_of[p]);
                }
                let drop = if is_ce[p] {
                    i_e / (dev.beta + 1.0) * r_c_of[p]
                } else {
                    0.0
                };
                v_b = est_out[p] - drop;
                let v_e = v_b - v_be_for(dev, v_t, i_e);
                if v_e >= 0.5 && v_cc - v_e >= 2.5 {
                    est_out[p] -= drop;
                } else {
                    direct_from = None;
                }
            }
            if direct_from.is_none() {
                v_b = d.uniform(0.3, 0.65) * v_cc;
            }
            let v_e = v_b - v_be_for(dev, v_t, i_e);
            stage.insert("r_emitter".into(), json!(v_e / i_e));
            if d.chance(0.5) {
                let drop = d.uniform(0.1, 0.5) * (v_cc - v_e - 2.0);
                stage.insert(
                    "r_collector".into(),
                    json!(drop / (i_e * dev.beta / (dev.beta + 1.0))),
                );
            }
            let i_b = i_e / (dev.beta + 1.0);
            if direct_from.is_none() {
                let r_bottom = d.log_uniform(10e3, 100e3);
                let r_top = (v_cc - v_b) / (v_b / r_bottom + i_b);
                stage.insert("r_top".into(), json!(r_top));
                stage.insert("r_bottom".into(), json!(r_bottom));
            }
            est_out[i] = v_e;
        }
        stages_json.push(Value::Object(stage));
        links_json.push(stage_link(d, driver[i], &id, direct_from.is_some()));
    }

    let load_drivers = pick_load_drivers(d, &driver, n);
    let mut loads_json = Vec::new();
    for (j, &p) in load_drivers.iter().enumerate() {
        let id = format!("load{j}");
        loads_json.push(json!({ "id": id, "resistance": d.log_uniform(600.0, 100e3) }));
        let coupling = if !is_ce[p] && d.chance(0.15) {
            json!("direct")
        } else {
            json!("22u")
        };
        links_json.push(json!({ "from": format!("st{p}"), "to": id, "coupling": coupling }));
    }

    let mut devices_json = serde_json::Map::new();
    for (k, dev) in devices.iter().enumerate() {
        let mut m = serde_json::Map::new();
        m.insert("polarity".into(), json!("npn"));
        m.insert("beta".into(), json!(dev.beta));
        m.insert("saturation_current".into(), json!(dev.i_s));
        if let Some(v_a) = dev.v_a {
            m.insert("early_voltage".into(), json!(format!("{v_a} V")));
        }
        if let Some(v) = dev.vce_sat {
            m.insert("vce_sat".into(), json!(v));
        }
        devices_json.insert(format!("q{k}"), Value::Object(m));
    }
    let mut chain = serde_json::Map::new();
    chain.insert("title".into(), json!("Generated chain"));
    chain.insert("supply".into(), json!(v_cc));
    if let Some(t) = temperature_c {
        chain.insert("temperature".into(), json!(format!("{t} C")));
    }
    chain.insert("devices".into(), Value::Object(devices_json));
    chain.insert(
        "source".into(),
        json!({
            "resistance": d.log_uniform(50.0, 20e3),
            "level": format!("{:.3} mV rms", d.uniform(1.0, 100.0)),
        }),
    );
    chain.insert("stages".into(), Value::Array(stages_json));
    chain.insert("loads".into(), Value::Array(loads_json));
    chain.insert("links".into(), Value::Array(links_json));
    Value::Object(chain)
}

/// A plain common emitter a cascode may stack on: (PNP, rails, R_C, I_C, collector
/// voltage in its frame).
type PlainCe = (bool, RailPair, f64, f64, f64);

/// One stage's rails in a v2 chain: their names and voltages.
#[derive(Clone, Copy)]
struct RailPair {
    top: (&'static str, f64),
    bottom: (&'static str, f64),
    /// Written into the stage (`false`: the defaults, top = most positive rail,
    /// bottom = ground).
    explicit: bool,
}

/// A valid version-2 chain of 1–5 stages mixing NPN and PNP devices, split rails,
/// base and collector resistances, common-emitter (some biased by `r_feedback`),
/// emitter-follower and common-base stages and supply filters, biased by hand so that
/// most land in the active region.
///
/// Each stage is designed in its own frame: u runs from the stage's rail on the
/// emitter side (`lo`, u = 0 before a filter) to the rail on the collector side (`hi`);
/// an NPN's real voltage is bottom + u, a PNP's is top − u (it hangs upside down). A
/// supply filter takes its drop off the top rail's end of the frame.
pub fn generate_chain_v2(d: &mut Dice) -> Value {
    let split = d.chance(0.7);
    let vcc = (d.uniform(6.0, 18.0) * 2.0).round() / 2.0;
    let vee = -(d.uniform(6.0, 18.0) * 2.0).round() / 2.0;
    let temperature_c = d.chance(0.3).then(|| d.uniform(-20.0, 70.0).round());
    let v_t = BOLTZMANN * (temperature_c.unwrap_or(25.0) + 273.15) / ELEMENTARY_CHARGE;
    let top_name = if split { "vcc" } else { "supply" };

    struct Dev2 {
        g: GenDevice,
        pnp: bool,
        r_bb: Option<f64>,
        r_c: Option<f64>,
    }
    let n_devices = 1 + d.index(3);
    let devices: Vec<Dev2> = (0..n_devices)
        .map(|k| Dev2 {
            g: GenDevice {
                beta: d.uniform(80.0, 400.0).round(),
                i_s: d.log_uniform(1e-15, 1e-13),
                v_a: d.chance(0.6).then(|| d.uniform(30.0, 200.0).round()),
                vce_sat: d
                    .chance(0.5)
                    .then(|| (d.uniform(0.1, 0.3) * 100.0).round() / 100.0),
            },
            // Both polarities in most chains with two or more devices.
            pnp: if k == 1 { true } else { d.chance(0.4) },
            r_bb: d.chance(0.5).then(|| d.log_uniform(5.0, 300.0)),
            r_c: d.chance(0.4).then(|| d.log_uniform(1.0, 50.0)),
        })
        .collect();

    let n = 1 + d.index(5);
    let mut driver: Vec<Option<usize>> = vec![None; n];
    let mut branched = false;
    for (i, drv) in driver.iter_mut().enumerate().skip(1) {
        *drv = Some(i - 1);
        if i >= 2 && !branched && d.chance(0.3) {
            *drv = Some(d.index(i - 1));
            branched = true;
        }
    }

    let mut stages_json = Vec::new();
    let mut links_json = Vec::new();
    // Estimated real DC voltage of each stage's output node, the DC resistance behind
    // it (a collector resistor; ~0 for a follower) and whether a base may hang on it.
    let mut est_out = vec![0.0; n];
    let mut r_out_of = vec![0.0f64; n];
    // A plain common emitter (no feedback, no filter) that a common base may stack on
    // (a cascode): polarity, rails, R_C, I_C, collector in its frame.
    let mut plain_ce: Vec<Option<PlainCe>> = vec![None; n];
    for i in 0..n {
        let cascode_on = driver[i].filter(|&p| plain_ce[p].is_some() && d.chance(0.4));
        let k_dev = match cascode_on.and_then(|p| plain_ce[p]) {
            // The same polarity as the lower device when there is one.
            Some((pnp, ..)) => {
                let same: Vec<usize> = (0..n_devices).filter(|&k| devices[k].pnp == pnp).collect();
                if same.is_empty() {
                    d.index(n_devices)
                } else {
                    same[d.index(same.len())]
                }
            }
            None => d.index(n_devices),
        };
        let dev = &devices[k_dev];
        let cascode_on = cascode_on.filter(|&p| plain_ce[p].is_some_and(|c| c.0 == dev.pnp));
        let g = &dev.g;
        let sign = if dev.pnp { -1.0 } else { 1.0 };
        let rails = if let Some(p) = cascode_on {
            plain_ce[p].expect("plain").1
        } else if split {
            match d.index(4) {
                0 => RailPair {
                    top: ("vcc", vcc),
                    bottom: ("ground", 0.0),
                    explicit: false,
                },
                1 => RailPair {
                    top: ("ground", 0.0),
                    bottom: ("vee", vee),
                    explicit: true,
                },
                _ => RailPair {
                    top: ("vcc", vcc),
                    bottom: ("vee", vee),
                    explicit: true,
                },
            }
        } else {
            RailPair {
                top: (top_name, vcc),
                bottom: ("ground", 0.0),
                explicit: false,
            }
        };
        let span = rails.top.1 - rails.bottom.1;
        let real = |u: f64| {
            if dev.pnp {
                rails.top.1 - u
            } else {
                rails.bottom.1 + u
            }
        };
        let frame = |v: f64| {
            if dev.pnp {
                rails.top.1 - v
            } else {
                v - rails.bottom.1
            }
        };
        let kind = match d.index(20) {
            _ if cascode_on.is_some() => "cb",
            0..=6 => "ce",
            7..=9 => "ce_feedback",
            10..=15 => "ef",
            _ => "cb",
        };
        let id = format!("st{i}");
        let mut stage = serde_json::Map::new();
        stage.insert("id".into(), json!(id));
        stage.insert("device".into(), json!(format!("q{k_dev}")));
        if rails.explicit {
            stage.insert(
                "rails".into(),
                json!({ "top": rails.top.0, "bottom": rails.bottom.0 }),
            );
        }
        let i_c_target = match kind {
            "ef" => d.log_uniform(0.5e-3, 6e-3),
            _ => d.log_uniform(0.3e-3, 3e-3),
        };
        // A supply filter takes its drop at the top rail's end of the frame.
        let drop = if cascode_on.is_none() && d.chance(0.3) {
            let drop = d.uniform(0.03, 0.12) * span;
            let resistance = drop / (1.2 * i_c_target);
            stage.insert(
                "supply_filter".into(),
                json!({ "resistance": resistance, "capacitance": format!("{}u", [47, 100, 220, 470][d.index(4)]) }),
            );
            drop
        } else {
            0.0
        };
        let (lo, hi) = if dev.pnp {
            (drop, span)
        } else {
            (0.0, span - drop)
        };
        // Write a frame divider (to lo, to hi) with the real sides' names.
        let divider = |stage: &mut serde_json::Map<String, Value>, r_lo: f64, r_hi: f64| {
            let (r_top, r_bottom) = if dev.pnp { (r_lo, r_hi) } else { (r_hi, r_lo) };
            stage.insert("r_top".into(), json!(r_top));
            stage.insert("r_bottom".into(), json!(r_bottom));
        };
        let mut i_c = i_c_target;
        let mut direct_from: Option<usize> = None;
        let mut u_b = 0.0;
        if let (Some(p), true) = (driver[i], kind == "ce" || kind == "ef") {
            if d.chance(0.45) {
                // Our base current leaves (NPN) or enters (PNP) the driver's output node.
                i_c = i_c.min(0.3 * g.beta / r_out_of[p].max(1.0));
                let shift = -sign * i_c / g.beta * r_out_of[p];
                let u = frame(est_out[p] + shift);
                let u_e = u - v_be_for(g, v_t, i_c);
                let fits = match kind {
                    "ce" => u_e >= lo + 0.3 && hi - u_e >= 4.5,
                    _ => u_e >= lo + 0.5 && hi - u_e >= 2.5,
                };
                if fits {
                    direct_from = Some(p);
                    est_out[p] += shift;
                    u_b = u;
                }
            }
        }
        let v_be = v_be_for(g, v_t, i_c);
        let i_b = i_c / g.beta;
        let i_e = i_c + i_b;
        let room = hi - lo;
        match kind {
            "ce" | "ce_feedback" => {
                stage.insert("type".into(), json!("common_emitter"));
                let feedback = kind == "ce_feedback";
                // Emitter: 0 unbypassed, 1 bypassed, 2 both, 3 grounded (divider only).
                let mut mode = d.index(4);
                if mode == 3 && (direct_from.is_some() || feedback || d.chance(0.5)) {
                    mode = d.index(3);
                }
                if direct_from.is_none() {
                    u_b = if mode == 3 {
                        lo + v_be
                    } else {
                        lo + d.uniform(1.0, 0.25 * room)
                    };
                }
                let u_e = if mode == 3 { lo } else { u_b - v_be };
                let r_e_total = (u_e - lo) / i_e;
                match mode {
                    0 => {
                        stage.insert("r_emitter".into(), json!(r_e_total));
                    }
                    1 => {
                        stage.insert("r_emitter_bypassed".into(), json!(r_e_total));
                        stage.insert("c_bypass".into(), json!("100u"));
                    }
                    2 => {
                        let fraction = d.uniform(0.1, 0.5);
                        stage.insert("r_emitter".into(), json!(fraction * r_e_total));
                        stage.insert(
                            "r_emitter_bypassed".into(),
                            json!((1.0 - fraction) * r_e_total),
                        );
                        stage.insert("c_bypass".into(), json!(47e-6));
                    }
                    _ => {}
                }
                let v_ce = d.uniform(2.5, (hi - u_e - 1.0).max(2.6));
                let u_c = u_e + v_ce;
                let early = g.v_a.map_or(1.0, |v_a| 1.0 + v_ce / v_a);
                let i_c_real = if mode == 3 { i_c * early } else { i_c };
                if feedback {
                    // Collector feedback: the base current (and an optional resistor
                    // from the base to the lo rail) flows in r_feedback.
                    let r_lo = d.chance(0.3).then(|| d.log_uniform(47e3, 470e3));
                    let i_f = i_b + r_lo.map_or(0.0, |r| (u_b - lo) / r);
                    stage.insert("r_feedback".into(), json!((u_c - u_b) / i_f));
                    if let Some(r) = r_lo {
                        let key = if dev.pnp { "r_top" } else { "r_bottom" };
                        stage.insert(key.into(), json!(r));
                    }
                    let mut r_c = (hi - u_c) / (i_c_real + i_f);
                    if d.chance(0.08) {
                        r_c *= d.uniform(2.0, 5.0); // on purpose: likely saturated
                    }
                    stage.insert("r_collector".into(), json!(r_c));
                    r_out_of[i] = r_c;
                } else {
                    let mut r_c = (hi - u_c) / i_c_real;
                    if d.chance(0.08) {
                        r_c *= d.uniform(2.0, 5.0);
                    }
                    stage.insert("r_collector".into(), json!(r_c));
                    r_out_of[i] = r_c;
                    if drop == 0.0 {
                        plain_ce[i] = Some((dev.pnp, rails, r_c, i_c_real, u_c));
                    }
                    if direct_from.is_none() {
                        let r_lo = d.log_uniform(2.2e3, 47e3);
                        let r_hi = (hi - u_b) / ((u_b - lo) / r_lo + i_b);
                        divider(&mut stage, r_lo, r_hi);
                    } else if d.chance(0.2) {
                        let r_lo = d.log_uniform(100e3, 1e6);
                        divider(&mut stage, r_lo, r_lo * (hi - u_b) / (u_b - lo));
                    }
                }
                est_out[i] = real(u_c);
            }
            "ef" => {
                stage.insert("type".into(), json!("emitter_follower"));
                if direct_from.is_none() {
                    u_b = lo + d.uniform(0.3, 0.65) * room;
                }
                let u_e = u_b - v_be;
                stage.insert("r_emitter".into(), json!((u_e - lo) / i_e));
                if d.chance(0.5) {
                    let drop = d.uniform(0.1, 0.5) * (hi - u_e - 2.0);
                    stage.insert("r_collector".into(), json!(drop / i_c));
                }
                if direct_from.is_none() {
                    let r_lo = d.log_uniform(10e3, 100e3);
                    let r_hi = (hi - u_b) / ((u_b - lo) / r_lo + i_b);
                    divider(&mut stage, r_lo, r_hi);
                }
                est_out[i] = real(u_e);
                r_out_of[i] = 0.0;
            }
            _ => {
                stage.insert("type".into(), json!("common_base"));
                // A cascode: the emitter sits δ above the lower collector's planned
                // voltage, so its R_C passes δ/R_C less and this stage carries that.
                // Half of them are true cascodes: the lower collector has no r_collector
                // and this stage carries all of its current, I_C2 = α₂·I_C1.
                let stacked = cascode_on.and_then(|p| {
                    let (_, _, r_c1, i_c1, u_c1) = plain_ce[p].expect("plain");
                    let delta = d.uniform(0.2, 0.5) * (hi - u_c1);
                    let u_e = u_c1 + delta;
                    let alpha = g.beta / (g.beta + 1.0);
                    let whole = d.chance(0.7);
                    let i_c2 = if whole {
                        i_c1 * alpha
                    } else {
                        (delta / r_c1).min(0.9 * i_c1) * alpha
                    };
                    (hi - u_e >= 3.6).then_some((p, u_e, i_c2, whole))
                });
                if let Some((p, _, _, true)) = stacked {
                    if let Value::Object(lower) = &mut stages_json[p] {
                        lower.remove("r_collector");
                    }
                }
                let stacked = stacked.map(|(p, u_e, i_c2, _)| (p, u_e, i_c2));
                let (u_e, i_c, i_b) = match stacked {
                    Some((p, u_e, i_c2)) => {
                        direct_from = Some(p);
                        est_out[p] = real(u_e);
                        (u_e, i_c2, i_c2 / g.beta)
                    }
                    None => {
                        let u_e = lo + d.uniform(1.5, 0.3 * room) - v_be;
                        stage.insert("r_emitter".into(), json!((u_e - lo) / i_e));
                        (u_e, i_c, i_b)
                    }
                };
                u_b = u_e + v_be_for(g, v_t, i_c);
                let v_ce = d.uniform(2.5, (hi - u_e - 1.0).max(2.6));
                let r_c = (hi - u_e - v_ce) / i_c;
                stage.insert("r_collector".into(), json!(r_c));
                let r_lo = d.log_uniform(4.7e3, 47e3);
                let r_hi = (hi - u_b) / ((u_b - lo) / r_lo + i_b);
                divider(&mut stage, r_lo, r_hi);
                stage.insert(
                    "c_base".into(),
                    json!(format!("{}u", [10, 22, 47, 100][d.index(4)])),
                );
                est_out[i] = real(u_e + v_ce);
                r_out_of[i] = r_c;
            }
        }
        stages_json.push(Value::Object(stage));
        links_json.push(stage_link(d, driver[i], &id, direct_from.is_some()));
    }

    let load_drivers = pick_load_drivers(d, &driver, n);
    let mut loads_json = Vec::new();
    for (j, &p) in load_drivers.iter().enumerate() {
        let id = format!("load{j}");
        loads_json.push(json!({ "id": id, "resistance": d.log_uniform(600.0, 100e3) }));
        links_json.push(json!({ "from": format!("st{p}"), "to": id, "coupling": "22u" }));
    }

    let mut devices_json = serde_json::Map::new();
    for (k, dev) in devices.iter().enumerate() {
        let mut m = serde_json::Map::new();
        m.insert(
            "polarity".into(),
            json!(if dev.pnp { "pnp" } else { "npn" }),
        );
        m.insert("beta".into(), json!(dev.g.beta));
        m.insert("saturation_current".into(), json!(dev.g.i_s));
        if let Some(v_a) = dev.g.v_a {
            m.insert("early_voltage".into(), json!(format!("{v_a} V")));
        }
        if let Some(v) = dev.g.vce_sat {
            m.insert("vce_sat".into(), json!(v));
        }
        if let Some(r) = dev.r_bb {
            m.insert("base_resistance".into(), json!(r));
        }
        if let Some(r) = dev.r_c {
            m.insert("collector_resistance".into(), json!(r));
        }
        devices_json.insert(format!("q{k}"), Value::Object(m));
    }
    let mut chain = serde_json::Map::new();
    chain.insert("version".into(), json!(2));
    chain.insert("title".into(), json!("Generated v2 chain"));
    if split {
        chain.insert(
            "supplies".into(),
            json!({ "vcc": format!("{vcc} V"), "vee": format!("{vee} V") }),
        );
    } else {
        chain.insert("supply".into(), json!(vcc));
    }
    if let Some(t) = temperature_c {
        chain.insert("temperature".into(), json!(format!("{t} C")));
    }
    chain.insert("devices".into(), Value::Object(devices_json));
    chain.insert(
        "source".into(),
        json!({
            "resistance": d.log_uniform(50.0, 20e3),
            "level": format!("{:.3} mV rms", d.uniform(1.0, 50.0)),
        }),
    );
    chain.insert("stages".into(), Value::Array(stages_json));
    chain.insert("loads".into(), Value::Array(loads_json));
    chain.insert("links".into(), Value::Array(links_json));
    Value::Object(chain)
}

/// Close one loop in a generated chain (`generate_chain_v2`'s shape): a feedback link
/// from a stage that a stage drives back to one of its forward ancestors, R from 4.7 kΩ
/// to 1 MΩ, a series capacitor (so the operating points stay those of the open chain),
/// into the input or the emitter. `None` when no stage is driven by a stage.
pub fn add_feedback_link(chain: &mut Value, d: &mut Dice) -> Option<(String, String)> {
    add_feedback_link_with(chain, d, true)
}

/// [`add_feedback_link`], the series capacitor left out when `capacitor` is false (the
/// loop then sets the operating points too; the chain may leave the active region).
pub fn add_feedback_link_with(
    chain: &mut Value,
    d: &mut Dice,
    capacitor: bool,
) -> Option<(String, String)> {
    let stage_ids: Vec<String> = chain["stages"]
        .as_array()?
        .iter()
        .map(|s| s["id"].as_str().expect("id").to_string())
        .collect();
    let driver_of = |id: &str| -> Option<String> {
        chain["links"].as_array()?.iter().find_map(|l| {
            let from = l["from"].as_str()?;
            (l["to"].as_str()? == id && stage_ids.iter().any(|s| s == from))
                .then(|| from.to_string())
        })
    };
    let candidates: Vec<&String> = stage_ids
        .iter()
        .filter(|s| driver_of(s).is_some())
        .collect();
    if candidates.is_empty() {
        return None;
    }
    let from = candidates[d.index(candidates.len())].clone();
    let mut ancestors = Vec::new();
    let mut at = from.clone();
    while let Some(up) = driver_of(&at) {
        ancestors.push(up.clone());
        at = up;
    }
    let to = ancestors[d.index(ancestors.len())].clone();
    let into = if d.chance(0.5) { "input" } else { "emitter" };
    let link = serde_json::json!({
        "from": from, "to": to, "coupling": "feedback",
        "resistance": d.log_uniform(4.7e3, 1e6),
        "capacitance": format!("{}u", [10, 22, 47][d.index(3)]),
        "into": into,
    });
    let mut link = link;
    if !capacitor {
        link.as_object_mut()?.remove("capacitance");
    }
    chain["links"].as_array_mut()?.push(link);
    Some((from, to))
}

/// A mixed chain: a version-2 chain ([`generate_chain_v2`]: bipolar stages of every
/// kind, both polarities, split rails) with other kinds spliced into its
/// capacitor-coupled links — sometimes a self-biased n- or p-JFET stage in front, and
/// one to three passive (attenuator, potentiometer of either taper, low-pass,
/// high-pass) or op-amp (non-inverting, follower, inverting) stages. A spliced stage
/// may be direct from the source or direct into a load; an op-amp stage sometimes
/// direct from its transistor driver or direct into a divider-biased transistor stage
/// (one DC group with them); a capacitor-coupled non-inverting stage has `r_bias` (the
/// planner's `Chain::from_spec` rules).
pub fn generate_mixed_chain(d: &mut Dice) -> Value {
    let mut chain = generate_chain_v2(d);
    let split = chain.get("supplies").is_some();
    let v_top = if split {
        let text = chain["supplies"]["vcc"].as_str().expect("vcc");
        text.trim_end_matches(" V").parse::<f64>().expect("volts")
    } else {
        chain["supply"].as_f64().expect("supply")
    };
    if d.chance(0.35) {
        add_jfet_front(&mut chain, d, v_top);
    }
    let splices = 1 + d.index(3);
    for k in 0..splices {
        // A capacitor-coupled forward link to splice into.
        let links = chain["links"].as_array().expect("links");
        let candidates: Vec<usize> = (0..links.len())
            .filter(|&l| {
                let c = &links[l]["coupling"];
                c != "direct" && c != "feedback"
            })
            .collect();
        let l = candidates[d.index(candidates.len())];
        let from = chain["links"][l]["from"]
            .as_str()
            .expect("from")
            .to_string();
        let to = chain["links"][l]["to"].as_str().expect("to").to_string();
        let to_load = to.starts_with("load");
        let opamp = d.chance(0.5);
        let id = format!("{}{k}", if opamp { "op" } else { "px" });
        // Direct from the source (its DC path is R_S) or into a load, sometimes.
        let mut direct_in = from == "source" && d.chance(0.4);
        let mut direct_out = to_load && d.chance(0.5);
        let mut stage = if opamp {
            opamp_stage(&mut chain, d, &id, v_top, split, direct_in)
        } else {
            passive_stage(d, &id)
        };
        // An op-amp stage in a direct group (docs/definitions.md "Op-amp"): its + input
        // on a transistor stage's output (a follower or a gain of at most two), or its
        // pin on a divider-biased transistor stage's base, its reference at the
        // divider's voltage so that the pin rests near where the divider held the base.
        let transistor_driver = from.starts_with("st") || from == "jf";
        if opamp && !direct_in && transistor_driver && d.chance(0.4) {
            direct_into_opamp(&chain, d, &mut stage, split);
            direct_in = true;
        }
        if opamp && !direct_in && !to_load && d.chance(0.7) {
            direct_out = direct_from_opamp(&mut chain, &mut stage, &to, split);
        }
        // Listed in signal order: just before the stage it drives.
        let stages = chain["stages"].as_array_mut().expect("stages");
        let at = stages
            .iter()
            .position(|s| s["id"] == to.as_str())
            .unwrap_or(stages.len());
        stages.insert(at, stage);
        chain["links"][l]["to"] = json!(id);
        if direct_in {
            chain["links"][l]["coupling"] = json!("direct");
        }
        let coupling = if direct_out {
            json!("direct")
        } else {
            json!(["1u", "4u7", "22u"][d.index(3)])
        };
        chain["links"]
            .as_array_mut()
            .expect("links")
            .push(json!({ "from": id, "to": to, "coupling": coupling }));
    }
    // Sometimes one loop (`add_feedback_link_with`, a tenth without the series
    // capacitor), which may hold op-amp and passive stages and return to one: into
    // its input then, as only a transistor has an emitter.
    if d.chance(0.45) {
        let capacitor = !d.chance(0.1);
        if let Some((_, to)) = add_feedback_link_with(&mut chain, d, capacitor) {
            let kind = chain["stages"]
                .as_array()
                .and_then(|s| s.iter().find(|s| s["id"] == to.as_str()))
                .and_then(|s| s["type"].as_str())
                .unwrap_or("")
                .to_string();
            let transistor =
                ["common_emitter", "emitter_follower", "common_base"].contains(&kind.as_str());
            if !transistor {
                let links = chain["links"].as_array_mut().expect("links");
                let last = links.last_mut().expect("the feedback link");
                last["into"] = json!("input");
            }
        }
    }
    chain["title"] = json!("Generated mixed chain");
    chain
}

/// Make a spliced op-amp stage take its + input's DC level from a transistor stage's
/// output, on the chain's outer rails: a non-inverting follower (with or without a
/// feedback resistor), or a gain of at most two about a reference at mid-rail, with
/// `r_bias` sometimes kept; an inverting stage is turned into the follower.
fn direct_into_opamp(chain: &Value, d: &mut Dice, stage: &mut Value, split: bool) {
    let o = stage.as_object_mut().expect("stage");
    for key in ["r_input", "r_feedback", "r_ground"] {
        o.remove(key);
    }
    o.insert("type".into(), json!("opamp_noninverting"));
    match d.index(3) {
        0 => {}
        1 => {
            o.insert("r_feedback".into(), json!(d.log_uniform(1e3, 100e3)));
        }
        _ => {
            let r_g = d.log_uniform(4.7e3, 47e3);
            o.insert("r_ground".into(), json!(r_g));
            o.insert("r_feedback".into(), json!(r_g * d.uniform(0.1, 1.0)));
        }
    }
    // Without r_bias a finite r_in is bootstrapped by A_0 into an input of ~1e11 Ω,
    // whose value neither side resolves to 1e-9: dropped only with r_in = ∞ (no load).
    let r_in_finite = o["device"]
        .as_str()
        .is_some_and(|dev| chain["devices"][dev].get("input_resistance").is_some());
    if d.chance(0.5) && !r_in_finite {
        o.remove("r_bias");
    }
    let (rails, mid) = if split {
        (json!({ "top": "vcc", "bottom": "vee" }), 0.0)
    } else {
        let top = chain["supply"].as_f64().unwrap_or(0.0);
        (json!({ "top": "supply", "bottom": "ground" }), top / 2.0)
    };
    o.insert("rails".into(), rails);
    o.insert("reference".into(), json!(mid));
}

/// Make a spliced op-amp stage drive stage `to`'s input directly when `to` is an
/// emitter follower with a two-resistor divider whose open-circuit voltage
/// the op-amp can reach: the op-amp's reference is set to that voltage and its rails to
/// the chain's outer rails. Returns whether it did.
fn direct_from_opamp(chain: &mut Value, stage: &mut Value, to: &str, split: bool) -> bool {
    let volts = |chain: &Value, name: &str| -> f64 {
        if name == "ground" {
            return 0.0;
        }
        match chain.get("supplies") {
            Some(s) => s[name]
                .as_str()
                .and_then(|t| t.trim_end_matches(" V").parse().ok())
                .unwrap_or(f64::NAN),
            None => chain["supply"].as_f64().unwrap_or(f64::NAN),
        }
    };
    let Some(next) = chain["stages"]
        .as_array()
        .and_then(|s| s.iter().find(|s| s["id"] == to))
        .cloned()
    else {
        return false;
    };
    let kind = next["type"].as_str().unwrap_or("");
    let (Some(r_t), Some(r_b)) = (next["r_top"].as_f64(), next["r_bottom"].as_f64()) else {
        return false;
    };
    if kind != "emitter_follower" {
        return false;
    }
    let top_name = next["rails"]["top"].as_str().unwrap_or("");
    let bottom_name = next["rails"]["bottom"].as_str().unwrap_or("ground");
    let v_top = if top_name.is_empty() {
        match chain.get("supplies") {
            Some(_) => volts(chain, "vcc"),
            None => volts(chain, "supply"),
        }
    } else {
        volts(chain, top_name)
    };
    let v_bottom = volts(chain, bottom_name);
    // The divider's open-circuit voltage (Ohm's law).
    let v_b = v_bottom + (v_top - v_bottom) * r_b / (r_t + r_b);
    let (hi, lo) = if split {
        (volts(chain, "vcc"), volts(chain, "vee"))
    } else {
        (volts(chain, "supply"), 0.0)
    };
    let margin = stage["device"]
        .as_str()
        .and_then(|dev| chain["devices"][dev]["swing_margin"].as_f64())
        .unwrap_or(1.0);
    if !(v_b > lo + margin + 0.5 && v_b < hi - margin - 0.5) {
        return false;
    }
    let o = stage.as_object_mut().expect("stage");
    o.insert("reference".into(), json!(v_b));
    let rails = if split {
        json!({ "top": "vcc", "bottom": "vee" })
    } else {
        json!({ "top": "supply", "bottom": "ground" })
    };
    o.insert("rails".into(), rails);
    true
}

/// A passive stage (docs/definitions.md "Passive stages") with values drawn at random.
fn passive_stage(d: &mut Dice, id: &str) -> Value {
    match d.index(4) {
        0 => json!({ "id": id, "type": "attenuator",
                     "r_series": d.log_uniform(100.0, 22e3), "r_shunt": d.log_uniform(100.0, 22e3) }),
        1 => {
            let mut pot = json!({ "id": id, "type": "potentiometer",
                "resistance": d.log_uniform(1e3, 100e3),
                "position": if d.chance(0.1) { 1.0 } else { d.uniform(0.05, 1.0) } });
            match d.index(3) {
                0 => pot["taper"] = json!("audio"),
                1 => pot["taper"] = json!("linear"),
                _ => {}
            }
            pot
        }
        2 => json!({ "id": id, "type": "low_pass",
                     "resistance": d.log_uniform(100.0, 10e3), "capacitance": d.log_uniform(1e-10, 1e-8) }),
        _ => json!({ "id": id, "type": "high_pass",
                     "capacitance": d.log_uniform(1e-8, 1e-6), "resistance": d.log_uniform(10e3, 1e6) }),
    }
}

/// An op-amp stage and its own device (docs/definitions.md "Op-amp"): on split rails
/// around ground, or between a positive rail and ground around a mid-rail reference
/// (a rail named "mid" added to the supplies, or a voltage).
fn opamp_stage(
    chain: &mut Value,
    d: &mut Dice,
    id: &str,
    v_top: f64,
    split: bool,
    direct_in: bool,
) -> Value {
    let device = format!("amp_{id}");
    let mut amp = json!({ "polarity": "opamp",
        "gain_bandwidth": d.log_uniform(1e5, 2e7) });
    amp["open_loop_gain"] = if d.chance(0.5) {
        json!(d.log_uniform(1e3, 1e6))
    } else {
        json!(format!("{:.1} dB", d.uniform(60.0, 120.0)))
    };
    if d.chance(0.6) {
        amp["input_resistance"] = json!(d.log_uniform(1e5, 1e9));
    }
    match d.index(3) {
        0 => amp["output_resistance"] = json!(d.log_uniform(5.0, 200.0)),
        1 => amp["output_resistance"] = json!(0.0),
        _ => {}
    }
    if d.chance(0.5) {
        amp["swing_margin"] = json!(d.uniform(0.2, 2.0));
    }
    if d.chance(0.5) {
        amp["output_current_limit"] = json!(d.log_uniform(1e-4, 4e-2));
    }
    if d.chance(0.3) {
        amp["voltage_noise"] = json!("8 nV/rtHz");
        amp["current_noise"] = json!("0.5 pA/rtHz");
    }
    chain["devices"][&device] = amp;
    let mut stage = json!({ "id": id, "device": device });
    if d.chance(0.6) {
        stage["type"] = json!("opamp_noninverting");
        match d.index(4) {
            // The follower: no r_feedback, no r_ground.
            0 => {}
            // Feedback resistor alone: still a gain of one.
            1 => stage["r_feedback"] = json!(d.log_uniform(1e3, 100e3)),
            _ => {
                let r_g = d.log_uniform(1e3, 22e3);
                stage["r_ground"] = json!(r_g);
                stage["r_feedback"] = json!(r_g * d.uniform(0.5, 20.0));
            }
        }
        if !direct_in || d.chance(0.5) {
            stage["r_bias"] = json!(d.log_uniform(10e3, 1e6));
        }
    } else {
        stage["type"] = json!("opamp_inverting");
        let r_in = d.log_uniform(1e3, 47e3);
        stage["r_input"] = json!(r_in);
        stage["r_feedback"] = json!(r_in * d.uniform(0.3, 10.0));
    }
    match (split, d.index(3)) {
        (true, 0) => {
            stage["rails"] = json!({ "top": "vcc", "bottom": "vee" });
            if d.chance(0.5) {
                stage["reference"] = json!("ground");
            }
        }
        (true, 1) => {
            chain["supplies"]["mid"] = json!(format!("{} V", v_top / 2.0));
            stage["rails"] = json!({ "top": "vcc", "bottom": "ground" });
            stage["reference"] = json!("mid");
        }
        (true, _) => {
            stage["rails"] = json!({ "top": "vcc", "bottom": "ground" });
            stage["reference"] = json!(format!("{} V", v_top / 2.0));
        }
        (false, _) => stage["reference"] = json!(v_top / 2.0),
    }
    stage
}

/// A self-biased JFET stage (`r_source` sized from the self-bias quadratic, the drain
/// resistor from the room left) put between the source and the chain's first stage.
fn add_jfet_front(chain: &mut Value, d: &mut Dice, supply: f64) {
    let p = d.chance(0.4);
    let i_dss = d.log_uniform(1e-3, 15e-3);
    let v_p = d.uniform(0.5, 4.0);
    let mut dev = json!({ "polarity": if p { "p_jfet" } else { "n_jfet" },
        "i_dss": i_dss, "pinch_off_voltage": if p { v_p } else { -v_p } });
    if d.chance(0.6) {
        dev["early_voltage"] = json!(d.uniform(20.0, 200.0));
    }
    if d.chance(0.5) {
        dev["c_gs"] = json!(d.log_uniform(1e-12, 2e-11));
        dev["c_gd"] = json!(d.log_uniform(5e-13, 5e-12));
    }
    chain["devices"]["jfet_in"] = dev;
    let r_s = d.log_uniform(100.0, 3300.0);
    // Self-bias: I_D·R_S = −V_GS, the quadratic's root (algebra), for sizing only.
    let k = i_dss * r_s / (v_p * v_p);
    let u = (2.0 * v_p * k + 1.0 - (4.0 * v_p * k + 1.0).sqrt()) / (2.0 * k);
    let i_d = u / r_s;
    let room = supply - v_p;
    let gate_key = if p { "r_top" } else { "r_bottom" };
    let mut stage = json!({ "id": "jf", "device": "jfet_in", "r_source": r_s });
    stage[gate_key] = json!(d.log_uniform(1e5, 1e7));
    if d.chance(0.5) {
        stage["type"] = json!("common_source");
        stage["r_drain"] = json!((d.uniform(0.2, 0.8) * room / i_d).max(10.0));
    } else {
        stage["type"] = json!("source_follower");
        if d.chance(0.3) {
            stage["r_drain"] = json!((d.uniform(0.1, 0.5) * room / i_d).max(10.0));
        }
    }
    chain["stages"]
        .as_array_mut()
        .expect("stages")
        .insert(0, stage);
    let links = chain["links"].as_array_mut().expect("links");
    let first = links
        .iter_mut()
        .find(|l| l["from"] == "source")
        .expect("a link from the source");
    first["from"] = json!("jf");
    first["coupling"] = json!("4u7");
    links.push(json!({ "from": "source", "to": "jf", "coupling": "1u" }));
}
