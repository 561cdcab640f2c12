//! Stage kinds. Each kind lives in its own file and provides the same small set of
//! things (the [`StageModel`] trait): its chain-file entry, its DC networks, its
//! small-signal two-port terminations and its swing limits. Adding a kind means a new
//! file and one line in each of the two enums below (the registration point).

mod common_emitter;
mod emitter_follower;

pub use common_emitter::{CommonEmitter, CommonEmitterSpec};
pub use emitter_follower::{EmitterFollower, EmitterFollowerSpec};

use crate::chain::{ChainError, Fields};
use crate::device::OperatingPoint;
use crate::network::{Freq, OutputTerminal, Termination, Thevenin};
use crate::spec::ValueSpec;
use crate::units::Kind;
use num_complex::Complex64;
use serde::Deserialize;

/// One stage as written in the chain file; the `type` key chooses the kind.
#[derive(Debug, Clone, Deserialize)]
#[serde(tag = "type", rename_all = "snake_case")]
pub enum StageSpec {
    CommonEmitter(CommonEmitterSpec),
    EmitterFollower(EmitterFollowerSpec),
}

/// A validated stage's circuit values, by kind.
#[derive(Debug, Clone, PartialEq)]
pub enum StageKind {
    CommonEmitter(CommonEmitter),
    EmitterFollower(EmitterFollower),
}

impl StageSpec {
    pub fn id(&self) -> &str {
        match self {
            StageSpec::CommonEmitter(s) => &s.id,
            StageSpec::EmitterFollower(s) => &s.id,
        }
    }
    pub fn device(&self) -> &str {
        match self {
            StageSpec::CommonEmitter(s) => &s.device,
            StageSpec::EmitterFollower(s) => &s.device,
        }
    }
    /// What the file gives for part `i` of [`StageKind::parts`].
    pub fn part(&self, i: usize) -> Option<&ValueSpec> {
        match self {
            StageSpec::CommonEmitter(s) => s.part(i),
            StageSpec::EmitterFollower(s) => s.part(i),
        }
    }
    /// Read the values, checking units and ranges; `fields` names the JSON path.
    pub fn build(&self, fields: &Fields) -> Result<StageKind, ChainError> {
        Ok(match self {
            StageSpec::CommonEmitter(s) => {
                StageKind::CommonEmitter(CommonEmitter::build(s, fields)?)
            }
            StageSpec::EmitterFollower(s) => {
                StageKind::EmitterFollower(EmitterFollower::build(s, fields)?)
            }
        })
    }
}

impl StageKind {
    /// The kind's model behind the common interface.
    pub fn model(&self) -> &dyn StageModel {
        match self {
            StageKind::CommonEmitter(s) => s,
            StageKind::EmitterFollower(s) => s,
        }
    }
    /// The kind's resistors and capacitors by chain-file name (for tolerances).
    pub fn parts(&self) -> &'static [(&'static str, Kind)] {
        match self {
            StageKind::CommonEmitter(_) => CommonEmitter::PARTS,
            StageKind::EmitterFollower(_) => EmitterFollower::PARTS,
        }
    }
    /// The value of part `i` of [`StageKind::parts`]; `None` when this stage lacks it.
    pub fn part_mut(&mut self, i: usize) -> Option<&mut f64> {
        match self {
            StageKind::CommonEmitter(s) => s.part_mut(i),
            StageKind::EmitterFollower(s) => s.part_mut(i),
        }
    }
    /// The value of the part named `key` (a chain-file key of [`StageKind::parts`]);
    /// `None` when the kind has no such part or this stage lacks it.
    pub fn part_value(&self, key: &str) -> Option<f64> {
        let i = self.parts().iter().position(|(name, _)| *name == key)?;
        self.clone().part_mut(i).map(|x| *x)
    }
    /// Set the part named `key` to `x`; false (nothing changed) when the kind has no
    /// such part or this stage lacks it.
    pub fn set_part(&mut self, key: &str, x: f64) -> bool {
        let Some(i) = self.parts().iter().position(|(name, _)| *name == key) else {
            return false;
        };
        match self.part_mut(i) {
            Some(v) => {
                *v = x;
                true
            }
            None => false,
        }
    }
}

/// The base bias network: `r_top` from base to the supply, `r_bottom` from base to ground.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BaseBias {
    pub r_top: Option<f64>,
    pub r_bottom: Option<f64>,
}

