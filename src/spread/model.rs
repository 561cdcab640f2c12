//! What spreads in a build, described once: a flat list of (parameter, limits,
//! distribution) read from the chain file, and how a set of drawn values is written
//! into a [`Chain`] in place.

use crate::chain::{Chain, ChainError, Fields, ValueRange};
use crate::device::temperature::{beta_at, saturation_current_at};
use crate::spec::{ChainSpec, Distribution, ValueSpec};
use crate::units::Kind;
use serde::Serialize;

/// Where a spread value goes in the chain.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Param {
    Supply,
    SourceResistance,
    Load(usize),
    /// Part `part` of [`crate::stages::StageKind::parts`] of stage `stage`.
    Part {
        stage: usize,
        part: usize,
    },
    Beta(usize),
    SaturationCurrent(usize),
    EarlyVoltage(usize),
    Temperature,
    /// The coupling capacitor of link `k` (index in the chain file).
    Coupling(usize),
    /// The resistor and the series capacitor of feedback link `k` (`Topology::feedback`).
    FeedbackResistance(usize),
    FeedbackCapacitance(usize),
    SourceCapacitance,
    LoadCapacitance(usize),
    TransitionFrequency(usize),
    CollectorBaseCapacitance(usize),
    /// A JFET's I_DSS.
    DrainSaturationCurrent(usize),
    /// A JFET's V_P (signed as in the file; the model keeps |V_P|).
    PinchOffVoltage(usize),
}

/// One spread parameter: its limits around the nominal value and how it is drawn.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spread {
    #[serde(skip)]
    pub param: Param,
    /// Name in reports: `stages.<id>.<part>`, `devices.<name>.beta`, `temperature`, …
    pub parameter: String,
    pub min: f64,
    pub nominal: f64,
    pub max: f64,
    pub distribution: Distribution,
    /// SI unit of the values ("" for β).
    pub unit: &'static str,
}

/// A value with a tolerance that does not move any reported quantity.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct NotSampled {
    pub parameter: String,
    pub reason: &'static str,
}

/// Capacitors are shorts and device capacitances open at midband (docs/definitions.md): without
/// a frequency to evaluate at, their spread moves nothing.
const CAPACITOR_AT_MIDBAND: &str =
    "a capacitance: it does not act at midband; evaluate at a frequency (--at or --band) to spread it";

/// Everything that spreads, built once per chain.
#[derive(Debug, Clone)]
pub struct SpreadModel {
    pub spreads: Vec<Spread>,
    pub not_sampled: Vec<NotSampled>,
    /// Nominal temperature T0 (the file's), in kelvin: the values of the file hold here.
    pub t0: f64,
    /// β temperature coefficient per device, per kelvin (0 when the file gives none).
    pub beta_per_kelvin: Vec<f64>,
    nominal_beta: Vec<f64>,
    nominal_i_s: Vec<f64>,
}

/// Unit symbol of a kind, for reports.
fn unit(kind: Kind) -> &'static str {
    match kind {
        Kind::Resistance => "Ω",
        Kind::Capacitance => "F",
        Kind::Voltage => "V",
        Kind::Current => "A",
        Kind::Frequency => "Hz",
        Kind::Power => "W",
        Kind::Temperature => "K",
        Kind::VoltageDensity => "V/√Hz",
        Kind::CurrentDensity => "A/√Hz",
        Kind::SlewRate => "V/s",
    }
}

