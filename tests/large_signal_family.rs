//! `sweep` on the whole bipolar family (PNP, split and named rails, r_bb' and r_c,
//! `r_feedback`, `supply_filter`, `common_base`): the large-signal network is built from
//! the stage descriptions (src/large_signal/flat.rs). Each check names its outside
//! reference: mirror symmetry (exact), the planner's small-signal model (itself checked
//! against the flat-network reference in tests/network_check.rs) with the stated model
//! difference, and an independent solve of the Ebers–Moll equations written here.

mod reference;

use ampchain::large_signal::{LargeSignal, LevelResult};
use ampchain::Chain;
use reference::generate::{generate_chain_v2, Dice};
use std::path::Path;
use std::process::Command;

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn load(rel: &str) -> Chain {
    ampchain::io::read_chain(root().join(rel).to_str().unwrap()).unwrap()
}

/// |a − b| within `tol` relative to the larger, or within `floor`.
fn close(a: f64, b: f64, tol: f64, floor: f64) -> bool {
    (a - b).abs() <= tol * a.abs().max(b.abs()) || (a - b).abs() <= floor
}

#[test]
fn every_version_2_demo_chain_sweeps() {
    // The demo chains written for version 2 (split rails, PNP, common base, r_feedback,
    // supply filters) run through `ampchain sweep` with exit status 0.
    let mut count = 0;
    for entry in std::fs::read_dir(root().join("chains")).unwrap() {
        let path = entry.unwrap().path();
        let text = std::fs::read_to_string(&path).unwrap();
        if !text.contains("\"version\": 2") {
            continue;
        }
        count += 1;
        let out = Command::new(env!("CARGO_BIN_EXE_ampchain"))
            .args(["sweep", path.to_str().unwrap(), "--samples", "128"])
            .args(["--steps", "3", "--format", "json"])
            .output()
            .unwrap();
        assert_eq!(
            out.status.code(),
            Some(0),
            "{}: {}",
            path.display(),
            String::from_utf8_lossy(&out.stderr)
        );
        let json: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        assert!(json["onsets"]["stages"]
            .as_array()
            .is_some_and(|s| !s.is_empty()));
    }
    assert!(count >= 4, "only {count} version 2 demo chains");
}

/// A two-stage chain and its mirror image: a common emitter (divider, r_feedback,
/// bypassed emitter, r_bb' and r_c) direct-coupled into a follower. NPN between +12 V
/// and ground; the PNP mirror between ground and −12 V, every voltage negated: its
/// divider halves exchange names (r_top and r_bottom keep their sides,
/// docs/definitions.md "Rails").
fn mirrored_pair(pnp: bool) -> Chain {
    let (polarity, supplies, rails, r_top, r_bottom) = if pnp {
        (
            "pnp",
            r#"{"vee": "-12 V"}"#,
            r#"{"top": "ground", "bottom": "vee"}"#,
            "18k",
            "82k",
        )
    } else {
        (
            "npn",
            r#"{"vcc": "12 V"}"#,
            r#"{"top": "vcc", "bottom": "ground"}"#,
            "82k",
            "18k",
        )
    };
    let text = format!(
        r#"{{
  "version": 2,
  "supplies": {supplies},
  "devices": {{ "q": {{ "polarity": "{polarity}", "beta": 180, "saturation_current": "8f",
    "early_voltage": "90 V", "base_resistance": "30", "collector_resistance": "6" }} }},
  "source": {{ "resistance": "1k", "level": "10 mV rms" }},
  "stages": [
    {{ "id": "amp", "type": "common_emitter", "device": "q", "rails": {rails},
      "r_top": "{r_top}", "r_bottom": "{r_bottom}", "r_collector": "4k7", "r_feedback": "470k",
      "r_emitter": "220", "r_emitter_bypassed": "820", "c_bypass": "100u" }},
    {{ "id": "buf", "type": "emitter_follower", "device": "q", "rails": {rails},
      "r_emitter": "3k3" }}
  ],
  "loads": [ {{ "id": "out", "resistance": "10k" }} ],
  "links": [
    {{ "from": "source", "to": "amp", "coupling": "10u" }},
    {{ "from": "amp", "to": "buf", "coupling": "direct" }},
    {{ "from": "buf", "to": "out", "coupling": "22u" }}
  ]
}}"#
    );
    Chain::from_json_str(&text).unwrap()
}

