//! Smoke tests of the command-line contract on the demo chains in `chains/`:
//! `ampchain plan FILE [--input LEVEL] [--format table|json]`, `ampchain check FILE`,
//! FILE may be `-` for stdin; exit status 0 on success.

mod common;
use common::run;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Output;

/// Stdout of a run that must succeed; panics with stderr otherwise.
fn succeed(what: &str, out: &Output) -> String {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{what}: stderr: {stderr}");
    assert!(!stderr.contains("panicked"), "{what}: {stderr}");
    String::from_utf8(out.stdout.clone()).expect("stdout is UTF-8")
}

/// Every demo chain file; fails when there are none, so the other tests cannot pass empty.
fn demo_chains() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains");
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|e| e.expect("readable entry").path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    files.sort();
    assert!(!files.is_empty(), "no *.json in {}", dir.display());
    files
}

/// The ids under `key` ("stages" or "loads") of a chain file, in file order.
fn ids(chain: &Value, key: &str) -> Vec<String> {
    chain[key]
        .as_array()
        .unwrap_or_else(|| panic!("{key} is a list"))
        .iter()
        .map(|s| s["id"].as_str().expect("id is a string").to_owned())
        .collect()
}

fn read_chain(path: &Path) -> Value {
    let text = std::fs::read_to_string(path).expect("readable chain file");
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

fn path_str(path: &Path) -> &str {
    path.to_str().expect("UTF-8 path")
}

fn plan_json(path: &Path, extra: &[&str]) -> Value {
    let mut args = vec!["plan", path_str(path)];
    args.extend_from_slice(extra);
    args.extend_from_slice(&["--format", "json"]);
    let stdout = succeed(&args.join(" "), &run(&args, None));
    serde_json::from_str(&stdout)
        .unwrap_or_else(|e| panic!("{}: output is not JSON: {e}\n{stdout}", path.display()))
}

#[test]
fn plan_prints_a_table_naming_every_stage() {
    for path in demo_chains() {
        let stdout = succeed(
            &format!("plan {}", path.display()),
            &run(&["plan", path_str(&path)], None),
        );
        for id in ids(&read_chain(&path), "stages") {
            assert!(
                stdout.contains(&id),
                "{}: table does not mention stage {id:?}:\n{stdout}",
                path.display()
            );
        }
    }
}

#[test]
fn plan_json_has_the_contract_keys() {
    for path in demo_chains() {
        let chain = read_chain(&path);
        let plan = plan_json(&path, &[]);
        let name = path.display();
        assert!(plan.is_object(), "{name}: not a JSON object");
        for key in ["stages", "loads", "first_clip"] {
            assert!(plan.get(key).is_some(), "{name}: no key {key:?}");
        }
        // Stages and loads are reported in file order.
        assert_eq!(ids(&plan, "stages"), ids(&chain, "stages"), "{name}");
        assert_eq!(ids(&plan, "loads"), ids(&chain, "loads"), "{name}");
        let first = plan["first_clip"]["stage"]
            .as_str()
            .expect("first_clip.stage");
        assert!(
            ids(&chain, "stages").iter().any(|id| id == first),
            "{name}: first_clip.stage {first:?} is not a stage"
        );
    }
}

#[test]
fn input_level_overrides_the_file() {
    // 0 dBu = √0.6 V rms (1 mW into 600 Ω; definition, from memory), so -20 dBu = √0.6/10.
    let dbu_minus_20_vrms = 0.6f64.sqrt() / 10.0;
    for path in demo_chains() {
        let name = path.display();
        let plan = plan_json(&path, &["--input", "-20 dBu"]);
        let dbu = plan["input"]["dbu"].as_f64().expect("input.dbu");
        assert!((dbu + 20.0).abs() <= 1e-9, "{name}: input.dbu = {dbu}");
        let vrms = plan["input"]["vrms"].as_f64().expect("input.vrms");
        assert!(
            (vrms - dbu_minus_20_vrms).abs() <= 1e-12,
            "{name}: input.vrms = {vrms}"
        );
        // Sine: peak = √2·rms (definition of rms).
        let plan = plan_json(&path, &["--input", "0.2 Vpk"]);
        let vpeak = plan["input"]["vpeak"].as_f64().expect("input.vpeak");
        let vrms = plan["input"]["vrms"].as_f64().expect("input.vrms");
        assert!(
            (vpeak - 0.2).abs() <= 1e-12,
            "{name}: input.vpeak = {vpeak}"
        );
        assert!(
            (vrms - 0.2 / 2f64.sqrt()).abs() <= 1e-12,
            "{name}: input.vrms = {vrms}"
        );
    }
}

#[test]
fn check_accepts_every_demo_chain() {
    for path in demo_chains() {
        succeed(
            &format!("check {}", path.display()),
            &run(&["check", path_str(&path)], None),
        );
    }
}

#[test]
fn a_chain_can_come_from_stdin() {
    for path in demo_chains() {
        let name = path.display();
        let text = std::fs::read(&path).expect("readable chain file");
        let from_file = plan_json(&path, &[]);
        let stdout = succeed(
            &format!("plan - --format json < {name}"),
            &run(&["plan", "-", "--format", "json"], Some(&text)),
        );
        let from_stdin: Value = serde_json::from_str(&stdout).expect("stdin plan is JSON");
        assert_eq!(from_stdin, from_file, "{name}: stdin and file plans differ");
        let table = succeed(
            &format!("plan - < {name}"),
            &run(&["plan", "-"], Some(&text)),
        );
        for id in ids(&read_chain(&path), "stages") {
            assert!(table.contains(&id), "{name}: stdin table lacks {id:?}");
        }
        succeed(
            &format!("check - < {name}"),
            &run(&["check", "-"], Some(&text)),
        );
    }
}

/// `plan --fail-on-clip`: the report still comes out, and the exit status is 1 exactly
/// when the planned input peak exceeds the first stage's clip level the report names
/// (the exit-status contract of docs/errors.md).
#[test]
fn fail_on_clip_follows_the_reported_clip_level() {
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let chain = chain.to_str().expect("UTF-8 path");
    for (input, clips) in [("-20 dBu", false), ("0 dBu", true)] {
        let out = run(
            &[
                "plan",
                chain,
                "--format",
                "json",
                "--input",
                input,
                "--fail-on-clip",
            ],
            None,
        );
        let report: Value = serde_json::from_slice(&out.stdout).expect("the report is printed");
        let planned = report["input"]["vpeak"].as_f64().expect("input.vpeak");
        let clip = report["first_clip"]["input_vpeak"]
            .as_f64()
            .expect("first_clip.input_vpeak");
        assert_eq!(planned > clip, clips, "{input}: {planned} V vs {clip} V");
        assert_eq!(
            out.status.code(),
            Some(if clips { 1 } else { 0 }),
            "{input}"
        );
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(stderr.contains("--fail-on-clip"), clips, "{stderr}");
    }
}

#[test]
fn the_first_to_clip_carries_its_stage_row_figures_exactly() {
    // docs/definitions.md: the chain clips first at the stage with the lowest clip input level;
    // the summary repeats that stage's figures, so they must be the same numbers, to
    // the last bit (no round trip through V rms).
    for path in demo_chains() {
        let r = plan_json(&path, &[]);
        let first = &r["first_clip"];
        let id = first["stage"].as_str().expect("first_clip.stage");
        let stages = r["stages"].as_array().expect("stages");
        let row = stages
            .iter()
            .find(|s| s["id"] == id)
            .expect("first_clip names a stage");
        assert_eq!(
            first["input_vpeak"],
            row["clip_input_vpeak"],
            "{}",
            path.display()
        );
        let lowest = stages
            .iter()
            // A stage that never clips (passive) has null.
            .filter_map(|s| s["clip_input_vpeak"].as_f64())
            .fold(f64::INFINITY, f64::min);
        assert_eq!(
            first["input_vpeak"].as_f64(),
            Some(lowest),
            "{}",
            path.display()
        );
    }
}

#[test]
fn a_reader_that_goes_away_is_no_error() {
    // `ampchain … | head -1`: when the reader closes the pipe, the tool stops quietly
    // rather than reporting a write error (common practice for command-line tools, no
    // source). The read end is closed before the program writes, so its write fails
    // with a broken pipe; `response` prints some 20 kB, beyond any partial write.
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    for args in [
        vec!["response", path_str(&chain)],
        vec!["plan", path_str(&chain), "--format", "json"],
    ] {
        let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_ampchain"))
            .args(&args)
            .stdin(std::process::Stdio::null())
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .expect("the ampchain binary starts");
        drop(child.stdout.take());
        let out = child.wait_with_output().expect("the ampchain binary runs");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(0), "{args:?}: stderr: {stderr}");
        assert!(stderr.is_empty(), "{args:?}: stderr: {stderr}");
    }
}

