//! Load-line chart of one stage: I_C against V_CE (a JFET: I_D against V_DS) with a
//! family of output curves from the device model (Ebers–Moll; the JFET's square law
//! with its ohmic region), the DC and AC load lines, the Q point, and the stretch of the
//! AC load line that the planned input covers, with its cutoff and saturation (ohmic)
//! ends. Every mark comes from the numbers `plan` reports ([`PlanReport`]); only the
//! output curves and the ohmic edge are computed here, from the device.

use super::{
    boxed_text, draw_error, DrawError, LabelBox, PlacedLabel, Sample, ALERT, FONT, GRID, INK,
    LABEL_SIZE, ORANGE, SAND, SIZE, TEAL, TICK_SIZE, TITLE_SIZE,
};
use super::{text_width, tick_label};
use crate::chain::Chain;
use crate::device::ebers_moll::collector_current;
use crate::device::jfet::Jfet;
use crate::device::model::DeviceModel;
use crate::device::Device;
use crate::evaluate::Evaluation;
use crate::headroom::LoadLine;
use crate::report::{PlanReport, StageReport};
use crate::stages::Toward;
use crate::units::{format_si, Level};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

const CHART: &str = "load-line chart";

/// A point of the (V_CE, I_C) plane: volts, amperes.
pub type Point = (f64, f64);

/// Where the marks of one stage's chart sit, all from its [`StageReport`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Geometry {
    /// Q point (V_CEQ, I_CQ) and the base current there.
    pub q: Point,
    pub i_b: f64,
    pub dc: LoadLine,
    pub ac: LoadLine,
    pub vce_sat: f64,
    /// Ends of the usable AC load line: cutoff where it meets I_C = 0, saturation where
    /// it meets V_CE = V_CE,sat (a JFET: the ohmic edge V_DS = V_GS − V_P).
    pub cutoff_limit: Point,
    pub saturation_limit: Point,
    /// Extremes of the planned swing on the AC load line, toward cutoff and toward
    /// saturation (at the limit when the stage clips on that side).
    pub swing_cutoff: Point,
    pub swing_saturation: Point,
    /// Output peak at the planned input and the output's limits on each side, in volts
    /// at the stage's output node.
    pub output_peak: f64,
    pub limit_cutoff: f64,
    pub limit_saturation: f64,
}

impl Geometry {
    /// A stage with a transistor (a passive one has no load lines). `up_toward`:
    /// which limit the stage meets when its output rises (cutoff for a
    /// common emitter, saturation for an emitter follower).
    pub fn new(s: &StageReport, up_toward: Toward, family: &Family) -> Geometry {
        let op = &s.op;
        let q = (op.v_ce, op.i_c);
        let ac = s.ac_load_line.unwrap_or_default();
        let cutoff_limit = (ac.v_ce_intercept, 0.0);
        let saturation_limit = family.knee(&ac);
        let vce_sat = saturation_limit.0;
        let (limit_cutoff, limit_saturation) = match up_toward {
            Toward::Cutoff => (s.limit_up, s.limit_down),
            Toward::Saturation | Toward::Ohmic | Toward::Rail | Toward::CurrentLimit => {
                (s.limit_down, s.limit_up)
            }
        };
        let output_peak = Level::from_vrms(s.output_vrms).vpeak();
        // The operating point moves along the AC load line in proportion to the output
        // voltage, at the same rate on both sides (docs/definitions.md's two limits are the two
        // ends of one line), so it covers output peak/limit of the way to each end.
        let toward = |end: Point, limit: f64| {
            let f = (output_peak / limit).min(1.0);
            (q.0 + f * (end.0 - q.0), q.1 + f * (end.1 - q.1))
        };
        Geometry {
            q,
            i_b: op.i_b,
            dc: s.dc_load_line.unwrap_or_default(),
            ac,
            vce_sat,
            cutoff_limit,
            saturation_limit,
            swing_cutoff: toward(cutoff_limit, limit_cutoff),
            swing_saturation: toward(saturation_limit, limit_saturation),
            output_peak,
            limit_cutoff,
            limit_saturation,
        }
    }

