//! Every CSV output read back with the `csv` crate (RFC 4180): each row has the
//! header's fields, and a stage id holding a comma and quotes comes back intact;
//! `plan` and `check` CSV hold the same numbers as their JSON (serde_json).

mod common;

use serde_json::Value;

/// A demo chain with its first stage renamed to an id that needs quoting in CSV.
fn odd_chain(dir: &std::path::Path) -> (std::path::PathBuf, String) {
    let path =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let mut chain: Value = serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let old = chain["stages"][0]["id"].as_str().unwrap().to_string();
    let odd = format!("{old}, \"first\"");
    chain["stages"][0]["id"] = Value::from(odd.clone());
    for link in chain["links"].as_array_mut().unwrap() {
        for end in ["from", "to"] {
            if link[end] == old.as_str() {
                link[end] = Value::from(odd.clone());
            }
        }
    }
    let out = dir.join("chain.json");
    std::fs::write(&out, chain.to_string()).unwrap();
    (out, odd)
}

#[test]
fn csv_outputs_read_back_with_ids_intact() {
    let tmp = common::scratch("csv");
    let dir = tmp.path();
    let (chain, odd) = odd_chain(dir);
    let chain = chain.to_str().unwrap();
    let runs: [(&[&str], Option<&str>); 6] = [
        (&["plan", chain, "--format", "csv"], Some("id")),
        (&["check", chain, "--format", "csv"], Some("id")),
        (&["response", chain, "--format", "csv"], None),
        (
            &[
                "sweep",
                chain,
                "--format",
                "csv",
                "--steps",
                "2",
                "--samples",
                "64",
            ],
            Some("node"),
        ),
        (
            &["spread", chain, "--format", "csv", "--runs", "200"],
            Some("subject"),
        ),
        (&["noise", chain, "--format", "csv"], Some("stage")),
    ];
    for (args, id_column) in runs {
        let stdout = common::run_ok(args);
        let mut reader = csv::Reader::from_reader(stdout.as_slice());
        let headers = reader.headers().unwrap().clone();
        let records: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
        assert!(!records.is_empty(), "{args:?}");
        for r in &records {
            assert_eq!(r.len(), headers.len(), "{args:?}: {r:?}");
        }
        match id_column {
            // The id is a column's value in some rows.
            Some(name) => {
                let k = headers.iter().position(|h| h == name).unwrap();
                assert!(
                    records.iter().any(|r| &r[k] == odd.as_str()),
                    "{args:?}: {odd} lost"
                );
            }
            // The id is part of the column names.
            None => assert!(
                headers.iter().any(|h| h == format!("stage_{odd}_db")),
                "{args:?}: {headers:?}"
            ),
        }
    }
}

