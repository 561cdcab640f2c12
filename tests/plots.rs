//! Pictures: the load-line chart of every stage and the level diagram of every demo
//! chain, parsed back as XML (roxmltree, an XML parser independent of the SVG writer)
//! and measured: the axis mapping is recovered from the tick labels and their
//! positions, and the marks must sit where `plan`'s numbers put them, within a pixel.

mod common;

use ampchain::device::ebers_moll::collector_current;
use ampchain::plot::{levels, loadlines, ALERT, INK, ORANGE, TEAL};
use ampchain::report::PlanReport;
use ampchain::stages::StageKind;
use ampchain::units::{Level, DBU_REF_VRMS};
use ampchain::{Chain, Evaluation};
use plotters::style::RGBColor;
use std::path::{Path, PathBuf};

// ---------------------------------------------------------------- SVG reading

#[derive(Debug, Clone)]
struct Text {
    x: f64,
    y: f64,
    anchor: String,
    dy: String,
    bold: bool,
    fill: String,
    content: String,
}

#[derive(Debug, Clone, Copy)]
struct Ring {
    cx: f64,
    cy: f64,
    r: f64,
    filled: bool,
}

#[derive(Debug, Clone)]
struct Line {
    stroke: String,
    width: f64,
    points: Vec<(f64, f64)>,
}

impl Line {
    fn length(&self) -> f64 {
        self.points
            .windows(2)
            .map(|w| (w[1].0 - w[0].0).hypot(w[1].1 - w[0].1))
            .sum()
    }
    fn first(&self) -> (f64, f64) {
        self.points[0]
    }
    fn last(&self) -> (f64, f64) {
        *self.points.last().unwrap()
    }
}

/// The parts of an SVG document the checks read.
#[derive(Debug, Default)]
struct Svg {
    texts: Vec<Text>,
    rings: Vec<Ring>,
    lines: Vec<Line>,
}

fn hex(c: RGBColor) -> String {
    format!("#{:02X}{:02X}{:02X}", c.0, c.1, c.2)
}

fn num(node: roxmltree::Node, name: &str) -> f64 {
    let v = node
        .attribute(name)
        .unwrap_or_else(|| panic!("<{}> has no {name}", node.tag_name().name()));
    v.parse()
        .unwrap_or_else(|_| panic!("{name}=\"{v}\" is no number"))
}

/// Parse `svg` as XML (fails the test when it is not well-formed) and collect texts,
/// circles and polylines.
fn parse(svg: &str) -> Svg {
    let doc = roxmltree::Document::parse(svg).expect("the SVG is well-formed XML");
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "svg");
    assert!(num(root, "width") >= 960.0 && num(root, "height") == 640.0);
    let mut out = Svg::default();
    for n in root.descendants().filter(|n| n.is_element()) {
        let attr = |a: &str| n.attribute(a).unwrap_or("").to_string();
        match n.tag_name().name() {
            "text" => out.texts.push(Text {
                x: num(n, "x"),
                y: num(n, "y"),
                anchor: attr("text-anchor"),
                dy: attr("dy"),
                bold: attr("font-weight") == "bold",
                fill: attr("fill"),
                content: n.text().unwrap_or("").trim().to_string(),
            }),
            "circle" => out.rings.push(Ring {
                cx: num(n, "cx"),
                cy: num(n, "cy"),
                r: num(n, "r"),
                filled: attr("fill") != "none",
            }),
            "polyline" => out.lines.push(Line {
                stroke: attr("stroke"),
                width: num(n, "stroke-width"),
                points: attr("points")
                    .split_whitespace()
                    .map(|p| {
                        let (x, y) = p.split_once(',').expect("x,y");
                        (x.parse().unwrap(), y.parse().unwrap())
                    })
                    .collect(),
            }),
            _ => {}
        }
    }
    out
}

/// A linear axis mapping pixel = a + b·value, fitted by least squares to the tick
/// labels (value, pixel).
#[derive(Debug, Clone, Copy)]
struct Axis {
    a: f64,
    b: f64,
}

impl Axis {
    fn fit(ticks: &[(f64, f64)]) -> Axis {
        assert!(ticks.len() >= 3, "too few ticks: {ticks:?}");
        let n = ticks.len() as f64;
        let (sv, sp) = ticks
            .iter()
            .fold((0.0, 0.0), |(a, b), (v, p)| (a + v, b + p));
        let (mv, mp) = (sv / n, sp / n);
        let cov: f64 = ticks.iter().map(|(v, p)| (v - mv) * (p - mp)).sum();
        let var: f64 = ticks.iter().map(|(v, _)| (v - mv).powi(2)).sum();
        let b = cov / var;
        let axis = Axis { a: mp - b * mv, b };
        // Ticks sit on whole pixels: a straight axis fits them within a pixel.
        for &(v, p) in ticks {
            assert!((axis.px(v) - p).abs() <= 1.0, "tick {v} at {p}: {axis:?}");
        }
        axis
    }
    fn px(&self, v: f64) -> f64 {
        self.a + self.b * v
    }
    fn value(&self, px: f64) -> f64 {
        (px - self.a) / self.b
    }
}

impl Svg {
    /// Numeric tick labels: x ticks are centred under the axis, y ticks right-aligned
    /// beside it; each set shares one row or column.
    fn axes(&self) -> (Axis, Axis) {
        // (value, position) of the numeric labels with this anchor and offset.
        let ticks = |anchor: &str, dy: &str, position: fn(&Text) -> f64| -> Vec<(f64, f64)> {
            self.texts
                .iter()
                .filter(|t| t.anchor == anchor && t.dy == dy)
                .filter_map(|t| t.content.parse().ok().map(|v| (v, position(t))))
                .collect()
        };
        let x = ticks("middle", "0.76em", |t| t.x);
        let y = ticks("end", "0.5ex", |t| t.y);
        let y_axis = Axis::fit(&y);
        let x_axis = if x.is_empty() {
            Axis { a: 0.0, b: 1.0 }
        } else {
            Axis::fit(&x)
        };
        (x_axis, y_axis)
    }

    /// The right edge of the plotting area: the grid lines and the saturation band
    /// reach it, no polyline goes beyond.
    fn plot_right(&self) -> f64 {
        self.lines
            .iter()
            .flat_map(|l| l.points.iter().map(|p| p.0))
            .fold(f64::NEG_INFINITY, f64::max)
    }

    fn text_starting(&self, prefix: &str) -> Option<&Text> {
        self.texts.iter().find(|t| t.content.starts_with(prefix))
    }

    fn has_text(&self, content: &str) -> bool {
        self.texts.iter().any(|t| t.content == content)
    }

    /// The chart's title: whole, or cut at a word with " …" where it is wider than
    /// the chart (what follows the cut is the title's end).
    fn has_title(&self, title: &str) -> bool {
        self.texts.iter().any(|t| {
            t.content == title
                || t.content.split_once(" …").is_some_and(|(head, tail)| {
                    head.len() > 10 && title.starts_with(head) && title.ends_with(tail)
                })
        })
    }
}

/// Within a pixel on each axis (the SVG backend places marks on whole pixels).
fn close(what: &str, got: (f64, f64), want: (f64, f64)) {
    let (dx, dy) = ((got.0 - want.0).abs(), (got.1 - want.1).abs());
    assert!(
        dx <= 1.0 && dy <= 1.0,
        "{what}: drawn at {got:?}, expected {want:?} ({dx:.2}, {dy:.2} px off)"
    );
}

// ---------------------------------------------------------------- chains

/// A stage with a load-line chart: one with a transistor (a passive stage has none; an
/// op-amp stage has its transfer chart instead).
fn has_chart(chain: &ampchain::Chain, i: usize) -> bool {
    chain.stages[i].device.is_some() && chain.device_of(i).opamp.is_none()
}

/// The names a stage's chart uses: (output current's axis prefix, output voltage's
/// axis name, the knee side's name).
fn chart_names(chain: &Chain, i: usize) -> (&'static str, &'static str, &'static str) {
    if chain.device_of(i).jfet.is_some() {
        (
            "drain current I_D (",
            "drain–source voltage V_DS (V)",
            "ohmic",
        )
    } else {
        (
            "collector current I_C (",
            "collector–emitter voltage V_CE (V)",
            "saturation",
        )
    }
}