#[test]
fn every_report_can_go_to_a_file_with_the_same_bytes() {
    // `-o FILE` writes exactly what standard output would carry, and never over the
    // chain file (the report-writing contract of the README).
    let tmp = common::scratch("cli-output");
    let dir = tmp.path();
    let chain = dir.join("chain.json");
    std::fs::copy(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json"),
        &chain,
    )
    .unwrap();
    let chain = chain.to_str().unwrap();
    let out = dir.join("report.txt");
    let runs: [&[&str]; 7] = [
        &["plan", chain],
        &["check", chain],
        &["response", chain, "--format", "json"],
        &["sweep", chain, "--steps", "2", "--samples", "64"],
        &[
            "spread",
            chain,
            "--temperature",
            "0..50 C",
            "--runs",
            "200",
            "--format",
            "json",
        ],
        &["bias", chain, "--stage", "gain1"],
        &["schema"],
    ];
    let bin = env!("CARGO_BIN_EXE_ampchain");
    for args in runs {
        let to_stdout = std::process::Command::new(bin).args(args).output().unwrap();
        assert!(to_stdout.status.success(), "{args:?}");
        let to_file = std::process::Command::new(bin)
            .args(args)
            .arg("-o")
            .arg(&out)
            .output()
            .unwrap();
        assert!(
            to_file.status.success(),
            "{args:?}: {}",
            String::from_utf8_lossy(&to_file.stderr)
        );
        assert!(to_file.stdout.is_empty(), "{args:?}");
        let written = std::fs::read(&out).unwrap();
        if args[0] == "spread" {
            // Its timing line differs from run to run; the statistics do not.
            let strip = |b: &[u8]| {
                let v: serde_json::Value = serde_json::from_slice(b).unwrap();
                v["stages"].clone()
            };
            assert_eq!(strip(&written), strip(&to_stdout.stdout), "{args:?}");
        } else {
            assert_eq!(written, to_stdout.stdout, "{args:?}");
        }
    }
    let refused = std::process::Command::new(bin)
        .args(["plan", chain, "-o", chain])
        .output()
        .unwrap();
    assert_eq!(refused.status.code(), Some(2));
}

