//! The noise floor: output noise density with its largest contributors, and per load
//! the output noise, EIN, noise figure, SNR and what sets the noise; per stage its
//! dynamic range (`ampchain noise`).

use super::{escape, figure, table, Context, Section};
use crate::plot::noise::noise_svg;
use crate::plot::DrawError;
use crate::units::format_si;
use std::fmt::Write;

pub struct Noise;

/// Contributors listed per load (those of at least 1 %).
const LISTED: usize = 8;

fn optional_db(x: Option<f64>) -> String {
    x.map_or("—".into(), |x| format!("{x:.1} dB"))
}

impl Section for Noise {
    fn id(&self) -> &'static str {
        "noise"
    }

    fn title(&self) -> &'static str {
        "Noise floor, SNR and dynamic range"
    }

    fn render(&self, cx: &Context, out: &mut String) -> Result<(), DrawError> {
        let r = cx.noise;
        let band = format!(
            "{} to {}",
            format_si(r.band.from, "Hz"),
            format_si(r.band.to, "Hz")
        );
        out.push_str(&figure(
            &noise_svg(cx.noise_curves, None)?,
            &format!("Output noise density at each load and its largest contributors, {band}."),
        ));
        for l in &r.loads {
            let _ = writeln!(out, "<h3>Load \"{}\"</h3>", escape(&l.id));
            let _ = writeln!(
                out,
                "<p>Output noise {} rms over {band}, unweighted; EIN {} rms ({:.1} dBu), {}/√Hz at 1 kHz; noise figure {}; SNR {} at the planned input.</p>",
                format_si(l.output_noise_vrms, "V"),
                format_si(l.ein_vrms, "V"),
                l.ein_dbu,
                format_si(l.ein_density_at_1khz, "V"),
                optional_db(l.noise_figure_db),
                optional_db(l.snr_db),
            );
            let rows: Vec<Vec<String>> = l
                .contributions
                .iter()
                .filter(|c| c.share >= 0.01)
                .take(LISTED)
                .map(|c| vec![c.source.clone(), format!("{:.0} %", 100.0 * c.share)])
                .collect();
            out.push_str(&table(
                &["source", "share of the output noise power"],
                &rows,
            ));
        }
        let rows: Vec<Vec<String>> = r
            .stages
            .iter()
            .map(|s| {
                vec![
                    s.id.clone(),
                    format!("{} rms", format_si(s.output_noise_vrms, "V")),
                    optional_db(s.dynamic_range_db),
                ]
            })
            .collect();
        out.push_str(&table(&["stage", "output noise", "dynamic range"], &rows));
        Ok(())
    }
}
