//! Helpers shared by the integration tests that run the `ampchain` binary.

use std::io::Write;
use std::process::{Command, Output, Stdio};

/// Run the binary with the given arguments, feeding `stdin` if given.
#[allow(dead_code)]
pub fn run(args: &[&str], stdin: Option<&[u8]>) -> Output {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_ampchain"));
    cmd.args(args)
        .stdin(if stdin.is_some() {
            Stdio::piped()
        } else {
            Stdio::null()
        })
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    let mut child = cmd.spawn().expect("the ampchain binary starts");
    if let Some(bytes) = stdin {
        let mut pipe = child.stdin.take().expect("stdin is piped");
        // A write error only means the program exited without reading; its status tells.
        let _ = pipe.write_all(bytes);
    }
    child.wait_with_output().expect("the ampchain binary runs")
}

/// Run the binary, require success, and return its standard output.
#[allow(dead_code)]
pub fn run_ok(args: &[&str]) -> Vec<u8> {
    let out = run(args, None);
    assert!(
        out.status.success(),
        "{args:?}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out.stdout
}

/// The shipped demo chains (`chains/*.json`), sorted by name.
#[allow(dead_code)]
pub fn demo_chains() -> Vec<std::path::PathBuf> {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("chains");
    let mut files: Vec<std::path::PathBuf> = std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    files.sort();
    files
}

/// `n` copies of `tests/fixtures/ce_ef_pair.json`'s common-emitter stage "amp" in a row (about 20 dB
/// each), capacitor-coupled, into the fixture's load.
#[allow(dead_code)]
pub fn cascade(v: &mut serde_json::Value, n: usize) {
    let amp = v["stages"][0].clone();
    let stages: Vec<serde_json::Value> = (0..n)
        .map(|k| {
            let mut s = amp.clone();
            s["id"] = serde_json::json!(format!("amp{k}"));
            s
        })
        .collect();
    let mut links = vec![serde_json::json!({ "from": "source", "to": "amp0", "coupling": "2u2" })];
    for k in 1..n {
        links.push(
            serde_json::json!({ "from": format!("amp{}", k - 1), "to": format!("amp{k}"), "coupling": "2u2" }),
        );
    }
    links.push(
        serde_json::json!({ "from": format!("amp{}", n - 1), "to": "line", "coupling": "10u" }),
    );
    v["stages"] = serde_json::json!(stages);
    v["links"] = serde_json::json!(links);
}

/// The name of a chain file's first device (its `devices` object's first key).
#[allow(dead_code)]
pub fn first_device(chain: &serde_json::Value) -> String {
    chain["devices"]
        .as_object()
        .and_then(|d| d.keys().next())
        .expect("a chain with a device")
        .clone()
}

/// A fresh folder under the system's temporary directory for one test, removed with
/// everything in it when the returned guard drops (also when the test fails).
#[allow(dead_code)]
pub fn scratch(tag: &str) -> tempfile::TempDir {
    tempfile::Builder::new()
        .prefix(&format!("ampchain-{tag}-"))
        .tempdir()
        .expect("a scratch folder under the temporary directory")
}
