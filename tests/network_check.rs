//! The planner against an independent solve of the whole chain as ONE flat nodal
//! network (tests/reference: its own Newton for DC, nalgebra LU for midband AC).
//!
//! `ampchain plan FILE --format json` is run on every chain in `chains/` and on
//! generated chains; every DC and AC quantity it prints must agree with the reference
//! to 1e-6 relative. A missing or non-numeric field is a failure, never a skip.

mod common;
mod reference;

use proptest::prelude::*;
use proptest::strategy::ValueTree;
use proptest::test_runner::{FileFailurePersistence, TestRunner};
use reference::generate::{
    add_feedback_link_with, generate_chain, generate_chain_v2, generate_mixed_chain, Dice,
};
use reference::*;
use serde_json::{json, Value};
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Agreement required between planner and reference.
const REL_TOL: f64 = 1e-6;
/// Absolute floor for decibel figures, which can be zero: 1e-5 dB ≈ 1.2e-6 relative
/// in amplitude, the same order as REL_TOL.
const DB_FLOOR: f64 = 1e-5;
/// Absolute floor for V_E, which is exactly 0 V when the emitter is grounded.
const V_E_FLOOR: f64 = 1e-12;
/// Absolute floor for a resistor dissipation the planner lists but the reference has
/// as a zero-ohm wire.
const P_FLOOR: f64 = 1e-15;
/// Absolute floor for an op-amp's pin current, which is exactly 0 when nothing
/// loads the pin at DC (1 fA: no chain current comes near it).
const I_FLOOR: f64 = 1e-15;

fn lookup<'a>(root: &'a Value, path: &str) -> Option<&'a Value> {
    let mut cur = root;
    for part in path.split('.') {
        let (name, index) = match part.find('[') {
            Some(p) => (
                &part[..p],
                Some(part[p + 1..part.len() - 1].parse::<usize>().ok()?),
            ),
            None => (part, None),
        };
        if !name.is_empty() {
            cur = cur.get(name)?;
        }
        if let Some(i) = index {
            cur = cur.get(i)?;
        }
    }
    Some(cur)
}

fn agree_within(mine: f64, theirs: f64, floor: f64, tol: f64) -> bool {
    (mine - theirs).abs() <= tol * mine.abs().max(theirs.abs()) + floor
}

/// Agreement required on generated version-2 chains (the brief's 1e-9), and the
/// decibel floor that goes with it (1e-8 dB ≈ 1.2e-9 relative in amplitude).
const V2_REL_TOL: f64 = 1e-9;
/// Absolute floor on the output resistance of a stage on a loop (Ω): see
/// `compare_within`.
const R_OUT_FLOOR: f64 = 1e-9;
const V2_DB_FLOOR: f64 = 1e-8;

/// Worst relative disagreement per quantity (stage and load indices dropped) seen on
/// the generated version-2 chains.
static WORST: std::sync::Mutex<std::collections::BTreeMap<String, f64>> =
    std::sync::Mutex::new(std::collections::BTreeMap::new());

/// Collects every disagreement instead of stopping at the first.
struct Checker<'a> {
    json: &'a Value,
    problems: Vec<String>,
    /// Comparisons left out because of a program fault (see `known_program_fault`).
    known: Vec<String>,
    /// Relative tolerance and decibel floor.
    tol: f64,
    db_floor: f64,
    /// Record every relative difference in `WORST`.
    record: bool,
}

impl Checker<'_> {
    fn value(&mut self, path: &str, theirs: Option<&Value>, mine: f64, floor: f64) {
        match theirs.map(|v| v.as_f64()) {
            None => self
                .problems
                .push(format!("{path}: missing from the planner's JSON")),
            Some(None) => self.problems.push(format!(
                "{path}: expected a number, planner printed {theirs:?}"
            )),
            Some(Some(theirs)) => {
                self.note(path, mine, theirs);
                if !agree_within(mine, theirs, floor, self.tol) {
                    self.problems.push(format!(
                        "{path}: reference {mine:.9e}, planner {theirs:.9e} (rel. diff {:.2e})",
                        (mine - theirs).abs() / mine.abs().max(theirs.abs())
                    ));
                }
            }
        }
    }

    fn number(&mut self, path: &str) -> Option<f64> {
        match lookup(self.json, path) {
            None => {
                self.problems
                    .push(format!("{path}: missing from the planner's JSON"));
                None
            }
            Some(v) => match v.as_f64() {
                Some(x) => Some(x),
                None => {
                    self.problems
                        .push(format!("{path}: expected a number, planner printed {v}"));
                    None
                }
            },
        }
    }

    fn note(&mut self, path: &str, mine: f64, theirs: f64) {
        if !self.record {
            return;
        }
        let scale = mine.abs().max(theirs.abs());
        // Differences within the absolute floors (1e-12 V on a node at 0 V) are nil.
        let diff = if scale <= V_E_FLOOR {
            0.0
        } else {
            (mine - theirs).abs() / scale
        };
        let mut key = String::new();
        let mut skipping = false;
        for ch in path.chars() {
            match ch {
                '[' => skipping = true,
                ']' => skipping = false,
                _ if !skipping => key.push(ch),
                _ => {}
            }
        }
        let mut worst = WORST.lock().expect("tally");
        let slot = worst.entry(key).or_insert(0.0);
        *slot = slot.max(diff);
    }

    fn close(&mut self, path: &str, mine: f64, floor: f64) {
        if let Some(theirs) = self.number(path) {
            self.note(path, mine, theirs);
            if !agree_within(mine, theirs, floor, self.tol) {
                self.problems.push(format!(
                    "{path}: reference {mine:.9e}, planner {theirs:.9e} (rel. diff {:.2e})",
                    (mine - theirs).abs() / mine.abs().max(theirs.abs())
                ));
            }
        }
    }

    fn rel(&mut self, path: &str, mine: f64) {
        self.close(path, mine, 0.0);
    }

    fn decibels(&mut self, path: &str, mine: f64) {
        self.close(path, mine, self.db_floor);
    }

    /// `None` in the reference stands for infinity; the contract prints it as null.
    fn rel_or_null(&mut self, path: &str, mine: Option<f64>) {
        match mine {
            Some(x) => self.rel(path, x),
            None => match lookup(self.json, path) {
                Some(Value::Null) => {}
                other => self.problems.push(format!(
                    "{path}: reference infinite (null), planner {other:?}"
                )),
            },
        }
    }

    /// A field the contract prints as null (a passive stage's limits and so on).
    fn null(&mut self, path: &str) {
        match lookup(self.json, path) {
            Some(Value::Null) => {}
            other => self.problems.push(format!(
                "{path}: reference has none (null), planner {other:?}"
            )),
        }
    }

    fn text(&mut self, path: &str, mine: &str) {
        match lookup(self.json, path).map(|v| v.as_str()) {
            Some(Some(s)) if s == mine => {}
            Some(Some(s)) => self
                .problems
                .push(format!("{path}: reference \"{mine}\", planner \"{s}\"")),
            _ => self.problems.push(format!(
                "{path}: missing or not a string in the planner's JSON"
            )),
        }
    }
}

/// Every quantity of the planner's JSON against the reference analysis.
fn compare(chain: &Chain, a: &Analysis, json: &Value) -> Vec<String> {
    compare_within(chain, a, json, REL_TOL, DB_FLOOR, false)
}

