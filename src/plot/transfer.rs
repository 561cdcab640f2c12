//! Transfer chart of an op-amp stage (docs/definitions.md "Op-amp"): the output pin's
//! voltage against the stage's input voltage (its change from the operating point),
//! a straight line of slope `gain` through the operating point, clipped flat at the
//! output's limits; the rail limits (the stage's rails less `swing_margin`) as
//! horizontal lines, the planned swing marked on the line. Every mark comes from the
//! numbers `plan` reports ([`PlanReport`]).

use super::{
    draw_error, DrawError, ALERT, FONT, GRID, INK, LABEL_SIZE, SIZE, TEAL, TICK_SIZE, TITLE_SIZE,
};
use crate::chain::Chain;
use crate::report::{PlanReport, StageReport};
use crate::units::{format_si, Level};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

const CHART: &str = "transfer chart";

/// The marks of one op-amp stage's chart, in volts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Transfer {
    /// The pin's DC voltage.
    pub v_q: f64,
    /// The stage's gain v(output)/v(input) (signed, midband).
    pub gain: f64,
    /// The output's limits: up to `v_q + up`, down to `v_q − down` (∞: none).
    pub up: f64,
    pub down: f64,
    /// The rail limits: the stage's rails less `swing_margin`.
    pub rail_high: f64,
    pub rail_low: f64,
    /// The planned input's peak at the stage's input.
    pub input_peak: f64,
}

impl Transfer {
    pub fn new(chain: &Chain, s: &StageReport, stage: usize) -> Transfer {
        let rails = chain.stage_rails(stage);
        let margin = chain.device_of(stage).opamp.map_or(0.0, |a| a.swing_margin);
        let v_q = s
            .operating_point
            .as_ref()
            .and_then(|q| q.get("v_out"))
            .unwrap_or(0.0);
        Transfer {
            v_q,
            gain: s.gain,
            up: s.limit_up,
            down: s.limit_down,
            rail_high: rails.top - margin,
            rail_low: rails.bottom + margin,
            input_peak: Level::from_vrms(s.input_vrms).vpeak(),
        }
    }

    /// The output at input change `x`: v_q + gain·x, held within the limits.
    pub fn output(&self, x: f64) -> f64 {
        (self.v_q + self.gain * x).clamp(self.v_q - self.down, self.v_q + self.up)
    }

    /// The input changes at which the output meets its upper and lower limit.
    pub fn input_at_limits(&self) -> (f64, f64) {
        (self.up / self.gain, -self.down / self.gain)
    }
}

/// The chart of op-amp stage `stage` as SVG.
pub fn render(chain: &Chain, report: &PlanReport, stage: usize) -> Result<String, DrawError> {
    let s = &report.stages[stage];
    let t = Transfer::new(chain, s, stage);
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, SIZE).into_drawing_area();
        draw(&root, report, s, &t).map_err(draw_error(CHART))?;
        root.present().map_err(draw_error(CHART))?;
    }
    Ok(svg)
}

fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    report: &PlanReport,
    s: &StageReport,
    t: &Transfer,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    root.fill(&WHITE)?;
    let title = report.title.as_deref().unwrap_or("ampchain");
    let body = root.titled(
        &super::title_fit(title),
        (FONT, TITLE_SIZE).into_font().color(&INK),
    )?;
    let (w, _) = body.dim_in_pixel();
    let sub = TextStyle::from((FONT, LABEL_SIZE).into_font())
        .color(&INK)
        .pos(Pos::new(HPos::Center, VPos::Top));
    // Numbers with a true minus sign, as the limits' "−" (`super::minus_sign`).
    let volts = |v: f64| super::minus_sign(&format_si(v, "V"));
    let line1 = format!(
        "stage \"{}\", {}, device {} · output at rest {}, gain {} V/V",
        s.id,
        s.kind.replace('_', " "),
        s.device.as_deref().unwrap_or("none"),
        volts(t.v_q),
        super::minus_sign(&format!("{:.4}", t.gain)),
    );
    let line2 = format!(
        "rail limits {} and {} (rails less swing_margin); output limits +{} / −{} ({}); planned input {} peak",
        volts(t.rail_low),
        volts(t.rail_high),
        volts(t.up),
        volts(t.down),
        s.clip_toward.map_or("none".to_string(), |x| x.to_string()),
        volts(t.input_peak),
    );
    for (k, line) in [line1, line2].iter().enumerate() {
        body.draw_text(line, &sub, (w as i32 / 2, 2 + 20 * k as i32))?;
    }
    let (_, area) = body.split_vertically(46);

    // Input range: 1.3 times the wider of the two inputs that reach a limit (or of the
    // planned peak when no limit is finite).
    let (x_up, x_down) = t.input_at_limits();
    let reach = [x_up.abs(), x_down.abs(), t.input_peak]
        .into_iter()
        .filter(|x| x.is_finite() && *x > 0.0)
        .fold(0.0, f64::max);
    let x_max = if reach > 0.0 { 1.3 * reach } else { 1.0 };
    let lo = t.rail_low.min(t.v_q - t.down.min(1e300));
    let hi = t.rail_high.max(t.v_q + t.up.min(1e300));
    let pad = 0.08 * (hi - lo).max(1e-3);
    let mut chart = ChartBuilder::on(&area)
        .margin(16)
        .x_label_area_size(44)
        .y_label_area_size(64)
        .build_cartesian_2d(-x_max..x_max, (lo - pad)..(hi + pad))?;
    chart
        .configure_mesh()
        .light_line_style(GRID.mix(0.0))
        .bold_line_style(GRID)
        .x_desc("stage input, change from rest (V)")
        .y_desc("output pin (V)")
        .label_style((FONT, TICK_SIZE).into_font().color(&INK))
        .axis_desc_style((FONT, LABEL_SIZE).into_font().color(&INK))
        .x_label_formatter(&|x| format_si(*x, "V"))
        .y_label_formatter(&|y| format_si(*y, "V"))
        .draw()?;
    // The rail limits.
    chart.draw_series(LineSeries::new(
        [(-x_max, t.rail_low), (x_max, t.rail_low)],
        ALERT.stroke_width(2),
    ))?;
    chart.draw_series(LineSeries::new(
        [(-x_max, t.rail_high), (x_max, t.rail_high)],
        ALERT.stroke_width(2),
    ))?;
    let mut legend = super::Legend::new(super::Corner::UpperLeft, TICK_SIZE);
    legend.add(
        "rail limits (rails less swing_margin)",
        super::Sample::line(ALERT, 2),
    );
    // The transfer line: straight through rest, flat beyond the limits.
    let mut points = vec![(-x_max, t.output(-x_max))];
    let (a, b) = if x_up < x_down {
        (x_up, x_down)
    } else {
        (x_down, x_up)
    };
    for x in [a, b] {
        if x.is_finite() && x.abs() < x_max {
            points.push((x, t.output(x)));
        }
    }
    points.push((x_max, t.output(x_max)));
    chart.draw_series(LineSeries::new(points, INK.stroke_width(2)))?;
    legend.add("output vs input", super::Sample::line(INK, 2));
    // The planned swing.
    let p = t.input_peak.min(x_max);
    chart.draw_series(LineSeries::new(
        [(-p, t.output(-p)), (p, t.output(p))],
        TEAL.stroke_width(6),
    ))?;
    legend.add("planned swing", super::Sample::line(TEAL, 6));
    chart.draw_series(std::iter::once(Circle::new((0.0, t.v_q), 5, INK.filled())))?;
    legend.draw(root, super::plot_box(&chart))?;
    Ok(())
}
