//! Non-inverting op-amp stage (docs/definitions.md "Op-amp wiring"): the input is the
//! plus input, `r_bias` from plus to `reference`, `r_ground` from minus to
//! `reference`, `r_feedback` from the output pin to minus (absent: a wire, a
//! follower). Gain (1 + r_feedback/r_ground) with an ideal op-amp.

use super::{BaseBias, Part, StageEntry, StageModel, Swing};
use crate::chain::{ChainError, Fields};
use crate::circuit::opamp::{OpAmpNetwork, Pin};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::{RailsSpec, ValueSpec};
use crate::units::Kind;
use arrayvec::ArrayVec;
use serde::Deserialize;

/// The chain-file entry (`"type": "opamp_noninverting"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OpampNoninvertingSpec {
    pub id: String,
    pub device: String,
    /// Output to − (absent: a wire, the follower).
    #[serde(default)]
    pub r_feedback: Option<ValueSpec>,
    /// − to `reference` (absent: the follower's gain of one).
    #[serde(default)]
    pub r_ground: Option<ValueSpec>,
    /// + to `reference` (absent: + takes its DC level from its driver).
    #[serde(default)]
    pub r_bias: Option<ValueSpec>,
    /// A rail name or a voltage (default ground).
    #[serde(default)]
    pub reference: Option<ValueSpec>,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
}

/// Circuit values of a non-inverting stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct OpampNoninverting {
    pub r_feedback: Option<f64>,
    pub r_ground: Option<f64>,
    pub r_bias: Option<f64>,
}

impl StageEntry for OpampNoninvertingSpec {
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

impl OpampNoninverting {
    /// The stage's resistors by chain-file name.
    pub const PARTS: &'static [Part<OpampNoninverting, OpampNoninvertingSpec>] = &[
        Part {
            name: "r_feedback",
            kind: Kind::Resistance,
            written: |s| s.r_feedback.as_ref(),
            value: |k| k.r_feedback.as_mut(),
        },
        Part {
            name: "r_ground",
            kind: Kind::Resistance,
            written: |s| s.r_ground.as_ref(),
            value: |k| k.r_ground.as_mut(),
        },
        Part {
            name: "r_bias",
            kind: Kind::Resistance,
            written: |s| s.r_bias.as_ref(),
            value: |k| k.r_bias.as_mut(),
        },
    ];

    pub fn build(s: &OpampNoninvertingSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(OpampNoninverting {
            r_feedback: f.optional_positive(
                "r_feedback",
                s.r_feedback.as_ref(),
                Kind::Resistance,
            )?,
            r_ground: f.optional_positive("r_ground", s.r_ground.as_ref(), Kind::Resistance)?,
            r_bias: f.optional_positive("r_bias", s.r_bias.as_ref(), Kind::Resistance)?,
        })
    }
}

impl StageModel for OpampNoninverting {
    fn type_name(&self) -> &'static str {
        "opamp_noninverting"
    }

    /// The resistors at AC (the reference is AC ground); the op-amp itself is not a
    /// sub-circuit device: its network is [`StageModel::opamp_network`].
    fn describe(&self, c: &mut SubCircuit, _: &Device) {
        c.input = c.node("plus");
        c.output = c.node("output");
        let minus = match self.r_feedback {
            Some(_) => c.node("minus"),
            None => c.output,
        };
        c.resistor("r_feedback", c.output, minus, self.r_feedback);
        c.resistor("r_ground", minus, GROUND, self.r_ground);
        c.resistor("r_bias", c.input, GROUND, self.r_bias);
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

    /// Nodes: 0 = + (the input), 1 = output pin, 2 = − (the output itself in a
    /// follower).
    fn opamp_network(&self) -> Option<OpAmpNetwork> {
        let minus = if self.r_feedback.is_some() { 2 } else { 1 };
        let mut resistors = ArrayVec::new();
        let mut add = |name, a, b, r: Option<f64>| {
            if let Some(r) = r {
                resistors.push((name, a, b, r));
            }
        };
        add(
            "r_feedback",
            Pin::Node(1),
            Pin::Node(minus),
            self.r_feedback,
        );
        add("r_ground", Pin::Node(minus), Pin::Reference, self.r_ground);
        add("r_bias", Pin::Node(0), Pin::Reference, self.r_bias);
        Some(OpAmpNetwork {
            n: minus + 1,
            resistors,
            input: 0,
            plus: Pin::Node(0),
            minus: Pin::Node(minus),
            output: 1,
        })
    }
}