/// `(command, option, value name)` for every option of every command, from `--help`.
fn option_value_names() -> Vec<(String, String, String)> {
    let commands: &[&[&str]] = &[
        &["plan"],
        &["check"],
        &["response"],
        &["plot", "loadlines"],
        &["plot", "levels"],
        &["plot", "waveform"],
        &["plot", "distortion"],
        &["bias"],
        &["sweep"],
        &["spread"],
        &["schema"],
        &["report"],
        &["new"],
    ];
    let mut found = Vec::new();
    for command in commands {
        let mut args = command.to_vec();
        args.push("--help");
        let help = succeed(&args.join(" "), &run(&args, None));
        for line in help.lines() {
            let words: Vec<&str> = line.split_whitespace().collect();
            // "-o, --output <FILE>  …" or "--input <LEVEL>  …".
            let k = words.iter().position(|w| w.starts_with("--"));
            if let Some(k) = k {
                if let Some(value) = words.get(k + 1).filter(|v| v.starts_with('<')) {
                    found.push((
                        command.join(" "),
                        words[k].trim_end_matches(',').to_string(),
                        value.to_string(),
                    ));
                }
            }
        }
    }
    found
}

#[test]
fn option_value_names_agree_between_commands() {
    let found = option_value_names();
    assert!(found.len() > 30, "{found:?}");
    let mut by_option: std::collections::BTreeMap<&str, std::collections::BTreeSet<&str>> =
        Default::default();
    for (_, option, value) in &found {
        by_option.entry(option).or_default().insert(value);
    }
    for (option, values) in &by_option {
        match *option {
            // A frequency for `response`, a level for `sweep` and `plot distortion`.
            "--from" | "--to" => assert!(
                values.iter().all(|v| ["<FREQ>", "<LEVEL>"].contains(v)),
                "{option}: {values:?}"
            ),
            // What the output is: a report, an SVG, a page, a folder of SVGs.
            "--output" => assert!(
                values
                    .iter()
                    .all(|v| ["<FILE>", "<FILE.svg>", "<FILE.html>", "<DIR|FILE.svg>"].contains(v)),
                "{option}: {values:?}"
            ),
            _ => assert_eq!(values.len(), 1, "{option}: {values:?}"),
        }
    }
    // Every SVG written says so, whichever option names it.
    for (command, option, value) in &found {
        let svg = option == "--plot" || (command.starts_with("plot") && option == "--output");
        if svg {
            assert!(value.ends_with(".svg>"), "{command} {option} {value}");
        }
    }
}

