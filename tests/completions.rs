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

/// The command paths under `path` (`["plot"]` → `["plot", "loadlines"]`, …) that
/// `ampchain PATH --help` lists under "Commands:", at any depth.
fn listed_commands(path: &[String], out: &mut Vec<Vec<String>>) {
    let mut args: Vec<&str> = path.iter().map(String::as_str).collect();
    args.push("--help");
    let help = String::from_utf8(ampchain(&args)).unwrap();
    let Some((_, list)) = help.split_once("Commands:\n") else {
        return;
    };
    for line in list.lines().take_while(|l| l.starts_with("  ")) {
        let name = line.split_whitespace().next().unwrap().to_string();
        let mut sub = path.to_vec();
        sub.push(name.clone());
        out.push(sub.clone());
        // `help` lists the commands again, as subjects, not commands of its own.
        if name != "help" {
            listed_commands(&sub, out);
        }
    }
}

#[test]
fn the_manual_has_a_page_for_every_command_help_lists() {
    // Every command and nested subcommand `--help` lists (the plot charts among them)
    // has its page, named by its path, with its synopsis (man-pages(7): one page per
    // command, common practice).
    let page = String::from_utf8(ampchain(&["manual"])).unwrap();
    let mut commands = Vec::new();
    listed_commands(&[], &mut commands);
    for nested in ["loadlines", "levels", "waveform", "distortion"] {
        assert!(
            commands.contains(&vec!["plot".to_string(), nested.to_string()]),
            "plot {nested}: {commands:?}"
        );
    }
    for path in &commands {
        let name = format!("ampchain-{}", path.join("-"));
        assert!(
            page.contains(&format!(".TH {name} 1")),
            "no page {name} in the manual"
        );
        assert!(
            page.contains(&format!("\\fBampchain {}\\fR", path.join(" "))),
            "{name}: no synopsis"
        );
    }
}

#[test]
fn series_options_complete_to_the_series_names() {
    // IEC 60063's series: bash completes --series and --cap-series to E6 … E192.
    let bash = String::from_utf8(ampchain(&["completions", "bash"])).unwrap();
    for option in ["--series)", "--cap-series)"] {
        let at = bash.find(option).unwrap_or_else(|| panic!("{option}"));
        let next = &bash[at..at + 200];
        assert!(
            next.contains("compgen -W \"E6 E12 E24 E48 E96 E192\""),
            "{option}: {next}"
        );
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
