//! Common-emitter stage: input at the base, output at the collector, emitter to ground
//! through an unbypassed resistor `r_emitter` in series with `r_emitter_bypassed`,
//! which `c_bypass` shorts for AC. Without `r_collector` the collector feeds a
//! common-base emitter directly: the lower transistor of a cascode.

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

/// The chain-file entry (`"type": "common_emitter"`).
#[derive(Debug, Clone, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CommonEmitterSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub rails: Option<RailsSpec>,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    /// Optional only when the collector is direct-coupled into a `common_base`
    /// emitter (the cascode; checked in graph.rs).
    #[serde(default)]
    pub r_collector: Option<ValueSpec>,
    #[serde(default)]
    pub r_emitter: Option<ValueSpec>,
    #[serde(default)]
    pub r_emitter_bypassed: Option<ValueSpec>,
    #[serde(default)]
    pub c_bypass: Option<ValueSpec>,
    /// Collector-to-base feedback resistor (DC and AC); with it `r_top` and
    /// `r_bottom` may be left out even when the input is capacitor-coupled.
    #[serde(default)]
    pub r_feedback: Option<ValueSpec>,
    #[serde(default)]
    pub supply_filter: Option<SupplyFilterSpec>,
}

impl StageEntry for CommonEmitterSpec {
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

/// Circuit values of a common-emitter stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct CommonEmitter {
    pub bias: BaseBias,
    /// `None`: the collector feeds a common-base emitter directly (a cascode).
    pub r_collector: Option<f64>,
    /// Unbypassed emitter resistance R_E1 (0 when absent).
    pub r_emitter: f64,
    /// Bypassed emitter resistance R_E2 (0 when absent).
    pub r_emitter_bypassed: f64,
    /// Bypass capacitor across R_E2.
    pub c_bypass: Option<f64>,
    /// Collector-to-base feedback resistor R_F.
    pub r_feedback: Option<f64>,
    pub supply_filter: Option<SupplyFilter>,
}

impl CommonEmitter {
    /// The stage's resistors and capacitors by chain-file name (`spread`'s tolerances,
    /// `bias`'s knobs): where the file writes each and where the stage keeps its value.
    pub const PARTS: &'static [Part<CommonEmitter, CommonEmitterSpec>] = divider_parts![
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
            value: |k| (k.r_emitter > 0.0).then_some(&mut k.r_emitter),
        },
        Part {
            name: "r_emitter_bypassed",
            kind: Kind::Resistance,
            written: |s| s.r_emitter_bypassed.as_ref(),
            value: |k| (k.r_emitter_bypassed > 0.0).then_some(&mut k.r_emitter_bypassed),
        },
        Part {
            name: "c_bypass",
            kind: Kind::Capacitance,
            written: |s| s.c_bypass.as_ref(),
            value: |k| k.c_bypass.as_mut(),
        },
        Part {
            name: "r_feedback",
            kind: Kind::Resistance,
            written: |s| s.r_feedback.as_ref(),
            value: |k| k.r_feedback.as_mut(),
        },
    ];

    pub fn build(s: &CommonEmitterSpec, f: &Fields) -> Result<Self, ChainError> {
        let (r_emitter_bypassed, c_bypass) = f.bypass_pair(
            "r_emitter_bypassed",
            s.r_emitter_bypassed.as_ref(),
            s.c_bypass.as_ref(),
        )?;
        Ok(CommonEmitter {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            r_collector: f.optional_positive(
                "r_collector",
                s.r_collector.as_ref(),
                Kind::Resistance,
            )?,
            r_emitter: f
                .optional_positive("r_emitter", s.r_emitter.as_ref(), Kind::Resistance)?
                .unwrap_or(0.0),
            r_emitter_bypassed,
            c_bypass,
            r_feedback: f.optional_positive(
                "r_feedback",
                s.r_feedback.as_ref(),
                Kind::Resistance,
            )?,
            supply_filter: SupplyFilter::read(f, s.supply_filter.as_ref())?,
        })
    }
}

impl StageModel for CommonEmitter {
    fn type_name(&self) -> &'static str {
        "common_emitter"
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    /// Base: `r_top` to the top rail, `r_bottom` to the bottom rail; `r_collector`
    /// from the collector to the top rail; the emitter through `r_emitter` to the tap,
    /// and `r_emitter_bypassed` ∥ `c_bypass` from the tap to the bottom rail (the tap
    /// is the emitter itself when `r_emitter` is absent; without a bypassed part
    /// `r_emitter`, or a wire, goes straight to the bottom rail).
    fn describe(&self, c: &mut SubCircuit, device: &Device) {
        let t = bipolar_with_divider(c, &self.bias, self.supply_filter, device);
        let (col, e, rail) = (t.c, t.e, t.emitter_rail);
        c.output = col;
        c.resistor("r_collector", col, t.collector_rail, self.r_collector);
        c.resistor("r_feedback", col, t.b, self.r_feedback);
        match self.c_bypass {
            None => c.resistor("r_emitter", e, rail, Some(self.r_emitter)),
            Some(c_e) => {
                let tap = if self.r_emitter > 0.0 {
                    let tap = c.node("emitter tap");
                    c.resistor("r_emitter", e, tap, Some(self.r_emitter));
                    tap
                } else {
                    e
                };
                c.resistor(
                    "r_emitter_bypassed",
                    tap,
                    rail,
                    Some(self.r_emitter_bypassed),
                );
                c.capacitor("c_bypass", "bypass capacitor", tap, rail, Some(c_e));
            }
        }
    }

    /// Collector-to-base feedback couples the stage's input and output, and a
    /// cascode's lower collector has no resistor of its own: their limits are the
    /// region limits (docs/definitions.md).
    fn keeps_load_lines(&self) -> bool {
        self.r_feedback.is_none() && self.r_collector.is_some()
    }

    /// docs/definitions.md: R_ac = R_C ∥ load, R_E,ac = unbypassed emitter resistance, α = I_C/I_E;
    /// toward cutoff the collector rises by I_CQ·R_ac, toward saturation it falls by
    /// (V_CEQ − V_CE,sat)·R_ac/(R_ac + R_E,ac/α).
    fn swing(&self, op: &OperatingPoint, vce_sat: f64, r_load: f64) -> Swing {
        let Some(r_collector) = self.r_collector else {
            return Swing::NONE;
        };
        let r_ac = parallel(r_collector, r_load);
        let r_line = r_ac + self.r_emitter / op.alpha();
        Swing {
            limit_up: op.i_c * r_ac,
            up_toward: Toward::Cutoff,
            limit_down: (op.v_ce - vce_sat) * r_ac / r_line,
            down_toward: Toward::Saturation,
            r_line,
        }
    }
}
