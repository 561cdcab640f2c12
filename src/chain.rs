//! The validated chain: values in SI units, devices resolved, the graph checked.
//! Built once from a [`ChainSpec`]; evaluated many times (see [`crate::evaluate`]).
//! Circuit values are public so a caller can change them and re-evaluate without
//! re-parsing or re-validating the graph.

use crate::device::{Device, Polarity, ZERO_CELSIUS};
use crate::graph::{GraphError, Topology};
use crate::limits;
use crate::spec::{parse_chain_text, ChainSpec, Distribution, SpreadSpec, SyntaxError, ValueSpec};
use crate::stages::StageKind;
use crate::units::{parse_level, parse_value, Kind, Level};
use std::fmt;

/// Default power rating of resistors and transistors for dissipation warnings.
pub const DEFAULT_POWER_RATING: f64 = 0.25;
/// Default reverse current gain β_R for the Ebers–Moll model: small-signal silicon
/// NPN transistors show a reverse β of a few units, roughly 1 to 10 (from memory).
pub const DEFAULT_BETA_REVERSE: f64 = 3.0;
/// Default temperature: 25 °C.
pub const DEFAULT_TEMPERATURE: f64 = ZERO_CELSIUS + 25.0;

/// The Thevenin signal source at the chain's input.
#[derive(Debug, Clone, PartialEq)]
pub struct Source {
    pub r_s: f64,
    /// Planned EMF level (None when the file gives none).
    pub level: Option<Level>,
    /// Shunt capacitance at the source's output node, after R_S (0 = none).
    pub capacitance: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Stage {
    pub id: String,
    /// Index into [`Chain::devices`]; `None` for a kind without a device (passive).
    pub device: Option<usize>,
    pub kind: StageKind,
    /// The rails its top and bottom connections go to.
    pub rails: StageRails,
    /// An op-amp stage's `reference` (ground for every other kind).
    pub reference: Reference,
}

/// An op-amp stage's `reference` (docs/definitions.md "Op-amp wiring"): a rail by name
/// (its voltage follows the rail) or a fixed voltage.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Reference {
    Rail(RailRef),
    Volts(f64),
}

/// A named rail (docs/definitions.md "Rails"): `"supply"` of a v1 file, or one of `supplies`.
#[derive(Debug, Clone, PartialEq)]
pub struct Rail {
    pub name: String,
    pub v: f64,
}

/// Where a stage connection goes: ground or a rail (index into [`Chain::rails`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RailRef {
    Ground,
    Rail(usize),
}

/// A stage's top and bottom rails.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct StageRails {
    pub top: RailRef,
    pub bottom: RailRef,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Load {
    pub id: String,
    pub r_l: f64,
    /// Shunt capacitance across the load (0 = none).
    pub capacitance: f64,
}

/// A validated chain.
#[derive(Debug, Clone)]
pub struct Chain {
    pub title: Option<String>,
    /// The most positive rail against ground (a v1 file's `supply`; 0 when every
    /// rail is negative).
    pub v_cc: f64,
    /// Every rail by name, in file order (a v1 file: one, named "supply").
    pub rails: Vec<Rail>,
    /// Temperature in kelvin.
    pub temperature: f64,
    pub resistor_rating: f64,
    pub devices: Vec<Device>,
    pub source: Source,
    pub stages: Vec<Stage>,
    pub loads: Vec<Load>,
    pub topology: Topology,
    /// Resistors below 1 Ω written with `m` (JSON path, text): most often a megohm
    /// meant (`1M`); a failure of the chain names them ([`Chain::milliohm_hint`]).
    pub milliohms: Vec<(String, String)>,
}

/// Something wrong in a chain file; the message names the place.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ChainError {
    #[error("{0}")]
    Syntax(SyntaxError),
    #[error("{path}: found {found}, expected {expected}")]
    Value {
        path: String,
        found: String,
        expected: String,
    },
    #[error(transparent)]
    Graph(#[from] GraphError),
    #[error("stage {}: found no DC path to its + input (capacitor-coupled input and no r_bias); expected r_bias to the reference, or a direct link from its driver", crate::text::quote(stage))]
    OpampNoDcPath { stage: String },
}

/// Reads the values of one JSON object, naming `prefix.field` in errors (and the
/// stage's id after it, for a stage's values).
pub struct Fields {
    prefix: String,
    stage: Option<String>,
}

impl Fields {
    pub fn new(prefix: impl Into<String>) -> Self {
        Fields {
            prefix: prefix.into(),
            stage: None,
        }
    }

    /// The values of stage `id` at `prefix`: errors say `stages[0].r_collector (stage
    /// "gain")`, as the reader's shape errors do.
    pub fn of_stage(prefix: impl Into<String>, id: &str) -> Self {
        Fields {
            prefix: prefix.into(),
            stage: Some(id.to_string()),
        }
    }

    pub fn path(&self, name: &str) -> String {
        if self.prefix.is_empty() {
            name.to_string()
        } else {
            format!("{}.{name}", self.prefix)
        }
    }

    pub fn invalid(
        &self,
        name: &str,
        found: impl Into<String>,
        expected: impl Into<String>,
    ) -> ChainError {
        // `found` often quotes the file: nothing in it may steer the terminal.
        let path = self.path(name);
        ChainError::Value {
            path: match &self.stage {
                Some(id) => crate::text::in_stage(&path, id),
                None => path,
            },
            found: crate::text::visible(&found.into()),
            expected: expected.into(),
        }
    }

    /// Any finite value of the kind (the nominal value of a spread).
    pub fn value(&self, name: &str, v: &ValueSpec, kind: Kind) -> Result<f64, ChainError> {
        let x = match v {
            ValueSpec::Number(x) => *x,
            ValueSpec::Text(t) => {
                let x =
                    parse_value(t, kind).map_err(|e| self.invalid(name, e.found, e.expected))?;
                if kind == Kind::Resistance && x > 0.0 && x < 1.0 && written_milli(t) {
                    MILLI_OHMS.with(|m| m.borrow_mut().push((self.path(name), t.clone())));
                }
                x
            }
            ValueSpec::Spread(s) => {
                return Ok(self
                    .range_of(name, s, |n, p| self.value(n, p, kind))?
                    .nominal)
            }
        };
        if !x.is_finite() {
            return Err(self.invalid(name, v.to_string(), "a finite number"));
        }
        // Every resistor and capacitor, whatever its field, within physical sense.
        let range = match kind {
            Kind::Resistance => Some(&limits::RESISTANCE),
            Kind::Capacitance => Some(&limits::CAPACITANCE),
            _ => None,
        };
        match range {
            Some(range) if x > 0.0 => self.within(name, v, x, range),
            _ => Ok(x),
        }
    }

