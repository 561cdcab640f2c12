//! Independent reference for the planner: the whole chain flattened into ONE nodal
//! network and solved directly.
//!
//! Nothing here uses the planner's computation. The chain file is read with the crate's
//! parser (parsing is not under test), then every resistor, transistor, link and load
//! becomes an element between terminals of one flat network:
//! - DC: Newton–Raphson on the node voltages with a damped step (no junction voltage may
//!   move by more than `MAX_JUNCTION_STEP` per iteration), from a cold start at 0 V.
//! - Midband AC: the network linearised at the DC solution (the exact Jacobian of the
//!   transistor model), capacitors as shorts, the supply as AC ground, solved as a
//!   complex nodal system with nalgebra's LU.
//! - AC at a frequency f: the same linearised network with every capacitor as an
//!   admittance j·2πf·C (coupling, bypass, source and load shunt capacitances) and
//!   C_π = g_m/(2π·f_T) − C_μ (clamped at 0), C_μ = `c_bc` on each transistor.
//!
//! Wires (direct links, zero resistances, capacitors at AC, the supply at AC) are not
//! huge conductances: the terminals they join are merged into one node, so no
//! conditioning is lost. Impedances are measured the way one measures them on the
//! bench: cut the relevant links, zero the source EMF, inject a 1 A test current.
//!
//! Each test crate uses a different part of this module.
#![allow(dead_code)]

pub mod generate;
pub mod noise;

use ampchain::spec::{parse_chain_text, StageSpec, ValueSpec};
use ampchain::units::{parse_gain, parse_level, parse_value, Kind};
use nalgebra::{Complex, DMatrix, DVector};

/// Boltzmann constant, J/K (exact, SI 2019 redefinition).
pub const BOLTZMANN: f64 = 1.380649e-23;
/// Elementary charge, C (exact, SI 2019 redefinition).
pub const ELEMENTARY_CHARGE: f64 = 1.602176634e-19;
/// 0 dBu = √0.6 V rms (1 mW into 600 Ω).
pub const DBU_REF_VRMS: f64 = 0.774_596_669_241_483_4;
/// Largest change of any V_BE in one Newton step (damping for the exponential).
const MAX_JUNCTION_STEP: f64 = 0.1;
/// Junction voltage below which Newton's steps are not damped (I_S·e^(0.5/V_T) is
/// still far below any bias current of interest).
const JUNCTION_FREE: f64 = 0.5;
/// Newton has converged when an undamped step moves no node by more than this.
const NEWTON_TOLERANCE_V: f64 = 1e-12;
const NEWTON_MAX_ITERATIONS: usize = 2000;
/// "No forward bias": docs/definitions.md names no threshold; the planner's DEVELOPERS.md calls a
/// stage cut off at DC when I_C is below 100 nA, and the reference takes the same.
pub const I_CUTOFF: f64 = 100e-9;

type C64 = Complex<f64>;

