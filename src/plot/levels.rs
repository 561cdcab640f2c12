//! Level diagram of a chain: one column per node from the source to the loads, the
//! signal level at the planned input, each stage's clip ceiling with the headroom
//! between them shaded, the first stage to clip highlighted and each stage's gain
//! written between the columns. Every number comes from [`PlanReport`].

use super::tick_label;
use super::{
    boxed_text, draw_error, plot_box, DrawError, LabelBox, PlacedLabel, Sample, ALERT, FONT, GRID,
    INK, LABEL_SIZE, ORANGE, SAND, SIZE, TEAL, TICK_SIZE, TITLE_SIZE,
};
use crate::chain::Chain;
use crate::graph::Port;
use crate::report::{db, PlanReport};
use crate::units::{format_si, Level};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

const CHART: &str = "level diagram";

/// Half the width of a column's headroom bar, in columns.
const HALF_BAR: f64 = 0.22;

/// One column of the diagram: the source, a stage's output node or a load.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub port: Port,
    pub id: String,
    /// Second label line: what the node is.
    pub what: String,
    /// Signal level at the planned input in dBu: the source's EMF, a stage's output,
    /// the voltage across a load.
    pub level_dbu: f64,
    /// Stages only: the clip ceiling, the smaller swing limit at the output taken as a
    /// sine's peak, in dBu; and the headroom to it at the planned input.
    pub ceiling_dbu: Option<f64>,
    pub headroom_db: Option<f64>,
    /// Index of the driver's column (none for the source).
    pub driver: Option<usize>,
    /// Stages only: the loaded gain v(out)/v(in), signed, and in dB.
    pub gain: Option<(f64, f64)>,
    /// Stages the source drives: the loss from the EMF to the stage input (source
    /// resistance against the input impedance), in dB.
    pub divider_db: Option<f64>,
    pub clips_first: bool,
    /// With the plan's noise report: the output noise at this node in dBu (stages
    /// and loads).
    pub floor_dbu: Option<f64>,
}

impl Column {
    /// A node without a ceiling or a gain: the source or a load.
    fn plain(port: Port, id: &str, what: String, level_dbu: f64, driver: Option<usize>) -> Self {
        Column {
            port,
            id: id.to_string(),
            what,
            level_dbu,
            ceiling_dbu: None,
            headroom_db: None,
            driver,
            gain: None,
            divider_db: None,
            clips_first: false,
            floor_dbu: None,
        }
    }
}

/// The columns in signal order: depth first from the source, each driver followed by
/// its successors in link order, so every branch of a fan-out sits together.
pub fn columns(chain: &Chain, report: &PlanReport) -> Vec<Column> {
    let mut out: Vec<Column> = Vec::new();
    let mut stack: Vec<(Port, Option<usize>)> = vec![(Port::Source, None)];
    while let Some((port, driver)) = stack.pop() {
        let column = match port {
            Port::Source => Column::plain(
                port,
                "source",
                format!("EMF, {}", format_si(report.source.resistance, "Ω")),
                report.input.dbu,
                driver,
            ),
            Port::Stage(i) => {
                let s = &report.stages[i];
                // A stage that never clips (passive) has no ceiling.
                let limit = s.limit_up.min(s.limit_down);
                let ceiling = limit.is_finite().then(|| Level::from_vpeak(limit).dbu());
                Column {
                    port,
                    id: s.id.clone(),
                    what: s.kind.replace('_', " "),
                    level_dbu: s.output_dbu,
                    ceiling_dbu: ceiling,
                    headroom_db: ceiling.map(|_| s.headroom_db),
                    driver,
                    gain: Some((s.gain, s.gain_db)),
                    divider_db: (s.input_from == "source")
                        .then(|| db(s.input_vrms / report.input.vrms)),
                    clips_first: s.id == report.first_clip.stage,
                    floor_dbu: report
                        .noise
                        .as_ref()
                        .map(|n| Level::from_vrms(n.stages[i].output_noise_vrms).dbu()),
                }
            }
            Port::Load(k) => {
                let l = &report.loads[k];
                Column {
                    floor_dbu: report
                        .noise
                        .as_ref()
                        .map(|n| Level::from_vrms(n.loads[k].output_noise_vrms).dbu()),
                    ..Column::plain(
                        port,
                        &l.id,
                        format!("load {}", format_si(l.resistance, "Ω")),
                        l.output_dbu,
                        driver,
                    )
                }
            }
        };
        let here = out.len();
        out.push(column);
        if !matches!(port, Port::Load(_)) {
            // Pushed in reverse so that the first link is drawn first.
            for b in chain.topology.successors(port).iter().rev() {
                stack.push((b.to, Some(here)));
            }
        }
    }
    out
}

