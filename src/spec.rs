//! The chain file, version 1, as written by people: serde types that mirror the JSON.
//!
//! Nothing here is checked beyond JSON shape and known keys (unknown keys are rejected);
//! [`crate::chain`] turns a [`ChainSpec`] into a validated [`crate::chain::Chain`].

use serde::de::{self, DeserializeSeed, Deserializer, MapAccess, Visitor};
use serde::Deserialize;
use serde_json::value::RawValue;
use std::fmt;

pub use crate::stages::StageSpec;

/// A value as written: a plain number in SI base units, or a string with prefix and unit,
/// or either of those with its spread as an object (see [`SpreadSpec`]).
#[derive(Debug, Clone, PartialEq)]
pub enum ValueSpec {
    Number(f64),
    Text(String),
    /// `{"value": …, "tolerance": "1%"}` or `{"min": …, "typical": …, "max": …}`.
    Spread(Box<SpreadSpec>),
}

impl ValueSpec {
    /// The value a plan uses: the value itself, or `value`/`typical` of a spread.
    pub fn nominal(&self) -> &ValueSpec {
        match self {
            ValueSpec::Spread(s) => &s.nominal,
            v => v,
        }
    }
}

/// How a spread is sampled: uniform within its limits, or normal with the limits at
/// ±3σ (cut off there; see README "Spread").
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize, serde::Serialize, schemars::JsonSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Distribution {
    #[default]
    Uniform,
    Normal,
}

/// A value with its spread. Either `value` with `tolerance`, or `typical` with `min`
/// and `max`; each may name its own `distribution`. The numbers inside are plain
/// (`Number` or `Text`).
#[derive(Debug, Clone, PartialEq)]
pub struct SpreadSpec {
    /// `value` or `typical`.
    pub nominal: ValueSpec,
    pub tolerance: Option<ValueSpec>,
    pub min: Option<ValueSpec>,
    pub max: Option<ValueSpec>,
    pub distribution: Option<Distribution>,
}

/// A plain number or string inside a spread object.
struct PlainValue(ValueSpec);

impl<'de> Deserialize<'de> for PlainValue {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        match ValueSpec::deserialize(d)? {
            ValueSpec::Spread(_) => Err(de::Error::custom(
                "found an object inside a spread, expected a number or a string such as \"4k7\"",
            )),
            v => Ok(PlainValue(v)),
        }
    }
}

const SPREAD_KEYS: &[&str] = &[
    "value",
    "tolerance",
    "typical",
    "min",
    "max",
    "distribution",
];

fn read_spread<'de, A: MapAccess<'de>>(mut map: A) -> Result<ValueSpec, A::Error> {
    let mut value = None;
    let mut typical = None;
    let mut s = SpreadSpec {
        nominal: ValueSpec::Number(0.0),
        tolerance: None,
        min: None,
        max: None,
        distribution: None,
    };
    while let Some(key) = map.next_key::<String>()? {
        let slot = match key.as_str() {
            "value" => &mut value,
            "typical" => &mut typical,
            "tolerance" => &mut s.tolerance,
            "min" => &mut s.min,
            "max" => &mut s.max,
            "distribution" => {
                if s.distribution.is_some() {
                    return Err(de::Error::duplicate_field("distribution"));
                }
                s.distribution = Some(map.next_value()?);
                continue;
            }
            other => return Err(de::Error::unknown_field(other, SPREAD_KEYS)),
        };
        if slot.is_some() {
            return Err(de::Error::custom(format!("found \"{key}\" twice")));
        }
        *slot = Some(map.next_value::<PlainValue>()?.0);
    }
    let shape = (
        value,
        s.tolerance.is_some(),
        typical,
        s.min.is_some() && s.max.is_some(),
    );
    s.nominal = match shape {
        (Some(v), true, None, _) if s.min.is_none() && s.max.is_none() => v,
        (None, false, Some(t), true) => t,
        _ => {
            return Err(de::Error::custom(
                "found an incomplete or mixed spread, expected {\"value\": …, \"tolerance\": \"1%\"} or {\"min\": …, \"typical\": …, \"max\": …}",
            ))
        }
    };
    Ok(ValueSpec::Spread(Box::new(s)))
}

impl<'de> Deserialize<'de> for ValueSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = ValueSpec;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number in SI base units or a string such as \"4k7\" or \"100 nF\", or an object with its tolerance or range")
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<ValueSpec, E> {
                Ok(ValueSpec::Number(v))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<ValueSpec, E> {
                Ok(ValueSpec::Number(v as f64))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<ValueSpec, E> {
                Ok(ValueSpec::Number(v as f64))
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<ValueSpec, E> {
                Ok(ValueSpec::Text(v.to_owned()))
            }
            fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<ValueSpec, A::Error> {
                read_spread(map)
            }
        }
        d.deserialize_any(V)
    }
}