#[derive(Debug, Clone, PartialEq)]
pub struct Device {
    pub name: String,
    pub beta: f64,
    pub i_s: f64,
    /// Early voltage; `None` = infinite.
    pub v_a: Option<f64>,
    pub vce_sat: f64,
    /// Transition frequency; `None` = no C_π.
    pub f_t: Option<f64>,
    /// Collector–base capacitance C_μ (0 when absent).
    pub c_bc: f64,
    /// +1 for NPN, −1 for PNP: the device's voltages and currents are the NPN's
    /// with every sign reversed (docs/definitions.md: PNP values are magnitudes).
    pub sign: f64,
    /// Base spreading resistance r_bb' between the base terminal and the intrinsic
    /// base (0 = none).
    pub r_bb: f64,
    /// Collector bulk resistance r_c between the collector terminal and the intrinsic
    /// collector (0 = none).
    pub r_c: f64,
    /// A JFET (docs/definitions.md "JFET"): I_DSS and |V_P|, its gate–source
    /// capacitance; base/collector/emitter stand for gate/drain/source, `c_bc` is C_gd,
    /// `sign` +1 for n, −1 for p. `None` for a bipolar transistor.
    pub jfet: Option<Jfet>,
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Jfet {
    pub i_dss: f64,
    pub v_p: f64,
    pub c_gs: f64,
}

/// The reference's reading of `text`; any failure to read panics.
#[allow(dead_code)]
pub fn modelled(text: &str) -> Chain {
    Chain::from_text(text).unwrap_or_else(|e| panic!("reference reads the chain: {e}"))
}

/// What a stage holds besides its wiring: a transistor (the fields of [`Stage`]), a
/// passive two-port or an op-amp gain block.
#[derive(Debug, Clone)]
pub enum Body {
    Transistor,
    Passive(Passive),
    Opamp(Opamp),
}

/// One element of a passive stage (docs/definitions.md "Passive stages"): a resistor
/// with its chain-file name (0 Ω = a wire), or a capacitor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Element {
    R(f64, &'static str),
    C(f64),
}

/// A passive stage: `series` from the input (`Term::Base`) to the output
/// (`Term::Collector`), `shunt` from the output to ground.
#[derive(Debug, Clone)]
pub struct Passive {
    /// The chain file's `type`.
    pub type_name: &'static str,
    pub series: Element,
    pub shunt: Element,
}

/// Where an op-amp stage's `reference` sits: a rail (or ground) by name, or a fixed
/// voltage (docs/definitions.md "Op-amp").
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Reference {
    Rail(Term),
    Volts(f64),
}

/// An op-amp stage (docs/definitions.md "Op-amp"), wired on the stage's terminals:
/// the input node `Term::Base`, − `Term::Emitter`, + `Term::Base` (non-inverting) or
/// `Term::EmitterMid` (inverting, tied to the reference), the pin `Term::Collector`,
/// the source's own node `Term::IntCollector` (r_out to the pin), the reference
/// `Term::Filter`.
#[derive(Debug, Clone)]
pub struct Opamp {
    pub a_0: f64,
    pub gain_bandwidth: f64,
    /// Differential input resistance (∞ when absent).
    pub r_in: f64,
    pub r_out: f64,
    pub swing_margin: f64,
    /// `output_current_limit` (∞ when absent).
    pub i_limit: f64,
    /// e_n, V/√Hz, and i_n, A/√Hz (0 when absent).
    pub e_n: f64,
    pub i_n: f64,
    pub inverting: bool,
    /// Pin to −; `None` = a wire (the follower).
    pub r_feedback: Option<f64>,
    pub r_ground: Option<f64>,
    pub r_bias: Option<f64>,
    pub r_input: Option<f64>,
    pub reference: Reference,
}

impl Opamp {
    /// One pole: A(s) = A_0/(1 + s·A_0/(2π·GBW)); A_0 at DC and midband.
    pub fn gain(&self, freq: Option<f64>) -> C64 {
        match freq {
            None => C64::new(self.a_0, 0.0),
            Some(f) => {
                let s = C64::new(0.0, 2.0 * std::f64::consts::PI * f);
                C64::new(self.a_0, 0.0)
                    / (1.0 + s * self.a_0 / (2.0 * std::f64::consts::PI * self.gain_bandwidth))
            }
        }
    }
    /// The non-inverting input.
    pub fn plus(&self, i: usize) -> Term {
        if self.inverting {
            Term::EmitterMid(i)
        } else {
            Term::Base(i)
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StageKind {
    CommonEmitter,
    EmitterFollower,
    CommonBase,
    /// A passive stage or an op-amp stage ([`Body`]): input `Base`, output `Collector`.
    Other,
}

impl StageKind {
    pub fn name(self) -> &'static str {
        match self {
            StageKind::CommonEmitter => "common_emitter",
            StageKind::EmitterFollower => "emitter_follower",
            StageKind::CommonBase => "common_base",
            StageKind::Other => "other",
        }
    }
}

#[derive(Debug, Clone)]
pub struct Stage {
    pub id: String,
    pub kind: StageKind,
    pub device: Device,
    pub r_top: Option<f64>,
    pub r_bottom: Option<f64>,
    /// 0 = collector tied to the supply; ∞ = absent (a cascode's lower collector,
    /// fed to a common-base emitter).
    pub r_collector: f64,
    /// Unbypassed emitter resistance (0 = a wire; ∞ = absent: a common base whose
    /// emitter is fed by its driver).
    pub r_emitter: f64,
    /// Emitter resistance shorted at AC by `c_bypass` (0 = none).
    pub r_emitter_bypassed: f64,
    pub has_c_bypass: bool,
    /// Bypass capacitance (0 when none).
    pub c_bypass: f64,
    /// Collector-to-base feedback resistor (common emitter).
    pub r_feedback: Option<f64>,
    /// Base capacitor to ground (common base; 0 when none).
    pub c_base: f64,
    /// `supply_filter`: (resistance, capacitance).
    pub supply_filter: Option<(f64, f64)>,
    /// The stage's rails: `Term::Ground` or `Term::Rail(k)`.
    pub top: Term,
    pub bottom: Term,
    pub body: Body,
}

impl Stage {
    /// Where the stage's top connections go: the supply filter's node (wired to the
    /// top rail when there is no filter).
    pub fn top_node(&self, i: usize) -> Term {
        Term::Filter(i)
    }
    /// The rail r_collector goes to: top for NPN, bottom for PNP (upside down).
    pub fn collector_rail(&self, i: usize) -> Term {
        if self.device.sign > 0.0 {
            self.top_node(i)
        } else {
            self.bottom
        }
    }
    /// The rail the emitter resistors (and c_bypass) go to.
    pub fn emitter_rail(&self, i: usize) -> Term {
        if self.device.sign > 0.0 {
            self.bottom
        } else {
            self.top_node(i)
        }
    }
    /// Limits from v1's load-line formulas (docs/definitions.md): the follower, and a
    /// common emitter without r_feedback; otherwise region limits.
    pub fn keeps_load_lines(&self) -> bool {
        // JFET stages use region limits (docs/definitions.md).
        if self.device.jfet.is_some() {
            return false;
        }
        match self.kind {
            StageKind::EmitterFollower => true,
            StageKind::CommonEmitter => self.r_feedback.is_none() && self.r_collector.is_finite(),
            StageKind::CommonBase | StageKind::Other => false,
        }
    }
    /// A stage with a transistor (bipolar or JFET).
    pub fn is_transistor(&self) -> bool {
        matches!(self.body, Body::Transistor)
    }
    /// The stage's op-amp, if it has one.
    pub fn opamp(&self) -> Option<&Opamp> {
        match &self.body {
            Body::Opamp(o) => Some(o),
            _ => None,
        }
    }
    /// Stages whose DC terminals are coupled inside the stage (r_feedback, supply
    /// filter): their DC load line's definition is still open.
    pub fn coupled(&self) -> bool {
        self.r_feedback.is_some() || self.supply_filter.is_some()
    }
}

#[derive(Debug, Clone)]
pub struct Load {
    pub id: String,
    pub resistance: f64,
    /// Shunt capacitance across the load (0 when none).
    pub capacitance: f64,
}

/// One end of a link.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Node {
    Source,
    Stage(usize),
    Load(usize),
}

#[derive(Debug, Clone)]
pub struct Link {
    pub from: Node,
    pub to: Node,
    /// `true` for "direct"; otherwise a capacitor (open at DC, short at midband).
    pub direct: bool,
    /// The coupling capacitance (0 for a direct link).
    pub capacitance: f64,
}

/// A feedback link (`"coupling": "feedback"`): the resistor from stage `from`'s output
/// terminal, then the series capacitor (if any), ending at `end` (stage `to`'s input
/// terminal or its emitter). The resistor–capacitor junction is `Term::Feedback(k)`.
#[derive(Debug, Clone)]
pub struct FeedbackLink {
    pub from: usize,
    pub to: usize,
    pub resistance: f64,
    /// Series capacitance (open at DC, short at midband); `None` = none.
    pub capacitance: Option<f64>,
    pub end: Term,
}

/// A chain file as the reference sees it: numbers in SI units, nothing else.
#[derive(Debug, Clone)]
pub struct Chain {
    pub title: Option<String>,
    /// The most positive rail (v1: the supply; 0 when every rail is negative).
    pub v_cc: f64,
    /// Named rails and their voltages (v1: one rail named "supply").
    pub rails: Vec<(String, f64)>,
    /// Kelvin.
    pub temperature: f64,
    pub v_t: f64,
    pub r_source: f64,
    /// Shunt capacitance at the source's output terminal (0 when none).
    pub c_source: f64,
    /// Planned source EMF, rms; `None` when the file gives no level.
    pub input_vrms: Option<f64>,
    pub stages: Vec<Stage>,
    pub loads: Vec<Load>,
    pub links: Vec<Link>,
    /// Feedback links, apart from `links` (a cut never opens them).
    pub feedback: Vec<FeedbackLink>,
}

/// A terminal of the flat network.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Term {
    Ground,
    /// Named rail k.
    Rail(usize),
    /// Top of the source EMF (its bottom is ground).
    Emf,
    /// After the source resistance.
    SourceOut,
    Base(usize),
    Collector(usize),
    Emitter(usize),
    /// Between `r_emitter` and `r_emitter_bypassed`.
    EmitterMid(usize),
    /// The device's own base, inside r_bb'.
    IntBase(usize),
    /// The device's own collector, inside r_c.
    IntCollector(usize),
    /// The stage's top node: after the supply filter's resistance.
    Filter(usize),
    Load(usize),
    /// Feedback link k: between its resistor and its series capacitor.
    Feedback(usize),
}

#[derive(Debug, Clone)]
pub struct Resistor {
    pub a: Term,
    pub b: Term,
    pub r: f64,
    /// (stage index, field name) for the dissipation report.
    pub owner: Option<(usize, &'static str)>,
}

fn number(v: &ValueSpec, kind: Kind, what: &str) -> Result<f64, String> {
    match v.nominal() {
        ValueSpec::Number(x) => Ok(*x),
        ValueSpec::Text(s) => parse_value(s, kind).map_err(|e| format!("{what}: {e}")),
        ValueSpec::Spread(_) => Err(format!("{what}: a spread inside a spread")),
    }
}

fn optional(v: &Option<ValueSpec>, kind: Kind, what: &str) -> Result<Option<f64>, String> {
    v.as_ref().map(|v| number(v, kind, what)).transpose()
}

/// Parallel combination; `None` stands for an open circuit (infinite resistance).
pub fn parallel(a: f64, b: Option<f64>) -> f64 {
    match b {
        Some(b) => a * b / (a + b),
        None => a,
    }
}

pub fn db(ratio: f64) -> f64 {
    20.0 * ratio.abs().log10()
}

pub fn dbu(vrms: f64) -> f64 {
    20.0 * (vrms / DBU_REF_VRMS).log10()
}

impl Chain {
    pub fn from_text(text: &str) -> Result<Chain, String> {
        let spec = parse_chain_text(text).map_err(|e| e.to_string())?;
        // Rails: v1 "supply" is one rail named "supply"; v2 "supplies" names any
        // number of rails of any sign. Ground is 0 V and named "ground".
        let mut rails: Vec<(String, f64)> = Vec::new();
        if let Some(supply) = &spec.supply {
            rails.push(("supply".into(), number(supply, Kind::Voltage, "supply")?));
        }
        if let Some(map) = &spec.supplies {
            for (name, v) in &map.0 {
                rails.push((
                    name.clone(),
                    number(v, Kind::Voltage, &format!("supplies.{name}"))?,
                ));
            }
        }
        if rails.is_empty() {
            return Err("no rails (\"supply\" or \"supplies\")".into());
        }
        let v_cc = rails.iter().map(|r| r.1).fold(0.0, f64::max);
        let rail_term = |name: &str| -> Result<Term, String> {
            if name == "ground" {
                return Ok(Term::Ground);
            }
            rails
                .iter()
                .position(|r| r.0 == name)
                .map(Term::Rail)
                .ok_or_else(|| format!("unknown rail {name}"))
        };
        // Default top: the most positive rail (ground when none is positive).
        let default_top = rails
            .iter()
            .enumerate()
            .filter(|(_, r)| r.1 > 0.0)
            .max_by(|a, b| a.1 .1.total_cmp(&b.1 .1))
            .map_or(Term::Ground, |(k, _)| Term::Rail(k));
        let temperature =
            optional(&spec.temperature, Kind::Temperature, "temperature")?.unwrap_or(298.15);
        // Thermal voltage V_T = kT/q.
        let v_t = BOLTZMANN * temperature / ELEMENTARY_CHARGE;
        let r_source = number(
            &spec.source.resistance,
            Kind::Resistance,
            "source.resistance",
        )?;
        let input_vrms = match &spec.source.level {
            None => None,
            Some(ValueSpec::Text(s)) => Some(parse_level(s).map_err(|e| e.to_string())?.vrms),
            // A bare number is read as volts rms (the reference's own guess).
            Some(ValueSpec::Number(x)) => Some(*x),
            Some(ValueSpec::Spread(_)) => return Err("source.level: a spread".into()),
        };
        let mut devices = Vec::new();
        // Op-amp devices: (name, the device's own values; the stage's wiring empty).
        let mut opamps: Vec<(String, Opamp)> = Vec::new();
        for (name, d) in &spec.devices.0 {
            let what = |f: &str| format!("devices.{name}.{f}");
            if d.polarity == "opamp" {
                let a_0 = match d.open_loop_gain.as_ref().map(|v| v.nominal()) {
                    Some(ValueSpec::Number(x)) => *x,
                    // A ratio or "… dB" = 10^(dB/20) (docs/definitions.md "Op-amp").
                    Some(ValueSpec::Text(t)) => parse_gain(t).map_err(|e| e.to_string())?,
                    _ => return Err(format!("{}: missing", what("open_loop_gain"))),
                };
                let opt = |v: &Option<ValueSpec>, kind, f: &str| optional(v, kind, &what(f));
                opamps.push((
                    name.clone(),
                    Opamp {
                        a_0,
                        gain_bandwidth: opt(&d.gain_bandwidth, Kind::Frequency, "gain_bandwidth")?
                            .ok_or("gain_bandwidth missing")?,
                        r_in: opt(&d.input_resistance, Kind::Resistance, "input_resistance")?
                            .unwrap_or(f64::INFINITY),
                        r_out: opt(&d.output_resistance, Kind::Resistance, "output_resistance")?
                            .unwrap_or(0.0),
                        swing_margin: opt(&d.swing_margin, Kind::Voltage, "swing_margin")?
                            .unwrap_or(1.0),
                        i_limit: opt(
                            &d.output_current_limit,
                            Kind::Current,
                            "output_current_limit",
                        )?
                        .unwrap_or(f64::INFINITY),
                        e_n: opt(&d.voltage_noise, Kind::VoltageDensity, "voltage_noise")?
                            .unwrap_or(0.0),
                        i_n: opt(&d.current_noise, Kind::CurrentDensity, "current_noise")?
                            .unwrap_or(0.0),
                        inverting: false,
                        r_feedback: None,
                        r_ground: None,
                        r_bias: None,
                        r_input: None,
                        reference: Reference::Rail(Term::Ground),
                    },
                ));
                continue;
            }
            if d.polarity.ends_with("_jfet") {
                let need = |v: &Option<ValueSpec>, f: &str| {
                    optional(
                        v,
                        if f == "i_dss" {
                            Kind::Current
                        } else {
                            Kind::Voltage
                        },
                        &what(f),
                    )?
                    .ok_or_else(|| format!("{}: missing", what(f)))
                };
                devices.push(Device {
                    name: name.clone(),
                    beta: f64::INFINITY,
                    i_s: 0.0,
                    v_a: optional(&d.early_voltage, Kind::Voltage, &what("early_voltage"))?,
                    vce_sat: 0.0,
                    f_t: None,
                    c_bc: optional(&d.c_gd, Kind::Capacitance, &what("c_gd"))?.unwrap_or(0.0),
                    sign: if d.polarity == "n_jfet" { 1.0 } else { -1.0 },
                    r_bb: 0.0,
                    r_c: 0.0,
                    jfet: Some(Jfet {
                        i_dss: need(&d.i_dss, "i_dss")?,
                        v_p: need(&d.pinch_off_voltage, "pinch_off_voltage")?.abs(),
                        c_gs: optional(&d.c_gs, Kind::Capacitance, &what("c_gs"))?.unwrap_or(0.0),
                    }),
                });
                continue;
            }
            let Some(beta) = &d.beta else {
                return Err(format!("{}: missing", what("beta")));
            };
            devices.push(Device {
                name: name.clone(),
                // β is a pure number.
                beta: match beta.nominal() {
                    ValueSpec::Number(x) => *x,
                    ValueSpec::Text(s) => s
                        .trim()
                        .parse::<f64>()
                        .map_err(|e| format!("{}: {e}", what("beta")))?,
                    ValueSpec::Spread(_) => return Err(format!("{}: a spread", what("beta"))),
                },
                i_s: optional(
                    &d.saturation_current,
                    Kind::Current,
                    &what("saturation_current"),
                )?
                .unwrap_or(1e-14),
                v_a: optional(&d.early_voltage, Kind::Voltage, &what("early_voltage"))?,
                vce_sat: optional(&d.vce_sat, Kind::Voltage, &what("vce_sat"))?.unwrap_or(0.2),
                f_t: optional(
                    &d.transition_frequency,
                    Kind::Frequency,
                    &what("transition_frequency"),
                )?,
                c_bc: optional(&d.c_bc, Kind::Capacitance, &what("c_bc"))?.unwrap_or(0.0),
                sign: match d.polarity.as_str() {
                    "npn" => 1.0,
                    "pnp" => -1.0,
                    other => return Err(format!("{}: {other}", what("polarity"))),
                },
                r_bb: optional(
                    &d.base_resistance,
                    Kind::Resistance,
                    &what("base_resistance"),
                )?
                .unwrap_or(0.0),
                r_c: optional(
                    &d.collector_resistance,
                    Kind::Resistance,
                    &what("collector_resistance"),
                )?
                .unwrap_or(0.0),
                jfet: None,
            });
        }
        let find_device = |name: &str| {
            devices
                .iter()
                .find(|d| d.name == name)
                .cloned()
                .ok_or_else(|| format!("unknown device {name}"))
        };
        let mut stages = Vec::new();
        for (i, s) in spec.stages.iter().enumerate() {
            let what = |f: &str| format!("stages[{i}].{f}");
            let r = |v: &Option<ValueSpec>, f: &str| optional(v, Kind::Resistance, &what(f));
            let filter = |f: &Option<ampchain::spec::SupplyFilterSpec>| {
                f.as_ref()
                    .map(|f| -> Result<(f64, f64), String> {
                        Ok((
                            number(
                                &f.resistance,
                                Kind::Resistance,
                                &what("supply_filter.resistance"),
                            )?,
                            number(
                                &f.capacitance,
                                Kind::Capacitance,
                                &what("supply_filter.capacitance"),
                            )?,
                        ))
                    })
                    .transpose()
            };
            let (top, bottom) = {
                let r = s.rails();
                (
                    match r.and_then(|r| r.top.as_deref()) {
                        Some(name) => rail_term(name)?,
                        None => default_top,
                    },
                    match r.and_then(|r| r.bottom.as_deref()) {
                        Some(name) => rail_term(name)?,
                        None => Term::Ground,
                    },
                )
            };
            // A passive or op-amp stage: no transistor, its elements in `body`.
            let other = |body: Body, device: Option<&str>| Stage {
                id: s.id().to_string(),
                kind: StageKind::Other,
                device: Device {
                    name: device.unwrap_or("").to_string(),
                    beta: f64::INFINITY,
                    i_s: 0.0,
                    v_a: None,
                    vce_sat: 0.0,
                    f_t: None,
                    c_bc: 0.0,
                    sign: 1.0,
                    r_bb: 0.0,
                    r_c: 0.0,
                    jfet: None,
                },
                r_top: None,
                r_bottom: None,
                r_collector: f64::INFINITY,
                r_emitter: f64::INFINITY,
                r_emitter_bypassed: 0.0,
                has_c_bypass: false,
                c_bypass: 0.0,
                r_feedback: None,
                c_base: 0.0,
                supply_filter: None,
                top,
                bottom,
                body,
            };
            let find_opamp = |name: &str| {
                opamps
                    .iter()
                    .find(|d| d.0 == name)
                    .map(|d| d.1.clone())
                    .ok_or_else(|| format!("unknown op-amp {name}"))
            };
            // "ground", a rail's name, or a voltage; absent, ground.
            let reference = |v: &Option<ValueSpec>| -> Result<Reference, String> {
                match v {
                    None => Ok(Reference::Rail(Term::Ground)),
                    Some(ValueSpec::Number(x)) => Ok(Reference::Volts(*x)),
                    Some(ValueSpec::Text(t)) => match rail_term(t) {
                        Ok(term) => Ok(Reference::Rail(term)),
                        Err(_) => parse_value(t, Kind::Voltage)
                            .map(Reference::Volts)
                            .map_err(|e| format!("{}: {e}", what("reference"))),
                    },
                    Some(ValueSpec::Spread(_)) => Err(format!("{}: a spread", what("reference"))),
                }
            };
            let stage = match s {
                StageSpec::CommonEmitter(ce) => Stage {
                    id: ce.id.clone(),
                    kind: StageKind::CommonEmitter,
                    device: find_device(&ce.device)?,
                    r_top: r(&ce.r_top, "r_top")?,
                    r_bottom: r(&ce.r_bottom, "r_bottom")?,
                    r_collector: r(&ce.r_collector, "r_collector")?.unwrap_or(f64::INFINITY),
                    r_emitter: r(&ce.r_emitter, "r_emitter")?.unwrap_or(0.0),
                    r_emitter_bypassed: r(&ce.r_emitter_bypassed, "r_emitter_bypassed")?
                        .unwrap_or(0.0),
                    has_c_bypass: ce.c_bypass.is_some(),
                    c_bypass: optional(&ce.c_bypass, Kind::Capacitance, &what("c_bypass"))?
                        .unwrap_or(0.0),
                    r_feedback: r(&ce.r_feedback, "r_feedback")?,
                    c_base: 0.0,
                    supply_filter: filter(&ce.supply_filter)?,
                    top,
                    bottom,
                    body: Body::Transistor,
                },
                StageSpec::EmitterFollower(ef) => Stage {
                    id: ef.id.clone(),
                    kind: StageKind::EmitterFollower,
                    device: find_device(&ef.device)?,
                    r_top: r(&ef.r_top, "r_top")?,
                    r_bottom: r(&ef.r_bottom, "r_bottom")?,
                    r_collector: r(&ef.r_collector, "r_collector")?.unwrap_or(0.0),
                    r_emitter: number(&ef.r_emitter, Kind::Resistance, &what("r_emitter"))?,
                    r_emitter_bypassed: 0.0,
                    has_c_bypass: false,
                    c_bypass: 0.0,
                    r_feedback: None,
                    c_base: 0.0,
                    supply_filter: filter(&ef.supply_filter)?,
                    top,
                    bottom,
                    body: Body::Transistor,
                },
                StageSpec::CommonBase(cb) => Stage {
                    id: cb.id.clone(),
                    kind: StageKind::CommonBase,
                    device: find_device(&cb.device)?,
                    r_top: r(&cb.r_top, "r_top")?,
                    r_bottom: r(&cb.r_bottom, "r_bottom")?,
                    r_collector: r(&cb.r_collector, "r_collector")?.unwrap_or(f64::INFINITY),
                    // Absent: no resistor at all (the emitter's DC path is its driver).
                    r_emitter: r(&cb.r_emitter, "r_emitter")?.unwrap_or(f64::INFINITY),
                    r_emitter_bypassed: 0.0,
                    has_c_bypass: false,
                    c_bypass: 0.0,
                    r_feedback: None,
                    c_base: number(&cb.c_base, Kind::Capacitance, &what("c_base"))?,
                    supply_filter: filter(&cb.supply_filter)?,
                    top,
                    bottom,
                    body: Body::Transistor,
                },
                // A JFET stage is the bipolar stage of the same wiring with the JFET's
                // law (gate, drain, source in the base, collector, emitter places).
                StageSpec::CommonSource(cs) => Stage {
                    id: cs.id.clone(),
                    kind: StageKind::CommonEmitter,
                    device: find_device(&cs.device)?,
                    r_top: r(&cs.r_top, "r_top")?,
                    r_bottom: r(&cs.r_bottom, "r_bottom")?,
                    r_collector: number(&cs.r_drain, Kind::Resistance, &what("r_drain"))?,
                    r_emitter: r(&cs.r_source, "r_source")?.unwrap_or(0.0),
                    r_emitter_bypassed: r(&cs.r_source_bypassed, "r_source_bypassed")?
                        .unwrap_or(0.0),
                    has_c_bypass: cs.c_bypass.is_some(),
                    c_bypass: optional(&cs.c_bypass, Kind::Capacitance, &what("c_bypass"))?
                        .unwrap_or(0.0),
                    r_feedback: None,
                    c_base: 0.0,
                    supply_filter: filter(&cs.supply_filter)?,
                    top,
                    bottom,
                    body: Body::Transistor,
                },
                StageSpec::SourceFollower(sf) => Stage {
                    id: sf.id.clone(),
                    kind: StageKind::EmitterFollower,
                    device: find_device(&sf.device)?,
                    r_top: r(&sf.r_top, "r_top")?,
                    r_bottom: r(&sf.r_bottom, "r_bottom")?,
                    r_collector: r(&sf.r_drain, "r_drain")?.unwrap_or(0.0),
                    r_emitter: number(&sf.r_source, Kind::Resistance, &what("r_source"))?,
                    r_emitter_bypassed: 0.0,
                    has_c_bypass: false,
                    c_bypass: 0.0,
                    r_feedback: None,
                    c_base: 0.0,
                    supply_filter: filter(&sf.supply_filter)?,
                    top,
                    bottom,
                    body: Body::Transistor,
                },
                StageSpec::Attenuator(a) => other(
                    Body::Passive(Passive {
                        type_name: "attenuator",
                        series: Element::R(
                            number(&a.r_series, Kind::Resistance, &what("r_series"))?,
                            "r_series",
                        ),
                        shunt: Element::R(
                            number(&a.r_shunt, Kind::Resistance, &what("r_shunt"))?,
                            "r_shunt",
                        ),
                    }),
                    None,
                ),
                StageSpec::Potentiometer(pot) => {
                    let r_track = number(&pot.resistance, Kind::Resistance, &what("resistance"))?;
                    let x = match pot.position.nominal() {
                        ValueSpec::Number(x) => *x,
                        other => return Err(format!("{}: {other:?}", what("position"))),
                    };
                    // The fraction a below the wiper (docs/definitions.md "Passive stages").
                    let a = match pot.taper.as_deref() {
                        None | Some("linear") => x,
                        Some("audio") => (100f64.powf(x) - 1.0) / 99.0,
                        Some(t) => return Err(format!("{}: {t}", what("taper"))),
                    };
                    other(
                        Body::Passive(Passive {
                            type_name: "potentiometer",
                            series: Element::R(r_track * (1.0 - a), "resistance_upper"),
                            shunt: Element::R(r_track * a, "resistance_lower"),
                        }),
                        None,
                    )
                }
                StageSpec::LowPass(lp) => other(
                    Body::Passive(Passive {
                        type_name: "low_pass",
                        series: Element::R(
                            number(&lp.resistance, Kind::Resistance, &what("resistance"))?,
                            "resistance",
                        ),
                        shunt: Element::C(number(
                            &lp.capacitance,
                            Kind::Capacitance,
                            &what("capacitance"),
                        )?),
                    }),
                    None,
                ),
                StageSpec::HighPass(hp) => other(
                    Body::Passive(Passive {
                        type_name: "high_pass",
                        series: Element::C(number(
                            &hp.capacitance,
                            Kind::Capacitance,
                            &what("capacitance"),
                        )?),
                        shunt: Element::R(
                            number(&hp.resistance, Kind::Resistance, &what("resistance"))?,
                            "resistance",
                        ),
                    }),
                    None,
                ),
                StageSpec::OpampNoninverting(o) => {
                    let amp = Opamp {
                        inverting: false,
                        r_feedback: r(&o.r_feedback, "r_feedback")?,
                        r_ground: r(&o.r_ground, "r_ground")?,
                        r_bias: r(&o.r_bias, "r_bias")?,
                        r_input: None,
                        reference: reference(&o.reference)?,
                        ..find_opamp(&o.device)?
                    };
                    other(Body::Opamp(amp), Some(&o.device))
                }
                StageSpec::OpampInverting(o) => {
                    let amp = Opamp {
                        inverting: true,
                        r_feedback: Some(number(
                            &o.r_feedback,
                            Kind::Resistance,
                            &what("r_feedback"),
                        )?),
                        r_ground: None,
                        r_bias: None,
                        r_input: Some(number(&o.r_input, Kind::Resistance, &what("r_input"))?),
                        reference: reference(&o.reference)?,
                        ..find_opamp(&o.device)?
                    };
                    other(Body::Opamp(amp), Some(&o.device))
                }
            };
            stages.push(stage);
        }
        let loads: Vec<Load> = spec
            .loads
            .iter()
            .enumerate()
            .map(|(j, l)| {
                Ok(Load {
                    id: l.id.clone(),
                    resistance: number(
                        &l.resistance,
                        Kind::Resistance,
                        &format!("loads[{j}].resistance"),
                    )?,
                    capacitance: optional(
                        &l.capacitance,
                        Kind::Capacitance,
                        &format!("loads[{j}].capacitance"),
                    )?
                    .unwrap_or(0.0),
                })
            })
            .collect::<Result<_, String>>()?;
        let node_of = |name: &str| -> Result<Node, String> {
            if name == "source" {
                return Ok(Node::Source);
            }
            if let Some(i) = stages.iter().position(|s| s.id == name) {
                return Ok(Node::Stage(i));
            }
            if let Some(j) = loads.iter().position(|l| l.id == name) {
                return Ok(Node::Load(j));
            }
            Err(format!("link names unknown node {name}"))
        };
        let mut links = Vec::new();
        let mut feedback = Vec::new();
        for (k, l) in spec.links.iter().enumerate() {
            if matches!(&l.coupling, ValueSpec::Text(s) if s == "feedback") {
                let (Node::Stage(from), Node::Stage(to)) = (node_of(&l.from)?, node_of(&l.to)?)
                else {
                    return Err(format!("links[{k}]: feedback between stages only"));
                };
                let resistance = number(
                    l.resistance.as_ref().ok_or("feedback without resistance")?,
                    Kind::Resistance,
                    &format!("links[{k}].resistance"),
                )?;
                let capacitance = optional(
                    &l.capacitance,
                    Kind::Capacitance,
                    &format!("links[{k}].capacitance"),
                )?;
                let end = match l.into.as_deref() {
                    Some("emitter") => Term::Emitter(to),
                    Some("input") => match stages[to].kind {
                        StageKind::CommonBase => Term::Emitter(to),
                        _ => Term::Base(to),
                    },
                    other => return Err(format!("links[{k}].into: {other:?}")),
                };
                feedback.push(FeedbackLink {
                    from,
                    to,
                    resistance,
                    capacitance,
                    end,
                });
                continue;
            }
            let direct = matches!(&l.coupling, ValueSpec::Text(s) if s == "direct");
            let capacitance = if direct {
                0.0
            } else {
                number(
                    &l.coupling,
                    Kind::Capacitance,
                    &format!("links[{k}].coupling"),
                )?
            };
            let link = Link {
                from: node_of(&l.from)?,
                to: node_of(&l.to)?,
                direct,
                capacitance,
            };
            if matches!(link.from, Node::Load(_)) || link.to == Node::Source {
                return Err(format!("links[{k}] goes the wrong way"));
            }
            links.push(link);
        }
        Ok(Chain {
            title: spec.title.clone(),
            v_cc,
            rails,
            temperature,
            v_t,
            r_source,
            c_source: optional(
                &spec.source.capacitance,
                Kind::Capacitance,
                "source.capacitance",
            )?
            .unwrap_or(0.0),
            input_vrms,
            stages,
            loads,
            links,
            feedback,
        })
    }

