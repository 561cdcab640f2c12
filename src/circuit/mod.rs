//! The one description of a stage: its sub-circuit (DEVELOPERS.md "Stages as
//! sub-circuits"). A stage kind says once which elements it has, by their chain-file
//! names, between which nodes, and where its device sits; every analysis reads the
//! stage through this description:
//!
//! - [`SubCircuit::two_port`] (`ac.rs`): the small-signal two-port at any frequency,
//!   stamped on the nodal core and reduced to the input and output nodes;
//! - [`SubCircuit::dc_networks`] (`dc.rs`): the DC Thevenin network on each device
//!   terminal, and the DC voltage of every node and power of every resistor;
//! - the frequency-response attribution (`response::local`) and the pictures read the
//!   elements by name.
//!
//! Nodes are numbered: ground, the stage's top rail, its bottom rail, two nodes for
//! what the chain hangs on the input and output (used by the DC reduction), then the
//! stage's own nodes ([`FIRST_OWN`] on). Every rail is AC ground.

pub mod ac;
pub mod coupled;
pub mod dc;
pub mod opamp;
pub mod plan;

use crate::nodal::merge::MAX_NODES;
use arrayvec::ArrayVec;

/// Ground (0 V, AC ground).
pub const GROUND: usize = 0;
/// The stage's top rail (DC: its voltage; AC ground).
pub const TOP: usize = 1;
/// The stage's bottom rail (DC: its voltage; AC ground).
pub const BOTTOM: usize = 2;
/// What the chain hangs on the input node (a fixed node of the DC reduction only).
pub const OUTSIDE_IN: usize = 3;
/// What the chain hangs on the output node (a fixed node of the DC reduction only).
pub const OUTSIDE_OUT: usize = 4;
/// The first of the stage's own nodes.
pub const FIRST_OWN: usize = 5;
/// Nodes held at known voltages in the DC reduction.
pub const FIXED: usize = FIRST_OWN;
/// Most elements a stage may have.
pub const MAX_ELEMENTS: usize = 16;

/// A passive element of a stage, named by its chain-file key.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Element {
    /// A resistor; `r = 0` is a wire (its nodes are merged).
    Resistor {
        name: &'static str,
        a: usize,
        b: usize,
        r: f64,
    },
    /// A capacitor of the stage: open at DC, at midband a short or (`open_at_midband`,
    /// the shunt C of a low-pass) open (docs/definitions.md "Midband"), 1/(sC) at a
    /// frequency. `what` names it in plain words ("bypass capacitor").
    Capacitor {
        name: &'static str,
        what: &'static str,
        a: usize,
        b: usize,
        c: f64,
        open_at_midband: bool,
    },
}

impl Element {
    pub fn name(&self) -> &'static str {
        match *self {
            Element::Resistor { name, .. } | Element::Capacitor { name, .. } => name,
        }
    }
    pub fn nodes(&self) -> (usize, usize) {
        match *self {
            Element::Resistor { a, b, .. } | Element::Capacitor { a, b, .. } => (a, b),
        }
    }
}

/// Where a bipolar transistor sits: its base, collector and emitter nodes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct BjtNodes {
    pub b: usize,
    pub c: usize,
    pub e: usize,
}

/// Which device terminal a node is (for reports that name the output).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Terminal {
    Base,
    Collector,
    Emitter,
    /// A node that is no device terminal.
    None,
}

/// A stage's sub-circuit.
#[derive(Debug, Clone, PartialEq)]
pub struct SubCircuit {
    /// Names of the stage's own nodes, from [`FIRST_OWN`] on ("base", "emitter tap").
    own: ArrayVec<&'static str, { MAX_NODES - FIRST_OWN }>,
    elements: ArrayVec<Element, MAX_ELEMENTS>,
    bjt: Option<BjtNodes>,
    /// The transistor's terminals as the stage's elements meet them (outside the
    /// device's series resistances r_bb' and r_c; the device nodes without them).
    terminals: Option<BjtNodes>,
    /// The element part of [`SubCircuit::shape`], packed as elements are added.
    element_shape: [u64; 3],
    /// The input node (the driver's link ends here).
    pub input: usize,
    /// The output node (the successors' links start here).
    pub output: usize,
}