/// The output voltage (magnitude) where the AC load line I = I_0 + slope·V meets the
/// edge of the active region: V_CE,sat for a BJT; for a JFET the ohmic edge
/// V_DS = V_GS − V_P, where the square law gives I_D = I_DSS·(V_DS/V_P)²·(1 + V_DS/V_A)
/// (docs/definitions.md "JFET"), found here by plain bisection on the line.
fn knee_voltage(chain: &Chain, report: &PlanReport, i: usize) -> f64 {
    let device = chain.device_of(i);
    let Some(j) = device.jfet else {
        return device.vce_sat;
    };
    let line = report.stages[i].ac_load_line.expect("a transistor stage");
    let early = |v: f64| {
        if device.v_a.is_finite() {
            1.0 + v / device.v_a
        } else {
            1.0
        }
    };
    let gap =
        |v: f64| line.i_c_intercept + line.slope * v - j.i_dss * (v / j.v_p).powi(2) * early(v);
    let (mut lo, mut hi) = (0.0, line.v_ce_intercept);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if gap(mid) > 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    lo
}

fn demo_chains() -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains");
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    files.sort();
    assert!(files.len() >= 4, "demo chains in {}", dir.display());
    files
}

/// The chain, its midband evaluation and `plan`'s report at the file's planned level
/// shifted by `louder_db`.
fn planned(path: &Path, louder_db: f64) -> (Chain, Evaluation, PlanReport) {
    let chain = Chain::from_json_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let ev = chain.evaluate().unwrap();
    let level = chain.source.level.expect("demo chains plan an input level");
    let level = Level::from_vrms(level.vrms * 10f64.powf(louder_db / 20.0));
    let report = PlanReport::new(&chain, &ev, level);
    (chain, ev, report)
}

fn r_parallel(a: f64, b: f64) -> f64 {
    a * b / (a + b)
}

// ---------------------------------------------------------------- load lines

/// The ends of the planned swing on the AC load line, from the circuit: a change u of
/// the output voltage moves the collector current by −u/R_ac in a common-emitter stage
/// (R_ac = R_C ∥ load) and by α·u/R_E,ac in an emitter follower (R_E,ac = R_E ∥ load),
/// and V_CE by −r·ΔI_C along the AC load line of slope −1/r (small-signal hand
/// analysis, from memory; docs/definitions.md's definitions). The output swings by the planned
/// peak, or up to the limit where the stage clips. Returns (toward cutoff, toward
/// saturation) as (V_CE, I_C).
fn swing_ends(chain: &Chain, report: &PlanReport, i: usize) -> ((f64, f64), (f64, f64)) {
    let s = &report.stages[i];
    let op = &s.op;
    let r_line = -1.0 / s.ac_load_line.expect("a transistor stage").slope;
    let peak = s.output_vrms * std::f64::consts::SQRT_2;
    let at = |d_ic: f64| (op.v_ce - r_line * d_ic, op.i_c + d_ic);
    // A PNP stage hangs upside down: its limits swap sides (docs/definitions.md), so
    // the limit toward cutoff of a collector output is limit_down, not limit_up.
    let pnp = chain.device_of(i).polarity == ampchain::device::Polarity::Pnp;
    let (limit_up, limit_down) = if pnp {
        (s.limit_down, s.limit_up)
    } else {
        (s.limit_up, s.limit_down)
    };
    match &chain.stages[i].kind {
        StageKind::CommonEmitter(ampchain::stages::CommonEmitter {
            r_feedback: None,
            r_collector: Some(r_collector),
            ..
        }) if chain.topology.loop_of[i].is_none() => {
            // v1 load lines (a stage on a loop takes region limits below).
            let r_ac = r_parallel(*r_collector, s.load);
            // Output up: collector current falls, toward cutoff.
            (
                at(-peak.min(limit_up) / r_ac),
                at(peak.min(limit_down) / r_ac),
            )
        }
        StageKind::CommonEmitter(_) | StageKind::CommonBase(_) | StageKind::CommonSource(_) => {
            // Region limits (a collector or drain output of an NPN or n-JFET: up is
            // toward cutoff, down toward the knee): the output reaches a limit when Q
            // has moved all the way along the AC load line to its end, I_C = 0 or the
            // knee, and moves in proportion on the way (small-signal linearity).
            let knee = knee_voltage(chain, report, i);
            let to_cutoff = (peak / limit_up).min(1.0) * op.i_c;
            let to_saturation = (peak / limit_down).min(1.0) * (op.v_ce - knee) / r_line;
            (at(-to_cutoff), at(to_saturation))
        }
        StageKind::SourceFollower(_) => {
            // A source output (region limits): up is toward the ohmic edge, down
            // toward cutoff.
            let knee = knee_voltage(chain, report, i);
            let to_cutoff = (peak / limit_down).min(1.0) * op.i_c;
            let to_saturation = (peak / limit_up).min(1.0) * (op.v_ce - knee) / r_line;
            (at(-to_cutoff), at(to_saturation))
        }
        StageKind::EmitterFollower(_) if chain.topology.loop_of[i].is_some() => {
            // Region limits on a loop: an emitter output rises toward saturation.
            let vce_sat = chain.device_of(i).vce_sat;
            let to_cutoff = (peak / limit_down).min(1.0) * op.i_c;
            let to_saturation = (peak / limit_up).min(1.0) * (op.v_ce - vce_sat) / r_line;
            (at(-to_cutoff), at(to_saturation))
        }
        StageKind::EmitterFollower(ef) => {
            let r_e_ac = r_parallel(ef.r_emitter, s.load);
            let alpha = op.i_c / op.i_e;
            // Output up: emitter current rises, toward saturation.
            (
                at(-alpha * peak.min(limit_down) / r_e_ac),
                at(alpha * peak.min(limit_up) / r_e_ac),
            )
        }
        _ => unreachable!("a passive stage has no load-line chart"),
    }
}