#[test]
fn pnp_chain_is_the_mirrored_npn_chain() {
    // Mirror symmetry, exact: negating every voltage of the NPN network gives the PNP
    // network (the same law s·f(s·V_BE, s·V_BC) with s = −1). A sine EMF negated is the
    // same sine half a period later, so the PNP waveform at sample k is the negated NPN
    // waveform at sample k + N/2: magnitudes, THD, gains and currents are equal, the DC
    // shift and every node voltage change sign, the two peaks exchange. Tolerance 1e-9
    // relative (each sample is solved to Newton's 1e-10 V step), harmonics within 1e-9
    // of their node's fundamental.
    let n = 256;
    let (npn, pnp) = (mirrored_pair(false), mirrored_pair(true));
    let (ev_n, ev_p) = (npn.evaluate().unwrap(), pnp.evaluate().unwrap());
    let mut ls_n = LargeSignal::new(&npn, &ev_n, n).unwrap();
    let mut ls_p = LargeSignal::new(&pnp, &ev_p, n).unwrap();
    for i in 0..2 {
        let (a, b) = (ls_n.quiescent[i], ls_p.quiescent[i]);
        for (what, x, y) in [
            ("v_b", a.v_b, -b.v_b),
            ("v_c", a.v_c, -b.v_c),
            ("v_e", a.v_e, -b.v_e),
            ("v_ce", a.v_ce, b.v_ce),
            ("i_c", a.i_c, b.i_c),
            ("i_b", a.i_b, b.i_b),
        ] {
            assert!(close(x, y, 1e-9, 1e-12), "stage {i} {what}: {x} vs {y}");
        }
    }
    let clip = ev_n.headroom[ev_n.first_clip].clip_input_vpeak;
    for factor in [0.01, 0.5, 3.0] {
        let e = clip * factor;
        let (rn, rp) = (ls_n.level(e).unwrap(), ls_p.level(e).unwrap());
        for i in 0..2 {
            let (wn, wp) = (&ls_n.stage_waves[i * n..], &ls_p.stage_waves[i * n..]);
            for k in 0..n {
                let (a, b) = (wn[(k + n / 2) % n], wp[k]);
                assert!(
                    close(a.v_out, -b.v_out, 1e-9, 1e-9 * 12.0),
                    "level ×{factor} stage {i} sample {k}: {} vs {}",
                    a.v_out,
                    -b.v_out
                );
            }
        }
        mirrored_figures(&rn, &rp, factor);
    }
}

/// The reported figures of the NPN and PNP runs at one level (see the test above).
fn mirrored_figures(rn: &LevelResult, rp: &LevelResult, factor: f64) {
    for (sn, sp) in rn.stages.iter().zip(&rp.stages) {
        let (on, op) = (&sn.output, &sp.output);
        let w = on.fundamental;
        let at = |what: &str| format!("level ×{factor} stage {} {what}", sn.id);
        for (what, x, y, floor) in [
            ("fundamental", on.fundamental, op.fundamental, 0.0),
            ("thd_percent", on.thd_percent, op.thd_percent, 1e-7),
            ("dc_shift", on.dc_shift, -op.dc_shift, 1e-9 * w),
            (
                "peak_positive",
                on.peak_positive,
                op.peak_negative,
                1e-9 * w,
            ),
            (
                "peak_negative",
                on.peak_negative,
                op.peak_positive,
                1e-9 * w,
            ),
            ("gain", sn.gain, sp.gain, 0.0),
            (
                "cumulative_gain",
                sn.cumulative_gain,
                sp.cumulative_gain,
                0.0,
            ),
            ("compression_db", sn.compression_db, sp.compression_db, 1e-8),
            ("v_ce_min", sn.v_ce_min, sp.v_ce_min, 0.0),
            ("i_c_min", sn.i_c_min, sp.i_c_min, 1e-15),
            ("i_b_max", sn.i_b_max, sp.i_b_max, 0.0),
        ] {
            assert!(close(x, y, 1e-9, floor), "{}: {x} vs {y}", at(what));
        }
        for (h, (x, y)) in on.harmonics.iter().zip(&op.harmonics).enumerate() {
            assert!(
                close(*x, *y, 1e-9, 1e-9 * w),
                "{}: {x} vs {y}",
                at(&format!("harmonic {}", h + 2))
            );
        }
        assert_eq!(sn.saturates, sp.saturates, "{}", at("saturates"));
        assert_eq!(sn.cuts_off, sp.cuts_off, "{}", at("cuts_off"));
    }
}

