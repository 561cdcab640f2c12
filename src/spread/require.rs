//! Pass/fail requirements on the builds, written `QUANTITY[@ID] LOW..HIGH` (either
//! bound may be left out):
//!
//! - `gain[@LOAD] 30dB..33dB`: overall gain to a load (the first load when no id is
//!   given), in dB or as a plain ratio (V/V);
//! - `clip[@STAGE] -10dBu..`: the source level at which the chain (or that stage)
//!   clips, as a level: `-10dBu`, `-20dBV`, `100mV rms`, `0.3Vpk`, `1Vpp`;
//! - `stage_gain@STAGE 10..`: a stage's own loaded gain (dB or V/V);
//! - `i_c@STAGE 0.5mA..2mA`, `v_ce@STAGE 2V..`: a stage's operating point;
//! - `low_corner[@LOAD] ..20Hz`, `high_corner[@LOAD] 20kHz..`: the −3 dB corners of
//!   the response to a load (runs with `--band` only); a build in which the corner
//!   was not found in the search range misses;
//! - `dissipation@STAGE ..250mW`: the stage transistor's own dissipation
//!   V_CE·I_C + V_BE·I_B;
//! - `resistor_power@STAGE.PART ..125mW`: a resistor's DC power, as `plan` reports it;
//! - `warnings@KIND ..0`: how many warnings of that kind (`warnings::KINDS`) the build
//!   has at the planned level, as `check` gives them.
//!
//! Dissipation and warnings are recorded only in runs whose [`Measure`] asks for
//! them ([`measure_for`]).
//!
//! A build with a stage out of its active region at DC misses every requirement.

use super::measure::{Measure, WarningMeasure};
use super::trials::Layout;
use crate::chain::{name_list, Chain};
use crate::units::{parse_level, parse_value, Kind, Level};
use crate::warnings::KINDS;

/// One requirement, with the record column it reads and its bounds in that column's
/// units (V/V, V peak, A, V).
#[derive(Debug, Clone, PartialEq)]
pub struct Requirement {
    /// As written.
    pub text: String,
    pub column: usize,
    pub low: Option<f64>,
    pub high: Option<f64>,
    bound: Bound,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Bound {
    Gain,
    Level,
    Value(Kind),
    /// A number of warnings.
    Count,
}

/// The quantity a requirement names (`dissipation` of `dissipation@amp ..250mW`).
fn quantity(text: &str) -> &str {
    let head = text.split_whitespace().next().unwrap_or("");
    head.split_once('@').map_or(head, |(name, _)| name)
}

/// Make `measure` record what the requirements `texts` read beyond `plan`'s figures:
/// the dissipation for a `dissipation@…`, the warnings at `level` (the planned input)
/// for a `warnings@…`. Runs without them record neither.
pub fn measure_for(texts: &[String], measure: &mut Measure, level: Option<Level>) {
    if texts.iter().any(|t| quantity(t) == "dissipation") {
        measure.dissipation = true;
    }
    if texts.iter().any(|t| quantity(t) == "resistor_power") {
        measure.resistor_power = true;
    }
    if texts.iter().any(|t| quantity(t) == "warnings") {
        measure.warnings = Some(WarningMeasure { level });
    }
}

fn usage(option: &str, text: &str, found: impl std::fmt::Display, expected: &str) -> String {
    format!(
        "{option} {}: found {found}, expected {expected}",
        crate::text::quote_value(text)
    )
}

/// A gain bound: `30dB`, `30 dB`, or a plain ratio `31.6`.
fn gain_bound(s: &str) -> Option<f64> {
    let lower = s.to_ascii_lowercase();
    match lower.strip_suffix("db") {
        Some(db) => db
            .trim()
            .parse::<f64>()
            .ok()
            .map(|db| 10f64.powf(db / 20.0)),
        None => lower.trim().parse::<f64>().ok().filter(|x| *x >= 0.0),
    }
}

impl Requirement {
    /// Parse `text` (`spread --require`) for `chain`, whose builds are recorded in
    /// `layout`.
    pub fn parse(text: &str, chain: &Chain, layout: &Layout) -> Result<Requirement, String> {
        Requirement::parse_as("--require", text, chain, layout)
    }

