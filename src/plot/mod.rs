//! Pictures (SVG via plotters' SVG backend, which writes text as SVG text and needs
//! no system fonts). This module holds the house style every chart shares; each
//! chart lives in its own file here.

use plotters::chart::{ChartContext, MeshStyle, SeriesAnno};
use plotters::coord::ranged1d::{Ranged, ValueFormatter};
use plotters::coord::CoordTranslate;
use plotters::coord::Shift;
use plotters::prelude::{
    Cartesian2d, Circle, Color, DashedLineSeries, DrawingArea, DrawingAreaErrorKind,
    DrawingBackend, IntoFont, LineSeries, PathElement, RGBAColor, Rectangle, TextStyle, WHITE,
};
use plotters::style::text_anchor::{HPos, Pos, VPos};
pub mod distortion;
pub mod spread;
pub mod waveform;

use plotters::style::RGBColor;

/// Default picture size in pixels.
pub const SIZE: (u32, u32) = (960, 640);
/// Font family written into the SVG (the viewer picks a local sans-serif).
pub const FONT: &str = "sans-serif";
/// Title, label and tick sizes in pixels.
pub const TITLE_SIZE: u32 = 22;
pub const LABEL_SIZE: u32 = 16;
pub const TICK_SIZE: u32 = 13;

/// Series colours, chosen to stay apart in greyscale too (Rec. 601 luma, 0.299·R +
/// 0.587·G + 0.114·B, about 12 %, 25 %, 37 %, 50 % and 84 % for ink, teal, alert,
/// orange and sand: at least 12 points apart, so no two print as the same grey).
pub const INK: RGBColor = RGBColor(0x1d, 0x1f, 0x2b);
pub const TEAL: RGBColor = RGBColor(0x0a, 0x55, 0x55);
pub const ORANGE: RGBColor = RGBColor(0xd0, 0x6a, 0x1a);
pub const SAND: RGBColor = RGBColor(0xe8, 0xd9, 0xa8);
/// Grid lines and secondary marks.
pub const GRID: RGBColor = RGBColor(0xd8, 0xd8, 0xd8);
/// Warning highlight (a stage that clips first).
pub const ALERT: RGBColor = RGBColor(0xd0, 0x2a, 0x4a);

/// Series colours in the order charts use them.
pub const SERIES: [RGBColor; 4] = [INK, TEAL, ORANGE, ALERT];

/// Dash patterns (dash, gap in pixels) that a chart with more curves than [`SERIES`]
/// has colours adds to them, one per round of the palette: solid first.
pub const DASHES: [Option<(u32, u32)>; 4] = [None, Some((9, 4)), Some((2, 3)), Some((14, 3))];

/// The look of curve `k` of a chart with several (one per stage, node or load): a
/// colour of [`SERIES`] and, past the palette's length, a dash pattern of
/// [`DASHES`], so the first 16 curves all look different.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CurveStyle {
    pub colour: RGBColor,
    pub dash: Option<(u32, u32)>,
}

/// The style of curve `k` (see [`CurveStyle`]).
pub fn curve_style(k: usize) -> CurveStyle {
    CurveStyle {
        colour: SERIES[k % SERIES.len()],
        dash: DASHES[(k / SERIES.len()) % DASHES.len()],
    }
}

impl CurveStyle {
    /// The curve as an SVG polyline in pixels (see [`polyline`]), dashed if its style is.
    pub(crate) fn polyline(&self, points: &[(f64, f64)], opacity: f64, width: u32) -> String {
        let line = polyline(points, &self.colour, opacity, width);
        match self.dash {
            Some((on, off)) => line.replacen(
                "<polyline ",
                &format!("<polyline stroke-dasharray=\"{on} {off}\" "),
                1,
            ),
            None => line,
        }
    }