/// The Ebers–Moll transport model with the Early factor, written here on its own
/// (Ebers & Moll 1954 in its transport form, any device text; from memory):
/// I_C = I_S(e^(V_BE/V_T) − e^(V_BC/V_T))(1 + (V_BE − V_BC)/V_A) − (I_S/β_R)(e^(V_BC/V_T) − 1),
/// I_B = (I_S/β_F)(e^(V_BE/V_T) − 1) + (I_S/β_R)(e^(V_BC/V_T) − 1).
struct EbersMoll {
    i_s: f64,
    beta_f: f64,
    beta_r: f64,
    v_a: f64,
    v_t: f64,
}

impl EbersMoll {
    fn currents(&self, v_be: f64, v_bc: f64) -> (f64, f64) {
        let x = (v_be / self.v_t).exp();
        let y = (v_bc / self.v_t).exp();
        let i_c = self.i_s * (x - y) * (1.0 + (v_be - v_bc) / self.v_a)
            - self.i_s / self.beta_r * (y - 1.0);
        let i_b = self.i_s / self.beta_f * (x - 1.0) + self.i_s / self.beta_r * (y - 1.0);
        (i_c, i_b)
    }
}

/// The largest x in [lo, hi] with f(x) ≥ 0, for a decreasing f (bisection to the last
/// bit, numerical analysis, any text).
fn bisect(mut lo: f64, mut hi: f64, f: impl Fn(f64) -> f64) -> f64 {
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if f(mid) >= 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    lo
}

/// One common-emitter stage at DC, NPN on 0…+V or PNP hanging upside down on 0…+V (its
/// emitter resistors to the top, collector to ground): solved by nested bisection of
/// the junction voltages (s·V, s = ±1) in the Ebers–Moll equations. Returns the terminal
/// voltages V_B, V_C, V_E and the magnitudes I_C, I_B.
fn single_stage_by_bisection(pnp: bool, em: &EbersMoll) -> [f64; 5] {
    let s = if pnp { -1.0 } else { 1.0 };
    // The divider's halves exchange for the PNP (r_top and r_bottom keep their sides).
    let (r_top, r_bottom) = if pnp { (22e3, 100e3) } else { (100e3, 22e3) };
    let (v_top, r_c, r_e) = (15.0, 4.7e3, 1.2e3 + 330.0);
    let (r_bb, r_cc) = (40.0, 8.0);
    // Thevenin's theorem on the divider (Ohm's law, exact).
    let v_th = v_top * r_bottom / (r_top + r_bottom);
    let r_th = r_top * r_bottom / (r_top + r_bottom);
    // NPN: collector resistor to the top, emitter resistors to ground; PNP the reverse.
    let (v_crail, v_erail) = if pnp { (0.0, v_top) } else { (v_top, 0.0) };
    // Node voltages from the currents (currents into the terminals are s·I_B, s·I_C,
    // −s·(I_C + I_B)): intrinsic base, emitter, intrinsic collector.
    let nodes = |i_c: f64, i_b: f64| {
        let v_bi = v_th - s * i_b * (r_th + r_bb);
        let v_e = v_erail + s * (i_c + i_b) * r_e;
        let v_ci = v_crail - s * i_c * (r_c + r_cc);
        (v_bi, v_e, v_ci)
    };
    // Inner: for a junction voltage v_be, the v_bc that the network gives back.
    let v_bc_of = |v_be: f64| {
        bisect(-40.0, 1.2, |v_bc| {
            let (i_c, i_b) = em.currents(v_be, v_bc);
            let (v_bi, _, v_ci) = nodes(i_c, i_b);
            s * (v_bi - v_ci) - v_bc
        })
    };
    // Outer: the v_be that the network gives back.
    let v_be = bisect(0.0, 1.2, |v_be| {
        let (i_c, i_b) = em.currents(v_be, v_bc_of(v_be));
        let (v_bi, v_e, _) = nodes(i_c, i_b);
        s * (v_bi - v_e) - v_be
    });
    let (i_c, i_b) = em.currents(v_be, v_bc_of(v_be));
    let (_, v_e, _) = nodes(i_c, i_b);
    let v_b = v_th - s * i_b * r_th;
    let v_c = v_crail - s * i_c * r_c;
    [v_b, v_c, v_e, i_c, i_b]
}