fn compare_within(
    chain: &Chain,
    a: &Analysis,
    json: &Value,
    tol: f64,
    db_floor: f64,
    record: bool,
) -> Vec<String> {
    let mut c = Checker {
        json,
        problems: Vec::new(),
        known: Vec::new(),
        tol,
        db_floor,
        record,
    };
    match &chain.title {
        Some(t) => c.text("title", t),
        None => {
            if !matches!(lookup(json, "title"), Some(Value::Null)) {
                c.problems.push("title: expected null".into());
            }
        }
    }
    // "supply" is the most positive rail; "rails" lists every rail by name.
    c.rel("supply", chain.v_cc);
    for (k, (name, volts)) in chain.rails.iter().enumerate() {
        c.text(&format!("rails[{k}].name"), name);
        c.rel(&format!("rails[{k}].voltage"), *volts);
    }
    c.rel("temperature", chain.temperature);
    // V_T = kT/q with the exact SI constants.
    c.rel("thermal_voltage", chain.v_t);
    c.rel("source.resistance", chain.r_source);
    // The planned EMF: from the file, or (no level in the file) the planner's default,
    // which is then only checked for consistency of its three forms.
    let vin_rms = match chain.input_vrms {
        Some(v) => {
            c.rel("input.vrms", v);
            v
        }
        None => match c.number("input.vrms") {
            Some(v) => v,
            None => return c.problems,
        },
    };
    let vin_peak = vin_rms * std::f64::consts::SQRT_2;
    c.rel("input.vpeak", vin_peak);
    c.decibels("input.dbu", dbu(vin_rms));

    let n_printed = lookup(json, "stages")
        .and_then(|s| s.as_array())
        .map(|s| s.len());
    if n_printed != Some(chain.stages.len()) {
        c.problems.push(format!(
            "stages: planner printed {n_printed:?} stages, the file has {}",
            chain.stages.len()
        ));
        return c.problems;
    }
    for (i, (s, r)) in chain.stages.iter().zip(&a.stages).enumerate() {
        let p = |f: &str| format!("stages[{i}].{f}");
        c.text(&p("id"), &s.id);
        c.text(&p("input_from"), &r.input_from);
        let op = &r.op;
        match &s.body {
            Body::Transistor => {
                c.text(&p("device"), &s.device.name);
                if s.device.jfet.is_some() {
                    // A JFET's names (docs/definitions.md "JFET"): V_GS signed, the rest as
                    // the bipolar frame's magnitudes and signed node voltages.
                    c.text(
                        &p("type"),
                        if s.kind == StageKind::CommonEmitter {
                            "common_source"
                        } else {
                            "source_follower"
                        },
                    );
                    for (name, mine) in [("i_d", op.i_c), ("v_ds", op.v_ce)] {
                        c.rel(&p(&format!("operating_point.{name}")), mine);
                    }
                    let v_gs = s.device.sign * op.v_be;
                    for (name, mine) in [
                        ("v_gs", v_gs),
                        ("v_g", op.v_b),
                        ("v_d", op.v_c),
                        ("v_s", op.v_e),
                    ] {
                        c.close(&p(&format!("operating_point.{name}")), mine, V_E_FLOOR);
                    }
                    c.rel(&p("small_signal.g_m"), r.g_m);
                    c.rel_or_null(&p("small_signal.r_o"), r.r_o);
                } else {
                    c.text(&p("type"), s.kind.name());
                    for (name, mine) in [
                        ("i_c", op.i_c),
                        ("i_b", op.i_b),
                        ("i_e", op.i_e),
                        ("v_ce", op.v_ce),
                        ("v_be", op.v_be),
                        ("v_be_junction", op.v_be_junction),
                    ] {
                        c.rel(&p(&format!("operating_point.{name}")), mine);
                    }
                    // Node voltages may be exactly 0 V (a terminal on ground).
                    for (name, mine) in [("v_b", op.v_b), ("v_c", op.v_c), ("v_e", op.v_e)] {
                        c.close(&p(&format!("operating_point.{name}")), mine, V_E_FLOOR);
                    }
                    c.rel(&p("small_signal.g_m"), r.g_m);
                    c.rel(&p("small_signal.r_pi"), r.r_pi);
                    c.rel_or_null(&p("small_signal.r_o"), r.r_o);
                }
            }
            Body::Passive(passive) => {
                // docs/definitions.md "Passive stages": no device, no operating point.
                c.text(&p("type"), passive.type_name);
                for f in ["device", "operating_point", "small_signal"] {
                    c.null(&p(f));
                }
            }
            Body::Opamp(o) => {
                c.text(
                    &p("type"),
                    if o.inverting {
                        "opamp_inverting"
                    } else {
                        "opamp_noninverting"
                    },
                );
                c.text(&p("device"), &s.device.name);
                // docs/definitions.md "Op-amp": the pin's DC voltage and current, |A| at
                // midband (A_0) and the open-loop pole GBW/A_0. The pin may rest at
                // exactly 0 V with no current.
                c.close(&p("operating_point.v_out"), op.v_c, V_E_FLOOR);
                c.close(&p("operating_point.i_out"), a.dc.i_out[i], I_FLOOR);
                c.rel(&p("small_signal.open_loop_gain"), o.a_0);
                c.rel(&p("small_signal.open_loop_pole"), o.gain_bandwidth / o.a_0);
            }
        }
        c.rel_or_null(&p("r_in"), r.r_in.is_finite().then_some(r.r_in));
        // An output held by a feedback loop rests near 0 Ω; both sides resolve it to
        // about 1e-11 Ω absolute (their round-off in the loop network), not to 1e-9 of
        // itself.
        match (r.r_out.is_finite(), chain.loop_of(i).is_some()) {
            (true, true) => c.close(&p("r_out"), r.r_out, R_OUT_FLOOR),
            _ => c.rel_or_null(&p("r_out"), r.r_out.is_finite().then_some(r.r_out)),
        }
        c.rel_or_null(&p("load"), r.load);
        c.rel(&p("gain"), r.gain);
        c.decibels(&p("gain_db"), db(r.gain));
        c.rel(&p("cumulative_gain"), r.cumulative_gain);
        c.rel(&p("input_vrms"), r.input_gain.abs() * vin_rms);
        let out_vrms = r.cumulative_gain.abs() * vin_rms;
        c.rel(&p("output_vrms"), out_vrms);
        c.decibels(&p("output_dbu"), dbu(out_vrms));
        // A side that no edge reaches is null (docs/definitions.md).
        c.rel_or_null(&p("limit_up"), r.limit_up.is_finite().then_some(r.limit_up));
        c.rel_or_null(
            &p("limit_down"),
            r.limit_down.is_finite().then_some(r.limit_down),
        );
        if r.clip_input_vpeak.is_finite() {
            c.rel(&p("clip_input_vpeak"), r.clip_input_vpeak);
            c.rel(
                &p("clip_input_vrms"),
                r.clip_input_vpeak / std::f64::consts::SQRT_2,
            );
            // The side is only defined when the two limits differ.
            if !agree_within(r.limit_up, r.limit_down, 0.0, c.tol) {
                c.text(&p("clip_toward"), r.clip_toward);
            }
            let out_peak = r.cumulative_gain.abs() * vin_peak;
            c.decibels(
                &p("headroom_db"),
                db(r.limit_up.min(r.limit_down) / out_peak),
            );
        } else {
            // A passive stage never clips (docs/definitions.md "Passive stages").
            for f in [
                "clip_input_vpeak",
                "clip_input_vrms",
                "clip_toward",
                "headroom_db",
            ] {
                c.null(&p(f));
            }
        }
        if s.is_transistor() {
            // DC load line: docs/definitions.md gives no formula; the planner's DEVELOPERS.md takes
            // V_CE = (V_Cth − V_Eth) − I_C·(R_Cth + R_Eth/α) with direct-coupled successors
            // in the Thevenin networks; the reference measures R_Cth and R_Eth itself.
            // Stages coupled inside themselves (r_feedback, supply_filter) have no DC load
            // line comparison: the definition of their Thevenin networks is still open.
            // Likewise a stage on a loop closed at DC (a feedback link without a series
            // capacitor): its neighbours' DC networks include the loop.
            let groups = direct_groups(chain);
            let dc_loop = (0..chain.stages.len()).any(|j| {
                groups[j] == groups[i]
                    && chain
                        .loop_of(j)
                        .is_some_and(|k| chain.feedback[k].capacitance.is_none())
            });
            let mut lines = vec![("ac_load_line", &r.ac_load_line)];
            if !s.coupled() && !dc_loop {
                lines.push(("dc_load_line", &r.dc_load_line));
            }
            for (line, mine) in lines {
                let finite = |x: f64| x.is_finite().then_some(x);
                c.rel_or_null(
                    &p(&format!("{line}.v_ce_intercept")),
                    finite(mine.v_ce_intercept),
                );
                c.rel(&p(&format!("{line}.i_c_intercept")), mine.i_c_intercept);
                c.close(&p(&format!("{line}.slope")), mine.slope, 0.0);
            }
            // Power into the transistor: V_CE·I_C + V_BE·I_B (definition of electric power).
            c.rel(&p("dissipation.transistor"), r.p_transistor);
        } else {
            // No transistor, no load lines (docs/definitions.md "Passive stages", "Op-amp").
            for f in ["dc_load_line", "ac_load_line", "dissipation.transistor"] {
                c.null(&p(f));
            }
        }
        // Resistor names may hold a dot ("supply_filter.resistance"): look them up
        // in the map itself.
        let listed = lookup(json, &p("dissipation.resistors")).cloned();
        // A JFET stage's file names for the reference's bipolar-wired resistors; its
        // gate draws no current, so a gate resistor carries only rounding (P_FLOOR).
        // A passive or op-amp stage's resistors may carry rounding alone too (a node
        // held at 0 V by a capacitor-coupled input).
        let jfet = s.device.jfet.is_some();
        let file_name = |name: &'static str| reference::noise::file_name(chain, i, name);
        let floor = if jfet || !s.is_transistor() {
            P_FLOOR
        } else {
            0.0
        };
        for (name, watts) in &r.p_resistors {
            let name = file_name(name);
            let path = p(&format!("dissipation.resistors.{name}"));
            let theirs = listed.as_ref().and_then(|m| m.get(name)).cloned();
            c.value(&path, theirs.as_ref(), *watts, floor);
        }
        if let Some(Value::Object(listed)) = lookup(json, &p("dissipation.resistors")) {
            for (name, v) in listed {
                if !r.p_resistors.iter().any(|(n, _)| file_name(n) == name) {
                    let zero = v.as_f64().is_some_and(|x| x.abs() <= P_FLOOR);
                    if !zero {
                        c.problems.push(format!(
                            "{}: planner lists {v} W for a resistor the stage does not have",
                            p(&format!("dissipation.resistors.{name}"))
                        ));
                    }
                }
            }
        }
    }

    for (j, load) in chain.loads.iter().enumerate() {
        let p = |f: &str| format!("loads[{j}].{f}");
        let gain = a.load_gains[j];
        c.text(&p("id"), &load.id);
        c.text(&p("from"), &a.load_from[j]);
        c.rel(&p("gain"), gain);
        c.decibels(&p("gain_db"), db(gain));
        c.rel(&p("output_vrms"), gain.abs() * vin_rms);
        c.decibels(&p("output_dbu"), dbu(gain.abs() * vin_rms));
    }

    // Loop figures (docs/definitions.md "Feedback links"): the reference's Bode return
    // ratio of the g_m (an op-amp's A) of the loop's first device, by the unit-source
    // superposition on the whole flat network (tests/reference `loop_figures`).
    for (k, l) in chain.feedback.iter().enumerate() {
        let p = |f: &str| format!("loops[{k}].{f}");
        c.text(&p("from"), &chain.stages[l.from].id);
        c.text(&p("to"), &chain.stages[l.to].id);
        let out = chain.output_term(Node::Stage(l.from));
        // A loop without a transistor or op-amp has no controlled source: T = 0 and
        // every gain the closed loop's (docs/definitions.md "Feedback links").
        let figures = match loop_device(chain, k) {
            Some(device) => loop_figures(chain, &a.dc, device, out, None),
            None => {
                let closed = nalgebra::Complex::new(a.stages[l.from].cumulative_gain, 0.0);
                Ok(LoopFigures {
                    return_ratio: nalgebra::Complex::new(0.0, 0.0),
                    asymptotic_gain: closed,
                    direct_gain: closed,
                    closed_loop_gain: closed,
                })
            }
        };
        match figures {
            Ok(f) => {
                let t = f.return_ratio.re;
                // Nothing returns to the control when T vanishes to rounding (the
                // planner's d is then exactly 0): A_∞ is undefined (null) there.
                let nothing_returns = t.abs() <= 1e-12;
                c.close(&p("return_ratio"), t, 1e-12);
                let a_inf = f.asymptotic_gain.re;
                if !nothing_returns {
                    c.rel_or_null(&p("asymptotic_gain"), a_inf.is_finite().then_some(a_inf));
                }
                // A_0 vanishes where the first device carries the whole forward path
                // (an op-amp with A = 0 and r_out = 0): its rounding is that of the
                // loop's gains.
                let floor = c.tol * f.closed_loop_gain.norm();
                c.close(&p("direct_gain"), f.direct_gain.re, floor);
                c.rel(&p("closed_loop_gain"), f.closed_loop_gain.re);
                c.decibels(&p("desensitivity_db"), db(1.0 + t));
            }
            Err(e) => c
                .problems
                .push(format!("{}: reference failed: {e}", p("return_ratio"))),
        }
    }

    if !chain.stages.is_empty() {
        let mine = a.first_clip;
        let level = a.stages[mine].clip_input_vpeak;
        match lookup(json, "first_clip.stage").and_then(|v| v.as_str()) {
            None => c
                .problems
                .push("first_clip.stage: missing or not a string".into()),
            Some(id) => match chain.stages.iter().position(|s| s.id == id) {
                None => c.problems.push(format!(
                    "first_clip.stage: planner names unknown stage \"{id}\""
                )),
                Some(theirs) => {
                    // A tie within the tolerance may go either way.
                    if theirs != mine
                        && !agree_within(a.stages[theirs].clip_input_vpeak, level, 0.0, c.tol)
                    {
                        c.problems.push(format!(
                            "first_clip.stage: reference \"{}\" (clips at {level:.9e} V peak), planner \"{id}\" (reference: {:.9e} V peak)",
                            chain.stages[mine].id, a.stages[theirs].clip_input_vpeak
                        ));
                    }
                    let r = &a.stages[theirs];
                    if !agree_within(r.limit_up, r.limit_down, 0.0, c.tol) {
                        c.text("first_clip.toward", r.clip_toward);
                    }
                }
            },
        }
        c.rel("first_clip.input_vpeak", level);
        c.rel("first_clip.input_vrms", level / std::f64::consts::SQRT_2);
        c.decibels(
            "first_clip.input_dbu",
            dbu(level / std::f64::consts::SQRT_2),
        );
    }
    KNOWN_FAULTS.fetch_add(c.known.len(), Ordering::Relaxed);
    for k in &c.known {
        eprintln!("known program fault, not compared: {k}");
    }
    c.problems
}