    /// The curve through `points` (chart coordinates) on `chart`, `width` px wide,
    /// dashed if its style is; add its legend entry to the result.
    pub(crate) fn draw_on<'a, 'b, DB, X, Y>(
        &self,
        chart: &'b mut ChartContext<'a, DB, Cartesian2d<X, Y>>,
        points: Vec<(f64, f64)>,
        width: u32,
    ) -> Result<&'b mut SeriesAnno<'a, DB>, DrawingAreaErrorKind<DB::ErrorType>>
    where
        DB: DrawingBackend + 'a,
        X: Ranged<ValueType = f64>,
        Y: Ranged<ValueType = f64>,
    {
        let style = self.colour.stroke_width(width);
        match self.dash {
            None => chart.draw_series(LineSeries::new(points, style)),
            Some((on, off)) => chart.draw_series(DashedLineSeries::new(points, on, off, style)),
        }
    }

    /// Its legend sample: a short line from `(x, y)`, dashed as the curve is.
    pub(crate) fn legend(
        &self,
        (x, y): (i32, i32),
        width: u32,
    ) -> plotters::element::DashedPathElement<std::array::IntoIter<(i32, i32), 2>, u32> {
        // A solid sample is one dash longer than the sample.
        let (on, off) = self.dash.unwrap_or((24, 1));
        plotters::element::DashedPathElement::new(
            [(x, y), (x + 20, y)],
            on,
            off,
            self.colour.stroke_width(width),
        )
    }
}

pub mod bode;
pub mod levels;
pub mod loadlines;
pub mod loop_gain;
pub mod noise;
pub mod position;
pub mod transfer;

/// A chart that could not be drawn. The SVG backend writes into memory, so this means
/// a broken invariant (say, a range that is not finite), not bad input.
#[derive(Debug, thiserror::Error)]
#[error("drawing the {chart}: {message}")]
pub struct DrawError {
    pub chart: &'static str,
    pub message: String,
}

/// Turns plotters' errors into a [`DrawError`] for `chart`.
pub(crate) fn draw_error<E: std::fmt::Display>(chart: &'static str) -> impl Fn(E) -> DrawError {
    move |e| DrawError {
        chart,
        message: e.to_string(),
    }
}

/// The house style of a chart's mesh, set before `draw`: axis titles and tick labels
/// in the house font, a grey grid with fainter light lines. A chart that wants other
/// grid lines sets them after this.
pub(crate) fn house_mesh<'a, 'b, 'm, X, Y, XT, YT, DB>(
    mesh: &'m mut MeshStyle<'a, 'b, X, Y, DB>,
) -> &'m mut MeshStyle<'a, 'b, X, Y, DB>
where
    X: Ranged<ValueType = XT> + ValueFormatter<XT>,
    Y: Ranged<ValueType = YT> + ValueFormatter<YT>,
    DB: DrawingBackend,
{
    mesh.axis_desc_style((FONT, LABEL_SIZE))
        .label_style((FONT, TICK_SIZE))
        .bold_line_style(GRID.stroke_width(1))
        .light_line_style(GRID.mix(0.45).stroke_width(1))
}

/// Font size in pixels that the SVG backend writes for a style size (it divides by 1.24).
pub(crate) fn font_px(size: u32) -> f64 {
    f64::from(size) / 1.24
}

/// Rough width in pixels of `text` at style size `size`: sans-serif faces average about
/// 0.55 em per character (common practice, no source). Used only to size label boxes.
pub(crate) fn text_width(text: &str, size: u32) -> f64 {
    text.chars().count() as f64 * 0.55 * font_px(size)
}

/// Stands in a drawing for curves written afterwards as paths with sub-pixel
/// coordinates: plotters draws on whole pixels, which turns a gentle slope (an Early
/// effect, a sine's crest) into a staircase.
pub(crate) const PATHS_MARK: &str = "ampchain-sub-pixel-paths";

/// `svg` with the text element holding [`PATHS_MARK`] replaced by `paths`.
pub(crate) fn splice_paths(svg: String, paths: &str) -> String {
    let Some(mark) = svg.find(PATHS_MARK) else {
        return svg;
    };
    let start = svg[..mark].rfind("<text").unwrap_or(mark);
    let end = svg[mark..]
        .find("</text>")
        .map_or(mark + PATHS_MARK.len(), |k| mark + k + "</text>".len());
    format!("{}{}{}", &svg[..start], paths, &svg[end..])
}