    /// Output terminal of a node: the source after its resistance, the collector of a
    /// common-emitter stage, the emitter of an emitter follower.
    pub fn output_term(&self, node: Node) -> Term {
        match node {
            Node::Source => Term::SourceOut,
            Node::Stage(i) => match self.stages[i].kind {
                StageKind::CommonEmitter | StageKind::CommonBase | StageKind::Other => {
                    Term::Collector(i)
                }
                StageKind::EmitterFollower => Term::Emitter(i),
            },
            Node::Load(j) => Term::Load(j),
        }
    }

    /// Input terminal: the base of a stage (the emitter of a common base), the top
    /// of a load.
    pub fn input_term(&self, node: Node) -> Term {
        match node {
            Node::Source => Term::Emf,
            Node::Stage(i) if self.stages[i].kind == StageKind::CommonBase => Term::Emitter(i),
            Node::Stage(i) => Term::Base(i),
            Node::Load(j) => Term::Load(j),
        }
    }

    fn n_terms(&self) -> usize {
        3 + self.rails.len() + 7 * self.stages.len() + self.loads.len() + self.feedback.len()
    }

    pub fn term_index(&self, t: Term) -> usize {
        let r = self.rails.len();
        let n = self.stages.len();
        let st = |i: usize, k: usize| 3 + r + 7 * i + k;
        match t {
            Term::Ground => 0,
            Term::Emf => 1,
            Term::SourceOut => 2,
            Term::Rail(k) => 3 + k,
            Term::Base(i) => st(i, 0),
            Term::Collector(i) => st(i, 1),
            Term::Emitter(i) => st(i, 2),
            Term::EmitterMid(i) => st(i, 3),
            Term::IntBase(i) => st(i, 4),
            Term::IntCollector(i) => st(i, 5),
            Term::Filter(i) => st(i, 6),
            Term::Load(j) => 3 + r + 7 * n + j,
            Term::Feedback(k) => 3 + r + 7 * n + self.loads.len() + k,
        }
    }

    /// Every resistor of the flat network, zero-valued ones included (they are wires).
    pub fn resistors(&self) -> Vec<Resistor> {
        let mut out = vec![Resistor {
            a: Term::Emf,
            b: Term::SourceOut,
            r: self.r_source,
            owner: None,
        }];
        for (i, s) in self.stages.iter().enumerate() {
            let mut add = |a, b, r: f64, name| {
                out.push(Resistor {
                    a,
                    b,
                    r,
                    owner: Some((i, name)),
                })
            };
            if !s.is_transistor() {
                self.other_resistors(i, &mut out);
                continue;
            }
            // The device's series resistances (0 = a wire: the nodes merge).
            add(
                Term::Base(i),
                Term::IntBase(i),
                s.device.r_bb,
                "base_resistance",
            );
            add(
                Term::Collector(i),
                Term::IntCollector(i),
                s.device.r_c,
                "collector_resistance",
            );
            // The stage's top node: through the filter's resistance, or a wire.
            add(
                s.top,
                s.top_node(i),
                s.supply_filter.map_or(0.0, |f| f.0),
                "supply_filter.resistance",
            );
            if let Some(r) = s.r_top {
                add(Term::Base(i), s.top_node(i), r, "r_top");
            }
            if let Some(r) = s.r_bottom {
                add(Term::Base(i), s.bottom, r, "r_bottom");
            }
            if let Some(r) = s.r_feedback {
                add(Term::Collector(i), Term::Base(i), r, "r_feedback");
            }
            if s.r_collector.is_finite() {
                add(
                    Term::Collector(i),
                    s.collector_rail(i),
                    s.r_collector,
                    "r_collector",
                );
            }
            if s.r_emitter.is_finite() {
                add(
                    Term::Emitter(i),
                    Term::EmitterMid(i),
                    s.r_emitter,
                    "r_emitter",
                );
            }
            add(
                Term::EmitterMid(i),
                s.emitter_rail(i),
                s.r_emitter_bypassed,
                "r_emitter_bypassed",
            );
        }
        for (j, l) in self.loads.iter().enumerate() {
            out.push(Resistor {
                a: Term::Load(j),
                b: Term::Ground,
                r: l.resistance,
                owner: None,
            });
        }
        // A feedback resistor ends at its capacitor's node (with the capacitor open at
        // DC that node hangs on the resistor alone); without a capacitor a wire joins
        // that node to the link's end.
        for (k, l) in self.feedback.iter().enumerate() {
            out.push(Resistor {
                a: self.output_term(Node::Stage(l.from)),
                b: Term::Feedback(k),
                r: l.resistance,
                owner: None,
            });
            if l.capacitance.is_none() {
                out.push(Resistor {
                    a: Term::Feedback(k),
                    b: l.end,
                    r: 0.0,
                    owner: None,
                });
            }
        }
        out
    }