#[test]
fn single_stage_quiescent_point_agrees_with_an_independent_solve() {
    // The Ebers–Moll quiescent point of one stage with r_bb' and r_c, NPN and PNP, a
    // common emitter and a common base (at DC the same circuit: c_bypass, c_base and the
    // coupling capacitors open, 1k53 from emitter to its rail), against nested bisection
    // of the same equations written in this file. The network's Newton stops at a step
    // below 1e-10 V after quadratic convergence, so 1e-9 relative is ample.
    let v_t = 1.380649e-23 * 300.0 / 1.602176634e-19; // kT/q, exact SI constants (SI Brochure)
    let em = EbersMoll {
        i_s: 6e-15,
        beta_f: 160.0,
        beta_r: 4.0,
        v_a: 75.0,
        v_t,
    };
    let common_emitter = r#""type": "common_emitter", "r_emitter": "330", "r_emitter_bypassed": "1k2", "c_bypass": "100u""#;
    let common_base = r#""type": "common_base", "r_emitter": "1k53", "c_base": "10u""#;
    for (pnp, kind) in [
        (false, common_emitter),
        (true, common_emitter),
        (false, common_base),
        (true, common_base),
    ] {
        let (r_top, r_bottom) = if pnp {
            ("22k", "100k")
        } else {
            ("100k", "22k")
        };
        let text = format!(
            r#"{{
  "version": 2, "supply": "15 V", "temperature": 300,
  "devices": {{ "q": {{ "polarity": "{}", "beta": 160, "beta_reverse": 4,
    "saturation_current": 6e-15, "early_voltage": "75 V",
    "base_resistance": "40", "collector_resistance": "8" }} }},
  "source": {{ "resistance": "600", "level": "1 mV rms" }},
  "stages": [ {{ "id": "amp", {kind}, "device": "q",
    "r_top": "{r_top}", "r_bottom": "{r_bottom}", "r_collector": "4k7" }} ],
  "loads": [ {{ "id": "out", "resistance": "47k" }} ],
  "links": [ {{ "from": "source", "to": "amp", "coupling": "4u7" }},
             {{ "from": "amp", "to": "out", "coupling": "10u" }} ]
}}"#,
            if pnp { "pnp" } else { "npn" }
        );
        let chain = Chain::from_json_str(&text).unwrap();
        let ev = chain.evaluate().unwrap();
        let ls = LargeSignal::new(&chain, &ev, 64).unwrap();
        let q = ls.quiescent[0];
        let want = single_stage_by_bisection(pnp, &em);
        for (what, got, want) in [
            ("v_b", q.v_b, want[0]),
            ("v_c", q.v_c, want[1]),
            ("v_e", q.v_e, want[2]),
            ("i_c", q.i_c, want[3]),
            ("i_b", q.i_b, want[4]),
        ] {
            assert!(
                close(got, want, 1e-9, 0.0),
                "pnp {pnp} {kind} {what}: network {got:e}, bisection {want:e}"
            );
        }
    }
}

