//! `ampchain noise` from the command line: the JSON of docs/definitions.md "Noise",
//! the table's plain words, the chart, band integration against the reference network,
//! and bad options.

mod common;
mod reference;

use common::run;
use serde_json::Value;
use std::path::Path;

fn json_of(args: &[&str]) -> Value {
    let out = run(args, None);
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

#[test]
fn json_carries_every_name_of_the_noise_contract() {
    // docs/definitions.md "Noise": band and weighting echoed; per load id,
    // output_noise_vrms, ein_vrms, ein_dbu, noise_figure_db, snr_db, contributions
    // {source, stage, element, share ≥ 0.001}; per stage id, output_noise_vrms,
    // dynamic_range_db.
    for path in common::demo_chains() {
        let p = path.to_str().unwrap();
        let v = json_of(&["noise", p, "--format", "json", "--weighting", "a"]);
        assert_eq!(v["band"]["from"], 20.0);
        assert_eq!(v["band"]["to"], 20e3);
        assert_eq!(v["weighting"], "a");
        let chain: Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        let stage_ids: Vec<&str> = chain["stages"]
            .as_array()
            .unwrap()
            .iter()
            .map(|s| s["id"].as_str().unwrap())
            .collect();
        for load in v["loads"].as_array().unwrap() {
            for key in [
                "id",
                "output_noise_vrms",
                "ein_vrms",
                "ein_dbu",
                "noise_figure_db",
                "snr_db",
            ] {
                assert!(load.get(key).is_some(), "{p}: load without {key}");
            }
            let vrms = load["output_noise_vrms"].as_f64().unwrap();
            let ein = load["ein_vrms"].as_f64().unwrap();
            assert!(vrms > 0.0 && ein > 0.0);
            // 0 dBu = √0.6 V rms.
            let dbu = 20.0 * (ein / 0.6f64.sqrt()).log10();
            assert!((load["ein_dbu"].as_f64().unwrap() - dbu).abs() < 1e-9);
            let mut sum = 0.0;
            let mut last = 1.0;
            for c in load["contributions"].as_array().unwrap() {
                let share = c["share"].as_f64().unwrap();
                assert!(share >= 0.001 && share <= last, "{p}: {c}");
                last = share;
                sum += share;
                assert!(c["source"].as_str().is_some_and(|s| !s.is_empty()));
                let element = c["element"].as_str().unwrap();
                match &c["stage"] {
                    Value::Null => assert!(
                        element == "source_resistance"
                            || element.starts_with("load:")
                            || element.starts_with("feedback:"),
                        "{p}: {element} without a stage"
                    ),
                    Value::String(id) => {
                        assert!(stage_ids.contains(&id.as_str()), "{p}: {id}");
                        assert!(
                            [
                                "r_top",
                                "r_bottom",
                                "r_collector",
                                "r_emitter",
                                "r_emitter_bypassed",
                                "r_feedback",
                                "supply_filter.resistance",
                                "base_resistance",
                                "collector_resistance",
                                "base_shot",
                                "collector_shot",
                                "base_flicker",
                                // JFET stages (docs/definitions.md).
                                "r_drain",
                                "r_source",
                                "r_source_bypassed",
                                "channel_thermal",
                                // Passive stages' resistors (docs/definitions.md).
                                "r_series",
                                "r_shunt",
                                "resistance",
                                "resistance_upper",
                                "resistance_lower",
                                // Op-amp stages (docs/definitions.md "Op-amp").
                                "r_ground",
                                "r_bias",
                                "r_input",
                                "voltage_noise",
                                "current_noise_plus",
                                "current_noise_minus",
                            ]
                            .contains(&element),
                            "{p}: element {element}"
                        );
                    }
                    other => panic!("{p}: stage {other}"),
                }
            }
            assert!(sum <= 1.0 + 1e-12 && sum > 0.9, "{p}: shares sum to {sum}");
        }
        let stages = v["stages"].as_array().unwrap();
        assert_eq!(stages.len(), stage_ids.len());
        for (s, id) in stages.iter().zip(&stage_ids) {
            assert_eq!(s["id"], *id);
            assert!(s["output_noise_vrms"].as_f64().unwrap() > 0.0);
            assert!(s.get("dynamic_range_db").is_some());
        }
    }
}

#[test]
fn snr_and_dynamic_range_follow_their_definitions() {
    // docs/definitions.md: snr_db = 20·log10(planned EMF rms / ein_vrms); dynamic range
    // = 20·log10((min limit/√2)/output noise) with `plan`'s limits.
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let p = p.to_str().unwrap();
    let v = json_of(&["noise", p, "--format", "json", "--input", "-40 dBu"]);
    let plan = json_of(&["plan", p, "--format", "json"]);
    let emf = 0.6f64.sqrt() * 10f64.powf(-40.0 / 20.0);
    let load = &v["loads"][0];
    let snr = 20.0 * (emf / load["ein_vrms"].as_f64().unwrap()).log10();
    assert!((load["snr_db"].as_f64().unwrap() - snr).abs() < 1e-9);
    for (s, ps) in v["stages"]
        .as_array()
        .unwrap()
        .iter()
        .zip(plan["stages"].as_array().unwrap())
    {
        let limit = ps["limit_up"]
            .as_f64()
            .unwrap_or(f64::INFINITY)
            .min(ps["limit_down"].as_f64().unwrap_or(f64::INFINITY));
        let dr = 20.0 * (limit / 2f64.sqrt() / s["output_noise_vrms"].as_f64().unwrap()).log10();
        assert!(
            (s["dynamic_range_db"].as_f64().unwrap() - dr).abs() < 1e-9,
            "{s}"
        );
    }
}

#[test]
fn table_names_the_largest_contributors_in_plain_words() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let out = run(&["noise", p.to_str().unwrap()], None);
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    // A value is written with its unit (SI Brochure, 5.4.3): the demo's 150 Ω source
    // and 100 Ω emitter resistor.
    assert!(text.contains("the 150 Ω source resistance: "), "{text}");
    assert!(
        text.contains("the 100 Ω emitter resistor of stage \"input\": "),
        "{text}"
    );
    assert!(text.contains("noise figure") && text.contains("dynamic range"));
}

