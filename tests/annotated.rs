//! Chain files with comments and trailing commas (the JSON-with-comments convention):
//! a commented copy of every demo plans exactly like the plain file, an error inside a
//! commented file names the line and column where it is, `bias --write` keeps the
//! comments, and every starter chain of `ampchain new` plans as written.

mod common;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn ampchain(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(args)
        .output()
        .unwrap()
}

fn demos() -> Vec<PathBuf> {
    common::demo_chains()
}

fn scratch() -> tempfile::TempDir {
    common::scratch("annotated")
}

/// The chain text with a block comment in front, a line comment after every line,
/// and a trailing comma after the top object's last member.
fn commented(text: &str) -> String {
    let mut out =
        String::from("/* A commented copy:\n   µ, \"quotes\", // and commas, inside. */\n");
    for line in text.trim_end().lines() {
        out.push_str(line);
        out.push_str("   // note, with \"quotes\" and a comma\n");
    }
    // The last line is the top object's "}" (with its comment): a comma before it.
    let close = out.rfind('}').unwrap();
    let last_value_end = out[..close]
        .trim_end_matches(|c: char| c.is_whitespace())
        .len();
    let (head, tail) = out.split_at(last_value_end);
    // Any line comment at the end of `head` must stay after the comma: put it first.
    match head.rfind('\n').map(|nl| (nl, &head[nl + 1..])) {
        Some((nl, last)) if last.contains("//") => {
            let cut = nl + 1 + last.find("//").unwrap();
            format!("{}, {}{}", head[..cut].trim_end(), &head[cut..], tail)
        }
        _ => format!("{head},{tail}"),
    }
}

#[test]
fn a_commented_copy_of_every_demo_plans_like_the_plain_file() {
    let tmp = scratch();
    let dir = tmp.path();
    for demo in demos() {
        let text = std::fs::read_to_string(&demo).unwrap();
        let copy = dir.join("commented.json");
        std::fs::write(&copy, commented(&text)).unwrap();
        let plain = ampchain(&["plan", demo.to_str().unwrap(), "--format", "json"]);
        let annotated = ampchain(&["plan", copy.to_str().unwrap(), "--format", "json"]);
        assert!(
            annotated.status.success(),
            "{}: {}",
            demo.display(),
            String::from_utf8_lossy(&annotated.stderr)
        );
        assert_eq!(plain.stdout, annotated.stdout, "{}", demo.display());
    }
}

#[test]
fn an_error_in_a_commented_file_names_its_line_and_column() {
    let tmp = scratch();
    let dir = tmp.path();
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let text = commented(&std::fs::read_to_string(demo).unwrap());
    // A misspelt key; serde_json names the position just after the key's closing quote.
    let bad = text.replacen("\"supply\"", "\"suply\"", 1);
    let at = bad.find("\"suply\"").unwrap() + "\"suply\"".len();
    let line = bad[..at].matches('\n').count() + 1;
    let column = at - bad[..at].rfind('\n').map_or(0, |p| p + 1);
    let path = dir.join("chain.json");
    std::fs::write(&path, &bad).unwrap();
    let out = ampchain(&["plan", path.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains(&format!("line {line}, column {column}")),
        "expected line {line}, column {column}: {err}"
    );
    // A comment that never ends is named where it opens.
    std::fs::write(&path, "{\n  \"title\": \"x\", /* open\n}\n").unwrap();
    let err =
        String::from_utf8_lossy(&ampchain(&["plan", path.to_str().unwrap()]).stderr).into_owned();
    assert!(
        err.contains("line 2, column 17") && err.contains("never ends"),
        "{err}"
    );
}

#[test]
fn starter_chains_plan_as_written_and_bias_write_keeps_their_comments() {
    let tmp = scratch();
    let dir = tmp.path();
    for kind in ["gain-block", "cascode"] {
        let out = ampchain(&["new", "--kind", kind]);
        assert!(out.status.success());
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(
            text.contains("//"),
            "{kind}: a starter chain explains itself"
        );
        let path = dir.join(format!("{kind}.json"));
        std::fs::write(&path, &text).unwrap();
        let plan = ampchain(&["plan", path.to_str().unwrap()]);
        assert!(
            plan.status.success(),
            "{kind}: {}",
            String::from_utf8_lossy(&plan.stderr)
        );
        let report = String::from_utf8_lossy(&plan.stdout);
        assert!(
            !report.contains("Warnings:"),
            "{kind} plans with warnings:\n{report}"
        );
    }
    // Re-bias the starter's first stage and write it: every comment line stays.
    let path = dir.join("gain-block.json");
    let written = dir.join("rebiased.json");
    let out = ampchain(&[
        "bias",
        path.to_str().unwrap(),
        "--stage",
        "gain",
        "--target",
        "ic=1.2mA",
        "--write",
        written.to_str().unwrap(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let before = std::fs::read_to_string(&path).unwrap();
    let after = std::fs::read_to_string(&written).unwrap();
    for comment in before
        .lines()
        .filter_map(|l| l.find("//").map(|k| l[k..].to_string()))
    {
        assert!(after.contains(&comment), "lost comment {comment}");
    }
    assert!(ampchain(&["plan", written.to_str().unwrap()])
        .status
        .success());
}
