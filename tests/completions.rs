//! Shell completions and the manual page, generated from the clap definitions: the bash
//! script parses (`bash -n`), the page formats without a warning (`groff -man -ww`)
//! and `man -l` shows every command, where those tools are installed (skipped with a
//! message where not).

mod common;

use std::io::Write;
use std::process::{Command, Stdio};

fn ampchain(args: &[&str]) -> Vec<u8> {
    common::run_ok(args)
}

/// Run `tool args` with `input` on standard input; `None` when the tool is missing.
fn with_input(tool: &str, args: &[&str], input: &[u8]) -> Option<std::process::Output> {
    let mut child = Command::new(tool)
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .ok()?;
    child.stdin.take().unwrap().write_all(input).unwrap();
    Some(child.wait_with_output().unwrap())
}

const COMMANDS: [&str; 10] = [
    "plan", "check", "response", "plot", "bias", "sweep", "spread", "schema", "report", "manual",
];

#[test]
fn completion_scripts_name_every_command_and_bash_parses_its_own() {
    for shell in ["bash", "zsh", "fish", "elvish", "powershell"] {
        let script = String::from_utf8(ampchain(&["completions", shell])).unwrap();
        for c in COMMANDS {
            assert!(script.contains(c), "{shell}: no {c}");
        }
    }
    let bash = ampchain(&["completions", "bash"]);
    match with_input("bash", &["-n"], &bash) {
        Some(out) => assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        ),
        None => eprintln!("skipped: bash not found"),
    }
}

#[test]
fn the_manual_formats_cleanly() {
    let page = ampchain(&["manual"]);
    assert!(page.is_ascii(), "non-ASCII left in the roff source");
    match with_input("groff", &["-man", "-ww", "-z"], &page) {
        Some(out) => {
            assert!(out.status.success());
            assert!(
                out.stderr.is_empty(),
                "groff: {}",
                String::from_utf8_lossy(&out.stderr)
            );
        }
        None => eprintln!("skipped: groff not found"),
    }
    let tmp = common::scratch("manual");
    let path = tmp.path().join("ampchain.1");
    std::fs::write(&path, &page).unwrap();
    match Command::new("man")
        .env("MANWIDTH", "100")
        .arg("-l")
        .arg(&path)
        .output()
    {
        Ok(out) if out.status.success() => {
            let text = String::from_utf8_lossy(&out.stdout);
            for c in COMMANDS {
                assert!(
                    text.contains(&format!("ampchain-{c}")),
                    "man page lacks ampchain-{c}"
                );
            }
        }
        _ => eprintln!("skipped: man not found"),
    }
}