    /// `x` (read from `v`) within `range`, else an error naming the range and why.
    pub fn within(
        &self,
        name: &str,
        v: &ValueSpec,
        x: f64,
        range: &limits::Range,
    ) -> Result<f64, ChainError> {
        if range.contains(x) {
            Ok(x)
        } else {
            Err(self.invalid(name, v.to_string(), range.describe()))
        }
    }

    /// A name the file gives (an id, a device or rail name, the title): refused when
    /// empty (unless `allow_empty`) or holding control characters
    /// ([`crate::text::refuse_name`]).
    pub fn name(&self, field: &str, name: &str, allow_empty: bool) -> Result<(), ChainError> {
        match crate::text::refuse_name(name, allow_empty) {
            None => Ok(()),
            Some(found) if name.is_empty() => Err(self.invalid(
                field,
                found,
                "a name of at least one character, such as \"amp\"",
            )),
            Some(found) => Err(self.invalid(
                field,
                found,
                "a name of printable characters (no control characters such as newline, tab, ESC or NUL, no U+FFFE/U+FFFF, no bidirectional controls)",
            )),
        }
    }

    /// A value above zero (every end of a spread too).
    pub fn positive(&self, name: &str, v: &ValueSpec, kind: Kind) -> Result<f64, ChainError> {
        if let ValueSpec::Spread(s) = v {
            return Ok(self
                .range_of(name, s, |n, p| self.positive(n, p, kind))?
                .nominal);
        }
        let x = self.value(name, v, kind)?;
        if x <= 0.0 {
            return Err(self.invalid(
                name,
                v.to_string(),
                format!("{} above zero", kind.unit_name()),
            ));
        }
        Ok(x)
    }

    pub fn optional_positive(
        &self,
        name: &str,
        v: Option<&ValueSpec>,
        kind: Kind,
    ) -> Result<Option<f64>, ChainError> {
        v.map(|v| self.positive(name, v, kind)).transpose()
    }

    /// A bypassed resistor and its bypass capacitor, which come as a pair (the common
    /// emitter's `r_emitter_bypassed`, the common source's `r_source_bypassed`, each
    /// with `c_bypass`): both or neither. Returns the resistor (0 when absent) and the
    /// capacitor.
    pub fn bypass_pair(
        &self,
        r_name: &str,
        r: Option<&ValueSpec>,
        c: Option<&ValueSpec>,
    ) -> Result<(f64, Option<f64>), ChainError> {
        let r_bypassed = self.optional_positive(r_name, r, Kind::Resistance)?;
        let c_bypass = self.optional_positive("c_bypass", c, Kind::Capacitance)?;
        match (r_bypassed, c_bypass) {
            (Some(_), None) => Err(self.invalid(
                "c_bypass",
                "nothing",
                format!("a bypass capacitor, since {r_name} is set"),
            )),
            (None, Some(_)) => Err(self.invalid(
                r_name,
                "nothing",
                "the resistor that c_bypass bypasses (or drop c_bypass)",
            )),
            _ => Ok((r_bypassed.unwrap_or(0.0), c_bypass)),
        }
    }

    pub fn optional_non_negative(
        &self,
        name: &str,
        v: Option<&ValueSpec>,
        kind: Kind,
    ) -> Result<Option<f64>, ChainError> {
        v.map(|v| {
            if let ValueSpec::Spread(s) = v {
                let read = |n: &str, p: &ValueSpec| {
                    self.optional_non_negative(n, Some(p), kind)
                        .map(|x| x.unwrap_or(0.0))
                };
                return Ok(self.range_of(name, s, read)?.nominal);
            }
            let x = self.value(name, v, kind)?;
            if x < 0.0 {
                return Err(self.invalid(
                    name,
                    v.to_string(),
                    format!("{} of zero or more", kind.unit_name()),
                ));
            }
            Ok(x)
        })
        .transpose()
    }

    /// A dimensionless number above zero (β).
    pub fn positive_number(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
        match v {
            ValueSpec::Spread(s) => Ok(self
                .range_of(name, s, |n, p| self.positive_number(n, p))?
                .nominal),
            ValueSpec::Number(x) if x.is_finite() && *x > 0.0 => Ok(*x),
            ValueSpec::Text(t) => match t.trim().parse::<f64>() {
                Ok(x) if x.is_finite() && x > 0.0 => Ok(x),
                _ => Err(self.invalid(name, v.to_string(), "a plain number above zero")),
            },
            _ => Err(self.invalid(name, v.to_string(), "a plain number above zero")),
        }
    }

    /// A plain number from 0 to 1 (a potentiometer's `position`).
    pub fn fraction(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
        let x = match v {
            ValueSpec::Number(x) => Some(*x),
            ValueSpec::Text(t) => t.trim().parse::<f64>().ok(),
            ValueSpec::Spread(_) => None,
        };
        match x {
            Some(x) if (0.0..=1.0).contains(&x) => Ok(x),
            _ => Err(self.invalid(
                name,
                v.to_string(),
                "a plain number from 0 (wiper at ground) to 1 (wiper at the input)",
            )),
        }
    }

    /// A temperature: strings carry their unit; a plain number is kelvin (SI).
    pub fn temperature(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
        if let ValueSpec::Spread(s) = v {
            if s.tolerance.is_some() {
                return Err(self.invalid(
                    name,
                    v.to_string(),
                    "a temperature range {\"min\": \"0 C\", \"typical\": \"25 C\", \"max\": \"50 C\"}, not a tolerance",
                ));
            }
            return Ok(self
                .range_of(name, s, |n, p| self.temperature(n, p))?
                .nominal);
        }
        let t = self.value(name, v, Kind::Temperature)?;
        if let ValueSpec::Number(x) = v {
            if *x < 100.0 {
                return Err(self.invalid(
                    name,
                    format!("{x} (plain numbers are kelvin)"),
                    "a temperature with its unit, such as \"25 C\", or kelvin above 100",
                ));
            }
        }
        if t <= 0.0 {
            return Err(self.invalid(name, v.to_string(), "a temperature above absolute zero"));
        }
        self.within(name, v, t, &limits::TEMPERATURE)
    }
}

thread_local! {
    /// Resistors below 1 Ω written with the prefix `m`, gathered while
    /// [`Chain::from_spec`] reads a file (into [`Chain::milliohms`]).
    static MILLI_OHMS: std::cell::RefCell<Vec<(String, String)>> =
        const { std::cell::RefCell::new(Vec::new()) };
}

