//! `ampchain plot KIND …`: pictures as SVG files.

use super::plot_signal;
use ampchain::error::Error;
use clap::Subcommand;
use std::process::ExitCode;

#[derive(Subcommand)]
pub enum PlotCommand {
    /// The waveform at every node over one period, at one input level.
    Waveform(plot_signal::WaveformArgs),
    /// THD against input level for every stage's output.
    Distortion(plot_signal::DistortionArgs),
}

pub fn run(cmd: &PlotCommand) -> Result<ExitCode, Error> {
    match cmd {
        PlotCommand::Waveform(a) => plot_signal::run_waveform(a),
        PlotCommand::Distortion(a) => plot_signal::run_distortion(a),
    }
}