impl fmt::Display for ValueSpec {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            // As a JSON writer would: exponent form where plain digits run long.
            ValueSpec::Number(x) if *x != 0.0 && !(1e-4..1e16).contains(&x.abs()) => {
                write!(f, "{x:e}")
            }
            ValueSpec::Number(x) => write!(f, "{x}"),
            ValueSpec::Text(s) => write!(f, "\"{s}\""),
            ValueSpec::Spread(s) => {
                let mut parts = Vec::new();
                match &s.tolerance {
                    Some(t) => parts.push(format!("\"value\": {}, \"tolerance\": {t}", s.nominal)),
                    None => parts.push(format!("\"typical\": {}", s.nominal)),
                }
                if let (Some(lo), Some(hi)) = (&s.min, &s.max) {
                    parts.push(format!("\"min\": {lo}, \"max\": {hi}"));
                }
                write!(f, "{{{}}}", parts.join(", "))
            }
        }
    }
}

/// A JSON object read as an ordered list of entries; a repeated key is an error
/// (serde's maps would silently keep the last one).
#[derive(Debug, Clone, PartialEq)]
pub struct NamedMap<T>(pub Vec<(String, T)>);

impl<T> Default for NamedMap<T> {
    fn default() -> Self {
        NamedMap(Vec::new())
    }
}

impl<'de, T: Deserialize<'de>> Deserialize<'de> for NamedMap<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V<T>(std::marker::PhantomData<T>);
        impl<'de, T: Deserialize<'de>> Visitor<'de> for V<T> {
            type Value = NamedMap<T>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("an object of named entries")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<NamedMap<T>, A::Error> {
                let mut entries: Vec<(String, T)> = Vec::new();
                while let Some(key) = map.next_key::<String>()? {
                    if entries.iter().any(|(k, _)| *k == key) {
                        return Err(de::Error::custom(format!(
                            "duplicate name \"{key}\"; each name must be unique"
                        )));
                    }
                    let value = map.next_value::<T>()?;
                    entries.push((key, value));
                }
                Ok(NamedMap(entries))
            }
        }
        d.deserialize_map(V(std::marker::PhantomData))
    }
}

// `S` is how the chain holds its stages: `StageSpec` once read; while
// `parse_chain_text` reads it, each stage's JSON text (a stage's `type` is read
// before its kind's entry, each from the stage's own text, so an error keeps its path
// and position). The doc comment below is the schema's description.
/// Whole chain file.
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
#[schemars(rename = "ChainSpec")]
pub struct ChainSpec<S = StageSpec> {
    /// `2` (or `1`) when the file states its format version; optional.
    #[serde(default)]
    #[schemars(extend("enum" = [1, 2]))]
    pub version: Option<serde_json::Value>,
    #[serde(default)]
    pub title: Option<String>,
    /// One positive rail against ground (v1), the rail named "supply".
    #[serde(default)]
    pub supply: Option<ValueSpec>,
    /// Named rails, any signs (v2): `{"vcc": "15 V", "vee": "-15 V"}`.
    #[serde(default)]
    pub supplies: Option<NamedMap<ValueSpec>>,
    #[serde(default)]
    pub temperature: Option<ValueSpec>,
    /// Power rating of the resistors, for dissipation warnings (default 0.25 W).
    #[serde(default)]
    pub resistor_rating: Option<ValueSpec>,
    /// Optional only for a chain of passive stages.
    #[serde(default)]
    pub devices: NamedMap<DeviceSpec>,
    pub source: SourceSpec,
    pub stages: Vec<S>,
    pub loads: Vec<LoadSpec>,
    pub links: Vec<LinkSpec>,
    /// Default tolerances of the chain's resistors and capacitors (for `spread`).
    #[serde(default)]
    pub tolerance: Option<ToleranceSpec>,
    /// Where an editor finds this file's schema (`ampchain schema`); ignored when read.
    #[serde(default, rename = "$schema")]
    pub schema: Option<String>,
}

impl<S> ChainSpec<S> {
    /// The same chain holding `stages` instead of its own.
    fn with_stages<T>(self, stages: Vec<T>) -> ChainSpec<T> {
        let ChainSpec {
            version,
            title,
            supply,
            supplies,
            temperature,
            resistor_rating,
            devices,
            source,
            stages: _,
            loads,
            links,
            tolerance,
            schema,
        } = self;
        ChainSpec {
            version,
            title,
            supply,
            supplies,
            temperature,
            resistor_rating,
            devices,
            source,
            stages,
            loads,
            links,
            tolerance,
            schema,
        }
    }
}

