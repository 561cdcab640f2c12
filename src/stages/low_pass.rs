//! First-order low-pass (docs/definitions.md "Passive stages"): `resistance` from the input
//! to the output, `capacitance` from the output to ground. Flat at midband (the
//! capacitor open); no device; it never clips.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::ValueSpec;
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "low_pass"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct LowPassSpec {
    pub id: String,
    pub resistance: ValueSpec,
    pub capacitance: ValueSpec,
}

/// Circuit values, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct LowPass {
    pub resistance: f64,
    pub capacitance: f64,
}

impl StageEntry for LowPassSpec {
    fn id(&self) -> &str {
        &self.id
    }
}

impl LowPass {
    /// The stage's resistor and capacitor by chain-file name.
    pub const PARTS: &'static [Part<LowPass, LowPassSpec>] = &[
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

    pub fn build(s: &LowPassSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(LowPass {
            resistance: f.positive("resistance", &s.resistance, Kind::Resistance)?,
            capacitance: f.positive("capacitance", &s.capacitance, Kind::Capacitance)?,
        })
    }
}

impl StageModel for LowPass {
    fn type_name(&self) -> &'static str {
        "low_pass"
    }

    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        c.input = c.node("input");
        c.output = c.node("output");
        c.resistor("resistance", c.input, c.output, Some(self.resistance));
        c.shunt_capacitor(
            "capacitance",
            "low-pass capacitor",
            c.output,
            GROUND,
            self.capacitance,
        );
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