/// Check one stage's chart against the report; returns whether it showed clipping.
fn check_loadline_chart(chain: &Chain, ev: &Evaluation, report: &PlanReport, i: usize) -> bool {
    let name = format!("{:?} stage {}", report.title, report.stages[i].id);
    let svg = parse(&loadlines::render(chain, ev, report, i).unwrap());
    let (x, y) = svg.axes();
    let (i_axis, v_axis, knee_side) = chart_names(chain, i);
    let desc = svg.text_starting(i_axis).expect("current axis name");
    let scale = match desc.content.strip_prefix(i_axis) {
        Some("mA)") => 1e3,
        Some("µA)") => 1e6,
        _ => panic!("{name}: axis name {}", desc.content),
    };
    assert!(svg.text_starting(v_axis).is_some(), "{name}: {v_axis}");
    assert!(
        svg.has_title(report.title.as_deref().unwrap()),
        "{name}: title"
    );
    let px = |(v, i): (f64, f64)| (x.px(v), y.px(i * scale));

    let s = &report.stages[i];
    let op = &s.op;
    // Q point: the one dot of radius 6.
    let q: Vec<&Ring> = svg
        .rings
        .iter()
        .filter(|r| r.r == 6.0 && r.filled)
        .collect();
    assert_eq!(q.len(), 1, "{name}: one Q point");
    close(
        &format!("{name}: Q"),
        (q[0].cx, q[0].cy),
        px((op.v_ce, op.i_c)),
    );

    // Load lines: the longest polyline in each colour runs intercept to intercept.
    for (what, colour, line) in [
        ("DC load line", TEAL, s.dc_load_line),
        ("AC load line", ORANGE, s.ac_load_line),
    ] {
        let line = line.expect("a transistor stage");
        let drawn = svg
            .lines
            .iter()
            .filter(|l| l.stroke == hex(colour) && l.width == 2.0)
            .max_by(|a, b| a.length().total_cmp(&b.length()))
            .unwrap_or_else(|| panic!("{name}: no {what}"));
        // An intercept above the chart (a small AC load): the line leaves through the
        // top edge, on the line.
        let first = drawn.first();
        let top = svg
            .lines
            .iter()
            .flat_map(|l| l.points.iter().map(|p| p.1))
            .fold(f64::INFINITY, f64::min);
        if px((0.0, line.i_c_intercept)).1 < top - 1.0 {
            assert!(
                (first.1 - top).abs() <= 1.0,
                "{name}: {what} at the top edge"
            );
            // Within a pixel of the line (perpendicular distance, both ends rounded).
            let (p0, p1) = (
                px((0.0, line.i_c_intercept)),
                px((line.v_ce_intercept, 0.0)),
            );
            let (dx, dy) = (p1.0 - p0.0, p1.1 - p0.1);
            let off = (dx * (first.1 - p0.1) - dy * (first.0 - p0.0)).abs() / dx.hypot(dy);
            assert!(
                off <= 1.0,
                "{name}: {what} leaves the top {off:.2} px off the line"
            );
            let v = x.value(first.0);
            assert!(
                v > 0.0 && v < line.v_ce_intercept,
                "{name}: {what} at V_CE {v}"
            );
        } else {
            close(
                &format!("{name}: {what} I_C intercept"),
                first,
                px((0.0, line.i_c_intercept)),
            );
        }
        // An intercept beyond the chart's right edge (a current-fed emitter): the line
        // leaves through that edge, on the line, and the legend gives the intercept.
        let right = svg.plot_right();
        if px((line.v_ce_intercept, 0.0)).0 > right + 1.0 {
            let last = drawn.last();
            assert!(
                (last.0 - right).abs() <= 1.0,
                "{name}: {what} at the right edge"
            );
            let v = x.value(last.0);
            close(
                &format!("{name}: {what} at the right edge"),
                last,
                px((v, line.i_c_intercept + line.slope * v)),
            );
            assert!(
                svg.texts
                    .iter()
                    .any(|t| t.content.contains("intercept") && t.content.contains("off the chart")),
                "{name}: {what}'s intercept named"
            );
        } else {
            close(
                &format!("{name}: {what} V_CE intercept"),
                drawn.last(),
                px((line.v_ce_intercept, 0.0)),
            );
        }
    }

    // Swing ends: the two dots of radius 4, and the ends of the thick stretch.
    let (cutoff, saturation) = swing_ends(chain, report, i);
    let mut ends: Vec<(f64, f64)> = svg
        .rings
        .iter()
        .filter(|r| r.r == 4.0 && r.filled)
        .map(|r| (r.cx, r.cy))
        .collect();
    assert_eq!(ends.len(), 2, "{name}: two swing ends");
    ends.sort_by(|a, b| a.0.total_cmp(&b.0));
    // Toward saturation V_CE is lower: the left dot.
    close(
        &format!("{name}: swing end toward saturation"),
        ends[0],
        px(saturation),
    );
    close(
        &format!("{name}: swing end toward cutoff"),
        ends[1],
        px(cutoff),
    );
    let stretch = svg
        .lines
        .iter()
        .find(|l| l.stroke == hex(ORANGE) && l.width == 7.0 && l.points.len() == 2)
        .expect("swing stretch");
    close(
        &format!("{name}: stretch start"),
        stretch.first(),
        px(saturation),
    );
    close(&format!("{name}: stretch end"), stretch.last(), px(cutoff));

    // A side that clips is marked with its name, and only then.
    let peak = s.output_vrms * std::f64::consts::SQRT_2;
    let (clip_up, clip_down) = (peak > s.limit_up, peak > s.limit_down);
    let (clip_cutoff, clip_saturation) = match &chain.stages[i].kind {
        StageKind::CommonEmitter(_) | StageKind::CommonBase(_) | StageKind::CommonSource(_) => {
            (clip_up, clip_down)
        }
        StageKind::EmitterFollower(_) | StageKind::SourceFollower(_) => (clip_down, clip_up),
        _ => unreachable!("a passive stage has no load-line chart"),
    };
    // A PNP stage's limits swap sides.
    let (clip_cutoff, clip_saturation) =
        if chain.device_of(i).polarity == ampchain::device::Polarity::Pnp {
            (clip_saturation, clip_cutoff)
        } else {
            (clip_cutoff, clip_saturation)
        };
    assert_eq!(svg.has_text("clips toward cutoff"), clip_cutoff, "{name}");
    assert_eq!(
        svg.has_text(&format!("clips toward {knee_side}")),
        clip_saturation,
        "{name}"
    );
    assert_eq!(svg.has_text("cutoff"), !clip_cutoff, "{name}");
    if clip_cutoff {
        close(
            &format!("{name}: clipped end at cutoff"),
            ends[1],
            px((
                s.ac_load_line.expect("a transistor stage").v_ce_intercept,
                0.0,
            )),
        );
    }
    clip_cutoff || clip_saturation
}

#[test]
fn load_line_marks_sit_where_plan_puts_them() {
    let mut clipped = 0;
    let mut charts = 0;
    for path in demo_chains() {
        // At the planned level, and 20 dB louder, where stages clip.
        for louder in [0.0, 20.0] {
            let (chain, ev, report) = planned(&path, louder);
            // A passive stage has no load-line chart.
            for i in (0..chain.stages.len()).filter(|&i| has_chart(&chain, i)) {
                charts += 1;
                if check_loadline_chart(&chain, &ev, &report, i) {
                    clipped += 1;
                }
            }
        }
    }
    assert!(
        charts >= 20 && clipped >= 3,
        "{charts} charts, {clipped} clipping"
    );
}

#[test]
fn output_curves_saturate_where_the_ebers_moll_knee_formula_says() {
    // For every demo stage at its Q-point base current. The Ebers–Moll saturation
    // relation (device-physics texts, from memory): with forced gain β_f = I_C/I_B,
    // e^(V_CE/V_T) = (1/α_R + β_f/β_R)/(1 − β_f/β_F), α_R = β_R/(1 + β_R), without
    // Early effect. Halving the current (β_f = β_F/2) puts V_CE at
    // V_T·ln((1/α_R + β_F/(2β_R))·2); the curve must give I_C = β·I_B/2 there, well below
    // β·I_B, and at V_CE,sat it must sit below β·I_B·(1 + V_CE,sat/V_A).
    for path in demo_chains() {
        let (chain, _, report) = planned(&path, 0.0);
        for (i, s) in report.stages.iter().enumerate() {
            // Bipolar stages (a JFET's curves: the next test).
            if !has_chart(&chain, i) || chain.device_of(i).jfet.is_some() {
                continue;
            }
            let device = chain.device_of(i);
            let v_t = report.thermal_voltage;
            let i_b = s.op.i_b;
            let mut ideal = device.clone();
            ideal.v_a = f64::INFINITY;
            let (b_f, b_r) = (device.beta, device.beta_reverse);
            let alpha_r = b_r / (1.0 + b_r);
            let v_half = v_t * ((1.0 / alpha_r + b_f / (2.0 * b_r)) * 2.0).ln();
            let i_half = collector_current(&ideal, v_t, i_b, v_half);
            assert!(
                (i_half / (0.5 * b_f * i_b) - 1.0).abs() < 1e-6,
                "{}: I_C {i_half} at V_CE {v_half}",
                s.id
            );
            let i_sat = collector_current(device, v_t, i_b, device.vce_sat);
            let flat = b_f * i_b * (1.0 + device.vce_sat / device.v_a);
            assert!(i_sat < flat, "{}: {i_sat} vs {flat}", s.id);
            // The relation solved for β_f at V_CE = V_CE,sat, E = e^(V_CE/V_T):
            // β_f = (E − 1/α_R)/(E/β_F + 1/β_R).
            let e = (device.vce_sat / v_t).exp();
            let b_formula = (e - 1.0 / alpha_r) / (e / b_f + 1.0 / b_r);
            let b_curve = collector_current(&ideal, v_t, i_b, device.vce_sat) / i_b;
            assert!(
                (b_curve / b_formula - 1.0).abs() < 1e-6,
                "{}: forced β {b_curve} vs {b_formula}",
                s.id
            );
        }
    }
}

