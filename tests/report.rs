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

fn scratch(tag: &str) -> tempfile::TempDir {
    common::scratch(&format!("report-{tag}"))
}

/// The report of `chain` written into `dir`; its path and text.
fn report(chain: &Path, dir: &Path) -> (PathBuf, String) {
    report_with(chain, dir, &[])
}

/// The chain the spread section is shown with (it says what spreads), and the runs.
const SPREAD_CHAIN: &str = "chains/hydrophone-spread.json";
const SPREAD_RUNS: &str = "500";

/// The report with extra options (`--spread N`).
fn report_with(chain: &Path, dir: &Path, extra: &[&str]) -> (PathBuf, String) {
    let out = dir.join(format!(
        "{}{}.html",
        chain.file_stem().unwrap().to_str().unwrap(),
        if extra.is_empty() { "" } else { "-extra" }
    ));
    let run = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .arg("report")
        .arg(chain)
        .args(extra)
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

/// 1 when the chain has a feedback link: the loop section's loop-gain plot.
fn loop_figures(chain: &Path) -> usize {
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(chain).unwrap()).unwrap();
    usize::from(
        v["links"]
            .as_array()
            .unwrap()
            .iter()
            .any(|l| l["coupling"] == "feedback"),
    )
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

/// The page checked as a whole: valid HTML5 (a general-purpose HTML5 parser,
/// html5ever through scraper, reports no parse error), well-formed as XML (a strict
/// superset of what a browser needs), self-contained (no scripts, no external
/// resources: only in-page links).
fn parse_page<'a>(html: &'a str, what: &str) -> roxmltree::Document<'a> {
    let html5 = scraper::Html::parse_document(html);
    assert!(
        html5.errors.is_empty(),
        "{what}: HTML5 parse errors {:?}",
        html5.errors
    );
    let doc = roxmltree::Document::parse_with_options(
        html,
        roxmltree::ParsingOptions {
            allow_dtd: true,
            ..Default::default()
        },
    )
    .unwrap_or_else(|e| panic!("{what}: {e}"));
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
    doc
}

/// The text of every cell of each table row inside the section `id`.
fn section_rows(doc: &roxmltree::Document, id: &str) -> Vec<Vec<String>> {
    let section = doc
        .descendants()
        .find(|n| n.attribute("id") == Some(id))
        .unwrap_or_else(|| panic!("no section {id}"));
    section
        .descendants()
        .filter(|n| n.has_tag_name("tr"))
        .map(|tr| {
            tr.children()
                .filter(|c| c.has_tag_name("td"))
                .map(|td| {
                    td.descendants()
                        .filter(|t| t.is_text())
                        .filter_map(|t| t.text())
                        .collect()
                })
                .collect::<Vec<String>>()
        })
        .filter(|cells| !cells.is_empty())
        .collect()
}

fn run_json(args: &[&str]) -> serde_json::Value {
    serde_json::from_slice(&common::run_ok(args)).unwrap()
}

fn dbu_cell(level: &serde_json::Value) -> String {
    match level["dbu"].as_f64() {
        Some(x) => format!("{x:+.1} dBu"),
        None => "—".into(),
    }
}

#[test]
fn large_signal_section_holds_sweeps_onsets() {
    // The same engine as `ampchain sweep` at the report's 256 samples per period: the
    // onset table's cells are the sweep's onsets, row by row.
    let tmp = scratch("large");
    let dir = tmp.path();
    for name in ["boost-pedal", "cascode-input"] {
        let chain = Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("chains")
            .join(format!("{name}.json"));
        let (_, html) = report(&chain, dir);
        let doc = parse_page(&html, name);
        let rows = section_rows(&doc, "large-signal");
        let sweep = run_json(&[
            "sweep",
            chain.to_str().unwrap(),
            "--samples",
            "256",
            "--format",
            "json",
        ]);
        let stages = sweep["onsets"]["stages"].as_array().unwrap();
        assert_eq!(rows.len(), stages.len(), "{name}: onset rows");
        for (row, s) in rows.iter().zip(stages) {
            assert_eq!(row[0], s["id"].as_str().unwrap(), "{name}");
            assert_eq!(row[1], dbu_cell(&s["thd_1_percent"]), "{name}: 1 % THD");
            assert_eq!(row[2], dbu_cell(&s["thd_10_percent"]), "{name}: 10 % THD");
            assert!(
                row[5].starts_with(&dbu_cell(&s["plan_clip"])),
                "{name}: load-line clip {}",
                row[5]
            );
        }
        let section = doc
            .descendants()
            .find(|n| n.attribute("id") == Some("large-signal"))
            .unwrap();
        assert_eq!(
            section
                .descendants()
                .filter(|n| n.has_tag_name("figure"))
                .count(),
            1,
            "{name}: the distortion plot"
        );
    }
}

