//! Pictures (SVG via plotters' SVG backend, which writes text as SVG text and needs
//! no system fonts). This module holds the house style every chart shares; each
//! chart lives in its own file here.

pub mod distortion;
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

/// Series colours, chosen to stay apart in greyscale too (luminance roughly
/// 15 %, 35 %, 55 %, 75 %): dark ink, deep teal, burnt orange, light sand.
pub const INK: RGBColor = RGBColor(0x1d, 0x1f, 0x2b);
pub const TEAL: RGBColor = RGBColor(0x0f, 0x6e, 0x6e);
pub const ORANGE: RGBColor = RGBColor(0xd0, 0x6a, 0x1a);
pub const SAND: RGBColor = RGBColor(0xe8, 0xd9, 0xa8);
/// Grid lines and secondary marks.
pub const GRID: RGBColor = RGBColor(0xd8, 0xd8, 0xd8);
/// Warning highlight (a stage that clips first).
pub const ALERT: RGBColor = RGBColor(0xb0, 0x1e, 0x3c);

/// Series colours in the order charts use them.
pub const SERIES: [RGBColor; 4] = [INK, TEAL, ORANGE, ALERT];

#[cfg(test)]
mod tests {
    use super::*;
    use plotters::prelude::*;

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