    /// True when the planned output peak exceeds the limit toward cutoff.
    pub fn clips_cutoff(&self) -> bool {
        self.output_peak > self.limit_cutoff
    }

    /// True when the planned output peak exceeds the limit toward saturation.
    pub fn clips_saturation(&self) -> bool {
        self.output_peak > self.limit_saturation
    }
}

/// The device family a chart draws: its names, its output curves and the edge of its
/// active region on the chart (magnitudes for a PNP or a p-JFET, as the report gives).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Family {
    /// A BJT: curves at even steps of I_B; the saturation edge V_CE = V_CE,sat.
    Bipolar { vce_sat: f64 },
    /// A JFET: curves at even steps of V_GS; the ohmic edge V_DS = V_GS − V_P.
    Jfet(Jfet),
}

impl Family {
    pub fn of(device: &Device) -> Family {
        match device.jfet_model() {
            Some(j) => Family::Jfet(j),
            None => Family::Bipolar {
                vce_sat: device.vce_sat,
            },
        }
    }

    /// The names of the output voltage and current.
    fn names(&self) -> (&'static str, &'static str) {
        match self {
            Family::Bipolar { .. } => ("V_CE", "I_C"),
            Family::Jfet(_) => ("V_DS", "I_D"),
        }
    }

    /// The axis descriptions, without the unit.
    fn axes(&self) -> (&'static str, &'static str) {
        match self {
            Family::Bipolar { .. } => ("collector–emitter voltage V_CE", "collector current I_C"),
            Family::Jfet(_) => ("drain–source voltage V_DS", "drain current I_D"),
        }
    }