impl SubCircuit {
    /// An empty description; add nodes with [`SubCircuit::node`], then elements.
    pub fn new() -> SubCircuit {
        SubCircuit {
            own: ArrayVec::new(),
            elements: ArrayVec::new(),
            bjt: None,
            terminals: None,
            element_shape: [0; 3],
            input: GROUND,
            output: GROUND,
        }
    }

    /// The shape of the description, exactly: for every element its kind (resistor,
    /// wire, capacitor) and its two nodes in 10 bits, six to a word; then the device's
    /// nodes, the ports and the counts. Two descriptions with equal shapes differ only
    /// in values, so one compiled plan serves both (`plan.rs`).
    pub fn shape(&self) -> [u64; 4] {
        let d = self.bjt.map_or(0, |d| {
            1 | (d.b as u64) << 1 | (d.c as u64) << 5 | (d.e as u64) << 9
        });
        let last = d
            | (self.input as u64) << 13
            | (self.output as u64) << 17
            | (self.elements.len() as u64) << 21
            | (self.own.len() as u64) << 26;
        [
            self.element_shape[0],
            self.element_shape[1],
            self.element_shape[2],
            last,
        ]
    }

    /// Whether [`SubCircuit::shape`] is `shape`, word by word: the description has
    /// just written these words one at a time, and a wide comparison would wait on all
    /// of them (a stalled store-to-load forward, measured: a third of the cost of a
    /// plan's refresh).
    pub fn has_shape(&self, shape: &[u64; 4]) -> bool {
        let own = self.shape();
        own[0] == shape[0] && own[1] == shape[1] && own[2] == shape[2] && own[3] == shape[3]
    }

    fn push(&mut self, e: Element) {
        let i = self.elements.len();
        let (a, b) = e.nodes();
        let kind = match e {
            Element::Resistor { r: 0.0, .. } => 1,
            Element::Resistor { .. } => 0,
            Element::Capacitor {
                open_at_midband: false,
                ..
            } => 2,
            Element::Capacitor { .. } => 3,
        };
        let code = kind | (a as u64) << 2 | (b as u64) << 6;
        self.element_shape[i / 6] |= code << (10 * (i % 6));
        self.elements.push(e);
    }

    /// Empty this description for a new one, keeping its storage.
    pub fn clear(&mut self) {
        self.own.clear();
        self.elements.clear();
        self.element_shape = [0; 3];
        self.bjt = None;
        self.terminals = None;
        self.input = GROUND;
        self.output = GROUND;
    }

    /// Add one of the stage's own nodes and return its number.
    pub fn node(&mut self, name: &'static str) -> usize {
        self.own.push(name);
        FIRST_OWN + self.own.len() - 1
    }

    /// A resistor between `a` and `b`; absent (`None`) resistors add nothing.
    pub fn resistor(&mut self, name: &'static str, a: usize, b: usize, r: Option<f64>) {
        if let Some(r) = r {
            self.push(Element::Resistor { name, a, b, r });
        }
    }

    /// A capacitor between `a` and `b`, a short at midband; absent capacitors add
    /// nothing.
    pub fn capacitor(
        &mut self,
        name: &'static str,
        what: &'static str,
        a: usize,
        b: usize,
        c: Option<f64>,
    ) {
        if let Some(c) = c {
            self.push(Element::Capacitor {
                name,
                what,
                a,
                b,
                c,
                open_at_midband: false,
            });
        }
    }

    /// A capacitor between `a` and `b` that is open at midband, where it only acts at
    /// a frequency (the shunt C of a low-pass).
    pub fn shunt_capacitor(
        &mut self,
        name: &'static str,
        what: &'static str,
        a: usize,
        b: usize,
        c: f64,
    ) {
        self.push(Element::Capacitor {
            name,
            what,
            a,
            b,
            c,
            open_at_midband: true,
        });
    }

