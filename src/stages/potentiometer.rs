//! Potentiometer as a volume control (docs/definitions.md "Passive stages"): the
//! track's upper part R·(1 − a) from the input to the wiper (the output), its lower
//! part R·a from the wiper to ground, with a from `position` and `taper`. No device;
//! it never clips.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::ValueSpec;
use crate::units::Kind;
use serde::Deserialize;

/// How the track's resistance follows the knob.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Taper {
    /// a = position.
    #[default]
    Linear,
    /// a = (100^position − 1)/99: a model of a logarithmic track, not a standard.
    Audio,
}

impl Taper {
    /// The chain file's name of the taper.
    pub fn name(self) -> &'static str {
        match self {
            Taper::Linear => "linear",
            Taper::Audio => "audio",
        }
    }

    /// The fraction a of the track below the wiper at knob `position` (0…1).
    pub fn fraction(self, position: f64) -> f64 {
        match self {
            Taper::Linear => position,
            Taper::Audio => (100f64.powf(position) - 1.0) / 99.0,
        }
    }
}

/// The chain-file entry (`"type": "potentiometer"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PotentiometerSpec {
    pub id: String,
    /// The whole track.
    pub resistance: ValueSpec,
    /// The knob, 0 (wiper at ground) to 1 (wiper at the input).
    pub position: ValueSpec,
    /// `"linear"` (default) or `"audio"`.
    #[serde(default)]
    pub taper: Option<String>,
}

/// Circuit values: the track R, the knob position and the taper.
#[derive(Debug, Clone, PartialEq)]
pub struct Potentiometer {
    pub resistance: f64,
    pub position: f64,
    pub taper: Taper,
}

impl StageEntry for PotentiometerSpec {
    fn id(&self) -> &str {
        &self.id
    }
}

impl Potentiometer {
    /// The track by chain-file name (its tolerance spreads the whole track; the
    /// position stays).
    pub const PARTS: &'static [Part<Potentiometer, PotentiometerSpec>] = &[Part {
        name: "resistance",
        kind: Kind::Resistance,
        written: |s| Some(&s.resistance),
        value: |k| Some(&mut k.resistance),
    }];

    pub fn build(s: &PotentiometerSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(Potentiometer {
            resistance: f.positive("resistance", &s.resistance, Kind::Resistance)?,
            position: f.fraction("position", &s.position)?,
            taper: match s.taper.as_deref() {
                None | Some("linear") => Taper::Linear,
                Some("audio") => Taper::Audio,
                Some(other) => {
                    return Err(f.invalid(
                        "taper",
                        crate::text::quote(other),
                        "\"linear\" or \"audio\"",
                    ))
                }
            },
        })
    }

    /// R·(1 − a) and R·a, the track above and below the wiper.
    pub fn halves(&self) -> (f64, f64) {
        let a = self.taper.fraction(self.position);
        (self.resistance * (1.0 - a), self.resistance * a)
    }
}

impl StageModel for Potentiometer {
    fn type_name(&self) -> &'static str {
        "potentiometer"
    }

    /// A half of 0 Ω is a wire (the wiper at an end of the track).
    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        let (upper, lower) = self.halves();
        c.input = c.node("input");
        c.output = c.node("wiper");
        c.resistor("resistance_upper", c.input, c.output, Some(upper));
        c.resistor("resistance_lower", c.output, GROUND, Some(lower));
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
