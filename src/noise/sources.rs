//! The noise sources of a chain (docs/definitions.md "Noise"): one current source per
//! resistor and per transistor mechanism, each between two nodes of the flat netlist,
//! with its one-sided current density at the chain's temperature.
//!
//! - every resistor R of the file: thermal noise 4kT/R (A²/Hz) across it (its 4kTR
//!   voltage in Norton form); wires (0 Ω) and model resistances (r_π, r_o) have none;
//! - every transistor: base shot noise 2q·I_B between its own base (inside r_bb') and
//!   emitter, collector shot noise 2q·I_C between its own collector (inside r_c) and
//!   emitter, and base flicker noise 2q·I_B·f_c/f beside the base shot noise;
//! - every JFET: channel thermal noise 4kT·(2/3)·g_m between drain and source;
//! - every op-amp: `voltage_noise`² in series with its + input, `current_noise`² from
//!   each input pin to ground.

use crate::chain::Chain;
use crate::device::{DeviceModel, BOLTZMANN, ELEMENTARY_CHARGE};
use crate::evaluate::Evaluation;
use crate::large_signal::flat::{Netlist, Owner, GROUND_NODE};

/// A one-sided current density in A²/Hz as a function of frequency.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Spectrum {
    /// Flat: the same density at every frequency.
    White(f64),
    /// s0·f_c/f: flicker noise with corner f_c over a white density s0.
    Flicker { s0: f64, f_c: f64 },
}

impl Spectrum {
    /// The density at `f` hertz.
    pub fn at(self, f: f64) -> f64 {
        match self {
            Spectrum::White(s0) => s0,
            Spectrum::Flicker { s0, f_c } => s0 * f_c / f,
        }
    }
}

/// What a noise source is, for reports.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Mechanism {
    /// Thermal noise of a resistor of this many ohms.
    Thermal {
        r: f64,
    },
    BaseShot,
    CollectorShot,
    BaseFlicker,
    /// A JFET's channel thermal noise 4kT·(2/3)·g_m.
    ChannelThermal,
    /// An op-amp's `voltage_noise` e_n², a series source at its + input (V²/Hz).
    OpampVoltage,
    /// An op-amp's `current_noise` i_n², from an input pin to ground.
    OpampCurrent,
}

/// One noise current source between nodes `a` and `b` of the flat netlist.
#[derive(Debug, Clone, PartialEq)]
pub struct NoiseSource {
    /// The stage it belongs to; `None` for the source resistance and the loads.
    pub stage: Option<usize>,
    /// Its name in reports (docs/definitions.md "Noise"): the chain-file key
    /// (`r_collector`, `base_resistance`, `supply_filter.resistance`),
    /// `source_resistance`, `load:<id>`, `base_shot`, `collector_shot`, `base_flicker`.
    pub element: String,
    pub mechanism: Mechanism,
    pub a: usize,
    pub b: usize,
    /// A voltage source in series with op-amp k's + input (`Netlist::opamps`), whose
    /// transfer is `NoiseNetwork::series_transfer` (`a`, `b` unused); `None` for a
    /// current source from `a` into `b`.
    pub series: Option<usize>,
    pub spectrum: Spectrum,
}

/// Thermal noise current density of a resistor: 4kT/R (Johnson–Nyquist; the 4kTR
/// voltage density over R²).
pub fn thermal_current_density(r: f64, temperature: f64) -> f64 {
    4.0 * BOLTZMANN * temperature / r
}

/// Shot noise current density of a DC current I: 2qI (Schottky).
pub fn shot_density(i: f64) -> f64 {
    2.0 * ELEMENTARY_CHARGE * i.abs()
}

/// Channel thermal noise current density of a JFET in saturation: 4kT·(2/3)·g_m
/// (the long-channel textbook value, from memory).
pub fn channel_thermal_density(g_m: f64, temperature: f64) -> f64 {
    4.0 * BOLTZMANN * temperature * (2.0 / 3.0) * g_m
}