/// The direct-coupled group of each stage (stages joined by direct links share one).
fn direct_groups(chain: &Chain) -> Vec<usize> {
    let mut group: Vec<usize> = (0..chain.stages.len()).collect();
    loop {
        let mut changed = false;
        for l in chain.links.iter().filter(|l| l.direct) {
            if let (Node::Stage(a), Node::Stage(b)) = (l.from, l.to) {
                let g = group[a].min(group[b]);
                if group[a] != g || group[b] != g {
                    group[a] = g;
                    group[b] = g;
                    changed = true;
                }
            }
        }
        if !changed {
            return group;
        }
    }
}

/// How many comparisons were left out for a known program fault.
static KNOWN_FAULTS: AtomicUsize = AtomicUsize::new(0);

/// Plan `path` (whose contents are `text`) with the binary and hold the result against
/// the reference. Returns the problems found, each naming the file.
fn check_chain(path: &Path, text: &str) -> Vec<String> {
    check_chain_within(path, text, REL_TOL, DB_FLOOR, false)
}

fn check_chain_within(
    path: &Path,
    text: &str,
    tol: f64,
    db_floor: f64,
    record: bool,
) -> Vec<String> {
    let name = path.display().to_string();
    let tag =
        |v: Vec<String>| -> Vec<String> { v.into_iter().map(|p| format!("{name}: {p}")).collect() };
    let chain = match Chain::from_text(text) {
        Ok(c) => c,
        Err(e) => return tag(vec![format!("reference cannot read the chain: {e}")]),
    };
    let dc = match solve_dc(&chain) {
        Ok(dc) => dc,
        Err(e) => return tag(vec![format!("reference DC solve failed: {e}")]),
    };
    let outside = out_of_active_region(&chain, &dc);
    let output = match Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(["plan", &name, "--format", "json"])
        .output()
    {
        Ok(o) => o,
        Err(e) => return tag(vec![format!("cannot run the planner: {e}")]),
    };
    let stderr = String::from_utf8_lossy(&output.stderr);
    match output.status.code() {
        Some(0) => {
            if !outside.is_empty() {
                let list: Vec<String> = outside
                    .iter()
                    .map(|(i, why)| format!("stage \"{}\": {why}", chain.stages[*i].id))
                    .collect();
                return tag(vec![format!(
                    "planner accepted the chain, reference finds it outside the active region: {}",
                    list.join("; ")
                )]);
            }
            let json: Value = match serde_json::from_slice(&output.stdout) {
                Ok(v) => v,
                Err(e) => {
                    return tag(vec![format!(
                        "planner printed no JSON object ({e}); stdout: {:?}",
                        String::from_utf8_lossy(&output.stdout)
                    )])
                }
            };
            match analyse(&chain, dc) {
                Ok(a) => tag(compare_within(&chain, &a, &json, tol, db_floor, record)),
                Err(e) => tag(vec![format!("reference midband solve failed: {e}")]),
            }
        }
        Some(2) => {
            // A rejected chain must really have a stage outside the active region,
            // and the message must name one of those stages.
            if outside.is_empty() {
                let ops: Vec<String> = chain
                    .stages
                    .iter()
                    .zip(&dc.op)
                    .map(|(s, op)| {
                        format!("{}: V_CE {:.6} V, V_BE {:.6} V", s.id, op.v_ce, op.v_be)
                    })
                    .collect();
                return tag(vec![format!(
                    "planner rejected the chain ({}), reference finds every stage active ({})",
                    stderr.trim(),
                    ops.join("; ")
                )]);
            }
            // Within a direct-coupled group the stage to blame depends on the method
            // (the planner solves stage by stage, the reference the whole network, each
            // assuming forward-active devices): any stage of an offending stage's group
            // counts.
            let group = direct_groups(&chain);
            let named = outside.iter().any(|(i, _)| {
                (0..chain.stages.len()).any(|k| {
                    group[k] == group[*i]
                        && stderr.contains(&format!("stage \"{}\"", chain.stages[k].id))
                })
            });
            if named {
                Vec::new()
            } else {
                tag(vec![format!(
                    "planner rejected the chain ({}), but the reference's stages outside the active region are {:?}",
                    stderr.trim(),
                    outside
                )])
            }
        }
        other => tag(vec![format!(
            "planner exit status {other:?}, stderr: {}",
            stderr.trim()
        )]),
    }
}

/// Every demo chain (`chains/`) and every fixture (`tests/fixtures/`), passive and
/// op-amp stages included, against the flat network to 1e-9 (V2_REL_TOL).
#[test]
fn chain_files_agree_with_flat_network() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files: Vec<PathBuf> = ["chains", "tests/fixtures"]
        .iter()
        .flat_map(|dir| {
            std::fs::read_dir(root.join(dir))
                .map(|entries| {
                    entries
                        .filter_map(|e| e.ok().map(|e| e.path()))
                        .filter(|p| p.extension().is_some_and(|x| x == "json"))
                        .collect::<Vec<_>>()
                })
                .unwrap_or_default()
        })
        .collect();
    files.sort();
    assert!(
        files.len() >= 20,
        "only {} chain files under chains/ and tests/fixtures/",
        files.len()
    );
    let mut problems = Vec::new();
    let (mut passive, mut opamp, mut no_level) = (0, 0, 0);
    for f in &files {
        let text = std::fs::read_to_string(f).expect("readable chain file");
        let chain = Chain::from_text(&text).expect("the reference reads every chain file");
        // A fixture without a planned level is for `noise` alone: `plan` needs one.
        if chain.input_vrms.is_none() {
            no_level += 1;
            continue;
        }
        passive += chain
            .stages
            .iter()
            .any(|s| matches!(s.body, Body::Passive(_))) as usize;
        opamp += chain.stages.iter().any(|s| s.opamp().is_some()) as usize;
        problems.extend(check_chain_within(f, &text, V2_REL_TOL, V2_DB_FLOOR, false));
    }
    eprintln!(
        "{} chain files held to 1e-9 ({passive} with a passive stage, {opamp} with an op-amp \
         stage); {no_level} without a planned level left out",
        files.len() - no_level
    );
    assert!(
        passive > 0 && opamp > 0,
        "no chain file with a passive or op-amp stage"
    );
    assert!(
        problems.is_empty(),
        "{} disagreement(s) between planner and flat-network reference:\n{}",
        problems.len(),
        problems.join("\n")
    );
}

// ---------------------------------------------------------------------------------
// Generated chains

const DICE_PER_CHAIN: usize = 256;

