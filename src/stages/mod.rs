//! Stage kinds. Each kind lives in its own file and provides the same small set of
//! things (the [`StageModel`] trait): its chain-file entry, its values, its one
//! description (the sub-circuit every analysis reads) and, for the kinds that keep
//! them, v1's load-line limits. Adding a kind means a new file and one line in the
//! `stage_kinds!` list below (the registration point).

mod attenuator;
mod common_base;
mod common_emitter;
mod common_source;
mod emitter_follower;
mod high_pass;
mod low_pass;
mod opamp_inverting;
mod opamp_noninverting;
mod potentiometer;
mod source_follower;

pub use attenuator::{Attenuator, AttenuatorSpec};
pub use common_base::{CommonBase, CommonBaseSpec};
pub use common_emitter::{CommonEmitter, CommonEmitterSpec};
pub use common_source::{CommonSource, CommonSourceSpec};
pub use emitter_follower::{EmitterFollower, EmitterFollowerSpec};
pub use high_pass::{HighPass, HighPassSpec};
pub use low_pass::{LowPass, LowPassSpec};
pub use opamp_inverting::{OpampInverting, OpampInvertingSpec};
pub use opamp_noninverting::{OpampNoninverting, OpampNoninvertingSpec};
pub use potentiometer::{Potentiometer, PotentiometerSpec, Taper};
pub use source_follower::{SourceFollower, SourceFollowerSpec};

use crate::chain::{ChainError, Fields};
use crate::circuit::dc::Rails;
use crate::circuit::{BjtNodes, SubCircuit, BOTTOM, GROUND, TOP};
use crate::device::OperatingPoint;
use crate::device::{Device, Polarity};
use crate::network::Thevenin;
use crate::spec::{RailsSpec, SupplyFilterSpec, ValueSpec};
use crate::units::Kind;
use arrayvec::ArrayVec;
use serde::de::{self, Deserializer};
use serde::Deserialize;

/// The registration point: each kind's variant name, chain-file entry and values.
/// The macro writes the two enums and every dispatch over them, so a new kind is its
/// file plus one line in the list below it.
macro_rules! stage_kinds {
    ($($variant:ident($type_name:literal, $spec:ident, $kind:ident)),+ $(,)?) => {
        // Read by `crate::spec::parse_chain_text`: the `type` first, then the kind's
        // entry, so errors name the field. The doc comment is the schema's description.
        /// One stage as written in the chain file; the `type` key chooses the kind.
        #[derive(Debug, Clone, schemars::JsonSchema)]
        #[serde(tag = "type")]
        pub enum StageSpec {
            $(#[serde(rename = $type_name)] $variant($spec)),+
        }

        /// A validated stage's circuit values, by kind.
        #[derive(Debug, Clone, PartialEq)]
        pub enum StageKind {
            $($variant($kind)),+
        }

        impl StageSpec {
            /// Every kind's chain-file `type`.
            pub const TYPES: &'static [&'static str] = &[$($type_name),+];

            /// Read the entry of the kind whose `type` is `type_name` (without its
            /// `type` key).
            pub fn deserialize_kind<'de, D: Deserializer<'de>>(
                type_name: &str,
                d: D,
            ) -> Result<StageSpec, D::Error> {
                match type_name {
                    $($type_name => $spec::deserialize(d).map(StageSpec::$variant),)+
                    other => Err(de::Error::unknown_variant(other, StageSpec::TYPES)),
                }
            }

            fn entry(&self) -> &dyn StageEntry {
                match self {
                    $(StageSpec::$variant(s) => s),+
                }
            }
            pub fn id(&self) -> &str {
                self.entry().id()
            }
            /// The stage's `rails` entry, if the file gives one.
            pub fn rails(&self) -> Option<&RailsSpec> {
                self.entry().rails()
            }
            /// The device the stage names; `None` for a kind without one (passive).
            pub fn device(&self) -> Option<&str> {
                self.entry().device()
            }
            /// An op-amp stage's `reference`, if the file gives one.
            pub fn reference(&self) -> Option<&ValueSpec> {
                self.entry().reference()
            }
            /// What the file gives for part `i` of [`StageKind::parts`].
            pub fn part(&self, i: usize) -> Option<&ValueSpec> {
                match self {
                    $(StageSpec::$variant(s) => $kind::PARTS.get(i).and_then(|p| (p.written)(s))),+
                }
            }
            /// Read the values, checking units and ranges; `fields` names the JSON path.
            pub fn build(&self, fields: &Fields) -> Result<StageKind, ChainError> {
                Ok(match self {
                    $(StageSpec::$variant(s) => StageKind::$variant($kind::build(s, fields)?)),+
                })
            }
        }

        impl StageKind {
            /// The kind's model behind the common interface.
            pub fn model(&self) -> &dyn StageModel {
                match self {
                    $(StageKind::$variant(s) => s),+
                }
            }
            /// The kind's resistors and capacitors by chain-file name, in its
            /// `PARTS` order.
            pub fn parts(&self) -> Vec<(&'static str, Kind)> {
                match self {
                    $(StageKind::$variant(_) => $kind::PARTS.iter().map(|p| (p.name, p.kind)).collect()),+
                }
            }
            /// The value of part `i` of [`StageKind::parts`]; `None` when this stage
            /// lacks it.
            pub fn part_mut(&mut self, i: usize) -> Option<&mut f64> {
                match self {
                    $(StageKind::$variant(s) => $kind::PARTS.get(i).and_then(|p| (p.value)(s))),+
                }
            }
        }
    };
}