/// One polyline in pixels (two decimals), `opacity` of `colour`, `width` px wide.
pub(crate) fn polyline(
    points: &[(f64, f64)],
    colour: &RGBColor,
    opacity: f64,
    width: u32,
) -> String {
    let coords: Vec<String> = points
        .iter()
        .map(|(x, y)| format!("{x:.2},{y:.2}"))
        .collect();
    format!(
        "<polyline fill=\"none\" stroke=\"#{:02X}{:02X}{:02X}\" stroke-opacity=\"{opacity}\" stroke-width=\"{width}\" points=\"{}\"/>\n",
        colour.0,
        colour.1,
        colour.2,
        coords.join(" ")
    )
}

/// Pixels of a plotting area as real numbers, from the backend pixels of two opposite
/// corners (exact: plotters maps the ends of each axis to them). `x` and `y` are the
/// axis positions as fractions of each range (after a log scale's logarithm).
pub(crate) struct PixelMap {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

impl PixelMap {
    pub(crate) fn new(low: (i32, i32), high: (i32, i32)) -> PixelMap {
        PixelMap {
            x0: f64::from(low.0),
            y0: f64::from(low.1),
            x1: f64::from(high.0),
            y1: f64::from(high.1),
        }
    }

    /// The pixel of fractions `(fx, fy)` of the two ranges.
    pub(crate) fn at(&self, fx: f64, fy: f64) -> (f64, f64) {
        (
            self.x0 + fx * (self.x1 - self.x0),
            self.y0 + fy * (self.y1 - self.y0),
        )
    }
}

/// A chart title that fits the chart's width (less a margin): cut at a word with
/// "…" when it would run off both edges. What follows the last ": " (the chart's
/// subject, "THD against input level") is kept whole; the chain's title before it is
/// cut.
pub(crate) fn title_fit(title: &str) -> String {
    let room = f64::from(SIZE.0) - 40.0;
    if text_width(title, TITLE_SIZE) <= room {
        return title.to_string();
    }
    let (head, tail) = match title.rfind(": ") {
        Some(k) if text_width(&title[k..], TITLE_SIZE) < room / 2.0 => (&title[..k], &title[k..]),
        _ => (title, ""),
    };
    let room = room - text_width(tail, TITLE_SIZE);
    let mut out = String::new();
    for word in head.split(' ') {
        let next = if out.is_empty() {
            word.to_string()
        } else {
            format!("{out} {word}")
        };
        if text_width(&format!("{next} …"), TITLE_SIZE) > room {
            break;
        }
        out = next;
    }
    format!("{} …{tail}", out.trim_end_matches([',', ';', ':']))
}

/// The box a label's glyphs are estimated to cover, in pixels: [`text_width`] wide,
/// about one em tall where the SVG backend's anchor puts them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LabelBox {
    pub x0: f64,
    pub y0: f64,
    pub x1: f64,
    pub y1: f64,
}

/// Gap in pixels that two labels keep between their boxes.
pub const LABEL_GAP: f64 = 2.0;

impl LabelBox {
    /// The box of `text` at style size `size` drawn at pixel `at` with anchor `pos`.
    pub fn of(text: &str, size: u32, pos: Pos, at: (i32, i32)) -> LabelBox {
        let em = font_px(size);
        let w = text_width(text, size);
        let x0 = match pos.h_pos {
            HPos::Left => f64::from(at.0),
            HPos::Center => f64::from(at.0) - w / 2.0,
            HPos::Right => f64::from(at.0) - w,
        };
        // Where the glyphs sit for each vertical anchor of the SVG backend (dy 0.76em,
        // 0.5ex, −0.5ex): about one em tall.
        let y0 = match pos.v_pos {
            VPos::Top => f64::from(at.1),
            VPos::Center => f64::from(at.1) - 0.55 * em,
            VPos::Bottom => f64::from(at.1) - 1.05 * em,
        };
        LabelBox {
            x0,
            y0,
            x1: x0 + w,
            y1: y0 + em,
        }
    }

