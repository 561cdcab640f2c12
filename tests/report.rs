//! `ampchain report`: the design report of every demo chain. The page is checked as
//! XML (roxmltree: the report is written so that it parses as XML too), for what it
//! must and must not hold, and, where Chromium is installed, loaded in a real browser
//! (headless): no console errors, every figure laid out with a non-zero box, and a
//! screenshot written. Without Chromium the browser test says so and is skipped.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;

fn demos() -> Vec<PathBuf> {
    common::demo_chains()
}

fn scratch(tag: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ampchain-report-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// The report of `chain` written into `dir`; its path and text.
fn report(chain: &Path, dir: &Path) -> (PathBuf, String) {
    let out = dir.join(format!(
        "{}.html",
        chain.file_stem().unwrap().to_str().unwrap()
    ));
    let run = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .arg("report")
        .arg(chain)
        .arg("-o")
        .arg(&out)
        .output()
        .unwrap();
    assert!(
        run.status.success(),
        "{}: {}",
        chain.display(),
        String::from_utf8_lossy(&run.stderr)
    );
    let text = std::fs::read_to_string(&out).unwrap();
    (out, text)
}

/// Stages with a transistor: each has a load-line chart (a passive stage none).
fn stage_count(chain: &Path) -> usize {
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(chain).unwrap()).unwrap();
    v["stages"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s.get("device").is_some())
        .count()
}

#[test]
fn every_demo_report_is_whole_and_self_contained() {
    let dir = scratch("static");
    for chain in demos() {
        let (_, html) = report(&chain, &dir);
        let what = chain.display().to_string();
        // Valid HTML5: a general-purpose HTML5 parser (html5ever, through scraper)
        // reports no parse error.
        let html5 = scraper::Html::parse_document(&html);
        assert!(
            html5.errors.is_empty(),
            "{what}: HTML5 parse errors {:?}",
            html5.errors
        );
        // Well-formed (as XML, a strict superset of what a browser needs).
        let doc = roxmltree::Document::parse_with_options(
            &html,
            roxmltree::ParsingOptions {
                allow_dtd: true,
                ..Default::default()
            },
        )
        .unwrap_or_else(|e| panic!("{what}: {e}"));
        // Self-contained: no scripts, no external resources (only namespace names).
        assert!(!html.contains("<script"), "{what}: a script");
        for node in doc.descendants().filter(|n| n.is_element()) {
            for attr in ["src", "href"] {
                if let Some(v) = node.attribute(attr) {
                    assert!(
                        v.starts_with('#') || v.starts_with("url(#"),
                        "{what}: {attr}={v}"
                    );
                }
            }
        }
        // Every section, and one figure per stage's load lines plus the block
        // diagram, the level diagram, the Bode plot and the noise chart.
        for id in [
            "summary",
            "diagram",
            "plan",
            "levels",
            "loadlines",
            "response",
            "noise",
            "chain-file",
        ] {
            assert!(
                doc.descendants().any(|n| n.attribute("id") == Some(id)),
                "{what}: no section {id}"
            );
        }
        let figures = doc
            .descendants()
            .filter(|n| n.has_tag_name("figure"))
            .count();
        assert_eq!(figures, 4 + stage_count(&chain), "{what}: figures");
        // The caution first, the chain file itself last (its text as written).
        let text_of = |id: &str| {
            doc.descendants()
                .find(|n| n.attribute("id") == Some(id))
                .map(|n| n.descendants().filter_map(|t| t.text()).collect::<String>())
                .unwrap()
        };
        assert!(text_of("summary").contains("Caution."), "{what}");
        let file = std::fs::read_to_string(&chain).unwrap();
        assert!(
            text_of("chain-file").contains(file.trim()),
            "{what}: the chain file"
        );
        // The plan table carries plan's own cells: each stage id in a cell.
        let ids: Vec<String> = {
            let v: serde_json::Value = serde_json::from_str(&file).unwrap();
            v["stages"]
                .as_array()
                .unwrap()
                .iter()
                .map(|s| s["id"].as_str().unwrap().to_string())
                .collect()
        };
        for id in ids {
            assert!(
                doc.descendants()
                    .any(|n| n.has_tag_name("td") && n.text() == Some(id.as_str())),
                "{what}: no row for stage {id}"
            );
        }
        // A print stylesheet.
        assert!(html.contains("@media print"), "{what}");
    }
    std::fs::remove_dir_all(&dir).ok();
}