/// `"tolerance": {"resistors": "5%", "capacitors": "20%", "distribution": "uniform"}`.
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ToleranceSpec {
    #[serde(default)]
    pub resistors: Option<ValueSpec>,
    #[serde(default)]
    pub capacitors: Option<ValueSpec>,
    #[serde(default)]
    pub distribution: Option<Distribution>,
}

#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DeviceSpec {
    /// "npn", "pnp", "n_jfet", "p_jfet" or "opamp".
    #[schemars(extend("enum" = ["npn", "pnp", "n_jfet", "p_jfet", "opamp"]))]
    pub polarity: String,
    /// Current gain β (bipolar devices only, required there).
    #[serde(default)]
    pub beta: Option<ValueSpec>,
    /// JFET: drain current I_DSS at V_GS = 0 in saturation.
    #[serde(default)]
    pub i_dss: Option<ValueSpec>,
    /// JFET: pinch-off voltage V_P (negative for n_jfet, positive for p_jfet).
    #[serde(default)]
    pub pinch_off_voltage: Option<ValueSpec>,
    /// JFET: gate–source capacitance (default 0).
    #[serde(default)]
    pub c_gs: Option<ValueSpec>,
    /// JFET: gate–drain capacitance (default 0).
    #[serde(default)]
    pub c_gd: Option<ValueSpec>,
    /// Reverse current gain β_R (Ebers–Moll model; default 3).
    #[serde(default)]
    pub beta_reverse: Option<ValueSpec>,
    #[serde(default)]
    pub saturation_current: Option<ValueSpec>,
    #[serde(default)]
    pub early_voltage: Option<ValueSpec>,
    #[serde(default)]
    pub vce_sat: Option<ValueSpec>,
    /// Largest allowed collector dissipation, for warnings (default 0.25 W).
    #[serde(default)]
    pub max_dissipation: Option<ValueSpec>,
    /// Transition frequency f_T (absent: no C_π).
    #[serde(default)]
    pub transition_frequency: Option<ValueSpec>,
    /// Collector–base capacitance C_μ (default 0).
    #[serde(default)]
    pub c_bc: Option<ValueSpec>,
    /// Base spreading resistance r_bb' in series with the base (default 0).
    #[serde(default)]
    pub base_resistance: Option<ValueSpec>,
    /// Collector bulk resistance r_c in series with the collector (default 0).
    #[serde(default)]
    pub collector_resistance: Option<ValueSpec>,
    /// Corner frequency of the base-current flicker noise 2qI_B·f_c/f (default 0: none).
    #[serde(default)]
    pub flicker_corner: Option<ValueSpec>,
    /// Relative change of β per kelvin, e.g. "0.5 %/K" (for `spread`; default none).
    #[serde(default)]
    pub beta_temperature_coefficient: Option<ValueSpec>,
    /// Op-amp: open-loop gain A_0 as V/V or "… dB" (required there).
    #[serde(default)]
    pub open_loop_gain: Option<ValueSpec>,
    /// Op-amp: gain–bandwidth product (required there).
    #[serde(default)]
    pub gain_bandwidth: Option<ValueSpec>,
    /// Op-amp: differential input resistance (default infinite).
    #[serde(default)]
    pub input_resistance: Option<ValueSpec>,
    /// Op-amp: output resistance (default 0, an ideal voltage source).
    #[serde(default)]
    pub output_resistance: Option<ValueSpec>,
    /// Op-amp: closest approach of the output to either rail (default 1 V).
    #[serde(default)]
    pub swing_margin: Option<ValueSpec>,
    /// Op-amp: largest output current (default infinite).
    #[serde(default)]
    pub output_current_limit: Option<ValueSpec>,
    /// Op-amp: slew rate, "13 V/us" (optional).
    #[serde(default)]
    pub slew_rate: Option<ValueSpec>,
    /// Op-amp: input noise voltage density, "4 nV/rtHz" (optional).
    #[serde(default)]
    pub voltage_noise: Option<ValueSpec>,
    /// Op-amp: input noise current density, "0.5 pA/rtHz" (optional).
    #[serde(default)]
    pub current_noise: Option<ValueSpec>,
}

#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SourceSpec {
    pub resistance: ValueSpec,
    #[serde(default)]
    pub level: Option<ValueSpec>,
    /// Shunt capacitance at the source's output node, after its resistance (default 0).
    #[serde(default)]
    pub capacitance: Option<ValueSpec>,
}

#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct LoadSpec {
    pub id: String,
    pub resistance: ValueSpec,
    /// Shunt capacitance across the load (default 0).
    #[serde(default)]
    pub capacitance: Option<ValueSpec>,
}