/// The uniform numbers behind one generated chain; printed briefly on failure, the
/// chain itself is printed in full by the failing assertion.
#[derive(Clone)]
struct DiceValues(Vec<f64>);

impl std::fmt::Debug for DiceValues {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} dice, first {:?}", self.0.len(), &self.0[..8])
    }
}

fn dice_strategy() -> impl Strategy<Value = DiceValues> {
    prop::collection::vec(0.0..1.0f64, DICE_PER_CHAIN).prop_map(DiceValues)
}

static CASE: AtomicUsize = AtomicUsize::new(0);

/// Write a generated chain to a fresh file in one folder under the system temp
/// directory (a chain that disagrees is kept there, named in the failure).
fn write_temp(text: &str) -> PathBuf {
    let dir = std::env::temp_dir().join("ampchain-network-check");
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join(format!(
        "chain-{}-{}.json",
        std::process::id(),
        CASE.fetch_add(1, Ordering::Relaxed)
    ));
    std::fs::write(&path, text).expect("temp file");
    path
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 48,
        max_shrink_iters: 256,
        failure_persistence: Some(Box::new(FileFailurePersistence::WithSource("proptest-regressions"))),
        ..ProptestConfig::default()
    })]

    #[test]
    fn generated_chains_agree_with_flat_network(dice in dice_strategy()) {
        let text = serde_json::to_string_pretty(&generate_chain(&mut Dice { values: dice.0, next: 0 }))
            .expect("serialisable");
        let path = write_temp(&text);
        let problems = check_chain(&path, &text);
        if problems.is_empty() {
            let _ = std::fs::remove_file(&path);
        }
        // On failure the chain file is kept at the path named in each problem.
        prop_assert!(
            problems.is_empty(),
            "{} disagreement(s):\n{}\nchain:\n{}",
            problems.len(),
            problems.join("\n"),
            text
        );
    }
}

/// The generator itself, through the reference alone (runs without the planner):
/// mostly active chains, and every feature the brief asks for shows up.
#[test]
fn generator_covers_the_intended_chains() {
    let mut runner = TestRunner::deterministic();
    let (mut total, mut active) = (0, 0);
    let (mut direct, mut fan_out, mut two_loads, mut followers, mut grounded, mut bypassed) =
        (0, 0, 0, 0, 0, 0);
    let mut sizes = [0usize; 6];
    let mut most_iterations = 0;
    for _ in 0..300 {
        let dice = dice_strategy()
            .new_tree(&mut runner)
            .expect("draw")
            .current();
        let value = generate_chain(&mut Dice {
            values: dice.0,
            next: 0,
        });
        let text = value.to_string();
        let chain = Chain::from_text(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
        total += 1;
        sizes[chain.stages.len()] += 1;
        direct += chain
            .links
            .iter()
            .any(|l| l.direct && l.from != Node::Source) as usize;
        let mut froms: Vec<Node> = chain.links.iter().map(|l| l.from).collect();
        froms.sort_by_key(|n| format!("{n:?}"));
        fan_out += froms.windows(2).any(|w| w[0] == w[1]) as usize;
        two_loads += (chain.loads.len() == 2) as usize;
        followers += chain
            .stages
            .iter()
            .any(|s| s.kind == StageKind::EmitterFollower) as usize;
        grounded += chain.stages.iter().any(|s| {
            s.kind == StageKind::CommonEmitter && s.r_emitter == 0.0 && s.r_emitter_bypassed == 0.0
        }) as usize;
        bypassed += chain.stages.iter().any(|s| s.has_c_bypass) as usize;
        assert!((1..=2).contains(&chain.loads.len()), "{text}");
        let dc = solve_dc(&chain).unwrap_or_else(|e| panic!("{e}\n{text}"));
        most_iterations = most_iterations.max(dc.iterations);
        if out_of_active_region(&chain, &dc).is_empty() {
            active += 1;
            analyse(&chain, dc).unwrap_or_else(|e| panic!("{e}\n{text}"));
        }
    }
    eprintln!(
        "generator: {active}/{total} active; direct {direct}, fan-out {fan_out}, two loads {two_loads}, \
         followers {followers}, grounded emitter {grounded}, bypassed {bypassed}; sizes {sizes:?}; \
         at most {most_iterations} Newton iterations"
    );
    assert!(
        active * 10 >= total * 7,
        "only {active} of {total} generated chains are active"
    );
    assert!(
        active < total,
        "no generated chain exercises the rejection path"
    );
    for (what, count) in [
        ("direct links between stages", direct),
        ("fan-out", fan_out),
        ("two loads", two_loads),
        ("emitter followers", followers),
        ("grounded emitters", grounded),
        ("bypassed emitters", bypassed),
    ] {
        assert!(
            count * 20 >= total,
            "too few chains with {what}: {count} of {total}"
        );
    }
    assert!(sizes[1..=5].iter().all(|&k| k > 0), "sizes {sizes:?}");
}

/// Plan and check every chain text on `threads` threads, to 1e-9 (V2_REL_TOL): each
/// text with its problems, in the order of the threads. A chain file is kept for a
/// chain with problems.
fn check_in_threads(texts: &[String], threads: usize, record: bool) -> Vec<(String, Vec<String>)> {
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads)
            .map(|t| {
                scope.spawn(move || {
                    let mut out = Vec::new();
                    for text in texts.iter().skip(t).step_by(threads) {
                        let path = write_temp(text);
                        let found =
                            check_chain_within(&path, text, V2_REL_TOL, V2_DB_FLOOR, record);
                        if found.is_empty() {
                            let _ = std::fs::remove_file(&path);
                        }
                        out.push((text.clone(), found));
                    }
                    out
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().expect("checker thread"))
            .collect()
    })
}

/// Generated version-2 chains drawn by the tests below (deterministic dice).
const V2_CHAINS: usize = 600;

fn v2_chain(runner: &mut TestRunner) -> String {
    let dice = dice_strategy().new_tree(runner).expect("draw").current();
    serde_json::to_string_pretty(&generate_chain_v2(&mut Dice {
        values: dice.0,
        next: 0,
    }))
    .expect("serialisable")
}

/// 600 generated version-2 chains (PNP, split rails, r_bb', r_c, common base,
/// r_feedback, supply filters) planned by the binary and held against the flat
/// network, every reported quantity to 1e-9 (V2_REL_TOL).
#[test]
fn generated_v2_chains_agree_with_flat_network() {
    let mut runner = TestRunner::deterministic();
    let texts: Vec<String> = (0..V2_CHAINS).map(|_| v2_chain(&mut runner)).collect();
    let before = KNOWN_FAULTS.load(Ordering::Relaxed);
    let threads = 4;
    // (text, problems, known fault B or C)
    // Every chain is held: no known program fault is left.
    let checked: Vec<(String, Vec<String>, bool)> = check_in_threads(&texts, threads, true)
        .into_iter()
        .map(|(text, found)| (text, found, false))
        .collect();
    let clean = checked.iter().filter(|c| !c.2).count();
    let known: Vec<&(String, Vec<String>, bool)> =
        checked.iter().filter(|c| c.2 && !c.1.is_empty()).collect();
    for (_, found, _) in &known {
        eprintln!(
            "known program fault B/C, chain compared but not held: {}",
            found[0]
        );
    }
    let problems: Vec<(String, Vec<String>)> = checked
        .iter()
        .filter(|c| !c.2 && !c.1.is_empty())
        .map(|c| (c.0.clone(), c.1.clone()))
        .collect();
    eprintln!(
        "{clean} of {V2_CHAINS} chains held to 1e-9; {} with program fault B (direct link \
         from a collector with r_c) or C (planner's DC pass does not settle), of which {} \
         disagree",
        checked.len() - clean,
        known.len()
    );
    assert!(
        clean >= 500,
        "only {clean} chains without a known program fault (the brief asks for 500)"
    );
    let worst = WORST.lock().expect("tally").clone();
    let mut by_worst: Vec<(&String, &f64)> = worst.iter().collect();
    by_worst.sort_by(|a, b| b.1.total_cmp(a.1));
    eprintln!(
        "{V2_CHAINS} generated v2 chains; {} quantities compared by name; \
         {} comparisons left out for the known program fault; worst relative differences:",
        worst.len(),
        KNOWN_FAULTS.load(Ordering::Relaxed) - before
    );
    for (name, diff) in &by_worst {
        eprintln!("  {name}: {diff:.2e}");
    }
    if let Ok(dump) = std::env::var("AMPCHAIN_V2_DUMP") {
        let all: Vec<String> = problems
            .iter()
            .flat_map(|(_, p)| p.iter().cloned())
            .collect();
        std::fs::write(dump, all.join("\n")).expect("dump");
    }
    assert!(
        problems.is_empty(),
        "{} of {V2_CHAINS} generated v2 chains disagree; the first:\n{}\nchain:\n{}",
        problems.len(),
        problems[0].1.join("\n"),
        problems[0].0
    );
}

/// The v2 generator itself, through the reference alone: mostly active chains, and
/// every v2 feature shows up often enough.
/// Generated version-2 chains with one loop each (`add_feedback_link_with`: a third
/// without the series capacitor, so the loop sets the operating points too), planned
/// by the binary and held against the flat network: every stage quantity and every
/// loop figure to 1e-9 (V2_REL_TOL). Chains the reference finds outside the active
/// region must be refused naming a stage of the offending group.
#[test]
fn generated_loop_chains_agree_with_flat_network() {
    let mut runner = TestRunner::deterministic();
    let mut texts = Vec::new();
    let mut resistive = 0;
    while texts.len() < 640 {
        let dice = dice_strategy()
            .new_tree(&mut runner)
            .expect("draw")
            .current();
        let mut d = Dice {
            values: dice.0,
            next: 0,
        };
        let mut json = generate_chain_v2(&mut d);
        let capacitor = texts.len() % 3 != 0;
        if add_feedback_link_with(&mut json, &mut d, capacitor).is_some() {
            resistive += usize::from(!capacitor);
            texts.push(serde_json::to_string_pretty(&json).expect("serialisable"));
        }
    }
    let threads = 4;
    let checked: Vec<(String, Vec<String>, bool)> = check_in_threads(&texts, threads, false)
        .into_iter()
        .map(|(text, found)| {
            // The chains the reference finds active are the ones the planner must plan
            // (exit 0) and whose loops[] were compared.
            let planned = Chain::from_text(&text)
                .ok()
                .and_then(|c| solve_dc(&c).ok().map(|dc| (c, dc)))
                .is_some_and(|(c, dc)| out_of_active_region(&c, &dc).is_empty());
            (text, found, planned)
        })
        .collect();
    let planned = checked.iter().filter(|c| c.2).count();
    let problems: Vec<&(String, Vec<String>, bool)> =
        checked.iter().filter(|c| !c.1.is_empty()).collect();
    eprintln!(
        "{} generated chains with a loop ({resistive} without a series capacitor), {planned} planned and held to 1e-9, {} disagree",
        texts.len(),
        problems.len()
    );
    assert!(
        planned >= 500,
        "only {planned} chains with a loop planned (the brief asks for 500)"
    );
    if let Ok(dump) = std::env::var("AMPCHAIN_LOOP_DUMP") {
        let all: Vec<String> = problems.iter().flat_map(|p| p.1.iter().cloned()).collect();
        std::fs::write(dump, all.join("\n")).expect("dump");
    }
    assert!(
        problems.is_empty(),
        "{} of {} generated loop chains disagree; the first:\n{}\nchain:\n{}",
        problems.len(),
        texts.len(),
        problems[0].1.join("\n"),
        problems[0].0
    );
}

#[test]
fn v2_generator_covers_the_intended_chains() {
    let mut runner = TestRunner::deterministic();
    let mut total = 0;
    let mut active = 0;
    let mut seen = std::collections::BTreeMap::<&str, usize>::new();
    for _ in 0..V2_CHAINS {
        let text = v2_chain(&mut runner);
        let chain = Chain::from_text(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));
        total += 1;
        let mut mark =
            |what: &'static str, yes: bool| *seen.entry(what).or_insert(0) += yes as usize;
        let any = |f: &dyn Fn(&Stage) -> bool| chain.stages.iter().any(f);
        mark("pnp", any(&|s| s.device.sign < 0.0));
        mark(
            "npn and pnp",
            any(&|s| s.device.sign < 0.0) && any(&|s| s.device.sign > 0.0),
        );
        mark("split rails", any(&|s| matches!(s.bottom, Term::Rail(_))));
        mark("top at ground", any(&|s| s.top == Term::Ground));
        mark("base resistance", any(&|s| s.device.r_bb > 0.0));
        mark("collector resistance", any(&|s| s.device.r_c > 0.0));
        mark("common base", any(&|s| s.kind == StageKind::CommonBase));
        mark(
            "cascode (common base without r_emitter)",
            any(&|s| s.kind == StageKind::CommonBase && s.r_emitter.is_infinite()),
        );
        mark(
            "true cascode (common emitter without r_collector)",
            any(&|s| s.kind == StageKind::CommonEmitter && s.r_collector.is_infinite()),
        );
        mark("r_feedback", any(&|s| s.r_feedback.is_some()));
        mark("supply filter", any(&|s| s.supply_filter.is_some()));
        mark("follower", any(&|s| s.kind == StageKind::EmitterFollower));
        mark(
            "direct link between stages",
            chain
                .links
                .iter()
                .any(|l| l.direct && l.from != Node::Source),
        );
        let dc = solve_dc(&chain).unwrap_or_else(|e| panic!("{e}\n{text}"));
        if out_of_active_region(&chain, &dc).is_empty() {
            active += 1;
            analyse(&chain, dc).unwrap_or_else(|e| panic!("{e}\n{text}"));
        }
    }
    eprintln!("v2 generator: {active}/{total} active; {seen:?}");
    assert!(
        active * 10 >= total * 6,
        "only {active} of {total} generated v2 chains are active"
    );
    assert!(
        active < total,
        "no generated v2 chain exercises the rejection path"
    );
    for (what, count) in &seen {
        assert!(
            *count * 20 >= total,
            "too few v2 chains with {what}: {count} of {total}"
        );
    }
}