#[test]
fn chart_is_well_formed_svg_with_a_curve_per_contributor() {
    // Parsed back with roxmltree (XML 1.0): the total and three contributors per load
    // in the legend.
    let text = noise_chart("boost-pedal.json");
    let doc = roxmltree::Document::parse(&text).unwrap();
    let labels: Vec<String> = doc
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .filter_map(|n| n.text().map(|t| t.trim().to_string()))
        .collect();
    assert!(labels.iter().any(|l| l == "total"), "{labels:?}");
    assert!(
        labels.iter().any(|l| l == "the 10.0 kΩ source resistance"),
        "{labels:?}"
    );
}

#[test]
fn every_resistor_contribution_names_its_value_with_its_unit() {
    // A value is written with its unit (SI Brochure, 5.4.3): in every demo's JSON, each
    // contribution of a resistor reads "the <number> <prefix>Ω …", the number being
    // the file's value; the element keys (a contract) keep their names.
    let mechanisms = [
        "base_shot",
        "collector_shot",
        "base_flicker",
        "channel_thermal",
        "voltage_noise",
        "current_noise_plus",
        "current_noise_minus",
    ];
    let mut seen = 0;
    for path in common::demo_chains() {
        let v = json_of(&["noise", path.to_str().unwrap(), "--format", "json"]);
        for c in v["loads"]
            .as_array()
            .unwrap()
            .iter()
            .flat_map(|l| l["contributions"].as_array().unwrap())
        {
            let element = c["element"].as_str().unwrap();
            let source = c["source"].as_str().unwrap();
            if mechanisms.contains(&element) {
                assert!(!source.contains('Ω'), "{element}: {source}");
                continue;
            }
            seen += 1;
            let words: Vec<&str> = source.split(' ').collect();
            assert_eq!(words[0], "the", "{source}");
            assert!(words[1].parse::<f64>().is_ok(), "{element}: {source}");
            assert!(
                ["Ω", "kΩ", "MΩ", "mΩ", "GΩ"].contains(&words[2]),
                "{element}: {source}"
            );
            if element == "source_resistance" {
                assert!(source.ends_with("Ω source resistance"), "{source}");
            }
        }
    }
    assert!(seen > 20, "{seen} resistor contributions");
}

#[test]
fn chart_title_is_shortened_to_the_canvas() {
    // The cascode demo's title is wider than the 960 px chart: cut at a word with
    // " …", as every other chart does (a title that runs off both edges cannot be
    // read; common practice, no source). Width estimate: 0.55 em per character at
    // the title's 22/1.24 px font, our rule of thumb.
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/cascode-input.json");
    let text = noise_chart("cascode-input.json");
    let chain: Value = serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
    let title = chain["title"].as_str().unwrap();
    let doc = roxmltree::Document::parse(&text).unwrap();
    let shown = doc
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .filter_map(|n| n.text().map(|t| t.trim().to_string()))
        .find(|t| t.len() > 20 && title.starts_with(t.split(" …").next().unwrap()))
        .expect("the title");
    let (head, _) = shown.split_once(" …").expect("a shortened title");
    assert!(head.len() > 10 && title.starts_with(head), "{shown}");
    let width = shown.chars().count() as f64 * 0.55 * 22.0 / 1.24;
    assert!(width <= 960.0, "{shown}: about {width:.0} px");
}

