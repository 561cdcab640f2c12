//! The `response` command and `plan --at` from the outside: formats, the Bode SVG,
//! and bad input (exit status 2, a message naming the option or field, no output
//! file left behind).

mod common;

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn run(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(args)
        .output()
        .expect("the binary runs")
}

fn stdout_of(args: &[&str]) -> String {
    let out = run(args);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{}: {err}", args.join(" "));
    assert!(!err.contains("panicked"), "{err}");
    String::from_utf8(out.stdout).expect("UTF-8")
}

fn demo_chains() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains");
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .expect("chains/")
        .map(|e| e.expect("entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    files.sort();
    assert!(!files.is_empty());
    files
}

fn p(path: &Path) -> &str {
    path.to_str().expect("UTF-8 path")
}

/// A fresh scratch folder for one test.
fn scratch(name: &str) -> tempfile::TempDir {
    common::scratch(name)
}

#[test]
fn response_reports_every_load_and_stage_in_three_formats() {
    for path in demo_chains() {
        let chain: Value = serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        let table = stdout_of(&["response", p(&path), "--per-decade", "2"]);
        let json: Value = serde_json::from_str(&stdout_of(&[
            "response",
            p(&path),
            "--format",
            "json",
            "--per-decade",
            "2",
        ]))
        .expect("JSON");
        let csv = stdout_of(&[
            "response",
            p(&path),
            "--format",
            "csv",
            "--from",
            "10",
            "--to",
            "100k",
            "--per-decade",
            "3",
        ]);
        // 10 Hz … 100 kHz at 3 per decade: 4·3 + 1 = 13 rows under the header.
        let lines: Vec<&str> = csv.lines().collect();
        assert_eq!(lines.len(), 14, "{}: {csv}", path.display());
        let columns = lines[0].split(',').count();
        let n_loads = chain["loads"].as_array().unwrap().len();
        let n_stages = chain["stages"].as_array().unwrap().len();
        assert_eq!(columns, 1 + 2 * (n_loads + n_stages));
        assert!(lines.iter().all(|l| l.split(',').count() == columns));
        assert_eq!(lines[1].split(',').next(), Some("10"));
        for key in ["loads", "stages"] {
            for item in chain[key].as_array().unwrap() {
                let id = item["id"].as_str().unwrap();
                assert!(table.contains(id), "{}: table lacks {id}", path.display());
                assert!(
                    lines[0].contains(id),
                    "{}: CSV header lacks {id}",
                    path.display()
                );
            }
        }
        for load in json["loads"].as_array().unwrap() {
            for band in ["low_corner", "high_corner"] {
                let c = &load[band];
                assert!(c["summary"].as_str().is_some_and(|s| !s.is_empty()));
                assert!(c["frequency"].is_number() || c["frequency"].is_null());
            }
            assert_eq!(
                load["magnitude_db"].as_array().unwrap().len(),
                json["frequencies"].as_array().unwrap().len()
            );
        }
        assert!(table.contains("corner"), "{}", path.display());
    }
}

#[test]
fn bode_svg_is_written_with_title_axes_and_corners() {
    let tmp = scratch("bode");
    let dir = tmp.path();
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let svg_path = dir.join("sub/bode.svg");
    stdout_of(&["response", p(&path), "--plot", p(&svg_path)]);
    let svg = std::fs::read_to_string(&svg_path).expect("SVG written");
    assert!(svg.starts_with("<svg"), "not an SVG");
    for text in [
        "Demo: two-stage dynamic-microphone preamp",
        "frequency (Hz)",
        "gain (dB)",
        "phase (°)",
        "10 Hz",
        "1 kHz",
        "1 MHz",
        "f_L = ",
        "f_H = ",
        "to load &quot;mixer&quot;",
    ] {
        assert!(
            svg.contains(text) || svg.contains(&text.replace('"', "&quot;")),
            "SVG lacks {text:?}"
        );
    }
    let leftovers: Vec<_> = std::fs::read_dir(dir.join("sub")).unwrap().collect();
    assert_eq!(leftovers.len(), 1, "temporary file left behind");
}

#[test]
fn plan_at_a_frequency_reports_that_frequency() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let table = stdout_of(&["plan", p(&path), "--at", "20 Hz"]);
    assert!(table.contains("at 20.0 Hz"), "{table}");
    let mid: Value =
        serde_json::from_str(&stdout_of(&["plan", p(&path), "--format", "json"])).unwrap();
    let at: Value = serde_json::from_str(&stdout_of(&[
        "plan",
        p(&path),
        "--format",
        "json",
        "--at",
        "20",
    ]))
    .unwrap();
    assert!(mid["frequency"].is_null());
    assert_eq!(at["frequency"].as_f64(), Some(20.0));
    // 20 Hz is close to the low corner (13.7 Hz): the gain is lower, so the first
    // stage to clip needs more input than at midband.
    let g_mid = mid["loads"][0]["gain_db"].as_f64().unwrap();
    let g_at = at["loads"][0]["gain_db"].as_f64().unwrap();
    assert!(
        g_at < g_mid - 1.0,
        "{g_at} dB at 20 Hz vs {g_mid} dB midband"
    );
    assert!(
        at["first_clip"]["input_vpeak"].as_f64().unwrap()
            > mid["first_clip"]["input_vpeak"].as_f64().unwrap()
    );
}