    /// The resistors and wires of passive or op-amp stage `i` (docs/definitions.md
    /// "Passive stages", "Op-amp"); its unused terminals are wired to a used one.
    fn other_resistors(&self, i: usize, out: &mut Vec<Resistor>) {
        let mut add = |a, b, r: f64, owner: Option<&'static str>| {
            out.push(Resistor {
                a,
                b,
                r,
                owner: owner.map(|name| (i, name)),
            })
        };
        match &self.stages[i].body {
            Body::Transistor => unreachable!("a transistor stage"),
            Body::Passive(p) => {
                if let Element::R(r, name) = p.series {
                    add(Term::Base(i), Term::Collector(i), r, Some(name));
                }
                if let Element::R(r, name) = p.shunt {
                    add(Term::Collector(i), Term::Ground, r, Some(name));
                }
                for t in [Term::Emitter(i), Term::EmitterMid(i), Term::Filter(i)] {
                    add(t, Term::Ground, 0.0, None);
                }
                add(Term::IntCollector(i), Term::Collector(i), 0.0, None);
            }
            Body::Opamp(o) => {
                // Term::Filter is the reference: a rail (or ground) by wire, or a fixed
                // voltage of its own (`Chain::nodes`).
                if let Reference::Rail(t) = o.reference {
                    add(Term::Filter(i), t, 0.0, None);
                }
                let minus = Term::Emitter(i);
                if o.inverting {
                    add(Term::EmitterMid(i), Term::Filter(i), 0.0, None);
                    if let Some(r) = o.r_input {
                        add(Term::Base(i), minus, r, Some("r_input"));
                    }
                } else {
                    add(Term::EmitterMid(i), Term::Filter(i), 0.0, None);
                    if let Some(r) = o.r_bias {
                        add(Term::Base(i), Term::Filter(i), r, Some("r_bias"));
                    }
                    if let Some(r) = o.r_ground {
                        add(minus, Term::Filter(i), r, Some("r_ground"));
                    }
                }
                add(
                    Term::Collector(i),
                    minus,
                    o.r_feedback.unwrap_or(0.0),
                    Some("r_feedback"),
                );
                // The device's own r_in (+ to −) and r_out (source to pin): no owner, no
                // dissipation or noise of their own (docs/definitions.md "Op-amp").
                if o.r_in.is_finite() {
                    add(o.plus(i), minus, o.r_in, None);
                }
                add(Term::IntCollector(i), Term::Collector(i), o.r_out, None);
            }
        }
        add(Term::IntBase(i), Term::Base(i), 0.0, None);
    }

    /// Op-amp stages in order: the extra unknown k (after the node voltages) is the
    /// current of `opamp_stages()[k]`'s controlled source into its node.
    pub fn opamp_stages(&self) -> Vec<usize> {
        (0..self.stages.len())
            .filter(|&i| self.stages[i].opamp().is_some())
            .collect()
    }

    /// Link endpoints: (driver's output terminal, receiver's input terminal).
    pub fn link_terms(&self, k: usize) -> (Term, Term) {
        let l = &self.links[k];
        (self.output_term(l.from), self.input_term(l.to))
    }

    /// Merge terminals joined by wires into nodes and fix the known node voltages.
    fn nodes(&self, setup: &Setup) -> Result<Nodes, String> {
        let n = self.n_terms();
        let mut parent: Vec<usize> = (0..n).collect();
        fn root(parent: &mut [usize], mut x: usize) -> usize {
            while parent[x] != x {
                parent[x] = parent[parent[x]];
                x = parent[x];
            }
            x
        }
        let join = |parent: &mut Vec<usize>, a: Term, b: Term| {
            let (ra, rb) = (
                root(parent, self.term_index(a)),
                root(parent, self.term_index(b)),
            );
            parent[ra] = rb;
        };
        for r in self.resistors() {
            if r.r == 0.0 {
                join(&mut parent, r.a, r.b);
            }
        }
        for (k, l) in self.links.iter().enumerate() {
            if setup.cut.contains(&k) {
                // A non-inverting op-amp's + input with nothing of its own on it (no
                // r_bias, r_in ∞, no feedback into it) floats once its link is cut: it
                // carries no signal then, so it is tied to AC ground, unless the test
                // current goes in there or a wire of the setup meets it.
                let (_, b) = self.link_terms(k);
                let bare = matches!(l.to, Node::Stage(i) if self.stages[i].opamp().is_some_and(|o| {
                    !o.inverting && o.r_bias.is_none() && o.r_in.is_infinite()
                }) && self.feedback.iter().all(|f| f.end != b));
                let used = setup.inject == Some(b)
                    || setup.inject_return == Some(b)
                    || setup.join.iter().any(|&(x, y)| x == b || y == b);
                if bare && !used && (setup.ac || setup.incremental) {
                    join(&mut parent, b, Term::Ground);
                }
                continue;
            }
            // Coupling capacitors are wires at midband; at a frequency they are
            // admittances (stamped in `solve_linear`).
            if l.direct || (setup.ac && setup.freq.is_none()) {
                let (a, b) = self.link_terms(k);
                join(&mut parent, a, b);
            }
        }
        if setup.ac {
            // Every rail is AC ground. At midband c_bypass shorts r_emitter_bypassed,
            // c_base ties the base to ground, the supply filter's capacitor its node.
            for k in 0..self.rails.len() {
                join(&mut parent, Term::Rail(k), Term::Ground);
            }
            if setup.freq.is_none() {
                for (i, s) in self.stages.iter().enumerate() {
                    if s.has_c_bypass && setup.unbypassed != Some(i) {
                        join(&mut parent, Term::EmitterMid(i), s.emitter_rail(i));
                    }
                    if s.kind == StageKind::CommonBase && setup.open_base != Some(i) {
                        join(&mut parent, Term::Base(i), Term::Ground);
                    }
                    if s.supply_filter.is_some() && setup.open_filter != Some(i) {
                        join(&mut parent, Term::Filter(i), Term::Ground);
                    }
                    // A high-pass stage's series capacitor is a short at midband
                    // (left open as the stage's `unbypassed` capacitor).
                    if let (
                        Body::Passive(Passive {
                            series: Element::C(_),
                            ..
                        }),
                        false,
                    ) = (&s.body, setup.unbypassed == Some(i))
                    {
                        join(&mut parent, Term::Base(i), Term::Collector(i));
                    }
                }
            }
        }
        if setup.ac && setup.freq.is_none() {
            // A feedback link's series capacitor is a short at midband.
            for (k, l) in self.feedback.iter().enumerate() {
                join(&mut parent, Term::Feedback(k), l.end);
            }
        }
        for &(a, b) in &setup.join {
            join(&mut parent, a, b);
        }
        let node_of_term: Vec<usize> = (0..n).map(|t| root(&mut parent, t)).collect();
        let mut fixed: Vec<Option<f64>> = vec![None; n];
        let live = !(setup.ac || setup.incremental);
        let mut sources = vec![(Term::Ground, 0.0), (Term::Emf, setup.emf)];
        for (k, r) in self.rails.iter().enumerate() {
            sources.push((Term::Rail(k), if live { r.1 } else { 0.0 }));
        }
        // An op-amp reference given as a voltage is a source of its own.
        for (i, s) in self.stages.iter().enumerate() {
            if let Some(Opamp {
                reference: Reference::Volts(v),
                ..
            }) = s.opamp()
            {
                sources.push((Term::Filter(i), if live { *v } else { 0.0 }));
            }
        }
        for (t, v) in sources {
            let node = node_of_term[self.term_index(t)];
            match fixed[node] {
                Some(old) if old != v => {
                    return Err(format!(
                        "{t:?} is wired to a node fixed at {old} V (short across a source)"
                    ))
                }
                _ => fixed[node] = Some(v),
            }
        }
        if !setup.ac {
            // A resistor island with no DC path to any source (a passive stage between
            // two capacitors) sits at 0 V (docs/definitions.md "Passive stages").
            let mut island: Vec<usize> = node_of_term.clone();
            let mut tie = |a: Term, b: Term| {
                let (ra, rb) = (
                    root(&mut island, node_of_term[self.term_index(a)]),
                    root(&mut island, node_of_term[self.term_index(b)]),
                );
                island[ra] = rb;
            };
            for r in self.resistors() {
                tie(r.a, r.b);
            }
            for (i, s) in self.stages.iter().enumerate() {
                if s.is_transistor() {
                    let [tb, tc, te] = self.stage_terms(i);
                    tie(tb, te);
                    tie(tc, te);
                } else if s.opamp().is_some() {
                    // The op-amp's source holds its node against ground.
                    tie(Term::IntCollector(i), Term::Ground);
                }
            }
            let mut held = vec![false; n];
            for (t, v) in fixed.iter().enumerate() {
                if v.is_some() {
                    let r = root(&mut island, t);
                    held[r] = true;
                }
            }
            for t in 0..n {
                if node_of_term[t] == t && fixed[t].is_none() {
                    let r = root(&mut island, t);
                    if !held[r] {
                        fixed[t] = Some(0.0);
                    }
                }
            }
        }
        let mut unknown: Vec<Option<usize>> = vec![None; n];
        let mut n_unknown = 0;
        for (t, &node) in node_of_term.iter().enumerate() {
            if node == t && fixed[node].is_none() {
                unknown[node] = Some(n_unknown);
                n_unknown += 1;
            }
        }
        Ok(Nodes {
            node_of_term,
            fixed,
            unknown,
            n_unknown,
        })
    }

    /// The device's own nodes: intrinsic base, intrinsic collector, emitter.
    pub fn stage_terms(&self, i: usize) -> [Term; 3] {
        [Term::IntBase(i), Term::IntCollector(i), Term::Emitter(i)]
    }
}

/// How the flat network is wired for one solve.
#[derive(Debug, Clone, Default)]
pub struct Setup {
    /// Midband wiring: capacitors shorted, supply at ground.
    pub ac: bool,
    /// DC wiring (capacitors open) for small changes about the DC solution: the
    /// supply is then held at 0 V like every other source.
    pub incremental: bool,
    /// A transistor left out of the network (its stamps are skipped).
    pub without_transistor: Option<usize>,
    /// A transistor whose controlled source g_m·v_b'e is left out (g_π, g_o kept).
    pub without_gm: Option<usize>,
    /// Value of the source EMF (0 V at DC; 1 V or 0 V at AC).
    pub emf: f64,
    /// Links left open (indices into `Chain::links`).
    pub cut: Vec<usize>,
    /// Extra wires.
    pub join: Vec<(Term, Term)>,
    /// Terminal that receives a 1 A test current from outside.
    pub inject: Option<Term>,
    /// Terminal the test current returns from (ground when `None`).
    pub inject_return: Option<Term>,
    /// AC at this frequency (Hz) instead of midband: capacitors as admittances,
    /// device capacitances included. Only with `ac`.
    pub freq: Option<f64>,
    /// Stage whose bypass capacitor (or a high-pass stage's capacitor) is left open at
    /// midband (its own time constant).
    pub unbypassed: Option<usize>,
    /// Stage whose op-amp gets a 1 V source in series with its + input (its
    /// `voltage_noise`, docs/definitions.md "Op-amp": A·e at the op-amp's source plus
    /// e/r_in from + to −).
    pub opamp_emf: Option<usize>,
    /// Stage whose op-amp source is replaced by a 1 V test source (its loop gain T =
    /// −A_0·(v₊ − v₋), docs/definitions.md "Op-amp" "Frequency response").
    pub opamp_test: Option<usize>,
    /// Stage whose `c_base` is left open at midband.
    pub open_base: Option<usize>,
    /// Stage whose supply filter capacitor is left open at midband.
    pub open_filter: Option<usize>,
    /// A real complex-frequency value s (rad/s) in place of j·2π·`freq`, with every
    /// series capacitor's branch law written s·C·(v_a − v_b) − i = 0, so the matrix is
    /// G + s·C, affine in s ([`natural_frequencies`]). Only with `ac`, without op-amps.
    pub laplace: Option<f64>,
}

#[derive(Clone)]
struct Nodes {
    node_of_term: Vec<usize>,
    fixed: Vec<Option<f64>>,
    unknown: Vec<Option<usize>>,
    n_unknown: usize,
}

impl Nodes {
    fn unknown_of(&self, chain: &Chain, t: Term) -> Option<usize> {
        self.unknown[self.node_of_term[chain.term_index(t)]]
    }
    fn fixed_of(&self, chain: &Chain, t: Term) -> Option<f64> {
        self.fixed[self.node_of_term[chain.term_index(t)]]
    }
    fn voltage<T: Copy>(
        &self,
        chain: &Chain,
        t: Term,
        x: &DVector<T>,
        from_f64: fn(f64) -> T,
    ) -> T {
        match self.unknown_of(chain, t) {
            Some(k) => x[k],
            None => from_f64(
                self.fixed_of(chain, t)
                    .expect("a node is either unknown or fixed"),
            ),
        }
    }
}

/// Forward-active transistor model (docs/definitions.md) and its exact partial derivatives.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Junction {
    pub i_c: f64,
    pub i_b: f64,
    /// ∂I_C/∂V_BE
    pub g_m: f64,
    /// ∂I_C/∂V_CE
    pub g_o: f64,
    /// ∂I_B/∂V_BE
    pub g_pi: f64,
}