#[test]
fn jfet_curves_follow_the_square_law_and_the_ohmic_edge() {
    // Every JFET stage of the demos: the Q point's curve, read back from the SVG, lies
    // within a pixel of the textbook JFET law at V_GS,Q (common textbook form, from
    // memory; docs/definitions.md "JFET"): with x = 1 − V_GS/V_P and d = V_DS/|V_P|,
    // I_D = I_DSS·x²·(1 + V_DS/V_A) in saturation (d ≥ x) and I_DSS·(2x·d − d²)·(1 +
    // V_DS/V_A) in the ohmic region; and it passes through the Q point.
    let mut stages = 0;
    for path in demo_chains() {
        let (chain, ev, report) = planned(&path, 0.0);
        for (i, s) in report.stages.iter().enumerate() {
            let device = chain.device_of(i);
            let Some(j) = device.jfet else { continue };
            stages += 1;
            let svg = parse(&loadlines::render(&chain, &ev, &report, i).unwrap());
            let (x_axis, y_axis) = svg.axes();
            let scale = if svg.has_text("drain current I_D (mA)") {
                1e3
            } else {
                1e6
            };
            // V_GS,Q in the n-channel frame: −|V_GS| for an n-JFET in normal bias.
            let v_gs = s.op.v_be;
            let early = |v: f64| {
                if device.v_a.is_finite() {
                    1.0 + v / device.v_a
                } else {
                    1.0
                }
            };
            let law = |v_ds: f64| {
                let x = 1.0 + v_gs / j.v_p;
                let d = v_ds / j.v_p;
                let shape = if d >= x { x * x } else { 2.0 * x * d - d * d };
                j.i_dss * shape * early(v_ds)
            };
            let q_curve = svg
                .lines
                .iter()
                .filter(|l| l.stroke.eq_ignore_ascii_case(&hex(INK)) && l.width == 2.0)
                .max_by_key(|l| l.points.len())
                .unwrap_or_else(|| panic!("{}: the Q point's curve", s.id));
            for &(px, py) in &q_curve.points {
                let want = y_axis.px(law(x_axis.value(px)) * scale);
                assert!(
                    (py - want).abs() <= 1.0,
                    "{}: curve at {px} px: {py} px, law {want} px",
                    s.id
                );
            }
            let want_q = y_axis.px(law(s.op.v_ce) * scale);
            assert!(
                (y_axis.px(s.op.i_c * scale) - want_q).abs() <= 1.0,
                "{}: Q off its own curve",
                s.id
            );
            assert!(
                svg.has_text("ohmic") || svg.has_text("clips toward ohmic"),
                "{}",
                s.id
            );
        }
    }
    assert!(stages >= 2, "{stages} JFET stages among the demos");
}

// ---------------------------------------------------------------- level diagram

/// dBu of a sine with peak `vpk`: 20·log10(V_rms/0.7746 V), 0 dBu being 1 mW into
/// 600 Ω (the dBu definition, common practice).
/// `text` with the true minus sign (U+2212) the charts write in their labels.
fn minus(text: &str) -> String {
    text.replace('-', "\u{2212}")
}

fn dbu_of_peak(vpk: f64) -> f64 {
    20.0 * (vpk / std::f64::consts::SQRT_2 / DBU_REF_VRMS).log10()
}

fn check_level_diagram(chain: &Chain, report: &PlanReport) {
    let name = format!("{:?}", report.title);
    let svg = parse(&levels::render(chain, report).unwrap());
    let (_, y) = svg.axes();
    assert!(svg.text_starting("signal level (dBu)").is_some());
    assert!(
        svg.has_title(report.title.as_deref().unwrap()),
        "{name}: title"
    );

    // Every node: its name in bold under its column, its level dot above it.
    let mut nodes: Vec<(String, f64, Option<f64>)> =
        vec![("source".into(), report.input.dbu, None)];
    for s in &report.stages {
        // A passive stage never clips: no ceiling, no headroom.
        if s.device.is_none() {
            nodes.push((s.id.clone(), s.output_dbu, None));
            continue;
        }
        let ceiling = dbu_of_peak(s.limit_up.min(s.limit_down));
        // The headroom plan reports is the distance from level to ceiling.
        assert!(
            (ceiling - s.output_dbu - s.headroom_db).abs() < 1e-9,
            "{name} {}",
            s.id
        );
        nodes.push((s.id.clone(), s.output_dbu, Some(ceiling)));
    }
    for l in &report.loads {
        nodes.push((l.id.clone(), l.output_dbu, None));
    }
    assert_eq!(
        svg.texts.iter().filter(|t| t.bold).count(),
        nodes.len(),
        "{name}: one column per node"
    );
    let column_x = |id: &str| {
        svg.texts
            .iter()
            .find(|t| t.bold && t.content == id)
            .unwrap_or_else(|| panic!("{name}: no column for {id}"))
            .x
    };
    for (id, level, ceiling) in &nodes {
        let cx = column_x(id);
        let dot = svg
            .rings
            .iter()
            .find(|r| r.r == 6.0 && (r.cx - cx).abs() <= 1.0)
            .unwrap_or_else(|| panic!("{name}: no level dot for {id}"));
        close(
            &format!("{name}: level of {id}"),
            (dot.cx, dot.cy),
            (cx, y.px(*level)),
        );
        assert!(
            svg.has_text(&minus(&format!("{level:+.1} dBu"))),
            "{name}: {id} level text"
        );
        let bars: Vec<&Line> = svg
            .lines
            .iter()
            .filter(|l| {
                (l.width == 4.0 || l.width == 7.0)
                    && l.points.len() == 2
                    && l.first().1 == l.last().1
            })
            // Longer than a legend sample (18 px).
            .filter(|l| l.length() > 25.0)
            .filter(|l| ((l.first().0 + l.last().0) / 2.0 - cx).abs() <= 1.0)
            .collect();
        match ceiling {
            Some(c) => {
                assert_eq!(bars.len(), 1, "{name}: one ceiling bar for {id}");
                close(
                    &format!("{name}: ceiling of {id}"),
                    (cx, bars[0].first().1),
                    (cx, y.px(*c)),
                );
                assert!(
                    svg.has_text(&minus(&format!("ceiling {c:+.1} dBu"))),
                    "{name}: {id} ceiling text"
                );
                let first = *id == report.first_clip.stage;
                assert_eq!(
                    (bars[0].stroke == hex(ALERT), bars[0].width == 7.0),
                    (first, first),
                    "{name}: {id} highlight"
                );
                let label = svg
                    .texts
                    .iter()
                    .find(|t| t.bold && t.content == *id)
                    .unwrap();
                assert_eq!(label.fill == hex(ALERT), first, "{name}: {id} name colour");
            }
            None => assert!(bars.is_empty(), "{name}: {id} has no ceiling"),
        }
    }
    // Gains between the columns.
    for s in &report.stages {
        let db = minus(&if s.gain_db.abs() < 0.95 {
            format!("{:+.2} dB", s.gain_db)
        } else {
            format!("{:+.1} dB", s.gain_db)
        });
        assert!(svg.has_text(&db), "{name}: gain of {} ({db})", s.id);
    }
    // Every link drawn from its driver's dot to its successor's (each fan-out branch).
    let dot = |id: &str| {
        let (_, level, _) = nodes.iter().find(|n| n.0 == id).unwrap();
        (column_x(id), y.px(*level))
    };
    let links: Vec<(String, String)> = report
        .stages
        .iter()
        .map(|s| (s.input_from.clone(), s.id.clone()))
        .chain(report.loads.iter().map(|l| (l.from.clone(), l.id.clone())))
        .collect();
    for (from, to) in links {
        let found = svg.lines.iter().any(|l| {
            l.stroke == hex(INK)
                && l.width == 2.0
                && (l.first().0 - dot(&from).0).abs() <= 1.0
                && (l.first().1 - dot(&from).1).abs() <= 1.0
                && (l.last().0 - dot(&to).0).abs() <= 1.0
                && (l.last().1 - dot(&to).1).abs() <= 1.0
        });
        assert!(found, "{name}: no line from {from} to {to}");
    }
}

#[test]
fn level_diagram_numbers_are_plans_levels_and_ceilings() {
    for path in demo_chains() {
        for louder in [0.0, 20.0] {
            let (chain, _, report) = planned(&path, louder);
            check_level_diagram(&chain, &report);
        }
    }
    // A stage feeding two branches of stages, each ending in its own load.
    let fixture = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/fan_out_stages.json");
    let (chain, _, report) = planned(&fixture, 0.0);
    assert!(report.stages.len() >= 4 && report.loads.len() == 2);
    check_level_diagram(&chain, &report);
}

// ---------------------------------------------------------------- command line

fn ampchain(args: &[&str], stdin: Option<&[u8]>) -> std::process::Output {
    use std::io::Write;
    use std::process::{Command, Stdio};
    let mut child = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .args(args)
        .stdin(if stdin.is_some() {
            Stdio::piped()
        } else {
            Stdio::null()
        })
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the binary starts");
    if let Some(bytes) = stdin {
        let _ = child.stdin.take().unwrap().write_all(bytes);
    }
    child.wait_with_output().unwrap()
}

fn succeeded(out: &std::process::Output) {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
}

fn scratch(name: &str) -> tempfile::TempDir {
    common::scratch(&format!("plots-{name}"))
}