    /// [`Requirement::parse`] for a command whose option is `option` (`tune --keep`),
    /// which messages name.
    pub fn parse_as(
        option: &str,
        text: &str,
        chain: &Chain,
        layout: &Layout,
    ) -> Result<Requirement, String> {
        let usage =
            |text: &str, found: String, expected: &str| usage(option, text, found, expected);
        let syntax = "QUANTITY[@ID] LOW..HIGH, e.g. \"gain 30dB..33dB\" or \"clip -10dBu..\"";
        let t = text.trim();
        let (head, range) = t
            .split_once(char::is_whitespace)
            .ok_or_else(|| usage(text, "no range".into(), syntax))?;
        let (name, id) = match head.split_once('@') {
            Some((n, id)) => (n, Some(id)),
            None => (head, None),
        };
        let stage = |id: Option<&str>| -> Result<usize, String> {
            let id =
                id.ok_or_else(|| usage(text, format!("\"{name}\" without a stage"), "NAME@STAGE"))?;
            chain.stage_index(id).ok_or_else(|| {
                let ids = name_list(chain.stages.iter().map(|s| s.id.as_str()));
                let hint = crate::text::lookalike(id, chain.stages.iter().map(|s| s.id.as_str()));
                let id = crate::text::quote(id);
                usage(text, format!("stage {id}"), &format!("one of {ids}{hint}"))
            })
        };
        let load = |id: Option<&str>| -> Result<usize, String> {
            match id {
                None => Ok(0),
                Some(id) => chain.loads.iter().position(|l| l.id == id).ok_or_else(|| {
                    let ids = name_list(chain.loads.iter().map(|l| l.id.as_str()));
                    let hint =
                        crate::text::lookalike(id, chain.loads.iter().map(|l| l.id.as_str()));
                    let id = crate::text::quote(id);
                    usage(text, format!("load {id}"), &format!("one of {ids}{hint}"))
                }),
            }
        };
        let band = |column: usize| -> Result<(usize, Bound), String> {
            if layout.band {
                Ok((column, Bound::Value(Kind::Frequency)))
            } else {
                Err(usage(
                    text,
                    format!("\"{name}\" in a run without --band"),
                    "--band, which measures every build's corners",
                ))
            }
        };
        let recorded = |column: usize, on: bool, what: &str| -> Result<usize, String> {
            if on {
                Ok(column)
            } else {
                Err(usage(
                    text,
                    format!("\"{name}\" in a run that does not record {what}"),
                    "a run measured with spread::require::measure_for",
                ))
            }
        };
        let (column, bound) = match name {
            "gain" => (layout.load_gain(load(id)?), Bound::Gain),
            "low_corner" => band(layout.low_corner(load(id)?))?,
            "high_corner" => band(layout.high_corner(load(id)?))?,
            "clip" => match id {
                None => (layout.chain_clip(), Bound::Level),
                Some(_) => (layout.clip(stage(id)?), Bound::Level),
            },
            "stage_gain" => (layout.gain(stage(id)?), Bound::Gain),
            "i_c" | "v_ce" => {
                let i = stage(id)?;
                if chain.stages[i].device.is_none() {
                    return Err(usage(
                        text,
                        format!(
                            "stage {} without a device",
                            crate::text::quote(&chain.stages[i].id)
                        ),
                        "a stage with a transistor (its I_C and V_CE) or an op-amp (its output pin's I_out and V_out)",
                    ));
                }
                if name == "i_c" {
                    (layout.i_c(i), Bound::Value(Kind::Current))
                } else {
                    (layout.v_ce(i), Bound::Value(Kind::Voltage))
                }
            }
            "dissipation" => {
                let i = stage(id)?;
                if chain.stages[i].device.is_none() || chain.device_of(i).opamp.is_some() {
                    return Err(usage(
                        text,
                        format!(
                            "stage {} without a transistor",
                            crate::text::quote(&chain.stages[i].id)
                        ),
                        "a stage with a transistor, whose dissipation V_CE·I_C + V_BE·I_B it bounds",
                    ));
                }
                let column = recorded(layout.dissipation(i), layout.dissipation, "dissipation")?;
                (column, Bound::Value(Kind::Power))
            }
            "resistor_power" => {
                let (stage_id, part) = id.and_then(|id| id.split_once('.')).ok_or_else(|| {
                    usage(text, format!("\"{head}\""), "resistor_power@STAGE.PART")
                })?;
                let i = stage(Some(stage_id))?;
                // The resistors' order is fixed by the chain's parts, not their values.
                let ev = chain.evaluate().map_err(|e| usage(text, e.to_string(), "a chain that plans"))?;
                let names = crate::stages::stage_resistor_power(chain, &ev, i);
                let slot = names.iter().position(|(n, _)| *n == part).ok_or_else(|| {
                    let known = name_list(names.iter().map(|(n, _)| *n));
                    usage(
                        text,
                        format!(
                            "no resistor {} in stage {}",
                            crate::text::quote(part),
                            crate::text::quote(stage_id)
                        ),
                        &format!("one of {known}"),
                    )
                })?;
                let column = recorded(
                    layout.resistor_power(i, slot),
                    layout.resistor_power,
                    "resistor powers",
                )?;
                (column, Bound::Value(Kind::Power))
            }
            "warnings" => {
                let kind = id.ok_or_else(|| {
                    usage(text, "\"warnings\" without a kind".into(), "warnings@KIND")
                })?;
                let k = KINDS.iter().position(|k| *k == kind).ok_or_else(|| {
                    let hint = crate::text::lookalike(kind, KINDS.iter().copied());
                    usage(
                        text,
                        format!("the warning kind {}", crate::text::quote(kind)),
                        &format!("one of {}{hint}", name_list(KINDS.iter().copied())),
                    )
                })?;
                let column = recorded(layout.warning_count(k), layout.warnings, "warnings")?;
                (column, Bound::Count)
            }
            other => {
                return Err(usage(
                    text,
                    format!("the quantity \"{other}\""),
                    "gain, clip, stage_gain, i_c, v_ce, dissipation, resistor_power, warnings, low_corner or high_corner",
                ))
            }
        };
        let (low, high) = range
            .split_once("..")
            .ok_or_else(|| usage(text, format!("\"{range}\""), "a range LOW..HIGH"))?;
        let read = |s: &str| -> Result<Option<f64>, String> {
            let s = s.trim();
            if s.is_empty() {
                return Ok(None);
            }
            let x = match bound {
                Bound::Gain => gain_bound(s).ok_or_else(|| {
                    usage(
                        text,
                        format!("\"{s}\""),
                        "a gain such as \"30dB\" or \"31.6\"",
                    )
                })?,
                Bound::Level => parse_level(s)
                    .map_err(|e| usage(text, e.found.to_string(), &e.expected))?
                    .vpeak(),
                Bound::Value(kind) => parse_value(s, kind)
                    .map_err(|e| usage(text, e.found.to_string(), &e.expected))?,
                Bound::Count => s
                    .parse::<u32>()
                    .map_err(|_| usage(text, format!("\"{s}\""), "a count such as 0 or 2"))?
                    .into(),
            };
            Ok(Some(x))
        };
        let (low, high) = (read(low)?, read(high)?);
        if low.is_none() && high.is_none() {
            return Err(usage(
                text,
                "no bound".into(),
                "at least one of LOW and HIGH",
            ));
        }
        if let (Some(a), Some(b)) = (low, high) {
            if a > b {
                return Err(usage(text, "LOW above HIGH".into(), "LOW ≤ HIGH"));
            }
        }
        Ok(Requirement {
            text: t.to_string(),
            column,
            low,
            high,
            bound,
        })
    }

