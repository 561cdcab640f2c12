//! Hostile inputs (issue 15): output paths that must never be destroyed, closed
//! standard output, odd characters in the file, and options at extreme values. Each
//! case checks the exit status, the message and what is left on disk.
//!
//! Outside references: POSIX `open()` with O_NONBLOCK on a FIFO without a reader fails
//! with ENXIO, a FIFO with a reader passes the bytes through in order (POSIX mkfifo and
//! pipe semantics); `rename()` replaces a symbolic link itself, not its target, so
//! keeping the link is ampchain's own doing (POSIX rename semantics).

use serde_json::{json, Value};
use std::ffi::CString;
use std::io::Read;
use std::os::unix::ffi::OsStrExt;
use std::os::unix::fs::{FileTypeExt, PermissionsExt};
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

const BIN: &str = env!("CARGO_BIN_EXE_ampchain");

fn fixture() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/ce_ef_pair.json")
}

fn fresh_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ampchain-hostile-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("temp dir");
    dir
}

/// Run the binary in `dir`, giving up after 20 s (a hang is a failure, not a stuck test).
fn run_in(dir: &Path, args: &[&str]) -> Output {
    let mut child = Command::new(BIN)
        .current_dir(dir)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the ampchain binary starts");
    let start = Instant::now();
    loop {
        if child.try_wait().expect("wait").is_some() {
            return child.wait_with_output().expect("output");
        }
        if start.elapsed() > Duration::from_secs(20) {
            let _ = child.kill();
            panic!("ampchain {args:?} did not finish within 20 s");
        }
        std::thread::sleep(Duration::from_millis(10));
    }
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).trim_end().to_string()
}

fn mkfifo(path: &Path) {
    let c = CString::new(path.as_os_str().as_bytes()).expect("path");
    // SAFETY: a valid NUL-terminated path.
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o644) }, 0, "mkfifo");
}

fn is_root() -> bool {
    // SAFETY: geteuid has no preconditions.
    unsafe { libc::geteuid() == 0 }
}

/// Names in `dir`, sorted (temporary files left behind would show here).
fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("dir")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Read a FIFO to its end on another thread (the open blocks until a writer comes).
fn reader(path: &Path) -> std::thread::JoinHandle<Vec<u8>> {
    let path = path.to_path_buf();
    std::thread::spawn(move || {
        let mut bytes = Vec::new();
        std::fs::File::open(&path)
            .expect("open FIFO for reading")
            .read_to_end(&mut bytes)
            .expect("read");
        bytes
    })
}

// ---------------------------------------------------------------- output paths