#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct LinkSpec {
    pub from: String,
    pub to: String,
    /// `"direct"`, a series capacitance, or `"feedback"` (a link from a later stage's
    /// output back to an earlier stage; docs/definitions.md, "Feedback links").
    pub coupling: ValueSpec,
    /// Feedback links only: the feedback resistor.
    #[serde(default)]
    pub resistance: Option<ValueSpec>,
    /// Feedback links only: a capacitor in series with the resistor (optional).
    #[serde(default)]
    pub capacitance: Option<ValueSpec>,
    /// Feedback links only: where the link ends, `"input"` (the stage's input node) or
    /// `"emitter"` (its transistor's emitter terminal).
    #[serde(default)]
    pub into: Option<String>,
}

/// Parse chain-file text. The error carries the JSON path and the line and column.
pub fn parse_chain_text(text: &str) -> Result<ChainSpec, SyntaxError> {
    // A UTF-8 byte-order mark (some editors write one) is no part of the JSON.
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    // Comments and trailing commas become spaces in place (positions stay exact).
    let text = crate::annotated::plain(text).map_err(|u| SyntaxError {
        path: String::new(),
        stage: None,
        line: u.line,
        column: u.column,
        message: "found a comment \"/*\" that never ends, expected \"*/\" to close it".into(),
    })?;
    let mut de = serde_json::Deserializer::from_str(&text);
    let chain = tracked(Strict::new(&mut de), |d| {
        d.deserialize_any(ShapeVisitor(ChainShape))
    })?;
    // Text after the closing brace is an error, not something to ignore.
    de.end().map_err(|e| SyntaxError {
        path: String::new(),
        stage: None,
        line: e.line(),
        column: e.column(),
        message: "found text after the end of the chain object, expected nothing more".into(),
    })?;
    let stages = chain
        .stages
        .iter()
        .enumerate()
        .map(|(i, stage)| {
            let start = stage.get().as_ptr() as usize - text.as_ptr() as usize;
            read_stage(stage.get()).map_err(|e| SyntaxError {
                stage: stage_id(stage.get()),
                ..e.within(&text, start, &format!("stages[{i}]"))
            })
        })
        .collect::<Result<Vec<_>, _>>()?;
    Ok(chain.with_stages(stages))
}

/// The `id` a stage's text gives as a string; `None` when it gives none (or no string).
fn stage_id(text: &str) -> Option<String> {
    let stage: serde_json::Value = serde_json::from_str(text).ok()?;
    Some(stage.get("id")?.as_str()?.to_string())
}

/// Read with `read` from a deserializer that tracks the JSON path, for the error.
fn tracked<'de, D, T>(
    d: D,
    read: impl FnOnce(serde_path_to_error::Deserializer<'_, '_, D>) -> Result<T, serde_json::Error>,
) -> Result<T, SyntaxError>
where
    D: Deserializer<'de, Error = serde_json::Error>,
{
    let mut track = serde_path_to_error::Track::new();
    let result = read(serde_path_to_error::Deserializer::new(d, &mut track));
    result.map_err(|inner| {
        let path = track.path().to_string();
        let path = if path == "." || path.ends_with('?') {
            String::new()
        } else {
            path
        };
        // serde's messages echo keys and values from the file as they are.
        SyntaxError {
            path: crate::text::visible(&path),
            stage: None,
            line: inner.line(),
            column: inner.column(),
            message: crate::text::visible(&strip_position(&inner.to_string())),
        }
    })
}

/// One stage from its JSON text: its `type` first, then the entry of that kind
/// (positions in `text`, the path from the stage).
fn read_stage(text: &str) -> Result<StageSpec, SyntaxError> {
    let type_name = tracked(&mut serde_json::Deserializer::from_str(text), |d| {
        d.deserialize_any(ShapeVisitor(StageShape))
    })?;
    let without_type = Strict {
        inner: &mut serde_json::Deserializer::from_str(text),
        skip: Some("type"),
    };
    tracked(without_type, |d| StageSpec::deserialize_kind(type_name, d))
}

/// The stage kinds as a message lists them: `"common_emitter", "emitter_follower", …`.
fn stage_types() -> String {
    StageSpec::TYPES
        .iter()
        .map(|t| format!("\"{t}\""))
        .collect::<Vec<_>>()
        .join(", ")
}

/// One JSON value of an expected shape: an object (`map`) or a string (`text`); any
/// other value is refused as "found …, expected …", in the words of the chain file
/// (serde's own messages would name Rust types such as `struct ChainSpec`).
trait Shape<'de>: Sized {
    type Value;
    /// What the file should hold here.
    fn expected(&self) -> String;
    fn map<A: MapAccess<'de>>(self, _map: A) -> Result<Self::Value, A::Error> {
        Err(refuse("an object", &self))
    }
    fn text<E: de::Error>(self, v: &str) -> Result<Self::Value, E> {
        Err(refuse(
            &format!("the string {}", crate::text::quote_value(v)),
            &self,
        ))
    }
    fn seq<A: de::SeqAccess<'de>>(self, _seq: A) -> Result<Self::Value, A::Error> {
        Err(refuse("an array", &self))
    }
}