    /// How far a build's record is from meeting the requirement: 0 when it does,
    /// else the distance to the nearer bound relative to that bound (∞ for a build
    /// out of its active region or a quantity not found, such as a corner).
    pub fn miss(&self, layout: &Layout, row: &[f64]) -> f64 {
        if row[layout.status()] >= 0.0 {
            return f64::INFINITY;
        }
        let x = row[self.column];
        if x.is_nan() {
            return f64::INFINITY;
        }
        let below = self
            .low
            .map_or(0.0, |l| (l - x).max(0.0) / l.abs().max(f64::MIN_POSITIVE));
        let above = self
            .high
            .map_or(0.0, |h| (x - h).max(0.0) / h.abs().max(f64::MIN_POSITIVE));
        below + above
    }

    /// How far inside its bounds a build's record lies: the smaller distance to a
    /// bound relative to that bound, negative outside (−∞ for a build out of its
    /// active region or a quantity not found).
    pub fn margin(&self, layout: &Layout, row: &[f64]) -> f64 {
        if row[layout.status()] >= 0.0 || row[self.column].is_nan() {
            return f64::NEG_INFINITY;
        }
        let x = row[self.column];
        let scale = |b: f64| b.abs().max(f64::MIN_POSITIVE);
        let above_low = self.low.map_or(f64::INFINITY, |l| (x - l) / scale(l));
        let below_high = self.high.map_or(f64::INFINITY, |h| (h - x) / scale(h));
        above_low.min(below_high)
    }

    /// A value of the requirement's quantity as a person reads it: a gain in dB, a
    /// level in dBu, a value with its unit.
    pub fn format(&self, x: f64) -> String {
        match self.bound {
            Bound::Gain => format!("{:.2} dB", 20.0 * x.log10()),
            Bound::Level => format!("{:.2} dBu", crate::units::Level::from_vpeak(x).dbu()),
            Bound::Value(kind) => crate::units::format_si(x, kind.symbol()),
            Bound::Count => format!("{x:.0} warnings"),
        }
    }

    /// The requirement's range as a person reads it, `LOW..HIGH`.
    pub fn format_range(&self) -> String {
        let side = |b: Option<f64>| b.map_or(String::new(), |x| self.format(x));
        format!("{}..{}", side(self.low), side(self.high))
    }

    /// Whether a build's record meets the requirement (a build out of its active
    /// region at DC never does).
    pub fn met(&self, layout: &Layout, row: &[f64]) -> bool {
        if row[layout.status()] >= 0.0 {
            return false;
        }
        let x = row[self.column];
        // (NaN, a corner not found, meets no bound.)
        !x.is_nan() && self.low.map_or(true, |l| x >= l) && self.high.map_or(true, |h| x <= h)
    }
}