/// `v_be`, `v_ce`: the device's own junction voltages in its forward sense
/// (V_B'E, V_C'E for NPN; V_EB', V_EC' for PNP), so every result is a magnitude.
pub fn junction(d: &Device, v_t: f64, v_be: f64, v_ce: f64) -> Junction {
    if let Some(j) = d.jfet {
        // I_D = I_DSS·x²·(1 + V_DS/V_A), x = (V_GS + |V_P|)/|V_P| ≥ 0, no gate current.
        let x = ((v_be + j.v_p) / j.v_p).max(0.0);
        let early = d.v_a.map_or(1.0, |v_a| 1.0 + v_ce / v_a);
        let q = j.i_dss * x * x;
        return Junction {
            i_c: q * early,
            i_b: 0.0,
            g_m: 2.0 * j.i_dss * x / j.v_p * early,
            g_o: d.v_a.map_or(0.0, |v_a| q / v_a),
            g_pi: 0.0,
        };
    }
    // I_C = I_S·exp(V_BE/V_T)·(1 + V_CE/V_A), I_B = (I_S/β)·exp(V_BE/V_T)
    let i_diode = d.i_s * (v_be / v_t).exp();
    let early = d.v_a.map_or(1.0, |v_a| 1.0 + v_ce / v_a);
    let i_c = i_diode * early;
    let i_b = i_diode / d.beta;
    Junction {
        i_c,
        i_b,
        g_m: i_c / v_t,
        g_o: d.v_a.map_or(0.0, |v_a| i_diode / v_a),
        g_pi: i_b / v_t,
    }
}