/// Generated mixed chains drawn by the tests below (deterministic dice).
const MIXED_CHAINS: usize = 640;

fn mixed_chains() -> Vec<String> {
    let mut runner = TestRunner::deterministic();
    (0..MIXED_CHAINS)
        .map(|_| {
            let dice = dice_strategy()
                .new_tree(&mut runner)
                .expect("draw")
                .current();
            serde_json::to_string_pretty(&generate_mixed_chain(&mut Dice {
                values: dice.0,
                next: 0,
            }))
            .expect("serialisable")
        })
        .collect()
}

/// Whether the reference finds every stage of `text` active (the planner must then
/// plan it; otherwise it must refuse it naming an offending stage).
fn reference_active(text: &str) -> bool {
    let chain = Chain::from_text(text).unwrap_or_else(|e| panic!("{e}\n{text}"));
    let dc = solve_dc(&chain).unwrap_or_else(|e| panic!("{e}\n{text}"));
    out_of_active_region(&chain, &dc).is_empty()
}

/// The independent check for mixed chains: 640 generated chains mixing bipolar
/// stages of every kind and both polarities with JFET, passive and op-amp stages,
/// planned by the binary and held against the flat network (the reference's own
/// Newton, its op-amp sources as MNA unknowns, nalgebra LU) in every compared
/// quantity to 1e-9 (V2_REL_TOL); at least 500 of them planned.
#[test]
fn generated_mixed_chains_agree_with_flat_network() {
    let texts = mixed_chains();
    let threads = 4;
    // (text, problems, reference finds it active)
    let checked: Vec<(String, Vec<String>, bool)> = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads)
            .map(|t| {
                let texts = &texts;
                scope.spawn(move || {
                    let mut out = Vec::new();
                    for text in texts.iter().skip(t).step_by(threads) {
                        let path = write_temp(text);
                        let found = check_chain_within(&path, text, V2_REL_TOL, V2_DB_FLOOR, false);
                        if found.is_empty() {
                            let _ = std::fs::remove_file(&path);
                        }
                        out.push((text.clone(), found, reference_active(text)));
                    }
                    out
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().expect("checker thread"))
            .collect()
    });
    let held = checked.iter().filter(|c| c.2 && c.1.is_empty()).count();
    let refused = checked.iter().filter(|c| !c.2 && c.1.is_empty()).count();
    let problems: Vec<&(String, Vec<String>, bool)> =
        checked.iter().filter(|c| !c.1.is_empty()).collect();
    eprintln!(
        "{MIXED_CHAINS} generated mixed chains: {held} planned and held to 1e-9, {refused} \
         refused naming a stage the reference also finds outside its region, {} disagree",
        problems.len()
    );
    for (_, found, _) in &problems {
        eprintln!("disagreement: {}", found.join("; "));
    }
    if let Some((text, found, _)) = problems.first() {
        panic!(
            "{} of {MIXED_CHAINS} generated mixed chains disagree; the first:\n{}\nchain:\n{}",
            problems.len(),
            found.join("\n"),
            text
        );
    }
    assert!(
        held >= 500,
        "only {held} mixed chains planned and held (the issue asks for 500)"
    );
}