/// Demo chains and fixtures with each option, and a check that the option is there.
/// The last three are the v1 fixtures `sweep` refused (a load direct-coupled to the
/// collector; tests/v1_golden.rs `FIXED_REFUSALS`).
const FAMILY: [(&str, &str); 9] = [
    ("chains/split-rail-pair.json", "split rails, PNP, r_bb'"),
    ("chains/feedback-bias-preamp.json", "r_feedback"),
    ("chains/decoupled-three-stage.json", "supply_filter"),
    ("chains/common-base-input.json", "common_base"),
    (
        "tests/fixtures/rc_collector_direct.json",
        "r_c, r_bb', supply_filter, split rails",
    ),
    (
        "tests/fixtures/pnp_feedback_fanout.json",
        "PNP, r_c, r_feedback, supply_filter, split rails",
    ),
    ("tests/fixtures/bypass_only.json", "direct-coupled load"),
    ("tests/fixtures/miller_ce.json", "direct-coupled load"),
    ("tests/fixtures/rc_highpass.json", "direct-coupled load"),
];

#[test]
fn small_level_gains_agree_with_the_plan_for_every_option() {
    // 60 dB below the planner's lowest clip level the fundamental over the EMF (and
    // over the stage's input node) equals the planner's midband cumulative gain (and
    // stage gain) within 1e-6. Known model difference: the planner's forward-active law
    // (with the same V_A) leaves out Ebers–Moll's −I_S/β terms and the reverse-biased
    // collector junction, of relative size I_S/I_B ≲ 1e-8 and e^(V_BC/V_T) ≈ 0 in
    // forward active. The level adds the exponential's own compression of the
    // fundamental, of order (v̂_be/V_T)²/8 with v̂_be 1e-3 of the junction's swing at
    // clipping: about 1e-7 for a swing of V_T. Measured worst: 5.1e-8 (the common base
    // stage); 1e-6 leaves a margin of 20.
    for (rel, what) in FAMILY {
        let chain = load(rel);
        let text = std::fs::read_to_string(root().join(rel)).unwrap();
        for key in what.split(", ") {
            let present = match key {
                "split rails" => text.contains("\"vee\""),
                "PNP" => text.contains("\"pnp\""),
                "r_bb'" => text.contains("base_resistance"),
                "r_c" => text.contains("collector_resistance"),
                "direct-coupled load" => chain.topology.load_driver[0].1.is_none(),
                other => text.contains(other),
            };
            assert!(present, "{rel}: no {key}");
        }
        let ev = chain.evaluate().unwrap();
        let mut ls = LargeSignal::new(&chain, &ev, 256).unwrap();
        let e = ev.headroom[ev.first_clip].clip_input_vpeak * 1e-3;
        let r = ls.level(e).unwrap();
        for (i, s) in r.stages.iter().enumerate() {
            let (cumulative, gain) = (ev.ac[i].cumulative.re, ev.ac[i].gain.re);
            let worst = ((s.cumulative_gain - cumulative) / cumulative)
                .abs()
                .max(((s.gain - gain) / gain).abs());
            println!(
                "{rel} ({what}) stage {}: worst relative difference {worst:.2e}",
                s.id
            );
            assert!(
                worst < 1e-6,
                "{rel} ({what}) stage {}: gain {} vs {gain}, cumulative {} vs {cumulative}",
                s.id,
                s.gain,
                s.cumulative_gain
            );
            assert!(!s.saturates && !s.cuts_off, "{rel} stage {}", s.id);
        }
        // And the quiescent point equals the planner's forward-active one to 1e-6
        // (terminal voltages and current magnitudes; the same model difference).
        for (i, d) in ev.dc.iter().enumerate() {
            let q = ls.quiescent[i];
            for (name, plan, net) in [
                ("i_c", d.op.i_c, q.i_c),
                ("i_b", d.op.i_b, q.i_b),
                ("v_b", d.op.v_b, q.v_b),
                ("v_c", d.op.v_c, q.v_c),
                ("v_e", d.op.v_e, q.v_e),
            ] {
                assert!(
                    close(plan, net, 1e-6, 1e-9),
                    "{rel} stage {i} {name}: planner {plan:e}, network {net:e}"
                );
            }
        }
    }
}