/// The noise chart (`noise --plot`) of demo chain `name`, as SVG text.
fn noise_chart(name: &str) -> String {
    let tmp = common::scratch("noise-chart");
    let svg = tmp.path().join("noise.svg");
    let p = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("chains")
        .join(name);
    let out = run(
        &[
            "noise",
            p.to_str().unwrap(),
            "--plot",
            svg.to_str().unwrap(),
        ],
        None,
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    std::fs::read_to_string(&svg).unwrap()
}

#[test]
fn bad_band_and_at_are_refused_before_any_work() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let p = p.to_str().unwrap();
    for args in [
        ["--band", "20k..20"],
        ["--band", "20"],
        ["--band", "0..20k"],
        ["--at", "0"],
        ["--weighting", "c"],
    ] {
        let out = run(&["noise", p, args[0], args[1]], None);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(args[0]), "{args:?}: {err}");
    }
}

#[test]
fn band_noise_agrees_with_the_reference_integrated_apart() {
    // tests/reference: each source injected on its own into the flat network, powers
    // added, integrated by composite Simpson in ln f on 600 intervals (error about
    // h⁴ = 1e-7 of the smooth spectra here, from memory); against `noise`'s adaptive
    // Gauss–Kronrod, every load's output noise to 1e-6.
    for name in ["mic-preamp.json", "boost-pedal.json"] {
        let path = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("chains")
            .join(name);
        let text = std::fs::read_to_string(&path).unwrap();
        let v = json_of(&["noise", path.to_str().unwrap(), "--format", "json"]);
        let rc = reference::Chain::from_text(&text).unwrap();
        let dc = reference::solve_dc(&rc).unwrap();
        let sources = reference::noise::sources(&rc, &dc);
        for (k, load) in v["loads"].as_array().unwrap().iter().enumerate() {
            let power = reference::noise::simpson_log(20.0, 20e3, 600, |f| {
                sources
                    .iter()
                    .map(|s| {
                        reference::noise::output_density(&rc, &dc, s, f, reference::Term::Load(k))
                            .unwrap()
                    })
                    .sum()
            });
            let ours = load["output_noise_vrms"].as_f64().unwrap().powi(2);
            println!(
                "{name}: band noise power {ours:e}, reference {power:e}, relative difference {:e}",
                (ours - power).abs() / power
            );
            assert!(
                (ours - power).abs() < 1e-6 * power,
                "{name}: {ours:e} vs reference {power:e}"
            );
        }
    }
}

#[test]
fn plan_with_noise_adds_the_dynamic_range_column_and_snr_line() {
    // `plan --noise` carries the same noise report as `noise` (band 20 Hz … 20 kHz,
    // unweighted, the planned level); without it the plan keeps its v1 keys only.
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let p = p.to_str().unwrap();
    let with = json_of(&["plan", p, "--format", "json", "--noise"]);
    let noise = json_of(&["noise", p, "--format", "json"]);
    assert_eq!(with["noise"], noise);
    let without = json_of(&["plan", p, "--format", "json"]);
    assert!(without.get("noise").is_none());
    let out = run(&["plan", p, "--noise"], None);
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(
        text.contains("dynamic range") && text.contains("│ SNR"),
        "{text}"
    );
    assert!(text.contains("SNR at load \"mixer\": "), "{text}");
}

#[test]
fn level_diagram_draws_a_noise_floor_per_stage_and_load() {
    // `plot levels --noise`: one floor mark (the orange house colour, #D06A1A) per
    // stage and load, plus the legend's; the SVG parses (roxmltree, XML 1.0).
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let out = run(
        &["plot", "levels", p.to_str().unwrap(), "--noise", "-o", "-"],
        None,
    );
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let svg = String::from_utf8(out.stdout).unwrap();
    roxmltree::Document::parse(&svg).unwrap();
    assert!(svg.contains("noise floor"));
    let marks = svg.matches("stroke=\"#D06A1A\"").count();
    assert_eq!(marks, 3 + 1 + 1, "three stages, one load, the legend");
    // The floor is drawn by default too, and `--no-noise` leaves it out.
    let plain = |extra: &[&str]| {
        let mut args = vec!["plot", "levels", p.to_str().unwrap(), "-o", "-"];
        args.extend(extra);
        let out = run(&args, None);
        assert!(out.status.success());
        String::from_utf8(out.stdout).unwrap()
    };
    assert_eq!(plain(&[]), svg);
    assert!(!plain(&["--no-noise"]).contains("noise floor"));
}