/// A run that must fail with exit 2, name `needle` in its message and leave no file
/// at `svg` (nor a temporary file beside it).
fn refused(args: &[&str], needle: &str, svg: Option<&Path>) {
    let out = run(args);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{}: {err}", args.join(" "));
    assert!(
        err.contains(needle),
        "{}: message {err:?} lacks {needle:?}",
        args.join(" ")
    );
    assert!(!err.contains("panicked"), "{err}");
    assert!(out.stdout.is_empty(), "{}: printed output", args.join(" "));
    if let Some(svg) = svg {
        assert!(
            !svg.exists(),
            "{}: {} was written",
            args.join(" "),
            svg.display()
        );
        let dir = svg.parent().unwrap();
        if dir.exists() {
            let tmp: Vec<_> = std::fs::read_dir(dir)
                .unwrap()
                .filter_map(|e| e.ok())
                .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
                .collect();
            assert!(tmp.is_empty(), "temporary file left in {}", dir.display());
        }
    }
}

#[test]
fn bad_sweeps_are_refused_without_output() {
    let tmp = scratch("bad-sweep");
    let dir = tmp.path();
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let c = p(&chain);
    let svg = dir.join("out.svg");
    let s = p(&svg);
    refused(
        &["response", c, "--from", "0", "--plot", s],
        "--from",
        Some(&svg),
    );
    refused(
        &["response", c, "--from", "-10", "--plot", s],
        "--from",
        Some(&svg),
    );
    refused(
        &["response", c, "--to", "0 Hz", "--plot", s],
        "--to",
        Some(&svg),
    );
    refused(
        &["response", c, "--from", "1k", "--to", "100", "--plot", s],
        "--from",
        Some(&svg),
    );
    refused(
        &["response", c, "--from", "1k", "--to", "1k", "--plot", s],
        "--from",
        Some(&svg),
    );
    refused(
        &["response", c, "--per-decade", "0", "--plot", s],
        "--per-decade",
        Some(&svg),
    );
    refused(
        &["response", c, "--to", "10 kΩ", "--plot", s],
        "--to",
        Some(&svg),
    );
    refused(
        &["response", c, "--from", "abc", "--plot", s],
        "--from",
        Some(&svg),
    );
    refused(&["plan", c, "--at", "0"], "--at", None);
    refused(&["plan", c, "--at", "-1k"], "--at", None);
    refused(&["plan", c, "--at", "1 µF"], "--at", None);
}

#[test]
fn capacitances_in_the_wrong_unit_are_refused_by_name() {
    let tmp = scratch("bad-caps");
    let dir = tmp.path();
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/piezo-frontend.json"),
    )
    .unwrap();
    let svg = dir.join("out.svg");
    for (from, to, field) in [
        (r#""c_bc": "3p""#, r#""c_bc": "3 kΩ""#, "devices.small.c_bc"),
        (
            r#""capacitance": "100p""#,
            r#""capacitance": "100 Ω""#,
            "source.capacitance",
        ),
        (
            r#""transition_frequency": "250 MHz""#,
            r#""transition_frequency": "250 MV""#,
            "devices.small.transition_frequency",
        ),
        (
            r#""transition_frequency": "250 MHz""#,
            r#""transition_frequency": "0 Hz""#,
            "devices.small.transition_frequency",
        ),
        (
            r#""coupling": "2u2""#,
            r#""coupling": "2k2 ohm""#,
            "links[1].coupling",
        ),
        (
            r#""resistance": "47k" }"#,
            r#""resistance": "47k", "capacitance": "-1n" }"#,
            "loads[0].capacitance",
        ),
    ] {
        assert!(text.contains(from), "demo chain changed: {from}");
        let bad = dir.join("bad.json");
        std::fs::write(&bad, text.replace(from, to)).unwrap();
        refused(&["response", p(&bad), "--plot", p(&svg)], field, Some(&svg));
    }
}

#[test]
fn the_plot_never_overwrites_the_chain_file() {
    let tmp = scratch("overwrite");
    let dir = tmp.path();
    let chain = dir.join("chain.json");
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/line-driver.json"),
    )
    .unwrap();
    std::fs::write(&chain, &text).unwrap();
    refused(
        &["response", p(&chain), "--plot", p(&chain)],
        "input file",
        None,
    );
    assert_eq!(
        std::fs::read_to_string(&chain).unwrap(),
        text,
        "chain file changed"
    );
}