    /// The side the knee end of the AC load line is named for (docs/definitions.md,
    /// swing limits: BJT "saturation", JFET "ohmic").
    fn edge_name(&self) -> &'static str {
        match self {
            Family::Bipolar { .. } => "saturation",
            Family::Jfet(_) => "ohmic",
        }
    }

    /// Drain current on the ohmic edge at V_DS = v: the square law at V_GS − V_P = V_DS,
    /// I_D = I_DSS·(V_DS/|V_P|)²·(1 + V_DS/V_A) (docs/definitions.md "JFET").
    fn ohmic_edge_current(j: &Jfet, v_ds: f64) -> f64 {
        j.saturation(v_ds - j.v_p, v_ds).i_out
    }

    /// Where the AC load line I = I_0 + slope·V meets the edge of the active region:
    /// V_CE,sat for a BJT; for a JFET the root of line − edge (the line falls, the edge
    /// rises from 0), by bisection to the last bit.
    pub fn knee(&self, ac: &LoadLine) -> Point {
        let line = |v: f64| ac.i_c_intercept + ac.slope * v;
        match self {
            Family::Bipolar { vce_sat } => (*vce_sat, line(*vce_sat)),
            Family::Jfet(j) => {
                let gap = |v: f64| line(v) - Family::ohmic_edge_current(j, v);
                if ac.i_c_intercept.is_nan() || ac.i_c_intercept <= 0.0 {
                    return (0.0, ac.i_c_intercept.max(0.0));
                }
                let mut hi = if ac.v_ce_intercept.is_finite() && ac.v_ce_intercept > 0.0 {
                    ac.v_ce_intercept
                } else {
                    j.v_p
                };
                while gap(hi) > 0.0 && hi < 1e6 {
                    hi *= 2.0;
                }
                let mut lo = 0.0;
                for _ in 0..200 {
                    let mid = 0.5 * (lo + hi);
                    if mid <= lo || mid >= hi {
                        break;
                    }
                    if gap(mid) > 0.0 {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                (lo, line(lo))
            }
        }
    }
}

/// Gate–source voltages of a JFET's curve family (frame values, V_GS − V_P > 0): even
/// steps of a quarter of the Q point's overdrive that land on V_GS,Q, as many as keep
/// the saturation current below `i_top` and the gate not forward-biased (V_GS ≤ 0).
pub fn gate_voltage_family(j: &Jfet, v_gsq: f64, i_top: f64) -> Vec<f64> {
    let step = j.overdrive(v_gsq) / 4.0;
    if step.is_nan() || step <= 0.0 {
        return vec![v_gsq];
    }
    let mut family: Vec<f64> = (-3..=12)
        .map(|k| v_gsq + f64::from(k) * step)
        .filter(|&v| j.overdrive(v) > 0.0 && v <= 1e-12 && j.saturation(v, 0.0).i_out <= i_top)
        .collect();
    if !family.iter().any(|&v| (v - v_gsq).abs() <= 1e-9 * step) {
        family.push(v_gsq);
        family.sort_by(f64::total_cmp);
    }
    family
}

/// Base currents of the output-curve family: even steps that land on the Q point's
/// I_B, as many as fit below `i_c_top` (at most about nine curves).
pub fn base_current_family(i_bq: f64, i_cq: f64, i_c_top: f64) -> Vec<f64> {
    let ratio = i_c_top / i_cq;
    let step = if ratio <= 2.5 {
        i_bq / 4.0
    } else if ratio <= 4.5 {
        i_bq / 2.0
    } else if ratio <= 9.0 {
        i_bq
    } else {
        i_bq * (ratio / 8.0).ceil()
    };
    let mut family: Vec<f64> = (1..)
        .map(|k| k as f64 * step)
        .take_while(|i_b| i_b * i_cq / i_bq <= i_c_top)
        .collect();
    if !family.iter().any(|i_b| (i_b / i_bq - 1.0).abs() < 1e-9) {
        family.push(i_bq);
        family.sort_by(f64::total_cmp);
    }
    family
}

/// V_CE sample points from 0 to `v_max`: dense over the first volt, where the curves
/// bend into saturation, then even.
fn v_ce_samples(v_max: f64) -> Vec<f64> {
    let knee = v_max.min(1.0);
    let mut v: Vec<f64> = (0..=60).map(|k| knee * (k as f64 / 60.0).powi(2)).collect();
    v.extend((1..=120).map(|k| knee + (v_max - knee) * k as f64 / 120.0));
    v
}

/// Scale and unit name for currents up to `top` amperes on the I_C axis.
fn current_unit(top: f64) -> (f64, &'static str) {
    if top >= 1e-3 {
        (1e3, "mA")
    } else {
        (1e6, "µA")
    }
}

/// The load-line chart of stage `stage` as an SVG document.
pub fn render(
    chain: &Chain,
    ev: &Evaluation,
    report: &PlanReport,
    stage: usize,
) -> Result<String, DrawError> {
    render_with_labels(chain, ev, report, stage).map(|(svg, _)| svg)
}

/// The tags and curve labels [`render`] writes, with the boxes it reckons them to cover.
pub fn labels(
    chain: &Chain,
    ev: &Evaluation,
    report: &PlanReport,
    stage: usize,
) -> Result<Vec<PlacedLabel>, DrawError> {
    render_with_labels(chain, ev, report, stage).map(|(_, labels)| labels)
}

fn render_with_labels(
    chain: &Chain,
    ev: &Evaluation,
    report: &PlanReport,
    stage: usize,
) -> Result<(String, Vec<PlacedLabel>), DrawError> {
    let s = &report.stages[stage];
    let device = chain.device_of(stage);
    let family = Family::of(device);
    let g = Geometry::new(s, ev.headroom[stage].swing.up_toward, &family);
    let rails = chain.stage_rails(stage);
    let v_top = voltage_top(&g, (rails.top - rails.bottom).abs());
    let mut svg = String::new();
    let (curves, labels) = {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        let drawn =
            draw(&root, report, s, device, &family, &g, v_top).map_err(draw_error(CHART))?;
        root.present().map_err(draw_error(CHART))?;
        drawn
    };
    Ok((super::splice_paths(svg, &curves), labels))
}

/// Draw the chart; returns the output curves as SVG polylines, for
/// [`super::splice_paths`], and the labels it placed.
fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    report: &PlanReport,
    s: &StageReport,
    device: &Device,
    family: &Family,
    g: &Geometry,
    v_top: f64,
) -> Result<(String, Vec<PlacedLabel>), DrawingAreaErrorKind<DB::ErrorType>> {
    let (v_name, i_name) = family.names();
    let edge = family.edge_name();
    root.fill(&WHITE)?;
    let title = report.title.as_deref().unwrap_or("ampchain");
    let body = root.titled(
        &super::title_fit(title),
        (FONT, TITLE_SIZE).into_font().color(&INK),
    )?;

    // Two lines under the title: the stage and its Q point; the planned swing.
    let (w, _) = body.dim_in_pixel();
    let sub = TextStyle::from((FONT, LABEL_SIZE).into_font())
        .color(&INK)
        .pos(Pos::new(HPos::Center, VPos::Top));
    let kind = s.kind.replace('_', " ");
    // A PNP's or p-JFET's chart is drawn with magnitudes (V_EC, |I_C|), as its report
    // gives them.
    let line1 = match family {
        Family::Bipolar { .. } => {
            let polarity = match device.polarity {
                crate::device::Polarity::Npn => "",
                crate::device::Polarity::Pnp => "PNP, magnitudes, ",
            };
            format!(
                "stage \"{}\", {kind}, device {} ({polarity}β {}, V_CE,sat {}) · Q: V_CE {}, I_C {}, I_B {}",
                s.id,
                s.device.as_deref().unwrap_or("none"),
                device.beta,
                format_si(device.vce_sat, "V"),
                format_si(g.q.0, "V"),
                format_si(g.q.1, "A"),
                format_si(g.i_b, "A"),
            )
        }
        Family::Jfet(j) => {
            let channel = if j.sign > 0.0 {
                "n-JFET"
            } else {
                "p-JFET, magnitudes"
            };
            format!(
                "stage \"{}\", {kind}, device {} ({channel}, I_DSS {}, V_P {}) · Q: V_DS {}, I_D {}, V_GS {}",
                s.id,
                s.device.as_deref().unwrap_or("none"),
                format_si(j.i_dss, "A"),
                format_si(-j.sign * j.v_p, "V"),
                format_si(g.q.0, "V"),
                format_si(g.q.1, "A"),
                format_si(j.sign * s.op.v_be, "V"),
            )
        }
    };
    let line2 = format!(
        "planned input {:+.1} dBu → output {} peak: {v_name} swings {} to {}, {i_name} {} to {}",
        report.input.dbu,
        format_si(g.output_peak, "V"),
        format_si(g.swing_saturation.0, "V"),
        format_si(g.swing_cutoff.0, "V"),
        format_si(g.swing_saturation.1, "A"),
        format_si(g.swing_cutoff.1, "A"),
    );
    let line3 = format!(
        "output limits on the AC load line: {} toward cutoff, {} toward {edge}; headroom {:+.1} dB",
        format_si(g.limit_cutoff, "V"),
        format_si(g.limit_saturation, "V"),
        s.headroom_db,
    );
    for (k, line) in [line1, line2, line3].iter().enumerate() {
        body.draw_text(line, &sub, (w as i32 / 2, 2 + 20 * k as i32))?;
    }
    let (_, area) = body.split_vertically(66);

    // Axis ranges: V_CE from `voltage_top`; I_C with room above for the legend.
    let i_top = current_top(g);
    let (scale, unit) = current_unit(i_top);
    let y_top = i_top * scale;

    let mut chart = ChartBuilder::on(&area)
        .margin_left(12)
        .margin_right(28)
        .margin_bottom(8)
        .x_label_area_size(52)
        .y_label_area_size(76)
        .build_cartesian_2d(0.0..v_top, 0.0..y_top)?;
    chart
        .configure_mesh()
        .light_line_style(GRID.mix(0.3))
        .bold_line_style(GRID)
        .axis_style(INK)
        .x_desc(format!("{} (V)", family.axes().0))
        .y_desc(format!("{} ({unit})", family.axes().1))
        .axis_desc_style((FONT, LABEL_SIZE).into_font().color(&INK))
        .label_style((FONT, TICK_SIZE).into_font().color(&INK))
        .x_label_formatter(&|v| tick_label(*v))
        .y_label_formatter(&|v| tick_label(*v))
        .draw()?;
    let at = |p: Point| (p.0, p.1 * scale);
    let mut legend = super::Legend::new(super::Corner::UpperRight, TICK_SIZE);

    match family {
        // Saturation region: V_CE below V_CE,sat.
        Family::Bipolar { vce_sat } => {
            chart.draw_series(std::iter::once(Rectangle::new(
                [(0.0, 0.0), (*vce_sat, y_top)],
                SAND.mix(0.7).filled(),
            )))?;
            let text = format!("saturation region (V_CE < {})", format_si(*vce_sat, "V"));
            legend.add(text, Sample::block(SAND));
        }
        // Ohmic region: left of the edge V_DS = V_GS − V_P, i.e. above the edge's
        // current I_DSS·(V_DS/|V_P|)²·(1 + V_DS/V_A), up to the chart's top.
        Family::Jfet(j) => {
            let mut area: Vec<(f64, f64)> = vec![(0.0, 0.0)];
            area.extend(
                v_ce_samples(v_top)
                    .into_iter()
                    .map(|v| (v, Family::ohmic_edge_current(j, v)))
                    .take_while(|&(_, i)| i <= i_top)
                    .map(at),
            );
            let last_v = area.last().map_or(0.0, |p| p.0);
            area.push((last_v, y_top));
            area.push((0.0, y_top));
            chart.draw_series(std::iter::once(Polygon::new(area, SAND.mix(0.7).filled())))?;
            legend.add("ohmic region (V_DS < V_GS − V_P)", Sample::block(SAND));
        }
    }

    // Output characteristics around the Q point: at base currents (Ebers–Moll), or at
    // gate–source voltages (the JFET's law in every region). The curves rise with the
    // output voltage by the Early factor (1 + V/V_A): keep the top one below the load
    // lines at the right edge too.
    let early = |v: f64| 1.0 + v / device.v_a;
    let curve_top = i_top / 1.3 * early(g.q.0) / early(v_top);
    let curves_at: Vec<(f64, bool)> = match family {
        Family::Bipolar { .. } => base_current_family(g.i_b, g.q.1, curve_top)
            .into_iter()
            .map(|i_b| (i_b, (i_b / g.i_b - 1.0).abs() < 1e-9))
            .collect(),
        Family::Jfet(j) => {
            let v_gsq = s.op.v_be;
            gate_voltage_family(j, v_gsq, curve_top / early(0.0))
                .into_iter()
                .map(|v| (v, (v - v_gsq).abs() <= 1e-9 * j.overdrive(v_gsq)))
                .collect()
        }
    };
    let current = |x: f64, v: f64| match family {
        Family::Bipolar { .. } => collector_current(device, report.thermal_voltage, x, v),
        // The frame's V_GS = x, V_GD = x − V_DS.
        Family::Jfet(j) => j.large_signal(report.thermal_voltage, x, x - v).i_c,
    };
    let samples = v_ce_samples(v_top);
    let curve_ink = INK.mix(0.8);
    let tick_style = TextStyle::from((FONT, TICK_SIZE).into_font())
        .color(&curve_ink)
        .pos(Pos::new(HPos::Right, VPos::Bottom));
    let corner = chart.backend_coord(&(0.0, 0.0));
    let map = super::PixelMap::new(corner, chart.backend_coord(&(v_top, y_top)));
    let pixel = |(v, i): (f64, f64)| map.at(v / v_top, i / y_top);
    let mut curves = String::new();
    // Each curve's label: its text, its parameter and the V_CE where the curve ends.
    let mut curve_labels: Vec<(String, f64, f64)> = Vec::new();
    root.draw_text(super::PATHS_MARK, &tick_style, corner)?;
    legend.add(
        match family {
            Family::Bipolar { .. } => "output curves, Ebers–Moll, at even steps of I_B",
            Family::Jfet(_) => "output curves, square law, at even steps of V_GS",
        },
        Sample::line(INK.mix(0.35), 1),
    );
    for &(x, is_q) in &curves_at {
        let points: Vec<(f64, f64)> = samples
            .iter()
            .map(|&v| (v, current(x, v).max(0.0)))
            .take_while(|&(_, i)| i <= i_top)
            .map(at)
            .collect();
        let Some(&last) = points.last() else { continue };
        let in_pixels: Vec<(f64, f64)> = points.into_iter().map(pixel).collect();
        curves.push_str(&if is_q {
            super::polyline(&in_pixels, &INK, 0.7, 2)
        } else {
            super::polyline(&in_pixels, &INK, 0.35, 1)
        });
        let text = match (family, is_q) {
            (Family::Bipolar { .. }, true) => format!("I_B {} (Q)", format_si(x, "A")),
            (Family::Bipolar { .. }, false) => format_si(x, "A"),
            (Family::Jfet(j), true) => format!("V_GS {} (Q)", format_si(j.sign * x, "V")),
            (Family::Jfet(j), false) => format_si(j.sign * x, "V"),
        };
        curve_labels.push((text, x, last.0));
    }

    // Load lines, intercept to intercept. A stage whose load and emitter see the same
    // resistance for DC and signal has one line; the legend says so.
    let near = |a: f64, b: f64| (a - b).abs() <= 5e-3 * a.abs().max(b.abs());
    let same_line = near(g.dc.v_ce_intercept, g.ac.v_ce_intercept)
        && near(g.dc.i_c_intercept, g.ac.i_c_intercept);
    // A DC intercept beyond the V_CE axis (an emitter fed by a current source, the
    // upper stage of a cascode) is drawn to the right edge, and the legend names it.
    let dc_label = if g.dc.v_ce_intercept.is_finite() && g.dc.v_ce_intercept > v_top {
        format!(
            "DC load line ({v_name} intercept {}, off the chart)",
            format_si(g.dc.v_ce_intercept, "V")
        )
    } else {
        String::from("DC load line")
    };
    chart.draw_series(LineSeries::new(
        below(segment(&g.dc, v_top), i_top).map(at),
        TEAL.stroke_width(2),
    ))?;
    legend.add(dc_label, Sample::line(TEAL, 2));
    chart.draw_series(LineSeries::new(
        below(segment(&g.ac, v_top), i_top).map(at),
        ORANGE.stroke_width(2),
    ))?;
    let ac_label = if same_line {
        "AC load line (on the DC load line)"
    } else {
        "AC load line"
    };
    legend.add(ac_label, Sample::line(ORANGE, 2));

    // The stretch the planned input covers, and its two ends.
    chart.draw_series(LineSeries::new(
        [at(g.swing_saturation), at(g.swing_cutoff)],
        ORANGE.mix(0.85).stroke_width(7),
    ))?;
    let swing_label = format!("planned swing at {:+.1} dBu input", report.input.dbu);
    legend.add(swing_label, Sample::line(ORANGE, 7));
    chart.draw_series(
        [g.swing_saturation, g.swing_cutoff]
            .into_iter()
            .map(|p| Circle::new(at(p), 4, INK.filled())),
    )?;

    // Limits of the usable AC load line: hollow rings; a clipping side gets a cross.
    // A limit above the chart (a small AC load) is marked where its line leaves the
    // top edge, and its tag says so.
    let saturation_mark = on_chart(&g.ac, g.saturation_limit, i_top);
    chart.draw_series(
        [saturation_mark, g.cutoff_limit]
            .into_iter()
            .map(|p| Circle::new(at(p), 5, INK.stroke_width(2))),
    )?;
    for (clips, p) in [
        (g.clips_cutoff(), g.cutoff_limit),
        (g.clips_saturation(), saturation_mark),
    ] {
        if clips {
            chart.draw_series(std::iter::once(Cross::new(at(p), 9, ALERT.stroke_width(3))))?;
        }
    }

    // Q point on top of everything.
    chart.draw_series(std::iter::once(Circle::new(at(g.q), 6, INK.filled())))?;

    // Tags beside the marks, in pixels; a tag that would run past the right edge goes
    // to the left of its mark instead.
    let (width, _) = root.dim_in_pixel();
    let mut tags: Vec<(String, RGBColor, Pos, (i32, i32))> = Vec::new();
    let mut tag = |text: &str, colour: RGBColor, v: VPos, at: (i32, i32), dx: i32, dy: i32| {
        // A negative `dx` asks for the left side.
        let fits =
            dx > 0 && f64::from(at.0 + dx) + text_width(text, LABEL_SIZE) < f64::from(width) - 6.0;
        let dx = dx.abs();
        let (h, x) = if fits {
            (HPos::Left, at.0 + dx)
        } else {
            (HPos::Right, at.0 - dx)
        };
        tags.push((text.to_string(), colour, Pos::new(h, v), (x, at.1 + dy)));
    };
    let q_px = chart.backend_coord(&at(g.q));
    tag("Q", INK, VPos::Bottom, q_px, 8, -6);
    let above = if saturation_mark == g.saturation_limit {
        String::from(edge)
    } else {
        format!("{edge} ↑ at {}", format_si(g.saturation_limit.1, "A"))
    };
    // Off the top, the tag goes below and left of the mark, clear of the legend.
    let (sat_v, sat_dy, sat_dx) = if saturation_mark == g.saturation_limit {
        (VPos::Center, 0, 10_i32)
    } else {
        (VPos::Top, 8, -10)
    };
    let ends = [
        (
            g.clips_cutoff(),
            g.cutoff_limit,
            "cutoff",
            VPos::Bottom,
            -8,
            10,
        ),
        (
            g.clips_saturation(),
            saturation_mark,
            above.as_str(),
            sat_v,
            sat_dy,
            sat_dx,
        ),
    ];
    for (clips, limit, side, v, dy, dx) in ends {
        let px = chart.backend_coord(&at(limit));
        if clips {
            tag(
                &format!("clips toward {side}"),
                ALERT,
                v,
                px,
                dx + dx.signum() * 2,
                dy,
            );
        } else {
            tag(side, INK, v, px, dx, dy);
        }
    }
    let mut placed: Vec<PlacedLabel> = tags
        .iter()
        .map(|(text, _, pos, at)| PlacedLabel {
            text: text.clone(),
            area: LabelBox::of(text, LABEL_SIZE, *pos, *at),
        })
        .collect();
    // The Q point and the limit rings are kept clear too (untitled: not labels).
    let dots: Vec<PlacedLabel> = [(g.q, 6.0), (saturation_mark, 5.0), (g.cutoff_limit, 5.0)]
        .into_iter()
        .map(|(p, r)| PlacedLabel::dot(chart.backend_coord(&at(p)), r))
        .collect();
    placed.extend(dots);
    // The legend is kept clear too.
    let plot = super::plot_box(&chart);
    placed.push(legend.area(plot));

    // Curve labels, from the top curve down, each above its curve's right end. Rule:
    // one whose box meets a tag or a label placed before it steps left along its curve,
    // a label's width and 8 px at a time, over the right half of the chart; one that
    // finds no clear spot there is drawn at the end (and meets its neighbour).
    let curve_pos = Pos::new(HPos::Right, VPos::Bottom);
    for (text, x, v_end) in curve_labels.iter().rev() {
        let step = text_width(text, TICK_SIZE) + 8.0;
        let spot = |k: usize| {
            let (px, _) = chart.backend_coord(&(*v_end, 0.0));
            let right = f64::from(px - 4) - step * k as f64;
            let v = v_top * (right - map.x0) / (map.x1 - map.x0);
            let (_, py) = pixel((v, current(*x, v).max(0.0) * scale));
            let at = (right as i32, py as i32 - 3);
            (at, LabelBox::of(text, TICK_SIZE, curve_pos, at))
        };
        let in_right_half = |(_, b): &((i32, i32), LabelBox)| b.x0 > (map.x0 + map.x1) / 2.0;
        let (at, area) = super::first_clear(&placed, (0..8).map(spot).filter(in_right_half))
            .unwrap_or_else(|| spot(0));
        root.draw_text(text, &tick_style, at)?;
        placed.push(PlacedLabel {
            text: text.clone(),
            area,
        });
    }

    legend.draw(root, plot)?;

    for (text, colour, pos, at) in &tags {
        let style = TextStyle::from((FONT, LABEL_SIZE).into_font())
            .color(colour)
            .pos(*pos);
        boxed_text(root, text, &style, LABEL_SIZE, *at)?;
    }
    placed.retain(|l| !l.text.is_empty());
    Ok((curves, placed))
}

