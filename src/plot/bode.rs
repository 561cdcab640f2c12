//! Bode plot of a frequency response: magnitude (dB) above, phase (degrees) below,
//! on a shared logarithmic frequency axis with every decade labelled; each load's
//! −3 dB corners marked on its curve with their values. House style of `plot`.

use super::{FONT, INK, SIZE, TICK_SIZE, TITLE_SIZE};
use crate::report::ResponseReport;
use crate::units::format_si;
use plotters::coord::combinators::{BindKeyPoints, LogCoord, WithKeyPoints};
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// Largest span of the magnitude axis; deeper stopband values are cut off.
const MAGNITUDE_SPAN_DB: f64 = 120.0;

/// "1 Hz", "20 Hz", "500 Hz", "1 kHz", … for a whole multiple (1…9) of a decade;
/// empty for anything else.
pub fn tick_label(f: f64) -> String {
    let e = (f.log10() + 1e-9).floor() as i32;
    let m = f / 10f64.powi(e);
    if (m - m.round()).abs() > 1e-6 {
        return String::new();
    }
    let prefixes = [(-3, "m"), (0, ""), (3, "k"), (6, "M"), (9, "G"), (12, "T")];
    let (p_exp, p) = prefixes
        .iter()
        .rev()
        .find(|(pe, _)| e >= *pe)
        .copied()
        .unwrap_or((-3, "m"));
    let value = m.round() * 10f64.powi(e - p_exp);
    if value >= 1.0 {
        format!("{value:.0} {p}Hz")
    } else {
        format!("{value} {p}Hz")
    }
}

/// `tick_label` for a decade, empty for anything else.
pub fn decade_label(f: f64) -> String {
    if (f.log10() - f.log10().round()).abs() > 1e-9 {
        return String::new();
    }
    tick_label(f)
}

/// Phase unwrapped along the sweep (no jumps of more than 180°), then shifted by a
/// whole number of turns so that the sample at the largest magnitude lies in
/// (−180°, 180°].
pub fn unwrap_phase(phase_deg: &[f64], magnitude: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(phase_deg.len());
    for (j, &p) in phase_deg.iter().enumerate() {
        if j == 0 {
            out.push(p);
            continue;
        }
        let prev: f64 = out[j - 1];
        let mut step = p - phase_deg[j - 1];
        step -= 360.0 * (step / 360.0).round();
        out.push(prev + step);
    }
    if let Some(peak) = (0..magnitude.len()).max_by(|&a, &b| magnitude[a].total_cmp(&magnitude[b]))
    {
        let turns = ((out[peak] - 180.0) / 360.0).ceil();
        for p in out.iter_mut() {
            *p -= 360.0 * turns;
        }
    }
    out
}

/// A magnitude axis from `lo` to `hi` dB: whole tens with 10 dB to spare on each
/// side, at most `span` dB deep (deeper values are cut off).
pub(super) fn db_range(lo: f64, hi: f64, span: f64) -> (f64, f64) {
    let y_hi = (hi / 10.0).ceil() * 10.0 + 10.0;
    let y_lo = ((lo / 10.0).floor() * 10.0 - 10.0).max(y_hi - span);
    (y_lo, y_hi)
}

/// The logarithmic frequency axis of the Bode-style charts: every decade a bold line
/// and a label, its 2…9 multiples light lines; under two decades the 2× and 5×
/// multiples labelled too.
pub(super) struct FrequencyAxis {
    from: f64,
    to: f64,
    bold: Vec<f64>,
    light: Vec<f64>,
    narrow: bool,
}

impl FrequencyAxis {
    pub(super) fn new(from: f64, to: f64) -> FrequencyAxis {
        let (mut bold, light) = decades(from, to);
        let narrow = bold.len() < 2;
        if narrow {
            bold.extend(light.iter().copied().filter(|f| {
                let m = (f / 10f64.powf(f.log10().floor())).round();
                m == 2.0 || m == 5.0
            }));
            bold.sort_by(f64::total_cmp);
        }
        FrequencyAxis {
            from,
            to,
            bold,
            light,
            narrow,
        }
    }

    /// The axis for `ChartBuilder::build_cartesian_2d`.
    pub(super) fn coord(&self) -> WithKeyPoints<LogCoord<f64>> {
        (self.from..self.to)
            .log_scale()
            .with_key_points(self.bold.clone())
            .with_light_points(self.light.clone())
    }

    /// The label of a bold line at `f`.
    pub(super) fn label(&self, f: f64) -> String {
        if self.narrow {
            tick_label(f)
        } else {
            decade_label(f)
        }
    }
}

fn decades(from: f64, to: f64) -> (Vec<f64>, Vec<f64>) {
    let mut bold = Vec::new();
    let mut light = Vec::new();
    let mut e = from.log10().floor() as i32;
    while 10f64.powi(e) <= to * (1.0 + 1e-12) {
        let d = 10f64.powi(e);
        if d >= from * (1.0 - 1e-12) {
            bold.push(d);
        }
        for m in 2..10 {
            let f = d * m as f64;
            if f >= from && f <= to {
                light.push(f);
            }
        }
        e += 1;
    }
    (bold, light)
}

