//! The whole chain as one flat netlist, built from every stage's description
//! (DEVELOPERS.md "Stages as sub-circuits"): nodes, fixed nodes, resistors, capacitors
//! and transistors, each with the stage and the element name it came from. Nothing here
//! knows a stage kind; a new kind is in the netlist as soon as it describes itself.
//!
//! - Fixed nodes: ground, one node per distinct rail voltage (a rail at 0 V is ground),
//!   and the source EMF (its value is set by whoever solves the network).
//! - Each stage's own nodes (from `circuit::FIRST_OWN` on) become nodes of the netlist,
//!   named by the stage id and the description's node name; its `TOP` and `BOTTOM` map
//!   to the fixed nodes of its rails' voltages (`Chain::stage_rails`); an op-amp
//!   stage's ground, its `reference`, to the fixed node at the reference voltage.
//! - Resistors and capacitors are the description's elements, by name; a 0 Ω resistor
//!   is a wire, as in the description. The transistor sits at the description's
//!   `bjt_nodes()` (inside r_bb' and r_c), its terminals at `bjt_terminals()`.
//! - The source: its EMF behind `R_S` to the source node. Links: a direct link is a
//!   wire from the driver's output node to the successor's input node, a capacitor link
//!   a capacitor. Each load: a node with `R_L` to ground. Shunt capacitances of the
//!   source and the loads are left out (open at midband, docs/definitions.md).

use crate::chain::Chain;
use crate::circuit::opamp::Pin;
use crate::circuit::{BjtNodes, Element, SubCircuit, Terminal, BOTTOM, FIRST_OWN, GROUND, TOP};
use crate::graph::Port;

/// Where an element or a node of the netlist comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Owner {
    /// Ground, a rail or the source EMF.
    Fixed,
    Source,
    Stage(usize),
    /// The link starting at this driver and ending at `to`.
    Link {
        from: Port,
        to: Port,
    },
    Load(usize),
    /// Feedback link k (`Topology::feedback`): its resistor, the junction with its
    /// series capacitor, the capacitor.
    Feedback(usize),
}

/// A node of the netlist.
#[derive(Debug, Clone, PartialEq)]
pub struct FlatNode {
    pub owner: Owner,
    /// The owner in words for messages: the stage id, "source", "load \"out\"", or
    /// "supply" for ground and the rails.
    pub owner_name: String,
    /// Its name in plain words within its owner ("collector", "source node", "rail
    /// \"vcc\"").
    pub name: String,
}

/// A resistor of the netlist; `r = 0` is a wire.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlatResistor {
    pub owner: Owner,
    /// The chain-file name of the element ("r_collector", "source resistance").
    pub name: &'static str,
    pub a: usize,
    pub b: usize,
    pub r: f64,
}

/// A capacitor of the netlist.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlatCapacitor {
    pub owner: Owner,
    pub name: &'static str,
    pub a: usize,
    pub b: usize,
    pub c: f64,
    /// Open at midband (a low-pass's shunt C): the large-signal network, which works
    /// at midband, leaves it out; the noise network stamps it at its frequency.
    pub open_at_midband: bool,
}

/// A stage's bipolar transistor in the netlist.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlatTransistor {
    pub stage: usize,
    /// Index into `Chain::devices`.
    pub device: usize,
    /// Its own base, collector and emitter nodes (inside r_bb' and r_c).
    pub nodes: BjtNodes,
    /// Its terminals, where the stage's elements meet it.
    pub terminals: BjtNodes,
}

/// A stage's op-amp in the netlist (docs/definitions.md "Op-amp wiring"): its inputs
/// and output pin. The stage's `reference` (its description's ground) is the fixed node
/// at the reference voltage: ground on split rails, AC ground in any case.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlatOpamp {
    pub stage: usize,
    /// Index into `Chain::devices`.
    pub device: usize,
    pub plus: usize,
    pub minus: usize,
    pub pin: usize,
}

