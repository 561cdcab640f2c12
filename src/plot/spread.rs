//! Histograms of a spread run: the overall gain and the source level at which the
//! chain clips (with `--band` also the −3 dB corners), over the builds, with the
//! nominal value (the plan) marked.

use super::{draw_error, DrawError, ALERT, FONT, INK, SIZE, TEAL, TICK_SIZE, TITLE_SIZE};
use crate::chain::Chain;
use crate::report::db;
use crate::spread::SpreadRun;
use crate::units::Level;
use plotters::prelude::*;

const CHART: &str = "spread histograms";

/// Bars per histogram.
pub const BINS: usize = 40;

/// One histogram: values, the nominal value, axis label.
pub struct Panel<'a> {
    pub values: &'a [f64],
    pub nominal: f64,
    pub label: &'a str,
}

/// Counts of `values` in `BINS` equal bins over [lo, hi].
fn histogram(values: &[f64], lo: f64, hi: f64) -> Vec<usize> {
    let mut counts = vec![0usize; BINS];
    let width = (hi - lo) / BINS as f64;
    for &x in values {
        let i = ((x - lo) / width).floor();
        let i = if i.is_finite() {
            i.max(0.0) as usize
        } else {
            0
        };
        counts[i.min(BINS - 1)] += 1;
    }
    counts
}

fn draw_panel<DB: DrawingBackend>(
    area: &DrawingArea<DB, plotters::coord::Shift>,
    panel: &Panel,
    colour: RGBColor,
) -> Result<(), DrawError> {
    let err = draw_error::<DrawingAreaErrorKind<DB::ErrorType>>(CHART);
    let finite = panel.values.iter().copied().filter(|x| x.is_finite());
    let (mut lo, mut hi) = finite.fold((panel.nominal, panel.nominal), |(a, b), x| {
        (a.min(x), b.max(x))
    });
    if !(hi - lo).is_normal() {
        lo -= 0.5;
        hi += 0.5;
    }
    let pad = 0.02 * (hi - lo);
    let (lo, hi) = (lo - pad, hi + pad);
    let counts = histogram(panel.values, lo, hi);
    let n = panel.values.len().max(1) as f64;
    let top = counts.iter().copied().max().unwrap_or(0) as f64 / n * 100.0 * 1.12 + 1e-9;
    let mut chart = ChartBuilder::on(area)
        .margin(14)
        .x_label_area_size(44)
        .y_label_area_size(64)
        .build_cartesian_2d(lo..hi, 0.0..top)
        .map_err(&err)?;
    super::house_mesh(
        chart
            .configure_mesh()
            .x_desc(panel.label)
            .y_desc("builds (%)"),
    )
    .draw()
    .map_err(&err)?;
    let width = (hi - lo) / BINS as f64;
    chart
        .draw_series(counts.iter().enumerate().map(|(i, &c)| {
            let x0 = lo + i as f64 * width;
            Rectangle::new(
                [(x0, 0.0), (x0 + width, c as f64 / n * 100.0)],
                colour.mix(0.85).filled(),
            )
        }))
        .map_err(&err)?;
    chart
        .draw_series(LineSeries::new(
            [(panel.nominal, 0.0), (panel.nominal, top)],
            ALERT.stroke_width(2),
        ))
        .map_err(&err)?;
    chart
        .draw_series(std::iter::once(Text::new(
            format!(" nominal {:.1}", panel.nominal),
            (panel.nominal, top * 0.96),
            (FONT, TICK_SIZE).into_font().color(&ALERT),
        )))
        .map_err(&err)?;
    Ok(())
}