impl BaseBias {
    /// Read `r_top` and `r_bottom` of a stage entry (each optional: a direct-coupled
    /// base may do without), naming the path in errors.
    pub fn read(
        f: &Fields,
        r_top: Option<&ValueSpec>,
        r_bottom: Option<&ValueSpec>,
    ) -> Result<BaseBias, ChainError> {
        Ok(BaseBias {
            r_top: f.optional_positive("r_top", r_top, Kind::Resistance)?,
            r_bottom: f.optional_positive("r_bottom", r_bottom, Kind::Resistance)?,
        })
    }
    /// Thevenin equivalent of the divider alone.
    pub fn thevenin(&self, v_cc: f64) -> Thevenin {
        Thevenin::resistor_to(self.r_top, v_cc).parallel(Thevenin::resistor_to(self.r_bottom, 0.0))
    }
    /// Small-signal conductance to AC ground (the supply is AC ground).
    pub fn conductance(&self) -> f64 {
        self.r_top.map_or(0.0, |r| 1.0 / r) + self.r_bottom.map_or(0.0, |r| 1.0 / r)
    }
    /// Current drawn from the base node by the divider at base voltage `v_b`.
    pub fn current(&self, v_b: f64, v_cc: f64) -> f64 {
        self.r_top.map_or(0.0, |r| (v_b - v_cc) / r) + self.r_bottom.map_or(0.0, |r| v_b / r)
    }
    pub fn is_present(&self) -> bool {
        self.r_top.is_some() || self.r_bottom.is_some()
    }
}

/// Which way the output moves when the stage clips.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Toward {
    Saturation,
    Cutoff,
}

impl std::fmt::Display for Toward {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Toward::Saturation => "saturation",
            Toward::Cutoff => "cutoff",
        })
    }
}

/// Output swing limits (peak volts at the output node) on the AC load line.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Swing {
    /// Largest rise of the output node, and which limit it meets.
    pub limit_up: f64,
    pub up_toward: Toward,
    /// Largest fall of the output node, and which limit it meets.
    pub limit_down: f64,
    pub down_toward: Toward,
    /// AC load line: V_CE changes by −R_line per ampere of collector current.
    pub r_line: f64,
}

impl Swing {
    /// The smaller limit and its side.
    pub fn limiting(&self) -> (f64, Toward) {
        if self.limit_up <= self.limit_down {
            (self.limit_up, self.up_toward)
        } else {
            (self.limit_down, self.down_toward)
        }
    }
}

/// DC networks on the emitter and the collector of a stage's transistor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DcTerminals {
    pub emitter: Thevenin,
    pub collector: Thevenin,
}

/// Small-signal terminations of a stage's own elements.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AcTerminals {
    /// Admittance of the stage's own elements from the output node to AC ground.
    pub y_output: Complex64,
    /// The transistor terminal that is neither input nor output.
    pub third: Termination,
}

/// A node of a stage's own small-signal network. The supply is AC ground.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LocalNode {
    Ground,
    Base,
    Collector,
    Emitter,
    /// A node inside the stage's own network (e.g. between two emitter resistors).
    Inner(usize),
}

/// One element of a stage's own small-signal network.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LocalElement {
    /// A resistor; `r = 0` is a wire.
    Resistor { a: LocalNode, b: LocalNode, r: f64 },
    /// A capacitor of the stage itself (a short at midband, open at DC), which shapes
    /// the low-frequency response; `field` is its chain-file key, `what` its name in
    /// plain words ("bypass capacitor").
    Capacitor {
        a: LocalNode,
        b: LocalNode,
        c: f64,
        field: &'static str,
        what: &'static str,
    },
}

/// What every stage kind provides. The input port is always the base.
pub trait StageModel {
    /// The `type` name in the chain file.
    fn type_name(&self) -> &'static str;
    /// Which terminal is the output node.
    fn output(&self) -> OutputTerminal;
    /// The base bias divider.
    fn bias(&self) -> BaseBias;
    /// DC networks on emitter and collector; `out_load` is what the direct-coupled
    /// successors hang on the output node (open when none).
    fn dc_terminals(&self, v_cc: f64, out_load: Thevenin) -> DcTerminals;
    /// Small-signal terminations at `freq`.
    fn ac_terminals(&self, freq: Freq) -> AcTerminals;
    /// Swing limits on the AC load line for a midband load resistance `r_load`
    /// hung on the output node (∞ when nothing is).
    fn swing(&self, op: &OperatingPoint, vce_sat: f64, r_load: f64) -> Swing;
    /// DC power in each resistor of the stage, by its chain-file name.
    fn resistor_power(&self, op: &OperatingPoint, v_cc: f64) -> Vec<(&'static str, f64)>;
    /// The stage's own small-signal elements besides the transistor and the bias
    /// divider (given by [`StageModel::bias`]): resistors and the stage's own
    /// capacitors between the transistor terminals, inner nodes and AC ground. The
    /// frequency-response attribution solves this network (`response::local`).
    fn local_network(&self) -> Vec<LocalElement>;
}

/// R1 ∥ R2, with ∞ meaning "absent".
pub fn parallel(r1: f64, r2: f64) -> f64 {
    if r1.is_infinite() {
        r2
    } else if r2.is_infinite() {
        r1
    } else {
        r1 * r2 / (r1 + r2)
    }
}

/// Power in the bias divider resistors.
fn bias_power(bias: &BaseBias, op: &OperatingPoint, v_cc: f64) -> Vec<(&'static str, f64)> {
    let mut p = Vec::with_capacity(5);
    if let Some(r) = bias.r_top {
        p.push(("r_top", (v_cc - op.v_b).powi(2) / r));
    }
    if let Some(r) = bias.r_bottom {
        p.push(("r_bottom", op.v_b.powi(2) / r));
    }
    p
}
