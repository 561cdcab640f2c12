//! Emitter follower: input at the base, output at the emitter, `r_emitter` from the
//! emitter to ground, optional `r_collector` from the collector to the supply.

use super::{
    bipolar_with_divider, divider_parts, parallel, BaseBias, Part, StageEntry, StageModel,
    SupplyFilter, Swing, Toward,
};
use crate::chain::{ChainError, Fields};
use crate::circuit::SubCircuit;
use crate::device::Device;
use crate::device::OperatingPoint;
use crate::spec::{RailsSpec, SupplyFilterSpec, ValueSpec};
use crate::units::Kind;
use serde::Deserialize;

/// The chain-file entry (`"type": "emitter_follower"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct EmitterFollowerSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    pub r_emitter: ValueSpec,
    #[serde(default)]
    pub r_collector: Option<ValueSpec>,
    #[serde(default)]
    pub supply_filter: Option<SupplyFilterSpec>,
}

impl StageEntry for EmitterFollowerSpec {
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

/// Circuit values of an emitter follower, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct EmitterFollower {
    pub bias: BaseBias,
    pub r_emitter: f64,
    /// Collector resistor to the supply (0: collector on the supply).
    pub r_collector: f64,
    pub supply_filter: Option<SupplyFilter>,
}

impl EmitterFollower {
    /// The stage's resistors and capacitors by chain-file name (`spread`'s tolerances,
    /// `bias`'s knobs): where the file writes each and where the stage keeps its value.
    pub const PARTS: &'static [Part<EmitterFollower, EmitterFollowerSpec>] = divider_parts![
        Part {
            name: "r_emitter",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_emitter),
            value: |k| Some(&mut k.r_emitter),
        },
        Part {
            name: "r_collector",
            kind: Kind::Resistance,
            written: |s| s.r_collector.as_ref(),
            value: |k| (k.r_collector > 0.0).then_some(&mut k.r_collector),
        },
    ];

    pub fn build(s: &EmitterFollowerSpec, f: &Fields) -> Result<Self, ChainError> {
        Ok(EmitterFollower {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            r_emitter: f.positive("r_emitter", &s.r_emitter, Kind::Resistance)?,
            r_collector: f
                .optional_non_negative("r_collector", s.r_collector.as_ref(), Kind::Resistance)?
                .unwrap_or(0.0),
            supply_filter: SupplyFilter::read(f, s.supply_filter.as_ref())?,
        })
    }
}

impl StageModel for EmitterFollower {
    fn type_name(&self) -> &'static str {
        "emitter_follower"
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    /// Base: `r_top` to the top rail, `r_bottom` to the bottom rail; `r_emitter` from
    /// the emitter (the output) to the bottom rail; `r_collector` from the collector to
    /// the top rail (0 Ω: a wire, the collector on the rail).
    fn describe(&self, c: &mut SubCircuit, device: &Device) {
        let t = bipolar_with_divider(c, &self.bias, self.supply_filter, device);
        c.output = t.e;
        c.resistor("r_emitter", t.e, t.emitter_rail, Some(self.r_emitter));
        c.resistor("r_collector", t.c, t.collector_rail, Some(self.r_collector));
    }

    /// docs/definitions.md: R_E,ac = R_E ∥ load; toward cutoff the emitter falls by I_EQ·R_E,ac,
    /// toward saturation it rises by (V_CEQ − V_CE,sat)·R_E,ac/(α·R_C + R_E,ac).
    fn swing(&self, op: &OperatingPoint, vce_sat: f64, r_load: f64) -> Swing {
        let r_e_ac = parallel(self.r_emitter, r_load);
        let alpha = op.alpha();
        Swing {
            limit_up: (op.v_ce - vce_sat) * r_e_ac / (alpha * self.r_collector + r_e_ac),
            up_toward: Toward::Saturation,
            limit_down: op.i_e * r_e_ac,
            down_toward: Toward::Cutoff,
            r_line: self.r_collector + r_e_ac / alpha,
        }
    }
}
