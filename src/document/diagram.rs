//! The chain as a block diagram, drawn from its graph: the source, every stage with
//! its kind and key values, the loads, and each link labelled with its coupling.
//! Columns are the distance from the source in links; a column's blocks stack in
//! signal order.

use super::{escape, Context, Section};
use crate::graph::Port;
use crate::plot::DrawError;
use crate::units::format_si;
use std::fmt::Write;

pub struct Diagram;

const BOX_W: f64 = 180.0;
const BOX_H: f64 = 66.0;
const COLUMN: f64 = 250.0;
const ROW: f64 = 92.0;
const MARGIN: f64 = 16.0;

/// A block: where it sits and its three lines of text.
struct Block {
    column: usize,
    row: usize,
    lines: [String; 3],
}

impl Block {
    fn x(&self) -> f64 {
        MARGIN + self.column as f64 * COLUMN
    }
    fn y(&self) -> f64 {
        MARGIN + self.row as f64 * ROW
    }
}

impl Section for Diagram {
    fn id(&self) -> &'static str {
        "diagram"
    }

    fn title(&self) -> &'static str {
        "Block diagram"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let chain = cx.chain;
        let topo = &chain.topology;
        let n = chain.stages.len();
        // Blocks: 0 the source, 1..=n the stages, then the loads.
        let index = |p: Port| match p {
            Port::Source => 0,
            Port::Stage(i) => 1 + i,
            Port::Load(k) => 1 + n + k,
        };
        let mut depth = vec![0usize; 1 + n + chain.loads.len()];
        for &i in &topo.order {
            depth[1 + i] = depth[index(topo.stage_driver[i].0)] + 1;
        }
        for (k, (driver, _)) in topo.load_driver.iter().enumerate() {
            depth[1 + n + k] = depth[index(*driver)] + 1;
        }
        let mut rows_used = vec![0usize; depth.iter().max().copied().unwrap_or(0) + 1];
        let mut place = |block: usize| {
            let row = rows_used[depth[block]];
            rows_used[depth[block]] += 1;
            row
        };
        let level = chain
            .source
            .level
            .map_or("no planned level".to_string(), |l| {
                format!("{} rms", format_si(l.vrms, "V"))
            });
        let mut blocks: Vec<Block> = Vec::with_capacity(depth.len());
        blocks.push(Block {
            column: 0,
            row: place(0),
            lines: [
                "source".into(),
                format!("R_S {}", format_si(chain.source.r_s, "Ω")),
                level,
            ],
        });
        let mut stage_blocks: Vec<Option<Block>> = (0..n).map(|_| None).collect();
        for &i in &topo.order {
            let s = &cx.plan.stages[i];
            stage_blocks[i] = Some(Block {
                column: depth[1 + i],
                row: place(1 + i),
                lines: [
                    s.id.clone(),
                    s.kind.replace('_', " "),
                    format!(
                        "{} {}, gain {:+.1} dB",
                        // A JFET's drain current is I_D; an op-amp's pin current I_out.
                        if cx.chain.device_of(i).jfet.is_some() {
                            "I_D"
                        } else if cx.chain.device_of(i).opamp.is_some() {
                            "I_out"
                        } else {
                            "I_C"
                        },
                        format_si(s.op.i_c, "A"),
                        s.gain_db
                    ),
                ],
            });
        }
        blocks.extend(
            stage_blocks
                .into_iter()
                .map(|b| b.expect("every stage is in the signal order")),
        );
        for (k, load) in chain.loads.iter().enumerate() {
            blocks.push(Block {
                column: depth[1 + n + k],
                row: place(1 + n + k),
                lines: [
                    format!("load {}", load.id),
                    format!("R_L {}", format_si(load.r_l, "Ω")),
                    format!("{:+.1} dBu", cx.plan.loads[k].output_dbu),
                ],
            });
        }
        let width = MARGIN * 2.0
            + blocks.iter().map(|b| b.column).max().unwrap_or(0) as f64 * COLUMN
            + BOX_W;
        let height =
            MARGIN * 2.0 + (blocks.iter().map(|b| b.row).max().unwrap_or(0) as f64) * ROW + BOX_H;
        let mut svg = String::new();
        let _ = writeln!(
            svg,
            "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width:.0}\" height=\"{height:.0}\" viewBox=\"0 0 {width:.0} {height:.0}\" font-family=\"DejaVu Sans, Arial, sans-serif\" font-size=\"12\">"
        );
        svg.push_str("<defs><marker id=\"arrow\" viewBox=\"0 0 10 10\" refX=\"10\" refY=\"5\" markerWidth=\"7\" markerHeight=\"7\" orient=\"auto\"><path d=\"M0,0 L10,5 L0,10 z\" fill=\"#1d2327\"/></marker></defs>\n");
        // Links: from the driver's right edge to the fed block's left edge.
        let links = (0..n).map(|i| (topo.stage_driver[i], 1 + i)).chain(
            topo.load_driver
                .iter()
                .enumerate()
                .map(|(k, d)| (*d, 1 + n + k)),
        );
        for ((driver, coupling), to) in links {
            let (a, b) = (&blocks[index(driver)], &blocks[to]);
            let (x1, y1) = (a.x() + BOX_W, a.y() + BOX_H / 2.0);
            let (x2, y2) = (b.x(), b.y() + BOX_H / 2.0);
            let label = coupling.map_or("direct".to_string(), |c| format_si(c, "F"));
            let _ = writeln!(
                svg,
                "<line x1=\"{x1:.1}\" y1=\"{y1:.1}\" x2=\"{x2:.1}\" y2=\"{y2:.1}\" stroke=\"#1d2327\" stroke-width=\"1.5\" marker-end=\"url(#arrow)\"/>\n<text x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\" fill=\"#5a6570\">{}</text>",
                (x1 + x2) / 2.0,
                (y1 + y2) / 2.0 - 5.0,
                escape(&label)
            );
        }
        for b in &blocks {
            let _ = writeln!(
                svg,
                "<rect x=\"{:.1}\" y=\"{:.1}\" width=\"{BOX_W}\" height=\"{BOX_H}\" rx=\"6\" fill=\"#eef1f3\" stroke=\"#1d2327\"/>",
                b.x(),
                b.y()
            );
            for (k, line) in b.lines.iter().enumerate() {
                let weight = if k == 0 { " font-weight=\"bold\"" } else { "" };
                let _ = writeln!(
                    svg,
                    "<text x=\"{:.1}\" y=\"{:.1}\"{weight}>{}</text>",
                    b.x() + 8.0,
                    b.y() + 18.0 + 19.0 * k as f64,
                    escape(line)
                );
            }
        }
        svg.push_str("</svg>\n");
        out.push_str(&super::figure(
            &svg,
            "Source, stages and loads as the links join them; each link labelled with its coupling capacitor, or \"direct\".",
        ));
        Ok(())
    }
}