#[test]
fn plot_commands_write_where_they_are_told() {
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let chain_s = chain.to_str().unwrap();
    let tmp = scratch("cli");
    let dir = tmp.path();

    // A folder that does not exist yet gets one file per stage, named after its id.
    let folder = dir.join("new/charts");
    let out = ampchain(
        &["plot", "loadlines", chain_s, "-o", folder.to_str().unwrap()],
        None,
    );
    succeeded(&out);
    let listed = String::from_utf8(out.stdout).unwrap();
    for id in ["input", "second", "output"] {
        let file = folder.join(format!("{id}.svg"));
        assert!(listed.contains(file.to_str().unwrap()), "{listed}");
        parse(&std::fs::read_to_string(&file).unwrap());
    }
    assert_eq!(
        std::fs::read_dir(&folder).unwrap().count(),
        3,
        "no temporary files left"
    );

    // --stage: one file, at the path given; --input changes the planned level.
    let one = dir.join("second.svg");
    let out = ampchain(
        &[
            "plot",
            "loadlines",
            chain_s,
            "--stage",
            "second",
            "--input",
            "-36 dBu",
            "-o",
            one.to_str().unwrap(),
        ],
        None,
    );
    succeeded(&out);
    let svg = parse(&std::fs::read_to_string(&one).unwrap());
    assert!(svg.has_text("clips toward saturation"));

    // The level diagram, reading the chain from standard input.
    let levels_svg = dir.join("levels.svg");
    let out = ampchain(
        &["plot", "levels", "-", "-o", levels_svg.to_str().unwrap()],
        Some(&std::fs::read(&chain).unwrap()),
    );
    succeeded(&out);
    parse(&std::fs::read_to_string(&levels_svg).unwrap());

    // An unknown stage: exit 2, naming what was found and what exists.
    let out = ampchain(
        &[
            "plot",
            "loadlines",
            chain_s,
            "--stage",
            "thrid",
            "-o",
            one.to_str().unwrap(),
        ],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("\"thrid\"") && err.contains("\"second\""),
        "{err}"
    );

    // Without --stage, -o must be a folder.
    let out = ampchain(
        &["plot", "loadlines", chain_s, "-o", one.to_str().unwrap()],
        None,
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("expected a folder"));

    // Never over the chain file.
    let copy = dir.join("chain.json");
    std::fs::copy(&chain, &copy).unwrap();
    let before = std::fs::read(&copy).unwrap();
    let copy_s = copy.to_str().unwrap();
    let out = ampchain(&["plot", "levels", copy_s, "-o", copy_s], None);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("input file"));
    assert_eq!(std::fs::read(&copy).unwrap(), before);
}

#[test]
fn current_axis_stays_near_the_operating_point() {
    // A designer reads a load-line chart around Q: the I_C axis shows the whole DC load
    // line and the planned swing, with room, but does not run tens of times past I_CQ
    // because a small AC load (a follower into a low load, a cascode's lower stage)
    // puts the AC line's intercept far up (common practice, no source). At the
    // planned level: at least 1.5·I_CQ, at most 1.5 × 1.3 × the largest of the DC
    // intercept, 2·I_CQ and the swing's ends.
    let mut cut = 0;
    for path in demo_chains() {
        let (chain, ev, report) = planned(&path, 0.0);
        // A passive stage has no load-line chart.
        for i in (0..chain.stages.len()).filter(|&i| has_chart(&chain, i)) {
            let s = &report.stages[i];
            let name = format!("{} stage {}", path.display(), s.id);
            let svg = parse(&loadlines::render(&chain, &ev, &report, i).unwrap());
            let (_, y) = svg.axes();
            let i_axis = chart_names(&chain, i).0;
            let scale = match svg
                .text_starting(i_axis)
                .unwrap()
                .content
                .strip_prefix(i_axis)
            {
                Some("mA)") => 1e3,
                _ => 1e6,
            };
            // The top of the plotting area: the saturation band spans it.
            let top_px = svg
                .lines
                .iter()
                .flat_map(|l| l.points.iter().map(|p| p.1))
                .fold(f64::INFINITY, f64::min);
            let top = y.value(top_px) / scale;
            let i_cq = s.op.i_c;
            let (cutoff, saturation) = swing_ends(&chain, &report, i);
            let dc = s.dc_load_line.expect("a transistor stage").i_c_intercept;
            let bound = 1.5
                * 1.3
                * [
                    if dc.is_finite() { dc } else { 0.0 },
                    2.0 * i_cq,
                    cutoff.1,
                    saturation.1,
                ]
                .into_iter()
                .fold(0.0, f64::max);
            assert!(
                top >= 1.5 * i_cq && top <= bound,
                "{name}: I_C axis to {top}, I_CQ {i_cq}, bound {bound}"
            );
            if s.ac_load_line.expect("a transistor stage").i_c_intercept > top {
                cut += 1;
            }
        }
    }
    // The cascode's lower stage and the split-rail pair's stages among them.
    assert!(cut >= 3, "{cut} charts cut the AC line at the top");
}

#[test]
fn a_current_fed_stage_is_charted_within_its_rails() {
    // The cascode's upper stage: its emitter is fed by the lower stage's collector,
    // nearly a current source, so its DC load line is almost flat and meets I_C = 0
    // thousands of volts out. The collector–emitter voltage of a stage cannot exceed
    // the span of its rails by much (Kirchhoff's voltage law around the rails, common
    // practice, no source): the V_CE axis ends within 10 % past the demo's 15 V
    // supply, and the Q point sits well inside the plotting area (our reading
    // margin: at least a tenth of the width from either side).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/cascode-input.json");
    let (chain, ev, report) = planned(&path, 0.0);
    let i = report
        .stages
        .iter()
        .position(|s| s.id == "upper")
        .expect("the demo's upper stage");
    let s = &report.stages[i];
    let span = report
        .rails
        .iter()
        .map(|r| r.voltage)
        .chain([0.0])
        .fold(f64::NEG_INFINITY, f64::max)
        - report
            .rails
            .iter()
            .map(|r| r.voltage)
            .chain([0.0])
            .fold(f64::INFINITY, f64::min);
    assert_eq!(span, 15.0, "the demo's supply");
    let dc = s.dc_load_line.expect("a transistor stage");
    assert!(
        dc.v_ce_intercept > 100.0 * span,
        "the demo still shows the case: DC intercept {} V",
        dc.v_ce_intercept
    );
    let svg = parse(&loadlines::render(&chain, &ev, &report, i).unwrap());
    let (x, _) = svg.axes();
    let left = svg
        .lines
        .iter()
        .flat_map(|l| l.points.iter().map(|p| p.0))
        .fold(f64::INFINITY, f64::min);
    let right = svg.plot_right();
    let v_right = x.value(right);
    assert!(
        v_right >= s.op.v_ce && v_right <= 1.1 * span,
        "V_CE axis to {v_right} V, rails span {span} V"
    );
    let q = svg
        .rings
        .iter()
        .find(|r| r.r == 6.0 && r.filled)
        .expect("the Q point");
    let f = (q.cx - left) / (right - left);
    assert!((0.1..=0.9).contains(&f), "Q at {f:.3} of the plot's width");
    // The AC load line is a slope, not a vertical stroke: its V_CE intercept is at
    // least a tenth of the width right of its I_C axis end.
    let ac = s.ac_load_line.expect("a transistor stage");
    assert!((x.px(ac.v_ce_intercept) - x.px(0.0)) >= 0.1 * (right - left));
}

#[test]
fn output_curves_are_drawn_below_the_pixel() {
    // The Early effect raises I_C by V_CE/V_A: over a few volts a fraction of a pixel
    // per sample. Drawn on whole pixels that is a staircase (runs of equal heights,
    // then a one-pixel step); drawn with sub-pixel coordinates every sample beyond the
    // knee sits strictly higher than the one before.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let (chain, ev, report) = planned(&path, 0.0);
    assert!(
        chain.device_of(1).v_a.is_finite(),
        "the demo's device has an Early voltage"
    );
    let svg = parse(&loadlines::render(&chain, &ev, &report, 1).unwrap());
    let (x, _) = svg.axes();
    let q_curve = svg
        .lines
        .iter()
        .filter(|l| l.stroke.eq_ignore_ascii_case(&hex(INK)) && l.width == 2.0)
        .max_by_key(|l| l.points.len())
        .expect("the Q point's output curve");
    assert!(
        q_curve.points.len() > 100,
        "{} points",
        q_curve.points.len()
    );
    let flat: Vec<(f64, f64)> = q_curve
        .points
        .iter()
        .copied()
        .filter(|p| x.value(p.0) > 1.0)
        .collect();
    assert!(flat.len() > 50);
    assert!(
        flat.windows(2).all(|w| w[1].1 < w[0].1),
        "a staircase: {:?}",
        &flat[..10]
    );
    assert!(flat.iter().any(|p| p.1 != p.1.round()), "whole pixels only");
}