/// The level diagram of the chain as an SVG document.
pub fn render(chain: &Chain, report: &PlanReport) -> Result<String, DrawError> {
    render_with_labels(chain, report).map(|(svg, _)| svg)
}

/// The labels [`render`] writes, with the boxes it reckons them to cover.
pub fn labels(chain: &Chain, report: &PlanReport) -> Result<Vec<PlacedLabel>, DrawError> {
    render_with_labels(chain, report).map(|(_, labels)| labels)
}

fn render_with_labels(
    chain: &Chain,
    report: &PlanReport,
) -> Result<(String, Vec<PlacedLabel>), DrawError> {
    let cols = columns(chain, report);
    let mut svg = String::new();
    let labels = {
        // Wider than the house size when many columns need room for their labels.
        let width = SIZE.0.max(120 + 110 * cols.len() as u32);
        let root = SVGBackend::with_string(&mut svg, (width, SIZE.1)).into_drawing_area();
        let labels = draw(&root, report, &cols).map_err(draw_error(CHART))?;
        root.present().map_err(draw_error(CHART))?;
        labels
    };
    Ok((svg, labels))
}

/// A label of the diagram: its text and look, where it goes and the box it covers.
#[derive(Clone)]
struct Mark {
    text: String,
    size: u32,
    bold: bool,
    colour: RGBColor,
    pos: Pos,
    at: (i32, i32),
    /// Drawn over a white box (it may cross lines).
    boxed: bool,
    /// The column whose marks above the axis it belongs to (a fan-out's arch passes
    /// over them).
    column: Option<usize>,
    area: LabelBox,
}

impl Mark {
    fn new(text: String, size: u32, colour: RGBColor, pos: Pos, at: (i32, i32)) -> Mark {
        let area = LabelBox::of(&text, size, pos, at);
        Mark {
            text,
            size,
            bold: false,
            colour,
            pos,
            at,
            boxed: true,
            column: None,
            area,
        }
    }

    fn styled(mut self, bold: bool, boxed: bool) -> Mark {
        self.bold = bold;
        self.boxed = boxed;
        self
    }

    fn in_column(mut self, k: usize) -> Mark {
        self.column = Some(k);
        self
    }
}

/// Pixels of the plotting area the layout needs: the map from (column, dBu) and the
/// pixel rows of the axis's top and bottom.
struct Frame<'a> {
    to_px: &'a dyn Fn((f64, f64)) -> (i32, i32),
    top: i32,
    bottom: i32,
}