#[test]
fn spread_section_with_the_spread_option() {
    let tmp = scratch("spread");
    let dir = tmp.path();
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join(SPREAD_CHAIN);
    let (_, html) = report_with(&chain, dir, &["--spread", SPREAD_RUNS]);
    let doc = parse_page(&html, SPREAD_CHAIN);
    // The statistics are `ampchain spread`'s for the same runs and seed.
    let spread = run_json(&[
        "spread",
        chain.to_str().unwrap(),
        "--runs",
        SPREAD_RUNS,
        "--format",
        "json",
    ]);
    let rows = section_rows(&doc, "spread");
    let chain_row = rows
        .iter()
        .find(|r| r[0] == "chain")
        .expect("the chain's clip row");
    let median = spread["clip_input_dbu"]["median"].as_f64().unwrap();
    assert_eq!(chain_row[5], format!("{median:+.1} dBu"));
    let spreads = spread["spreads"].as_array().unwrap();
    for s in spreads {
        let name = s["parameter"].as_str().unwrap();
        assert!(rows.iter().any(|r| r[0] == name), "spread {name} listed");
    }
    // The histograms: one more figure, with both panels.
    let section = doc
        .descendants()
        .find(|n| n.attribute("id") == Some("spread"))
        .unwrap();
    let figure_text: String = section
        .descendants()
        .filter(|n| n.has_tag_name("figure"))
        .flat_map(|f| f.descendants().filter_map(|t| t.text()))
        .collect();
    assert!(figure_text.contains("overall gain to"), "gain histogram");
    assert!(
        figure_text.contains("source level at which the chain clips"),
        "clip histogram"
    );
    assert_eq!(
        doc.descendants()
            .filter(|n| n.has_tag_name("figure"))
            .count(),
        6 + stage_count(&chain)
    );
}

#[test]
fn spread_option_refusals_leave_no_page() {
    let tmp = scratch("refused");
    let dir = tmp.path();
    let out = dir.join("page.html");
    let pedal = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let spread = Path::new(env!("CARGO_MANIFEST_DIR")).join(SPREAD_CHAIN);
    for (chain, runs, expected) in [
        (&spread, "0", "--spread 0: expected at least one build"),
        (&pedal, "100", "found nothing that spreads"),
    ] {
        let run = Command::new(env!("CARGO_BIN_EXE_ampchain"))
            .arg("report")
            .arg(chain)
            .args(["--spread", runs, "-o"])
            .arg(&out)
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&run.stderr);
        assert_eq!(run.status.code(), Some(2), "{err}");
        assert!(err.contains(expected), "{err}");
        // Only options `report` has: the spread's own options are not offered.
        for other in ["--temperature", "--at", "--band"] {
            assert!(!err.contains(other), "{other}: {err}");
        }
        assert!(!out.exists(), "a page was written");
    }
}

#[test]
fn every_demo_report_is_whole_and_self_contained() {
    let tmp = scratch("static");
    let dir = tmp.path();
    for chain in demos() {
        let (_, html) = report(&chain, dir);
        let what = chain.display().to_string();
        let doc = parse_page(&html, &what);
        // Every section, and one figure per stage's load lines plus the block
        // diagram, the level diagram, the Bode plot, the noise chart and the distortion plot.
        for id in [
            "summary",
            "diagram",
            "plan",
            "levels",
            "loadlines",
            "response",
            "noise",
            "large-signal",
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
        assert_eq!(
            figures,
            5 + stage_count(&chain) + loop_figures(&chain),
            "{what}: figures"
        );
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
        assert!(
            !doc.descendants()
                .any(|n| n.attribute("id") == Some("spread")),
            "{what}: a spread section nobody asked for"
        );
        // A print stylesheet.
        assert!(html.contains("@media print"), "{what}");
    }
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
    let tmp = scratch("browser");
    let dir = tmp.path();
    // Added to a copy of the page only: lists every figure's laid-out box.
    const PROBE: &str = "<script>window.addEventListener('load', function () { var out = []; document.querySelectorAll('figure svg').forEach(function (svg) { var r = svg.getBoundingClientRect(); out.push(Math.round(r.width) + 'x' + Math.round(r.height)); }); var pre = document.createElement('pre'); pre.textContent = 'FIGURE-BOXES ' + out.join(' ') + ' END'; document.body.appendChild(pre); });</script>";
    // Every demo, and the spread chain once more with its spread section.
    let spread_chain = Path::new(env!("CARGO_MANIFEST_DIR")).join(SPREAD_CHAIN);
    let pages = demos()
        .into_iter()
        .map(|c| (c, false))
        .chain([(spread_chain, true)]);
    for (chain, with_spread) in pages {
        let (page, html) = if with_spread {
            report_with(&chain, dir, &["--spread", SPREAD_RUNS])
        } else {
            report(&chain, dir)
        };
        let figures_expected =
            5 + stage_count(&chain) + loop_figures(&chain) + usize::from(with_spread);
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
        assert_eq!(boxes.len(), figures_expected, "{what}: figures laid out");
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
}

#[test]
fn a_long_chain_gets_its_report_without_the_large_signal_search() {
    // Over 50 stages the onset search (growing with the square of the stage count)
    // is left to `ampchain sweep`; the page says so and is written at once.
    let tmp = scratch("long");
    let dir = tmp.path();
    let mut v: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(
            Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/ce_ef_pair.json"),
        )
        .unwrap(),
    )
    .unwrap();
    common::cascade(&mut v, 51);
    let chain = dir.join("long.json");
    std::fs::write(&chain, v.to_string()).unwrap();
    let started = std::time::Instant::now();
    let (_, html) = report(&chain, dir);
    let doc = parse_page(&html, "51 stages");
    let section = doc
        .descendants()
        .find(|n| n.attribute("id") == Some("large-signal"))
        .unwrap();
    let text: String = section.descendants().filter_map(|n| n.text()).collect();
    assert!(
        text.contains("the chain has 51 stages") && text.contains("ampchain sweep"),
        "{text}"
    );
    eprintln!(
        "51-stage report in {:.1} s",
        started.elapsed().as_secs_f64()
    );
}