#[test]
fn plot_waveform_takes_the_files_planned_level() {
    let tmp = common::scratch("cli-wave");
    let dir = tmp.path();
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let level = read_chain(&chain)["source"]["level"]
        .as_str()
        .unwrap()
        .to_string();
    let (plain, given) = (dir.join("plain.svg"), dir.join("given.svg"));
    let c = path_str(&chain);
    let base = ["plot", "waveform", c, "--samples", "64", "-o"];
    let mut args = base.to_vec();
    args.push(path_str(&plain));
    succeed("waveform at the file's level", &run(&args, None));
    let mut args = base.to_vec();
    args.extend([path_str(&given), "--input", &level]);
    succeed("waveform at the same level given", &run(&args, None));
    assert_eq!(
        std::fs::read(&plain).unwrap(),
        std::fs::read(&given).unwrap(),
        "the file's level is the level used"
    );
    // A file without a level and no --input: the usual message.
    let mut v = read_chain(&chain);
    v["source"].as_object_mut().unwrap().remove("level");
    let bare = dir.join("bare.json");
    std::fs::write(&bare, v.to_string()).unwrap();
    let out = run(
        &["plot", "waveform", path_str(&bare), "-o", path_str(&plain)],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("source.level: found nothing"));
}

#[test]
fn every_table_uses_one_minus_sign() {
    // Inside a table (lines between box-drawing borders) a negative number is written
    // with the hyphen-minus only, never U+2212 beside it (one style per table).
    let mut lines = 0;
    for chain in demo_chains() {
        let c = path_str(&chain);
        for args in [
            vec!["plan", c],
            vec!["response", c, "--per-decade", "2"],
            vec!["spread", c, "--runs", "50"],
        ] {
            let out = run(&args, None);
            let text = String::from_utf8_lossy(&out.stdout).to_string();
            for line in text.lines().filter(|l| l.starts_with('│')) {
                lines += 1;
                let chars: Vec<char> = line.chars().collect();
                let u2212_number = chars
                    .windows(2)
                    .any(|w| w[0] == '\u{2212}' && w[1].is_ascii_digit());
                assert!(!u2212_number, "{args:?}: {line}");
            }
        }
    }
    let wide = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let out = run(
        &["sweep", path_str(&wide), "--steps", "2", "--samples", "64"],
        None,
    );
    let text = String::from_utf8_lossy(&out.stdout).to_string();
    for line in text.lines().filter(|l| l.starts_with('│')) {
        lines += 1;
        assert!(!line.contains("/ \u{2212}"), "sweep: {line}");
    }
    assert!(lines > 50, "tables were printed");
}