/// The mixed generator itself, through the reference alone: mostly active chains, and
/// every kind and wiring shows up often enough.
#[test]
fn mixed_generator_covers_the_intended_chains() {
    let texts = mixed_chains();
    let mut active = 0;
    let mut seen = std::collections::BTreeMap::<&str, usize>::new();
    for text in &texts {
        let chain = Chain::from_text(text).unwrap_or_else(|e| panic!("{e}\n{text}"));
        let mut mark =
            |what: &'static str, yes: bool| *seen.entry(what).or_insert(0) += yes as usize;
        let any = |f: &dyn Fn(&Stage) -> bool| chain.stages.iter().any(f);
        let passive = |name: &'static str| move |s: &Stage| matches!(&s.body, Body::Passive(p) if p.type_name == name);
        let amp = |f: &dyn Fn(&Opamp) -> bool| any(&|s: &Stage| s.opamp().is_some_and(f));
        mark(
            "npn",
            any(&|s| s.is_transistor() && s.device.jfet.is_none() && s.device.sign > 0.0),
        );
        mark(
            "pnp",
            any(&|s| s.is_transistor() && s.device.jfet.is_none() && s.device.sign < 0.0),
        );
        mark("common base", any(&|s| s.kind == StageKind::CommonBase));
        mark("follower", any(&|s| s.kind == StageKind::EmitterFollower));
        mark(
            "n-JFET",
            any(&|s| s.device.jfet.is_some() && s.device.sign > 0.0),
        );
        mark(
            "p-JFET",
            any(&|s| s.device.jfet.is_some() && s.device.sign < 0.0),
        );
        mark("attenuator", any(&passive("attenuator")));
        mark("potentiometer", any(&passive("potentiometer")));
        mark("low_pass", any(&passive("low_pass")));
        mark("high_pass", any(&passive("high_pass")));
        mark("opamp_inverting", amp(&|o| o.inverting));
        mark(
            "opamp_noninverting with gain",
            amp(&|o| !o.inverting && o.r_ground.is_some()),
        );
        mark(
            "op-amp follower",
            amp(&|o| !o.inverting && o.r_feedback.is_none()),
        );
        mark("ideal op-amp output (r_out 0)", amp(&|o| o.r_out == 0.0));
        mark("op-amp r_out > 0", amp(&|o| o.r_out > 0.0));
        mark(
            "op-amp reference on a named rail",
            amp(&|o| matches!(o.reference, Reference::Rail(Term::Rail(_)))),
        );
        mark(
            "op-amp reference a voltage",
            amp(&|o| matches!(o.reference, Reference::Volts(_))),
        );
        mark(
            "op-amp reference ground",
            amp(&|o| o.reference == Reference::Rail(Term::Ground)),
        );
        mark(
            "direct from the source into a passive or op-amp stage",
            chain.links.iter().any(|l| {
                l.direct
                    && l.from == Node::Source
                    && matches!(l.to, Node::Stage(i) if !chain.stages[i].is_transistor())
            }),
        );
        mark(
            "op-amp stage direct from a transistor stage",
            chain.links.iter().any(|l| {
                l.direct
                    && matches!((l.from, l.to), (Node::Stage(a), Node::Stage(b))
                        if chain.stages[a].is_transistor() && chain.stages[b].opamp().is_some())
            }),
        );
        mark(
            "op-amp stage direct into a transistor stage",
            chain.links.iter().any(|l| {
                l.direct
                    && matches!((l.from, l.to), (Node::Stage(a), Node::Stage(b))
                        if chain.stages[a].opamp().is_some() && chain.stages[b].is_transistor())
            }),
        );
        mark(
            "op-amp stage on a loop",
            (0..chain.stages.len())
                .any(|i| chain.loop_of(i).is_some() && chain.stages[i].opamp().is_some()),
        );
        mark(
            "op-amp stage the loop's first device",
            chain
                .feedback
                .iter()
                .any(|l| chain.stages[l.to].opamp().is_some()),
        );
        mark(
            "direct into a load",
            chain
                .links
                .iter()
                .any(|l| l.direct && matches!(l.to, Node::Load(_))),
        );
        mark(
            "transistor, passive and op-amp in one chain",
            any(&|s| s.is_transistor())
                && any(&|s| matches!(s.body, Body::Passive(_)))
                && any(&|s| s.opamp().is_some()),
        );
        let dc = solve_dc(&chain).unwrap_or_else(|e| panic!("{e}\n{text}"));
        if out_of_active_region(&chain, &dc).is_empty() {
            active += 1;
            let a = analyse(&chain, dc).unwrap_or_else(|e| panic!("{e}\n{text}"));
            let first = &a.stages[a.first_clip];
            mark(
                "an op-amp clips first",
                chain.stages[a.first_clip].opamp().is_some(),
            );
            mark(
                "current_limit is a side",
                a.stages.iter().enumerate().any(|(i, r)| {
                    chain.stages[i].opamp().is_some() && r.clip_toward == "current_limit"
                }),
            );
            let _ = first;
        }
    }
    eprintln!("mixed generator: {active}/{MIXED_CHAINS} active; {seen:?}");
    assert!(
        active * 10 >= MIXED_CHAINS * 8,
        "only {active} of {MIXED_CHAINS} generated mixed chains are active"
    );
    for (what, count) in &seen {
        assert!(
            *count * 40 >= MIXED_CHAINS,
            "too few mixed chains with {what}: {count} of {MIXED_CHAINS}"
        );
    }
}

/// The contract's JSON shape filled from the reference itself, to test the checker.
fn contract_json(chain: &Chain, a: &Analysis) -> Value {
    let vin_rms = chain.input_vrms.expect("level in the file");
    let sqrt2 = std::f64::consts::SQRT_2;
    let line = |l: &LoadLine| {
        json!({ "v_ce_intercept": l.v_ce_intercept, "i_c_intercept": l.i_c_intercept,
                "slope": l.slope })
    };
    let stages: Vec<Value> = chain
        .stages
        .iter()
        .zip(&a.stages)
        .map(|(s, r)| {
            let op = &r.op;
            let resistors: serde_json::Map<String, Value> = r
                .p_resistors
                .iter()
                .map(|(n, w)| (n.to_string(), json!(w)))
                .collect();
            let out_vrms = r.cumulative_gain.abs() * vin_rms;
            json!({
                "id": s.id, "type": s.kind.name(), "device": s.device.name,
                "input_from": r.input_from,
                "operating_point": { "i_c": op.i_c, "i_b": op.i_b, "i_e": op.i_e,
                    "v_ce": op.v_ce, "v_be": op.v_be, "v_be_junction": op.v_be_junction, "v_b": op.v_b, "v_c": op.v_c,
                    "v_e": op.v_e },
                "small_signal": { "g_m": r.g_m, "r_pi": r.r_pi, "r_o": r.r_o },
                "r_in": r.r_in, "r_out": r.r_out, "load": r.load,
                "gain": r.gain, "gain_db": db(r.gain), "cumulative_gain": r.cumulative_gain,
                "input_vrms": r.input_gain.abs() * vin_rms, "output_vrms": out_vrms,
                "output_dbu": dbu(out_vrms),
                "limit_up": r.limit_up, "limit_down": r.limit_down,
                "clip_input_vpeak": r.clip_input_vpeak,
                "clip_input_vrms": r.clip_input_vpeak / sqrt2,
                "clip_toward": r.clip_toward,
                "headroom_db": db(r.limit_up.min(r.limit_down) / (out_vrms * sqrt2)),
                "dc_load_line": line(&r.dc_load_line), "ac_load_line": line(&r.ac_load_line),
                "dissipation": { "transistor": r.p_transistor, "resistors": resistors },
            })
        })
        .collect();
    let loads: Vec<Value> = chain
        .loads
        .iter()
        .enumerate()
        .map(|(j, l)| {
            let g = a.load_gains[j];
            json!({ "id": l.id, "from": a.load_from[j], "gain": g, "gain_db": db(g),
                    "output_vrms": g.abs() * vin_rms, "output_dbu": dbu(g.abs() * vin_rms) })
        })
        .collect();
    let first = &a.stages[a.first_clip];
    json!({
        "title": chain.title, "supply": chain.v_cc, "temperature": chain.temperature,
        "rails": chain.rails.iter().map(|(n, v)| json!({ "name": n, "voltage": v })).collect::<Vec<_>>(),
        "thermal_voltage": chain.v_t,
        "input": { "vrms": vin_rms, "vpeak": vin_rms * sqrt2, "dbu": dbu(vin_rms) },
        "source": { "resistance": chain.r_source },
        "stages": stages, "loads": loads,
        "first_clip": { "stage": chain.stages[a.first_clip].id,
            "input_vrms": first.clip_input_vpeak / sqrt2, "input_vpeak": first.clip_input_vpeak,
            "input_dbu": dbu(first.clip_input_vpeak / sqrt2), "toward": first.clip_toward },
        "warnings": []
    })
}

/// The checker can fail: it accepts output in the contract's shape, and flags a value
/// off by 1e-5, a missing field and a wrong side (runs without the planner).
#[test]
fn checker_flags_changed_and_missing_fields() {
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/ce_ef_pair.json"
    ))
    .expect("fixture");
    let chain = Chain::from_text(&text).expect("reads");
    let a = analyse(&chain, solve_dc(&chain).expect("dc")).expect("ac");
    let good = contract_json(&chain, &a);
    assert_eq!(compare(&chain, &a, &good), Vec::<String>::new());

    let mut changed = good.clone();
    let g = changed["stages"][1]["r_out"].as_f64().unwrap();
    changed["stages"][1]["r_out"] = json!(g * (1.0 + 1e-5));
    let problems = compare(&chain, &a, &changed);
    assert_eq!(problems.len(), 1, "{problems:?}");
    assert!(problems[0].starts_with("stages[1].r_out:"), "{problems:?}");

    let mut missing = good.clone();
    missing["stages"][0]["small_signal"]
        .as_object_mut()
        .unwrap()
        .remove("g_m");
    let problems = compare(&chain, &a, &missing);
    assert_eq!(
        problems,
        vec!["stages[0].small_signal.g_m: missing from the planner's JSON".to_string()]
    );

    let mut side = good.clone();
    let toward = a.stages[0].clip_toward;
    side["stages"][0]["clip_toward"] = json!(if toward == "cutoff" {
        "saturation"
    } else {
        "cutoff"
    });
    assert_eq!(compare(&chain, &a, &side).len(), 1);

    let mut no_r_o = good;
    no_r_o["stages"][0]["small_signal"]["r_o"] = json!(1e6);
    assert_eq!(compare(&chain, &a, &no_r_o).len(), 1);
}