#[test]
fn a_node_fed_only_through_a_direct_link_is_solved() {
    // A common emitter direct-coupled into a common base without r_emitter: the common
    // base's emitter node has no resistor of its own; the link's wire joins it to the
    // driver's collector. The network is built from the descriptions alone (no special
    // case) and solved cold; Kirchhoff's current law at the joined node (exact) checks
    // it: the lower collector's current = its r_collector's current + the upper
    // emitter's current, at the operating point and at a sample of a small sine.
    let text = r#"{
  "version": 2, "supply": "15 V", "temperature": 300,
  "devices": { "q": { "polarity": "npn", "beta": 200, "saturation_current": "10f",
    "early_voltage": "100 V" } },
  "source": { "resistance": "1k", "level": "1 mV rms" },
  "stages": [
    { "id": "lower", "type": "common_emitter", "device": "q", "r_top": "68k",
      "r_bottom": "12k", "r_collector": "100k", "r_emitter": "1k" },
    { "id": "upper", "type": "common_base", "device": "q", "r_top": "47k",
      "r_bottom": "56k", "c_base": "10u", "r_collector": "3k3" }
  ],
  "loads": [ { "id": "out", "resistance": "47k" } ],
  "links": [
    { "from": "source", "to": "lower", "coupling": "10u" },
    { "from": "lower", "to": "upper", "coupling": "direct" },
    { "from": "upper", "to": "out", "coupling": "10u" }
  ]
}"#;
    let chain = Chain::from_json_str(text).unwrap();
    let v_t = 1.380649e-23 * 300.0 / 1.602176634e-19; // kT/q (SI Brochure)
    let mut net = ampchain::large_signal::network::Network::build(&chain, v_t).unwrap();
    let mut ws = net.workspace();
    net.solve_dc(None, &mut ws).unwrap();
    let kcl = |lower: ampchain::large_signal::network::StageSample,
               upper: ampchain::large_signal::network::StageSample| {
        assert!(close(lower.v_c, upper.v_e, 0.0, 0.0), "one node");
        let through_r_collector = (15.0 - lower.v_c) / 100e3;
        let from_upper = upper.i_c + upper.i_b;
        assert!(
            close(lower.i_c, through_r_collector + from_upper, 1e-9, 0.0),
            "{} vs {through_r_collector} + {from_upper}",
            lower.i_c
        );
        // Both in forward active (the values this circuit was designed for).
        assert!(
            lower.v_ce > 1.0 && upper.v_ce > 1.0 && upper.i_c > 1e-3,
            "{lower:?} {upper:?}"
        );
    };
    kcl(net.dc_stage(0), net.dc_stage(1));
    net.start_signal(&mut ws);
    net.solve_sample(1e-3, 0.0, 1, 4, &mut ws).unwrap();
    kcl(net.stage_sample(0, &ws), net.stage_sample(1, &ws));
}