/// One stage in the netlist.
#[derive(Debug, Clone, PartialEq)]
pub struct FlatStage {
    /// The netlist node of every node of the stage's description (`None` for the
    /// description's handles `OUTSIDE_IN`/`OUTSIDE_OUT`, which only the DC reduction uses).
    pub nodes: Vec<Option<usize>>,
    pub input: usize,
    pub output: usize,
    /// Which transistor terminal the output node is.
    pub output_terminal: Terminal,
    /// The description's name of the output node ("collector").
    pub output_name: &'static str,
    /// Index into [`Netlist::transistors`], if the stage has one.
    pub transistor: Option<usize>,
    /// Index into [`Netlist::opamps`], if the stage has one.
    pub opamp: Option<usize>,
}

/// A fixed node: its voltage, or the source EMF (set per solve).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum FixedVoltage {
    Volts(f64),
    Emf,
}

/// The chain as one flat netlist.
#[derive(Debug, Clone, PartialEq)]
pub struct Netlist {
    /// Every node; nodes `0..fixed.len()` are the fixed ones, in the order of `fixed`.
    pub nodes: Vec<FlatNode>,
    pub fixed: Vec<FixedVoltage>,
    /// The source EMF's node (fixed) and the source node after `R_S`.
    pub emf: usize,
    pub source: usize,
    pub stages: Vec<FlatStage>,
    /// Each load's node.
    pub loads: Vec<usize>,
    pub resistors: Vec<FlatResistor>,
    pub capacitors: Vec<FlatCapacitor>,
    pub transistors: Vec<FlatTransistor>,
    /// The op-amps (the noise and the large-signal networks stamp them).
    pub opamps: Vec<FlatOpamp>,
}

/// Why a stage's description cannot be placed in the netlist.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FlatError {
    #[error("stage \"{stage}\": its element \"{element}\" reaches the description's handle for what hangs on a port; expected elements between the stage's own nodes, its rails and ground")]
    Handle {
        stage: String,
        element: &'static str,
    },
}

/// The ground node's index.
pub const GROUND_NODE: usize = 0;