#[test]
fn noise_densities_are_drawn_below_the_pixel() {
    // mic-preamp's densities rise over the band's first decade (20 … 200 Hz, its
    // coupling capacitors' high-pass) toward their midband value, by less than a
    // pixel per sample after the first few. Drawn on whole pixels that is a staircase;
    // with sub-pixel coordinates every sample of that decade sits strictly higher than
    // the one before.
    let dir = scratch("noise-sub-pixel");
    let file = dir.path().join("noise.svg");
    let chain = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let out = ampchain(
        &[
            "noise",
            chain.to_str().unwrap(),
            "--plot",
            file.to_str().unwrap(),
            "-o",
            dir.path().join("noise.txt").to_str().unwrap(),
        ],
        None,
    );
    succeeded(&out);
    let svg = parse(&std::fs::read_to_string(&file).unwrap());
    let curves: Vec<&Line> = svg.lines.iter().filter(|l| l.points.len() > 100).collect();
    assert_eq!(curves.len(), 4, "the total and three contributors");
    for c in curves {
        let decade = &c.points[..40];
        assert!(
            decade.windows(2).all(|w| w[1].1 < w[0].1),
            "a staircase: {:?}",
            &decade[..10]
        );
        assert!(
            decade.iter().any(|p| p.1 != p.1.round()),
            "whole pixels only"
        );
    }
}

// ---------------------------------------------------------------- large signal

/// Every text element of an SVG.
fn svg_texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).expect("the SVG is well-formed XML");
    doc.descendants()
        .filter(|n| n.has_tag_name("text"))
        .map(|n| n.text().unwrap_or("").trim().to_string())
        .collect()
}

#[test]
fn waveform_ticks_fall_on_quarter_periods_and_lanes_carry_their_scale() {
    use ampchain::large_signal::LargeSignal;
    use ampchain::plot::waveform::waveform_svg;
    use ampchain::units::format_si;
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let (chain, ev, _) = planned(&path, 0.0);
    let mut ls = LargeSignal::new(&chain, &ev, 256).unwrap();
    let e = Level::from_vrms(DBU_REF_VRMS * 10f64.powf(-38.0 / 20.0)).vpeak();
    let r = ls.level(e).unwrap();
    let svg = waveform_svg(&ls, &r, "t").unwrap();
    // Traces with sub-pixel coordinates (a crest drawn on whole pixels is a staircase):
    // one per lane (source, stages, loads).
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let fine = doc
        .descendants()
        .filter(|n| n.has_tag_name("polyline"))
        .filter(|n| {
            n.attribute("points")
                .unwrap_or("")
                .split([' ', ','])
                .filter_map(|v| v.parse::<f64>().ok())
                .any(|v| v != v.round())
        })
        .count();
    assert_eq!(fine, 1 + r.stages.len() + r.loads.len(), "sub-pixel traces");
    let texts = svg_texts(&svg);
    // Phase ticks every 90° (a sine's quarter periods), none between.
    for tick in ["0", "90", "180", "270", "360"] {
        assert!(texts.iter().any(|t| t == tick), "tick {tick}: {texts:?}");
    }
    for off in ["45", "50", "100", "150"] {
        assert!(!texts.iter().any(|t| t == off), "tick {off}");
    }
    // Each lane's scale: ± its largest excursion from the operating point, with the
    // true minus sign (U+2212) of the lane labels; no ASCII '-' before a number.
    let mut scales = vec![r.input.vpeak];
    scales.extend(
        r.stages
            .iter()
            .map(|s| s.output.peak_positive.max(s.output.peak_negative)),
    );
    scales.extend(
        r.loads
            .iter()
            .map(|l| l.output.peak_positive.max(l.output.peak_negative)),
    );
    for t in &texts {
        assert!(
            !t.chars()
                .zip(t.chars().skip(1))
                .any(|(a, b)| a == '-' && b.is_ascii_digit()),
            "ASCII minus in {t:?}"
        );
    }
    for x in scales {
        let (up, down) = (
            format!("+{}", format_si(x, "V")),
            format!("\u{2212}{}", format_si(x, "V")),
        );
        assert!(
            texts.contains(&up) && texts.contains(&down),
            "scale {up} / {down}: {texts:?}"
        );
    }
}

#[test]
fn distortion_points_below_the_floor_and_clips_beyond_the_range_are_marked() {
    use ampchain::large_signal::{level_steps, LargeSignal};
    use ampchain::plot::distortion::{distortion_svg, FLOOR_MARK, FLOOR_PERCENT};
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/hydrophone-spread.json");
    let (chain, ev, _) = planned(&path, 0.0);
    let mut ls = LargeSignal::new(&chain, &ev, 128).unwrap();
    // −80 … −50 dBu: far below every stage's load-line clip level.
    let vpk = |dbu: f64| Level::from_vrms(DBU_REF_VRMS * 10f64.powf(dbu / 20.0)).vpeak();
    let levels = ls.sweep(&level_steps(vpk(-80.0), vpk(-50.0), 5)).unwrap();
    let texts = svg_texts(&distortion_svg(&ls, &levels, "t").unwrap());
    let below = levels
        .iter()
        .flat_map(|l| l.stages.iter())
        .filter(|s| s.output.thd_percent < FLOOR_PERCENT)
        .count();
    assert!(below > 0, "the test needs points below the floor");
    assert_eq!(texts.iter().filter(|t| *t == FLOOR_MARK).count(), below);
    for p in &ls.plan {
        let clip = Level::from_vpeak(p.clip_vpeak).dbu();
        let mark = format!("clip {clip:+.1} dBu ▶");
        assert!(texts.contains(&mark), "{}: {mark} in {texts:?}", p.id);
    }
}

#[test]
fn distortion_curves_look_apart_and_passive_stages_have_no_clip_mark() {
    // Five stages, three of them passive: a passive stage never clips
    // (docs/definitions.md "Passive stages"), so it has no clip mark; and no two curves
    // are drawn alike (common practice, no source), although the palette has four
    // colours.
    use ampchain::large_signal::{level_steps, LargeSignal};
    use ampchain::plot::distortion::distortion_svg;
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/passive-controls.json");
    let (chain, ev, _) = planned(&path, 0.0);
    let mut ls = LargeSignal::new(&chain, &ev, 128).unwrap();
    let vpk = |dbu: f64| Level::from_vrms(DBU_REF_VRMS * 10f64.powf(dbu / 20.0)).vpeak();
    let levels = ls.sweep(&level_steps(vpk(-60.0), vpk(-40.0), 6)).unwrap();
    let svg = distortion_svg(&ls, &levels, "t").unwrap();
    let texts = svg_texts(&svg);
    let passive = (0..chain.stages.len())
        .filter(|&i| chain.stages[i].device.is_none())
        .count();
    assert_eq!((chain.stages.len(), passive), (5, 3), "the demo's stages");
    assert!(
        !texts.iter().any(|t| t.contains("inf") || t.contains('∞')),
        "{texts:?}"
    );
    // Every active stage's clip level lies above −40 dBu: one mark each, at the right.
    let marks = texts.iter().filter(|t| t.starts_with("clip ")).count();
    assert_eq!(marks, chain.stages.len() - passive, "{texts:?}");
    // The curves: polylines with one point per level, each with its own stroke and
    // dash pattern.
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let looks: Vec<(String, String)> = doc
        .descendants()
        .filter(|n| n.has_tag_name("polyline"))
        .filter(|n| {
            n.attribute("points")
                .is_some_and(|p| p.split_whitespace().count() == levels.len())
        })
        .map(|n| {
            (
                n.attribute("stroke").unwrap_or("").to_string(),
                n.attribute("stroke-dasharray").unwrap_or("").to_string(),
            )
        })
        .collect();
    assert_eq!(looks.len(), chain.stages.len(), "{looks:?}");
    for (i, a) in looks.iter().enumerate() {
        assert!(!looks[i + 1..].contains(a), "two curves drawn as {a:?}");
    }
}

