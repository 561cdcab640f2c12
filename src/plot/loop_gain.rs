//! Loop-gain Bode plot of every feedback loop: |T| in dB above (with the 0 dB line),
//! the phase of T below, on the sweep's logarithmic frequency axis; each loop's unity
//! crossing that sets its phase margin marked with the margin (docs/definitions.md
//! "Margins"). House style of `plot`.

use super::bode::{db_range, unwrap_phase, FrequencyAxis};
use super::{LabelBox, PlacedLabel, FONT, INK, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::report::ResponseReport;
use crate::units::format_si;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

fn draw_error<E: std::fmt::Debug>(e: E) -> super::DrawError {
    super::DrawError {
        chart: "loop-gain plot",
        message: format!("{e:?}"),
    }
}

/// The loop-gain plot of `r` as SVG text (`r.loops` must not be empty).
pub fn loop_gain_svg(r: &ResponseReport) -> Result<String, super::DrawError> {
    render_with_labels(r).map(|(svg, _)| svg)
}

/// The margin labels [`loop_gain_svg`] writes and its legend, with the boxes it reckons
/// them to cover.
pub fn labels(r: &ResponseReport) -> Result<Vec<PlacedLabel>, super::DrawError> {
    render_with_labels(r).map(|(_, labels)| labels)
}

fn render_with_labels(r: &ResponseReport) -> Result<(String, Vec<PlacedLabel>), super::DrawError> {
    let mut svg = String::new();
    let mut placed: Vec<PlacedLabel> = Vec::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(draw_error)?;
        let title = format!(
            "Loop gain T: {}",
            r.title.as_deref().unwrap_or("feedback loops")
        );
        let area = root
            .titled(
                &super::title_fit(&title),
                (FONT, TITLE_SIZE).into_font().color(&INK),
            )
            .map_err(draw_error)?;
        let (upper, lower) = area.split_vertically(SIZE.1 * 56 / 100);
        let (from, to) = (r.sweep.from, r.sweep.to);
        let axis = FrequencyAxis::new(from, to);
        let x_axis = || axis.coord();
        let finite = |v: &[f64]| {
            v.iter()
                .copied()
                .filter(|x| x.is_finite())
                .collect::<Vec<_>>()
        };
        let all_db: Vec<f64> = r
            .loops
            .iter()
            .flat_map(|l| finite(&l.magnitude_db))
            .collect();
        let hi = all_db.iter().copied().fold(0.0_f64, f64::max);
        let lo = all_db.iter().copied().fold(0.0_f64, f64::min);
        let (y_lo, y_hi) = db_range(lo, hi, 160.0);
        let mut mag = ChartBuilder::on(&upper)
            .margin_top(8)
            .margin_left(12)
            .margin_right(24)
            .x_label_area_size(28)
            .y_label_area_size(64)
            .build_cartesian_2d(x_axis(), y_lo..y_hi)
            .map_err(draw_error)?;
        super::house_mesh(
            mag.configure_mesh()
                .x_label_formatter(&|f| axis.label(*f))
                .y_label_formatter(&|y| format!("{y:.0}"))
                .y_desc("|T| (dB)"),
        )
        .draw()
        .map_err(draw_error)?;
        // |T| = 1: where the phase margin is read.
        mag.draw_series(LineSeries::new(
            [(from, 0.0), (to, 0.0)],
            INK.stroke_width(1),
        ))
        .map_err(draw_error)?;

        let unwrapped: Vec<Vec<f64>> = r
            .loops
            .iter()
            .map(|l| {
                let m: Vec<f64> = l
                    .magnitude_db
                    .iter()
                    .map(|d| 10f64.powf(d / 20.0))
                    .collect();
                unwrap_phase(&l.phase_deg, &m)
            })
            .collect();
        let phases: Vec<f64> = unwrapped.iter().flat_map(|p| finite(p)).collect();
        let p_lo = (phases.iter().copied().fold(-180.0_f64, f64::min) / 45.0).floor() * 45.0;
        let p_hi = (phases.iter().copied().fold(0.0_f64, f64::max) / 45.0).ceil() * 45.0;
        let mut phase = ChartBuilder::on(&lower)
            .margin_top(4)
            .margin_left(12)
            .margin_right(24)
            .margin_bottom(8)
            .x_label_area_size(48)
            .y_label_area_size(64)
            .build_cartesian_2d(x_axis(), p_lo..p_hi.max(p_lo + 45.0))
            .map_err(draw_error)?;
        super::house_mesh(
            phase
                .configure_mesh()
                .x_label_formatter(&|f| axis.label(*f))
                .y_label_formatter(&|y| format!("{y:.0}°"))
                .x_desc("frequency (Hz)")
                .y_desc("phase of T (°)"),
        )
        .draw()
        .map_err(draw_error)?;
        let mut legend = super::Legend::new(super::Corner::UpperRight, TICK_SIZE + 1);
        for (k, l) in r.loops.iter().enumerate() {
            legend.add(
                format!("loop {} → {}", l.from, l.to),
                super::Sample::Curve(super::curve_style(k), 2),
            );
        }
        let plot = super::plot_box(&mag);
        placed.push(legend.area(plot));
        // Each loop's unity crossing: its dot, then its margin label.
        let mut margins = Vec::new();
        for (k, l) in r.loops.iter().enumerate() {
            let look = super::curve_style(k);
            let colour = look.colour;
            let points = |ys: &[f64]| -> Vec<(f64, f64)> {
                r.frequencies
                    .iter()
                    .zip(ys)
                    .filter(|(_, y)| y.is_finite())
                    .map(|(&f, &y)| (f, y))
                    .collect()
            };
            let clipped: Vec<f64> = l.magnitude_db.iter().map(|d| d.max(y_lo)).collect();
            look.draw_on(&mut mag, points(&clipped), 2)
                .map_err(draw_error)?;
            look.draw_on(&mut phase, points(&unwrapped[k]), 2)
                .map_err(draw_error)?;
            if let (Some(pm), Some(f)) = (l.phase_margin_deg, l.phase_crossing_hz) {
                if f >= from && f <= to {
                    let dash = colour.mix(0.8).stroke_width(1);
                    mag.draw_series(DashedLineSeries::new([(f, y_lo), (f, y_hi)], 6, 4, dash))
                        .map_err(draw_error)?;
                    mag.draw_series(std::iter::once(Circle::new((f, 0.0), 4, colour.filled())))
                        .map_err(draw_error)?;
                    let at = mag.backend_coord(&(f, 0.0));
                    let label = format!("phase margin {pm:.1}° at {}", format_si(f, "Hz"));
                    placed.push(PlacedLabel::dot(at, 4.0));
                    margins.push((at, colour, label));
                }
            }
        }
        // Beside its dot, on the side with room for the text, below the 0 dB line and
        // then above it, a line further out at a time: the first spot whose box meets
        // no dot, no label placed before and not the legend.
        let size = TICK_SIZE + 1;
        for ((px, py), colour, label) in margins {
            let right_half = px > SIZE.0 as i32 / 2;
            let (h, x) = if right_half {
                (HPos::Right, px - 8)
            } else {
                (HPos::Left, px + 8)
            };
            let spots = (0..16).flat_map(|k| {
                [
                    (Pos::new(h, VPos::Top), (x, py + 8 + 18 * k)),
                    (Pos::new(h, VPos::Bottom), (x, py - 8 - 18 * k)),
                ]
            });
            let candidates =
                spots.map(|(pos, at)| ((pos, at), LabelBox::of(&label, size, pos, at)));
            let inside = |(_, b): &(_, LabelBox)| {
                b.y0 >= plot.y0 && b.y1 <= plot.y1 && b.x0 >= plot.x0 && b.x1 <= plot.x1
            };
            let all: Vec<_> = candidates.collect();
            let ((pos, at), area) =
                super::first_clear(&placed, all.iter().copied().filter(inside)).unwrap_or(all[0]);
            let text = (FONT, size).into_font().color(&colour).pos(pos);
            root.draw_text(&label, &text, at).map_err(draw_error)?;
            placed.push(PlacedLabel { text: label, area });
        }
        legend.draw(&root, plot).map_err(draw_error)?;
        root.present().map_err(draw_error)?;
    }
    placed.retain(|l| !l.text.is_empty());
    Ok((svg, placed))
}