fn draw_error<E: std::fmt::Debug>(e: E) -> super::DrawError {
    super::DrawError {
        chart: "Bode plot",
        message: format!("{e:?}"),
    }
}

/// A note per load whose −3 dB corners lie outside the plotted range `from`…`to`
/// (they have no mark on the curve): "low corner 4.10 mHz below the plotted range",
/// both corners in one line, the load named when there are several.
pub fn corner_notes(r: &ResponseReport) -> Vec<String> {
    let (from, to) = (r.sweep.from, r.sweep.to);
    let mut notes = Vec::new();
    for l in &r.loads {
        let mut off = Vec::new();
        for (corner, name) in [(&l.low_corner, "low"), (&l.high_corner, "high")] {
            let Some(f) = corner.frequency else { continue };
            let side = if f < from {
                "below"
            } else if f > to {
                "above"
            } else {
                continue;
            };
            off.push(format!("{name} corner {} {side}", format_si(f, "Hz")));
        }
        if off.is_empty() {
            continue;
        }
        let load = if r.loads.len() > 1 {
            format!("to \"{}\": ", l.id)
        } else {
            String::new()
        };
        notes.push(format!("{load}{} the plotted range", off.join(", ")));
    }
    notes
}

/// Vertical distance between stacked corner labels, pixels.
pub const CORNER_LABEL_STEP: i32 = 18;