/// The CSV of `args` as records keyed by header name.
fn csv_records(args: &[&str]) -> Vec<std::collections::HashMap<String, String>> {
    let stdout = common::run_ok(args);
    let mut reader = csv::Reader::from_reader(stdout.as_slice());
    let headers = reader.headers().unwrap().clone();
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            headers
                .iter()
                .zip(r.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

/// `field` of a CSV record as a number (empty: absent). Every number is finite: a
/// missing or infinite value is an empty field, never `inf` or `NaN`.
fn num(r: &std::collections::HashMap<String, String>, field: &str) -> Option<f64> {
    let v = &r[field];
    (!v.is_empty()).then(|| {
        let x: f64 = v.parse().unwrap_or_else(|e| panic!("{field} {v}: {e}"));
        assert!(x.is_finite(), "{field}: {v}");
        x
    })
}

/// Equal to rounding: serde_json's default float parsing may miss the last bit that
/// Rust's own parsing (of the CSV text) gets right.
fn same(csv: Option<f64>, json: Option<f64>, what: &str) {
    match (csv, json) {
        (Some(a), Some(b)) => assert!(
            a == b || (a - b).abs() <= 1e-15 * b.abs(),
            "{what}: CSV {a}, JSON {b}"
        ),
        // An infinite value (an open port, a stage that never clips) is an empty field
        // in the CSV and null in the JSON (README "What `plan` prints").
        (a, b) => assert_eq!(a, b, "{what}"),
    }
}

#[test]
fn plan_and_check_csv_hold_the_json_numbers() {
    for chain in common::demo_chains() {
        let c = chain.to_str().unwrap();
        let json: Value =
            serde_json::from_slice(&common::run_ok(&["plan", c, "--format", "json"])).unwrap();
        let rows = csv_records(&["plan", c, "--format", "csv"]);
        let stages = json["stages"].as_array().unwrap();
        let loads = json["loads"].as_array().unwrap();
        assert_eq!(rows.len(), stages.len() + loads.len(), "{c}");
        for (r, s) in rows.iter().zip(stages) {
            assert_eq!(r["kind"], "stage");
            assert_eq!(r["id"], s["id"].as_str().unwrap());
            assert_eq!(r["type"], s["type"].as_str().unwrap());
            // Null (a passive stage) is an empty cell.
            assert_eq!(r["clip_toward"], s["clip_toward"].as_str().unwrap_or(""));
            for key in ["i_c", "v_ce", "v_b", "v_c", "v_e"] {
                same(
                    num(r, key),
                    s["operating_point"][key].as_f64(),
                    &format!("{c} {key}"),
                );
            }
            for key in [
                "r_in",
                "r_out",
                "load",
                "gain",
                "cumulative_gain",
                "output_vrms",
                "limit_up",
                "limit_down",
                "clip_input_vpeak",
                "clip_input_vrms",
                "headroom_db",
            ] {
                same(num(r, key), s[key].as_f64(), &format!("{c} {key}"));
            }
            assert_eq!(r["resistance"], "", "{c}: a stage has no resistance column");
        }
        for (r, l) in rows[stages.len()..].iter().zip(loads) {
            assert_eq!(r["kind"], "load");
            assert_eq!(r["id"], l["id"].as_str().unwrap());
            assert_eq!(r["input_from"], l["from"].as_str().unwrap());
            for key in ["resistance", "gain", "gain_db", "output_vrms"] {
                same(num(r, key), l[key].as_f64(), &format!("{c} load {key}"));
            }
            assert_eq!(r["i_c"], "", "{c}: a load has no operating point");
        }

        let json: Value =
            serde_json::from_slice(&common::run_ok(&["check", c, "--format", "json"])).unwrap();
        assert_eq!(json["valid"], true);
        let rows = csv_records(&["check", c, "--format", "csv"]);
        let stages = json["stages"].as_array().unwrap();
        let warnings = json["warnings"].as_array().unwrap();
        let chain_wide = warnings.iter().any(|w| w["stage"].is_null());
        assert_eq!(rows.len(), stages.len() + usize::from(chain_wide), "{c}");
        for (r, s) in rows.iter().zip(stages) {
            assert_eq!(r["id"], s["id"].as_str().unwrap());
            for key in ["i_c", "i_b", "v_be", "v_ce", "v_b", "v_c", "v_e"] {
                same(
                    num(r, key),
                    s["operating_point"][key].as_f64(),
                    &format!("{c} {key}"),
                );
            }
            // Every warning of the stage is in its row.
            for w in warnings.iter().filter(|w| w["stage"] == s["id"]) {
                assert!(
                    r["warnings"].contains(w["message"].as_str().unwrap()),
                    "{c}"
                );
            }
        }
        // The same operating points as `plan`.
        let plan: Value =
            serde_json::from_slice(&common::run_ok(&["plan", c, "--format", "json"])).unwrap();
        for (s, p) in stages.iter().zip(plan["stages"].as_array().unwrap()) {
            assert_eq!(s["operating_point"], p["operating_point"], "{c}");
        }
    }
}

#[test]
fn bias_csv_holds_the_json_proposals() {
    // One row for the present values, the ideal ones, then each proposal by rank,
    // with the resistor values and operating points of the JSON.
    let chain =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let c = chain.to_str().unwrap();
    let args = ["bias", c, "--stage", "gain1"];
    let json: Value = serde_json::from_slice(&common::run_ok(
        &[&args[..], &["--format", "json"]].concat(),
    ))
    .unwrap();
    let rows = csv_records(&[&args[..], &["--format", "csv"]].concat());
    let proposals = json["proposals"].as_array().unwrap();
    assert_eq!(rows.len(), 2 + proposals.len());
    assert_eq!(rows[0]["row"], "now");
    assert_eq!(rows[1]["row"], "ideal");
    same(
        num(&rows[0], "i_c"),
        json["present"]["operating_point"]["i_c"].as_f64(),
        "now i_c",
    );
    same(
        num(&rows[1], "v_ce"),
        json["ideal"]["operating_point"]["v_ce"].as_f64(),
        "ideal v_ce",
    );
    for (r, p) in rows[2..].iter().zip(proposals) {
        assert_eq!(r["row"], p["rank"].to_string());
        for v in p["values"].as_array().unwrap() {
            let name = v["resistor"].as_str().unwrap();
            same(
                num(r, name),
                v["to"].as_f64(),
                &format!("proposal {} {name}", r["row"]),
            );
        }
        same(num(r, "gain"), p["gain"].as_f64(), "gain");
        same(
            num(r, "chain_clip_dbu"),
            p["chain_clip"]["input_dbu"].as_f64(),
            "chain clip",
        );
    }
}

#[test]
fn no_csv_writes_inf_or_nan() {
    // Passive stages (no limits, no clip level) and a chain of them: every missing or
    // infinite value is an empty field, as README's CSV sentence says.
    let chain =
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/passive-controls.json");
    let c = chain.to_str().unwrap();
    let runs: [&[&str]; 7] = [
        &["plan", c, "--format", "csv"],
        &["check", c, "--format", "csv"],
        &["response", c, "--format", "csv", "--per-decade", "2"],
        &["noise", c, "--format", "csv"],
        &[
            "sweep",
            c,
            "--format",
            "csv",
            "--steps",
            "2",
            "--samples",
            "64",
        ],
        &[
            "plan",
            c,
            "--sweep-position",
            "volume",
            "--positions",
            "3",
            "--format",
            "csv",
        ],
        &[
            "spread",
            c,
            "--format",
            "csv",
            "--runs",
            "20",
            "--temperature",
            "0..50 C",
        ],
    ];
    for args in runs {
        for r in csv_records(args) {
            for (k, v) in &r {
                let lower = v.to_ascii_lowercase();
                assert!(
                    !["inf", "-inf", "+inf", "nan"].contains(&lower.as_str()),
                    "{args:?}: {k} = {v}"
                );
            }
        }
    }
    // The passive stages of the plan: limits, clip level and headroom empty where the
    // JSON has null.
    let json: Value =
        serde_json::from_slice(&common::run_ok(&["plan", c, "--format", "json"])).unwrap();
    let rows = csv_records(&["plan", c, "--format", "csv"]);
    let mut passive = 0;
    for (r, s) in rows.iter().zip(json["stages"].as_array().unwrap()) {
        if s["limit_up"].is_null() {
            passive += 1;
            for key in ["limit_up", "limit_down", "clip_input_vpeak", "headroom_db"] {
                assert_eq!(r[key], "", "{}: {key}", r["id"]);
                assert!(s[key].is_null(), "{}: {key}", r["id"]);
            }
        }
    }
    assert!(passive > 0, "the demo has passive stages");
}

#[test]
fn bias_lists_the_present_values_without_a_proposal() {
    // --min-input 1G leaves no proposal; the `now` row still lists the values the
    // chain file gives (chains/mic-preamp.json: r_top 220k, r_bottom 27k).
    let chain = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let c = chain.to_str().unwrap();
    let args = ["bias", c, "--stage", "input", "--min-input", "1G"];
    let table = String::from_utf8(common::run_ok(&args)).unwrap();
    assert!(table.contains("No proposal:"), "{table}");
    let now = table
        .lines()
        .find(|l| l.contains(" now "))
        .unwrap_or_else(|| panic!("no now row: {table}"));
    assert!(now.contains("r_top 220k, r_bottom 27k"), "{now}");
    let json: Value = serde_json::from_slice(&common::run_ok(
        &[&args[..], &["--format", "json"]].concat(),
    ))
    .unwrap();
    assert!(json["proposals"].as_array().unwrap().is_empty());
    let present: Vec<(String, f64)> = json["present_values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| {
            (
                v["resistor"].as_str().unwrap().to_string(),
                v["value"].as_f64().unwrap(),
            )
        })
        .collect();
    assert_eq!(
        present,
        [("r_top".to_string(), 220e3), ("r_bottom".to_string(), 27e3)]
    );
    let rows = csv_records(&[&args[..], &["--format", "csv"]].concat());
    assert_eq!(rows[0]["row"], "now");
    assert_eq!(num(&rows[0], "r_top"), Some(220e3));
    assert_eq!(num(&rows[0], "r_bottom"), Some(27e3));
}