/// The junction of stage `i` at node voltages (intrinsic base, intrinsic collector,
/// emitter), signed by polarity.
fn junction_at(chain: &Chain, i: usize, b: f64, c: f64, e: f64) -> Junction {
    let d = &chain.stages[i].device;
    junction(d, chain.v_t, d.sign * (b - e), d.sign * (c - e))
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatingPoint {
    pub i_c: f64,
    pub i_b: f64,
    pub i_e: f64,
    pub v_ce: f64,
    pub v_be: f64,
    /// The junction's own V_B'E (inside r_bb'), magnitude.
    pub v_be_junction: f64,
    /// The device's own V_C'E (inside r_c), magnitude: the Early factor's.
    pub v_ce_junction: f64,
    pub v_b: f64,
    pub v_c: f64,
    pub v_e: f64,
}

#[derive(Debug, Clone)]
pub struct DcSolution {
    /// Voltage of every terminal (indexed like `Chain::term_index`).
    pub v: Vec<f64>,
    pub op: Vec<OperatingPoint>,
    pub junctions: Vec<Junction>,
    /// Per stage: the op-amp source's current into its node, which is the pin's
    /// current into load and feedback network (0 for other stages).
    pub i_out: Vec<f64>,
    pub iterations: usize,
}

impl DcSolution {
    pub fn voltage(&self, chain: &Chain, t: Term) -> f64 {
        self.v[chain.term_index(t)]
    }
}

/// DC operating point of the whole flat network by damped Newton from 0 V everywhere.
///
/// When that fails (a rail of either sign can forward-bias a junction by many volts at
/// 0 V, where the exponential swamps every conductance), the rails are raised from 0 V
/// to their values in `RAIL_STEPS` equal steps, each solved from the last solution
/// (source stepping); the last step is the same Newton on the full network, so the
/// answer is the same operating point.
pub fn solve_dc(chain: &Chain) -> Result<DcSolution, String> {
    let nodes = chain.nodes(&Setup::default())?;
    let n = nodes.n_unknown;
    // The node voltages, then one current per op-amp source.
    let n = n + chain.opamp_stages().len();
    let cold = newton(chain, &nodes, DVector::<f64>::zeros(n));
    match cold {
        Ok((x, iterations)) => Ok(dc_solution(chain, &nodes, &x, iterations)),
        Err(cold_error) => {
            let mut x = DVector::<f64>::zeros(n);
            let mut total = 0;
            for k in 1..=RAIL_STEPS {
                let scale = k as f64 / RAIL_STEPS as f64;
                let mut stepped = nodes.clone();
                for v in stepped.fixed.iter_mut().flatten() {
                    *v *= scale;
                }
                let (next, iterations) = newton(chain, &stepped, x).map_err(|e| {
                    format!("{cold_error}; with the rails stepped, at {scale:.3} of them: {e}")
                })?;
                x = next;
                total += iterations;
            }
            Ok(dc_solution(chain, &nodes, &x, total))
        }
    }
}

/// Rail steps of the fallback DC solve.
const RAIL_STEPS: usize = 60;

/// Damped Newton on the DC network `nodes` from `x`; the solution and its iterations.
fn newton(
    chain: &Chain,
    nodes: &Nodes,
    mut x: DVector<f64>,
) -> Result<(DVector<f64>, usize), String> {
    let n = nodes.n_unknown;
    let opamps = chain.opamp_stages();
    let size = n + opamps.len();
    let resistors = chain.resistors();
    for iteration in 0..NEWTON_MAX_ITERATIONS {
        // Residual f = currents leaving each unknown node through its elements; jac = ∂f/∂x.
        let mut f = DVector::<f64>::zeros(size);
        let mut jac = DMatrix::<f64>::zeros(size, size);
        let v = |t: Term| nodes.voltage(chain, t, &x, |a| a);
        // Op-amp source k: the current x[n + k] enters its node; its row is
        // v_src − A_0·(v₊ − v₋) = 0 (docs/definitions.md "Op-amp": A = A_0 at DC).
        for (k, &i) in opamps.iter().enumerate() {
            let o = chain.stages[i].opamp().expect("an op-amp stage");
            let row = n + k;
            if let Some(src) = nodes.unknown_of(chain, Term::IntCollector(i)) {
                f[src] -= x[row];
                jac[(src, row)] -= 1.0;
            }
            f[row] = v(Term::IntCollector(i)) - o.a_0 * (v(o.plus(i)) - v(Term::Emitter(i)));
            for (t, d) in [
                (Term::IntCollector(i), 1.0),
                (o.plus(i), -o.a_0),
                (Term::Emitter(i), o.a_0),
            ] {
                if let Some(col) = nodes.unknown_of(chain, t) {
                    jac[(row, col)] += d;
                }
            }
        }
        for r in &resistors {
            if r.r == 0.0 {
                continue;
            }
            let g = 1.0 / r.r;
            let i_ab = g * (v(r.a) - v(r.b));
            let (ua, ub) = (nodes.unknown_of(chain, r.a), nodes.unknown_of(chain, r.b));
            if let Some(a) = ua {
                f[a] += i_ab;
                jac[(a, a)] += g;
                if let Some(b) = ub {
                    jac[(a, b)] -= g;
                }
            }
            if let Some(b) = ub {
                f[b] -= i_ab;
                jac[(b, b)] += g;
                if let Some(a) = ua {
                    jac[(b, a)] -= g;
                }
            }
        }
        for i in 0..chain.stages.len() {
            if !chain.stages[i].is_transistor() {
                continue;
            }
            let [tb, tc, te] = chain.stage_terms(i);
            let sign = chain.stages[i].device.sign;
            let j = junction_at(chain, i, v(tb), v(tc), v(te));
            // Currents leaving the node into the transistor (the NPN's times the
            // polarity's sign) and their derivatives with respect to (V_B', V_C', V_E):
            // the sign enters twice (current and control voltage), so the Jacobian
            // is the same for both polarities.
            let rows = [
                (tb, sign * j.i_b, [j.g_pi, 0.0, -j.g_pi]),
                (tc, sign * j.i_c, [j.g_m, j.g_o, -j.g_m - j.g_o]),
                (
                    te,
                    -sign * (j.i_c + j.i_b),
                    [-(j.g_m + j.g_pi), -j.g_o, j.g_m + j.g_o + j.g_pi],
                ),
            ];
            for (t_row, current, derivs) in rows {
                if let Some(row) = nodes.unknown_of(chain, t_row) {
                    f[row] += current;
                    for (t_col, d) in [tb, tc, te].into_iter().zip(derivs) {
                        if let Some(col) = nodes.unknown_of(chain, t_col) {
                            jac[(row, col)] += d;
                        }
                    }
                }
            }
        }
        let step = jac
            .clone()
            .lu()
            .solve(&(-f))
            .filter(|s| s.iter().all(|v| v.is_finite()))
            .ok_or_else(|| {
                let empty: Vec<String> = (0..chain.n_terms())
                    .filter(|&t| {
                        nodes.unknown[nodes.node_of_term[t]]
                            .is_some_and(|k| jac.row(k).iter().all(|g| *g == 0.0))
                    })
                    .map(|t| format!("term {t}"))
                    .collect();
                format!(
                    "DC Newton: singular Jacobian at iteration {iteration} (nodes without a \
                     DC path: {empty:?}; junctions {:?})",
                    (0..chain.stages.len())
                        .map(|i| {
                            let [b, _, e] = chain.stage_terms(i);
                            chain.stages[i].device.sign * (v(b) - v(e))
                        })
                        .collect::<Vec<_>>()
                )
            })?;
        let d = |t: Term| nodes.unknown_of(chain, t).map_or(0.0, |k| step[k]);
        let mut lambda: f64 = 1.0;
        for i in (0..chain.stages.len()).filter(|&i| chain.stages[i].is_transistor()) {
            // A junction may move freely while it stays below JUNCTION_FREE (the
            // exponential is still small there) or falls; a rise beyond that is held
            // to MAX_JUNCTION_STEP per iteration. Signed by polarity.
            let [tb, _, te] = chain.stage_terms(i);
            let sign = chain.stages[i].device.sign;
            let old = sign * (v(tb) - v(te));
            let rise = sign * (d(tb) - d(te));
            let allowed = old.max(JUNCTION_FREE) + MAX_JUNCTION_STEP - old;
            if rise > allowed {
                lambda = lambda.min(allowed / rise);
            }
        }
        x += &step * lambda;
        let largest = step.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        if lambda == 1.0 && largest <= NEWTON_TOLERANCE_V {
            return Ok((x, iteration + 1));
        }
    }
    Err(format!(
        "DC Newton did not converge in {NEWTON_MAX_ITERATIONS} iterations"
    ))
}

fn dc_solution(chain: &Chain, nodes: &Nodes, x: &DVector<f64>, iterations: usize) -> DcSolution {
    let n = chain.n_terms();
    let mut v = vec![0.0; n];
    for (t, slot) in v.iter_mut().enumerate() {
        let node = nodes.node_of_term[t];
        *slot = match nodes.unknown[node] {
            Some(k) => x[k],
            None => nodes.fixed[node].expect("a node is either unknown or fixed"),
        };
    }
    let mut op = Vec::new();
    let mut junctions = Vec::new();
    let mut i_out = vec![0.0; chain.stages.len()];
    for (k, i) in chain.opamp_stages().into_iter().enumerate() {
        i_out[i] = x[nodes.n_unknown + k];
    }
    for i in 0..chain.stages.len() {
        if !chain.stages[i].is_transistor() {
            // No transistor: nothing flows, nothing is reported.
            let zero = Junction {
                i_c: 0.0,
                i_b: 0.0,
                g_m: 0.0,
                g_o: 0.0,
                g_pi: 0.0,
            };
            let at = |t: Term| v[chain.term_index(t)];
            op.push(OperatingPoint {
                i_c: 0.0,
                i_b: 0.0,
                i_e: 0.0,
                v_ce: 0.0,
                v_be: 0.0,
                v_be_junction: 0.0,
                v_ce_junction: 0.0,
                v_b: at(Term::Base(i)),
                v_c: at(Term::Collector(i)),
                v_e: 0.0,
            });
            junctions.push(zero);
            continue;
        }
        let sign = chain.stages[i].device.sign;
        let at = |t: Term| v[chain.term_index(t)];
        let [tb, tc, te] = chain.stage_terms(i).map(at);
        let j = junction_at(chain, i, tb, tc, te);
        let (v_b, v_c, v_e) = (
            at(Term::Base(i)),
            at(Term::Collector(i)),
            at(Term::Emitter(i)),
        );
        // Reported (docs/definitions.md): node voltages signed at the terminals; currents,
        // V_BE and V_CE as magnitudes, V_BE and V_CE at the terminals.
        op.push(OperatingPoint {
            i_c: j.i_c,
            i_b: j.i_b,
            i_e: j.i_c + j.i_b,
            v_ce: sign * (v_c - v_e),
            v_be: sign * (v_b - v_e),
            v_be_junction: sign * (tb - te),
            v_ce_junction: sign * (tc - te),
            v_b,
            v_c,
            v_e,
        });
        junctions.push(j);
    }
    DcSolution {
        v,
        op,
        junctions,
        i_out,
        iterations,
    }
}

/// Stages outside the forward-active region: V_CE below vce_sat, or V_BE too small to
/// be called forward bias. Each entry: (stage index, reason).
pub fn out_of_active_region(chain: &Chain, dc: &DcSolution) -> Vec<(usize, String)> {
    let mut out = Vec::new();
    for (i, (s, op)) in chain.stages.iter().zip(&dc.op).enumerate() {
        if let Some(o) = s.opamp() {
            // The pin must rest within the stage's rails less `swing_margin`
            // (docs/definitions.md "Op-amp").
            let (top, bottom) = (dc.voltage(chain, s.top), dc.voltage(chain, s.bottom));
            if op.v_c > top - o.swing_margin || op.v_c < bottom + o.swing_margin {
                out.push((i, format!("op-amp pin at {:.6} V out of reach", op.v_c)));
            } else if dc.i_out[i].abs() > o.i_limit {
                // Its pin current at rest beyond ± output_current_limit.
                out.push((i, format!("op-amp pin current {:.6e} A at DC", dc.i_out[i])));
            }
            continue;
        }
        if !s.is_transistor() {
            continue;
        }
        // A JFET's edge is V_DS = V_GS − V_P (docs/definitions.md "JFET").
        let edge = s.device.jfet.map_or(s.device.vce_sat, |j| op.v_be + j.v_p);
        if op.v_ce < edge {
            out.push((
                i,
                format!(
                    "V_CE = {:.6} V below vce_sat {} V",
                    op.v_ce, s.device.vce_sat
                ),
            ));
        } else if op.i_c < I_CUTOFF {
            out.push((
                i,
                format!(
                    "I_C = {:.3e} A at V_BE = {:.6} V, no forward bias",
                    op.i_c, op.v_be
                ),
            ));
        }
    }
    out
}

/// Midband small-signal solve of the flat network linearised at `dc`.
/// Returns the complex voltage of every terminal.
pub fn solve_ac(chain: &Chain, dc: &DcSolution, setup: &Setup) -> Result<Vec<C64>, String> {
    let setup = Setup {
        ac: true,
        incremental: false,
        ..setup.clone()
    };
    solve_linear(chain, dc, &setup)
}

/// Complex voltage of every terminal per volt of source EMF at `f` hertz (every
/// capacitor as an admittance, device capacitances included).
pub fn transfer_at(chain: &Chain, dc: &DcSolution, f: f64) -> Result<Vec<C64>, String> {
    solve_ac(
        chain,
        dc,
        &Setup {
            emf: 1.0,
            freq: Some(f),
            ..Setup::default()
        },
    )
}

/// Midband resistance between `a` and `b` (1 A in at `a`, out at `b`; `b = None` is
/// ground), EMF zeroed, with the links in `cut` open and the bypass capacitor of
/// `unbypassed` open: the resistance a capacitor there sees with every other
/// low-frequency capacitor shorted and the device capacitances open.
pub fn midband_resistance(
    chain: &Chain,
    dc: &DcSolution,
    a: Term,
    b: Option<Term>,
    cut: Vec<usize>,
    unbypassed: Option<usize>,
) -> Result<f64, String> {
    midband_resistance_with(
        chain,
        dc,
        a,
        b,
        Setup {
            cut,
            unbypassed,
            ..Setup::default()
        },
    )
}

/// Midband resistance between `a` and `b` (1 A in at `a`, out at `b`; ground when
/// `None`) in the wiring `setup` (its links cut and capacitors left open), EMF zeroed.
pub fn midband_resistance_with(
    chain: &Chain,
    dc: &DcSolution,
    a: Term,
    b: Option<Term>,
    setup: Setup,
) -> Result<f64, String> {
    let v = solve_ac(
        chain,
        dc,
        &Setup {
            inject: Some(a),
            inject_return: b,
            ..setup
        },
    )?;
    let at = |t: Term| v[chain.term_index(t)];
    let r = at(a) - b.map_or(C64::new(0.0, 0.0), at);
    real(r, "midband resistance")
}

/// Small changes about the DC solution with the DC wiring (capacitors open):
/// the network of the DC Jacobian, for Thevenin resistances at DC.
pub fn solve_incremental_dc(
    chain: &Chain,
    dc: &DcSolution,
    setup: &Setup,
) -> Result<Vec<C64>, String> {
    let setup = Setup {
        ac: false,
        incremental: true,
        ..setup.clone()
    };
    solve_linear(chain, dc, &setup)
}

fn solve_linear(chain: &Chain, dc: &DcSolution, setup: &Setup) -> Result<Vec<C64>, String> {
    solve_linear_with_sources(chain, dc, setup).map(|(v, _)| v)
}

/// [`solve_ac`] that also returns, per stage, the op-amp source's current into its
/// node (0 for other stages).
pub fn solve_ac_with_sources(
    chain: &Chain,
    dc: &DcSolution,
    setup: &Setup,
) -> Result<(Vec<C64>, Vec<C64>), String> {
    let setup = Setup {
        ac: true,
        incremental: false,
        ..setup.clone()
    };
    solve_linear_with_sources(chain, dc, &setup)
}

/// The linear solve: every terminal's voltage and every op-amp source's current.
fn solve_linear_with_sources(
    chain: &Chain,
    dc: &DcSolution,
    setup: &Setup,
) -> Result<(Vec<C64>, Vec<C64>), String> {
    let (y, rhs, nodes, series_len, opamps) = assemble(chain, dc, setup)?;
    let n = nodes.n_unknown;
    let lu = y.clone().lu();
    let finite = |s: &DVector<C64>| s.iter().all(|v| v.re.is_finite() && v.im.is_finite());
    let mut x = lu
        .solve(&rhs)
        .filter(finite)
        .ok_or("linear solve: singular nodal matrix")?;
    // Iterative refinement (textbook, e.g. Golub & Van Loan §3.5.3): an op-amp's
    // source row (entries A_0 ~ 10⁵) beside KCL rows in siemens loses digits in one LU
    // pass; x += LU⁻¹(b − Y·x) recovers them.
    for _ in 0..2 {
        let residual = &rhs - &y * &x;
        match lu.solve(&residual).filter(finite) {
            Some(dx) => x += dx,
            None => break,
        }
    }
    let mut v = Vec::with_capacity(chain.n_terms());
    for t in 0..chain.n_terms() {
        let node = nodes.node_of_term[t];
        v.push(match nodes.unknown[node] {
            Some(k) => x[k],
            None => c64(nodes.fixed[node].expect("fixed node")),
        });
    }
    let mut currents = vec![c64(0.0); chain.stages.len()];
    for (k, &i) in opamps.iter().enumerate() {
        currents[i] = x[n + series_len + k];
    }
    Ok((v, currents))
}

/// The natural frequencies of the chain's linear network at its DC solution (rad/s):
/// the values of s where G + s·C is singular, the closed loop's poles. Found as the
/// eigenvalues μ of (G + σ·C)⁻¹·C (nalgebra's real Schur form), s = σ − 1/μ, with σ a
/// shift that is no natural frequency; μ ≈ 0 (the network's algebraic part, s = ∞) is
/// left out. G = Y(0) and C = (Y(s₁) − G)/s₁ from the affine matrix (`Setup::laplace`),
/// s₁ large enough that s₁·C is of the order of the conductances. Bipolar and passive
/// stages only.
pub fn natural_frequencies(chain: &Chain, dc: &DcSolution) -> Result<Vec<C64>, String> {
    let at = |s: f64| -> Result<DMatrix<f64>, String> {
        // A frequency keeps the capacitors as elements (`Chain::nodes`); `laplace`
        // then sets their s.
        let setup = Setup {
            ac: true,
            freq: Some(1.0),
            laplace: Some(s),
            ..Setup::default()
        };
        Ok(assemble(chain, dc, &setup)?.0.map(|x| x.re))
    };
    let s_1 = 1e8;
    let g = at(0.0)?;
    let c = (at(s_1)? - &g) / s_1;
    let sigma = 1234.5;
    let m = (&g + &c * sigma)
        .lu()
        .solve(&c)
        .ok_or("natural frequencies: G + σ·C is singular")?;
    let scale = m.amax();
    Ok(m.complex_eigenvalues()
        .iter()
        .filter(|mu| mu.norm() > 1e-12 * scale)
        .map(|mu| c64(sigma) - mu.inv())
        .collect())
}

fn c64(re: f64) -> C64 {
    C64::new(re, 0.0)
}

/// The linear network's matrix and right-hand side, its node numbering, the number of
/// series-capacitor branches and the op-amp stages (their source rows follow them).
#[allow(clippy::type_complexity)]
fn assemble(
    chain: &Chain,
    dc: &DcSolution,
    setup: &Setup,
) -> Result<(DMatrix<C64>, DVector<C64>, Nodes, usize, Vec<usize>), String> {
    let nodes = chain.nodes(setup)?;
    let n = nodes.n_unknown;
    // The complex frequency: j·2π·f at a frequency, or a given real s.
    let s_of = match (setup.ac, setup.laplace, setup.freq) {
        (true, Some(s), _) => Some(c64(s)),
        (true, None, Some(f)) => Some(C64::new(0.0, 2.0 * std::f64::consts::PI * f)),
        _ => None,
    };
    // At a frequency the coupling and bypass capacitors (large, so their admittance
    // can dwarf every conductance) are branches with their own current unknown
    // (modified nodal analysis): v_a − v_b − Z·i = 0 stays well conditioned as Z → 0.
    let mut series: Vec<(Term, Term, f64)> = Vec::new();
    if s_of.is_some() {
        for (k, l) in chain.links.iter().enumerate() {
            if !l.direct && !setup.cut.contains(&k) {
                let (a, b) = chain.link_terms(k);
                series.push((a, b, l.capacitance));
            }
        }
        for (i, s) in chain.stages.iter().enumerate() {
            if s.has_c_bypass {
                series.push((Term::EmitterMid(i), s.emitter_rail(i), s.c_bypass));
            }
            if s.kind == StageKind::CommonBase {
                series.push((Term::Base(i), Term::Ground, s.c_base));
            }
            if let Some((_, cap)) = s.supply_filter {
                series.push((Term::Filter(i), Term::Ground, cap));
            }
            if let Body::Passive(Passive {
                series: Element::C(cap),
                ..
            }) = s.body
            {
                series.push((Term::Base(i), Term::Collector(i), cap));
            }
        }
        for (k, l) in chain.feedback.iter().enumerate() {
            if let Some(cap) = l.capacitance {
                series.push((Term::Feedback(k), l.end, cap));
            }
        }
    }
    let opamps = chain.opamp_stages();
    if setup.laplace.is_some() && !opamps.is_empty() {
        return Err(
            "natural frequencies: op-amp stages (A(s) is not affine in s) are not modelled".into(),
        );
    }
    let size = n + series.len() + opamps.len();
    let mut y = DMatrix::<C64>::zeros(size, size);
    let mut rhs = DVector::<C64>::zeros(size);
    let c = c64;
    // Stamp an admittance-like term: current leaving `row` = y · v(col).
    let mut stamp = |row: Term, col: Term, g: C64| {
        if let Some(r) = nodes.unknown_of(chain, row) {
            match nodes.unknown_of(chain, col) {
                Some(k) => y[(r, k)] += g,
                None => {
                    let v_fixed = nodes.fixed_of(chain, col).expect("fixed node");
                    rhs[r] -= g * c(v_fixed);
                }
            }
        }
    };
    let between = |stamp: &mut dyn FnMut(Term, Term, C64), a: Term, b: Term, g: C64| {
        stamp(a, a, g);
        stamp(a, b, -g);
        stamp(b, b, g);
        stamp(b, a, -g);
    };
    for r in chain.resistors() {
        if r.r == 0.0 {
            continue;
        }
        between(&mut stamp, r.a, r.b, c(1.0 / r.r));
    }
    if let Some(jw) = s_of {
        // The small capacitors as admittances j·ω·C (s·C).
        for (i, s) in chain.stages.iter().enumerate() {
            if let Body::Passive(Passive {
                shunt: Element::C(cap),
                ..
            }) = s.body
            {
                between(&mut stamp, Term::Collector(i), Term::Ground, jw * cap);
            }
            if setup.without_transistor == Some(i) || !s.is_transistor() {
                continue;
            }
            // C_π from f_T = g_m/(2π(C_π + C_μ)) (charge-control relation), clamped at 0.
            let g_m = dc.junctions[i].g_m;
            let c_pi = s.device.jfet.map_or(0.0, |j| j.c_gs)
                + s.device.f_t.map_or(0.0, |f_t| {
                    (g_m / (2.0 * std::f64::consts::PI * f_t) - s.device.c_bc).max(0.0)
                });
            // At the device's own nodes (docs/definitions.md: C_π b'–e, C_μ b'–c).
            between(&mut stamp, Term::IntBase(i), Term::Emitter(i), jw * c_pi);
            between(
                &mut stamp,
                Term::IntBase(i),
                Term::IntCollector(i),
                jw * s.device.c_bc,
            );
        }
        between(
            &mut stamp,
            Term::SourceOut,
            Term::Ground,
            jw * chain.c_source,
        );
        for (j, l) in chain.loads.iter().enumerate() {
            between(&mut stamp, Term::Load(j), Term::Ground, jw * l.capacitance);
        }
    }
    for (i, j) in dc.junctions.iter().enumerate() {
        if setup.without_transistor == Some(i) || !chain.stages[i].is_transistor() {
            continue;
        }
        let [tb, tc, te] = chain.stage_terms(i);
        let j = &Junction {
            g_m: if setup.without_gm == Some(i) {
                0.0
            } else {
                j.g_m
            },
            ..*j
        };
        // Hybrid-π = the Jacobian of the model: i_b = g_π·v_be,
        // i_c = g_m·v_be + g_o·v_ce, i_e = −(i_b + i_c) leaving the emitter node.
        let rows = [
            (tb, [j.g_pi, 0.0, -j.g_pi]),
            (tc, [j.g_m, j.g_o, -j.g_m - j.g_o]),
            (te, [-(j.g_m + j.g_pi), -j.g_o, j.g_m + j.g_o + j.g_pi]),
        ];
        for (t_row, derivs) in rows {
            for (t_col, g) in [tb, tc, te].into_iter().zip(derivs) {
                if g != 0.0 {
                    stamp(t_row, t_col, c(g));
                }
            }
        }
    }
    for (m, &(a, b, cap)) in series.iter().enumerate() {
        let row = n + m;
        // KCL: the branch current i leaves node a and enters node b.
        for (t, sign) in [(a, 1.0), (b, -1.0)] {
            match nodes.unknown_of(chain, t) {
                Some(k) => {
                    y[(k, row)] += c(sign);
                    y[(row, k)] += c(sign);
                }
                None => {
                    let v_fixed = nodes.fixed_of(chain, t).expect("fixed node");
                    rhs[row] -= c(sign * v_fixed);
                }
            }
        }
        let s_val = s_of.expect("series branches only at a frequency");
        if setup.laplace.is_some() {
            // Branch law times s·C: s·C·(v_a − v_b) − i = 0, affine in s.
            for k in 0..y.ncols() {
                if k != row {
                    y[(row, k)] *= s_val * cap;
                }
            }
            rhs[row] *= s_val * cap;
            y[(row, row)] -= c(1.0);
        } else {
            // Branch law: v_a − v_b − Z·i = 0, Z = 1/(jωC) = −j/(ωC).
            y[(row, row)] -= C64::new(0.0, -1.0 / (s_val.im * cap));
        }
    }
    // Op-amp source k (docs/definitions.md "Op-amp"): its current (unknown after the
    // series branches) enters its node; its row is v_src − A·(v₊ − v₋) = 0 with A(s)
    // at the frequency, A_0 at midband and DC.
    for (k, &i) in opamps.iter().enumerate() {
        let o = chain.stages[i].opamp().expect("an op-amp stage");
        let a = if setup.opamp_test == Some(i) {
            rhs[n + series.len() + k] += c(1.0);
            c(0.0)
        } else if setup.without_gm == Some(i) {
            // An op-amp's A stands where a transistor's g_m does (docs/definitions.md
            // "readings": the loop's first device).
            c(0.0)
        } else if setup.ac {
            o.gain(setup.freq)
        } else {
            c(o.a_0)
        };
        let row = n + series.len() + k;
        if setup.opamp_emf == Some(i) {
            rhs[row] += a;
            if o.r_in.is_finite() {
                for (t, sign) in [(o.plus(i), -1.0), (Term::Emitter(i), 1.0)] {
                    if let Some(k) = nodes.unknown_of(chain, t) {
                        rhs[k] += c(sign / o.r_in);
                    }
                }
            }
        }
        let Some(src) = nodes.unknown_of(chain, Term::IntCollector(i)) else {
            // Its node wired to ground for a measurement (the "load" of a stage): the
            // source is out of the network, its current 0.
            y[(row, row)] = c(1.0);
            continue;
        };
        y[(src, row)] -= c(1.0);
        for (t, d) in [
            (Term::IntCollector(i), c(1.0)),
            (o.plus(i), -a),
            (Term::Emitter(i), a),
        ] {
            match nodes.unknown_of(chain, t) {
                Some(col) => y[(row, col)] += d,
                None => rhs[row] -= d * c(nodes.fixed_of(chain, t).expect("fixed node")),
            }
        }
    }
    if let Some(t) = setup.inject {
        let k = nodes
            .unknown_of(chain, t)
            .ok_or_else(|| format!("test current injected into a fixed node {t:?}"))?;
        rhs[k] += c(1.0);
    }
    if let Some(t) = setup.inject_return {
        if let Some(k) = nodes.unknown_of(chain, t) {
            rhs[k] -= c(1.0);
        }
    }
    Ok((y, rhs, nodes, series.len(), opamps))
}

/// A load line in the (V_CE, I_C) plane.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoadLine {
    pub v_ce_intercept: f64,
    pub i_c_intercept: f64,
    /// dI_C/dV_CE, A/V, negative.
    pub slope: f64,
}