impl SpreadModel {
    /// Read the spreads of a validated chain from its file. `temperature`, when given,
    /// is an ambient range (kelvin) that replaces the file's. With `at_frequency` the
    /// builds are evaluated at a frequency, where capacitors act: their tolerances
    /// spread too; without it they are listed as not sampled.
    pub fn build(
        spec: &ChainSpec,
        chain: &Chain,
        temperature: Option<(f64, f64)>,
        at_frequency: bool,
    ) -> Result<SpreadModel, ChainError> {
        let default_distribution = spec
            .tolerance
            .as_ref()
            .and_then(|t| t.distribution)
            .unwrap_or_default();
        let tf = Fields::new("tolerance");
        let default_tolerance =
            |v: &Option<ValueSpec>, name| v.as_ref().map(|v| tf.tolerance(name, v)).transpose();
        let (resistors, capacitors) = match &spec.tolerance {
            Some(t) => (
                default_tolerance(&t.resistors, "resistors")?,
                default_tolerance(&t.capacitors, "capacitors")?,
            ),
            None => (None, None),
        };

        let t0 = chain.temperature;
        let mut spreads = Vec::new();
        let mut not_sampled = Vec::new();
        let mut beta_per_kelvin = vec![0.0; chain.devices.len()];
        // A value whose limits coincide (e.g. "0%" to exempt a part from the default)
        // does not spread.
        let mut push = |param, parameter: String, range: ValueRange, unit| {
            if range.min == range.max {
                return;
            }
            let acts_only_at_frequency =
                unit == "F" || matches!(param, Param::TransitionFrequency(_));
            if acts_only_at_frequency && !at_frequency {
                not_sampled.push(NotSampled {
                    parameter,
                    reason: CAPACITOR_AT_MIDBAND,
                });
                return;
            }
            spreads.push(Spread {
                param,
                parameter,
                min: range.min,
                nominal: range.nominal,
                max: range.max,
                distribution: range.distribution.unwrap_or(default_distribution),
                unit,
            })
        };

        let top = Fields::new("");
        // Only a v1 `supply` spreads; named rails (`supplies`) are taken as written.
        let supply = match &spec.supply {
            Some(v) => top.range("supply", v, |n, p| top.value(n, p, Kind::Voltage))?,
            None => None,
        };
        if let Some(r) = supply {
            push(Param::Supply, "supply".into(), r, "V");
        }
        let fs = Fields::new("source");
        let r_s = fs.range("resistance", &spec.source.resistance, |n, p| {
            fs.value(n, p, Kind::Resistance)
        })?;
        if let Some(r) = r_s {
            push(Param::SourceResistance, "source.resistance".into(), r, "Ω");
        }
        for (k, l) in spec.loads.iter().enumerate() {
            let f = Fields::new(format!("loads[{k}]"));
            let r_l = f.range("resistance", &l.resistance, |n, p| {
                f.value(n, p, Kind::Resistance)
            })?;
            if let Some(r) = r_l {
                let name = format!("loads.{}.resistance", l.id);
                push(Param::Load(k), name, r, "Ω");
            }
        }

        for (i, s) in spec.stages.iter().enumerate() {
            let f = Fields::of_stage(format!("stages[{i}]"), &chain.stages[i].id);
            let mut values = chain.stages[i].kind.clone();
            for (j, &(part, kind)) in chain.stages[i].kind.parts().iter().enumerate() {
                let Some(nominal) = values.part_mut(j).map(|x| *x) else {
                    continue;
                };
                let name = format!("stages.{}.{part}", chain.stages[i].id);
                let written = match s.part(j) {
                    Some(v) => f.range(part, v, |n, p| f.value(n, p, kind))?,
                    None => None,
                };
                let default = match kind {
                    Kind::Capacitance => capacitors,
                    _ => resistors,
                };
                let range = written.or(default.map(|t| ValueRange::from_tolerance(nominal, t)));
                if let Some(r) = range {
                    push(Param::Part { stage: i, part: j }, name, r, unit(kind));
                }
            }
        }
        for (k, l) in spec.links.iter().enumerate() {
            if matches!(l.coupling.nominal(), ValueSpec::Text(t) if t.trim() == "direct") {
                continue;
            }
            if matches!(l.coupling.nominal(), ValueSpec::Text(t) if t.trim() == "feedback") {
                // A feedback link's resistor and series capacitor are parts: the
                // default tolerances reach them.
                let Some(n) = chain.topology.feedback.iter().position(|x| x.link == k) else {
                    continue;
                };
                let f = Fields::new(format!("links[{k}]"));
                let parts = [
                    (
                        "resistance",
                        &l.resistance,
                        Kind::Resistance,
                        resistors,
                        "Ω",
                    ),
                    (
                        "capacitance",
                        &l.capacitance,
                        Kind::Capacitance,
                        capacitors,
                        "F",
                    ),
                ];
                for (field, v, kind, default, unit) in parts {
                    let Some(v) = v else { continue };
                    let read = |n: &str, p: &ValueSpec| f.positive(n, p, kind);
                    let written = f.range(field, v, read)?;
                    let nominal = read(field, v.nominal())?;
                    let range = written.or(default.map(|t| ValueRange::from_tolerance(nominal, t)));
                    if let Some(r) = range {
                        let name = format!("links[{k}].{field} (feedback {} → {})", l.from, l.to);
                        let param = if kind == Kind::Resistance {
                            Param::FeedbackResistance(n)
                        } else {
                            Param::FeedbackCapacitance(n)
                        };
                        push(param, name, r, unit);
                    }
                }
                continue;
            }
            let f = Fields::new(format!("links[{k}]"));
            let read = |n: &str, p: &ValueSpec| f.positive(n, p, Kind::Capacitance);
            let written = f.range("coupling", &l.coupling, read)?;
            let nominal = read("coupling", l.coupling.nominal())?;
            let range = written.or(capacitors.map(|t| ValueRange::from_tolerance(nominal, t)));
            if let Some(r) = range {
                let name = format!("links[{k}].coupling ({} → {})", l.from, l.to);
                push(Param::Coupling(k), name, r, "F");
            }
        }
        // Stray and device capacitances spread only where the file gives their range
        // (they are not parts, so the default capacitor tolerance does not reach them).
        if let Some(v) = &spec.source.capacitance {
            let read = |n: &str, p: &ValueSpec| fs.value(n, p, Kind::Capacitance);
            if let Some(r) = fs.range("capacitance", v, read)? {
                push(
                    Param::SourceCapacitance,
                    "source.capacitance".into(),
                    r,
                    "F",
                );
            }
        }
        for (k, l) in spec.loads.iter().enumerate() {
            let f = Fields::new(format!("loads[{k}]"));
            if let Some(v) = &l.capacitance {
                let read = |n: &str, p: &ValueSpec| f.value(n, p, Kind::Capacitance);
                if let Some(r) = f.range("capacitance", v, read)? {
                    let name = format!("loads.{}.capacitance", l.id);
                    push(Param::LoadCapacitance(k), name, r, "F");
                }
            }
        }

        for (d, (name, dev)) in spec.devices.0.iter().enumerate() {
            let f = Fields::new(format!("devices.{name}"));
            if let Some(v) = &dev.i_dss {
                let read = |n: &str, p: &ValueSpec| f.positive(n, p, Kind::Current);
                if let Some(r) = f.range("i_dss", v, read)? {
                    let name = format!("devices.{name}.i_dss");
                    push(Param::DrainSaturationCurrent(d), name, r, "A");
                }
            }
            if let Some(v) = &dev.pinch_off_voltage {
                let read = |n: &str, p: &ValueSpec| f.value(n, p, Kind::Voltage);
                if let Some(r) = f.range("pinch_off_voltage", v, read)? {
                    let name = format!("devices.{name}.pinch_off_voltage");
                    push(Param::PinchOffVoltage(d), name, r, "V");
                }
            }
            if let Some(beta) = &dev.beta {
                if let Some(r) = f.range("beta", beta, |n, p| f.positive_number(n, p))? {
                    push(Param::Beta(d), format!("devices.{name}.beta"), r, "");
                }
            }
            // Device values read with a unit: where each goes, its key, its kind.
            let valued: [(Param, &str, &Option<ValueSpec>, Kind); 4] = [
                (
                    Param::SaturationCurrent(d),
                    "saturation_current",
                    &dev.saturation_current,
                    Kind::Current,
                ),
                (
                    Param::EarlyVoltage(d),
                    "early_voltage",
                    &dev.early_voltage,
                    Kind::Voltage,
                ),
                (
                    Param::TransitionFrequency(d),
                    "transition_frequency",
                    &dev.transition_frequency,
                    Kind::Frequency,
                ),
                (
                    Param::CollectorBaseCapacitance(d),
                    "c_bc",
                    &dev.c_bc,
                    Kind::Capacitance,
                ),
            ];
            for (param, key, v, kind) in valued {
                let Some(v) = v else { continue };
                let reader = |n: &str, p: &ValueSpec| f.value(n, p, kind);
                if let Some(r) = f.range(key, v, reader)? {
                    push(param, format!("devices.{name}.{key}"), r, unit(kind));
                }
            }
            if let Some(c) = &dev.beta_temperature_coefficient {
                beta_per_kelvin[d] = f.per_kelvin("beta_temperature_coefficient", c)?;
            }
        }

        let file_range = match &spec.temperature {
            Some(v) => top.range("temperature", v, |n, p| top.temperature(n, p))?,
            None => None,
        };
        let range = match temperature {
            Some((low, high)) => Some(ValueRange {
                min: low,
                // The file's temperature when the range holds it, else the middle.
                nominal: if (low..=high).contains(&t0) {
                    t0
                } else {
                    0.5 * (low + high)
                },
                max: high,
                distribution: None,
            }),
            None => file_range,
        };
        if let Some(r) = range {
            push(Param::Temperature, "temperature".into(), r, "K");
        }
        let model = SpreadModel {
            spreads,
            not_sampled,
            t0,
            beta_per_kelvin,
            nominal_beta: chain.devices.iter().map(|d| d.beta).collect(),
            nominal_i_s: chain.devices.iter().map(|d| d.i_s).collect(),
        };
        model.check_beta_stays_positive(chain)?;
        Ok(model)
    }