/// Chromium, if this machine has it.
fn chromium() -> Option<PathBuf> {
    let named = std::env::var_os("AMPCHAIN_CHROMIUM").map(PathBuf::from);
    named
        .into_iter()
        .chain(
            [
                "/usr/bin/chromium",
                "/usr/bin/chromium-browser",
                "/usr/bin/google-chrome",
            ]
            .map(PathBuf::from),
        )
        .find(|p| p.exists())
}

#[test]
fn every_demo_report_renders_in_a_browser() {
    let Some(browser) = chromium() else {
        eprintln!("skipped: no Chromium found (install Debian's chromium package, or set AMPCHAIN_CHROMIUM)");
        return;
    };
    let dir = scratch("browser");
    // Added to a copy of the page only: lists every figure's laid-out box.
    const PROBE: &str = "<script>window.addEventListener('load', function () { var out = []; document.querySelectorAll('figure svg').forEach(function (svg) { var r = svg.getBoundingClientRect(); out.push(Math.round(r.width) + 'x' + Math.round(r.height)); }); var pre = document.createElement('pre'); pre.textContent = 'FIGURE-BOXES ' + out.join(' ') + ' END'; document.body.appendChild(pre); });</script>";
    for chain in demos() {
        let (page, html) = report(&chain, &dir);
        let what = chain.display().to_string();
        let probe = dir.join("probe.html");
        std::fs::write(&probe, html.replace("</body>", &format!("{PROBE}</body>"))).unwrap();
        let run = Command::new(&browser)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--enable-logging=stderr",
                "--v=0",
            ])
            .arg("--virtual-time-budget=5000")
            .arg("--dump-dom")
            .arg(format!("file://{}", probe.display()))
            .output()
            .unwrap();
        let dom = String::from_utf8_lossy(&run.stdout);
        let log = String::from_utf8_lossy(&run.stderr);
        let boxes: Vec<(u32, u32)> = dom
            // The last mention is the list the probe wrote (the first is its source).
            .rsplit("FIGURE-BOXES ")
            .next()
            .filter(|_| dom.matches("FIGURE-BOXES ").count() >= 2)
            .and_then(|rest| rest.split(" END").next())
            .unwrap_or_else(|| panic!("{what}: the page did not load: {log}"))
            .split_whitespace()
            .map(|b| {
                let (w, h) = b.split_once('x').unwrap();
                (w.parse().unwrap(), h.parse().unwrap())
            })
            .collect();
        assert_eq!(
            boxes.len(),
            4 + stage_count(&chain),
            "{what}: figures laid out"
        );
        assert!(
            boxes.iter().all(|&(w, h)| w > 0 && h > 0),
            "{what}: {boxes:?}"
        );
        for line in log.lines() {
            assert!(
                !(line.contains("CONSOLE") && line.to_lowercase().contains("error")),
                "{what}: console error: {line}"
            );
        }
        // A screenshot of the page itself (no probe).
        let shot = dir.join(format!(
            "{}.png",
            chain.file_stem().unwrap().to_str().unwrap()
        ));
        let run = Command::new(&browser)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--hide-scrollbars",
                "--window-size=1200,1600",
            ])
            .arg(format!("--screenshot={}", shot.display()))
            .arg(format!("file://{}", page.display()))
            .output()
            .unwrap();
        assert!(run.status.success(), "{what}: screenshot");
        let size = std::fs::metadata(&shot).map(|m| m.len()).unwrap_or(0);
        assert!(size > 10_000, "{what}: screenshot of {size} bytes");
    }
    std::fs::remove_dir_all(&dir).ok();
}
