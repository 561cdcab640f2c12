//! `plan --sweep-position`: the knob sweep against the plan of a file that writes each
//! position, and the clip level's move against the potentiometer's divider by Ohm's law.

mod common;

use common::{run, run_ok};
use serde_json::Value;
use std::path::Path;

const DEMO: &str = "chains/passive-controls.json";

fn demo_path() -> String {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join(DEMO)
        .display()
        .to_string()
}

fn json(bytes: &[u8]) -> Value {
    serde_json::from_slice(bytes).expect("JSON")
}

/// The demo's volume knob swept over `positions` positions, as JSON.
fn sweep_json(positions: usize) -> Value {
    json(&run_ok(&[
        "plan",
        &demo_path(),
        "--sweep-position",
        "volume",
        "--positions",
        &positions.to_string(),
        "--format",
        "json",
    ]))
}

#[test]
fn every_position_equals_the_plan_of_a_file_written_at_that_position() {
    // The reference: `plan` of a copy of the chain file with the knob written there
    // (the file path, not the in-memory change the sweep makes), bit for bit.
    let sweep = sweep_json(5);
    let rows = sweep["rows"].as_array().unwrap();
    assert_eq!(rows.len(), 5);
    let dir = tempfile::tempdir().unwrap();
    let mut chain: Value =
        serde_json::from_str(&std::fs::read_to_string(demo_path()).unwrap()).unwrap();
    for row in rows {
        let x = row["position"].as_f64().unwrap();
        chain["stages"][0]["position"] = serde_json::json!(x);
        let file = dir.path().join("at.json");
        std::fs::write(&file, chain.to_string()).unwrap();
        let plan = json(&run_ok(&[
            "plan",
            file.to_str().unwrap(),
            "--format",
            "json",
        ]));
        let first = &plan["first_clip"];
        if first["input_dbu"].is_null() {
            // The knob at zero: nothing behind it is driven, so nothing clips.
            assert!(row["first_clip"]["stage"].is_null(), "{row}");
            assert!(row["headroom_db"].is_null(), "{row}");
            continue;
        }
        assert_eq!(row["first_clip"]["stage"], first["stage"], "{x}");
        assert_eq!(row["first_clip"]["toward"], first["toward"], "{x}");
        assert_eq!(row["first_clip"]["input_dbu"], first["input_dbu"], "{x}");
        assert_eq!(row["load_gain_db"][0], plan["loads"][0]["gain_db"], "{x}");
        for (k, s) in plan["stages"].as_array().unwrap().iter().enumerate() {
            if s["device"].is_null() {
                assert!(row["stage_headroom_db"][k].is_null());
            } else {
                assert_eq!(
                    row["stage_headroom_db"][k], s["headroom_db"],
                    "{x} {}",
                    s["id"]
                );
            }
        }
        let planned = plan["input"]["dbu"].as_f64().unwrap();
        let headroom = row["headroom_db"].as_f64().unwrap();
        assert!(
            (headroom - (first["input_dbu"].as_f64().unwrap() - planned)).abs() < 1e-12,
            "{x}"
        );
    }
}

#[test]
fn the_clip_level_moves_by_the_pots_divider() {
    // The source (EMF behind R_S) drives the pot, the pot's wiper drives the next
    // stage's input resistance r_in: by Ohm's law the wiper sees
    // H(a) = (a·R ∥ r_in)/(R_S + (1 − a)·R + a·R ∥ r_in), a the track fraction below
    // the wiper (DESIGN's audio law a = (100^x − 1)/99). A stage behind the pot that
    // clips first clips at a source level ∝ 1/H(a), so between two positions the
    // clip level in dBu moves by 20·log10(H(a1)/H(a2)).
    let sweep = sweep_json(11);
    let plan = json(&run_ok(&["plan", &demo_path(), "--format", "json"]));
    let r_in = plan["stages"][1]["r_in"].as_f64().unwrap();
    let (r_s, r_track) = (600.0, 22e3);
    let h = |a: f64| {
        let lower = if a > 0.0 {
            a * r_track * r_in / (a * r_track + r_in)
        } else {
            0.0
        };
        lower / (r_s + (1.0 - a) * r_track + lower)
    };
    let rows = sweep["rows"].as_array().unwrap();
    let reference = &rows[10];
    let a_ref = reference["fraction"].as_f64().unwrap();
    assert_eq!(a_ref, 1.0);
    let mut compared = 0;
    for row in &rows[1..10] {
        let x = row["position"].as_f64().unwrap();
        let a = row["fraction"].as_f64().unwrap();
        // DESIGN's audio taper law, evaluated here.
        assert!((a - (100f64.powf(x) - 1.0) / 99.0).abs() < 1e-15, "{x}");
        assert_eq!(row["first_clip"]["stage"], reference["first_clip"]["stage"]);
        let moved = row["first_clip"]["input_dbu"].as_f64().unwrap()
            - reference["first_clip"]["input_dbu"].as_f64().unwrap();
        let want = 20.0 * (h(a_ref) / h(a)).log10();
        assert!(
            (moved - want).abs() < 1e-9,
            "position {x}: moved {moved} dB, Ohm's law {want} dB"
        );
        compared += 1;
    }
    assert_eq!(compared, 9);
}

#[test]
fn table_csv_and_chart() {
    let dir = tempfile::tempdir().unwrap();
    let chart = dir.path().join("knob.svg");
    let table = run_ok(&[
        "plan",
        &demo_path(),
        "--sweep-position",
        "volume",
        "--input",
        "+5 dBu",
        "--plot",
        chart.to_str().unwrap(),
    ]);
    let text = String::from_utf8(table).unwrap();
    assert!(text.contains("first to clip"), "{text}");
    assert!(
        text.contains("The planned input first clips at position"),
        "{text}"
    );
    let svg = std::fs::read_to_string(&chart).unwrap();
    let doc = roxmltree::Document::parse(&svg).expect("well-formed SVG");
    assert!(doc.descendants().any(|n| n
        .text()
        .is_some_and(|t| t.contains("position of potentiometer"))));
    // CSV read back with a general-purpose reader: one row per position.
    let csv_out = run_ok(&[
        "plan",
        &demo_path(),
        "--sweep-position",
        "volume",
        "--format",
        "csv",
    ]);
    let mut reader = csv::Reader::from_reader(csv_out.as_slice());
    let headers = reader.headers().unwrap().clone();
    assert_eq!(&headers[0], "position");
    assert!(headers.iter().any(|h| h == "headroom_db:gain"));
    assert_eq!(reader.records().count(), 21);
}

#[test]
fn a_stage_that_is_no_potentiometer_is_refused() {
    let out = run(&["plan", &demo_path(), "--sweep-position", "gain"], None);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("--sweep-position") && err.contains("\"volume\""),
        "{err}"
    );
    let out = run(
        &[
            "plan",
            &demo_path(),
            "--sweep-position",
            "volume",
            "--positions",
            "1",
        ],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
}