/// Lays the labels out. Rule: names under the axis and gains along the top stay where
/// they are; then each level beside its dot, each headroom inside its bar and each
/// column's ceiling labels, in that order, take the first of their candidate spots
/// whose estimated box ([`LabelBox`]) meets none placed before nor the legend. The
/// labels in drawing order, and whether every one found a clear spot.
fn layout(
    report: &PlanReport,
    cols: &[Column],
    frame: &Frame,
    legend: &PlacedLabel,
) -> (Vec<Mark>, bool) {
    let mut marks: Vec<Mark> = Vec::new();
    let mut all_clear = true;
    let taken = |marks: &[Mark]| -> Vec<PlacedLabel> {
        let mut placed: Vec<PlacedLabel> = marks.iter().map(placed_label).collect();
        placed.push(legend.clone());
        placed
    };
    // Place the first clear candidate, or the first one when none is.
    let mut place = |marks: &mut Vec<Mark>, candidates: Vec<Mark>| {
        let placed = taken(marks);
        let inside =
            |m: &Mark| m.area.y0 >= f64::from(frame.top) && m.area.y1 <= f64::from(frame.bottom);
        let chosen = super::first_clear(
            &placed,
            candidates.iter().filter(|m| inside(m)).map(|m| (m, m.area)),
        );
        match chosen {
            Some((m, _)) => marks.push(m.clone()),
            None => {
                all_clear = false;
                if let Some(m) = candidates.first() {
                    marks.push(m.clone());
                }
            }
        }
    };
    for (j, c) in cols.iter().enumerate() {
        let (px, _) = (frame.to_px)((j as f64, c.level_dbu));
        // Node name under the axis (the first stage to clip in the alert colour), what
        // it is, and a fan-out branch's driver.
        let name_colour = if c.clips_first { ALERT } else { INK };
        let mut rows = vec![
            (c.id.clone(), LABEL_SIZE, true, name_colour, 8),
            (c.what.clone(), TICK_SIZE, false, INK, 28),
        ];
        if let Some(d) = c.driver.filter(|&d| d + 1 != j) {
            rows.push((format!("fed by {}", cols[d].id), TICK_SIZE, false, INK, 44));
        }
        for (text, size, bold, colour, dy) in rows {
            let at = (px, frame.bottom + dy);
            let top = Pos::new(HPos::Center, VPos::Top);
            marks.push(Mark::new(text, size, colour, top, at).styled(bold, false));
        }
    }
    // Gains between the columns, along the top.
    for (j, c) in cols.iter().enumerate() {
        let Some((gain, gain_db)) = c.gain else {
            continue;
        };
        let (gx, _) = (frame.to_px)((j as f64 - 0.5, 0.0));
        let mut lines = vec![gain_db_text(gain_db), format!("×{}", trim_gain(gain))];
        if let Some(d) = c.divider_db {
            lines.push(format!("source loading {} dB", signed(d)));
        }
        for (k, text) in lines.into_iter().enumerate() {
            let size = if k == 0 { LABEL_SIZE } else { TICK_SIZE };
            let at = (gx, frame.top + 6 + 16 * k as i32);
            marks.push(Mark::new(
                text,
                size,
                INK,
                Pos::new(HPos::Center, VPos::Top),
                at,
            ));
        }
    }
    // Each level beside its dot: right of it, then a little above or below, then left.
    for (j, c) in cols.iter().enumerate() {
        let (px, py) = (frame.to_px)((j as f64, c.level_dbu));
        let text = format!("{} dBu", signed(c.level_dbu));
        let mut candidates = Vec::new();
        for (h, x) in [(HPos::Left, px + 10), (HPos::Right, px - 10)] {
            for dy in [0, -14, 14, -28, 28] {
                candidates.push(
                    Mark::new(
                        text.clone(),
                        TICK_SIZE,
                        INK,
                        Pos::new(h, VPos::Center),
                        (x, py + dy),
                    )
                    .in_column(j),
                );
            }
        }
        place(&mut marks, candidates);
    }
    // Ceilings: the headroom inside its bar when the bar holds it (from the middle
    // toward the ceiling), then the labels stacked on the side of the ceiling bar away
    // from the level dot: the ceiling, the headroom when the bar cannot hold it, the
    // alert; each line one step further out when its spot is taken.
    for (j, c) in cols.iter().enumerate() {
        let Some(ceiling) = c.ceiling_dbu else {
            continue;
        };
        let x = j as f64;
        let (px, py) = (frame.to_px)((x, c.level_dbu));
        let (_, cy) = (frame.to_px)((x, ceiling));
        let over = c.level_dbu > ceiling;
        let colour = if c.clips_first { ALERT } else { INK };
        let headroom = c.headroom_db.map(|h| {
            if h >= 0.0 {
                format!("{h:.1} dB")
            } else {
                format!("over by {:.1} dB", -h)
            }
        });
        let mut stack = vec![(format!("ceiling {} dBu", signed(ceiling)), colour)];
        let mut inside_placed = false;
        if let (Some(text), true) = (&headroom, headroom_fits_inside(cy, py)) {
            let (bar_lo, bar_hi) = (cy.min(py) + 3, cy.max(py) - 3);
            let mid = (cy + py) / 2;
            let toward = (cy - py).signum();
            let candidates: Vec<Mark> = (0..8)
                .map(|k| {
                    Mark::new(
                        text.clone(),
                        TICK_SIZE,
                        INK,
                        Pos::new(HPos::Center, VPos::Center),
                        (px, mid + toward * 3 * k),
                    )
                    .styled(false, false)
                    .in_column(j)
                })
                .filter(|m| m.area.y0 >= f64::from(bar_lo) && m.area.y1 <= f64::from(bar_hi))
                .collect();
            let placed = taken(&marks);
            if let Some((m, _)) =
                super::first_clear(&placed, candidates.iter().map(|m| (m, m.area)))
            {
                marks.push(m.clone());
                inside_placed = true;
            }
        }
        if let (Some(text), false) = (&headroom, inside_placed) {
            stack.push((format!("headroom {text}"), INK));
        }
        if c.clips_first {
            stack.push((
                format!("clips first, toward {}", report.first_clip.toward),
                ALERT,
            ));
        }
        let (v, step): (VPos, i32) = if over {
            (VPos::Top, 16)
        } else {
            (VPos::Bottom, -16)
        };
        let mut next = cy + step.signum() * 5;
        for (text, colour) in stack {
            let candidates: Vec<Mark> = (0..8)
                .map(|k| {
                    Mark::new(
                        text.clone(),
                        TICK_SIZE,
                        colour,
                        Pos::new(HPos::Center, v),
                        (px, next + step * k),
                    )
                    .in_column(j)
                })
                .collect();
            place(&mut marks, candidates);
            next = marks.last().map_or(next, |m| m.at.1) + step;
        }
    }
    (marks, all_clear)
}