#[test]
fn a_fan_out_arch_passes_over_the_columns_it_skips() {
    // tests/fixtures/fan_out_stages.json: "input" feeds "monitor" (next column) and
    // "second" (three columns on), so the arch to "second" skips "monitor" and
    // "phones". Over each skipped column it must run above every label and dot there
    // (SVG y grows downward).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/fan_out_stages.json");
    let (chain, _, report) = planned(&path, 0.0);
    let svg = parse(&levels::render(&chain, &report).unwrap());
    let arch = svg
        .lines
        .iter()
        .filter(|l| l.stroke.eq_ignore_ascii_case(&hex(INK)) && l.width == 2.0)
        .max_by_key(|l| l.points.len())
        .expect("the arch");
    assert!(arch.points.len() > 20, "an arch, not a straight link");
    let at = |x: f64| {
        let w = arch
            .points
            .windows(2)
            .find(|w| w[0].0 <= x && x <= w[1].0)
            .unwrap();
        let t = (x - w[0].0) / (w[1].0 - w[0].0).max(1e-9);
        w[0].1 + t * (w[1].1 - w[0].1)
    };
    let gains_bottom = svg
        .text_starting("source loading")
        .map_or(0.0, |t| t.y + 16.0);
    for name in ["monitor", "phones"] {
        let column = svg.texts.iter().find(|t| t.content == name).unwrap();
        let x = column.x;
        let y = at(x);
        let marks = svg
            .texts
            .iter()
            .filter(|t| (t.x - x).abs() < 40.0 && t.y > gains_bottom && t.y < column.y)
            .map(|t| t.y - 12.0)
            .chain(
                svg.rings
                    .iter()
                    .filter(|r| (r.cx - x).abs() < 2.0)
                    .map(|r| r.cy - r.r),
            );
        for top in marks {
            assert!(
                y < top,
                "{name}: arch at y {y:.1} crosses a mark at {top:.1}"
            );
        }
    }
}

#[test]
fn corner_labels_of_several_loads_do_not_overlap() {
    // tests/fixtures/fan_out_stages.json drives "mixer" through stage "second" and
    // "phones" beside it; with "second" turned into a small gain or a loss (its
    // collector resistor from 150 Ω up) the two loads' −3 dB points come within a
    // label's height of each other in every order. Labels on the same side whose boxes
    // share columns stand at least one line apart (text 15 px high).
    use ampchain::plot::bode::bode_svg;
    use ampchain::report::ResponseReport;
    use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/fan_out_stages.json");
    let text = std::fs::read_to_string(&path).unwrap();
    let mut checked = 0;
    for r_c in [
        "150", "180", "220", "270", "330", "390", "470", "560", "680",
    ] {
        let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
        v["stages"][1]["r_collector"] = serde_json::json!(r_c);
        let chain = Chain::from_json_str(&v.to_string()).unwrap();
        let sweep = Sweep::new(
            response::DEFAULT_FROM,
            response::DEFAULT_TO,
            DEFAULT_PER_DECADE,
        )
        .unwrap();
        let report = ResponseReport::new(&chain, &response::analyse(&chain, &sweep).unwrap());
        let svg = parse(&bode_svg(&report).unwrap());
        // Gain and phase of both loads with sub-pixel coordinates.
        let fine = svg
            .lines
            .iter()
            .filter(|l| l.points.len() > 100 && l.points.iter().any(|p| p.1 != p.1.round()))
            .count();
        assert_eq!(fine, 4, "r_collector {r_c}: sub-pixel curves");
        let labels: Vec<&Text> = svg
            .texts
            .iter()
            .filter(|t| t.content.starts_with("f_L") || t.content.starts_with("f_H"))
            .collect();
        for (i, a) in labels.iter().enumerate() {
            for b in &labels[i + 1..] {
                if a.anchor == b.anchor && (a.x - b.x).abs() < 250.0 {
                    checked += 1;
                    assert!(
                        (a.y - b.y).abs() >= 15.0,
                        "r_collector {r_c}: \"{}\" at y {} and \"{}\" at y {}",
                        a.content,
                        a.y,
                        b.content,
                        b.y
                    );
                }
            }
        }
    }
    assert!(checked >= 9, "{checked} pairs side by side");
}

// ---------------------------------------------------------------- label layout

#[test]
fn level_diagram_labels_stand_clear_of_each_other() {
    // Labels whose boxes (the chart's own estimate: 0.55 em per character, common
    // practice, no source) meet are unreadable; the demos that had them
    // (hot-source-pad, field-recorder, cascode-input, three-stage-loop) and every other
    // demo, at the planned level and 20 dB louder (labels hang below the ceilings).
    use ampchain::plot::overlapping;
    for path in demo_chains() {
        for louder in [0.0, 20.0] {
            let (chain, _, report) = planned(&path, louder);
            let labels = levels::labels(&chain, &report).unwrap();
            assert!(labels.len() > 3 * chain.stages.len(), "{}", path.display());
            // The legend's box is among them: no label may meet it either.
            assert!(
                labels.iter().any(|l| l.text == "legend"),
                "{}",
                path.display()
            );
            let clash = overlapping(&labels);
            assert!(
                clash.is_empty(),
                "{} +{louder} dB: {clash:?}",
                path.display()
            );
        }
    }
}

#[test]
fn load_line_labels_stand_clear_of_each_other() {
    // A JFET's curves bunch up below the Q point (the square law), so their labels
    // meet unless they step aside; the tags (Q, cutoff, ohmic) count too.
    use ampchain::plot::overlapping;
    let mut jfet_charts = 0;
    for path in demo_chains() {
        let (chain, ev, report) = planned(&path, 0.0);
        for i in 0..chain.stages.len() {
            if !has_chart(&chain, i) {
                continue;
            }
            let labels = loadlines::labels(&chain, &ev, &report, i).unwrap();
            if labels.iter().any(|l| l.text.starts_with("V_GS")) {
                jfet_charts += 1;
            }
            // The legend's box is among them: no label may meet it either.
            assert!(labels.iter().any(|l| l.text == "legend"));
            let clash = overlapping(&labels);
            assert!(clash.is_empty(), "{} stage {i}: {clash:?}", path.display());
        }
    }
    assert!(jfet_charts >= 4, "{jfet_charts} JFET charts");
}

#[test]
fn loop_gain_margin_labels_stand_clear_of_each_other_and_the_legend() {
    // Every demo with a feedback loop, and three-stage-loop with its loop copied
    // twice (three loops crossing 0 dB at one frequency, where margin labels one
    // fixed step apart would sit on the dots and the legend).
    use ampchain::plot::{loop_gain, overlapping};
    use ampchain::report::ResponseReport;
    use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
    let sweep = Sweep::new(
        response::DEFAULT_FROM,
        response::DEFAULT_TO,
        DEFAULT_PER_DECADE,
    )
    .unwrap();
    let mut checked = 0;
    for path in demo_chains() {
        let chain = Chain::from_json_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        let report = ResponseReport::new(&chain, &response::analyse(&chain, &sweep).unwrap());
        if report.loops.is_empty() {
            continue;
        }
        let mut reports = vec![report.clone()];
        let mut many = report.clone();
        many.loops = (0..6).map(|_| report.loops[0].clone()).collect();
        let mut low = many.clone();
        for l in &mut low.loops {
            l.magnitude_db.iter_mut().for_each(|d| *d -= 50.0);
        }
        reports.extend([many, low]);
        for r in reports {
            let labels = loop_gain::labels(&r).unwrap();
            let margins = labels
                .iter()
                .filter(|l| l.text.starts_with("phase margin"))
                .count();
            let crossings = r
                .loops
                .iter()
                .filter(|l| l.phase_margin_deg.is_some())
                .filter_map(|l| l.phase_crossing_hz)
                .filter(|f| (r.sweep.from..=r.sweep.to).contains(f))
                .count();
            assert_eq!(margins, crossings, "{}", path.display());
            assert!(labels.iter().any(|l| l.text == "legend"));
            let clash = overlapping(&labels);
            assert!(clash.is_empty(), "{}: {clash:?}", path.display());
            // Inside the magnitude panel, clear of its axes' tick labels.
            let (_, panel) = legend_and_plot(&loop_gain::loop_gain_svg(&r).unwrap());
            for l in labels.iter().filter(|l| l.text.starts_with("phase margin")) {
                let a = l.area;
                assert!(
                    a.x0 >= panel.0 && a.y0 >= panel.1 && a.x1 <= panel.2 && a.y1 <= panel.3,
                    "{}: {l:?} outside the panel {panel:?}",
                    path.display()
                );
            }
            checked += margins;
        }
    }
    assert!(checked >= 8, "{checked} margin labels");
}

// ---------------------------------------------------------------- legends

/// A box in pixels: (x0, y0, x1, y1).
type Frame = (f64, f64, f64, f64);