/// Every noise source of `chain` on its netlist `net`, at the operating points of
/// the midband evaluation `mid`.
pub fn noise_sources(chain: &Chain, net: &Netlist, mid: &Evaluation) -> Vec<NoiseSource> {
    let t = chain.temperature;
    let mut out = Vec::new();
    for r in net.resistors.iter().filter(|r| r.r > 0.0) {
        let (stage, element) = match r.owner {
            Owner::Stage(i) => (Some(i), r.name.to_string()),
            Owner::Source => (None, "source_resistance".to_string()),
            Owner::Load(k) => (None, format!("load:{}", chain.loads[k].id)),
            // docs/definitions.md "Noise": `feedback:<from>-><to>`.
            Owner::Feedback(k) => {
                let l = &chain.topology.feedback[k];
                let id = |i: usize| chain.stages[i].id.as_str();
                (None, format!("feedback:{}->{}", id(l.from), id(l.to)))
            }
            // Links and fixed nodes carry no resistor today (a direct link is a wire).
            Owner::Link { .. } | Owner::Fixed => (None, r.name.to_string()),
        };
        out.push(NoiseSource {
            stage,
            element,
            mechanism: Mechanism::Thermal { r: r.r },
            a: r.a,
            b: r.b,
            series: None,
            spectrum: Spectrum::White(thermal_current_density(r.r, t)),
        });
    }
    for tr in &net.transistors {
        let op = &mid.dc[tr.stage].op;
        let device = &chain.devices[tr.device];
        let n = tr.nodes;
        let mut push = |element: &str, mechanism, a, spectrum| {
            out.push(NoiseSource {
                stage: Some(tr.stage),
                element: element.to_string(),
                mechanism,
                a,
                b: n.e,
                series: None,
                spectrum,
            })
        };
        if let Some(j) = device.jfet_model() {
            // Channel thermal noise 4kT·(2/3)·g_m between drain and source
            // (docs/definitions.md "Noise"); the gate draws no current, so no shot noise.
            let g_m = j.small_signal(op, mid.v_t).g_m;
            push(
                "channel_thermal",
                Mechanism::ChannelThermal,
                n.c,
                Spectrum::White(channel_thermal_density(g_m, t)),
            );
            continue;
        }
        let s_b = shot_density(op.i_b);
        push("base_shot", Mechanism::BaseShot, n.b, Spectrum::White(s_b));
        push(
            "collector_shot",
            Mechanism::CollectorShot,
            n.c,
            Spectrum::White(shot_density(op.i_c)),
        );
        if device.flicker_corner > 0.0 {
            push(
                "base_flicker",
                Mechanism::BaseFlicker,
                n.b,
                Spectrum::Flicker {
                    s0: s_b,
                    f_c: device.flicker_corner,
                },
            );
        }
    }
    // Op-amps: e_n² in series with + (docs/definitions.md "Noise"), i_n² from each
    // input pin to ground.
    for (k, o) in net.opamps.iter().enumerate() {
        let Some(amp) = chain.devices[o.device].opamp else {
            continue;
        };
        if amp.voltage_noise > 0.0 {
            out.push(NoiseSource {
                stage: Some(o.stage),
                element: "voltage_noise".into(),
                mechanism: Mechanism::OpampVoltage,
                a: o.plus,
                b: o.plus,
                series: Some(k),
                spectrum: Spectrum::White(amp.voltage_noise.powi(2)),
            });
        }
        if amp.current_noise > 0.0 {
            for (element, pin) in [
                ("current_noise_plus", o.plus),
                ("current_noise_minus", o.minus),
            ] {
                out.push(NoiseSource {
                    stage: Some(o.stage),
                    element: element.into(),
                    mechanism: Mechanism::OpampCurrent,
                    a: pin,
                    b: GROUND_NODE,
                    series: None,
                    spectrum: Spectrum::White(amp.current_noise.powi(2)),
                });
            }
        }
    }
    out
}