    /// Temperature limits (kelvin) the trials may reach.
    pub fn temperature_range(&self) -> (f64, f64) {
        self.spreads
            .iter()
            .find(|s| s.param == Param::Temperature)
            .map_or((self.t0, self.t0), |s| (s.min, s.max))
    }

    /// β(T) = β(T0)·(1 + c·(T − T0)) must stay above zero over the range.
    fn check_beta_stays_positive(&self, chain: &Chain) -> Result<(), ChainError> {
        let (t_lo, t_hi) = self.temperature_range();
        for (d, &c) in self.beta_per_kelvin.iter().enumerate() {
            for t in [t_lo, t_hi] {
                if beta_at(1.0, c, self.t0, t) <= 0.0 {
                    let f = Fields::new(format!("devices.{}", chain.devices[d].name));
                    return Err(f.invalid(
                        "beta_temperature_coefficient",
                        format!(
                            "{:+} %/K, which takes β to zero or below at {t:.1} K",
                            c * 100.0
                        ),
                        "a coefficient that keeps β above zero over the temperature range",
                    ));
                }
            }
        }
        Ok(())
    }

    /// Write one build into `chain`: `values[j]` for `spreads[j]`, then the
    /// temperature laws of every device. Parameters without a spread keep their
    /// nominal values, which nothing else writes.
    pub fn apply(&self, values: &[f64], chain: &mut Chain) {
        for (d, dev) in chain.devices.iter_mut().enumerate() {
            dev.beta = self.nominal_beta[d];
            dev.i_s = self.nominal_i_s[d];
        }
        let mut t = self.t0;
        for (s, &x) in self.spreads.iter().zip(values) {
            match s.param {
                Param::Supply => chain.set_supply(x),
                Param::SourceResistance => chain.source.r_s = x,
                Param::Load(k) => chain.loads[k].r_l = x,
                Param::Part { stage, part } => {
                    if let Some(v) = chain.stages[stage].kind.part_mut(part) {
                        *v = x;
                    }
                }
                Param::Beta(d) => chain.devices[d].beta = x,
                Param::SaturationCurrent(d) => chain.devices[d].i_s = x,
                Param::EarlyVoltage(d) => chain.devices[d].v_a = x,
                Param::Temperature => t = x,
                Param::Coupling(k) => chain.topology.set_coupling(k, x),
                Param::FeedbackResistance(k) => chain.topology.feedback[k].resistance = x,
                Param::FeedbackCapacitance(k) => chain.topology.feedback[k].capacitance = Some(x),
                Param::SourceCapacitance => chain.source.capacitance = x,
                Param::LoadCapacitance(k) => chain.loads[k].capacitance = x,
                Param::TransitionFrequency(d) => chain.devices[d].f_t = Some(x),
                Param::CollectorBaseCapacitance(d) => chain.devices[d].c_bc = x,
                Param::DrainSaturationCurrent(d) => {
                    if let Some(j) = chain.devices[d].jfet.as_mut() {
                        j.i_dss = x;
                    }
                }
                Param::PinchOffVoltage(d) => {
                    if let Some(j) = chain.devices[d].jfet.as_mut() {
                        j.v_p = x.abs();
                    }
                }
            }
        }
        chain.temperature = t;
        if t != self.t0 {
            for (d, dev) in chain.devices.iter_mut().enumerate() {
                dev.i_s = saturation_current_at(dev.i_s, self.t0, t);
                dev.beta = beta_at(dev.beta, self.beta_per_kelvin[d], self.t0, t);
            }
        }
    }

    /// The nominal value of every spread, in order.
    pub fn nominal_values(&self) -> Vec<f64> {
        self.spreads.iter().map(|s| s.nominal).collect()
    }
}
