//! Attenuator pad (docs/definitions.md "Passive stages"): `r_series` from the input to
//! the output, `r_shunt` from the output to ground. No device; it never clips.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::ValueSpec;
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "attenuator"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct AttenuatorSpec {
    pub id: String,
    pub r_series: ValueSpec,
    pub r_shunt: ValueSpec,
}

/// Circuit values of an attenuator, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct Attenuator {
    pub r_series: f64,
    pub r_shunt: f64,
}

impl StageEntry for AttenuatorSpec {
    fn id(&self) -> &str {
        &self.id
    }
}

impl Attenuator {
    /// The stage's resistors by chain-file name.
    pub const PARTS: &'static [Part<Attenuator, AttenuatorSpec>] = &[
        Part {
            name: "r_series",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_series),
            value: |k| Some(&mut k.r_series),
        },
        Part {
            name: "r_shunt",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_shunt),
            value: |k| Some(&mut k.r_shunt),
        },
    ];

    pub fn build(s: &AttenuatorSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(Attenuator {
            r_series: f.positive("r_series", &s.r_series, Kind::Resistance)?,
            r_shunt: f.positive("r_shunt", &s.r_shunt, Kind::Resistance)?,
        })
    }
}

impl StageModel for Attenuator {
    fn type_name(&self) -> &'static str {
        "attenuator"
    }

    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        c.input = c.node("input");
        c.output = c.node("output");
        c.resistor("r_series", c.input, c.output, Some(self.r_series));
        c.resistor("r_shunt", c.output, GROUND, Some(self.r_shunt));
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