stage_kinds! {
    CommonEmitter("common_emitter", CommonEmitterSpec, CommonEmitter),
    EmitterFollower("emitter_follower", EmitterFollowerSpec, EmitterFollower),
    CommonBase("common_base", CommonBaseSpec, CommonBase),
    CommonSource("common_source", CommonSourceSpec, CommonSource),
    SourceFollower("source_follower", SourceFollowerSpec, SourceFollower),
    Attenuator("attenuator", AttenuatorSpec, Attenuator),
    Potentiometer("potentiometer", PotentiometerSpec, Potentiometer),
    LowPass("low_pass", LowPassSpec, LowPass),
    HighPass("high_pass", HighPassSpec, HighPass),
    OpampNoninverting("opamp_noninverting", OpampNoninvertingSpec, OpampNoninverting),
    OpampInverting("opamp_inverting", OpampInvertingSpec, OpampInverting),
}

/// What every chain-file stage entry gives besides its values: its id, and for the
/// kinds that have them its rails and its device.
pub trait StageEntry {
    fn id(&self) -> &str;
    fn rails(&self) -> Option<&RailsSpec> {
        None
    }
    fn device(&self) -> Option<&str> {
        None
    }
    /// An op-amp stage's `reference` (a rail name or a voltage).
    fn reference(&self) -> Option<&ValueSpec> {
        None
    }
}

impl StageKind {
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

/// One resistor or capacitor of a kind by its chain-file name (`spread`'s tolerances,
/// `bias`'s knobs, [`StageKind::set_part`]): each kind lists its parts once, in a
/// `PARTS` table of these.
pub struct Part<K, S> {
    pub name: &'static str,
    pub kind: Kind,
    /// What the chain file gives for it.
    pub written: fn(&S) -> Option<&ValueSpec>,
    /// Its value in the stage; `None` when this stage has none.
    pub value: fn(&mut K) -> Option<&mut f64>,
}

/// The `PARTS` table of a transistor kind with a divider (`bias: BaseBias`) and a
/// supply filter: `r_top` and `r_bottom` first, the kind's own parts, then the filter's
/// two, so every such kind lists them the same way.
macro_rules! divider_parts {
    ($($own:expr),* $(,)?) => {
        &[
            Part {
                name: "r_top",
                kind: Kind::Resistance,
                written: |s| s.r_top.as_ref(),
                value: |k| k.bias.r_top.as_mut(),
            },
            Part {
                name: "r_bottom",
                kind: Kind::Resistance,
                written: |s| s.r_bottom.as_ref(),
                value: |k| k.bias.r_bottom.as_mut(),
            },
            $($own,)*
            Part {
                name: "supply_filter.resistance",
                kind: Kind::Resistance,
                written: |s| s.supply_filter.as_ref().map(|f| &f.resistance),
                value: |k| k.supply_filter.as_mut().map(|f| &mut f.resistance),
            },
            Part {
                name: "supply_filter.capacitance",
                kind: Kind::Capacitance,
                written: |s| s.supply_filter.as_ref().map(|f| &f.capacitance),
                value: |k| k.supply_filter.as_mut().map(|f| &mut f.capacitance),
            },
        ]
    };
}
pub(crate) use divider_parts;

/// The base bias network: `r_top` from base to the supply, `r_bottom` from base to ground.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BaseBias {
    pub r_top: Option<f64>,
    pub r_bottom: Option<f64>,
}