/// The legend's frame (the rectangle drawn in the grid colour) and the plotting area
/// of a chart's first panel (the box around its grid lines: the vertical ones that
/// start highest, the horizontal ones between their ends).
fn legend_and_plot(svg: &str) -> (Frame, Frame) {
    let doc = roxmltree::Document::parse(svg).unwrap();
    let grid = "#D8D8D8";
    let frame = doc
        .descendants()
        .find(|n| {
            n.has_tag_name("rect")
                && n.attribute("stroke") == Some(grid)
                && n.attribute("fill") == Some("none")
        })
        .expect("a legend");
    let (x, y) = (num(frame, "x"), num(frame, "y"));
    let legend = (x, y, x + num(frame, "width"), y + num(frame, "height"));
    let lines: Vec<Frame> = doc
        .descendants()
        .filter(|n| n.has_tag_name("line"))
        .map(|l| (num(l, "x1"), num(l, "y1"), num(l, "x2"), num(l, "y2")))
        .collect();
    let vertical = lines.iter().filter(|l| l.0 == l.2);
    let top = vertical
        .clone()
        .map(|l| l.1.min(l.3))
        .fold(f64::MAX, f64::min);
    let bottom = vertical
        .filter(|l| l.1.min(l.3) == top)
        .map(|l| l.1.max(l.3))
        .fold(f64::MIN, f64::max);
    let across = lines
        .iter()
        .filter(|l| l.1 == l.3 && l.1 >= top && l.1 <= bottom);
    let left = across
        .clone()
        .map(|l| l.0.min(l.2))
        .fold(f64::MAX, f64::min);
    let right = across.map(|l| l.0.max(l.2)).fold(f64::MIN, f64::max);
    (legend, (left, top, right, bottom))
}

/// Fails unless the legend of `svg` lies inside its first panel's plotting area.
fn assert_legend_inside(svg: &str, what: &str) {
    let (legend, plot) = legend_and_plot(svg);
    assert!(
        legend.0 >= plot.0 && legend.1 >= plot.1 && legend.2 <= plot.2 && legend.3 <= plot.3,
        "{what}: legend {legend:?} outside the plotting area {plot:?}"
    );
}

#[test]
fn legends_of_many_curves_stay_inside_the_plotting_area() {
    // The noise chart names each curve at length ("load "…": the 100 Ω emitter
    // resistor of stage "…""); 1 … 16 curves (as many as look apart) and on to 32
    // (eight loads, four curves each: more lines than one column holds), every line
    // drawn and the frame inside the plotting area.
    use ampchain::plot::noise::noise_svg;
    use ampchain::report::noise::{DensityCurves, LoadCurves};
    let frequencies: Vec<f64> = (0..=30)
        .map(|k| 20.0 * 1000f64.powf(k as f64 / 30.0))
        .collect();
    let flat = |v: f64| vec![v; frequencies.len()];
    for n in 1..=32usize {
        let loads: Vec<LoadCurves> = (0..n.div_ceil(4))
            .map(|j| LoadCurves {
                id: format!("headphone_amp_{j}"),
                total: flat(2e-6),
                contributors: (1..4.min(n - 4 * j))
                    .map(|k| {
                        let what =
                            format!("the {k}00 Ω emitter resistor of stage \"input_follower_{k}\"");
                        (what, flat(1e-6 / k as f64))
                    })
                    .collect(),
            })
            .collect();
        let curves = DensityCurves {
            frequencies: frequencies.clone(),
            weighting: "none",
            loads,
        };
        let svg = noise_svg(&curves, None).unwrap();
        assert_legend_inside(&svg, &format!("{n} curves"));
        let lines = svg_texts(&svg)
            .iter()
            .filter(|t| t.contains("emitter resistor") || t.ends_with("total"))
            .count();
        assert_eq!(lines, n, "{n} curves");
    }
    // The loop-gain plot's legend in its shorter magnitude panel: 1 … 16 loops (the
    // three-stage loop's, copied), every one named.
    use ampchain::plot::loop_gain::loop_gain_svg;
    use ampchain::report::ResponseReport;
    use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/three-stage-loop.json");
    let chain = Chain::from_json_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let sweep = Sweep::new(1.0, 10e6, DEFAULT_PER_DECADE).unwrap();
    let report = ResponseReport::new(&chain, &response::analyse(&chain, &sweep).unwrap());
    for n in 1..=16usize {
        let mut r = report.clone();
        r.loops = (0..n).map(|_| report.loops[0].clone()).collect();
        let svg = loop_gain_svg(&r).unwrap();
        assert_legend_inside(&svg, &format!("{n} loops"));
        let named = svg_texts(&svg)
            .iter()
            .filter(|t| t.starts_with("loop "))
            .count();
        assert_eq!(named, n, "{n} loops");
    }
}

// ---------------------------------------------------------------- Bode plot

/// The Bode plot of `chain` over `from`…`to` Hz, with its report.
fn bode_of(chain: &Chain, from: f64, to: f64) -> (ampchain::report::ResponseReport, String) {
    use ampchain::plot::bode::bode_svg;
    use ampchain::report::ResponseReport;
    use ampchain::response::{self, Sweep, DEFAULT_PER_DECADE};
    let sweep = Sweep::new(from, to, DEFAULT_PER_DECADE).unwrap();
    let report = ResponseReport::new(chain, &response::analyse(chain, &sweep).unwrap());
    let svg = bode_svg(&report).unwrap();
    (report, svg)
}

#[test]
fn bode_plot_names_corners_outside_its_range() {
    // mic-preamp's corners (about 14 Hz and 260 kHz) lie outside 100 Hz … 10 kHz: the
    // plot cannot mark them on the curve, so its legend says where they are.
    use ampchain::units::format_si;
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/mic-preamp.json");
    let (chain, _, _) = planned(&path, 0.0);
    let (report, svg) = bode_of(&chain, 100.0, 10e3);
    let low = report.loads[0].low_corner.frequency.unwrap();
    let high = report.loads[0].high_corner.frequency.unwrap();
    assert!(low < 100.0 && high > 10e3, "{low} {high}");
    let note = format!(
        "low corner {} below, high corner {} above the plotted range",
        format_si(low, "Hz"),
        format_si(high, "Hz")
    );
    let texts = svg_texts(&svg);
    assert!(texts.contains(&note), "{note:?} in {texts:?}");
    // Over a range holding both, they are marked on the curve and need no note.
    let (_, svg) = bode_of(&chain, 1.0, 10e6);
    let texts = svg_texts(&svg);
    assert!(
        !texts.iter().any(|t| t.contains("plotted range")),
        "{texts:?}"
    );
    assert!(texts.iter().any(|t| t.starts_with("f_L = ")), "{texts:?}");
}

#[test]
fn bode_curves_of_six_loads_look_apart() {
    // line-driver with four more loads on its follower: six curves, more than the
    // palette's four colours; no two drawn alike (common practice, no source).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/line-driver.json");
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    for (k, (r, c)) in [
        ("22k", "1u"),
        ("47k", "470n"),
        ("100k", "220n"),
        ("4k7", "2u2"),
    ]
    .into_iter()
    .enumerate()
    {
        let id = format!("extra{k}");
        v["loads"]
            .as_array_mut()
            .unwrap()
            .push(serde_json::json!({ "id": id, "resistance": r }));
        v["links"]
            .as_array_mut()
            .unwrap()
            .push(serde_json::json!({ "from": "follower", "to": id, "coupling": c }));
    }
    let chain = Chain::from_json_str(&v.to_string()).unwrap();
    assert_eq!(chain.loads.len(), 6);
    let (_, svg) = bode_of(&chain, 1.0, 10e6);
    let doc = roxmltree::Document::parse(&svg).unwrap();
    // The curves: polylines with sub-pixel coordinates, magnitude and phase per load.
    let looks: Vec<(String, String)> = doc
        .descendants()
        .filter(|n| n.has_tag_name("polyline"))
        .filter(|n| n.attribute("points").is_some_and(|p| p.contains('.')))
        .map(|n| {
            (
                n.attribute("stroke").unwrap_or("").to_string(),
                n.attribute("stroke-dasharray").unwrap_or("").to_string(),
            )
        })
        .collect();
    assert_eq!(looks.len(), 12, "{looks:?}");
    for k in 0..6 {
        assert_eq!(
            looks[2 * k],
            looks[2 * k + 1],
            "load {k}: gain and phase alike"
        );
        for j in 0..k {
            assert_ne!(looks[2 * j], looks[2 * k], "loads {j} and {k}");
        }
    }
}