/// Top of the I_C axis: 1.3 times the largest of the DC load line's intercept, twice
/// I_CQ and the planned swing, and the AC load line's intercept when that is not much
/// more. A small AC load (a follower into a low load, a cascode's lower stage) puts the
/// AC intercept tens of times above I_CQ; the axis then stays where a designer looks,
/// and the AC line leaves through the top edge.
pub fn current_top(g: &Geometry) -> f64 {
    let finite = |v: f64| if v.is_finite() { v } else { 0.0 };
    let i_lines = finite(g.dc.i_c_intercept)
        .max(2.0 * g.q.1)
        .max(g.swing_cutoff.1)
        .max(g.swing_saturation.1);
    let ac = finite(g.ac.i_c_intercept);
    1.3 * if ac <= 1.5 * i_lines {
        i_lines.max(ac)
    } else {
        i_lines
    }
}

/// Right end of the V_CE axis (V_DS for a JFET): 1.04 times the largest of the DC and
/// AC load lines' V_CE intercepts and 1.2·V_CEQ, where the DC intercept counts only up
/// to what the stage can reach: the span of its rails, 1.2·V_CEQ or the AC intercept,
/// whichever is largest. An emitter fed by a current source (a cascode's upper stage)
/// sees a DC load line of nearly zero slope whose intercept lies thousands of volts
/// out; the chart then ends near the rails and the DC line leaves through its right
/// edge. An infinite intercept (a horizontal DC line) does not set the range.
pub fn voltage_top(g: &Geometry, rail_span: f64) -> f64 {
    let finite = |v: f64| if v.is_finite() { v } else { 0.0 };
    let ac = finite(g.ac.v_ce_intercept);
    let reach = rail_span.max(1.2 * g.q.0).max(ac);
    1.04 * finite(g.dc.v_ce_intercept)
        .min(reach)
        .max(ac)
        .max(1.2 * g.q.0)
}