impl Netlist {
    /// Build the netlist of `chain` from its stages' descriptions.
    pub fn build(chain: &Chain) -> Result<Netlist, FlatError> {
        let mut net = Netlist {
            nodes: vec![FlatNode {
                owner: Owner::Fixed,
                owner_name: "supply".into(),
                name: "ground".into(),
            }],
            fixed: vec![FixedVoltage::Volts(0.0)],
            emf: 0,
            source: 0,
            stages: Vec::with_capacity(chain.stages.len()),
            loads: Vec::with_capacity(chain.loads.len()),
            resistors: Vec::new(),
            capacitors: Vec::new(),
            transistors: Vec::new(),
            opamps: Vec::new(),
        };
        // One fixed node per distinct rail voltage (ground already holds 0 V).
        for rail in &chain.rails {
            if net.rail_node(rail.v).is_none() {
                net.nodes.push(FlatNode {
                    owner: Owner::Fixed,
                    owner_name: "supply".into(),
                    name: format!("rail \"{}\"", rail.name),
                });
                net.fixed.push(FixedVoltage::Volts(rail.v));
            }
        }
        // Stage rails not among the chain's rails (none today: every stage rail is a
        // chain rail or ground) and an op-amp stage's reference voltage get their own
        // fixed node.
        for i in 0..chain.stages.len() {
            let r = chain.stage_rails(i);
            let reference = Self::reference_of(chain, i);
            for v in [r.top, r.bottom].into_iter().chain(reference) {
                if net.rail_node(v).is_none() {
                    net.nodes.push(FlatNode {
                        owner: Owner::Fixed,
                        owner_name: "supply".into(),
                        name: format!("rail at {v} V"),
                    });
                    net.fixed.push(FixedVoltage::Volts(v));
                }
            }
        }
        net.emf = net.nodes.len();
        net.nodes.push(FlatNode {
            owner: Owner::Fixed,
            owner_name: "source".into(),
            name: "source EMF".into(),
        });
        net.fixed.push(FixedVoltage::Emf);

        net.source = net.node(Owner::Source, "source".into(), "source node");
        net.resistors.push(FlatResistor {
            owner: Owner::Source,
            name: "source resistance",
            a: net.emf,
            b: net.source,
            r: chain.source.r_s,
        });
        for (i, stage) in chain.stages.iter().enumerate() {
            let circuit = stage.kind.model().circuit(chain.device_of(i));
            let placed = net.place_stage(chain, i, &circuit)?;
            net.stages.push(placed);
        }
        for (k, load) in chain.loads.iter().enumerate() {
            let node = net.node(Owner::Load(k), format!("load \"{}\"", load.id), "load node");
            net.loads.push(node);
            net.resistors.push(FlatResistor {
                owner: Owner::Load(k),
                name: "load resistance",
                a: node,
                b: GROUND_NODE,
                r: load.r_l,
            });
        }
        let drivers = std::iter::once(Port::Source).chain((0..chain.stages.len()).map(Port::Stage));
        for from in drivers {
            for branch in chain.topology.successors(from) {
                let owner = Owner::Link {
                    from,
                    to: branch.to,
                };
                let (a, b) = (net.output_of(from), net.input_of(branch.to));
                match branch.coupling {
                    None => net.resistors.push(FlatResistor {
                        owner,
                        name: "direct link",
                        a,
                        b,
                        r: 0.0,
                    }),
                    Some(c) => net.capacitors.push(FlatCapacitor {
                        owner,
                        name: "coupling capacitor",
                        a,
                        b,
                        c,
                        open_at_midband: false,
                    }),
                }
            }
        }
        // Feedback links: R from the last stage's output, then C (if any) in series to
        // the first stage's input or emitter (docs/definitions.md "Feedback links").
        for (k, l) in chain.topology.feedback.iter().enumerate() {
            let owner = Owner::Feedback(k);
            let a = net.stages[l.from].output;
            let end_node = match l.into {
                crate::graph::FeedbackInto::Input => net.stages[l.to].input,
                crate::graph::FeedbackInto::Emitter => {
                    net.transistors[net.stages[l.to].transistor.ok_or_else(|| {
                        FlatError::Handle {
                            stage: chain.stages[l.to].id.clone(),
                            element: "feedback link",
                        }
                    })?]
                    .terminals
                    .e
                }
            };
            let name = format!("{}->{}", chain.stages[l.from].id, chain.stages[l.to].id);
            let b = match l.capacitance {
                None => end_node,
                Some(c) => {
                    let j = net.node(owner, name, "feedback junction");
                    net.capacitors.push(FlatCapacitor {
                        owner,
                        name: "feedback capacitor",
                        a: j,
                        b: end_node,
                        c,
                        open_at_midband: false,
                    });
                    j
                }
            };
            net.resistors.push(FlatResistor {
                owner,
                name: "feedback resistance",
                a,
                b,
                r: l.resistance,
            });
        }
        Ok(net)
    }

    /// An op-amp stage's reference voltage (its description's ground); `None` for the
    /// other kinds, whose ground is ground.
    fn reference_of(chain: &Chain, i: usize) -> Option<f64> {
        chain.stages[i]
            .kind
            .model()
            .opamp_network()
            .map(|_| chain.reference_voltage(i))
    }

    /// The fixed node holding `v` volts, if there is one.
    fn rail_node(&self, v: f64) -> Option<usize> {
        self.fixed.iter().position(|f| *f == FixedVoltage::Volts(v))
    }

    fn node(&mut self, owner: Owner, owner_name: String, name: &str) -> usize {
        self.nodes.push(FlatNode {
            owner,
            owner_name,
            name: name.into(),
        });
        self.nodes.len() - 1
    }