#[test]
fn a_fifo_without_a_reader_is_refused_at_once_and_stays_a_fifo() {
    let dir = fresh_dir("fifo-no-reader");
    let fifo = dir.join("out.svg");
    mkfifo(&fifo);
    let chain = fixture();
    let start = Instant::now();
    let out = run_in(
        &dir,
        &["plot", "levels", chain.to_str().unwrap(), "-o", "out.svg"],
    );
    assert!(start.elapsed() < Duration::from_secs(5), "answered at once");
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert_eq!(
        stderr(&out),
        "error: out.svg: refusing the output file: it is a named pipe (FIFO) that no process is reading; expected a reader on it (start it first) or a file path"
    );
    let m = std::fs::symlink_metadata(&fifo).unwrap();
    assert!(m.file_type().is_fifo(), "still a FIFO");
    assert_eq!(listing(&dir), ["out.svg"], "no temporary file left");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_fifo_with_a_reader_gets_the_chart_through_a_symlink_too() {
    let dir = fresh_dir("fifo-reader");
    let fifo = dir.join("pipe");
    mkfifo(&fifo);
    std::os::unix::fs::symlink("pipe", dir.join("link.svg")).unwrap();
    let chain = fixture();
    for target in ["pipe", "link.svg"] {
        let got = reader(&fifo);
        let out = run_in(
            &dir,
            &["plot", "levels", chain.to_str().unwrap(), "-o", target],
        );
        assert_eq!(out.status.code(), Some(0), "{target}: {}", stderr(&out));
        let bytes = got.join().expect("reader");
        let svg = String::from_utf8(bytes).expect("UTF-8");
        assert!(
            svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"),
            "{target}"
        );
        assert!(std::fs::symlink_metadata(&fifo)
            .unwrap()
            .file_type()
            .is_fifo());
    }
    assert!(std::fs::symlink_metadata(dir.join("link.svg"))
        .unwrap()
        .file_type()
        .is_symlink());
    assert_eq!(listing(&dir), ["link.svg", "pipe"]);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_character_device_is_written_into_never_replaced() {
    let dir = fresh_dir("device");
    let chain = fixture();
    let mut targets = vec![PathBuf::from("/dev/null")];
    // A device node of our own (the null device, 1:3 on Linux) when allowed to make one.
    if is_root() {
        let node = dir.join("null-node");
        let c = CString::new(node.as_os_str().as_bytes()).unwrap();
        // SAFETY: a valid path; makedev(1, 3) is Linux's null device.
        let made = unsafe { libc::mknod(c.as_ptr(), libc::S_IFCHR | 0o666, libc::makedev(1, 3)) };
        if made == 0 {
            targets.push(node.clone());
            std::os::unix::fs::symlink(&node, dir.join("to-node.svg")).unwrap();
            targets.push(dir.join("to-node.svg"));
        }
    }
    for t in &targets {
        for args in [
            vec![
                "plot",
                "levels",
                chain.to_str().unwrap(),
                "-o",
                t.to_str().unwrap(),
            ],
            vec![
                "response",
                chain.to_str().unwrap(),
                "--plot",
                t.to_str().unwrap(),
            ],
        ] {
            let out = run_in(&dir, &args);
            assert_eq!(out.status.code(), Some(0), "{args:?}: {}", stderr(&out));
        }
        let m = std::fs::metadata(t).unwrap();
        assert!(
            m.file_type().is_char_device(),
            "{} is still a device",
            t.display()
        );
    }
    let names = listing(&dir);
    assert!(names.iter().all(|n| !n.ends_with(".tmp")), "{names:?}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_block_device_is_refused() {
    if !is_root() {
        eprintln!("skipped: making a block device node needs root");
        return;
    }
    let dir = fresh_dir("block");
    let node = dir.join("disk");
    let c = CString::new(node.as_os_str().as_bytes()).unwrap();
    // SAFETY: a valid path; 7:0 is a loop device on Linux. It is never opened.
    if unsafe { libc::mknod(c.as_ptr(), libc::S_IFBLK | 0o600, libc::makedev(7, 0)) } != 0 {
        eprintln!("skipped: mknod refused");
        return;
    }
    let chain = fixture();
    let out = run_in(
        &dir,
        &["plot", "levels", chain.to_str().unwrap(), "-o", "disk"],
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("it is a block device"),
        "{}",
        stderr(&out)
    );
    assert!(std::fs::metadata(&node)
        .unwrap()
        .file_type()
        .is_block_device());
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_symlink_to_a_file_keeps_the_link_and_replaces_its_target() {
    let dir = fresh_dir("symlink");
    std::fs::create_dir_all(dir.join("real")).unwrap();
    let target = dir.join("real/levels.svg");
    std::fs::write(&target, "old").unwrap();
    std::fs::set_permissions(&target, std::fs::Permissions::from_mode(0o640)).unwrap();
    std::os::unix::fs::symlink("real/levels.svg", dir.join("levels.svg")).unwrap();
    // A dangling link: its target is made, the link stays.
    std::os::unix::fs::symlink("real/new.svg", dir.join("dangling.svg")).unwrap();
    let chain = fixture();
    for name in ["levels.svg", "dangling.svg"] {
        let out = run_in(
            &dir,
            &["plot", "levels", chain.to_str().unwrap(), "-o", name],
        );
        assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
        assert_eq!(String::from_utf8_lossy(&out.stdout), format!("{name}\n"));
        let link = std::fs::symlink_metadata(dir.join(name)).unwrap();
        assert!(link.file_type().is_symlink(), "{name} is still a link");
    }
    let svg = std::fs::read_to_string(&target).unwrap();
    assert!(svg.starts_with("<svg"), "the target was replaced");
    let mode = std::fs::metadata(&target).unwrap().permissions().mode() & 0o777;
    assert_eq!(mode, 0o640, "the replaced file keeps its permissions");
    assert!(std::fs::read_to_string(dir.join("real/new.svg"))
        .unwrap()
        .starts_with("<svg"));
    assert_eq!(listing(&dir.join("real")), ["levels.svg", "new.svg"]);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_symlink_to_the_chain_file_is_refused() {
    let dir = fresh_dir("symlink-input");
    std::fs::copy(fixture(), dir.join("chain.json")).unwrap();
    std::os::unix::fs::symlink("chain.json", dir.join("out.svg")).unwrap();
    let out = run_in(&dir, &["plot", "levels", "chain.json", "-o", "out.svg"]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        stderr(&out),
        "error: out.svg: refusing the output file: it is the input file chain.json; expected a different output path"
    );
    let text = std::fs::read_to_string(dir.join("chain.json")).unwrap();
    assert_eq!(text, std::fs::read_to_string(fixture()).unwrap());
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn dash_means_standard_output() {
    let dir = fresh_dir("dash");
    let chain = fixture();
    let c = chain.to_str().unwrap();
    for args in [
        vec!["plot", "levels", c, "-o", "-"],
        vec!["plot", "loadlines", c, "--stage", "amp", "-o", "-"],
        vec![
            "plot",
            "waveform",
            c,
            "--input",
            "-40 dBu",
            "--samples",
            "64",
            "-o",
            "-",
        ],
    ] {
        let out = run_in(&dir, &args);
        assert_eq!(out.status.code(), Some(0), "{args:?}: {}", stderr(&out));
        let svg = String::from_utf8(out.stdout).unwrap();
        assert!(svg.starts_with("<svg"), "{args:?}");
        roxmltree::Document::parse(&svg).expect("the chart is XML");
    }
    // Beside a report on standard output, `-` is refused.
    for (args, option) in [
        (vec!["response", c, "--plot", "-"], "--plot"),
        (vec!["spread", c, "--plot", "-"], "--plot"),
        (vec!["bias", c, "--stage", "amp", "--write", "-"], "--write"),
    ] {
        let out = run_in(&dir, &args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        assert_eq!(
            stderr(&out),
            format!("error: {option} -: standard output carries the report; expected a file path")
        );
    }
    let out = run_in(&dir, &["plot", "loadlines", c, "-o", "-"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("standard output takes one chart"),
        "{}",
        stderr(&out)
    );
    assert!(
        listing(&dir).is_empty(),
        "no file named - : {:?}",
        listing(&dir)
    );
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn loadlines_into_a_folder_writes_all_charts_or_none() {
    let dir = fresh_dir("loadlines");
    let chain = fixture();
    let c = chain.to_str().unwrap();
    // The second chart's path is a folder: nothing may be written, not even the first.
    std::fs::create_dir_all(dir.join("charts/follow.svg")).unwrap();
    let out = run_in(&dir, &["plot", "loadlines", c, "-o", "charts"]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        stderr(&out),
        "error: charts/follow.svg: refusing the output file: it is a folder; expected a file path"
    );
    assert_eq!(listing(&dir.join("charts")), ["follow.svg"]);
    assert!(out.stdout.is_empty(), "no chart named as written");
    // A stage id too long for a file name is shortened; every chart is written.
    let mut v: Value = serde_json::from_str(&std::fs::read_to_string(&chain).unwrap()).unwrap();
    let long = "ü".repeat(200);
    v["stages"][0]["id"] = json!(long);
    for link in v["links"].as_array_mut().unwrap() {
        for end in ["from", "to"] {
            if link[end] == "amp" {
                link[end] = json!(long);
            }
        }
    }
    std::fs::write(dir.join("long.json"), v.to_string()).unwrap();
    let out = run_in(&dir, &["plot", "loadlines", "long.json", "-o", "long"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let names = listing(&dir.join("long"));
    assert_eq!(names.len(), 2, "{names:?}");
    assert!(names.iter().all(|n| n.len() <= 255));
    let _ = std::fs::remove_dir_all(&dir);
}

/// Run a shell line with `$AMPCHAIN` and `$CHAIN` set.
fn shell(dir: &Path, line: &str) -> Output {
    Command::new("sh")
        .current_dir(dir)
        .arg("-c")
        .arg(line)
        .env("AMPCHAIN", BIN)
        .env("CHAIN", fixture())
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .output()
        .expect("sh runs")
}

#[test]
fn a_closed_standard_output_is_a_write_error() {
    let dir = fresh_dir("closed");
    for line in [
        "\"$AMPCHAIN\" plan \"$CHAIN\" >&-",
        "\"$AMPCHAIN\" check \"$CHAIN\" >&-",
        "\"$AMPCHAIN\" plot levels \"$CHAIN\" -o - >&-",
    ] {
        let out = shell(&dir, line);
        assert_eq!(out.status.code(), Some(3), "{line}: {}", stderr(&out));
        assert_eq!(
            stderr(&out),
            "error: cannot write the output: standard output is closed",
            "{line}"
        );
    }
    // /dev/null on standard output is no error, and neither is a reader that goes away.
    let out = shell(&dir, "\"$AMPCHAIN\" plan \"$CHAIN\" >/dev/null");
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let out = shell(
        &dir,
        "{ \"$AMPCHAIN\" plan \"$CHAIN\"; echo $? >&2; } | head -c 1 >/dev/null",
    );
    assert_eq!(stderr(&out), "0", "the status of plan into a closed pipe");
    assert!(listing(&dir).is_empty());
    let _ = std::fs::remove_dir_all(&dir);
}
