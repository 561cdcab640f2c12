//! Common-base stage: input at the emitter, output at the collector, the base held at
//! AC ground by `c_base` and biased by its divider (docs/definitions.md "Rails, PNP, new BJT
//! kinds"). `r_emitter` may be left out when the emitter is direct-coupled from a
//! driver that carries its current (the upper transistor of a cascode).

use super::{
    bipolar_with_divider, divider_parts, BaseBias, Part, StageEntry, StageModel, SupplyFilter,
    Swing,
};
use crate::chain::{ChainError, Fields};
use crate::circuit::{SubCircuit, GROUND};
use crate::device::{Device, OperatingPoint};
use crate::spec::{RailsSpec, SupplyFilterSpec, ValueSpec};
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "common_base"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CommonBaseSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    pub c_base: ValueSpec,
    /// Optional only when the collector feeds another common-base emitter directly
    /// (checked in graph.rs: the collector needs a DC path).
    #[serde(default)]
    pub r_collector: Option<ValueSpec>,
    #[serde(default)]
    pub r_emitter: Option<ValueSpec>,
    #[serde(default)]
    pub supply_filter: Option<SupplyFilterSpec>,
}

impl StageEntry for CommonBaseSpec {
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

/// Circuit values of a common-base stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct CommonBase {
    pub bias: BaseBias,
    /// Base to AC ground.
    pub c_base: f64,
    /// `None`: the collector feeds another common-base emitter directly.
    pub r_collector: Option<f64>,
    /// Emitter to its rail (`None`: the emitter's DC path is the driver's).
    pub r_emitter: Option<f64>,
    pub supply_filter: Option<SupplyFilter>,
}

impl CommonBase {
    /// The stage's resistors and capacitors by chain-file name (`spread`'s tolerances,
    /// `bias`'s knobs): where the file writes each and where the stage keeps its value.
    pub const PARTS: &'static [Part<CommonBase, CommonBaseSpec>] = divider_parts![
        Part {
            name: "r_collector",
            kind: Kind::Resistance,
            written: |s| s.r_collector.as_ref(),
            value: |k| k.r_collector.as_mut(),
        },
        Part {
            name: "r_emitter",
            kind: Kind::Resistance,
            written: |s| s.r_emitter.as_ref(),
            value: |k| k.r_emitter.as_mut(),
        },
        Part {
            name: "c_base",
            kind: Kind::Capacitance,
            written: |s| Some(&s.c_base),
            value: |k| Some(&mut k.c_base),
        },
    ];

    pub fn build(s: &CommonBaseSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(CommonBase {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            c_base: f.positive("c_base", &s.c_base, Kind::Capacitance)?,
            r_collector: f.optional_positive(
                "r_collector",
                s.r_collector.as_ref(),
                Kind::Resistance,
            )?,
            r_emitter: f.optional_positive("r_emitter", s.r_emitter.as_ref(), Kind::Resistance)?,
            supply_filter: SupplyFilter::read(f, s.supply_filter.as_ref())?,
        })
    }
}

impl StageModel for CommonBase {
    fn type_name(&self) -> &'static str {
        "common_base"
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    /// The divider on the base with `c_base` from the base to ground; the input at the
    /// emitter, `r_emitter` from it to the emitter-side rail; the output at the
    /// collector, `r_collector` to the collector-side rail.
    fn describe(&self, c: &mut SubCircuit, device: &Device) {
        let t = bipolar_with_divider(c, &self.bias, self.supply_filter, device);
        c.input = t.e;
        c.output = t.c;
        c.capacitor("c_base", "base capacitor", t.b, GROUND, Some(self.c_base));
        c.resistor("r_emitter", t.e, t.emitter_rail, self.r_emitter);
        c.resistor("r_collector", t.c, t.collector_rail, self.r_collector);
    }

    /// A common-base stage has no load-line formula of v1: its limits are the region
    /// limits of its transistor (docs/definitions.md), which `headroom` computes.
    fn keeps_load_lines(&self) -> bool {
        false
    }

    fn swing(&self, _op: &OperatingPoint, _vce_sat: f64, _r_load: f64) -> Swing {
        Swing::NONE
    }
}