/// One node, one voltage: a common emitter whose device has r_c = 5.39 Ω feeds a
/// follower directly, so the driver's collector terminal is the follower's base
/// terminal (an early version reported them apart by the follower's I_B·r_c). The
/// reference (the flat network) has one node there; the program must report the same
/// voltage twice and agree with it on every quantity.
#[test]
fn a_collector_with_r_c_feeds_a_direct_successor_one_voltage() {
    let path =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/rc_collector_direct.json");
    let text = std::fs::read_to_string(&path).expect("fixture");
    let chain = Chain::from_text(&text).expect("reads");
    let a = analyse(&chain, solve_dc(&chain).expect("dc")).expect("ac");
    assert_eq!(a.stages[0].op.v_c, a.stages[1].op.v_b);
    let out = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(["plan", path.to_str().expect("utf-8"), "--format", "json"])
        .output()
        .expect("runs");
    let json: Value = serde_json::from_slice(&out.stdout).expect("json");
    let v_c = json["stages"][0]["operating_point"]["v_c"]
        .as_f64()
        .expect("v_c");
    let v_b = json["stages"][1]["operating_point"]["v_b"]
        .as_f64()
        .expect("v_b");
    assert!(
        (v_b - v_c).abs() <= 1e-12 * v_c.abs(),
        "v_b {v_b} against v_c {v_c}"
    );
    let problems = check_chain(&path, &text);
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

/// A PNP common emitter with r_feedback and a supply filter fanning out directly to
/// two stages (an early version's DC pass did not settle on it): the flat network
/// finds one operating point with every stage active, and the program must find the
/// same one.
#[test]
fn a_feedback_stage_fanning_out_directly_settles() {
    let path =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/pnp_feedback_fanout.json");
    let text = std::fs::read_to_string(&path).expect("fixture");
    let chain = Chain::from_text(&text).expect("reads");
    let dc = solve_dc(&chain).expect("the flat network solves");
    assert!(out_of_active_region(&chain, &dc).is_empty());
    let problems = check_chain(&path, &text);
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

/// A small deterministic generator (xorshift64*, common practice, no source) for the
/// JFET chains below.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        (self.0.wrapping_mul(0x2545_f491_4f6c_dd1d) >> 11) as f64 / (1u64 << 53) as f64
    }
    fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.next()
    }
    fn log_uniform(&mut self, lo: f64, hi: f64) -> f64 {
        (lo.ln() + (hi.ln() - lo.ln()) * self.next()).exp()
    }
    fn chance(&mut self, p: f64) -> bool {
        self.next() < p
    }
}

/// A generated chain of 1–4 capacitor-coupled stages mixing n- and p-JFET common-source
/// and source-follower stages (self-biased or divider-biased, split or bypassed source
/// resistors, with and without Early effect and device capacitances) with a bipolar
/// emitter follower. The drain resistor is sized from the self-bias quadratic so that
/// most stages bias in saturation; the rest must be refused by name.
fn jfet_chain(rng: &mut Rng) -> (String, usize) {
    jfet_chain_with(rng, false)
}

/// [`jfet_chain`]; with `network`, also what only the nodal Newton solves: supply
/// filters feeding gate divider and drain, direct links between stages, and a feedback
/// link without a series capacitor closing a loop at DC.
fn jfet_chain_with(rng: &mut Rng, network: bool) -> (String, usize) {
    let supply = rng.uniform(9.0, 24.0).round();
    let n = 1 + (rng.next() * 4.0) as usize;
    let mut devices = serde_json::Map::new();
    let mut stages = Vec::new();
    let mut links = vec![json!({ "from": "source", "to": "s0", "coupling": "1u" })];
    let mut jfets = 0;
    for i in 0..n {
        let id = format!("s{i}");
        if i > 0 {
            let coupling = if network && rng.chance(0.4) {
                "direct"
            } else {
                "4u7"
            };
            links.push(json!({ "from": format!("s{}", i - 1), "to": id, "coupling": coupling }));
        }
        if rng.chance(0.2) {
            devices.insert(
                format!("q{i}"),
                json!({ "polarity": "npn", "beta": rng.uniform(80.0, 400.0).round(),
                        "early_voltage": "100 V", "transition_frequency": "250 MHz", "c_bc": "3p" }),
            );
            stages.push(
                json!({ "id": id, "type": "emitter_follower", "device": format!("q{i}"),
                "r_top": "100k", "r_bottom": "100k", "r_emitter": rng.log_uniform(1e3, 1e4) }),
            );
            continue;
        }
        jfets += 1;
        let p = rng.chance(0.4);
        let i_dss = rng.log_uniform(1e-3, 15e-3);
        let v_p = rng.uniform(0.5, 4.0);
        let mut dev = json!({ "polarity": if p { "p_jfet" } else { "n_jfet" },
            "i_dss": i_dss, "pinch_off_voltage": if p { v_p } else { -v_p } });
        if rng.chance(0.6) {
            dev["early_voltage"] = json!(rng.uniform(20.0, 200.0));
        }
        if rng.chance(0.5) {
            dev["c_gs"] = json!(rng.log_uniform(1e-12, 2e-11));
            dev["c_gd"] = json!(rng.log_uniform(5e-13, 5e-12));
        }
        devices.insert(format!("j{i}"), dev);
        let r_s = rng.log_uniform(100.0, 3300.0);
        // Self-bias: I_D·R_S = −V_GS, the quadratic's root (algebra), for sizing only.
        let k = i_dss * r_s / (v_p * v_p);
        let u = (2.0 * v_p * k + 1.0 - (4.0 * v_p * k + 1.0).sqrt()) / (2.0 * k);
        let i_d = u / r_s;
        let room = supply - u - (v_p - u);
        let mut stage = json!({ "id": id, "device": format!("j{i}") });
        // The gate resistor to the rail the source returns to (self-bias), or a divider.
        let self_bias = rng.chance(if network { 0.3 } else { 0.7 });
        let gate_key = if p { "r_top" } else { "r_bottom" };
        stage[gate_key] = json!(rng.log_uniform(1e5, 1e7));
        if !self_bias {
            // A divider that lifts the gate by at most about a volt.
            let other = if p { "r_bottom" } else { "r_top" };
            let r_gate = stage[gate_key].as_f64().unwrap();
            stage[other] = json!(r_gate * rng.uniform(supply, 4.0 * supply));
        }
        if rng.chance(0.5) {
            stage["type"] = json!("common_source");
            stage["r_drain"] = json!((rng.uniform(0.2, 0.8) * room / i_d).max(10.0));
            if rng.chance(0.5) {
                let split = rng.uniform(0.0, 1.0);
                if split > 0.2 {
                    stage["r_source"] = json!(r_s * (1.0 - split));
                }
                stage["r_source_bypassed"] = json!(r_s * split.max(0.2));
                stage["c_bypass"] = json!("220u");
            } else {
                stage["r_source"] = json!(r_s);
            }
        } else {
            stage["type"] = json!("source_follower");
            stage["r_source"] = json!(r_s);
            if rng.chance(0.3) {
                stage["r_drain"] = json!((rng.uniform(0.1, 0.5) * room / i_d).max(10.0));
            }
        }
        if network && rng.chance(0.6) {
            stage["supply_filter"] =
                json!({ "resistance": rng.log_uniform(100.0, 2.2e3), "capacitance": "100u" });
        }
        stages.push(stage);
    }
    links.push(json!({ "from": format!("s{}", n - 1), "to": "out", "coupling": "10u" }));
    let mut chain = json!({
        "version": 2,
        "title": "generated JFET chain",
        "supply": format!("{supply} V"),
        "devices": devices,
        "source": { "resistance": rng.log_uniform(50.0, 1e5), "level": "-50 dBu" },
        "stages": stages,
        "loads": [ { "id": "out", "resistance": rng.log_uniform(1e3, 1e5) } ],
        "links": links,
    });
    if network && rng.chance(0.4) {
        let mut dice = Dice {
            values: (0..8).map(|_| rng.next()).collect(),
            next: 0,
        };
        add_feedback_link_with(&mut chain, &mut dice, false);
    }
    (serde_json::to_string_pretty(&chain).unwrap(), jfets)
}

/// The independent check for JFET stages: ≥ 500 generated chains mixing n- and
/// p-JFET stages with bipolar ones agree with the flat network (the reference's own
/// square-law Newton and nalgebra LU) to 1e-9 in every compared quantity, or are
/// refused naming a stage the reference also finds outside its active region.
#[test]
fn generated_jfet_chains_agree_with_flat_network() {
    let mut rng = Rng(0x9e37_79b9_7f4a_7c15);
    let chains: Vec<(String, usize)> = (0..640).map(|_| jfet_chain(&mut rng)).collect();
    // Chains with a JFET that the reference finds biased in its active region (the
    // planner must plan those, and match them; the rest it must refuse by name).
    let active = chains
        .iter()
        .filter(|(text, jfets)| {
            *jfets > 0
                && Chain::from_text(text)
                    .ok()
                    .and_then(|c| {
                        solve_dc(&c)
                            .ok()
                            .map(|dc| out_of_active_region(&c, &dc).is_empty())
                    })
                    .unwrap_or(false)
        })
        .count();
    eprintln!(
        "{active} of {} generated JFET chains biased in the active region",
        chains.len()
    );
    assert!(
        active >= 500,
        "only {active} active JFET chains (the issue asks for 500)"
    );
    let texts: Vec<String> = chains.iter().map(|(text, _)| text.clone()).collect();
    let problems = check_all_v2(&texts);
    assert!(
        problems.is_empty(),
        "{} problems, first: {:#?}",
        problems.len(),
        &problems[..problems.len().min(8)]
    );
    if let Some(dir) = std::env::var_os("AMPCHAIN_JFET_DUMP") {
        for (k, (text, _)) in chains.iter().enumerate() {
            std::fs::write(Path::new(&dir).join(format!("gen-{k}.json")), text).unwrap();
        }
    }
}

/// Plan `path` with the binary and read its JSON.
fn plan_json(path: &Path) -> Value {
    let out = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(["plan", path.to_str().expect("utf-8"), "--format", "json"])
        .output()
        .expect("runs");
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("json")
}