/// True when a resistance is written with the milli prefix (`1m`, `4m7`, `100 mΩ`),
/// not counting the `m` of "ohm".
fn written_milli(text: &str) -> bool {
    text.replace("ohm", "").replace("Ohm", "").contains('m')
}

/// The spread written on a value: its limits, its nominal value and, when the file
/// names one, its own distribution.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ValueRange {
    pub min: f64,
    pub nominal: f64,
    pub max: f64,
    pub distribution: Option<Distribution>,
}

impl ValueRange {
    /// nominal·(1 ± tolerance).
    pub fn from_tolerance(nominal: f64, tolerance: f64) -> ValueRange {
        ValueRange {
            min: nominal * (1.0 - tolerance),
            nominal,
            max: nominal * (1.0 + tolerance),
            distribution: None,
        }
    }
}

impl Fields {
    /// A tolerance such as `"5%"` or `"0.5 %"`, as a fraction from 0 up to (not
    /// including) 1.
    pub fn tolerance(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
        let expected = "a tolerance from \"0%\" to below \"100%\", such as \"5%\"";
        let t = match v {
            ValueSpec::Text(t) => t
                .trim()
                .strip_suffix('%')
                .and_then(|n| n.trim().parse::<f64>().ok())
                .map(|p| p / 100.0),
            _ => None,
        };
        match t {
            Some(t) if (0.0..1.0).contains(&t) => Ok(t),
            _ => Err(self.invalid(name, v.to_string(), expected)),
        }
    }

    /// The spread on `v`, each number read with `read`; `None` for a plain value.
    pub fn range(
        &self,
        name: &str,
        v: &ValueSpec,
        read: impl Fn(&str, &ValueSpec) -> Result<f64, ChainError>,
    ) -> Result<Option<ValueRange>, ChainError> {
        match v {
            ValueSpec::Spread(s) => self.range_of(name, s, read).map(Some),
            _ => Ok(None),
        }
    }

    fn range_of(
        &self,
        name: &str,
        s: &SpreadSpec,
        read: impl Fn(&str, &ValueSpec) -> Result<f64, ChainError>,
    ) -> Result<ValueRange, ChainError> {
        let nominal = read(name, &s.nominal)?;
        let mut range = match (&s.tolerance, &s.min, &s.max) {
            (Some(t), _, _) => {
                let t = self.tolerance(&format!("{name}.tolerance"), t)?;
                ValueRange::from_tolerance(nominal, t)
            }
            (None, Some(lo), Some(hi)) => ValueRange {
                min: read(&format!("{name}.min"), lo)?,
                nominal,
                max: read(&format!("{name}.max"), hi)?,
                distribution: None,
            },
            _ => {
                return Err(self.invalid(
                    name,
                    "a spread without tolerance or limits",
                    "a \"tolerance\", or \"min\" and \"max\"",
                ))
            }
        };
        if !(range.min <= range.nominal && range.nominal <= range.max) {
            // Out of order only with limits (a tolerance never is): echo them as written.
            let written =
                |v: &Option<ValueSpec>| v.as_ref().map_or(String::new(), |v| v.to_string());
            return Err(self.invalid(
                name,
                format!(
                    "min {}, typical {}, max {}",
                    written(&s.min),
                    s.nominal,
                    written(&s.max)
                ),
                "min ≤ typical ≤ max",
            ));
        }
        range.distribution = s.distribution;
        Ok(range)
    }

    /// A relative change per kelvin: `"0.5 %/K"` (also `%/C`, `%/°C`), or a plain
    /// number as a fraction per kelvin (0.005).
    pub fn per_kelvin(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
        let c = match v {
            ValueSpec::Number(x) => Some(*x),
            ValueSpec::Text(t) => ["%/K", "%/°C", "%/C"]
                .iter()
                .find_map(|u| t.trim().strip_suffix(u))
                .and_then(|n| n.trim().parse::<f64>().ok())
                .map(|p| p / 100.0),
            ValueSpec::Spread(_) => None,
        };
        match c {
            Some(c) if c.is_finite() => Ok(c),
            _ => Err(self.invalid(
                name,
                v.to_string(),
                "a relative change per kelvin such as \"0.5 %/K\"",
            )),
        }
    }

    /// Refuse a spread on a field that takes a single value.
    pub fn single(&self, name: &str, v: Option<&ValueSpec>) -> Result<(), ChainError> {
        match v {
            Some(v @ ValueSpec::Spread(_)) => Err(self.invalid(
                name,
                v.to_string(),
                format!("a single value: {name} takes no tolerance or range"),
            )),
            _ => Ok(()),
        }
    }
}

/// Parse a signal level given in the file or on the command line.
pub fn level_from_spec(v: &ValueSpec, fields: &Fields, name: &str) -> Result<Level, ChainError> {
    match v {
        ValueSpec::Spread(_) => Err(fields.invalid(
            name,
            v.to_string(),
            format!("a single level: {name} takes no tolerance or range"),
        )),
        ValueSpec::Number(x) if x.is_finite() && *x >= 0.0 => Ok(Level::from_vrms(*x)),
        ValueSpec::Number(x) => {
            Err(fields.invalid(name, x.to_string(), "a level of zero or more volts rms"))
        }
        ValueSpec::Text(t) => parse_level(t).map_err(|e| fields.invalid(name, e.found, e.expected)),
    }
    .and_then(|level| {
        if level.vrms == 0.0 {
            // A planned level of zero leaves nothing to plan: no output level, no
            // headroom, no source loading in dB.
            return Err(fields.invalid(
                name,
                v.to_string(),
                "a level above zero (at zero there is no signal: no output level, no headroom)",
            ));
        }
        fields.within(name, v, level.vrms, &limits::LEVEL)?;
        Ok(level)
    })
}

impl Chain {
    /// Parse and validate chain-file text.
    pub fn from_json_str(text: &str) -> Result<Chain, ChainError> {
        let spec = parse_chain_text(text).map_err(ChainError::Syntax)?;
        Chain::from_spec(&spec)
    }

