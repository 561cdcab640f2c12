//! Every CSV output read back with the `csv` crate (RFC 4180): each row has the
//! header's fields, and a stage id holding a comma and quotes comes back intact.

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
    let dir = std::env::temp_dir().join(format!("ampchain-csv-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let (chain, odd) = odd_chain(&dir);
    let chain = chain.to_str().unwrap();
    let runs: [(&[&str], Option<&str>); 3] = [
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
    std::fs::remove_dir_all(&dir).ok();
}