#[test]
fn optimum_collector_current_against_the_textbook() {
    // One common emitter fed from R_S = 1 kΩ with β = 400, no r_bb', its emitter
    // bypassed by 10 F and a divider of megohms (its noise R_S/R_B ≈ 0.15 % of F):
    // F = 1 + 1/(2g_m·R_S) + g_m·R_S/(2β) is least at I_C = (V_T/R_S)·√β, where
    // F_min = 1 + 1/√β (textbook, from memory). The sweep of r_top finds it within
    // 10 % (r_π = 20 kΩ against R_S shifts it a little) and F_min within 0.05 dB.
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/noise_optimum.json");
    let v = json_of(&[
        "noise",
        p.to_str().unwrap(),
        "--optimum",
        "input",
        "--format",
        "json",
    ]);
    assert_eq!(v["resistor"], "r_top");
    assert_eq!(v["at_edge"], false);
    let v_t = 1.380649e-23 * 300.0 / 1.602176634e-19;
    let i_opt = v_t / 1e3 * 400f64.sqrt();
    assert!((v["textbook_i_c"].as_f64().unwrap() / i_opt - 1.0).abs() < 1e-3);
    let i_c = v["optimum"]["i_c"].as_f64().unwrap();
    assert!((i_c / i_opt - 1.0).abs() < 0.1, "{i_c} vs {i_opt}");
    let f_min_db = 10.0 * (1.0 + 1.0 / 400f64.sqrt()).log10();
    let nf = v["optimum"]["noise_figure_db"].as_f64().unwrap();
    assert!((nf - f_min_db).abs() < 0.05, "{nf} vs {f_min_db}");
    // The refined optimum is no worse than any build of the sweep.
    for point in v["sweep"].as_array().unwrap() {
        assert!(point["noise_figure_db"].as_f64().unwrap() >= nf - 1e-12);
    }
}

#[test]
fn spread_with_noise_reports_ein_and_snr_per_load() {
    // `spread --noise`: the nominal build's EIN and SNR are `noise`'s (same definition,
    // same chain); without --noise the keys are absent.
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let p = p.to_str().unwrap();
    let spread = json_of(&["spread", p, "--noise", "--runs", "40", "--format", "json"]);
    let noise = json_of(&["noise", p, "--format", "json"]);
    let load = &spread["loads"][0];
    let ein = noise["loads"][0]["ein_vrms"].as_f64().unwrap();
    let snr = noise["loads"][0]["snr_db"].as_f64().unwrap();
    assert!((load["ein_vrms"]["nominal"].as_f64().unwrap() - ein).abs() < 1e-12 * ein);
    assert!((load["snr_db"]["nominal"].as_f64().unwrap() - snr).abs() < 1e-9);
    for key in ["min", "median", "max"] {
        assert!(load["ein_dbu"][key].as_f64().unwrap() < -90.0, "{load}");
    }
    let plain = json_of(&["spread", p, "--runs", "40", "--format", "json"]);
    assert!(plain["loads"][0].get("ein_vrms").is_none());
}

#[test]
fn spot_densities_at_a_frequency_against_the_reference() {
    // `noise --at 1k`: the output density at each load against tests/reference (every
    // source injected on its own, powers added) to 1e-9; the EIN density is it over
    // the reference's |v(load)/EMF| at 1 kHz.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let text = std::fs::read_to_string(&path).unwrap();
    let v = json_of(&[
        "noise",
        path.to_str().unwrap(),
        "--at",
        "1k",
        "--format",
        "json",
    ]);
    assert_eq!(v["at"]["frequency"], 1000.0);
    let rc = reference::Chain::from_text(&text).unwrap();
    let dc = reference::solve_dc(&rc).unwrap();
    let gains = reference::transfer_at(&rc, &dc, 1e3).unwrap();
    for (k, load) in v["at"]["loads"].as_array().unwrap().iter().enumerate() {
        let out = reference::Term::Load(k);
        let power: f64 = reference::noise::sources(&rc, &dc)
            .iter()
            .map(|s| reference::noise::output_density(&rc, &dc, s, 1e3, out).unwrap())
            .sum();
        let density = load["output_density"].as_f64().unwrap();
        assert!((density * density - power).abs() < 1e-9 * power);
        let gain = gains[rc.term_index(out)].norm();
        let ein = load["ein_density"].as_f64().unwrap();
        assert!((ein - power.sqrt() / gain).abs() < 1e-9 * ein);
        let spot_1k = v["loads"][k]["ein_density_at_1khz"].as_f64().unwrap();
        assert!((spot_1k - ein).abs() < 1e-9 * ein);
    }
}