    /// Place stage `i`'s description: its own nodes, its rails, elements, transistor.
    fn place_stage(
        &mut self,
        chain: &Chain,
        i: usize,
        c: &SubCircuit,
    ) -> Result<FlatStage, FlatError> {
        let rails = chain.stage_rails(i);
        let mut nodes: Vec<Option<usize>> = vec![None; c.n_nodes()];
        nodes[GROUND] = match Self::reference_of(chain, i) {
            Some(v) => self.rail_node(v),
            None => Some(GROUND_NODE),
        };
        nodes[TOP] = self.rail_node(rails.top);
        nodes[BOTTOM] = self.rail_node(rails.bottom);
        for (n, slot) in nodes.iter_mut().enumerate().skip(FIRST_OWN) {
            let id = chain.stages[i].id.clone();
            *slot = Some(self.node(Owner::Stage(i), id, c.node_name(n)));
        }
        let at = |n: usize, element: &'static str| {
            nodes[n].ok_or_else(|| FlatError::Handle {
                stage: chain.stages[i].id.clone(),
                element,
            })
        };
        for e in c.elements() {
            let (a, b) = e.nodes();
            let (a, b) = (at(a, e.name())?, at(b, e.name())?);
            let owner = Owner::Stage(i);
            match *e {
                Element::Resistor { name, r, .. } => self.resistors.push(FlatResistor {
                    owner,
                    name,
                    a,
                    b,
                    r,
                }),
                Element::Capacitor {
                    name,
                    c,
                    open_at_midband,
                    ..
                } => self.capacitors.push(FlatCapacitor {
                    owner,
                    name,
                    a,
                    b,
                    c,
                    open_at_midband,
                }),
            }
        }
        let transistor = match (c.bjt_nodes(), c.bjt_terminals(), chain.stages[i].device) {
            (Some(d), Some(t), Some(device)) => {
                let flat = |x: BjtNodes, what| -> Result<BjtNodes, FlatError> {
                    Ok(BjtNodes {
                        b: at(x.b, what)?,
                        c: at(x.c, what)?,
                        e: at(x.e, what)?,
                    })
                };
                self.transistors.push(FlatTransistor {
                    stage: i,
                    device,
                    nodes: flat(d, "transistor")?,
                    terminals: flat(t, "transistor")?,
                });
                Some(self.transistors.len() - 1)
            }
            _ => None,
        };
        // An op-amp's nodes: its network numbers the stage's own nodes in the order its
        // description adds them (`StageModel::opamp_network`).
        let own = |p: Pin| match p {
            Pin::Reference => at(GROUND, "op-amp"),
            Pin::Node(k) => at(FIRST_OWN + k, "op-amp"),
        };
        let mut opamp = None;
        if let (Some(net), Some(device)) = (
            chain.stages[i].kind.model().opamp_network(),
            chain.stages[i].device,
        ) {
            self.opamps.push(FlatOpamp {
                stage: i,
                device,
                plus: own(net.plus)?,
                minus: own(net.minus)?,
                pin: own(Pin::Node(net.output))?,
            });
            opamp = Some(self.opamps.len() - 1);
        }
        Ok(FlatStage {
            input: at(c.input, "input")?,
            output: at(c.output, "output")?,
            output_terminal: c.terminal_of(c.output),
            output_name: c.node_name(c.output),
            transistor,
            opamp,
            nodes,
        })
    }

    /// Node `n` in words, for messages: `stage "gain", collector`, `the source node`,
    /// `load "out"`, `rail "vcc"`.
    pub fn node_phrase(&self, n: usize) -> String {
        let node = &self.nodes[n];
        match node.owner {
            Owner::Stage(_) => format!("stage \"{}\", {}", node.owner_name, node.name),
            Owner::Load(_) => node.owner_name.clone(),
            Owner::Source => "the source node".into(),
            Owner::Feedback(_) => format!("the {} of feedback {}", node.name, node.owner_name),
            Owner::Fixed | Owner::Link { .. } => node.name.clone(),
        }
    }

    /// The node a link starts at.
    fn output_of(&self, p: Port) -> usize {
        match p {
            Port::Source => self.source,
            Port::Stage(i) => self.stages[i].output,
            Port::Load(k) => self.loads[k],
        }
    }

    /// The node a link ends at.
    fn input_of(&self, p: Port) -> usize {
        match p {
            Port::Source => self.source,
            Port::Stage(i) => self.stages[i].input,
            Port::Load(k) => self.loads[k],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chain(text: &str) -> Chain {
        Chain::from_json_str(text).unwrap()
    }

    #[test]
    fn split_rails_pnp_and_series_resistances_are_placed_by_description() {
        // chains/split-rail-pair.json: NPN common emitter on ±15 V direct-coupled into a
        // PNP common emitter, both with r_bb'. Counted from the chain file by hand.
        let c = chain(include_str!("../../chains/split-rail-pair.json"));
        let net = Netlist::build(&c).unwrap();
        // Fixed: ground, +15 V, −15 V, the EMF.
        assert_eq!(
            net.fixed,
            [
                FixedVoltage::Volts(0.0),
                FixedVoltage::Volts(15.0),
                FixedVoltage::Volts(-15.0),
                FixedVoltage::Emf
            ]
        );
        let (input, flip) = (&net.stages[0], &net.stages[1]);
        // The PNP's collector resistor goes to its bottom rail (−15 V), its emitter
        // resistors to the top (+15 V) (docs/definitions.md "Rails"); r_emitter ends at
        // the tap, r_emitter_bypassed runs from there to the rail.
        let r = |stage: usize, name: &str| {
            *net.resistors
                .iter()
                .find(|r| r.owner == Owner::Stage(stage) && r.name == name)
                .unwrap()
        };
        let t = net.transistors[flip.transistor.unwrap()];
        assert_eq!(r(1, "r_collector").a, t.terminals.c);
        assert_eq!(r(1, "r_collector").b, 2);
        assert_eq!(r(1, "r_emitter").b, r(1, "r_emitter_bypassed").a);
        assert_eq!(r(1, "r_emitter_bypassed").b, 1);
        // r_bb' lies between the base terminal and the transistor's own base.
        let bb = r(1, "base_resistance");
        assert_eq!((bb.a, bb.b, bb.r), (t.terminals.b, t.nodes.b, 60.0));
        assert_ne!(t.nodes.b, t.terminals.b);
        assert_eq!(t.nodes.c, t.terminals.c);
        // The direct link is a wire from the NPN's collector to the PNP's base.
        let link = net
            .resistors
            .iter()
            .find(|r| r.name == "direct link")
            .unwrap();
        assert_eq!((link.a, link.b, link.r), (input.output, flip.input, 0.0));
        assert_eq!(input.output_terminal, Terminal::Collector);
        assert_eq!(net.node_phrase(flip.input), "stage \"flip\", base");
        // Two coupling capacitors (source and load links) and two bypass capacitors.
        assert_eq!(net.capacitors.len(), 4);
    }

    #[test]
    fn supply_filter_and_common_base_come_from_their_descriptions() {
        // A common base with a supply filter: the filter's node is the stage's own node,
        // fed from the rail through its resistance and decoupled to ground; the input is
        // the emitter, the base goes to ground through c_base.
        let c = chain(
            r#"{ "version": 2, "supply": "12 V",
              "devices": { "q": { "polarity": "npn", "beta": 100 } },
              "source": { "resistance": "50", "level": "1 mV rms" },
              "stages": [ { "id": "cb", "type": "common_base", "device": "q",
                "r_top": "47k", "r_bottom": "22k", "c_base": "10u", "r_emitter": "2k2",
                "r_collector": "4k7",
                "supply_filter": { "resistance": "470", "capacitance": "100u" } } ],
              "loads": [ { "id": "out", "resistance": "10k" } ],
              "links": [ { "from": "source", "to": "cb", "coupling": "10u" },
                         { "from": "cb", "to": "out", "coupling": "direct" } ] }"#,
        );
        let net = Netlist::build(&c).unwrap();
        let st = &net.stages[0];
        let t = net.transistors[0];
        assert_eq!((st.input, st.output), (t.terminals.e, t.terminals.c));
        let filter = net
            .resistors
            .iter()
            .find(|r| r.name == "supply_filter.resistance")
            .unwrap();
        assert_eq!(filter.a, 1, "from the 12 V rail");
        assert_eq!(net.node_phrase(filter.b), "stage \"cb\", filtered top");
        let cap = |name: &str| net.capacitors.iter().find(|c| c.name == name).unwrap();
        assert_eq!(
            (
                cap("supply_filter.capacitance").a,
                cap("supply_filter.capacitance").b
            ),
            (filter.b, GROUND_NODE)
        );
        assert_eq!(
            (cap("c_base").a, cap("c_base").b),
            (t.terminals.b, GROUND_NODE)
        );
        // The load's direct link joins the collector to the load node.
        let link = net
            .resistors
            .iter()
            .find(|r| r.name == "direct link")
            .unwrap();
        assert_eq!((link.a, link.b), (st.output, net.loads[0]));
    }
}