    /// Whether the two boxes come closer than [`LABEL_GAP`].
    pub fn meets(&self, other: &LabelBox) -> bool {
        self.x0 < other.x1 + LABEL_GAP
            && other.x0 < self.x1 + LABEL_GAP
            && self.y0 < other.y1 + LABEL_GAP
            && other.y0 < self.y1 + LABEL_GAP
    }
}

/// Where a legend sits in its chart's plotting area.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Corner {
    UpperLeft,
    UpperRight,
    LowerRight,
    LowerMiddle,
}

/// What a legend line shows before its text.
#[derive(Debug, Clone, Copy)]
pub enum Sample {
    /// A curve's look, `width` px wide.
    Curve(CurveStyle, u32),
    /// A solid line of one colour, `width` px wide.
    Line(RGBAColor, u32),
    /// A filled block: an area's colour.
    Block(RGBAColor),
    /// A line with a dot on it: a level and its mark.
    Dot(RGBAColor),
    /// Nothing: a note.
    Blank,
}

impl Sample {
    pub fn line<C: Color>(colour: C, width: u32) -> Sample {
        Sample::Line(colour.to_rgba(), width)
    }

    pub fn block<C: Color>(colour: C) -> Sample {
        Sample::Block(colour.to_rgba())
    }
}

/// A chart's legend: its lines (text and sample) and where it goes. Every chart with a
/// legend draws it through [`Legend::draw`], so its box ([`Legend::area`]) is known
/// before the chart places its labels, which keep clear of it.
#[derive(Debug, Clone)]
pub struct Legend {
    pub corner: Corner,
    /// Style size of the text (before it shrinks to fit).
    pub size: u32,
    pub lines: Vec<(String, Sample)>,
}

/// Gap in pixels between a legend and the edges of its plotting area.
const LEGEND_INSET: f64 = 6.0;
/// Padding in pixels inside a legend's frame.
const LEGEND_PAD: f64 = 8.0;
/// A line's sample and the gap before its text, in pixels.
const LEGEND_SAMPLE: f64 = 28.0;
/// Gap in pixels between two columns of a legend.
const LEGEND_COLUMN_GAP: f64 = 16.0;
/// Smallest style size a legend's text shrinks to.
const LEGEND_LEAST_SIZE: u32 = 10;

/// How a legend is laid out: its box, its text size, lines per column and the columns'
/// widths (sample and text).
#[derive(Debug, Clone, PartialEq)]
pub struct LegendLayout {
    pub area: LabelBox,
    pub size: u32,
    pub rows: usize,
    pub columns: Vec<f64>,
}

impl Legend {
    pub fn new(corner: Corner, size: u32) -> Legend {
        Legend {
            corner,
            size,
            lines: Vec::new(),
        }
    }

    /// Add a line.
    pub fn add(&mut self, text: impl Into<String>, sample: Sample) {
        self.lines.push((text.into(), sample));
    }

    /// Height in pixels of a line at style size `size`.
    fn row(size: u32) -> f64 {
        (1.25 * f64::from(size)).round()
    }