    /// Validate a parsed chain file, feedback links included.
    pub fn from_spec(spec: &ChainSpec) -> Result<Chain, ChainError> {
        MILLI_OHMS.with(|m| m.borrow_mut().clear());
        let top = Fields::new("");
        for (name, count, max) in [
            ("devices", spec.devices.0.len(), limits::MAX_DEVICES),
            ("stages", spec.stages.len(), limits::MAX_STAGES),
            ("loads", spec.loads.len(), limits::MAX_LOADS),
            // Each stage and load has exactly one link into it.
            (
                "links",
                spec.links.len(),
                limits::MAX_STAGES + limits::MAX_LOADS,
            ),
        ] {
            if count > max {
                return Err(top.invalid(
                    name,
                    format!("{count} entries"),
                    format!("at most {max} (the limit of a chain file; see docs/errors.md)"),
                ));
            }
        }
        check_version(&top, spec.version.as_ref())?;
        if let Some(title) = &spec.title {
            top.name("title", title, true)?;
        }
        let rails = read_rails(&top, spec)?;
        let v_cc = rails.iter().map(|r| r.v).fold(0.0, f64::max);
        let temperature = match &spec.temperature {
            Some(t) => top.temperature("temperature", t)?,
            None => DEFAULT_TEMPERATURE,
        };
        top.single("resistor_rating", spec.resistor_rating.as_ref())?;
        if let Some(t) = &spec.tolerance {
            let f = Fields::new("tolerance");
            for (name, v) in [("resistors", &t.resistors), ("capacitors", &t.capacitors)] {
                if let Some(v) = v {
                    f.tolerance(name, v)?;
                }
            }
        }
        let resistor_rating = top
            .optional_positive(
                "resistor_rating",
                spec.resistor_rating.as_ref(),
                Kind::Power,
            )?
            .unwrap_or(DEFAULT_POWER_RATING);
        if let Some(v) = &spec.resistor_rating {
            top.within("resistor_rating", v, resistor_rating, &limits::POWER)?;
        }

        let mut devices = Vec::with_capacity(spec.devices.0.len());
        for (name, d) in &spec.devices.0 {
            top.name("devices", name, false)?;
            let f = Fields::new(format!("devices.{name}"));
            f.single("beta_reverse", d.beta_reverse.as_ref())?;
            f.single("vce_sat", d.vce_sat.as_ref())?;
            f.single("max_dissipation", d.max_dissipation.as_ref())?;
            if let Some(c) = &d.beta_temperature_coefficient {
                f.per_kelvin("beta_temperature_coefficient", c)?;
            }
            // Each value within physical sense (limits.rs).
            let checked = |name: &str, v: Option<&ValueSpec>, x: f64, range| match v {
                Some(v) => f.within(name, v, x, range),
                None => Ok(x),
            };
            let polarity = match d.polarity.as_str() {
                "npn" => Polarity::Npn,
                "pnp" => Polarity::Pnp,
                "n_jfet" | "p_jfet" => {
                    refuse_keys(&f, d, &opamp_keys(d), "an op-amp")?;
                    devices.push(jfet_device(name, d, &f)?);
                    continue;
                }
                "opamp" => {
                    devices.push(opamp_device(name, d, &f)?);
                    continue;
                }
                other => {
                    return Err(f.invalid(
                        "polarity",
                        format!("\"{other}\""),
                        "\"npn\", \"pnp\", \"n_jfet\", \"p_jfet\" or \"opamp\"",
                    ))
                }
            };
            refuse_keys(&f, d, &opamp_keys(d), "an op-amp")?;
            refuse_keys(&f, d, &jfet_keys(d), "a JFET")?;
            let Some(beta_spec) = &d.beta else {
                return Err(f.invalid(
                    "beta",
                    "nothing",
                    "a current gain beta for a bipolar device",
                ));
            };
            let device = Device {
                name: name.clone(),
                polarity,
                base_resistance: f
                    .optional_non_negative(
                        "base_resistance",
                        d.base_resistance.as_ref(),
                        Kind::Resistance,
                    )?
                    .unwrap_or(0.0),
                collector_resistance: f
                    .optional_non_negative(
                        "collector_resistance",
                        d.collector_resistance.as_ref(),
                        Kind::Resistance,
                    )?
                    .unwrap_or(0.0),
                flicker_corner: f
                    .optional_non_negative(
                        "flicker_corner",
                        d.flicker_corner.as_ref(),
                        Kind::Frequency,
                    )?
                    .unwrap_or(0.0),
                beta: f.positive_number("beta", beta_spec)?,
                beta_reverse: match &d.beta_reverse {
                    Some(v) => f.positive_number("beta_reverse", v)?,
                    None => DEFAULT_BETA_REVERSE,
                },
                i_s: f
                    .optional_positive(
                        "saturation_current",
                        d.saturation_current.as_ref(),
                        Kind::Current,
                    )?
                    .unwrap_or(1e-14),
                v_a: f
                    .optional_positive("early_voltage", d.early_voltage.as_ref(), Kind::Voltage)?
                    .unwrap_or(f64::INFINITY),
                vce_sat: f
                    .optional_non_negative("vce_sat", d.vce_sat.as_ref(), Kind::Voltage)?
                    .unwrap_or(0.2),
                max_dissipation: f
                    .optional_positive("max_dissipation", d.max_dissipation.as_ref(), Kind::Power)?
                    .unwrap_or(DEFAULT_POWER_RATING),
                f_t: f.optional_positive(
                    "transition_frequency",
                    d.transition_frequency.as_ref(),
                    Kind::Frequency,
                )?,
                c_bc: f
                    .optional_non_negative("c_bc", d.c_bc.as_ref(), Kind::Capacitance)?
                    .unwrap_or(0.0),
                jfet: None,
                opamp: None,
            };
            checked("beta", Some(beta_spec), device.beta, &limits::BETA)?;
            checked(
                "beta_reverse",
                d.beta_reverse.as_ref(),
                device.beta_reverse,
                &limits::BETA_REVERSE,
            )?;
            checked(
                "saturation_current",
                d.saturation_current.as_ref(),
                device.i_s,
                &limits::SATURATION_CURRENT,
            )?;
            checked(
                "early_voltage",
                d.early_voltage.as_ref(),
                device.v_a,
                &limits::EARLY_VOLTAGE,
            )?;
            checked(
                "vce_sat",
                d.vce_sat.as_ref(),
                device.vce_sat,
                &limits::VCE_SAT,
            )?;
            checked(
                "max_dissipation",
                d.max_dissipation.as_ref(),
                device.max_dissipation,
                &limits::POWER,
            )?;
            checked(
                "flicker_corner",
                d.flicker_corner.as_ref(),
                device.flicker_corner,
                &limits::FLICKER_CORNER,
            )?;
            if let Some(f_t) = device.f_t {
                checked(
                    "transition_frequency",
                    d.transition_frequency.as_ref(),
                    f_t,
                    &limits::TRANSITION_FREQUENCY,
                )?;
            }
            devices.push(device);
        }

        let fs = Fields::new("source");
        let source = Source {
            r_s: fs
                .optional_non_negative(
                    "resistance",
                    Some(&spec.source.resistance),
                    Kind::Resistance,
                )?
                .unwrap_or(0.0),
            level: spec
                .source
                .level
                .as_ref()
                .map(|l| level_from_spec(l, &fs, "level"))
                .transpose()?,
            capacitance: fs
                .optional_non_negative(
                    "capacitance",
                    spec.source.capacitance.as_ref(),
                    Kind::Capacitance,
                )?
                .unwrap_or(0.0),
        };

        let mut stages = Vec::with_capacity(spec.stages.len());
        for (i, s) in spec.stages.iter().enumerate() {
            Fields::new(format!("stages[{i}]")).name("id", s.id(), false)?;
            let f = Fields::of_stage(format!("stages[{i}]"), s.id());
            let device = match s.device() {
                None => None,
                Some(name) => {
                    Some(devices.iter().position(|d| d.name == name).ok_or_else(|| {
                        f.invalid(
                            "device",
                            crate::text::quote(name),
                            format!(
                                "one of the names under \"devices\": {}{}",
                                name_list(devices.iter().map(|d| d.name.as_str())),
                                crate::text::lookalike(
                                    name,
                                    devices.iter().map(|d| d.name.as_str())
                                )
                            ),
                        )
                    })?)
                }
            };
            let rails_list = &rails;
            let rails = stage_rails(&f, s, rails_list)?;
            let kind = s.build(&f)?;
            if let Some(d) = device.map(|k| &devices[k]) {
                let model = kind.model();
                if d.jfet.is_some() != model.takes_jfet()
                    || d.opamp.is_some() != model.takes_opamp()
                {
                    return Err(f.invalid(
                        "device",
                        format!(
                            "{}, of polarity {}",
                            crate::text::quote(&d.name),
                            spec.devices
                                .0
                                .iter()
                                .find(|(n, _)| *n == d.name)
                                .map_or("", |(_, x)| x.polarity.as_str())
                        ),
                        if model.takes_jfet() {
                            format!(
                                "an n_jfet or p_jfet device for a stage of type {}",
                                model.type_name()
                            )
                        } else if model.takes_opamp() {
                            format!("an opamp device for a stage of type {}", model.type_name())
                        } else {
                            format!(
                                "an npn or pnp device for a stage of type {}",
                                model.type_name()
                            )
                        },
                    ));
                }
            }
            let reference = stage_reference(&f, s, rails_list)?;
            if let Some(amp) = device.and_then(|k| devices[k].opamp) {
                check_reference_reachable(&f, rails_list, rails, reference, &amp)?;
            }
            stages.push(Stage {
                id: s.id().to_string(),
                device,
                kind,
                rails,
                reference,
            });
        }

        let mut loads = Vec::with_capacity(spec.loads.len());
        for (i, l) in spec.loads.iter().enumerate() {
            let f = Fields::new(format!("loads[{i}]"));
            f.name("id", &l.id, false)?;
            loads.push(Load {
                id: l.id.clone(),
                r_l: f.positive("resistance", &l.resistance, Kind::Resistance)?,
                capacitance: f
                    .optional_non_negative(
                        "capacitance",
                        l.capacitance.as_ref(),
                        Kind::Capacitance,
                    )?
                    .unwrap_or(0.0),
            });
        }

        let topology = Topology::build(spec, &stages, &loads)?;
        let chain = Chain {
            title: spec.title.clone(),
            v_cc,
            rails,
            temperature,
            resistor_rating,
            devices,
            source,
            stages,
            loads,
            topology,
            milliohms: MILLI_OHMS.with(|m| std::mem::take(&mut *m.borrow_mut())),
        };
        check_opamp_stages(&chain)?;
        Ok(chain)
    }