#[test]
fn generated_version_2_chains_sweep() {
    // 400 random version 2 chains (tests/reference/generate.rs: NPN and PNP, split
    // rails, r_bb', r_c, common base, r_feedback, supply filters, direct links, true
    // cascodes); every one the planner solves must give a period at 1e-3, 1, 10 and
    // 100 times its first clip level (the last two cut cascodes off, leaving their
    // shared nodes on leakage alone; before the no-gain range and gmin stepping of
    // src/large_signal/network.rs, case 312 at ×10 and case 344 at ×100 failed), and
    // at 1e-3 every stage's cumulative gain must equal the planner's within 1e-5 (the
    // model difference of the test above; measured worst 7e-7, over 381 chains). The
    // dice come from a fixed linear congruential stream (Knuth's MMIX constants; from
    // memory), so the chains are the same on every run.
    let mut state: u64 = 12345;
    let mut unit = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let (mut solved, mut worst) = (0, 0.0f64);
    for case in 0..400 {
        let values: Vec<f64> = (0..400).map(|_| unit()).collect();
        let text = generate_chain_v2(&mut Dice { values, next: 0 }).to_string();
        let chain = Chain::from_json_str(&text).unwrap();
        let Ok(ev) = chain.evaluate() else {
            continue; // saturated on purpose or cut off: the planner refuses it
        };
        solved += 1;
        let mut ls = LargeSignal::new(&chain, &ev, 64)
            .unwrap_or_else(|e| panic!("case {case}: {e}\n{text}"));
        let clip = ev.headroom[ev.first_clip].clip_input_vpeak;
        for factor in [1e-3, 1.0, 10.0, 100.0] {
            let r = ls
                .level(clip * factor)
                .unwrap_or_else(|e| panic!("case {case} at ×{factor}: {e}\n{text}"));
            if factor == 1e-3 {
                for (i, s) in r.stages.iter().enumerate() {
                    let plan = ev.ac[i].cumulative.re;
                    let d = ((s.cumulative_gain - plan) / plan).abs();
                    worst = worst.max(d);
                    assert!(
                        d < 1e-5,
                        "case {case} stage {i}: {} vs {plan}\n{text}",
                        s.cumulative_gain
                    );
                }
            }
        }
    }
    println!("{solved} chains, worst relative gain difference {worst:.1e}");
    assert!(solved >= 300, "only {solved} chains solved by the planner");
}

#[test]
fn a_cascode_overdriven_far_past_clipping_keeps_its_shared_node() {
    // chains/cascode-input.json: the lower common emitter's collector (no r_collector)
    // is the upper common base's emitter (no r_emitter): only the two transistors meet
    // at that node. Driven at 10, 30 and 100 times the planner's clip level (128
    // samples, as `ampchain sweep --samples 128`, which once failed or settled the node
    // at hundreds of kilovolts here) the lower transistor cuts off on the negative
    // half-period and the node is fed by junction leakage alone.
    // - Kirchhoff's current law at the node (exact): the lower collector's current
    //   equals the upper emitter's, I_C,low = I_C,up + I_B,up. Newton stops when a
    //   step moves no node by more than 1e-8 V (its rounding floor; 1e-10 V usually);
    //   the node's conductance is the upper junction's I_E/V_T, so the KCL residual
    //   left is at most 1e-8 V/V_T ≈ 4e-7 of the current: 1e-6 relative.
    // - The leakage balance (the Ebers–Moll transport equations, docs/definitions.md):
    //   with both collector junctions reverse biased (e^(V_BC/V_T) ≈ 0), KCL reads
    //   I_S·x_low·q_low + I_S/β_R = I_S·x_up·q_up + (I_S/β_F)·(x_up − 1), x = e^(V_BE/V_T),
    //   q = 1 + V_CE/V_A, so x_up ≥ (1/β_R + 1/β_F)/(q_up + 1/β_F): the upper emitter
    //   sits at most V_T·ln of that above its base (about 30 mV), not anywhere.
    //   Measured: 57, 61, 63 samples cut off; KCL within 4.2e-14; V_BE,up on that
    //   floor to 1.4e-13 V (the lower base junction is reverse biased, x_low ≈ 0).
    let chain = load("chains/cascode-input.json");
    let ev = chain.evaluate().unwrap();
    let n = 128;
    let mut ls = LargeSignal::new(&chain, &ev, n).unwrap();
    // The quiescent point equals the planner's forward-active one within 1e-6 (the
    // model difference of small_level_gains_agree_with_the_plan_for_every_option:
    // Ebers–Moll's −I_S/β terms and reverse collector junction, about 1e-8).
    let mut worst_q = 0.0f64;
    for (i, d) in ev.dc.iter().enumerate() {
        let q = ls.quiescent[i];
        for (name, plan, net) in [
            ("i_c", d.op.i_c, q.i_c),
            ("i_b", d.op.i_b, q.i_b),
            ("v_b", d.op.v_b, q.v_b),
            ("v_c", d.op.v_c, q.v_c),
            ("v_e", d.op.v_e, q.v_e),
        ] {
            worst_q = worst_q.max((plan - net).abs() / plan.abs());
            assert!(
                close(plan, net, 1e-6, 1e-9),
                "stage {i} {name}: planner {plan:e}, network {net:e}"
            );
        }
    }
    println!("quiescent point: worst relative difference {worst_q:.1e}");
    let i_cq = ls.quiescent[0].i_c;
    let up = chain.device_of(1);
    let clip = ev.headroom[ev.first_clip].clip_input_vpeak;
    for factor in [10.0, 30.0, 100.0] {
        ls.run(clip * factor)
            .unwrap_or_else(|e| panic!("×{factor}: {e}"));
        let (mut cut, mut worst, mut lowest) = (0, 0.0f64, f64::INFINITY);
        for k in 0..n {
            let (lower, upper) = (ls.stage_waves[k], ls.stage_waves[n + k]);
            assert_eq!(lower.v_c, upper.v_e, "one node");
            if lower.i_c >= 1e-3 * i_cq {
                continue;
            }
            cut += 1;
            let i_e = upper.i_c + upper.i_b;
            let d = (lower.i_c - i_e).abs() / lower.i_c.abs().max(i_e.abs());
            worst = worst.max(d);
            assert!(
                d < 1e-6,
                "×{factor} sample {k}: I_C,low {:e} vs I_E,up {i_e:e}",
                lower.i_c
            );
            let q_up = 1.0 + upper.v_ce / up.v_a;
            let leakage_floor =
                ev.v_t * ((1.0 / up.beta_reverse + 1.0 / up.beta) / (q_up + 1.0 / up.beta)).ln();
            let v_be_up = upper.v_b - upper.v_e;
            lowest = lowest.min(v_be_up - leakage_floor);
            assert!(
                v_be_up >= leakage_floor - 1e-9,
                "×{factor} sample {k}: upper V_BE {v_be_up} V below the leakage balance's {leakage_floor} V"
            );
        }
        println!(
            "×{factor}: {cut} of {n} samples cut off, worst KCL {worst:.1e}, \
             upper V_BE at least {lowest:.2e} V above the leakage floor"
        );
        assert!(cut > n / 8, "×{factor}: only {cut} samples cut off");
    }
}