fn placed_label(m: &Mark) -> PlacedLabel {
    PlacedLabel {
        text: m.text.clone(),
        area: m.area,
    }
}

/// Most 10 dB steps the top of the axis rises to make room for the labels.
const MAX_RISES: usize = 8;

fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    report: &PlanReport,
    cols: &[Column],
) -> Result<Vec<PlacedLabel>, DrawingAreaErrorKind<DB::ErrorType>> {
    root.fill(&WHITE)?;
    let title = report.title.as_deref().unwrap_or("ampchain");
    let body = root.titled(
        &super::title_fit(title),
        (FONT, TITLE_SIZE).into_font().color(&INK),
    )?;
    let (w, _) = body.dim_in_pixel();
    let first = &report.first_clip;
    let line = format!(
        "level diagram at the planned input {} dBu ({} rms) from {} · first to clip: \"{}\", toward {}, at {} dBu input",
        signed(report.input.dbu),
        format_si(report.input.vrms, "V"),
        format_si(report.source.resistance, "Ω"),
        first.stage,
        first.toward,
        signed(first.input_dbu),
    );
    let sub = TextStyle::from((FONT, LABEL_SIZE).into_font())
        .color(&INK)
        .pos(Pos::new(HPos::Center, VPos::Top));
    body.draw_text(&line, &sub, (w as i32 / 2, 2))?;
    let (_, area) = body.split_vertically(26);

    // dBu range: every level and ceiling, with room for labels, on 10 dB lines.
    let values = cols.iter().flat_map(|c| {
        std::iter::once(c.level_dbu)
            .chain(c.ceiling_dbu)
            .chain(c.floor_dbu)
    });
    let values = values.filter(|v| v.is_finite());
    let lo = values.clone().fold(f64::INFINITY, f64::min);
    let hi = values.fold(f64::NEG_INFINITY, f64::max);
    let y_lo = ((lo - 12.0) / 10.0).floor() * 10.0;
    let n = cols.len() as f64;

    // The legend: what is drawn, in drawing order.
    let mut legend = super::Legend::new(super::Corner::LowerRight, TICK_SIZE);
    for over in [false, true] {
        let any = cols.iter().any(|c| {
            c.ceiling_dbu
                .is_some_and(|ceiling| (c.level_dbu > ceiling) == over)
        });
        if any && over {
            let text = "over the ceiling: clips at the planned input";
            legend.add(text, Sample::block(ALERT.mix(0.35)));
        } else if any {
            legend.add("headroom at the planned input", Sample::block(SAND));
        }
    }
    let clip_ceiling = "clip ceiling: the smaller swing limit, as a sine";
    legend.add(clip_ceiling, Sample::line(TEAL, 4));
    legend.add("ceiling of the first stage to clip", Sample::line(ALERT, 7));
    let floors = cols.iter().any(|c| c.floor_dbu.is_some());
    if floors {
        let text = "noise floor: output noise, 20 Hz … 20 kHz";
        legend.add(text, Sample::line(ORANGE, 4));
    }
    if cols.get(1).is_some_and(|c| c.driver == Some(0)) {
        legend.add(
            "signal level at the planned input",
            Sample::Dot(INK.to_rgba()),
        );
    }

    // The top of the axis rises by 10 dB until every label finds a clear spot.
    let y_hi_least = ((hi + 14.0) / 10.0).ceil() * 10.0;
    let mut y_hi = y_hi_least;
    let (mut chart, marks) = loop {
        let chart = ChartBuilder::on(&area)
            .margin_left(12)
            .margin_right(56)
            .margin_bottom(8)
            .x_label_area_size(66)
            .y_label_area_size(70)
            .build_cartesian_2d(-0.5..n - 0.5, y_lo..y_hi)?;
        let to_px = |p: (f64, f64)| chart.backend_coord(&p);
        let frame = Frame {
            to_px: &to_px,
            top: to_px((0.0, y_hi)).1,
            bottom: to_px((0.0, y_lo)).1,
        };
        let (marks, clear) = layout(report, cols, &frame, &legend.area(plot_box(&chart)));
        if clear || y_hi >= y_hi_least + 10.0 * MAX_RISES as f64 {
            break (chart, marks);
        }
        y_hi += 10.0;
    };
    chart
        .configure_mesh()
        .disable_x_mesh()
        .x_labels(0)
        .y_labels(((y_hi - y_lo) / 10.0) as usize + 1)
        .light_line_style(TRANSPARENT)
        .bold_line_style(GRID)
        .axis_style(INK)
        .y_desc("signal level (dBu)")
        .axis_desc_style((FONT, LABEL_SIZE).into_font().color(&INK))
        .label_style((FONT, TICK_SIZE).into_font().color(&INK))
        .y_label_formatter(&|v| signed_tick(*v))
        .draw()?;

    // Headroom bars between level and ceiling; a stage driven past its ceiling gets
    // the alert colour (levels after it are the linear plan's, not what it delivers).
    for over in [false, true] {
        let bars: Vec<_> = cols
            .iter()
            .enumerate()
            .filter_map(|(j, c)| {
                c.ceiling_dbu
                    .map(|ceiling| (j as f64, c.level_dbu, ceiling))
            })
            .filter(|&(_, level, ceiling)| (level > ceiling) == over)
            .collect();
        let fill = if over {
            ALERT.mix(0.35).filled()
        } else {
            SAND.filled()
        };
        chart.draw_series(bars.into_iter().map(|(x, level, ceiling)| {
            Rectangle::new([(x - HALF_BAR, level), (x + HALF_BAR, ceiling)], fill)
        }))?;
    }
    // The first stage to clip gets a heavier bar, so it stands out in greyscale too.
    let ceiling_bar = |c: &Column, x: f64| {
        let (colour, width) = if c.clips_first { (ALERT, 7) } else { (TEAL, 4) };
        PathElement::new(
            vec![
                (x - HALF_BAR - 0.04, c.ceiling_dbu.unwrap_or_default()),
                (x + HALF_BAR + 0.04, c.ceiling_dbu.unwrap_or_default()),
            ],
            colour.stroke_width(width),
        )
    };
    chart.draw_series(
        cols.iter()
            .enumerate()
            .filter(|(_, c)| c.ceiling_dbu.is_some() && !c.clips_first)
            .map(|(j, c)| ceiling_bar(c, j as f64)),
    )?;
    chart.draw_series(
        cols.iter()
            .enumerate()
            .filter(|(_, c)| c.clips_first)
            .map(|(j, c)| ceiling_bar(c, j as f64)),
    )?;

    // The noise floor under each node (`plot levels --noise`).
    if floors {
        chart.draw_series(cols.iter().enumerate().filter_map(|(j, c)| {
            let (x, floor) = (j as f64, c.floor_dbu?);
            Some(PathElement::new(
                vec![(x - HALF_BAR - 0.04, floor), (x + HALF_BAR + 0.04, floor)],
                ORANGE.stroke_width(4),
            ))
        }))?;
    }

    // The signal's path from each driver's level to its successor's. A branch of a
    // fan-out that skips columns arches over them from dot to dot, so it cannot be
    // read as passing through the nodes in between.
    for (j, c) in cols.iter().enumerate() {
        let Some(d) = c.driver else { continue };
        let from = (d as f64, cols[d].level_dbu);
        let to = (j as f64, c.level_dbu);
        if j == d + 1 {
            chart.draw_series(std::iter::once(PathElement::new(
                vec![from, to],
                INK.stroke_width(2),
            )))?;
        } else {
            let (p0, p1) = (chart.backend_coord(&from), chart.backend_coord(&to));
            // High enough to pass over every mark and label of the columns it skips
            // (with a 6 px gap), never lower than a gentle arch.
            let mut rise = 28.0 + 6.0 * (j - d) as f64;
            for (k, skipped) in cols.iter().enumerate().take(j).skip(d + 1) {
                let t = (k - d) as f64 / (j - d) as f64;
                let line = f64::from(p0.1) + t * f64::from(p1.1 - p0.1);
                let (_, dot) = chart.backend_coord(&(k as f64, skipped.level_dbu));
                let clear = column_top(&marks, k, dot) - 6.0;
                rise = rise.max((line - clear) / (4.0 * t * (1.0 - t)));
            }
            let arc: Vec<(i32, i32)> = (0..=40)
                .map(|k| {
                    let t = f64::from(k) / 40.0;
                    let x = f64::from(p0.0) + t * f64::from(p1.0 - p0.0);
                    let y =
                        f64::from(p0.1) + t * f64::from(p1.1 - p0.1) - 4.0 * rise * t * (1.0 - t);
                    (x.round() as i32, y.round() as i32)
                })
                .collect();
            root.draw(&PathElement::new(arc, INK.stroke_width(2)))?;
        }
    }
    chart.draw_series(
        cols.iter()
            .enumerate()
            .map(|(j, c)| Circle::new((j as f64, c.level_dbu), 6, INK.filled())),
    )?;

    let plot = plot_box(&chart);
    legend.draw(root, plot)?;

    // Labels, in pixels, where the layout put them.
    for m in &marks {
        let font = if m.bold {
            (FONT, m.size, FontStyle::Bold).into_font()
        } else {
            (FONT, m.size).into_font()
        };
        let style = TextStyle::from(font).color(&m.colour).pos(m.pos);
        if m.boxed {
            boxed_text(root, &m.text, &style, m.size, m.at)?;
        } else {
            root.draw_text(&m.text, &style, m.at)?;
        }
    }
    let mut labels: Vec<PlacedLabel> = marks.iter().map(placed_label).collect();
    labels.push(legend.area(plot));
    Ok(labels)
}