/// The Bode plot of `r` as SVG text.
pub fn bode_svg(r: &ResponseReport) -> Result<String, super::DrawError> {
    let mut svg = String::new();
    let mut paths = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(draw_error)?;
        let title = r.title.as_deref().unwrap_or("Frequency response");
        let area = root
            .titled(
                &super::title_fit(title),
                (FONT, TITLE_SIZE).into_font().color(&INK),
            )
            .map_err(draw_error)?;
        let (upper, lower) = area.split_vertically(SIZE.1 * 56 / 100);

        let (from, to) = (r.sweep.from, r.sweep.to);
        let axis = FrequencyAxis::new(from, to);
        let x_label = |f: &f64| axis.label(*f);
        let x_axis = || axis.coord();

        // Magnitude panel.
        let all_db = r
            .loads
            .iter()
            .flat_map(|l| l.magnitude_db.iter().copied())
            .filter(|x| x.is_finite());
        let (lo, hi) = all_db.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| {
            (lo.min(x), hi.max(x))
        });
        let (y_lo, y_hi) = db_range(lo, hi, MAGNITUDE_SPAN_DB);
        let db_step = if y_hi - y_lo > 60.0 { 20.0 } else { 10.0 };
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
                .x_label_formatter(&x_label)
                .y_labels(((y_hi - y_lo) / db_step) as usize + 1)
                .y_label_formatter(&|y| format!("{y:.0}"))
                .y_desc("gain (dB)"),
        )
        .draw()
        .map_err(draw_error)?;

        // Phase panel.
        let unwrapped: Vec<Vec<f64>> = r
            .loads
            .iter()
            .map(|l| unwrap_phase(&l.phase_deg, &l.magnitude))
            .collect();
        let (p_lo, p_hi) = unwrapped
            .iter()
            .flatten()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &x| {
                (lo.min(x), hi.max(x))
            });
        // Whole multiples of 45° (90° for wide spans, 15° for narrow ones), a tick on each.
        let p_step = if p_hi - p_lo > 360.0 {
            90.0
        } else if p_hi - p_lo > 90.0 {
            45.0
        } else {
            15.0
        };
        let p_lo = (p_lo / p_step).floor() * p_step;
        let p_hi = ((p_hi / p_step).ceil() * p_step).max(p_lo + p_step);
        let mut phase = ChartBuilder::on(&lower)
            .margin_top(4)
            .margin_left(12)
            .margin_right(24)
            .margin_bottom(8)
            .x_label_area_size(48)
            .y_label_area_size(64)
            .build_cartesian_2d(x_axis(), (p_lo..p_hi + 0.5 * p_step).step(p_step))
            .map_err(draw_error)?;
        super::house_mesh(
            phase
                .configure_mesh()
                .x_label_formatter(&x_label)
                .y_labels(((p_hi - p_lo) / p_step) as usize + 1)
                .y_label_formatter(&|y| format!("{y:.0}°"))
                .x_desc("frequency (Hz)")
                .y_desc("phase (°)"),
        )
        .draw()
        .map_err(draw_error)?;

        // Curves with sub-pixel coordinates (x: fractions of the log frequency range),
        // spliced in after drawing.
        let p_top = p_hi + 0.5 * p_step;
        let corner = mag.backend_coord(&(from, y_lo));
        let mag_map = super::PixelMap::new(corner, mag.backend_coord(&(to, y_hi)));
        let phase_map = super::PixelMap::new(
            phase.backend_coord(&(from, p_lo)),
            phase.backend_coord(&(to, p_top)),
        );
        let fx = |f: f64| (f / from).ln() / (to / from).ln();
        root.draw_text(
            super::PATHS_MARK,
            &(FONT, TICK_SIZE).into_font().color(&INK),
            corner,
        )
        .map_err(draw_error)?;
        let mut labels = Vec::new();
        let mut legend = super::Legend::new(super::Corner::LowerMiddle, TICK_SIZE + 1);
        for (k, l) in r.loads.iter().enumerate() {
            let look = super::curve_style(k);
            let colour = look.colour;
            let points: Vec<(f64, f64)> = r
                .frequencies
                .iter()
                .zip(&l.magnitude_db)
                .map(|(&f, &d)| mag_map.at(fx(f), (d.max(y_lo) - y_lo) / (y_hi - y_lo)))
                .collect();
            paths.push_str(&look.polyline(&points, 1.0, 2));
            legend.add(
                format!("to load \"{}\"", l.id),
                super::Sample::Curve(look, 2),
            );
            let points: Vec<(f64, f64)> = r
                .frequencies
                .iter()
                .zip(&unwrapped[k])
                .map(|(&f, &p)| phase_map.at(fx(f), (p - p_lo) / (p_top - p_lo)))
                .collect();
            paths.push_str(&look.polyline(&points, 1.0, 2));

            // Corners: a dashed line through both panels and the value at the −3 dB point.
            let level = l.midband_gain_db - 3.0103;
            for (corner, name, right) in
                [(&l.low_corner, "f_L", false), (&l.high_corner, "f_H", true)]
            {
                let Some(f) = corner.frequency.filter(|f| *f >= from && *f <= to) else {
                    continue;
                };
                let dash = colour.mix(0.8).stroke_width(1);
                mag.draw_series(DashedLineSeries::new([(f, y_lo), (f, y_hi)], 6, 4, dash))
                    .map_err(draw_error)?;
                phase
                    .draw_series(DashedLineSeries::new([(f, p_lo), (f, p_hi)], 6, 4, dash))
                    .map_err(draw_error)?;
                let label = if r.loads.len() > 1 {
                    format!("{name} \"{}\" = {} (−3 dB)", l.id, format_si(f, "Hz"))
                } else {
                    format!("{name} = {} (−3 dB)", format_si(f, "Hz"))
                };
                mag.draw_series(std::iter::once(Circle::new((f, level), 4, colour.filled())))
                    .map_err(draw_error)?;
                let (px, py) = mag.backend_coord(&(f, level));
                labels.push((right, px, py, colour, label));
            }
        }
        // Corner labels under their points; on each side, one below the other
        // (several loads' corners are often at nearly the same place).
        for side in [false, true] {
            let mut these: Vec<_> = labels.iter().filter(|l| l.0 == side).collect();
            these.sort_by_key(|l| l.2);
            let mut next_free = i32::MIN;
            for &(right, px, py, colour, ref label) in these {
                let y = (py + 8).max(next_free);
                next_free = y + CORNER_LABEL_STEP;
                let anchor = if right {
                    Pos::new(HPos::Right, VPos::Top)
                } else {
                    Pos::new(HPos::Left, VPos::Top)
                };
                let text = (FONT, TICK_SIZE + 1).into_font().color(&colour).pos(anchor);
                let x = if right { px - 8 } else { px + 8 };
                root.draw_text(label, &text, (x, y)).map_err(draw_error)?;
            }
        }
        // Corners off the frequency axis: a line each in the legend.
        for note in corner_notes(r) {
            legend.add(note, super::Sample::Blank);
        }
        legend
            .draw(&root, super::plot_box(&mag))
            .map_err(draw_error)?;
        root.present().map_err(draw_error)?;
    }
    Ok(super::splice_paths(svg, &paths))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decades_are_labelled_with_si_prefixes() {
        assert_eq!(decade_label(1.0), "1 Hz");
        assert_eq!(decade_label(100.0), "100 Hz");
        assert_eq!(decade_label(1e3), "1 kHz");
        assert_eq!(decade_label(1e7), "10 MHz");
        assert_eq!(decade_label(0.01), "10 mHz");
        assert_eq!(decade_label(2e3), "");
        assert_eq!(tick_label(2e3), "2 kHz");
        assert_eq!(tick_label(50.0), "50 Hz");
        assert_eq!(tick_label(0.2), "200 mHz");
        assert_eq!(tick_label(25.0), "");
    }

    #[test]
    fn phase_unwraps_across_the_cut() {
        // A phase falling steadily through −180° must not jump by 360° (continuity).
        let wrapped = [170.0, -175.0, -160.0];
        let mags = [1.0, 0.9, 0.8];
        let u = unwrap_phase(&wrapped, &mags);
        assert_eq!(u, vec![170.0, 185.0, 200.0]);
    }
}