impl BaseBias {
    /// No divider (a kind without a transistor).
    pub const NONE: BaseBias = BaseBias {
        r_top: None,
        r_bottom: None,
    };

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
    pub fn is_present(&self) -> bool {
        self.r_top.is_some() || self.r_bottom.is_some()
    }
}

pub use crate::device::Toward;

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
    /// No limits yet (a kind whose limits `headroom` finds from the regions).
    pub const NONE: Swing = Swing {
        limit_up: f64::INFINITY,
        up_toward: Toward::Cutoff,
        limit_down: f64::INFINITY,
        down_toward: Toward::Saturation,
        r_line: f64::INFINITY,
    };

    /// The same limits with up and down exchanged (a PNP stage's mirror image).
    pub fn mirrored(self) -> Swing {
        Swing {
            limit_up: self.limit_down,
            up_toward: self.down_toward,
            limit_down: self.limit_up,
            down_toward: self.up_toward,
            r_line: self.r_line,
        }
    }

    /// The smaller limit and its side.
    pub fn limiting(&self) -> (f64, Toward) {
        if self.limit_up <= self.limit_down {
            (self.limit_up, self.up_toward)
        } else {
            (self.limit_down, self.down_toward)
        }
    }
}

pub use crate::circuit::dc::DcTerminals;

/// What every stage kind provides: its one description (the sub-circuit) and, for the
/// kinds that keep them, the load-line swing limits of docs/definitions.md.
pub trait StageModel {
    /// The `type` name in the chain file.
    fn type_name(&self) -> &'static str;
    /// Write the stage's sub-circuit into `c` (empty): nodes, elements by chain-file
    /// name, device. Every analysis reads the stage through it (DEVELOPERS.md "Stages
    /// as sub-circuits"); the evaluation refills one description in place per run.
    fn describe(&self, c: &mut SubCircuit, device: &Device);
    /// The stage's sub-circuit as a new value.
    fn circuit(&self, device: &Device) -> SubCircuit {
        let mut c = SubCircuit::new();
        self.describe(&mut c, device);
        c
    }
    /// The base bias divider (the bias designer's knobs).
    fn bias(&self) -> BaseBias;
    /// Swing limits on the AC load line for a midband load resistance `r_load`
    /// hung on the output node (∞ when nothing is); only asked of kinds that
    /// [`StageModel::keeps_load_lines`].
    fn swing(&self, op: &OperatingPoint, vce_sat: f64, r_load: f64) -> Swing;
    /// True when the stage's limits are v1's load-line formulas (docs/definitions.md:
    /// the follower, and the common emitter with `r_collector` and without
    /// `r_feedback`); false when they are its transistor's region limits.
    fn keeps_load_lines(&self) -> bool {
        true
    }
    /// True for the JFET kinds (their device must be an `n_jfet` or `p_jfet`); false
    /// for the bipolar kinds (an `npn` or `pnp`).
    fn takes_jfet(&self) -> bool {
        false
    }
    /// True for the op-amp kinds (their device must be an `opamp`).
    fn takes_opamp(&self) -> bool {
        false
    }
    /// An op-amp kind's own network (`circuit::opamp`, solved exactly with the
    /// op-amp's source as an unknown); `None` for every other kind.
    fn opamp_network(&self) -> Option<crate::circuit::opamp::OpAmpNetwork> {
        None
    }
}

