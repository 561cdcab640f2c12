//! The waveform at every node of the chain over one period, each node in its own lane,
//! normalised to its own largest excursion from the operating point and labelled with
//! its peaks and THD.

use super::{FONT, GRID, INK, LABEL_SIZE, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::large_signal::distortion::NodeDistortion;
use crate::large_signal::{LargeSignal, LevelResult};
use crate::units::format_si;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// One lane: a label and the samples as excursions from the operating point.
struct Lane {
    label: String,
    values: Vec<f64>,
}

/// One period in quarter periods (the x unit: ticks every 90°).
const QUARTERS: f64 = 4.0;

/// The x coordinate of a phase in degrees.
fn at(degrees: f64) -> f64 {
    degrees / 90.0
}

/// Half the height of a lane that a trace may use.
const HALF_LANE: f64 = 0.3;

/// A node's lane label: its name, peaks either side of the operating point and THD.
fn node_label(name: String, d: &NodeDistortion) -> String {
    format!(
        "{name}: +{} / −{}, THD {:.2} %",
        format_si(d.peak_positive, "V"),
        format_si(d.peak_negative, "V"),
        d.thd_percent
    )
}

/// Draw the nodes of the last period `ls` evaluated (`r` measures it) as an SVG.
pub fn waveform_svg(
    ls: &LargeSignal,
    r: &LevelResult,
    title: &str,
) -> Result<String, super::DrawError> {
    let n = ls.samples();
    let mut lanes = vec![Lane {
        label: format!(
            "source EMF: {} peak ({} dBu)",
            format_si(r.input.vpeak, "V"),
            super::minus_sign(&format!("{:+.1}", r.input.dbu))
        ),
        values: ls.emf.clone(),
    }];
    for (i, s) in r.stages.iter().enumerate() {
        // The output node, named as the stage's description names it ("collector").
        let q = ls.quiescent[i].v_out;
        let terminal = ls.plan[i].output_name;
        lanes.push(Lane {
            label: node_label(format!("stage \"{}\" ({terminal})", s.id), &s.output),
            values: ls.stage_waves[i * n..(i + 1) * n]
                .iter()
                .map(|x| x.v_out - q)
                .collect(),
        });
    }
    for (k, l) in r.loads.iter().enumerate() {
        let q = ls.quiescent_loads[k];
        lanes.push(Lane {
            label: node_label(format!("load \"{}\"", l.id), &l.output),
            values: ls.load_waves[k * n..(k + 1) * n]
                .iter()
                .map(|v| v - q)
                .collect(),
        });
    }
    let count = lanes.len() as f64;
    let mut svg = String::new();
    let mut paths = String::new();
    {
        let height = SIZE.1.max(120 * lanes.len() as u32 + 120);
        let root = SVGBackend::with_string(&mut svg, (SIZE.0, height)).into_drawing_area();
        let e = |x: DrawingAreaErrorKind<_>| super::draw_error("waveform chart")(x);
        root.fill(&WHITE).map_err(e)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(super::title_fit(title), (FONT, TITLE_SIZE))
            .margin(16)
            .x_label_area_size(44)
            .y_label_area_size(12)
            // x in quarter periods, so the ticks fall every 90°.
            .build_cartesian_2d(0.0..QUARTERS, 0.0..count)
            .map_err(e)?;
        super::house_mesh(chart            .configure_mesh()
            .disable_y_mesh()
            .disable_y_axis()
            .x_labels(5)
            .x_label_formatter(&|q| format!("{:.0}", q * 90.0))
            .x_desc("phase of the source sine (°); each trace scaled to its own largest excursion, marked ± at the right"))
            .draw()
            .map_err(e)?;
        // Traces with sub-pixel coordinates, spliced in after drawing.
        let corner = chart.backend_coord(&(0.0, 0.0));
        let map = super::PixelMap::new(corner, chart.backend_coord(&(QUARTERS, count)));
        root.draw_text(
            super::PATHS_MARK,
            &(FONT, TICK_SIZE).into_font().color(&INK),
            corner,
        )
        .map_err(e)?;
        for (j, lane) in lanes.iter().enumerate() {
            let centre = count - j as f64 - 0.5;
            let scale = lane.values.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
            let scale = if scale > 0.0 { scale } else { 1.0 };
            let look = super::curve_style(j);
            chart
                .draw_series(LineSeries::new(
                    [(0.0, centre), (QUARTERS, centre)],
                    GRID.stroke_width(1),
                ))
                .map_err(e)?;
            // The lane's voltage scale: its largest excursion either way, at the
            // heights the trace reaches with it.
            for sign in [1.0, -1.0] {
                let y = centre + sign * HALF_LANE;
                chart
                    .draw_series(LineSeries::new(
                        [(at(350.0), y), (QUARTERS, y)],
                        INK.mix(0.6).stroke_width(1),
                    ))
                    .map_err(e)?;
                let text = format!(
                    "{}{}",
                    // A true minus sign, as the lane labels' "−" (`super::minus_sign`).
                    if sign > 0.0 { "+" } else { "−" },
                    format_si(scale, "V")
                );
                chart
                    .draw_series(std::iter::once(Text::new(
                        text,
                        (at(349.0), y),
                        (FONT, TICK_SIZE)
                            .into_font()
                            .color(&INK)
                            .pos(Pos::new(HPos::Right, VPos::Center)),
                    )))
                    .map_err(e)?;
            }
            let points = lane
                .values
                .iter()
                .enumerate()
                .map(|(k, v)| {
                    (
                        QUARTERS * k as f64 / n as f64,
                        centre + HALF_LANE * v / scale,
                    )
                })
                .chain(std::iter::once((
                    QUARTERS,
                    centre + HALF_LANE * lane.values[0] / scale,
                )))
                .map(|(x, y)| map.at(x / QUARTERS, y / count));
            paths.push_str(&look.polyline(&points.collect::<Vec<_>>(), 1.0, 2));
            chart
                .draw_series(std::iter::once(Text::new(
                    lane.label.clone(),
                    (at(4.0), centre + 0.48),
                    (FONT, LABEL_SIZE).into_font().color(&INK),
                )))
                .map_err(e)?;
        }
        root.present().map_err(e)?;
    }
    Ok(super::splice_paths(svg, &paths))
}