    /// Place the stage's bipolar transistor: its own nodes (`device`, inside any
    /// series resistances) and its terminals (`terminals`, where the stage's elements
    /// connect).
    pub fn bjt(&mut self, device: BjtNodes, terminals: BjtNodes) {
        self.bjt = Some(device);
        self.terminals = Some(terminals);
    }

    /// The transistor's terminals (see [`SubCircuit::bjt`]).
    pub fn bjt_terminals(&self) -> Option<BjtNodes> {
        self.terminals
    }

    /// Number of nodes including the fixed ones.
    pub fn n_nodes(&self) -> usize {
        FIRST_OWN + self.own.len()
    }

    /// The name of node `n` in plain words.
    pub fn node_name(&self, n: usize) -> &'static str {
        match n {
            GROUND => "ground",
            TOP => "top rail",
            BOTTOM => "bottom rail",
            OUTSIDE_IN => "driver",
            OUTSIDE_OUT => "successors",
            _ => self.own[n - FIRST_OWN],
        }
    }

    pub fn elements(&self) -> &[Element] {
        &self.elements
    }

    /// The value of the element named `name`, if the stage has it.
    pub fn element(&self, name: &str) -> Option<&Element> {
        self.elements.iter().find(|e| e.name() == name)
    }

    pub fn bjt_nodes(&self) -> Option<BjtNodes> {
        self.bjt
    }

    /// Which transistor terminal node `n` is.
    pub fn terminal_of(&self, n: usize) -> Terminal {
        match self.terminals {
            Some(d) if d.b == n => Terminal::Base,
            Some(d) if d.c == n => Terminal::Collector,
            Some(d) if d.e == n => Terminal::Emitter,
            _ => Terminal::None,
        }
    }

    /// The capacitors of the stage, in description order.
    pub fn capacitors(&self) -> impl Iterator<Item = &Element> {
        self.elements
            .iter()
            .filter(|e| matches!(e, Element::Capacitor { .. }))
    }
}

impl Default for SubCircuit {
    fn default() -> Self {
        SubCircuit::new()
    }
}

#[cfg(test)]
mod tests {
    use super::dc::Rails;
    use crate::device::Device;
    use crate::network::{Freq, HybridPi, Thevenin};
    use crate::stages::{BaseBias, CommonEmitter, StageModel};
    use num_complex::Complex64;

    fn ce(r_emitter: f64, bypassed: Option<(f64, f64)>) -> CommonEmitter {
        CommonEmitter {
            bias: BaseBias {
                r_top: Some(100e3),
                r_bottom: Some(22e3),
            },
            r_collector: Some(4.7e3),
            r_emitter,
            r_emitter_bypassed: bypassed.map_or(0.0, |(r, _)| r),
            c_bypass: bypassed.map(|(_, c)| c),
            r_feedback: None,
            supply_filter: None,
        }
    }

    #[test]
    fn grounded_emitter_two_port_is_the_textbook_one() {
        // Grounded emitter, no r_o: y11 = 1/r_π + divider, y12 = 0, y21 = g_m,
        // y22 = 1/R_C (hybrid-π two-port, any BJT small-signal text, from memory).
        let hp = HybridPi {
            g_m: 0.04,
            g_pi: 0.04 / 200.0,
            ..Default::default()
        };
        let tp = ce(0.0, None)
            .circuit(&Device::default())
            .two_port(&hp, Freq::Midband);
        let g_div = 1.0 / 100e3 + 1.0 / 22e3;
        assert!((tp.y11.re - (0.04 / 200.0 + g_div)).abs() < 1e-15);
        assert!(tp.y12.norm() < 1e-18);
        assert!((tp.y21.re - 0.04).abs() < 1e-15);
        assert!((tp.y22.re - 1.0 / 4.7e3).abs() < 1e-15);
    }