    /// The layout in the plotting area `plot` (pixels). Rule: the legend stays inside
    /// its plotting area: its lines fill a column as tall as the area allows, then wrap
    /// into further columns; only when the columns are too wide for the area does the
    /// text shrink, a size at a time down to [`LEGEND_LEAST_SIZE`].
    pub fn layout(&self, plot: LabelBox) -> LegendLayout {
        let room_w = plot.x1 - plot.x0 - 2.0 * LEGEND_INSET - 2.0 * LEGEND_PAD;
        let room_h = plot.y1 - plot.y0 - 2.0 * LEGEND_INSET - 2.0 * LEGEND_PAD;
        let n = self.lines.len().max(1);
        let fit = |size: u32| {
            let rows_fit = ((room_h / Legend::row(size)).floor() as usize).max(1);
            let rows = n.div_ceil(n.div_ceil(rows_fit));
            let columns: Vec<f64> = self
                .lines
                .chunks(rows)
                .map(|column| {
                    let text = column
                        .iter()
                        .map(|(t, _)| text_width(t, size))
                        .fold(0.0, f64::max);
                    LEGEND_SAMPLE + text
                })
                .collect();
            let w = columns.iter().sum::<f64>()
                + LEGEND_COLUMN_GAP * columns.len().saturating_sub(1) as f64;
            (rows, columns, w)
        };
        let least = LEGEND_LEAST_SIZE.min(self.size);
        let (size, (rows, columns, w)) = (least..=self.size)
            .rev()
            .map(|size| (size, fit(size)))
            .find(|(_, (_, _, w))| *w <= room_w)
            .unwrap_or_else(|| (least, fit(least)));
        let (w, h) = (
            (w + 2.0 * LEGEND_PAD).ceil(),
            rows as f64 * Legend::row(size) + 2.0 * LEGEND_PAD,
        );
        let x0 = match self.corner {
            Corner::UpperLeft => plot.x0 + LEGEND_INSET,
            Corner::UpperRight | Corner::LowerRight => plot.x1 - LEGEND_INSET - w,
            Corner::LowerMiddle => ((plot.x0 + plot.x1 - w) / 2.0).round(),
        };
        let y0 = match self.corner {
            Corner::UpperLeft | Corner::UpperRight => plot.y0 + LEGEND_INSET,
            Corner::LowerRight | Corner::LowerMiddle => plot.y1 - LEGEND_INSET - h,
        };
        LegendLayout {
            area: LabelBox {
                x0,
                y0,
                x1: x0 + w,
                y1: y0 + h,
            },
            size,
            rows,
            columns,
        }
    }

    /// The box the legend covers in the plotting area `plot`, as a label to keep clear.
    pub fn area(&self, plot: LabelBox) -> PlacedLabel {
        PlacedLabel {
            text: String::from("legend"),
            area: self.layout(plot).area,
        }
    }

    /// Draw the legend on `root` (the whole picture) in the plotting area `plot`
    /// (pixels, [`plot_box`]); nothing when it has no lines.
    pub(crate) fn draw<DB: DrawingBackend>(
        &self,
        root: &DrawingArea<DB, Shift>,
        plot: LabelBox,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        if self.lines.is_empty() {
            return Ok(());
        }
        let l = self.layout(plot);
        let frame = [
            (l.area.x0 as i32, l.area.y0 as i32),
            (l.area.x1 as i32, l.area.y1 as i32),
        ];
        root.draw(&Rectangle::new(frame, WHITE.mix(0.9).filled()))?;
        root.draw(&Rectangle::new(frame, GRID.stroke_width(1)))?;
        let text = TextStyle::from((FONT, l.size).into_font())
            .color(&INK)
            .pos(Pos::new(HPos::Left, VPos::Center));
        let row = Legend::row(l.size);
        let mut left = l.area.x0 + LEGEND_PAD;
        for (column, width) in self.lines.chunks(l.rows).zip(&l.columns) {
            for (k, (words, sample)) in column.iter().enumerate() {
                let y = (l.area.y0 + LEGEND_PAD + (k as f64 + 0.5) * row) as i32;
                let x = left as i32;
                match *sample {
                    Sample::Curve(look, w) => root.draw(&look.legend((x, y), w))?,
                    Sample::Line(c, w) => {
                        root.draw(&PathElement::new([(x, y), (x + 20, y)], c.stroke_width(w)))?
                    }
                    Sample::Block(c) => {
                        root.draw(&Rectangle::new([(x, y - 6), (x + 20, y + 6)], c.filled()))?
                    }
                    Sample::Dot(c) => {
                        root.draw(&PathElement::new([(x, y), (x + 20, y)], c.stroke_width(2)))?;
                        root.draw(&Circle::new((x + 10, y), 4, c.filled()))?;
                    }
                    Sample::Blank => {}
                }
                root.draw_text(words, &text, (x + LEGEND_SAMPLE as i32, y))?;
            }
            left += width + LEGEND_COLUMN_GAP;
        }
        Ok(())
    }
}

