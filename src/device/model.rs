//! The device interface: what every analysis asks of a device model
//! (docs/definitions.md "Device interface"). A stage's description places the device
//! between three of its nodes, the control, output and common terminals (base,
//! collector, emitter for a BJT); the DC pass, the nodal Newton, the small-signal
//! stamp, the large-signal network, the region limits and the reports read it only
//! through this trait. A new device model is one file implementing it.

use super::ebers_moll::Currents;
use super::OperatingPoint;
use crate::network::HybridPi;
use arrayvec::ArrayVec;
use serde::ser::{Serialize, SerializeMap, Serializer};

/// Named values in report order: a device's operating point or small-signal
/// parameters as the JSON and the tables show them (each kind its own names).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Quantities(ArrayVec<(&'static str, f64), 12>);

impl Quantities {
    pub fn new(pairs: &[(&'static str, f64)]) -> Quantities {
        Quantities(pairs.iter().copied().collect())
    }

    /// The value named `name`, if the device reports one.
    pub fn get(&self, name: &str) -> Option<f64> {
        self.0.iter().find(|(n, _)| *n == name).map(|&(_, v)| v)
    }

    pub fn iter(&self) -> impl Iterator<Item = (&'static str, f64)> + '_ {
        self.0.iter().copied()
    }
}

/// A JSON object, one key per quantity in order; a non-finite value (r_o without
/// Early effect) is null.
impl Serialize for Quantities {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let mut map = serializer.serialize_map(Some(self.0.len()))?;
        for (name, value) in self.iter() {
            map.serialize_entry(name, &value.is_finite().then_some(value))?;
        }
        map.end()
    }
}

/// Which way the output moves when the stage clips (the edge of its device's active region that it meets).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Toward {
    Saturation,
    Cutoff,
    /// A JFET's drain–source voltage reaching V_GS − V_P.
    Ohmic,
    /// An op-amp's output pin within `swing_margin` of a rail.
    Rail,
    /// An op-amp's output pin current at `output_current_limit`.
    CurrentLimit,
}

impl std::fmt::Display for Toward {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Toward::Saturation => "saturation",
            Toward::Cutoff => "cutoff",
            Toward::Ohmic => "ohmic",
            Toward::Rail => "rail",
            Toward::CurrentLimit => "current_limit",
        })
    }
}

/// The forward-active law at one bias point, in the device's own frame: the control
/// and output currents and their partials (the nodal Newton's stamp).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ActiveCurrents {
    /// Current into the control terminal (I_B).
    pub i_ctrl: f64,
    /// Current into the output terminal (I_C).
    pub i_out: f64,
    /// ∂i_ctrl/∂v_ctrl (1/r_π).
    pub g_in: f64,
    /// ∂i_out/∂v_ctrl (g_m).
    pub g_m: f64,
    /// ∂i_out/∂v_out (1/r_o).
    pub g_o: f64,
}

/// How far an operating point sits from each edge of the active region, with the
/// side each edge is named by in `clip_toward`: the output current's distance to its
/// edge (amperes) and the output voltage's distance to its edge (volts).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RegionEdges {
    pub current: (f64, Toward),
    pub voltage: (f64, Toward),
    /// The voltage edge moves with the control voltage (a JFET's ohmic edge
    /// V_DS = V_GS − V_P): its distance changes by the output voltage's change less
    /// the control voltage's.
    pub voltage_follows_control: bool,
}

/// What a device model provides (docs/definitions.md "Device interface").
pub trait DeviceModel {
    /// The forward-active DC law at control voltage `v_ctrl` and output voltage
    /// `v_out` (both against the common terminal, in the device's frame).
    fn active_currents(&self, v_t: f64, v_ctrl: f64, v_out: f64) -> ActiveCurrents;
    /// The currents in every region (the large-signal network) at control–common
    /// voltage `v_ctrl` and control–output voltage `v_ctrl_out`.
    fn large_signal(&self, v_t: f64, v_ctrl: f64, v_ctrl_out: f64) -> Currents;
    /// Small-signal parameters at an operating point; `HybridPi::admittance_matrix`
    /// stamps them at any s.
    fn small_signal(&self, op: &OperatingPoint, v_t: f64) -> HybridPi;
    /// The distances to the edges of the active region (region limits).
    fn region_edges(&self, op: &OperatingPoint) -> RegionEdges;
    /// The operating point as the reports name it.
    fn operating_quantities(&self, op: &OperatingPoint) -> Quantities;
    /// The small-signal parameters as the reports name them.
    fn small_signal_quantities(&self, hp: &HybridPi) -> Quantities;
}