/// The current a two-resistor bias divider carries besides the base current: the
/// smaller of its two resistors' currents. KCL at the base gives
/// I_top = I_bottom + s·I_B (s = +1: an NPN base draws I_B; −1: a PNP base delivers
/// it), so that is I_bottom = (V_B − V_bottom)/r_bottom for an NPN and I_bottom − I_B
/// for a PNP (docs/definitions.md, "Bias divider").
pub fn divider_current(op: &OperatingPoint, r_bottom: f64, v_bottom: f64, device: &Device) -> f64 {
    let i_bottom = (op.v_b - v_bottom) / r_bottom;
    if device.sign() > 0.0 {
        i_bottom
    } else {
        i_bottom - op.i_b
    }
}

/// The largest r_bottom with which the divider carries `ratio` times the base current
/// at this base voltage ([`divider_current`] solved for r_bottom).
pub fn stiff_r_bottom(op: &OperatingPoint, v_bottom: f64, device: &Device, ratio: f64) -> f64 {
    let share = if device.sign() > 0.0 {
        ratio
    } else {
        ratio + 1.0
    };
    (op.v_b - v_bottom) / (share * op.i_b)
}

/// An RC filter between a stage's top rail and its top connections (docs/definitions.md:
/// `supply_filter`): the resistance from the rail to a local node, the capacitance
/// from that node to ground.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SupplyFilter {
    pub resistance: f64,
    pub capacitance: f64,
}

impl SupplyFilter {
    /// Read a stage's `supply_filter` entry, naming `supply_filter.<key>` in errors.
    pub fn read(
        f: &Fields,
        spec: Option<&SupplyFilterSpec>,
    ) -> Result<Option<SupplyFilter>, ChainError> {
        let Some(spec) = spec else {
            return Ok(None);
        };
        Ok(Some(SupplyFilter {
            resistance: f.positive(
                "supply_filter.resistance",
                &spec.resistance,
                Kind::Resistance,
            )?,
            capacitance: f.positive(
                "supply_filter.capacitance",
                &spec.capacitance,
                Kind::Capacitance,
            )?,
        }))
    }
}

/// Where a bipolar stage's own elements connect: the transistor's terminals and the
/// rails its collector and emitter sides go to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BipolarNodes {
    pub b: usize,
    pub c: usize,
    pub e: usize,
    /// The top node (`TOP`, or the supply filter's node) for an NPN, `BOTTOM` for a
    /// PNP (which hangs upside down, docs/definitions.md).
    pub collector_rail: usize,
    /// `BOTTOM` for an NPN, the top node for a PNP.
    pub emitter_rail: usize,
}

/// The transistor of a bipolar stage and its base divider: terminals "base",
/// "collector" and "emitter", the device's `base_resistance` r_bb' and
/// `collector_resistance` r_c in series inside them when the device has them
/// (docs/definitions.md), the input at the base terminal, `r_top` from the base to the top
/// rail and `r_bottom` to the bottom rail (each when present; both keep their sides
/// for a PNP). The kind adds the rest.
pub fn bipolar_with_divider(
    c: &mut SubCircuit,
    bias: &BaseBias,
    filter: Option<SupplyFilter>,
    device: &Device,
) -> BipolarNodes {
    let terminals = BjtNodes {
        b: c.node("base"),
        c: c.node("collector"),
        e: c.node("emitter"),
    };
    let mut inner = terminals;
    if device.base_resistance > 0.0 {
        inner.b = c.node("intrinsic base");
        c.resistor(
            "base_resistance",
            terminals.b,
            inner.b,
            Some(device.base_resistance),
        );
    }
    if device.collector_resistance > 0.0 {
        inner.c = c.node("intrinsic collector");
        c.resistor(
            "collector_resistance",
            terminals.c,
            inner.c,
            Some(device.collector_resistance),
        );
    }
    c.bjt(inner, terminals);
    c.input = terminals.b;
    // A supply filter replaces the top rail for every top connection (docs/definitions.md).
    let top = match filter {
        None => TOP,
        Some(f) => {
            let node = c.node("filtered top");
            c.resistor("supply_filter.resistance", TOP, node, Some(f.resistance));
            c.capacitor(
                "supply_filter.capacitance",
                "supply filter capacitor",
                node,
                GROUND,
                Some(f.capacitance),
            );
            node
        }
    };
    c.resistor("r_top", terminals.b, top, bias.r_top);
    c.resistor("r_bottom", terminals.b, BOTTOM, bias.r_bottom);
    let (collector_rail, emitter_rail) = match device.polarity {
        Polarity::Npn => (top, BOTTOM),
        Polarity::Pnp => (BOTTOM, top),
    };
    BipolarNodes {
        b: terminals.b,
        c: terminals.c,
        e: terminals.e,
        collector_rail,
        emitter_rail,
    }
}