    /// The voltage of a rail reference.
    pub fn rail_voltage(&self, r: RailRef) -> f64 {
        match r {
            RailRef::Ground => 0.0,
            RailRef::Rail(i) => self.rails[i].v,
        }
    }

    /// The DC voltage of stage `i`'s `reference` (an op-amp stage's; 0 V otherwise).
    pub fn reference_voltage(&self, i: usize) -> f64 {
        match self.stages[i].reference {
            Reference::Rail(r) => self.rail_voltage(r),
            Reference::Volts(v) => v,
        }
    }

    /// The DC voltages of stage `i`'s top and bottom rails.
    pub fn stage_rails(&self, i: usize) -> crate::circuit::dc::Rails {
        let r = self.stages[i].rails;
        crate::circuit::dc::Rails {
            top: self.rail_voltage(r.top),
            bottom: self.rail_voltage(r.bottom),
        }
    }

    /// The largest voltage between any two rails or ground: the scale of the chain's
    /// DC voltages (tolerances) and what the hazard warning judges.
    pub fn span(&self) -> f64 {
        let hi = self.rails.iter().map(|r| r.v).fold(0.0, f64::max);
        let lo = self.rails.iter().map(|r| r.v).fold(0.0, f64::min);
        hi - lo
    }

    /// Set the supply of a v1 file (one rail): `spread` draws it.
    pub fn set_supply(&mut self, v: f64) {
        self.v_cc = v;
        if let Some(r) = self.rails.first_mut() {
            r.v = v;
        }
    }

    /// The stage's device; [`crate::device::NO_DEVICE`] for a kind without one, which
    /// its description never places.
    pub fn device_of(&self, stage: usize) -> &Device {
        self.stages[stage]
            .device
            .map_or(&crate::device::NO_DEVICE, |d| &self.devices[d])
    }

    /// For a message about a chain that fails (no operating point): the resistors
    /// below 1 Ω written with `m`, as " (note: stages[0].r_top is \"1m\", which is 1
    /// milliohm; for 1 megohm write \"1M\")"; empty when there are none.
    pub fn milliohm_hint(&self) -> String {
        if self.milliohms.is_empty() {
            return String::new();
        }
        let each: Vec<String> = self
            .milliohms
            .iter()
            .map(|(path, text)| {
                let value = crate::units::parse_value(text, Kind::Resistance).unwrap_or(0.0);
                // The number before the prefix, to six digits: 4m7 → 4.7.
                let n = (value * 1e9).round() / 1e6;
                let (one, many) = if n == 1.0 { ("", "") } else { ("s", "s") };
                let meant = text.trim().replacen('m', "M", 1);
                format!(
                    "{path} is \"{text}\", which is {n} milliohm{one}; for {n} megohm{many} write \"{meant}\""
                )
            })
            .collect();
        format!(" (note: {})", each.join("; "))
    }

    /// Stage index by id.
    pub fn stage_index(&self, id: &str) -> Option<usize> {
        self.stages.iter().position(|s| s.id == id)
    }
}