/// The plotting area of `chart` in pixels of the whole picture.
pub(crate) fn plot_box<DB: DrawingBackend, CT: CoordTranslate>(
    chart: &ChartContext<DB, CT>,
) -> LabelBox {
    let (x, y) = chart.plotting_area().get_pixel_range();
    LabelBox {
        x0: f64::from(x.start),
        y0: f64::from(y.start),
        x1: f64::from(x.end),
        y1: f64::from(y.end),
    }
}

/// A text a chart writes and the box it covers.
#[derive(Debug, Clone, PartialEq)]
pub struct PlacedLabel {
    pub text: String,
    pub area: LabelBox,
}

impl PlacedLabel {
    /// A dot of radius `r` at pixel `at`, which labels keep clear of (untitled: not a
    /// label).
    pub(crate) fn dot(at: (i32, i32), r: f64) -> PlacedLabel {
        let (x, y) = (f64::from(at.0), f64::from(at.1));
        PlacedLabel {
            text: String::new(),
            area: LabelBox {
                x0: x - r,
                y0: y - r,
                x1: x + r,
                y1: y + r,
            },
        }
    }
}

/// The labels among `labels` whose boxes meet, as pairs of texts (empty when every
/// label stands clear of the others).
pub fn overlapping(labels: &[PlacedLabel]) -> Vec<(String, String)> {
    let mut out = Vec::new();
    for (i, a) in labels.iter().enumerate() {
        for b in &labels[i + 1..] {
            if a.area.meets(&b.area) {
                out.push((a.text.clone(), b.text.clone()));
            }
        }
    }
    out
}

/// The first of `candidates` (a label's positions in order of preference, as
/// `(anchor pixel, its box)`) whose box meets none of `placed`; `None` when each does.
pub(crate) fn first_clear<T>(
    placed: &[PlacedLabel],
    candidates: impl IntoIterator<Item = (T, LabelBox)>,
) -> Option<(T, LabelBox)> {
    candidates
        .into_iter()
        .find(|(_, area)| !placed.iter().any(|p| p.area.meets(area)))
}

/// Draw `text` at pixel `at` of `area` over a white box, so it stays legible where it
/// crosses lines; `style` carries the anchor. `size` is the style size.
pub(crate) fn boxed_text<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    text: &str,
    style: &TextStyle,
    size: u32,
    at: (i32, i32),
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let b = LabelBox::of(text, size, style.pos, at);
    let pad = 2.0;
    area.draw(&Rectangle::new(
        [
            ((b.x0 - pad) as i32, (b.y0 - pad) as i32),
            ((b.x1 + pad) as i32, (b.y1 + pad) as i32),
        ],
        WHITE.mix(0.85).filled(),
    ))?;
    area.draw_text(text, style, at)
}

/// A number's text for a chart's label lines with a true minus sign (U+2212), as the
/// charts write "−3 dB", "+1.2 V / −1.1 V" and signed gains; tick labels keep the
/// ASCII hyphen-minus of plotters' axes.
pub(crate) fn minus_sign(number: &str) -> String {
    number.replace('-', "−")
}