fn refuse<'de, E: de::Error>(found: &str, shape: &impl Shape<'de>) -> E {
    E::custom(format!("found {found}, expected {}", shape.expected()))
}

struct ShapeVisitor<S>(S);

impl<'de, S: Shape<'de>> Visitor<'de> for ShapeVisitor<S> {
    type Value = S::Value;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str(&self.0.expected())
    }
    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<S::Value, A::Error> {
        self.0.map(map)
    }
    fn visit_str<E: de::Error>(self, v: &str) -> Result<S::Value, E> {
        self.0.text(v)
    }
    fn visit_bool<E: de::Error>(self, v: bool) -> Result<S::Value, E> {
        Err(refuse(&v.to_string(), &self.0))
    }
    fn visit_i64<E: de::Error>(self, v: i64) -> Result<S::Value, E> {
        Err(refuse(&format!("the number {v}"), &self.0))
    }
    fn visit_u64<E: de::Error>(self, v: u64) -> Result<S::Value, E> {
        Err(refuse(&format!("the number {v}"), &self.0))
    }
    fn visit_f64<E: de::Error>(self, v: f64) -> Result<S::Value, E> {
        Err(refuse(&format!("the number {v}"), &self.0))
    }
    fn visit_unit<E: de::Error>(self) -> Result<S::Value, E> {
        Err(refuse("null", &self.0))
    }
    fn visit_seq<A: de::SeqAccess<'de>>(self, seq: A) -> Result<S::Value, A::Error> {
        self.0.seq(seq)
    }
}

/// The chain file: an object, its stages kept as their text.
struct ChainShape;

impl<'de> Shape<'de> for ChainShape {
    type Value = ChainSpec<&'de RawValue>;
    fn expected(&self) -> String {
        "a JSON object with the chain's keys, such as \"source\", \"stages\", \"loads\" and \"links\"".into()
    }
    fn map<A: MapAccess<'de>>(self, map: A) -> Result<Self::Value, A::Error> {
        ChainSpec::deserialize(de::value::MapAccessDeserializer::new(map))
    }
}

/// A stage: an object whose `type` names its kind (the other keys are read after).
struct StageShape;

impl<'de> Shape<'de> for StageShape {
    type Value = &'static str;
    fn expected(&self) -> String {
        format!(
            "a stage object with a \"type\" such as \"common_emitter\" (one of {})",
            stage_types()
        )
    }
    fn map<A: MapAccess<'de>>(self, mut map: A) -> Result<&'static str, A::Error> {
        let mut found = None;
        while let Some(key) = map.next_key::<String>()? {
            if key != "type" {
                map.next_value::<de::IgnoredAny>()?;
            } else if found.is_some() {
                return Err(de::Error::duplicate_field("type"));
            } else {
                found = Some(map.next_value_seed(TypeSeed)?);
            }
        }
        found.ok_or_else(|| refuse("no \"type\"", &self))
    }
}

/// A stage's `type`: one of the kinds.
struct TypeSeed;

impl<'de> DeserializeSeed<'de> for TypeSeed {
    type Value = &'static str;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<&'static str, D::Error> {
        d.deserialize_any(ShapeVisitor(TypeShape))
    }
}

struct TypeShape;

impl<'de> Shape<'de> for TypeShape {
    type Value = &'static str;
    fn expected(&self) -> String {
        format!("a stage type, one of {}", stage_types())
    }
    fn text<E: de::Error>(self, v: &str) -> Result<&'static str, E> {
        StageSpec::TYPES
            .iter()
            .find(|t| **t == v)
            .copied()
            .ok_or_else(|| E::unknown_variant(v, StageSpec::TYPES))
    }
}

/// The chain file read strictly: serde's derive would read a struct from an array too,
/// by field order (`"loads": [["line", "2k2"]]` as a load), and an enum from an object
/// (`"distribution": {"normal": null}`); here a struct reads only from an object, an
/// enum only from its name. The wrapper goes around the deserializer, its visitors, the
/// objects and arrays they read and the seeds of their values, so the rule holds at
/// every depth. `skip` drops one key from the next object only: a stage's `type`, read
/// before (it chose the kind), which the kind's entry does not know.
struct Strict<X> {
    inner: X,
    skip: Option<&'static str>,
}

impl<X> Strict<X> {
    fn new(inner: X) -> Self {
        Strict { inner, skip: None }
    }
}