    #[test]
    fn degenerated_stage_matches_the_handbook() {
        // With R_E unbypassed: R_in (transistor alone) = r_π + (β+1)R_E and
        // A = −β·R_C/(r_π + (β+1)R_E) (handbook formulas, exact without r_o; from memory).
        let (beta, g_m) = (150.0, 0.02);
        let r_pi = beta / g_m;
        let hp = HybridPi {
            g_m,
            g_pi: 1.0 / r_pi,
            ..Default::default()
        };
        let mut stage = ce(470.0, None);
        stage.bias = BaseBias {
            r_top: None,
            r_bottom: None,
        };
        let tp = stage
            .circuit(&Device::default())
            .two_port(&hp, Freq::Midband);
        let zero = Complex64::new(0.0, 0.0);
        let r_in = 1.0 / tp.input_admittance(zero).re;
        let r_in_ref = r_pi + (beta + 1.0) * 470.0;
        assert!((r_in - r_in_ref).abs() < 1e-9 * r_in_ref);
        let a = tp.voltage_gain(zero).re;
        let a_ref = -beta * 4.7e3 / r_in_ref;
        assert!((a - a_ref).abs() < 1e-12 * a_ref.abs());
    }

    #[test]
    fn bypass_capacitor_at_a_frequency() {
        // Emitter impedance R_E1 + R_E2 ∥ 1/(jωC): at f the grounded-base input
        // admittance of the transistor alone is 1/(r_π + (β+1)·Z_E) (handbook, from memory).
        let (beta, g_m) = (100.0, 0.04);
        let r_pi = beta / g_m;
        let hp = HybridPi {
            g_m,
            g_pi: 1.0 / r_pi,
            ..Default::default()
        };
        let mut stage = ce(100.0, Some((1e3, 10e-6)));
        stage.bias = BaseBias {
            r_top: None,
            r_bottom: None,
        };
        let f = 50.0;
        let tp = stage.circuit(&Device::default()).two_port(&hp, Freq::Hz(f));
        let z_c = Complex64::new(0.0, -1.0 / (2.0 * std::f64::consts::PI * f * 10e-6));
        let z_e = 100.0 + 1e3 * z_c / (1e3 + z_c);
        let y_ref = 1.0 / (r_pi + (beta + 1.0) * z_e);
        let y = tp.input_admittance(Complex64::new(0.0, 0.0));
        assert!((y - y_ref).norm() < 1e-12 * y_ref.norm());
    }

    #[test]
    fn dc_networks_are_the_thevenin_equivalents() {
        // Thevenin's theorem by hand: base 12 V·22k/122k behind 100k ∥ 22k, collector
        // 12 V behind R_C, emitter 0 V behind R_E1 + R_E2 (capacitor open at DC).
        let t = ce(220.0, Some((1.8e3, 100e-6)))
            .circuit(&Device::default())
            .dc_networks(
                Rails {
                    top: 12.0,
                    bottom: 0.0,
                },
                Thevenin::OPEN,
                Thevenin::OPEN,
            );
        assert!((t.base.v - 12.0 * 22.0 / 122.0).abs() < 1e-14);
        assert!((t.base.r - 100e3 * 22e3 / 122e3).abs() < 1e-9);
        assert_eq!(t.collector, Thevenin::new(12.0, 4.7e3));
        assert!(t.emitter.v.abs() < 1e-15 && (t.emitter.r - 2020.0).abs() < 1e-10);
        // A driver node of 1 V behind 10k on the base joins the divider (Millman).
        let driven = ce(220.0, None).circuit(&Device::default()).dc_networks(
            Rails {
                top: 12.0,
                bottom: 0.0,
            },
            Thevenin::new(1.0, 10e3),
            Thevenin::OPEN,
        );
        let g = 1.0 / 100e3 + 1.0 / 22e3 + 1.0 / 10e3;
        assert!((driven.base.v - (12.0 / 100e3 + 1.0 / 10e3) / g).abs() < 1e-14);
        assert!((driven.base.r - 1.0 / g).abs() < 1e-9);
    }
}