/// The part of a segment at or below `i_top` (a straight line leaving the top edge
/// is cut there).
fn below(seg: [(f64, f64); 2], i_top: f64) -> [(f64, f64); 2] {
    let [a, b] = seg;
    let cut = |p: (f64, f64), q: (f64, f64)| {
        if p.1 <= i_top {
            p
        } else {
            let t = (p.1 - i_top) / (p.1 - q.1);
            (p.0 + t * (q.0 - p.0), i_top)
        }
    };
    [cut(a, b), cut(b, a)]
}

/// `p` on `line`, or where the line crosses `i_top` when `p` is above it.
fn on_chart(line: &LoadLine, p: Point, i_top: f64) -> Point {
    if p.1 <= i_top || line.slope == 0.0 {
        return p;
    }
    ((i_top - line.i_c_intercept) / line.slope, i_top)
}

/// A load line's ends on the chart: intercept to intercept, or, when the V_CE
/// intercept is beyond the chart's right edge or infinite (slope 0), from the I_C
/// axis to that edge.
fn segment(line: &LoadLine, v_right: f64) -> [(f64, f64); 2] {
    if line.v_ce_intercept.is_finite() && line.v_ce_intercept <= v_right {
        [(0.0, line.i_c_intercept), (line.v_ce_intercept, 0.0)]
    } else {
        [
            (0.0, line.i_c_intercept),
            (v_right, line.i_c_intercept + line.slope * v_right),
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn family_lands_on_the_q_point_and_stays_in_range() {
        // Common practice, no source: a handful of evenly spaced curves, one through Q.
        for (i_bq, i_cq, top) in [(2e-6, 4e-4, 9e-4), (1e-5, 1e-3, 3.3e-3), (1e-5, 1e-3, 4e-2)] {
            let f = base_current_family(i_bq, i_cq, top);
            assert!(f.iter().any(|&i| (i / i_bq - 1.0).abs() < 1e-9), "{f:?}");
            assert!((2..=10).contains(&f.len()), "{f:?}");
            assert!(f.iter().all(|&i| i * i_cq / i_bq <= top * (1.0 + 1e-12)));
            assert!(f.windows(2).all(|w| w[0] < w[1]));
        }
    }
}