impl<'de, D: Deserializer<'de>> Deserializer<'de> for Strict<D> {
    type Error = D::Error;
    fn deserialize_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, D::Error> {
        let Strict { inner, skip } = self;
        inner.deserialize_any(Strict {
            inner: visitor,
            skip,
        })
    }
    fn deserialize_struct<V: Visitor<'de>>(
        self,
        _name: &'static str,
        fields: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        let Strict { inner, skip } = self;
        let shape = ObjectShape {
            visitor,
            fields,
            skip,
        };
        inner.deserialize_any(ShapeVisitor(shape))
    }
    fn deserialize_enum<V: Visitor<'de>>(
        self,
        _name: &'static str,
        variants: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.inner
            .deserialize_any(ShapeVisitor(NameShape { visitor, variants }))
    }
    fn deserialize_option<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, D::Error> {
        self.inner.deserialize_option(Strict::new(visitor))
    }
    // Only a stage's raw text (`RawValue`, read strictly on its own later) asks for a
    // newtype struct; serde_json knows it by its name, so the call goes through as is.
    fn deserialize_newtype_struct<V: Visitor<'de>>(
        self,
        name: &'static str,
        visitor: V,
    ) -> Result<V::Value, D::Error> {
        self.inner.deserialize_newtype_struct(name, visitor)
    }
    serde::forward_to_deserialize_any! {
        bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string bytes
        byte_buf unit unit_struct seq tuple tuple_struct map identifier ignored_any
    }
}

// The visits serde_json makes from `deserialize_any` and `deserialize_option`.
impl<'de, V: Visitor<'de>> Visitor<'de> for Strict<V> {
    type Value = V::Value;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        self.inner.expecting(f)
    }
    fn visit_bool<E: de::Error>(self, v: bool) -> Result<V::Value, E> {
        self.inner.visit_bool(v)
    }
    fn visit_i64<E: de::Error>(self, v: i64) -> Result<V::Value, E> {
        self.inner.visit_i64(v)
    }
    fn visit_u64<E: de::Error>(self, v: u64) -> Result<V::Value, E> {
        self.inner.visit_u64(v)
    }
    fn visit_f64<E: de::Error>(self, v: f64) -> Result<V::Value, E> {
        self.inner.visit_f64(v)
    }
    fn visit_str<E: de::Error>(self, v: &str) -> Result<V::Value, E> {
        self.inner.visit_str(v)
    }
    fn visit_borrowed_str<E: de::Error>(self, v: &'de str) -> Result<V::Value, E> {
        self.inner.visit_borrowed_str(v)
    }
    fn visit_string<E: de::Error>(self, v: String) -> Result<V::Value, E> {
        self.inner.visit_string(v)
    }
    fn visit_unit<E: de::Error>(self) -> Result<V::Value, E> {
        self.inner.visit_unit()
    }
    fn visit_none<E: de::Error>(self) -> Result<V::Value, E> {
        self.inner.visit_none()
    }
    fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<V::Value, D::Error> {
        self.inner.visit_some(Strict::new(d))
    }
    fn visit_seq<A: de::SeqAccess<'de>>(self, seq: A) -> Result<V::Value, A::Error> {
        self.inner.visit_seq(Strict::new(seq))
    }
    fn visit_map<A: MapAccess<'de>>(self, map: A) -> Result<V::Value, A::Error> {
        self.inner.visit_map(Strict {
            inner: map,
            skip: self.skip,
        })
    }
}

impl<'de, A: MapAccess<'de>> MapAccess<'de> for Strict<A> {
    type Error = A::Error;
    fn next_key_seed<K: DeserializeSeed<'de>>(
        &mut self,
        seed: K,
    ) -> Result<Option<K::Value>, A::Error> {
        let Some(skip) = self.skip else {
            return self.inner.next_key_seed(seed);
        };
        while let Some(key) = self.inner.next_key::<String>()? {
            if key == skip {
                self.inner.next_value::<de::IgnoredAny>()?;
            } else {
                return seed
                    .deserialize(de::value::StringDeserializer::<A::Error>::new(key))
                    .map(Some);
            }
        }
        Ok(None)
    }
    fn next_value_seed<V: DeserializeSeed<'de>>(&mut self, seed: V) -> Result<V::Value, A::Error> {
        self.inner.next_value_seed(Strict::new(seed))
    }
}

impl<'de, A: de::SeqAccess<'de>> de::SeqAccess<'de> for Strict<A> {
    type Error = A::Error;
    fn next_element_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<Option<T::Value>, A::Error> {
        self.inner.next_element_seed(Strict::new(seed))
    }
    fn size_hint(&self) -> Option<usize> {
        self.inner.size_hint()
    }
}

impl<'de, S: DeserializeSeed<'de>> DeserializeSeed<'de> for Strict<S> {
    type Value = S::Value;
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<S::Value, D::Error> {
        self.inner.deserialize(Strict::new(d))
    }
}