/// `"version"`: optional; 1 or 2 are understood, anything else is refused by name.
/// A JFET device entry (docs/definitions.md "JFET"): `i_dss` above zero, `pinch_off_voltage`
/// negative for `n_jfet` and positive for `p_jfet` (kept as its magnitude),
/// `early_voltage`, `c_gs`, `c_gd` optional; bipolar-only keys are refused. Its values
/// take no spread (`spread` varies bipolar devices only).
fn jfet_device(name: &str, d: &crate::spec::DeviceSpec, f: &Fields) -> Result<Device, ChainError> {
    let n_channel = d.polarity == "n_jfet";
    refuse_keys(f, d, &bipolar_keys(d), "a bipolar")?;
    // I_DSS, V_P and V_A may be ranges (`spread`); the capacitances take one value.
    for (key, v) in [("c_gs", d.c_gs.as_ref()), ("c_gd", d.c_gd.as_ref())] {
        f.single(key, v)?;
    }
    let Some(i_dss_spec) = &d.i_dss else {
        return Err(f.invalid(
            "i_dss",
            "nothing",
            "the drain current at V_GS = 0, such as \"6 mA\"",
        ));
    };
    let i_dss = f.positive("i_dss", i_dss_spec, Kind::Current)?;
    f.within("i_dss", i_dss_spec, i_dss, &limits::I_DSS)?;
    f.range("i_dss", i_dss_spec, |n, p| {
        let x = f.positive(n, p, Kind::Current)?;
        f.within(n, p, x, &limits::I_DSS)
    })?;
    let Some(v_p_spec) = &d.pinch_off_voltage else {
        return Err(f.invalid(
            "pinch_off_voltage",
            "nothing",
            if n_channel {
                "the pinch-off voltage, negative for an n_jfet, such as \"-2 V\""
            } else {
                "the pinch-off voltage, positive for a p_jfet, such as \"2 V\""
            },
        ));
    };
    // V_P (each end of a range too): the sign of the polarity, |V_P| within range.
    let read_v_p = |name: &str, spec: &ValueSpec| -> Result<f64, ChainError> {
        let v_p = f.value(name, spec, Kind::Voltage)?;
        if (n_channel && v_p >= 0.0) || (!n_channel && v_p <= 0.0) {
            return Err(f.invalid(
                name,
                spec.to_string(),
                if n_channel {
                    "a negative voltage for an n_jfet (its channel pinches off with the gate below the source)"
                } else {
                    "a positive voltage for a p_jfet (its channel pinches off with the gate above the source)"
                },
            ));
        }
        f.within(name, spec, v_p.abs(), &limits::PINCH_OFF_VOLTAGE)?;
        Ok(v_p)
    };
    let v_p = match f.range("pinch_off_voltage", v_p_spec, read_v_p)? {
        Some(r) => r.nominal,
        None => read_v_p("pinch_off_voltage", v_p_spec)?,
    };
    let v_a = f
        .optional_positive("early_voltage", d.early_voltage.as_ref(), Kind::Voltage)?
        .unwrap_or(f64::INFINITY);
    if let Some(v) = &d.early_voltage {
        f.within("early_voltage", v, v_a, &limits::EARLY_VOLTAGE)?;
    }
    let capacitance = |key: &str, v: Option<&ValueSpec>| {
        f.optional_non_negative(key, v, Kind::Capacitance)
            .map(|c| c.unwrap_or(0.0))
    };
    let polarity = if n_channel {
        Polarity::Npn
    } else {
        Polarity::Pnp
    };
    let max_dissipation = f
        .optional_positive("max_dissipation", d.max_dissipation.as_ref(), Kind::Power)?
        .unwrap_or(DEFAULT_POWER_RATING);
    if let Some(v) = &d.max_dissipation {
        f.within("max_dissipation", v, max_dissipation, &limits::POWER)?;
    }
    Ok(Device {
        name: name.to_string(),
        polarity,
        v_a,
        max_dissipation,
        vce_sat: 0.0,
        jfet: Some(crate::device::jfet::Jfet {
            i_dss,
            v_p: v_p.abs(),
            v_a,
            c_gs: capacitance("c_gs", d.c_gs.as_ref())?,
            c_gd: capacitance("c_gd", d.c_gd.as_ref())?,
            sign: if n_channel { 1.0 } else { -1.0 },
        }),
        ..Device::default()
    })
}

/// Refuse every key of `keys` the entry gives: it belongs to `family`, not to this
/// device (`key-of-other-device-kind`).
fn refuse_keys(
    f: &Fields,
    d: &crate::spec::DeviceSpec,
    keys: &[(&str, &Option<ValueSpec>)],
    family: &str,
) -> Result<(), ChainError> {
    for (key, v) in keys {
        if let Some(v) = v {
            return Err(f.invalid(
                key,
                v.to_string(),
                format!(
                    "no {key}: it is {family} value and this device is {}",
                    d.polarity
                ),
            ));
        }
    }
    Ok(())
}