impl LoadLine {
    /// The line through the Q point with slope −1/r_total.
    fn through_q(op: &OperatingPoint, r_total: f64) -> LoadLine {
        LoadLine {
            v_ce_intercept: op.v_ce + op.i_c * r_total,
            i_c_intercept: op.i_c + op.v_ce / r_total,
            slope: -1.0 / r_total,
        }
    }
}

#[derive(Debug, Clone)]
pub struct StageResult {
    pub op: OperatingPoint,
    pub g_m: f64,
    pub r_pi: f64,
    /// `None` when there is no Early voltage (infinite).
    pub r_o: Option<f64>,
    pub r_in: f64,
    pub r_out: f64,
    /// `None` when the stage drives nothing.
    pub load: Option<f64>,
    pub gain: f64,
    /// v(input node)/EMF.
    pub input_gain: f64,
    pub cumulative_gain: f64,
    pub limit_up: f64,
    pub limit_down: f64,
    pub clip_input_vpeak: f64,
    pub clip_toward: &'static str,
    pub dc_load_line: LoadLine,
    pub ac_load_line: LoadLine,
    /// V_CE·I_C + V_BE·I_B: all power delivered to the transistor.
    pub p_transistor: f64,
    /// (field name, I²R) for each non-zero resistor of the stage.
    pub p_resistors: Vec<(&'static str, f64)>,
    pub input_from: String,
}

#[derive(Debug, Clone)]
pub struct Analysis {
    pub dc: DcSolution,
    pub stages: Vec<StageResult>,
    /// v(load)/EMF per load.
    pub load_gains: Vec<f64>,
    /// Load index → id of its driver.
    pub load_from: Vec<String>,
    /// Stage with the lowest clip input level.
    pub first_clip: usize,
}

fn real(v: C64, what: &str) -> Result<f64, String> {
    // Midband has no reactances, so every result must be real.
    if v.im != 0.0 {
        return Err(format!("{what}: imaginary part {} at midband", v.im));
    }
    Ok(v.re)
}

impl Chain {
    pub fn node_name(&self, node: Node) -> String {
        match node {
            Node::Source => "source".into(),
            Node::Stage(i) => self.stages[i].id.clone(),
            Node::Load(j) => self.loads[j].id.clone(),
        }
    }

    /// The feedback link whose loop holds stage `i` (the stages on the forward path
    /// from its `to` to its `from`), if any.
    pub fn loop_of(&self, i: usize) -> Option<usize> {
        self.feedback.iter().position(|l| {
            let mut at = l.from;
            loop {
                if at == i {
                    return true;
                }
                if at == l.to {
                    return false;
                }
                match self
                    .links
                    .iter()
                    .find(|k| k.to == Node::Stage(at))
                    .map(|k| k.from)
                {
                    Some(Node::Stage(up)) => at = up,
                    _ => return false,
                }
            }
        })
    }

    fn driver_link(&self, to: Node) -> Result<usize, String> {
        let found: Vec<usize> = (0..self.links.len())
            .filter(|&k| self.links[k].to == to)
            .collect();
        match found[..] {
            [k] => Ok(k),
            _ => Err(format!(
                "{} has {} drivers, expected 1",
                self.node_name(to),
                found.len()
            )),
        }
    }