/// An entry of the file that is an object (a device, the source, a load, a link, a
/// stage, its rails …): `fields` are its keys in the order serde's derive would read
/// an array by.
struct ObjectShape<V> {
    visitor: V,
    fields: &'static [&'static str],
    skip: Option<&'static str>,
}

impl<'de, V: Visitor<'de>> Shape<'de> for ObjectShape<V> {
    type Value = V::Value;
    fn expected(&self) -> String {
        format!("an object such as {}", object_example(self.fields, &[]))
    }
    fn map<A: MapAccess<'de>>(self, map: A) -> Result<V::Value, A::Error> {
        self.visitor.visit_map(Strict {
            inner: map,
            skip: self.skip,
        })
    }
    /// An array is refused with the object it was meant as: its values under the keys
    /// serde's derive would have given them.
    fn seq<A: de::SeqAccess<'de>>(self, mut seq: A) -> Result<V::Value, A::Error> {
        let mut values = Vec::new();
        while values.len() < self.fields.len() {
            match seq.next_element::<serde_json::Value>()? {
                Some(v) => values.push(v.to_string()),
                None => break,
            }
        }
        Err(de::Error::custom(format!(
            "found an array, expected an object such as {}",
            object_example(self.fields, &values)
        )))
    }
}

/// `{"id": "line", "resistance": "2k2"}`: the first keys with `values`, or with "…"
/// (two keys, "…" for more) when there are none.
fn object_example(fields: &[&str], values: &[String]) -> String {
    let mut entries: Vec<String> = if values.is_empty() {
        fields
            .iter()
            .take(2)
            .map(|k| format!("\"{k}\": …"))
            .collect()
    } else {
        fields
            .iter()
            .zip(values)
            .map(|(k, v)| format!("\"{k}\": {v}"))
            .collect()
    };
    if values.is_empty() && fields.len() > 2 {
        entries.push("…".into());
    }
    format!("{{{}}}", entries.join(", "))
}

/// A name from a fixed list (an enum of the file, such as `distribution`).
struct NameShape<V> {
    visitor: V,
    variants: &'static [&'static str],
}

impl<'de, V: Visitor<'de>> Shape<'de> for NameShape<V> {
    type Value = V::Value;
    fn expected(&self) -> String {
        let names: Vec<String> = self.variants.iter().map(|v| format!("\"{v}\"")).collect();
        format!("one of {}", names.join(", "))
    }
    fn text<E: de::Error>(self, v: &str) -> Result<V::Value, E> {
        self.visitor
            .visit_enum(de::IntoDeserializer::<E>::into_deserializer(v))
    }
}

/// serde_json appends " at line L column C"; we report the position ourselves.
fn strip_position(msg: &str) -> String {
    match msg.rfind(" at line ") {
        Some(i) => msg[..i].to_string(),
        None => msg.to_string(),
    }
}

/// A chain file that is not valid JSON or does not have the expected shape.
#[derive(Debug, Clone, PartialEq)]
pub struct SyntaxError {
    /// JSON path such as `stages[1].r_collector` (empty at top level).
    pub path: String,
    /// The id of the stage at `path`, when the stage has one.
    pub stage: Option<String>,
    pub line: usize,
    pub column: usize,
    pub message: String,
}

impl SyntaxError {
    /// This error, found in the part of `text` from byte `start` on, as an error of
    /// `text`: the position counted from its start, the path under `path`.
    fn within(mut self, text: &str, start: usize, path: &str) -> SyntaxError {
        let before = &text[..start];
        if self.line == 1 {
            // Columns count bytes, as serde_json counts them.
            self.column += start - before.rfind('\n').map_or(0, |i| i + 1);
        }
        self.line += before.matches('\n').count();
        self.path = if self.path.is_empty() {
            path.to_string()
        } else {
            format!("{path}.{}", self.path)
        };
        self
    }
}

