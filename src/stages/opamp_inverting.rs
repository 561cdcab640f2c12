//! Inverting op-amp stage (docs/definitions.md "Op-amp wiring"): the input is the free
//! end of `r_input`, whose other end is −; `r_feedback` from the output pin to −; + tied
//! to `reference`. Gain −r_feedback/r_input with an ideal op-amp.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::opamp::{OpAmpNetwork, Pin};
use crate::circuit::SubCircuit;
use crate::device::{Device, OperatingPoint};
use crate::spec::{RailsSpec, ValueSpec};
use crate::units::Kind;
use arrayvec::ArrayVec;
use serde::Deserialize;

/// The chain-file entry (`"type": "opamp_inverting"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OpampInvertingSpec {
    pub id: String,
    pub device: String,
    /// Input to −.
    pub r_input: ValueSpec,
    /// Output to −.
    pub r_feedback: ValueSpec,
    /// A rail name or a voltage (default ground); + is tied to it.
    #[serde(default)]
    pub reference: Option<ValueSpec>,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
}

/// Circuit values of an inverting stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct OpampInverting {
    pub r_input: f64,
    pub r_feedback: f64,
}

impl StageEntry for OpampInvertingSpec {
    fn id(&self) -> &str {
        &self.id
    }
    fn rails(&self) -> Option<&RailsSpec> {
        self.rails.as_ref()
    }
    fn device(&self) -> Option<&str> {
        Some(&self.device)
    }
    fn reference(&self) -> Option<&ValueSpec> {
        self.reference.as_ref()
    }
}

impl OpampInverting {
    /// The stage's resistors by chain-file name.
    pub const PARTS: &'static [Part<OpampInverting, OpampInvertingSpec>] = &[
        Part {
            name: "r_input",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_input),
            value: |k| Some(&mut k.r_input),
        },
        Part {
            name: "r_feedback",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_feedback),
            value: |k| Some(&mut k.r_feedback),
        },
    ];

    pub fn build(s: &OpampInvertingSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(OpampInverting {
            r_input: f.positive("r_input", &s.r_input, Kind::Resistance)?,
            r_feedback: f.positive("r_feedback", &s.r_feedback, Kind::Resistance)?,
        })
    }
}

impl StageModel for OpampInverting {
    fn type_name(&self) -> &'static str {
        "opamp_inverting"
    }

    /// The resistors (the op-amp itself is not a sub-circuit device: its network is
    /// [`StageModel::opamp_network`]).
    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        c.input = c.node("input");
        let minus = c.node("minus");
        c.output = c.node("output");
        c.resistor("r_input", c.input, minus, Some(self.r_input));
        c.resistor("r_feedback", c.output, minus, Some(self.r_feedback));
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

    fn takes_opamp(&self) -> bool {
        true
    }

    /// Nodes: 0 = input, 1 = −, 2 = output pin; + is the reference.
    fn opamp_network(&self) -> Option<OpAmpNetwork> {
        let mut resistors = ArrayVec::new();
        resistors.push(("r_input", Pin::Node(0), Pin::Node(1), self.r_input));
        resistors.push(("r_feedback", Pin::Node(2), Pin::Node(1), self.r_feedback));
        Some(OpAmpNetwork {
            n: 3,
            resistors,
            input: 0,
            plus: Pin::Reference,
            minus: Pin::Node(1),
            output: 2,
        })
    }
}