#[test]
fn a_cascode_at_a_moderate_level_has_the_planned_gain() {
    // chains/cascode-input.json at 1/100 of the planner's clip level: every stage's
    // gain and cumulative gain (the fundamental over the stage's input node and over
    // the EMF) equal the planner's midband values. Bound 1e-4: the exponential's own
    // compression of the fundamental, (v̂_be/V_T)²/8 (the modified Bessel series,
    // from memory), with v̂_be 1e-2 of the junction's swing at clipping: 1e-4·(swing
    // at clipping/V_T)²/8, below 1e-4 for a swing up to 2.8·V_T; the model difference
    // (about 1e-8) is far below it. Measured worst 1.9e-5 (the upper stage: a swing of
    // about 1.2·V_T at clipping).
    let chain = load("chains/cascode-input.json");
    let ev = chain.evaluate().unwrap();
    let mut ls = LargeSignal::new(&chain, &ev, 256).unwrap();
    let r = ls
        .level(ev.headroom[ev.first_clip].clip_input_vpeak * 1e-2)
        .unwrap();
    for (i, s) in r.stages.iter().enumerate() {
        let (cumulative, gain) = (ev.ac[i].cumulative.re, ev.ac[i].gain.re);
        let worst = ((s.cumulative_gain - cumulative) / cumulative)
            .abs()
            .max(((s.gain - gain) / gain).abs());
        println!("stage {}: worst relative gain difference {worst:.1e}", s.id);
        assert!(
            worst < 1e-4,
            "stage {}: gain {} vs {gain}, cumulative {} vs {cumulative}",
            s.id,
            s.gain,
            s.cumulative_gain
        );
    }
}
