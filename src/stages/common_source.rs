//! Common-source JFET stage (docs/definitions.md "JFET stages"): input at the gate,
//! output at the drain, `r_drain` from the drain to the top rail, the source to the
//! bottom rail through an unbypassed `r_source` in series with `r_source_bypassed`,
//! which `c_bypass` shorts for AC. `r_bottom` alone is the self-bias gate resistor;
//! with `r_top` the two form a gate divider. A `p_jfet` hangs upside down.

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

/// The chain-file entry (`"type": "common_source"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CommonSourceSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    /// Gate to the bottom rail; alone, the self-bias gate resistor.
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    pub r_drain: ValueSpec,
    #[serde(default)]
    pub r_source: Option<ValueSpec>,
    #[serde(default)]
    pub r_source_bypassed: Option<ValueSpec>,
    #[serde(default)]
    pub c_bypass: Option<ValueSpec>,
    #[serde(default)]
    pub supply_filter: Option<SupplyFilterSpec>,
}

impl StageEntry for CommonSourceSpec {
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

/// Circuit values of a common-source stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct CommonSource {
    /// Gate bias (`r_top`, `r_bottom`).
    pub bias: BaseBias,
    pub r_drain: f64,
    /// Unbypassed source resistance (0 when absent).
    pub r_source: f64,
    /// Bypassed source resistance (0 when absent).
    pub r_source_bypassed: f64,
    pub c_bypass: Option<f64>,
    pub supply_filter: Option<SupplyFilter>,
}

impl CommonSource {
    /// The stage's resistors and capacitors by chain-file name.
    pub const PARTS: &'static [Part<CommonSource, CommonSourceSpec>] = divider_parts![
        Part {
            name: "r_drain",
            kind: Kind::Resistance,
            written: |s| Some(&s.r_drain),
            value: |k| Some(&mut k.r_drain),
        },
        Part {
            name: "r_source",
            kind: Kind::Resistance,
            written: |s| s.r_source.as_ref(),
            value: |k| (k.r_source > 0.0).then_some(&mut k.r_source),
        },
        Part {
            name: "r_source_bypassed",
            kind: Kind::Resistance,
            written: |s| s.r_source_bypassed.as_ref(),
            value: |k| (k.r_source_bypassed > 0.0).then_some(&mut k.r_source_bypassed),
        },
        Part {
            name: "c_bypass",
            kind: Kind::Capacitance,
            written: |s| s.c_bypass.as_ref(),
            value: |k| k.c_bypass.as_mut(),
        },
    ];

    pub fn build(s: &CommonSourceSpec, f: &Fields) -> Result<Self, ChainError> {
        let (r_source_bypassed, c_bypass) = f.bypass_pair(
            "r_source_bypassed",
            s.r_source_bypassed.as_ref(),
            s.c_bypass.as_ref(),
        )?;
        Ok(CommonSource {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            r_drain: f.positive("r_drain", &s.r_drain, Kind::Resistance)?,
            r_source: f
                .optional_positive("r_source", s.r_source.as_ref(), Kind::Resistance)?
                .unwrap_or(0.0),
            r_source_bypassed,
            c_bypass,
            supply_filter: SupplyFilter::read(f, s.supply_filter.as_ref())?,
        })
    }
}

impl StageModel for CommonSource {
    fn type_name(&self) -> &'static str {
        "common_source"
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    fn takes_jfet(&self) -> bool {
        true
    }

    /// Gate: `r_top` to the top rail, `r_bottom` to the bottom rail; `r_drain` from
    /// the drain to the drain's rail; the source through `r_source` to the tap and
    /// `r_source_bypassed` ∥ `c_bypass` from the tap to the source's rail (the tap is
    /// the source itself without `r_source`; without a bypassed part `r_source`, or a
    /// wire, goes straight to the rail).
    fn describe(&self, c: &mut SubCircuit, device: &Device) {
        let t = bipolar_with_divider(c, &self.bias, self.supply_filter, device);
        let (drain, source, rail) = (t.c, t.e, t.emitter_rail);
        c.output = drain;
        c.resistor("r_drain", drain, t.collector_rail, Some(self.r_drain));
        match self.c_bypass {
            None => c.resistor("r_source", source, rail, Some(self.r_source)),
            Some(c_s) => {
                let tap = if self.r_source > 0.0 {
                    let tap = c.node("source tap");
                    c.resistor("r_source", source, tap, Some(self.r_source));
                    tap
                } else {
                    source
                };
                c.resistor("r_source_bypassed", tap, rail, Some(self.r_source_bypassed));
                c.capacitor("c_bypass", "bypass capacitor", tap, rail, Some(c_s));
            }
        }
    }

    /// Region limits (docs/definitions.md: every kind but the two v1 ones).
    fn keeps_load_lines(&self) -> bool {
        false
    }

    fn swing(&self, _op: &OperatingPoint, _vce_sat: f64, _r_load: f64) -> Swing {
        Swing::NONE
    }
}
