//! Source follower (docs/definitions.md "JFET stages"): input at the gate, output at
//! the source, `r_source` from the source to the bottom rail, `r_drain` (default 0: a
//! wire) from the drain to the top rail; `r_bottom` alone is the self-bias gate
//! resistor. A `p_jfet` hangs upside down.

use super::{
    bipolar_with_divider, divider_parts, BaseBias, Part, StageEntry, StageModel, SupplyFilter,
    Swing,
};
use crate::chain::{ChainError, Fields};
use crate::circuit::SubCircuit;
use crate::device::Device;
use crate::device::OperatingPoint;
use crate::spec::{RailsSpec, SupplyFilterSpec, ValueSpec};
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "source_follower"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SourceFollowerSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    /// Gate to the bottom rail; alone, the self-bias gate resistor.
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    pub r_source: ValueSpec,
    #[serde(default)]
    pub r_drain: Option<ValueSpec>,
    #[serde(default)]
    pub supply_filter: Option<SupplyFilterSpec>,
}

impl StageEntry for SourceFollowerSpec {
    fn id(&self) -> &str {
        &self.id
    }
    fn rails(&self) -> Option<&RailsSpec> {
        self.rails.as_ref()
    }
    fn device(&self) -> Option<&str> {
        Some(&self.device)
    }
}

/// Circuit values of a source follower, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceFollower {
    pub bias: BaseBias,
    pub r_source: f64,
    /// Drain resistor to the top rail (0: drain on the rail).
    pub r_drain: f64,
    pub supply_filter: Option<SupplyFilter>,
}

impl SourceFollower {
    /// The stage's resistors and capacitors by chain-file name.
    pub const PARTS: &'static [Part<SourceFollower, SourceFollowerSpec>] = divider_parts![
        Part {
            name: "r_source",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_source),
            value: |k| Some(&mut k.r_source),
        },
        Part {
            name: "r_drain",
            kind: Kind::Resistance,
            written: |s| s.r_drain.as_ref(),
            value: |k| (k.r_drain > 0.0).then_some(&mut k.r_drain),
        },
    ];

    pub fn build(s: &SourceFollowerSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(SourceFollower {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            r_source: f.positive("r_source", &s.r_source, Kind::Resistance)?,
            r_drain: f
                .optional_non_negative("r_drain", s.r_drain.as_ref(), Kind::Resistance)?
                .unwrap_or(0.0),
            supply_filter: SupplyFilter::read(f, s.supply_filter.as_ref())?,
        })
    }
}

impl StageModel for SourceFollower {
    fn type_name(&self) -> &'static str {
        "source_follower"
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    fn takes_jfet(&self) -> bool {
        true
    }

    /// Gate: `r_top` to the top rail, `r_bottom` to the bottom rail; `r_source` from
    /// the source (the output) to the source's rail; `r_drain` from the drain to the
    /// drain's rail (0 Ω: a wire).
    fn describe(&self, c: &mut SubCircuit, device: &Device) {
        let t = bipolar_with_divider(c, &self.bias, self.supply_filter, device);
        c.output = t.e;
        c.resistor("r_source", t.e, t.emitter_rail, Some(self.r_source));
        c.resistor("r_drain", t.c, t.collector_rail, Some(self.r_drain));
    }

    /// Region limits (docs/definitions.md: every kind but the two v1 ones).
    fn keeps_load_lines(&self) -> bool {
        false
    }

    fn swing(&self, _op: &OperatingPoint, _vce_sat: f64, _r_load: f64) -> Swing {
        Swing::NONE
    }
}
