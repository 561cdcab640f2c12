//! The design report (`ampchain report`): one self-contained HTML page holding the
//! whole plan, to mail, print or keep. Inline SVG and CSS, no scripts, no external
//! assets. Each part of the page is a [`Section`] in its own file; the page is the
//! sections in order ([`sections`]), so a new analysis adds its section here and
//! nowhere else.

mod chain_file;
mod diagram;
mod large_signal;
mod levels;
mod loadlines;
mod loop_gain;
mod noise;
mod plan;
mod response;
mod spread;
mod summary;

pub use large_signal::LargeSignalPart;
pub use spread::SpreadPart;

use crate::chain::Chain;
use crate::evaluate::Evaluation;
use crate::plot::DrawError;
use crate::report::noise::{DensityCurves, NoiseReport};
use crate::report::PlanReport;
use crate::report::ResponseReport;
use std::fmt::Write;

/// What every section reads: the chain as written and as evaluated.
pub struct Context<'a> {
    pub chain: &'a Chain,
    /// The chain file's text, as read.
    pub text: &'a str,
    /// The name the file goes by (its path, or "standard input").
    pub origin: &'a str,
    pub ev: &'a Evaluation,
    pub plan: &'a PlanReport,
    pub response: &'a ResponseReport,
    /// Noise over 20 Hz … 20 kHz, unweighted, and its density curves.
    pub noise: &'a NoiseReport,
    pub noise_curves: &'a DensityCurves,
    /// The large-signal figures, or why the chain has none.
    pub large_signal: Result<&'a LargeSignalPart, String>,
    /// A spread run, with `report --spread N`.
    pub spread: Option<&'a SpreadPart>,
}

/// One part of the page.
pub trait Section {
    /// The anchor of the section (`id` attribute), unique on the page.
    fn id(&self) -> &'static str;
    /// The heading shown above it and in the contents.
    fn title(&self) -> &'static str;
    /// Whether the page has this section (an analysis the run did not ask for has none).
    fn applies(&self, _cx: &Context) -> bool {
        true
    }
    /// Append the section's body (HTML) to `out`.
    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError>;
}

/// The page's sections, in order.
pub fn sections() -> Vec<Box<dyn Section>> {
    vec![
        Box::new(summary::Summary),
        Box::new(diagram::Diagram),
        Box::new(plan::Plan),
        Box::new(levels::Levels),
        Box::new(loadlines::LoadLines),
        Box::new(response::Response),
        Box::new(loop_gain::LoopGain),
        Box::new(noise::Noise),
        Box::new(large_signal::LargeSignalSection),
        Box::new(spread::Spread),
        Box::new(chain_file::ChainFile),
    ]
}

/// The whole page.
pub fn render(cx: &Context) -> Result<String, DrawError> {
    let title = cx.plan.title.as_deref().unwrap_or("Untitled chain");
    let mut page = String::new();
    let _ = write!(
        page,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n\
         <meta name=\"generator\" content=\"ampchain {}\"/>\n<title>{}</title>\n<style>{}</style>\n</head>\n<body>\n\
         <header><h1>{}</h1><p class=\"origin\">Design report for {}</p></header>\n",
        env!("CARGO_PKG_VERSION"),
        escape(title),
        STYLE,
        escape(title),
        escape(cx.origin)
    );
    let sections: Vec<_> = sections().into_iter().filter(|s| s.applies(cx)).collect();
    page.push_str("<nav><ol>");
    for s in &sections {
        let _ = write!(
            page,
            "<li><a href=\"#{}\">{}</a></li>",
            s.id(),
            escape(s.title())
        );
    }
    page.push_str("</ol></nav>\n");
    for s in &sections {
        let _ = write!(
            page,
            "<section id=\"{}\">\n<h2>{}</h2>\n",
            s.id(),
            escape(s.title())
        );
        s.render(cx, &mut page)?;
        page.push_str("</section>\n");
    }
    page.push_str("</body>\n</html>\n");
    Ok(page)
}

/// Text for HTML: `&`, `<`, `>`, quotes escaped; control characters (which no page
/// may hold) shown as `\u{…}`.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            '\n' | '\t' => out.push(c),
            c if c.is_control() => {
                let _ = write!(out, "\\u{{{:x}}}", c as u32);
            }
            c => out.push(c),
        }
    }
    out
}

/// An SVG document as an inline figure: the XML declaration dropped, a caption under it.
pub fn figure(svg: &str, caption: &str) -> String {
    let start = svg.find("<svg").unwrap_or(0);
    format!(
        "<figure>\n{}\n<figcaption>{}</figcaption>\n</figure>\n",
        svg[start..].trim_end(),
        escape(caption)
    )
}

/// A table with a header row; every cell escaped.
pub fn table(titles: &[&str], rows: &[Vec<String>]) -> String {
    let mut out = String::from("<table>\n<thead><tr>");
    for t in titles {
        let _ = write!(out, "<th>{}</th>", escape(t));
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    for row in rows {
        out.push_str("<tr>");
        for cell in row {
            let _ = write!(out, "<td>{}</td>", escape(cell));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody>\n</table>\n");
    out
}

/// The page's look on screen and on paper: figures never split across pages, each
/// major section on a new page when printed, links without colour in print.
const STYLE: &str = "
body { font-family: 'DejaVu Sans', 'Helvetica Neue', Arial, sans-serif; color: #1d2327; margin: 2em auto; max-width: 1100px; padding: 0 1.5em; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; border-bottom: 1px solid #c8ccd0; padding-bottom: 0.2em; margin-top: 2em; }
.origin { color: #5a6570; margin-top: 0; }
nav ol { columns: 2; font-size: 0.95em; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.8em 0; }
th, td { border: 1px solid #c8ccd0; padding: 0.25em 0.5em; text-align: left; vertical-align: top; }
th { background: #eef1f3; }
figure { margin: 1em 0; break-inside: avoid; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; display: block; }
figcaption { font-size: 0.85em; color: #5a6570; }
.caution { border: 2px solid #b3261e; background: #fdf3f2; padding: 0.6em 0.9em; }
.warnings li { margin: 0.2em 0; }
pre { background: #f6f8f9; border: 1px solid #c8ccd0; padding: 0.8em; overflow-x: auto; font-size: 0.8em; white-space: pre-wrap; }
@media print {
  body { margin: 0; max-width: none; font-size: 10pt; }
  nav { display: none; }
  section { break-before: page; page-break-before: always; }
  section:first-of-type { break-before: auto; page-break-before: auto; }
  a { color: inherit; text-decoration: none; }
  pre { white-space: pre-wrap; }
}
";