    fn successor_links(&self, from: Node) -> Vec<usize> {
        (0..self.links.len())
            .filter(|&k| self.links[k].from == from)
            .collect()
    }
}

/// DC Thevenin resistance of the network on terminal `t` of stage `i` (collector or
/// emitter), the stage's transistor removed, everything else linearised at Q.
fn thevenin_at_dc(chain: &Chain, dc: &DcSolution, i: usize, t: Term) -> Result<f64, String> {
    let setup = Setup {
        incremental: true,
        without_transistor: Some(i),
        inject: Some(t),
        ..Setup::default()
    };
    // A terminal wired to the supply or ground has no resistance behind it.
    if chain.nodes(&setup)?.unknown_of(chain, t).is_none() {
        return Ok(0.0);
    }
    // Singular: only a current source meets the terminal (a cascode's upper emitter
    // with its own transistor out sees the lower collector alone): R = ∞.
    // Likewise a resistance above 1 PΩ: no chain resistor comes near it, so it is
    // the rounding remainder of that singular network.
    match solve_incremental_dc(chain, dc, &setup) {
        Ok(v) => real(v[chain.term_index(t)], "DC Thevenin resistance").map(|r| {
            if r.abs() > 1e15 {
                f64::INFINITY
            } else {
                r
            }
        }),
        Err(e) if e.contains("singular") => Ok(f64::INFINITY),
        Err(e) => Err(e),
    }
}

/// Everything the planner reports, computed on the flat network.
pub fn analyse(chain: &Chain, dc: DcSolution) -> Result<Analysis, String> {
    let (transfer, source_currents) = solve_ac_with_sources(
        chain,
        &dc,
        &Setup {
            emf: 1.0,
            ..Setup::default()
        },
    )?;
    let vt = |t: Term, what: &str| real(transfer[chain.term_index(t)], what);
    let resistors = chain.resistors();
    let mut stages = Vec::new();
    for (i, s) in chain.stages.iter().enumerate() {
        let node = Node::Stage(i);
        let out_term = chain.output_term(node);
        let in_link = chain.driver_link(node)?;
        let out_links = chain.successor_links(node);

        let in_term = chain.input_term(node);
        // r_in: cut the feeding link, inject at the input node (downstream load attached).
        // Singular: nothing but the open input meets the node (an op-amp's + without
        // r_bias or r_in): r_in is infinite.
        let v = solve_ac(
            chain,
            &dc,
            &Setup {
                cut: vec![in_link],
                // The driver's side of the cut is grounded: it is not measured, and a
                // cascode's lower collector alone would leave its node undetermined.
                join: vec![(chain.link_terms(in_link).0, Term::Ground)],
                inject: Some(in_term),
                ..Setup::default()
            },
        )
        .map_err(|e| format!("r_in of stage \"{}\": {e}", s.id));
        let r_in = match v {
            Ok(v) => real(v[chain.term_index(in_term)], "r_in")?,
            Err(e) if e.contains("singular") => f64::INFINITY,
            Err(e) => return Err(e),
        };

        // r_out: cut the links to the successors, EMF zeroed, inject at the output node.
        // A singular network here means nothing but a current source meets the node
        // (a cascode's lower collector without r_o): r_out is infinite.
        let r_out = match solve_ac(
            chain,
            &dc,
            &Setup {
                cut: out_links.clone(),
                inject: Some(out_term),
                ..Setup::default()
            },
        ) {
            Ok(v) => real(v[chain.term_index(out_term)], "r_out")?,
            Err(e) if e.contains("singular") => f64::INFINITY,
            // An output on AC ground (a potentiometer at 0) has no resistance.
            Err(e) if e.contains("fixed node") => 0.0,
            Err(e) => return Err(e),
        };

        // load: cut the same links, tie the successors' inputs together and inject there.
        let load = if out_links.is_empty() {
            None
        } else {
            let ends: Vec<Term> = out_links.iter().map(|&k| chain.link_terms(k).1).collect();
            let v = solve_ac(
                chain,
                &dc,
                &Setup {
                    cut: out_links.clone(),
                    // The cut-off output itself is grounded: only the successors are
                    // measured, and a cascode's lower collector alone (a current
                    // source) would leave its node undetermined.
                    join: ends
                        .iter()
                        .map(|&t| (ends[0], t))
                        .chain([(out_term, Term::Ground)])
                        .collect(),
                    inject: Some(ends[0]),
                    ..Setup::default()
                },
            );
            match v {
                Ok(v) => Some(real(v[chain.term_index(ends[0])], "load")?),
                // A successor's input with no AC path of its own (an op-amp's + input
                // with neither r_bias nor r_in): nothing is loaded.
                Err(e) if e.contains("singular") => None,
                Err(e) => return Err(format!("load of stage \"{}\": {e}", s.id)),
            }
        };

        let v_in = vt(in_term, "v(input)")?;
        let v_out = vt(out_term, "v(output)")?;
        let op = dc.op[i];
        if !s.is_transistor() {
            // A passive stage never clips; an op-amp's edges are at its pin.
            let (limit_up, limit_down, clip_toward) = match s.opamp() {
                None => (f64::INFINITY, f64::INFINITY, "none"),
                Some(o) => {
                    // di_pin/dv_out: the source's current (into load and feedback
                    // network) per volt at the pin, both per volt of EMF.
                    let di_dv = real(source_currents[i], "i_pin")? / v_out;
                    let rails = (dc.voltage(chain, s.top), dc.voltage(chain, s.bottom));
                    opamp_limits(o, rails, op.v_c, dc.i_out[i], di_dv)
                }
            };
            let p_resistors = resistors
                .iter()
                .filter(|r| r.r != 0.0 && matches!(r.owner, Some((k, _)) if k == i))
                .map(|r| {
                    let dv = dc.voltage(chain, r.a) - dc.voltage(chain, r.b);
                    (r.owner.expect("owned").1, dv * dv / r.r)
                })
                .collect();
            let nan = LoadLine {
                v_ce_intercept: f64::NAN,
                i_c_intercept: f64::NAN,
                slope: f64::NAN,
            };
            stages.push(StageResult {
                op,
                g_m: 0.0,
                r_pi: f64::INFINITY,
                r_o: None,
                r_in,
                r_out,
                load,
                gain: v_out / v_in,
                input_gain: v_in,
                cumulative_gain: v_out,
                limit_up,
                limit_down,
                clip_input_vpeak: limit_up.min(limit_down) / v_out.abs(),
                clip_toward,
                dc_load_line: nan,
                ac_load_line: nan,
                p_transistor: 0.0,
                p_resistors,
                input_from: chain.node_name(chain.links[in_link].from),
            });
            continue;
        }
        let j = dc.junctions[i];
        // α = I_C/I_E at the Q point (docs/definitions.md).
        let alpha = op.i_c / op.i_e;
        let d = &s.device;
        // DC load line (docs/definitions.md is silent; the planner's DEVELOPERS.md defines it):
        // V_CE = (V_Cth − V_Eth) − I_C·(R_Cth + R_Eth/α), Thevenin networks on collector
        // and emitter with direct-coupled successors included. Measured here on the
        // flat DC network linearised at Q, the stage's own transistor taken out, at the
        // terminals: with r_c, V_CE is the terminal's (docs/definitions.md), and the line
        // in the terminal (V_CE, I_C) plane sees the network outside r_c. The open
        // voltage V_Cth − V_Eth = V_CE + I_C·R_dc (the line passes through Q).
        let r_c_th = thevenin_at_dc(chain, &dc, i, Term::Collector(i))?;
        let r_e_th = thevenin_at_dc(chain, &dc, i, Term::Emitter(i))?;
        let dc_r_total = r_c_th + r_e_th / alpha;
        let v_open = op.v_ce + op.i_c * dc_r_total;
        // I_C at V_CE = 0 written through Q, I_CQ + V_CEQ/R, so that an infinite R
        // (a current-fed emitter) gives the horizontal line I_C = I_CQ.
        let dc_load_line = LoadLine {
            v_ce_intercept: v_open,
            i_c_intercept: op.i_c + op.v_ce / dc_r_total,
            slope: -1.0 / dc_r_total,
        };
        let cumulative_gain = v_out;
        // Every stage on a loop takes region limits (docs/definitions.md "Clip method").
        let (limit_up, limit_down, ac_r_total, up_side, down_side) =
            if s.keeps_load_lines() && chain.loop_of(i).is_none() {
                // A negative load (a loop's bootstrapped input downstream) enters by its
                // magnitude (docs/definitions.md "Load lines and swing limits").
                let load = load.map(f64::abs);
                let (up, down, r_total, up_side, down_side) = match s.kind {
                    StageKind::CommonEmitter => {
                        let r_ac = parallel(s.r_collector, load); // R_C ∥ load
                        let r_e_ac = s.r_emitter; // unbypassed part only
                        let r_total = r_ac + r_e_ac / alpha;
                        (
                            op.i_c * r_ac,                          // toward cutoff
                            (op.v_ce - d.vce_sat) * r_ac / r_total, // toward saturation
                            r_total,
                            "cutoff",
                            "saturation",
                        )
                    }
                    _ => {
                        let r_e_ac = parallel(s.r_emitter, load); // R_E ∥ load
                        (
                            (op.v_ce - d.vce_sat) * r_e_ac / (alpha * s.r_collector + r_e_ac), // toward saturation
                            op.i_e * r_e_ac, // toward cutoff
                            s.r_collector + r_e_ac / alpha,
                            "saturation",
                            "cutoff",
                        )
                    }
                };
                if d.sign > 0.0 {
                    (up, down, r_total, up_side, down_side)
                } else {
                    // A PNP hangs upside down: the same |I_C| change moves its output
                    // the other way, so the two limits swap sides (docs/definitions.md).
                    (down, up, r_total, down_side, up_side)
                }
            } else {
                // Region limits (docs/definitions.md "Swing limits of any kind"): each edge's
                // distance over the rate at which its quantity moves per volt of EMF in
                // this linearised midband network. Rates as magnitudes move: I_C with
                // g_m·v_b'e + g_o·v_c'e, V_CE with v_c − v_e at the terminals.
                let at = |t: Term| transfer[chain.term_index(t)].re;
                let [tb, tc, te] = chain.stage_terms(i);
                let rate_i = d.sign * (j.g_m * (at(tb) - at(te)) + j.g_o * (at(tc) - at(te)));
                let rate_v = d.sign * (at(Term::Collector(i)) - at(Term::Emitter(i)));
                // A JFET's voltage edge is V_DS = V_GS − V_P: its distance moves with V_DS
                // less V_GS (docs/definitions.md "JFET").
                let (voltage_edge, rate_edge) = match d.jfet {
                    Some(jf) => (
                        (op.v_ce - (op.v_be + jf.v_p), "ohmic"),
                        rate_v - d.sign * (at(Term::Base(i)) - at(Term::Emitter(i))),
                    ),
                    None => ((op.v_ce - d.vce_sat, "saturation"), rate_v),
                };
                let (mut up, mut down) = (f64::INFINITY, f64::INFINITY);
                let (mut up_side, mut down_side) = ("cutoff", voltage_edge.1);
                for (distance, rate, side) in [
                    (op.i_c, rate_i, "cutoff"),
                    (voltage_edge.0, rate_edge, voltage_edge.1),
                ] {
                    if rate == 0.0 || !rate.is_finite() {
                        continue; // this edge is never reached
                    }
                    // The EMF −distance/rate reaches the edge; the output then moves by
                    // cumulative_gain·EMF.
                    let limit = cumulative_gain.abs() * distance / rate.abs();
                    let moves_up = -cumulative_gain / rate > 0.0;
                    if moves_up && limit < up {
                        up = limit;
                        up_side = side;
                    } else if !moves_up && limit < down {
                        down = limit;
                        down_side = side;
                    }
                }
                // Along the swing V_CE moves rate_v per rate_i of I_C.
                let r_line = -rate_v / rate_i;
                let r_line = if r_line.is_finite() && r_line > 0.0 {
                    r_line
                } else {
                    f64::INFINITY
                };
                (up, down, r_line, up_side, down_side)
            };
        let clip_toward = if limit_up <= limit_down {
            up_side
        } else {
            down_side
        };
        let cumulative_gain = v_out;
        let p_resistors = resistors
            .iter()
            .filter(|r| r.r != 0.0 && matches!(r.owner, Some((k, _)) if k == i))
            .map(|r| {
                let dv = dc.voltage(chain, r.a) - dc.voltage(chain, r.b);
                (r.owner.expect("owned").1, dv * dv / r.r)
            })
            .collect();
        stages.push(StageResult {
            op,
            g_m: j.g_m,
            r_pi: 1.0 / j.g_pi,
            r_o: (j.g_o != 0.0).then(|| 1.0 / j.g_o),
            r_in,
            r_out,
            load,
            gain: v_out / v_in,
            input_gain: v_in,
            cumulative_gain,
            limit_up,
            limit_down,
            clip_input_vpeak: limit_up.min(limit_down) / cumulative_gain.abs(),
            clip_toward,
            dc_load_line,
            ac_load_line: LoadLine::through_q(&op, ac_r_total),
            p_transistor: op.v_ce * op.i_c + op.v_be * op.i_b,
            p_resistors,
            input_from: chain.node_name(chain.links[in_link].from),
        });
    }
    let mut load_gains = Vec::new();
    let mut load_from = Vec::new();
    for j in 0..chain.loads.len() {
        load_gains.push(vt(Term::Load(j), "v(load)")?);
        let k = chain.driver_link(Node::Load(j))?;
        load_from.push(chain.node_name(chain.links[k].from));
    }
    let first_clip = (0..stages.len())
        .min_by(|&a, &b| {
            stages[a]
                .clip_input_vpeak
                .total_cmp(&stages[b].clip_input_vpeak)
        })
        .unwrap_or(0);
    Ok(Analysis {
        dc,
        stages,
        load_gains,
        load_from,
        first_clip,
    })
}

/// The loop gain T of stage `i`'s op-amp at midband (docs/definitions.md "Op-amp",
/// "Frequency response"): its source replaced by a 1 V test source, the EMF dead,
/// T = −A_0·(v₊ − v₋) in the whole chain.
pub fn opamp_loop_gain(chain: &Chain, dc: &DcSolution, i: usize) -> Result<f64, String> {
    let o = chain.stages[i].opamp().ok_or("not an op-amp stage")?;
    let v = solve_ac(
        chain,
        dc,
        &Setup {
            opamp_test: Some(i),
            ..Setup::default()
        },
    )?;
    let at = |t: Term| v[chain.term_index(t)];
    real(-o.a_0 * (at(o.plus(i)) - at(Term::Emitter(i))), "loop gain")
}

/// An op-amp stage's limits at its pin (docs/definitions.md "Op-amp", region limits):
/// (limit_up, limit_down, side of the smaller). Each side is the nearer of "rail", the
/// pin within `swing_margin` of the stage's (top, bottom) `rails`, and
/// "current_limit", the pin current I_out moving by `di_dv` per volt of output to
/// ± `output_current_limit`.
fn opamp_limits(
    o: &Opamp,
    rails: (f64, f64),
    v_out: f64,
    i_out: f64,
    di_dv: f64,
) -> (f64, f64, &'static str) {
    let rail_up = rails.0 - o.swing_margin - v_out;
    let rail_down = v_out - (rails.1 + o.swing_margin);
    // Output up by ΔV moves the current by di_dv·ΔV: toward +I_lim when di_dv > 0,
    // toward −I_lim when di_dv < 0.
    let (current_up, current_down) = if di_dv == 0.0 {
        (f64::INFINITY, f64::INFINITY)
    } else if di_dv > 0.0 {
        ((o.i_limit - i_out) / di_dv, (o.i_limit + i_out) / di_dv)
    } else {
        ((o.i_limit + i_out) / -di_dv, (o.i_limit - i_out) / -di_dv)
    };
    let nearer = |rail: f64, current: f64| {
        if current < rail {
            (current, "current_limit")
        } else {
            (rail, "rail")
        }
    };
    let (up, up_side) = nearer(rail_up, current_up);
    let (down, down_side) = nearer(rail_down, current_down);
    (up, down, if up <= down { up_side } else { down_side })
}

/// A loop's figures by Bode's return ratio of the g_m of transistor `i` (the loop's
/// first device), with the output at terminal `out`, at midband (`freq` `None`) or at
/// a frequency. The network is linear in the EMF e and the current i_x of the
/// controlled source taken as an independent source (collector to emitter inside the
/// device): v_out = A_0·e + b·i_x, v_b'e = c·e + d·i_x. Then T = −g_m·d,
/// A_∞ = A_0 − b·c/d (v_b'e nulled), A_f = A_0 + g_m·b·c/(1 + T) (i_x = g_m·v_b'e).
#[derive(Debug, Clone, Copy)]
pub struct LoopFigures {
    pub return_ratio: C64,
    pub asymptotic_gain: C64,
    pub direct_gain: C64,
    pub closed_loop_gain: C64,
}

pub fn loop_figures(
    chain: &Chain,
    dc: &DcSolution,
    i: usize,
    out: Term,
    freq: Option<f64>,
) -> Result<LoopFigures, String> {
    if let Some(o) = chain.stages[i].opamp() {
        return opamp_loop_figures(chain, dc, i, o.gain(freq), out, freq);
    }
    let g_m = dc.junctions[i].g_m;
    let [tb, tc, te] = chain.stage_terms(i);
    let base = Setup {
        ac: true,
        freq,
        without_gm: Some(i),
        ..Setup::default()
    };
    // A terminal held at AC ground (a fully bypassed emitter) absorbs its end of the
    // unit source.
    let nodes = chain.nodes(&base)?;
    let live = |t: Term| nodes.unknown_of(chain, t).is_some().then_some(t);
    let solve = |emf: f64, source: bool| -> Result<(C64, C64), String> {
        let v = solve_ac(
            chain,
            dc,
            &Setup {
                emf,
                inject: if source { live(te) } else { None },
                inject_return: if source { live(tc) } else { None },
                ..base.clone()
            },
        )?;
        let at = |t: Term| v[chain.term_index(t)];
        Ok((at(out), at(tb) - at(te)))
    };
    let (a_0, c) = solve(1.0, false)?;
    let (b, d) = solve(0.0, true)?;
    let t = -g_m * d;
    Ok(LoopFigures {
        return_ratio: t,
        asymptotic_gain: a_0 - b * c / d,
        direct_gain: a_0,
        closed_loop_gain: a_0 + g_m * b * c / (1.0 + t),
    })
}

/// The loop's first device (docs/definitions.md "readings"): the stage feedback link
/// `k` returns to when it has a transistor or an op-amp, else the first stage after it
/// on the loop that has one.
pub fn loop_device(chain: &Chain, k: usize) -> Option<usize> {
    let l = &chain.feedback[k];
    // The loop's stages from `from` back to `to` along the forward links.
    let mut path = vec![l.from];
    let mut at = l.from;
    while at != l.to {
        at = chain.links.iter().find_map(|x| match (x.from, x.to) {
            (Node::Stage(u), Node::Stage(v)) if v == at => Some(u),
            _ => None,
        })?;
        path.push(at);
    }
    path.into_iter()
        .rev()
        .find(|&i| chain.stages[i].is_transistor() || chain.stages[i].opamp().is_some())
}

/// [`loop_figures`] with an op-amp as the loop's first device (docs/definitions.md
/// "readings"): its source A·(v₊ − v₋) replaced by a 1 V test source (EMF dead) gives
/// b and d = v₊ − v₋, the source with A = 0 and the EMF on gives A_0 and c; A takes
/// g_m's place: T = −A·d.
fn opamp_loop_figures(
    chain: &Chain,
    dc: &DcSolution,
    i: usize,
    a: C64,
    out: Term,
    freq: Option<f64>,
) -> Result<LoopFigures, String> {
    let o = chain.stages[i].opamp().expect("an op-amp stage");
    let solve = |setup: Setup| -> Result<(C64, C64), String> {
        let v = solve_ac(chain, dc, &setup)?;
        let at = |t: Term| v[chain.term_index(t)];
        Ok((at(out), at(o.plus(i)) - at(Term::Emitter(i))))
    };
    let (a_0, c) = solve(Setup {
        ac: true,
        freq,
        emf: 1.0,
        without_gm: Some(i),
        ..Setup::default()
    })?;
    let (b, d) = solve(Setup {
        ac: true,
        freq,
        emf: 0.0,
        opamp_test: Some(i),
        ..Setup::default()
    })?;
    let t = -a * d;
    Ok(LoopFigures {
        return_ratio: t,
        asymptotic_gain: a_0 - b * c / d,
        direct_gain: a_0,
        closed_loop_gain: a_0 + a * b * c / (1.0 + t),
    })
}
