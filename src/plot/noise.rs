//! The noise chart: output noise density against frequency (both logarithmic) for
//! every load, its total as a bold line and its largest contributors as thin ones,
//! each curve in its own style ([`super::curve_style`]).
//! House style of `plot`.

use super::bode::{decade_label, tick_label};
use super::{FONT, INK, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::report::noise::DensityCurves;
use crate::units::format_si;
use plotters::coord::combinators::BindKeyPoints;
use plotters::prelude::*;

/// Lowest density drawn, relative to the highest: a contributor 40 dB below is cut.
const SPAN: f64 = 1e-2;

/// Decades of 1, 2, 5 between `lo` and `hi` (the density axis' ticks).
fn one_two_five(lo: f64, hi: f64) -> Vec<f64> {
    let mut out = Vec::new();
    let mut e = lo.log10().floor() as i32;
    while 10f64.powi(e) <= hi {
        for m in [1.0, 2.0, 5.0] {
            let v = m * 10f64.powi(e);
            if v >= lo && v <= hi {
                out.push(v);
            }
        }
        e += 1;
    }
    out
}

/// The noise chart of `c` as SVG text.
pub fn noise_svg(c: &DensityCurves, title: Option<&str>) -> Result<String, super::DrawError> {
    let draw_error = super::draw_error("noise chart");
    let mut svg = String::new();
    let mut paths = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(&draw_error)?;
        let title = title.unwrap_or("Output noise density");
        let area = root
            .titled(
                &super::title_fit(title),
                (FONT, TITLE_SIZE).into_font().color(&INK),
            )
            .map_err(&draw_error)?;
        let (from, to) = (c.frequencies[0], *c.frequencies.last().unwrap_or(&1.0));
        let hi = c
            .loads
            .iter()
            .flat_map(|l| l.total.iter().copied())
            .filter(|x| x.is_finite() && *x > 0.0)
            .fold(0.0, f64::max);
        let hi = if hi > 0.0 { hi * 2.0 } else { 1e-9 };
        let lo = hi * SPAN;
        let ticks = one_two_five(lo, hi);
        let x_points: Vec<f64> = (from.log10().ceil() as i32..=to.log10().floor() as i32)
            .map(|e| 10f64.powi(e))
            .collect();
        let narrow = x_points.len() < 2;
        let mut chart = ChartBuilder::on(&area)
            .margin(12)
            .margin_right(24)
            .x_label_area_size(48)
            .y_label_area_size(112)
            .build_cartesian_2d(
                (from..to).log_scale().with_key_points(if narrow {
                    vec![from, to]
                } else {
                    x_points
                }),
                (lo..hi).log_scale().with_key_points(ticks),
            )
            .map_err(&draw_error)?;
        let weighting = match c.weighting {
            "a" => ", A-weighted",
            _ => "",
        };
        let x_label = |f: &f64| {
            if narrow {
                format_si(*f, "Hz")
            } else {
                let t = decade_label(*f);
                if t.is_empty() {
                    tick_label(*f)
                } else {
                    t
                }
            }
        };
        super::house_mesh(
            chart
                .configure_mesh()
                .x_label_formatter(&x_label)
                .y_label_formatter(&|v| format!("{}/√Hz", format_si(*v, "V")))
                .x_desc("frequency (Hz)")
                .y_desc(format!("output noise density{weighting}")),
        )
        .draw()
        .map_err(&draw_error)?;
        // Curves with sub-pixel coordinates (fractions of both log ranges), spliced in
        // after drawing: on whole pixels a nearly flat density is a staircase.
        let corner = chart.backend_coord(&(from, lo));
        let map = super::PixelMap::new(corner, chart.backend_coord(&(to, hi)));
        let pixel = |f: f64, d: f64| {
            map.at(
                (f / from).ln() / (to / from).ln(),
                (d / lo).ln() / (hi / lo).ln(),
            )
        };
        root.draw_text(
            super::PATHS_MARK,
            &(FONT, TICK_SIZE).into_font().color(&INK),
            corner,
        )
        .map_err(&draw_error)?;
        let many = c.loads.len() > 1;
        // One style per curve, in drawing order: each load's total (bold), then its
        // contributors (thin).
        let mut styles = (0..).map(super::curve_style);
        let mut legend = super::Legend::new(super::Corner::LowerRight, TICK_SIZE + 1);
        for l in &c.loads {
            let name = |what: &str| {
                if many {
                    format!("load \"{}\": {what}", l.id)
                } else {
                    what.to_string()
                }
            };
            let curve = |v: &[f64]| -> Vec<(f64, f64)> {
                c.frequencies
                    .iter()
                    .zip(v)
                    .map(|(&f, &d)| pixel(f, d.clamp(lo, hi)))
                    .collect()
            };
            let curves = std::iter::once(("total", &l.total, 3))
                .chain(l.contributors.iter().map(|(what, v)| (what.as_str(), v, 1)));
            for (what, v, width) in curves {
                let look = styles.next().unwrap_or_else(|| super::curve_style(0));
                paths.push_str(&look.polyline(&curve(v), 1.0, width));
                legend.add(name(what), super::Sample::Curve(look, width));
            }
        }
        legend
            .draw(&root, super::plot_box(&chart))
            .map_err(&draw_error)?;
        root.present().map_err(&draw_error)?;
    }
    Ok(super::splice_paths(svg, &paths))
}
