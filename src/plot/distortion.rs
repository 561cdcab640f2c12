//! THD against input level for every stage's output node, with the 1 % and 10 %
//! lines and each stage's load-line clip level marked on its curve (a stage that
//! never clips has none); a colour and dash pattern per stage ([`super::curve_style`]).

use super::{FONT, INK, LABEL_SIZE, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::large_signal::{LargeSignal, LevelResult};
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// THD values below this (percent) are drawn at this floor, marked [`FLOOR_MARK`].
pub const FLOOR_PERCENT: f64 = 1e-4;
/// The mark over a point drawn at the floor.
pub const FLOOR_MARK: &str = "▽";

/// Draw THD (percent, log scale) against source level (dBu) for every stage.
pub fn distortion_svg(
    ls: &LargeSignal,
    levels: &[LevelResult],
    title: &str,
) -> Result<String, super::DrawError> {
    if levels.len() < 2 {
        return Err(super::DrawError {
            chart: "distortion chart",
            message: "expected at least two levels".into(),
        });
    }
    let x0 = levels[0].input.dbu;
    let x1 = levels[levels.len() - 1].input.dbu;
    let top = levels
        .iter()
        .flat_map(|l| l.stages.iter().map(|s| s.output.thd_percent))
        .fold(10.0_f64, f64::max)
        * 2.0;
    let mut svg = String::new();
    let mut paths = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        let e = |x: DrawingAreaErrorKind<_>| super::draw_error("distortion chart")(x);
        root.fill(&WHITE).map_err(e)?;
        let mut chart = ChartBuilder::on(&root)
            .caption(super::title_fit(title), (FONT, TITLE_SIZE))
            .margin(16)
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(x0..x1, (FLOOR_PERCENT..top).log_scale())
            .map_err(e)?;
        super::house_mesh(
            chart
                .configure_mesh()
                .x_desc("source level (EMF, dBu); a square marks each stage's load-line clip level")
                .y_desc("THD at the stage's output (%), harmonics 2–10; ▽ below the floor"),
        )
        .draw()
        .map_err(e)?;
        for (pct, name) in [(1.0, "1 %"), (10.0, "10 %")] {
            chart
                .draw_series(LineSeries::new(
                    [(x0, pct), (x1, pct)],
                    INK.mix(0.4).stroke_width(1),
                ))
                .map_err(e)?;
            chart
                .draw_series(std::iter::once(Text::new(
                    name,
                    (x0 + 0.45 * (x1 - x0), pct * 1.25),
                    (FONT, TICK_SIZE).into_font().color(&INK),
                )))
                .map_err(e)?;
        }
        // Curves with sub-pixel coordinates (log scale: fractions of ln range),
        // spliced in after drawing.
        let corner = chart.backend_coord(&(x0, FLOOR_PERCENT));
        let map = super::PixelMap::new(corner, chart.backend_coord(&(x1, top)));
        let decades = (top / FLOOR_PERCENT).ln();
        root.draw_text(
            super::PATHS_MARK,
            &(FONT, TICK_SIZE).into_font().color(&INK),
            corner,
        )
        .map_err(e)?;
        // Upper left: the curves rise to the right, and clip marks sit at the edges.
        let mut legend = super::Legend::new(super::Corner::UpperLeft, LABEL_SIZE);
        for (i, plan) in ls.plan.iter().enumerate() {
            let look = super::curve_style(i);
            let colour = look.colour;
            let points: Vec<(f64, f64)> = levels
                .iter()
                .map(|l| {
                    (
                        l.input.dbu,
                        l.stages[i].output.thd_percent.max(FLOOR_PERCENT),
                    )
                })
                .collect();
            let in_pixels: Vec<(f64, f64)> = points
                .iter()
                .map(|&(x, y)| map.at((x - x0) / (x1 - x0), (y / FLOOR_PERCENT).ln() / decades))
                .collect();
            paths.push_str(&look.polyline(&in_pixels, 1.0, 2));
            legend.add(
                format!("stage \"{}\"", plan.id),
                super::Sample::Curve(look, 2),
            );
            // Distinct point shapes keep the curves apart in greyscale.
            let style = colour.filled();
            match i % 3 {
                0 => chart.draw_series(points.iter().map(|&p| Circle::new(p, 3, style))),
                1 => chart.draw_series(points.iter().map(|&p| TriangleMarker::new(p, 4, style))),
                _ => chart.draw_series(
                    points
                        .iter()
                        .map(|&p| Cross::new(p, 4, colour.stroke_width(2))),
                ),
            }
            .map_err(e)?;
            // Points below the axis floor: drawn at the floor, marked as such.
            let floored = levels
                .iter()
                .zip(&points)
                .filter(|(l, _)| l.stages[i].output.thd_percent < FLOOR_PERCENT)
                .map(|(_, &p)| p);
            chart
                .draw_series(floored.map(|p| {
                    Text::new(
                        FLOOR_MARK,
                        p,
                        (FONT, LABEL_SIZE)
                            .into_font()
                            .color(&colour)
                            .pos(Pos::new(HPos::Center, VPos::Bottom)),
                    )
                }))
                .map_err(e)?;
            // The load-line clip level, on the curve; outside the swept range, at the
            // edge it lies beyond, with its level. A stage without a finite clip level
            // (a passive one never clips, docs/definitions.md "Passive stages") has
            // no mark.
            let clip = crate::units::Level::from_vpeak(plan.clip_vpeak).dbu();
            if !clip.is_finite() {
                continue;
            }
            if clip <= x0 || clip >= x1 {
                let (x, y, text, h) = if clip <= x0 {
                    (
                        x0,
                        points[0].1,
                        format!("◀ clip {clip:+.1} dBu"),
                        HPos::Left,
                    )
                } else {
                    (
                        x1,
                        points[points.len() - 1].1,
                        format!("clip {clip:+.1} dBu ▶"),
                        HPos::Right,
                    )
                };
                chart
                    .draw_series(std::iter::once(Text::new(
                        text,
                        (x, y * 1.4),
                        (FONT, TICK_SIZE)
                            .into_font()
                            .color(&colour)
                            .pos(Pos::new(h, VPos::Bottom)),
                    )))
                    .map_err(e)?;
            } else {
                let k = points
                    .iter()
                    .position(|p| p.0 >= clip)
                    .unwrap_or(points.len() - 1)
                    .max(1);
                let (a, b) = (points[k - 1], points[k]);
                let t = (clip - a.0) / (b.0 - a.0);
                let y = (a.1.ln() + t * (b.1.ln() - a.1.ln())).exp();
                chart
                    .draw_series(std::iter::once(Rectangle::new(
                        [(clip - 0.4, y / 1.3), (clip + 0.4, y * 1.3)],
                        colour.stroke_width(2),
                    )))
                    .map_err(e)?;
            }
        }
        legend.draw(&root, super::plot_box(&chart)).map_err(e)?;
        root.present().map_err(e)?;
    }
    Ok(super::splice_paths(svg, &paths))
}