/// The bipolar transistor's own keys of a device entry.
fn bipolar_keys(d: &crate::spec::DeviceSpec) -> [(&'static str, &Option<ValueSpec>); 10] {
    [
        ("beta", &d.beta),
        ("beta_reverse", &d.beta_reverse),
        ("saturation_current", &d.saturation_current),
        ("vce_sat", &d.vce_sat),
        ("transition_frequency", &d.transition_frequency),
        ("c_bc", &d.c_bc),
        ("base_resistance", &d.base_resistance),
        ("collector_resistance", &d.collector_resistance),
        ("flicker_corner", &d.flicker_corner),
        (
            "beta_temperature_coefficient",
            &d.beta_temperature_coefficient,
        ),
    ]
}

/// The JFET's own keys of a device entry.
fn jfet_keys(d: &crate::spec::DeviceSpec) -> [(&'static str, &Option<ValueSpec>); 4] {
    [
        ("i_dss", &d.i_dss),
        ("pinch_off_voltage", &d.pinch_off_voltage),
        ("c_gs", &d.c_gs),
        ("c_gd", &d.c_gd),
    ]
}

/// The op-amp's own keys of a device entry.
fn opamp_keys(d: &crate::spec::DeviceSpec) -> [(&'static str, &Option<ValueSpec>); 9] {
    [
        ("open_loop_gain", &d.open_loop_gain),
        ("gain_bandwidth", &d.gain_bandwidth),
        ("input_resistance", &d.input_resistance),
        ("output_resistance", &d.output_resistance),
        ("swing_margin", &d.swing_margin),
        ("output_current_limit", &d.output_current_limit),
        ("slew_rate", &d.slew_rate),
        ("voltage_noise", &d.voltage_noise),
        ("current_noise", &d.current_noise),
    ]
}

/// An op-amp device entry (docs/definitions.md "Op-amp"): `open_loop_gain` (V/V or
/// dB) and `gain_bandwidth` above zero and required; `input_resistance` (default ∞),
/// `output_resistance` (default 0, exactly: an ideal voltage source),
/// `swing_margin` (default 1 V), `output_current_limit` (default ∞), `slew_rate`,
/// `voltage_noise`, `current_noise` optional. Transistor keys are refused; every
/// value takes one number (no spread yet).
fn opamp_device(name: &str, d: &crate::spec::DeviceSpec, f: &Fields) -> Result<Device, ChainError> {
    refuse_keys(f, d, &bipolar_keys(d), "a transistor")?;
    refuse_keys(
        f,
        d,
        &[
            ("early_voltage", &d.early_voltage),
            ("max_dissipation", &d.max_dissipation),
        ],
        "a transistor",
    )?;
    refuse_keys(f, d, &jfet_keys(d), "a JFET")?;
    for (key, v) in opamp_keys(d) {
        f.single(key, v.as_ref())?;
    }
    let Some(a_spec) = &d.open_loop_gain else {
        return Err(f.invalid(
            "open_loop_gain",
            "nothing",
            "the open-loop gain A_0 of an op-amp, such as 200000 or \"106 dB\"",
        ));
    };
    let a_0 = match a_spec {
        ValueSpec::Text(t) => crate::units::parse_gain(t)
            .map_err(|e| f.invalid("open_loop_gain", e.found, e.expected))?,
        // A spread was refused by `Fields::single` above.
        ValueSpec::Number(x) => *x,
        ValueSpec::Spread(_) => 0.0,
    };
    if a_0 <= 0.0 {
        return Err(f.invalid(
            "open_loop_gain",
            a_spec.to_string(),
            "an open-loop gain above zero (a ratio, or decibels such as \"106 dB\")",
        ));
    }
    f.within("open_loop_gain", a_spec, a_0, &limits::OPEN_LOOP_GAIN)?;
    let Some(gbw_spec) = &d.gain_bandwidth else {
        return Err(f.invalid(
            "gain_bandwidth",
            "nothing",
            "the gain-bandwidth product of an op-amp, such as \"1 MHz\"",
        ));
    };
    let gain_bandwidth = f.positive("gain_bandwidth", gbw_spec, Kind::Frequency)?;
    f.within(
        "gain_bandwidth",
        gbw_spec,
        gain_bandwidth,
        &limits::GAIN_BANDWIDTH,
    )?;
    let swing_margin = f
        .optional_non_negative("swing_margin", d.swing_margin.as_ref(), Kind::Voltage)?
        .unwrap_or(1.0);
    let density = |key: &str, v: Option<&ValueSpec>, kind| {
        f.optional_non_negative(key, v, kind)
            .map(|x| x.unwrap_or(0.0))
    };
    let opamp = crate::device::opamp::OpAmp {
        a_0,
        gain_bandwidth,
        r_in: f
            .optional_positive(
                "input_resistance",
                d.input_resistance.as_ref(),
                Kind::Resistance,
            )?
            .unwrap_or(f64::INFINITY),
        r_out: f
            .optional_non_negative(
                "output_resistance",
                d.output_resistance.as_ref(),
                Kind::Resistance,
            )?
            .unwrap_or(0.0),
        swing_margin,
        i_limit: f
            .optional_positive(
                "output_current_limit",
                d.output_current_limit.as_ref(),
                Kind::Current,
            )?
            .unwrap_or(f64::INFINITY),
        slew_rate: f.optional_positive("slew_rate", d.slew_rate.as_ref(), Kind::SlewRate)?,
        voltage_noise: density(
            "voltage_noise",
            d.voltage_noise.as_ref(),
            Kind::VoltageDensity,
        )?,
        current_noise: density(
            "current_noise",
            d.current_noise.as_ref(),
            Kind::CurrentDensity,
        )?,
    };
    if let Some(v) = &d.swing_margin {
        f.within("swing_margin", v, swing_margin, &limits::SWING_MARGIN)?;
    }
    Ok(Device {
        name: name.to_string(),
        opamp: Some(opamp),
        ..Device::default()
    })
}

fn check_version(top: &Fields, v: Option<&serde_json::Value>) -> Result<(), ChainError> {
    match v {
        None => Ok(()),
        Some(serde_json::Value::Number(n))
            if n.as_f64() == Some(1.0) || n.as_f64() == Some(2.0) =>
        {
            Ok(())
        }
        Some(other) => Err(top.invalid(
            "version",
            other.to_string(),
            "1 or 2 (the chain-file versions this program knows), or no version key",
        )),
    }
}

/// The rails of the file: `supply` (one positive rail, named "supply") or `supplies`
/// (named rails of any sign); exactly one of the two.
fn read_rails(top: &Fields, spec: &ChainSpec) -> Result<Vec<Rail>, ChainError> {
    match (&spec.supply, &spec.supplies) {
        (Some(v), None) => {
            let x = top.positive("supply", v, Kind::Voltage)?;
            let x = top.within("supply", v, x, &limits::SUPPLY)?;
            Ok(vec![Rail {
                name: "supply".into(),
                v: x,
            }])
        }
        (None, Some(map)) => {
            if map.0.is_empty() {
                return Err(top.invalid(
                    "supplies",
                    "an empty object",
                    "at least one named rail, e.g. {\"vcc\": \"15 V\"}",
                ));
            }
            let f = Fields::new("supplies");
            let mut rails = Vec::with_capacity(map.0.len());
            for (name, v) in &map.0 {
                top.name("supplies", name, false)?;
                if name == "ground" {
                    return Err(f.invalid(
                        name,
                        "a rail named \"ground\"",
                        "another name (\"ground\" is 0 V and always there)",
                    ));
                }
                let x = f.value(name, v, Kind::Voltage)?;
                if x == 0.0 || !limits::SUPPLY.contains(x.abs()) {
                    return Err(f.invalid(
                        name,
                        v.to_string(),
                        format!("a rail voltage whose size is {}", limits::SUPPLY.describe()),
                    ));
                }
                rails.push(Rail {
                    name: name.clone(),
                    v: x,
                });
            }
            Ok(rails)
        }
        (Some(_), Some(_)) => Err(top.invalid(
            "supplies",
            "both \"supply\" and \"supplies\"",
            "one of them: \"supply\" for one positive rail, \"supplies\" for named rails",
        )),
        (None, None) => Err(top.invalid(
            "supply",
            "nothing",
            "\"supply\" (one positive rail, e.g. \"12 V\") or \"supplies\" (named rails)",
        )),
    }
}

/// A stage's `rails`: names of the file's rails or "ground"; by default the top is
/// the most positive rail and the bottom is ground. The top must lie above the bottom.
/// An op-amp stage's + input needs a DC level (docs/definitions.md "Op-amp"): a
/// capacitor-coupled non-inverting stage is biased by `r_bias` (`opamp-no-dc-path`).
fn check_opamp_stages(chain: &Chain) -> Result<(), ChainError> {
    let topo = &chain.topology;
    for (i, s) in chain.stages.iter().enumerate() {
        let Some(net) = s.kind.model().opamp_network() else {
            continue;
        };
        let (_, coupling) = topo.stage_driver[i];
        let input = crate::circuit::opamp::Pin::Node(net.input);
        let biased = net
            .resistors
            .iter()
            .any(|&(_, a, b, _)| a == input || b == input);
        if coupling.is_some() && !biased {
            return Err(ChainError::OpampNoDcPath {
                stage: s.id.clone(),
            });
        }
    }
    Ok(())
}

/// An op-amp stage's `reference`: `"ground"`, a rail's name, or a voltage (a number or
/// a string such as "7.5 V"); absent, ground. Anything else is `opamp-reference`.
fn stage_reference(
    f: &Fields,
    s: &crate::stages::StageSpec,
    rails: &[Rail],
) -> Result<Reference, ChainError> {
    let Some(v) = s.reference() else {
        return Ok(Reference::Rail(RailRef::Ground));
    };
    let expected = || {
        format!(
            "\"ground\", one of the rails ({}) or a voltage such as \"7.5 V\"",
            name_list(rails.iter().map(|r| r.name.as_str()))
        )
    };
    match v {
        ValueSpec::Number(x) if x.is_finite() => Ok(Reference::Volts(*x)),
        ValueSpec::Text(t) if t == "ground" => Ok(Reference::Rail(RailRef::Ground)),
        ValueSpec::Text(t) => {
            if let Some(i) = rails.iter().position(|r| &r.name == t) {
                return Ok(Reference::Rail(RailRef::Rail(i)));
            }
            match crate::units::parse_value(t, Kind::Voltage) {
                Ok(x) => Ok(Reference::Volts(x)),
                Err(_) => Err(f.invalid(
                    "reference",
                    crate::text::quote(t),
                    format!(
                        "{}{}",
                        expected(),
                        crate::text::lookalike(
                            t,
                            rails.iter().map(|r| r.name.as_str()).chain(["ground"])
                        )
                    ),
                )),
            }
        }
        other => Err(f.invalid("reference", other.to_string(), expected())),
    }
}

/// The output of an op-amp stage rests at its reference (docs/definitions.md "Op-amp
/// wiring"), so the reference must lie within the pin's reach: from the bottom rail +
/// `swing_margin` to the top rail − `swing_margin` (`opamp-reference-unreachable`).
fn check_reference_reachable(
    f: &Fields,
    rails: &[Rail],
    stage_rails: StageRails,
    reference: Reference,
    amp: &crate::device::opamp::OpAmp,
) -> Result<(), ChainError> {
    let volts = |r: RailRef| match r {
        RailRef::Ground => 0.0,
        RailRef::Rail(i) => rails[i].v,
    };
    let v_ref = match reference {
        Reference::Rail(r) => volts(r),
        Reference::Volts(v) => v,
    };
    let (top, bottom) = (volts(stage_rails.top), volts(stage_rails.bottom));
    let (lo, hi) = (bottom + amp.swing_margin, top - amp.swing_margin);
    if v_ref < lo || v_ref > hi {
        return Err(f.invalid(
            "reference",
            format!(
                "{}, whose output must rest there",
                crate::units::format_si(v_ref, "V")
            ),
            format!(
                "a reference the output can reach: from {} to {} (the stage's rails {} and {} less the device's swing_margin {})",
                crate::units::format_si(lo, "V"),
                crate::units::format_si(hi, "V"),
                crate::units::format_si(bottom, "V"),
                crate::units::format_si(top, "V"),
                crate::units::format_si(amp.swing_margin, "V"),
            ),
        ));
    }
    Ok(())
}

fn stage_rails(
    f: &Fields,
    s: &crate::stages::StageSpec,
    rails: &[Rail],
) -> Result<StageRails, ChainError> {
    let spec = s.rails();
    let lookup = |which: &str, name: &str| -> Result<RailRef, ChainError> {
        if name == "ground" {
            return Ok(RailRef::Ground);
        }
        rails
            .iter()
            .position(|r| r.name == name)
            .map(RailRef::Rail)
            .ok_or_else(|| {
                f.invalid(
                    &format!("rails.{which}"),
                    crate::text::quote(name),
                    format!(
                        "\"ground\" or one of the rails: {}{}",
                        name_list(rails.iter().map(|r| r.name.as_str())),
                        crate::text::lookalike(
                            name,
                            rails.iter().map(|r| r.name.as_str()).chain(["ground"])
                        )
                    ),
                )
            })
    };
    let top = match spec.and_then(|r| r.top.as_deref()) {
        Some(name) => lookup("top", name)?,
        None => {
            // The most positive rail (ground when every rail is negative).
            let best = rails
                .iter()
                .enumerate()
                .filter(|(_, r)| r.v > 0.0)
                .max_by(|a, b| a.1.v.total_cmp(&b.1.v));
            best.map_or(RailRef::Ground, |(i, _)| RailRef::Rail(i))
        }
    };
    let bottom = match spec.and_then(|r| r.bottom.as_deref()) {
        Some(name) => lookup("bottom", name)?,
        None => RailRef::Ground,
    };
    let v = |r: RailRef| match r {
        RailRef::Ground => 0.0,
        RailRef::Rail(i) => rails[i].v,
    };
    if v(top) <= v(bottom) {
        return Err(f.invalid(
            "rails",
            format!(
                "top at {} and bottom at {}",
                crate::units::format_si(v(top), "V"),
                crate::units::format_si(v(bottom), "V")
            ),
            "a top rail above the bottom rail: the transistor would be reverse-biased (an NPN's collector and a PNP's emitter go to the top)",
        ));
    }
    Ok(StageRails { top, bottom })
}

/// `"a", "b", "c"` for messages, each as [`crate::text::quote`] shows it.
pub fn name_list<'a>(names: impl Iterator<Item = &'a str>) -> String {
    let v: Vec<String> = names.map(crate::text::quote).collect();
    if v.is_empty() {
        "(none)".into()
    } else {
        v.join(", ")
    }
}

impl fmt::Display for Source {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "source ({})", crate::units::format_si(self.r_s, "Ω"))
    }
}