#[test]
fn tables_fit_a_narrow_terminal_and_stay_whole_in_a_pipe() {
    // A pseudo-terminal of 80 columns from util-linux `script`; skipped without it.
    let has_script = std::process::Command::new("script")
        .arg("--version")
        .output()
        .is_ok_and(|o| o.status.success());
    if !has_script {
        eprintln!("skipped: no `script` (util-linux) to run ampchain on a terminal");
        return;
    }
    let bin = env!("CARGO_BIN_EXE_ampchain");
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let c = path_str(&chain);
    for args in [
        format!("plan {c}"),
        format!("sweep {c} --steps 2 --samples 64"),
        format!("spread {c} --runs 50 --temperature 0..50C"),
        format!("response {c} --per-decade 2"),
    ] {
        let out = std::process::Command::new("script")
            .args([
                "-qec",
                &format!("stty rows 40 cols 80; {bin} {args}"),
                "/dev/null",
            ])
            .output()
            .unwrap();
        let text = String::from_utf8_lossy(&out.stdout).replace('\r', "");
        assert!(out.status.success(), "{args}: {text}");
        for line in text.lines().filter(|l| l.contains('│')) {
            assert!(line.chars().count() <= 80, "{args}: {line}");
        }
        for id in ["buffer", "gain1", "gain2", "output"] {
            assert!(text.contains(id), "{args}: stage {id} lost");
        }
        // Into a pipe the same command prints the full table.
        let argv: Vec<&str> = args.split(' ').collect();
        let piped = succeed(&args, &run(&argv, None));
        assert!(
            piped.lines().any(|l| l.chars().count() > 80),
            "{args}: a wide table"
        );
    }
}

#[test]
fn every_level_option_takes_a_leading_minus() {
    // A level, temperature, frequency or constraint may start with a minus sign; the
    // option must take it as its value, not as an unknown option (clap's "unexpected
    // argument '-4' found").
    let mic = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let mic = path_str(&mic);
    // tune reports the level it planned at: 0 dBu = √0.6 V rms (definition, from memory).
    let out = run(
        &[
            "tune",
            mic,
            "--vary",
            "input.r_top",
            "--input",
            "-45 dBu",
            "--format",
            "json",
        ],
        None,
    );
    let tuned: Value = serde_json::from_str(&succeed("tune --input -45 dBu", &out)).unwrap();
    let dbu = tuned["input"]["dbu"].as_f64().expect("input.dbu");
    assert!((dbu + 45.0).abs() <= 1e-9, "tune input.dbu = {dbu}");
    let vrms = tuned["input"]["vrms"].as_f64().expect("input.vrms");
    assert!((vrms - 0.6f64.sqrt() * 10f64.powf(-45.0 / 20.0)).abs() <= 1e-15);
    // A constraint without its quantity: ampchain's own refusal, not clap's.
    let out = run(
        &["tune", mic, "--vary", "input.r_top", "--keep", "-45dBu.."],
        None,
    );
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("--keep \"-45dBu..\""), "tune --keep: {err}");
    // Values that are wrong only for their sign reach ampchain's own message.
    for (args, expected) in [
        (
            &["spread", mic, "--at", "-20"][..],
            "--at: found \"-20\", expected a frequency above zero",
        ),
        (
            &["bias", mic, "--stage", "input", "--keep-gain", "-1dB"][..],
            "--keep-gain: found",
        ),
    ] {
        let out = run(args, None);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains(expected), "{args:?}: {err}");
    }
}