/// DC power in every resistor of a stage at its operating point, by chain-file name:
/// (V_a − V_b)²/R from the node voltages of its description, the transistor's own
/// nodes and its terminals held at the operating point (the ports are terminals in
/// every kind so far, so what the chain hangs on them does not matter).
pub fn resistor_power(
    model: &dyn StageModel,
    device: &Device,
    op: &OperatingPoint,
    rails: Rails,
) -> ArrayVec<(&'static str, f64), 16> {
    let c = model.circuit(device);
    let volts = c.dc_voltages(
        rails,
        Thevenin::OPEN,
        Thevenin::OPEN,
        device_voltages(op, device),
        Some([op.v_b, op.v_c, op.v_e]),
    );
    c.resistor_power(&volts)
}

/// DC power in every resistor of stage `i` of an evaluated chain, by chain-file name:
/// an op-amp stage's from its network, a transistor stage's at its operating point
/// ([`resistor_power`]), a passive stage's from its ports ([`passive_resistor_power`]).
pub fn stage_resistor_power(
    chain: &crate::Chain,
    ev: &crate::Evaluation,
    i: usize,
) -> ArrayVec<(&'static str, f64), 16> {
    let model = chain.stages[i].kind.model();
    if let Some(p) = ev.dc[i].opamp_resistor_power(chain.reference_voltage(i)) {
        p.into_iter().collect()
    } else if chain.stages[i].device.is_some() {
        resistor_power(
            model,
            chain.device_of(i),
            &ev.dc[i].op,
            chain.stage_rails(i),
        )
    } else {
        passive_resistor_power(model, ev.dc[i].v_in, ev.dc[i].v_out)
    }
}

/// DC power in every resistor of a stage without a device, by chain-file name: its
/// description with the input and output held at their DC voltages `v_in`, `v_out`
/// (every node of a passive kind is a port or ground).
pub fn passive_resistor_power(
    model: &dyn StageModel,
    v_in: f64,
    v_out: f64,
) -> ArrayVec<(&'static str, f64), 16> {
    let c = model.circuit(&crate::device::NO_DEVICE);
    let volts = c.dc_voltages(
        Rails {
            top: 0.0,
            bottom: 0.0,
        },
        Thevenin::new(v_in, 0.0),
        Thevenin::new(v_out, 0.0),
        [0.0; 3],
        None,
    );
    c.resistor_power(&volts)
}

/// The voltages at the device's own base, collector and emitter nodes (inside r_bb'
/// and r_c) from an operating point that reports the terminals: the base current
/// drops I_B·r_bb' and the collector current I_C·r_c, with the signs of the polarity.
pub fn device_voltages(op: &OperatingPoint, device: &Device) -> [f64; 3] {
    let s = device.sign();
    [
        op.v_b - s * op.i_b * device.base_resistance,
        op.v_c - s * op.i_c * device.collector_resistance,
        op.v_e,
    ]
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