/// Whether a headroom bar from pixel `py` (level) to `cy` (ceiling) is tall enough
/// to hold its number.
fn headroom_fits_inside(cy: i32, py: i32) -> bool {
    (cy - py).abs() >= 24
}

/// The highest pixel (smallest y) column `k`'s marks reach: its level dot (centre at
/// pixel row `dot`) and its labels above the axis.
fn column_top(marks: &[Mark], k: usize, dot: i32) -> f64 {
    marks
        .iter()
        .filter(|m| m.column == Some(k))
        .map(|m| m.area.y0)
        .fold(f64::from(dot - 10), f64::min)
}

/// A level in dB with its sign, one decimal, and a true minus sign.
fn signed(v: f64) -> String {
    super::minus_sign(&format!("{v:+.1}"))
}

/// A dBu tick: signed, except at zero.
fn signed_tick(v: f64) -> String {
    let t = tick_label(v);
    if v > 0.0 && t != "0" {
        format!("+{t}")
    } else {
        t
    }
}

/// A gain in dB with its sign (a true minus): one decimal, two below 1 dB.
fn gain_db_text(g_db: f64) -> String {
    let text = if g_db.abs() < 0.95 {
        format!("{g_db:+.2} dB")
    } else {
        format!("{g_db:+.1} dB")
    };
    super::minus_sign(&text)
}

/// A signed gain with four significant digits and a true minus sign.
fn trim_gain(g: f64) -> String {
    let digits = (3 - g.abs().log10().floor() as i32).clamp(0, 3) as usize;
    super::minus_sign(&format!("{g:.digits$}"))
}