/// The SVG: one histogram per panel, top to bottom (each panel half the house
/// chart's height).
pub fn histograms_svg(title: &str, panels: &[Panel]) -> Result<String, DrawError> {
    let mut svg = String::new();
    {
        let size = (SIZE.0, SIZE.1 / 2 * panels.len().max(2) as u32);
        let root = SVGBackend::with_string(&mut svg, size).into_drawing_area();
        let err = draw_error(CHART);
        root.fill(&WHITE).map_err(&err)?;
        let root = root
            .titled(
                &super::title_fit(title),
                (FONT, TITLE_SIZE).into_font().color(&INK),
            )
            .map_err(&err)?;
        let areas = root.split_evenly((panels.len(), 1));
        for (k, (area, panel)) in areas.iter().zip(panels).enumerate() {
            draw_panel(area, panel, if k % 2 == 0 { TEAL } else { INK })?;
        }
        root.present().map_err(&err)?;
    }
    Ok(svg)
}

/// The histograms of a spread run: the overall gain to the first load and the source
/// level at which the chain clips, with `--band` also that load's corners (where the
/// nominal chain has them).
pub fn run_histograms_svg(
    chain: &Chain,
    run: &SpreadRun,
    title: &str,
) -> Result<String, DrawError> {
    let layout = run.trials.layout;
    let gain: Vec<f64> = run
        .trials
        .good_column(layout.load_gain(0))
        .into_iter()
        .map(db)
        .collect();
    let clip: Vec<f64> = run
        .trials
        .good_column(layout.chain_clip())
        .into_iter()
        .map(|v| Level::from_vpeak(v).dbu())
        .collect();
    let gain_label = format!("overall gain to \"{}\" (dB)", chain.loads[0].id);
    let mut panels = vec![
        Panel {
            values: &gain,
            nominal: db(run.nominal[layout.load_gain(0)]),
            label: &gain_label,
        },
        Panel {
            values: &clip,
            nominal: Level::from_vpeak(run.nominal[layout.chain_clip()]).dbu(),
            label: "source level at which the chain clips (dBu)",
        },
    ];
    let corner = |c: usize| run.trials.good_column(c);
    let (low, high) = if layout.band {
        (corner(layout.low_corner(0)), corner(layout.high_corner(0)))
    } else {
        (Vec::new(), Vec::new())
    };
    let low_label = format!("low −3 dB corner to \"{}\" (Hz)", chain.loads[0].id);
    let high_label = format!("high −3 dB corner to \"{}\" (Hz)", chain.loads[0].id);
    if layout.band {
        for (values, c, label) in [
            (&low, layout.low_corner(0), &low_label),
            (&high, layout.high_corner(0), &high_label),
        ] {
            if !values.is_empty() && run.nominal[c].is_finite() {
                panels.push(Panel {
                    values,
                    nominal: run.nominal[c],
                    label,
                });
            }
        }
    }
    histograms_svg(title, &panels)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bins_count_every_value_once() {
        // 0.5, 1.5, …, 39.5 over [0, 40]: one value per bin (counting, no source needed).
        let v: Vec<f64> = (0..40).map(|i| i as f64 + 0.5).collect();
        assert_eq!(histogram(&v, 0.0, 40.0), vec![1; BINS]);
        // The top edge belongs to the last bin.
        assert_eq!(histogram(&[40.0], 0.0, 40.0)[BINS - 1], 1);
    }

    #[test]
    fn svg_has_both_panels_and_the_nominal_marks() {
        let g: Vec<f64> = (0..100).map(|i| 30.0 + i as f64 * 0.03).collect();
        let c: Vec<f64> = (0..100).map(|i| -20.0 + i as f64 * 0.02).collect();
        let svg = histograms_svg(
            "t",
            &[
                Panel {
                    values: &g,
                    nominal: 31.5,
                    label: "overall gain (dB)",
                },
                Panel {
                    values: &c,
                    nominal: -19.0,
                    label: "clips at input (dBu)",
                },
            ],
        )
        .unwrap();
        assert!(svg.contains("overall gain (dB)") && svg.contains("clips at input (dBu)"));
        assert!(svg.contains("nominal 31.5") && svg.contains("nominal -19.0"));
    }
}