/// The checker can fail on passive and op-amp stages too: the planner's own JSON for
/// the demo chains with such stages agrees, and a 1e-8 change in one of their values
/// or a number where a passive stage has null is flagged.
#[test]
fn checker_flags_changed_passive_and_op_amp_fields() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    for (file, stage, field) in [
        ("chains/stage-monitor-pickup.json", 2, "r_out"),
        ("chains/stage-monitor-pickup.json", 2, "limit_up"),
        ("chains/stage-monitor-pickup.json", 2, "gain"),
        ("chains/passive-controls.json", 0, "r_out"),
        ("chains/passive-controls.json", 2, "load"),
        ("chains/passive-controls.json", 4, "r_in"),
    ] {
        let path = root.join(file);
        let text = std::fs::read_to_string(&path).expect("chain file");
        let chain = Chain::from_text(&text).expect("reads");
        let a = analyse(&chain, solve_dc(&chain).expect("dc")).expect("ac");
        let good = plan_json(&path);
        let held = |json: &Value| compare_within(&chain, &a, json, V2_REL_TOL, V2_DB_FLOOR, false);
        assert_eq!(held(&good), Vec::<String>::new(), "{file}");
        let mut changed = good.clone();
        let x = changed["stages"][stage][field].as_f64().expect("a number");
        changed["stages"][stage][field] = json!(x * (1.0 + 1e-8));
        let problems = held(&changed);
        assert!(
            problems
                .iter()
                .any(|p| p.starts_with(&format!("stages[{stage}].{field}:"))),
            "{file} {field}: {problems:?}"
        );
    }
    let path = root.join("chains/passive-controls.json");
    let text = std::fs::read_to_string(&path).expect("chain file");
    let chain = Chain::from_text(&text).expect("reads");
    let a = analyse(&chain, solve_dc(&chain).expect("dc")).expect("ac");
    let mut clips = plan_json(&path);
    clips["stages"][0]["limit_up"] = json!(1.0);
    assert_eq!(
        compare_within(&chain, &a, &clips, V2_REL_TOL, V2_DB_FLOOR, false).len(),
        1
    );
}

/// An op-amp whose pin rests at its 5 V reference with a 2.2 kΩ load direct on it
/// draws 2.27 mA at DC, beyond its 1 mA `output_current_limit`: the flat network finds
/// it resting in current limiting, and the planner must refuse it naming the stage
/// (an early version planned it with a negative clip level and a null dBu).
#[test]
fn an_op_amp_resting_beyond_its_current_limit_is_refused() {
    let text = json!({
        "version": 2,
        "supplies": { "vcc": "15 V", "vee": "-15 V" },
        "devices": { "u": { "polarity": "opamp", "open_loop_gain": "100 dB",
            "gain_bandwidth": "3 MHz", "output_current_limit": "1 mA" } },
        "source": { "resistance": "600", "level": "-20 dBu" },
        "stages": [ { "id": "drive", "type": "opamp_noninverting", "device": "u",
            "r_feedback": "10k", "r_ground": "10k", "r_bias": "100k", "reference": "5 V",
            "rails": { "top": "vcc", "bottom": "vee" } } ],
        "loads": [ { "id": "line", "resistance": "2k2" } ],
        "links": [ { "from": "source", "to": "drive", "coupling": "1u" },
                   { "from": "drive", "to": "line", "coupling": "direct" } ]
    })
    .to_string();
    let chain = Chain::from_text(&text).expect("reads");
    let dc = solve_dc(&chain).expect("dc");
    // By hand: the pin rests at V_ref·A_0β/(1 + A_0β) with β = 1/2 (docs/definitions.md
    // "Op-amp"), − at V_ref + β·(V_pin − V_ref); the pin's current by Ohm's law into the
    // load and r_feedback.
    let a0b = 1e5 * 0.5;
    let v_pin = 5.0 * a0b / (1.0 + a0b);
    let v_minus = 5.0 + 0.5 * (v_pin - 5.0);
    let by_hand = v_pin / 2200.0 + (v_pin - v_minus) / 10e3;
    assert!(
        (dc.i_out[0] - by_hand).abs() < 1e-12 * by_hand,
        "{} against {by_hand}",
        dc.i_out[0]
    );
    assert_eq!(out_of_active_region(&chain, &dc).len(), 1);
    let path = write_temp(&text);
    let problems = check_chain(&path, &text);
    assert!(problems.is_empty(), "{}", problems.join("\n"));
    let _ = std::fs::remove_file(&path);
}

/// Checks every chain of `texts` against the flat network on 4 threads (1e-9, as for
/// the generated version-2 chains); returns the problems found.
fn check_all_v2(texts: &[String]) -> Vec<String> {
    check_in_threads(texts, 4, false)
        .into_iter()
        .flat_map(|(_, found)| found)
        .collect()
}

/// JFET stages that only the nodal Newton solves (docs/definitions.md "JFET": a supply
/// filter feeding gate divider and drain, direct links, a loop closed at DC) against
/// the flat network (the reference's own square-law Newton and nalgebra LU), every
/// compared quantity to 1e-9: three chains written here (scenarios of this test) and
/// 300 generated ones, of which those the reference finds in the active region must
/// plan and agree, the rest be refused naming a stage it finds outside.
#[test]
fn jfet_networks_agree_with_flat_network() {
    let n_jfet = json!({ "polarity": "n_jfet", "i_dss": "8m", "pinch_off_voltage": "-2 V",
                         "early_voltage": "80 V" });
    let hand = [
        // A common source on a filtered rail that feeds its gate divider and drain.
        json!({ "version": 2, "title": "JFET gain stage on a filtered rail", "supply": "15 V",
            "devices": { "jf": n_jfet },
            "source": { "resistance": "10k", "level": "-40 dBu" },
            "stages": [ { "id": "gain", "type": "common_source", "device": "jf",
                "r_top": "10M", "r_bottom": "1M", "r_source": "1k5", "r_drain": "2k2",
                "supply_filter": { "resistance": "1k", "capacitance": "100u" } } ],
            "loads": [ { "id": "out", "resistance": "47k" } ],
            "links": [ { "from": "source", "to": "gain", "coupling": "1u" },
                       { "from": "gain", "to": "out", "coupling": "10u" } ] }),
        // A p-JFET source follower on a filtered rail driving a bipolar follower directly.
        json!({ "version": 2, "title": "p-JFET buffer into a transistor", "supply": "15 V",
            "devices": { "jp": { "polarity": "p_jfet", "i_dss": "5m", "pinch_off_voltage": "1.5 V",
                                 "early_voltage": "60 V" },
                         "q": { "polarity": "npn", "beta": 200, "early_voltage": "90 V" } },
            "source": { "resistance": "10k", "level": "-40 dBu" },
            "stages": [
                { "id": "buffer", "type": "source_follower", "device": "jp", "r_top": "1M",
                  "r_bottom": "2M2", "r_source": "3k3", "r_drain": "1k",
                  "supply_filter": { "resistance": "470", "capacitance": "100u" } },
                { "id": "driver", "type": "emitter_follower", "device": "q", "r_emitter": "4k7" } ],
            "loads": [ { "id": "out", "resistance": "10k" } ],
            "links": [ { "from": "source", "to": "buffer", "coupling": "1u" },
                       { "from": "buffer", "to": "driver", "coupling": "direct" },
                       { "from": "driver", "to": "out", "coupling": "10u" } ] }),
        // A JFET input stage in a feedback pair closed at DC into its source.
        json!({ "version": 2, "title": "JFET input stage in a DC feedback pair", "supply": "15 V",
            "devices": { "jf": n_jfet,
                         "q": { "polarity": "npn", "beta": 250, "early_voltage": "90 V" } },
            "source": { "resistance": "10k", "level": "-40 dBu" },
            "stages": [
                { "id": "input", "type": "common_source", "device": "jf", "r_bottom": "1M",
                  "r_drain": "4k7", "r_source": "470", "r_source_bypassed": "1k", "c_bypass": "220u" },
                { "id": "out", "type": "emitter_follower", "device": "q", "r_emitter": "4k7" } ],
            "loads": [ { "id": "line", "resistance": "10k" } ],
            "links": [ { "from": "source", "to": "input", "coupling": "1u" },
                       { "from": "input", "to": "out", "coupling": "direct" },
                       { "from": "out", "to": "line", "coupling": "10u" },
                       { "from": "out", "to": "input", "coupling": "feedback", "resistance": "22k",
                         "into": "emitter" } ] }),
    ];
    let hand: Vec<String> = hand
        .iter()
        .map(|c| serde_json::to_string_pretty(c).unwrap())
        .collect();
    // Each hand chain plans (the reference finds it active).
    for text in &hand {
        let chain = Chain::from_text(text).unwrap();
        let dc = solve_dc(&chain).unwrap();
        assert!(out_of_active_region(&chain, &dc).is_empty(), "{text}");
    }
    let mut problems = check_all_v2(&hand);
    let mut rng = Rng(0x2545_f491_4f6c_dd1d);
    let generated: Vec<String> = (0..300)
        .map(|_| jfet_chain_with(&mut rng, true).0)
        .collect();
    // What the network solve meets among the chains the reference finds active.
    let (mut filtered, mut direct, mut dc_loops) = (0, 0, 0);
    for text in &generated {
        let Ok(chain) = Chain::from_text(text) else {
            continue;
        };
        let active = solve_dc(&chain).is_ok_and(|dc| out_of_active_region(&chain, &dc).is_empty());
        if active {
            filtered += usize::from(chain.stages.iter().any(|s| s.coupled()));
            direct += usize::from(text.contains("\"direct\""));
            dc_loops += usize::from(chain.feedback.iter().any(|l| l.capacitance.is_none()));
        }
    }
    eprintln!("active: {filtered} with a coupled supply filter, {direct} with a direct link, {dc_loops} with a loop closed at DC");
    assert!(
        filtered >= 50 && direct >= 30 && dc_loops >= 20,
        "too few network cases: {filtered} filtered, {direct} direct, {dc_loops} DC loops"
    );
    problems.extend(check_all_v2(&generated));
    assert!(
        problems.is_empty(),
        "{} problems, first: {:#?}",
        problems.len(),
        &problems[..problems.len().min(8)]
    );
}
