//! The knob chart (`plan --sweep-position … --plot`): headroom at the planned input
//! against the potentiometer's position, the chain's (the lowest stage's) as a bold
//! line and every stage with a transistor as a thin one, the 0 dB line where the
//! planned input clips, and the first clipping position marked. House style of `plot`.

use super::{ALERT, FONT, INK, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::position::PositionSweep;
use plotters::prelude::*;

/// Headroom above the lowest shown, at most (dB): a stage far from clipping leaves
/// through the top edge instead of flattening the chart.
const SPAN_DB: f64 = 60.0;

/// The knob chart of `r` as SVG text.
pub fn position_svg(r: &PositionSweep) -> Result<String, super::DrawError> {
    let draw_error = super::draw_error("knob chart");
    let finite = |x: &f64| x.is_finite();
    let chain: Vec<(f64, f64)> = r
        .rows
        .iter()
        .map(|p| (p.position, p.headroom_db))
        .filter(|p| finite(&p.1))
        .collect();
    let all = r
        .rows
        .iter()
        .flat_map(|p| p.stage_headroom_db.iter().flatten().copied())
        .chain(chain.iter().map(|p| p.1))
        .filter(finite);
    let lo = all.clone().fold(0.0, f64::min) - 3.0;
    let hi = all.fold(0.0, f64::max).min(lo + SPAN_DB) + 3.0;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(&draw_error)?;
        let title = match &r.title {
            Some(t) => super::title_fit(t),
            None => "Headroom against the knob".into(),
        };
        let area = root
            .titled(&title, (FONT, TITLE_SIZE).into_font().color(&INK))
            .map_err(&draw_error)?;
        let mut chart = ChartBuilder::on(&area)
            .margin(12)
            .margin_right(24)
            .x_label_area_size(48)
            .y_label_area_size(72)
            .build_cartesian_2d(0.0..1.0, lo..hi)
            .map_err(&draw_error)?;
        super::house_mesh(
            chart
                .configure_mesh()
                .x_desc(format!(
                    "position of potentiometer \"{}\" ({} taper)",
                    r.stage, r.taper
                ))
                .y_desc(format!(
                    "headroom at {:+.1} dBu input (dB)",
                    r.planned_input_dbu
                ))
                .x_label_formatter(&|v| super::tick_label(*v))
                .y_label_formatter(&|v| super::tick_label(*v)),
        )
        .draw()
        .map_err(&draw_error)?;
        // The chain's headroom first, so the stage that sets it shows on top.
        chart
            .draw_series(LineSeries::new(
                chain.iter().map(|&(x, h)| (x, h.min(hi))),
                INK.stroke_width(3),
            ))
            .map_err(&draw_error)?;
        let mut legend = super::Legend::new(super::Corner::UpperRight, TICK_SIZE + 1);
        legend.add(
            "chain (the first stage to clip)",
            super::Sample::line(INK, 3),
        );
        // Every stage with a transistor, thin, clamped into the chart.
        let mut colour_index = 0;
        for (k, id) in r.stages.iter().enumerate() {
            let points: Vec<(f64, f64)> = r
                .rows
                .iter()
                .filter_map(|p| p.stage_headroom_db[k].map(|h| (p.position, h.min(hi))))
                .collect();
            if points.is_empty() {
                continue;
            }
            // Styles from the second on: the chain's bold line has the first colour.
            colour_index += 1;
            let look = super::curve_style(colour_index);
            look.draw_on(&mut chart, points, 1).map_err(&draw_error)?;
            legend.add(format!("stage \"{id}\""), super::Sample::Curve(look, 1));
        }
        chart
            .draw_series(DashedLineSeries::new(
                [(0.0, 0.0), (1.0, 0.0)],
                6,
                4,
                ALERT.stroke_width(2),
            ))
            .map_err(&draw_error)?;
        legend.add(
            "0 dB: the planned input clips below",
            super::Sample::line(ALERT, 2),
        );
        // The written position.
        chart
            .draw_series(std::iter::once(PathElement::new(
                [(r.written_position, lo), (r.written_position, hi)],
                INK.mix(0.5).stroke_width(1),
            )))
            .map_err(&draw_error)?;
        legend.add(
            format!("the file's position {:.3}", r.written_position),
            super::Sample::line(INK.mix(0.5), 1),
        );
        legend
            .draw(&root, super::plot_box(&chart))
            .map_err(&draw_error)?;
        root.present().map_err(&draw_error)?;
    }
    Ok(svg)
}
