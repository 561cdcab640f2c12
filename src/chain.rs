//! The validated chain: values in SI units, devices resolved, the graph checked.
//! Built once from a [`ChainSpec`]; evaluated many times (see [`crate::evaluate`]).
//! Circuit values are public so a caller can change them and re-evaluate without
//! re-parsing or re-validating the graph.

use crate::device::{Device, ZERO_CELSIUS};
use crate::graph::{GraphError, Topology};
use crate::limits;
use crate::spec::{parse_chain_text, ChainSpec, SyntaxError, ValueSpec};
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
}

#[derive(Debug, Clone, PartialEq)]
pub struct Stage {
    pub id: String,
    /// Index into [`Chain::devices`].
    pub device: usize,
    pub kind: StageKind,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Load {
    pub id: String,
    pub r_l: f64,
}

/// A validated chain.
#[derive(Debug, Clone)]
pub struct Chain {
    pub title: Option<String>,
    /// Supply V_CC against ground.
    pub v_cc: f64,
    /// Temperature in kelvin.
    pub temperature: f64,
    pub resistor_rating: f64,
    pub devices: Vec<Device>,
    pub source: Source,
    pub stages: Vec<Stage>,
    pub loads: Vec<Load>,
    pub topology: Topology,
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
}

/// Reads the values of one JSON object, naming `prefix.field` in errors.
pub struct Fields {
    prefix: String,
}

impl Fields {
    pub fn new(prefix: impl Into<String>) -> Self {
        Fields {
            prefix: prefix.into(),
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
        ChainError::Value {
            path: self.path(name),
            found: found.into(),
            expected: expected.into(),
        }
    }

    /// Any finite value of the kind.
    pub fn value(&self, name: &str, v: &ValueSpec, kind: Kind) -> Result<f64, ChainError> {
        let x = match v {
            ValueSpec::Number(x) => *x,
            ValueSpec::Text(t) => {
                parse_value(t, kind).map_err(|e| self.invalid(name, e.found, e.expected))?
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

    /// A value above zero.
    pub fn positive(&self, name: &str, v: &ValueSpec, kind: Kind) -> Result<f64, ChainError> {
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

    pub fn optional_non_negative(
        &self,
        name: &str,
        v: Option<&ValueSpec>,
        kind: Kind,
    ) -> Result<Option<f64>, ChainError> {
        v.map(|v| {
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
            ValueSpec::Number(x) if x.is_finite() && *x > 0.0 => Ok(*x),
            ValueSpec::Text(t) => match t.trim().parse::<f64>() {
                Ok(x) if x.is_finite() && x > 0.0 => Ok(x),
                _ => Err(self.invalid(name, v.to_string(), "a plain number above zero")),
            },
            _ => Err(self.invalid(name, v.to_string(), "a plain number above zero")),
        }
    }

    /// A temperature: strings carry their unit; a plain number is kelvin (SI).
    pub fn temperature(&self, name: &str, v: &ValueSpec) -> Result<f64, ChainError> {
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

/// Parse a signal level given in the file or on the command line.
pub fn level_from_spec(v: &ValueSpec, fields: &Fields, name: &str) -> Result<Level, ChainError> {
    match v {
        ValueSpec::Number(x) if x.is_finite() && *x >= 0.0 => Ok(Level::from_vrms(*x)),
        ValueSpec::Number(x) => {
            Err(fields.invalid(name, x.to_string(), "a level of zero or more volts rms"))
        }
        ValueSpec::Text(t) => parse_level(t).map_err(|e| fields.invalid(name, e.found, e.expected)),
    }
    .and_then(|level| {
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

    /// Validate a parsed chain file.
    pub fn from_spec(spec: &ChainSpec) -> Result<Chain, ChainError> {
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
        let v_cc = top.positive("supply", &spec.supply, Kind::Voltage)?;
        let v_cc = top.within("supply", &spec.supply, v_cc, &limits::SUPPLY)?;
        let temperature = match &spec.temperature {
            Some(t) => top.temperature("temperature", t)?,
            None => DEFAULT_TEMPERATURE,
        };
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
            let f = Fields::new(format!("devices.{name}"));
            if d.polarity != "npn" {
                return Err(f.invalid(
                    "polarity",
                    format!("\"{}\"", d.polarity),
                    "\"npn\" (the only polarity this version supports)",
                ));
            }
            // Each value within physical sense (limits.rs).
            let checked = |name: &str, v: Option<&ValueSpec>, x: f64, range| match v {
                Some(v) => f.within(name, v, x, range),
                None => Ok(x),
            };
            let device = Device {
                name: name.clone(),
                beta: f.positive_number("beta", &d.beta)?,
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
            };
            checked("beta", Some(&d.beta), device.beta, &limits::BETA)?;
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
        };

        let mut stages = Vec::with_capacity(spec.stages.len());
        for (i, s) in spec.stages.iter().enumerate() {
            let f = Fields::new(format!("stages[{i}]"));
            let device = devices
                .iter()
                .position(|d| d.name == s.device())
                .ok_or_else(|| {
                    f.invalid(
                        "device",
                        format!("\"{}\" (stage \"{}\")", s.device(), s.id()),
                        format!(
                            "one of the names under \"devices\": {}",
                            name_list(devices.iter().map(|d| d.name.as_str()))
                        ),
                    )
                })?;
            stages.push(Stage {
                id: s.id().to_string(),
                device,
                kind: s.build(&f)?,
            });
        }

        let mut loads = Vec::with_capacity(spec.loads.len());
        for (i, l) in spec.loads.iter().enumerate() {
            let f = Fields::new(format!("loads[{i}]"));
            loads.push(Load {
                id: l.id.clone(),
                r_l: f.positive("resistance", &l.resistance, Kind::Resistance)?,
            });
        }

        let topology = Topology::build(spec, &stages, &loads)?;
        Ok(Chain {
            title: spec.title.clone(),
            v_cc,
            temperature,
            resistor_rating,
            devices,
            source,
            stages,
            loads,
            topology,
        })
    }

    pub fn device_of(&self, stage: usize) -> &Device {
        &self.devices[self.stages[stage].device]
    }

    /// Stage index by id.
    pub fn stage_index(&self, id: &str) -> Option<usize> {
        self.stages.iter().position(|s| s.id == id)
    }
}

/// `"a", "b", "c"` for messages.
pub fn name_list<'a>(names: impl Iterator<Item = &'a str>) -> String {
    let v: Vec<String> = names.map(|n| format!("\"{n}\"")).collect();
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