/// A tick value with as few decimals as show it exactly (up to four): 0, 0.5, 12, 2.25.
pub(crate) fn tick_label(v: f64) -> String {
    let digits = (0..4)
        .find(|&d| {
            let m = 10f64.powi(d);
            ((v * m).round() - v * m).abs() < 1e-6
        })
        .unwrap_or(4) as usize;
    let text = format!("{v:.digits$}");
    // No "-0" for a value that rounds to zero.
    if text
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        text.trim_start_matches('-').to_string()
    } else {
        text
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use plotters::prelude::*;

    #[test]
    fn palette_colours_stay_apart_in_greyscale() {
        // Rec. 601 luma Y' = 0.299·R + 0.587·G + 0.114·B (ITU-R BT.601), the grey a
        // colour prints as on a monochrome printer or photocopier: every pair of chart
        // colours at least 25 of 255 apart (our threshold, common practice, no source).
        let luma = |c: RGBColor| 0.299 * c.0 as f64 + 0.587 * c.1 as f64 + 0.114 * c.2 as f64;
        let all = [INK, TEAL, ALERT, ORANGE, SAND];
        for (i, a) in all.iter().enumerate() {
            for b in &all[i + 1..] {
                let d = (luma(*a) - luma(*b)).abs();
                assert!(d >= 25.0, "{a:?} and {b:?} are {d:.1} apart in greyscale");
            }
        }
    }

    #[test]
    fn the_first_sixteen_curve_styles_differ() {
        // Common practice, no source: no two curves of one chart drawn alike.
        let styles: Vec<CurveStyle> = (0..16).map(curve_style).collect();
        for (i, a) in styles.iter().enumerate() {
            for b in &styles[i + 1..] {
                assert_ne!(a, b);
            }
        }
        assert_eq!(curve_style(0).dash, None);
        let dashed = curve_style(SERIES.len()).polyline(&[(0.0, 0.0), (1.0, 1.0)], 1.0, 2);
        assert!(dashed.contains("stroke-dasharray=\"9 4\""), "{dashed}");
    }

    #[test]
    fn a_legend_wraps_into_columns_then_shrinks_to_stay_inside() {
        // A plotting area 800 × 300 px (the loop-gain plot's upper panel is about
        // that) holds (300 − 2·6 − 2·8) / 18 = 15 rows of size 14; a 16th wraps into a
        // second column; lines too long for the columns they need shrink the text.
        let plot = LabelBox {
            x0: 80.0,
            y0: 40.0,
            x1: 880.0,
            y1: 340.0,
        };
        for corner in [
            Corner::UpperLeft,
            Corner::UpperRight,
            Corner::LowerRight,
            Corner::LowerMiddle,
        ] {
            for (n, length) in [(1, 10), (15, 30), (16, 30), (32, 60), (40, 70)] {
                let mut legend = Legend::new(corner, 14);
                for k in 0..n {
                    legend.add(format!("{k:0length$}"), Sample::Blank);
                }
                let l = legend.layout(plot);
                let a = l.area;
                assert!(
                    a.x0 >= plot.x0 && a.y0 >= plot.y0 && a.x1 <= plot.x1 && a.y1 <= plot.y1,
                    "{n} lines of {length} at {corner:?}: {l:?}"
                );
                let shape = (l.columns.len(), l.size);
                match n {
                    1 | 15 => assert_eq!(shape, (1, 14), "{n} lines"),
                    16 => assert_eq!(shape, (2, 14), "{n} lines"),
                    _ => assert!(l.size < 14, "{n} lines of {length}: {l:?}"),
                }
                assert!(l.rows * l.columns.len() >= n);
            }
        }
    }

    #[test]
    fn svg_backend_writes_text_without_system_fonts() {
        let mut svg = String::new();
        {
            let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
            root.fill(&WHITE).unwrap();
            let mut chart = ChartBuilder::on(&root)
                .caption("check", (FONT, TITLE_SIZE))
                .margin(10)
                .x_label_area_size(40)
                .y_label_area_size(50)
                .build_cartesian_2d(0.0..1.0, 0.0..1.0)
                .unwrap();
            chart
                .configure_mesh()
                .x_desc("V_CE (V)")
                .label_style((FONT, TICK_SIZE))
                .draw()
                .unwrap();
            chart
                .draw_series(LineSeries::new([(0.0, 0.0), (1.0, 1.0)], &TEAL))
                .unwrap();
            root.present().unwrap();
        }
        assert!(svg.contains("<svg") && svg.contains("V_CE (V)") && svg.contains("check\n</text>"));
    }
}