impl fmt::Display for SyntaxError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}, column {}: ", self.line, self.column)?;
        match (&self.path, &self.stage) {
            (path, _) if path.is_empty() => {}
            (path, Some(id)) => write!(f, "{}: ", crate::text::in_stage(path, id))?,
            (path, None) => write!(f, "{path}: ")?,
        }
        f.write_str(&self.message)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MINIMAL: &str = r#"{
      "supply": "12 V",
      "devices": { "q": { "polarity": "npn", "beta": 200 } },
      "source": { "resistance": "1k", "level": "10 mV rms" },
      "stages": [ { "id": "a", "type": "common_emitter", "device": "q",
                    "r_top": "100k", "r_bottom": "22k", "r_collector": "4k7",
                    "r_emitter": "1k" } ],
      "loads": [ { "id": "out", "resistance": "10k" } ],
      "links": [ { "from": "source", "to": "a", "coupling": "1u" },
                 { "from": "a", "to": "out", "coupling": "1u" } ]
    }"#;

    #[test]
    fn reads_a_minimal_chain() {
        let spec = parse_chain_text(MINIMAL).unwrap();
        assert_eq!(spec.stages.len(), 1);
        assert_eq!(spec.stages[0].id(), "a");
        assert_eq!(spec.devices.0[0].0, "q");
    }

    #[test]
    fn unknown_key_names_its_path() {
        let text = MINIMAL.replace("\"r_emitter\"", "\"r_emiter\"");
        let e = parse_chain_text(&text).unwrap_err();
        assert!(e.path.starts_with("stages[0]"), "{e}");
        assert!(e.message.contains("r_emiter"), "{e}");
    }

    #[test]
    fn duplicate_device_names_are_rejected() {
        let text = MINIMAL.replace(
            r#""q": { "polarity": "npn", "beta": 200 }"#,
            r#""q": { "polarity": "npn", "beta": 200 }, "q": { "polarity": "npn", "beta": 100 }"#,
        );
        let e = parse_chain_text(&text).unwrap_err();
        assert!(e.message.contains("duplicate name \"q\""), "{e}");
    }

    #[test]
    fn a_value_may_carry_its_tolerance_or_range() {
        let text = MINIMAL
            .replace(
                r#""r_collector": "4k7""#,
                r#""r_collector": {"value": "4k7", "tolerance": "1%"}"#,
            )
            .replace(
                r#""beta": 200"#,
                r#""beta": {"min": 100, "typical": 200, "max": 400, "distribution": "normal"}"#,
            );
        let spec = parse_chain_text(&text).unwrap();
        let StageSpec::CommonEmitter(ce) = &spec.stages[0] else {
            panic!("a common-emitter stage")
        };
        assert_eq!(
            ce.r_collector.as_ref().unwrap().nominal(),
            &ValueSpec::Text("4k7".into())
        );
        let Some(ValueSpec::Spread(beta)) = &spec.devices.0[0].1.beta else {
            panic!("beta has a range")
        };
        assert_eq!(beta.nominal, ValueSpec::Number(200.0));
        assert_eq!(beta.distribution, Some(Distribution::Normal));
        // Mixed or incomplete shapes are refused.
        for bad in [
            r#"{"value": 200, "min": 100, "max": 400}"#,
            r#"{"typical": 200, "min": 100}"#,
            r#"{"value": {"value": 1}, "tolerance": "1%"}"#,
        ] {
            let e =
                parse_chain_text(&MINIMAL.replace(r#""beta": 200"#, &format!(r#""beta": {bad}"#)))
                    .unwrap_err();
            assert!(e.path.starts_with("devices"), "{bad}: {e}");
        }
    }

    #[test]
    fn a_shape_error_in_a_stage_names_the_stage() {
        // The path, then the stage's id when its text gives one as a string.
        let text = MINIMAL.replace(r#""r_emitter": "1k""#, r#""r_emitter": true"#);
        let e = parse_chain_text(&text).unwrap_err();
        assert_eq!(e.path, "stages[0].r_emitter");
        assert_eq!(e.stage.as_deref(), Some("a"));
        assert!(
            e.to_string()
                .contains("stages[0].r_emitter (stage \"a\"): "),
            "{e}"
        );
        let e = parse_chain_text(&text.replace(r#""id": "a""#, r#""id": 7"#)).unwrap_err();
        assert_eq!(e.stage, None, "{e}");
    }

    #[test]
    fn an_array_is_no_object() {
        // serde's derive would read the load by field order; the file format has keys.
        let text = MINIMAL.replace(
            r#"{ "id": "out", "resistance": "10k" }"#,
            r#"["out", "10k"]"#,
        );
        let e = parse_chain_text(&text).unwrap_err();
        assert_eq!(e.path, "loads[0]");
        assert_eq!(
            e.message,
            r#"found an array, expected an object such as {"id": "out", "resistance": "10k"}"#
        );
    }

    #[test]
    fn unknown_stage_type_is_named() {
        let text = MINIMAL.replace("common_emitter", "totem_pole");
        let e = parse_chain_text(&text).unwrap_err();
        assert!(e.message.contains("totem_pole"), "{e}");
    }
}

/// A stage's rails by name: `"rails": {"top": "vcc", "bottom": "vee"}`.
#[derive(Debug, Clone, Default, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct RailsSpec {
    #[serde(default)]
    pub top: Option<String>,
    #[serde(default)]
    pub bottom: Option<String>,
}

/// An RC filter between the top rail and a stage's top connections:
/// `"supply_filter": {"resistance": "1k", "capacitance": "100u"}`.
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SupplyFilterSpec {
    pub resistance: ValueSpec,
    pub capacitance: ValueSpec,
}
