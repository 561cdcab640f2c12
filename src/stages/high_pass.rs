//! First-order high-pass (docs/definitions.md "Passive stages"): `capacitance` from the
//! input to the output, `resistance` from the output to ground. Flat at midband (the
//! capacitor a short); no device; it never clips.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::ValueSpec;
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "high_pass"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct HighPassSpec {
    pub id: String,
    pub resistance: ValueSpec,
    pub capacitance: ValueSpec,
}

/// Circuit values, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct HighPass {
    pub resistance: f64,
    pub capacitance: f64,
}

impl StageEntry for HighPassSpec {
    fn id(&self) -> &str {
        &self.id
    }
}

impl HighPass {
    /// The stage's resistor and capacitor by chain-file name.
    pub const PARTS: &'static [Part<HighPass, HighPassSpec>] = &[
        Part {
            name: "resistance",
            kind: Kind::Resistance,
            written: |s| Some(&s.resistance),
            value: |k| Some(&mut k.resistance),
        },
        Part {
            name: "capacitance",
            kind: Kind::Capacitance,
            written: |s| Some(&s.capacitance),
            value: |k| Some(&mut k.capacitance),
        },
    ];

    pub fn build(s: &HighPassSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(HighPass {
            resistance: f.positive("resistance", &s.resistance, Kind::Resistance)?,
            capacitance: f.positive("capacitance", &s.capacitance, Kind::Capacitance)?,
        })
    }
}

impl StageModel for HighPass {
    fn type_name(&self) -> &'static str {
        "high_pass"
    }

    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        c.input = c.node("input");
        c.output = c.node("output");
        c.capacitor(
            "capacitance",
            "high-pass capacitor",
            c.input,
            c.output,
            Some(self.capacitance),
        );
        c.resistor("resistance", c.output, GROUND, Some(self.resistance));
    }

    fn bias(&self) -> BaseBias {
        BaseBias::NONE
    }

    fn swing(&self, _: &OperatingPoint, _: f64, _: f64) -> Swing {
        Swing::NONE
    }

    fn keeps_load_lines(&self) -> bool {
        false
    }
}
