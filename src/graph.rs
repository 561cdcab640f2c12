//! The chain as a graph (petgraph): the source, stages and loads are nodes, links are
//! edges carrying their coupling. Built and checked once; the passes then walk the
//! flat arrays kept here (topological order, drivers, successors) without allocating.

use crate::chain::{name_list, ChainError, Fields, Load, Stage};
use crate::spec::{ChainSpec, ValueSpec};
use crate::units::Kind;
use petgraph::algo::toposort;
use petgraph::graph::{DiGraph, NodeIndex};
use petgraph::visit::Bfs;
use petgraph::Direction;

/// A node of the chain graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Port {
    Source,
    Stage(usize),
    Load(usize),
}

/// One link as seen from its driver.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Branch {
    pub to: Port,
    /// Series coupling capacitance; `None` for a direct link.
    pub coupling: Option<f64>,
    /// Index of the link in the chain file.
    pub link: usize,
}

/// Where a feedback link ends (docs/definitions.md, "Feedback links").
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FeedbackInto {
    /// The stage's input node.
    Input,
    /// The stage's transistor emitter terminal, where `r_emitter` starts.
    Emitter,
}

/// A feedback link (`"coupling": "feedback"`): from stage `from`'s output node through
/// `resistance` (and `capacitance` in series, if any) back to stage `to`, which comes
/// before `from` in signal order. Kept apart from the forward links: the graph the
/// forward passes walk stays acyclic.
#[derive(Debug, Clone, PartialEq)]
pub struct Feedback {
    pub from: usize,
    pub to: usize,
    pub resistance: f64,
    pub capacitance: Option<f64>,
    pub into: FeedbackInto,
    /// Index of the link in the chain file.
    pub link: usize,
    /// The loop's stages, `to` first and `from` last, in signal order (each drives the next).
    pub stages: Vec<usize>,
}

/// A structural problem with the chain; the message names the ids and links.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum GraphError {
    #[error("stages: found an empty list, expected at least one stage")]
    NoStages,
    #[error("{path}: found the id \"{id}\" a second time (first used at {first}); expected every stage and load id to be unique")]
    DuplicateId {
        path: String,
        id: String,
        first: String,
    },
    #[error("{path}: found the id \"source\", which names the signal source; expected another id")]
    ReservedId { path: String },
    #[error(
        "{path}: found {}, which is no stage or load; expected \"source\" or one of {known}{hint}",
        crate::text::quote(id)
    )]
    UnknownId {
        path: String,
        id: String,
        known: String,
        /// What differs from a known id that looks the same (empty if none does).
        hint: String,
    },
    #[error(
        "{path}: found a link from \"{id}\" to itself; expected a link to another stage or load"
    )]
    SelfLink { path: String, id: String },
    #[error("{path}: found a link into \"source\"; expected the source only as a link's \"from\"")]
    IntoSource { path: String },
    #[error("{path}: found a link out of load \"{id}\"; expected loads only at the end of links")]
    FromLoad { path: String, id: String },
    #[error("links[{second}]: found a second driver for \"{id}\" (\"{from_second}\"; links[{first}] already drives it from \"{from_first}\"); expected one driver per input")]
    FanIn {
        id: String,
        first: usize,
        second: usize,
        from_first: String,
        from_second: String,
    },
    #[error("links: found a cycle through stage \"{id}\"; expected the signal to flow one way from the source to the loads")]
    Cycle { id: String },
    #[error("{what} \"{id}\": found no path from the source to it; expected every stage and load to be reached from \"source\"")]
    Unreachable { what: &'static str, id: String },
    #[error("stage \"{id}\": found no link out of it; expected it to drive a stage or a load")]
    DrivesNothing { id: String },
    #[error("stage \"{id}\": found no DC path to its {terminal} (capacitor-coupled input and neither r_top nor r_bottom); expected a bias divider or a direct link")]
    NoBasePath { id: String, terminal: &'static str },
    #[error("stage \"{id}\": found no DC path to its emitter (capacitor-coupled input and no r_emitter); expected r_emitter or a direct link from a driver that carries the emitter current")]
    NoEmitterPath { id: String },
    #[error("stage \"{id}\": found no DC path to its collector (no r_collector, and no direct link into a common_base stage's emitter); expected r_collector, or a direct link into a common_base stage that carries the collector current (a cascode)")]
    NoCollectorPath { id: String },
    #[error("source: found no link out of it; expected it to drive the first stage")]
    SourceDrivesNothing,
    #[error("{path}: found \"{key}\" on a link whose coupling is {coupling}; expected \"resistance\", \"capacitance\" and \"into\" only on a feedback link (\"coupling\": \"feedback\")")]
    FeedbackKeyOnForward {
        path: String,
        key: &'static str,
        coupling: String,
    },
    #[error("{path}: found a feedback link without \"{key}\"; expected {expected}")]
    FeedbackMissing {
        path: String,
        key: &'static str,
        expected: &'static str,
    },
    #[error("{path}: found a feedback link {what} {}; expected a feedback link from a stage's output back to an earlier stage", crate::text::quote(id))]
    FeedbackEnd {
        path: String,
        what: &'static str,
        id: String,
    },
    #[error("links[{link}]: found a feedback link from {} to {}, but no forward path leads from {} to {}; expected \"to\" to be an earlier stage on the signal path into \"from\" (the loop's stages in signal order)", crate::text::quote(from), crate::text::quote(to), crate::text::quote(to), crate::text::quote(from))]
    FeedbackNotBackward {
        link: usize,
        from: String,
        to: String,
    },
    #[error("links[{link}].into: found \"emitter\", but stage {} has no transistor emitter; expected \"input\", or a stage with a transistor", crate::text::quote(id))]
    FeedbackNoEmitter { link: usize, id: String },
    #[error("links[{link}]: found a loop sharing stage {} with the loop of links[{other}]; expected each stage in at most one loop", crate::text::quote(id))]
    FeedbackOverlap {
        link: usize,
        other: usize,
        id: String,
    },
}

/// The checked structure of a chain.
#[derive(Debug, Clone)]
pub struct Topology {
    pub graph: DiGraph<Port, usize>,
    /// Stage indices in signal order (every driver before what it drives).
    pub order: Vec<usize>,
    /// Driver and coupling of each stage's input.
    pub stage_driver: Vec<(Port, Option<f64>)>,
    /// Driver and coupling of each load.
    pub load_driver: Vec<(Port, Option<f64>)>,
    /// Successors of the source (slot 0) and of stage i (slot i + 1), in link order.
    succ_start: Vec<usize>,
    succ: Vec<Branch>,
    /// True when a direct link joins two stages or the source drives several stages
    /// directly: the DC pass must then iterate until the shared nodes agree.
    pub dc_needs_iteration: bool,
    /// DC groups: stages joined by direct links (and stages the source drives
    /// directly, which share the source node). Capacitors block DC, so each group is
    /// solved on its own. `dc_group_stages` lists the stages group by group, each group
    /// in signal order; group g is `dc_group_stages[dc_group_start[g]..dc_group_start[g + 1]]`.
    dc_group_start: Vec<usize>,
    dc_group_stages: Vec<usize>,
    /// Feedback links, in chain-file order (not in `graph`, `succ` or the drivers).
    pub feedback: Vec<Feedback>,
    /// The loop (index into `feedback`) each stage is on, if any.
    pub loop_of: Vec<Option<usize>>,
}

/// Read and check the feedback links (`links[k]` with `"coupling": "feedback"`, from
/// `from` to `to`): both ends stages, the values, `into`, and the loop's stages, found by
/// walking the forward drivers back from `from` until `to` (one driver per input, so the
/// path is unique when it exists). Loops may not share a stage.
fn feedback_loops(
    spec: &ChainSpec,
    stages: &[Stage],
    stage_driver: &[(Port, Option<f64>)],
    links: &[(usize, Port, Port)],
    id_of: &dyn Fn(Port) -> String,
) -> Result<Vec<Feedback>, ChainError> {
    let mut loops: Vec<Feedback> = Vec::with_capacity(links.len());
    for &(k, from, to) in links {
        let link = &spec.links[k];
        let f = Fields::new(format!("links[{k}]"));
        let (from, to) = match (from, to) {
            (Port::Stage(a), Port::Stage(b)) => (a, b),
            (Port::Source, _) => {
                return Err(GraphError::FeedbackEnd {
                    path: f.path("from"),
                    what: "out of",
                    id: "source".into(),
                }
                .into())
            }
            (_, p) => {
                return Err(GraphError::FeedbackEnd {
                    path: f.path("to"),
                    what: "into",
                    id: id_of(p),
                }
                .into())
            }
        };
        let resistance = match &link.resistance {
            Some(v) => f.positive("resistance", v, Kind::Resistance)?,
            None => {
                return Err(GraphError::FeedbackMissing {
                    path: format!("links[{k}]"),
                    key: "resistance",
                    expected: "the feedback resistor, such as \"22k\"",
                }
                .into())
            }
        };
        let capacitance = match &link.capacitance {
            Some(v) => Some(f.positive("capacitance", v, Kind::Capacitance)?),
            None => None,
        };
        let into = match link.into.as_deref().map(str::trim) {
            Some("input") => FeedbackInto::Input,
            Some("emitter") => FeedbackInto::Emitter,
            Some(other) => {
                return Err(f.invalid(
                    "into",
                    crate::text::quote_value(other),
                    "\"input\" or \"emitter\"",
                ))
            }
            None => return Err(GraphError::FeedbackMissing {
                path: format!("links[{k}]"),
                key: "into",
                expected:
                    "\"input\" (the stage's input node) or \"emitter\" (its transistor's emitter)",
            }
            .into()),
        };
        if into == FeedbackInto::Emitter {
            let c = stages[to]
                .kind
                .model()
                .circuit(&crate::device::Device::default());
            if c.bjt_nodes().is_none() {
                return Err(GraphError::FeedbackNoEmitter {
                    link: k,
                    id: stages[to].id.clone(),
                }
                .into());
            }
        }
        // The loop's stages: back along the drivers from `from` to `to`.
        let mut path = vec![from];
        let mut at = from;
        while at != to {
            match stage_driver[at].0 {
                Port::Stage(d) => {
                    path.push(d);
                    at = d;
                }
                _ => {
                    return Err(GraphError::FeedbackNotBackward {
                        link: k,
                        from: stages[from].id.clone(),
                        to: stages[to].id.clone(),
                    }
                    .into())
                }
            }
        }
        path.reverse();
        if let Some((other, id)) = loops.iter().find_map(|l| {
            path.iter()
                .find(|i| l.stages.contains(i))
                .map(|&i| (l.link, stages[i].id.clone()))
        }) {
            return Err(GraphError::FeedbackOverlap { link: k, other, id }.into());
        }
        loops.push(Feedback {
            from,
            to,
            resistance,
            capacitance,
            into,
            link: k,
            stages: path,
        });
    }
    Ok(loops)
}

fn slot(p: Port) -> usize {
    match p {
        Port::Source => 0,
        Port::Stage(i) => i + 1,
        Port::Load(_) => unreachable!("loads drive nothing (checked in Topology::build)"),
    }
}

impl Topology {
    /// What a driver (the source or a stage) feeds.
    pub fn successors(&self, driver: Port) -> &[Branch] {
        let s = slot(driver);
        &self.succ[self.succ_start[s]..self.succ_start[s + 1]]
    }

    /// Give link `link` (index in the chain file) the coupling capacitance `c`, where
    /// it is a capacitor; a direct link stays direct. Used to write a build's drawn
    /// capacitor values in place (spread at a frequency).
    pub fn set_coupling(&mut self, link: usize, c: f64) {
        for b in self.succ.iter_mut().filter(|b| b.link == link) {
            if b.coupling.is_some() {
                b.coupling = Some(c);
            }
            let slot = match b.to {
                Port::Stage(i) => &mut self.stage_driver[i],
                Port::Load(k) => &mut self.load_driver[k],
                Port::Source => continue,
            };
            if slot.1.is_some() {
                slot.1 = Some(c);
            }
        }
    }

    /// The DC groups, each a list of stage indices in signal order (see `dc_group_stages`).
    pub fn dc_groups(&self) -> impl Iterator<Item = &[usize]> + '_ {
        self.dc_group_start
            .windows(2)
            .map(|w| &self.dc_group_stages[w[0]..w[1]])
    }

    pub fn build(
        spec: &ChainSpec,
        stages: &[Stage],
        loads: &[Load],
    ) -> Result<Topology, ChainError> {
        if stages.is_empty() {
            return Err(GraphError::NoStages.into());
        }
        // Ids: unique across stages and loads, "source" reserved.
        let mut seen: Vec<(&str, String)> = Vec::new();
        let ids = stages
            .iter()
            .enumerate()
            .map(|(i, s)| (s.id.as_str(), format!("stages[{i}].id")))
            .chain(
                loads
                    .iter()
                    .enumerate()
                    .map(|(i, l)| (l.id.as_str(), format!("loads[{i}].id"))),
            );
        for (id, path) in ids {
            if id == "source" {
                return Err(GraphError::ReservedId { path }.into());
            }
            if let Some((_, first)) = seen.iter().find(|(s, _)| *s == id) {
                return Err(GraphError::DuplicateId {
                    path,
                    id: id.to_string(),
                    first: first.clone(),
                }
                .into());
            }
            seen.push((id, path));
        }
        let lookup = |id: &str| -> Option<Port> {
            if id == "source" {
                return Some(Port::Source);
            }
            stages
                .iter()
                .position(|s| s.id == id)
                .map(Port::Stage)
                .or_else(|| loads.iter().position(|l| l.id == id).map(Port::Load))
        };
        let known = || {
            name_list(
                stages
                    .iter()
                    .map(|s| s.id.as_str())
                    .chain(loads.iter().map(|l| l.id.as_str())),
            )
        };
        let id_of = |p: Port| -> String {
            match p {
                Port::Source => "source".into(),
                Port::Stage(i) => stages[i].id.clone(),
                Port::Load(i) => loads[i].id.clone(),
            }
        };

        let mut graph = DiGraph::<Port, usize>::new();
        let source_node = graph.add_node(Port::Source);
        let stage_nodes: Vec<NodeIndex> = (0..stages.len())
            .map(|i| graph.add_node(Port::Stage(i)))
            .collect();
        let load_nodes: Vec<NodeIndex> = (0..loads.len())
            .map(|i| graph.add_node(Port::Load(i)))
            .collect();
        let node_of = |p: Port| match p {
            Port::Source => source_node,
            Port::Stage(i) => stage_nodes[i],
            Port::Load(i) => load_nodes[i],
        };

        let mut stage_driver: Vec<Option<(Port, Option<f64>, usize)>> = vec![None; stages.len()];
        let mut load_driver: Vec<Option<(Port, Option<f64>, usize)>> = vec![None; loads.len()];
        let mut branches: Vec<(Port, Branch)> = Vec::with_capacity(spec.links.len());
        let mut feedback_links: Vec<(usize, Port, Port)> = Vec::new();
        for (k, link) in spec.links.iter().enumerate() {
            let f = Fields::new(format!("links[{k}]"));
            let resolve = |field: &str, id: &str| {
                lookup(id).ok_or_else(|| GraphError::UnknownId {
                    path: f.path(field),
                    id: id.to_string(),
                    known: known(),
                    hint: crate::text::lookalike(
                        id,
                        stages
                            .iter()
                            .map(|s| s.id.as_str())
                            .chain(loads.iter().map(|l| l.id.as_str())),
                    ),
                })
            };
            let from = resolve("from", &link.from)?;
            let to = resolve("to", &link.to)?;
            if from == to {
                return Err(GraphError::SelfLink {
                    path: format!("links[{k}]"),
                    id: link.from.clone(),
                }
                .into());
            }
            if to == Port::Source {
                return Err(GraphError::IntoSource { path: f.path("to") }.into());
            }
            if let Port::Load(_) = from {
                return Err(GraphError::FromLoad {
                    path: f.path("from"),
                    id: link.from.clone(),
                }
                .into());
            }
            if matches!(&link.coupling, ValueSpec::Text(t) if t.trim() == "feedback") {
                feedback_links.push((k, from, to));
                continue;
            }
            let coupling = match &link.coupling {
                ValueSpec::Text(t) if t.trim() == "direct" => None,
                ValueSpec::Text(t) if t.chars().all(|c| c.is_alphabetic() || c == '_') => {
                    return Err(f.invalid(
                        "coupling",
                        format!("\"{t}\""),
                        "\"direct\", \"feedback\" or a capacitance such as \"10u\"",
                    ));
                }
                v => Some(f.positive("coupling", v, Kind::Capacitance)?),
            };
            for (key, present) in [
                ("resistance", link.resistance.is_some()),
                ("capacitance", link.capacitance.is_some()),
                ("into", link.into.is_some()),
            ] {
                if present {
                    return Err(GraphError::FeedbackKeyOnForward {
                        path: f.path(key),
                        key,
                        coupling: match coupling {
                            None => "\"direct\"".into(),
                            Some(_) => "a capacitance".into(),
                        },
                    }
                    .into());
                }
            }
            let slot = match to {
                Port::Stage(i) => &mut stage_driver[i],
                Port::Load(i) => &mut load_driver[i],
                Port::Source => unreachable!("checked above"),
            };
            if let Some((first_from, _, first)) = *slot {
                return Err(GraphError::FanIn {
                    id: link.to.clone(),
                    first,
                    second: k,
                    from_first: id_of(first_from),
                    from_second: link.from.clone(),
                }
                .into());
            }
            *slot = Some((from, coupling, k));
            graph.add_edge(node_of(from), node_of(to), k);
            branches.push((
                from,
                Branch {
                    to,
                    coupling,
                    link: k,
                },
            ));
        }

        // Signal order; a cycle is reported by the stage where it was found.
        let sorted = toposort(&graph, None).map_err(|c| GraphError::Cycle {
            id: id_of(graph[c.node_id()]),
        })?;
        let mut reached = vec![false; graph.node_count()];
        let mut bfs = Bfs::new(&graph, source_node);
        while let Some(n) = bfs.next(&graph) {
            reached[n.index()] = true;
        }
        for (i, n) in stage_nodes.iter().enumerate() {
            if !reached[n.index()] {
                return Err(GraphError::Unreachable {
                    what: "stage",
                    id: stages[i].id.clone(),
                }
                .into());
            }
        }
        for (i, n) in load_nodes.iter().enumerate() {
            if !reached[n.index()] {
                return Err(GraphError::Unreachable {
                    what: "load",
                    id: loads[i].id.clone(),
                }
                .into());
            }
        }
        if graph
            .neighbors_directed(source_node, Direction::Outgoing)
            .next()
            .is_none()
        {
            return Err(GraphError::SourceDrivesNothing.into());
        }
        for (i, n) in stage_nodes.iter().enumerate() {
            if graph
                .neighbors_directed(*n, Direction::Outgoing)
                .next()
                .is_none()
            {
                return Err(GraphError::DrivesNothing {
                    id: stages[i].id.clone(),
                }
                .into());
            }
        }
        let stage_driver: Vec<(Port, Option<f64>)> = stage_driver
            .into_iter()
            .map(|d| {
                d.map(|(p, c, _)| (p, c))
                    .expect("reached stages have a driver")
            })
            .collect();
        let feedback = feedback_loops(spec, stages, &stage_driver, &feedback_links, &id_of)?;
        for (i, s) in stages.iter().enumerate() {
            // A capacitor-coupled input needs a DC path of the stage's own: a resistor
            // or wire at its input node (the divider of a base, `r_emitter` of a
            // common-base emitter), or a feedback link without a capacitor into it.
            let c = s.kind.model().circuit(&crate::device::Device::default());
            let own_path = c.elements().iter().any(|e| {
                matches!(e, crate::circuit::Element::Resistor { .. }) && {
                    let (a, b) = e.nodes();
                    a == c.input || b == c.input
                }
            });
            // A transistor output without a resistor of its own (a cascode's lower
            // collector) needs a direct link into a common-base emitter, which carries
            // its current. (A stage without a device needs no DC path at all.)
            let has_device = c.bjt_nodes().is_some();
            if has_device && !c.rests_on_rails(c.output) {
                let into_emitter = branches.iter().any(|(from, b)| {
                    *from == Port::Stage(i)
                        && b.coupling.is_none()
                        && match b.to {
                            Port::Stage(j) => {
                                let d = stages[j]
                                    .kind
                                    .model()
                                    .circuit(&crate::device::Device::default());
                                d.terminal_of(d.input) == crate::circuit::Terminal::Emitter
                            }
                            _ => false,
                        }
                });
                if !into_emitter {
                    return Err(GraphError::NoCollectorPath { id: s.id.clone() }.into());
                }
            }
            let fed_back = feedback
                .iter()
                .any(|l| l.to == i && l.into == FeedbackInto::Input && l.capacitance.is_none());
            if has_device && stage_driver[i].1.is_some() && !own_path && !fed_back {
                return Err(match c.terminal_of(c.input) {
                    crate::circuit::Terminal::Emitter => {
                        GraphError::NoEmitterPath { id: s.id.clone() }
                    }
                    _ => GraphError::NoBasePath {
                        id: s.id.clone(),
                        // A JFET's control terminal is its gate.
                        terminal: if s.kind.model().takes_jfet() {
                            "gate"
                        } else {
                            "base"
                        },
                    },
                }
                .into());
            }
        }
        let load_driver = load_driver
            .into_iter()
            .map(|d| {
                d.map(|(p, c, _)| (p, c))
                    .expect("reached loads have a driver")
            })
            .collect();

        // Successor lists, flat, grouped by driver slot, in link order.
        let n_slots = stages.len() + 1;
        let mut succ_start = vec![0usize; n_slots + 1];
        for (from, _) in &branches {
            succ_start[slot(*from) + 1] += 1;
        }
        for s in 0..n_slots {
            succ_start[s + 1] += succ_start[s];
        }
        let mut fill = succ_start.clone();
        let mut succ = vec![
            Branch {
                to: Port::Source,
                coupling: None,
                link: 0
            };
            branches.len()
        ];
        for (from, b) in &branches {
            let s = slot(*from);
            succ[fill[s]] = *b;
            fill[s] += 1;
        }

        let order: Vec<usize> = sorted
            .into_iter()
            .filter_map(|n| match graph[n] {
                Port::Stage(i) => Some(i),
                _ => None,
            })
            .collect();
        let direct_stage_links = |from: Port| {
            branches
                .iter()
                .filter(|(f, b)| {
                    *f == from && b.coupling.is_none() && matches!(b.to, Port::Stage(_))
                })
                .count()
        };
        let dc_needs_iteration = direct_stage_links(Port::Source) > 1
            || (0..stages.len()).any(|i| direct_stage_links(Port::Stage(i)) > 0);

        let (dc_group_start, dc_group_stages) = dc_groups(&order, &stage_driver, &feedback);
        let mut loop_of = vec![None; stages.len()];
        for (k, l) in feedback.iter().enumerate() {
            for &i in &l.stages {
                loop_of[i] = Some(k);
            }
        }
        Ok(Topology {
            graph,
            order,
            stage_driver,
            load_driver,
            succ_start,
            succ,
            dc_needs_iteration,
            dc_group_start,
            dc_group_stages,
            feedback,
            loop_of,
        })
    }
}

/// Split the stages into DC groups: a stage joins its driver's group when the link is
/// direct; all stages the source drives directly form one group (they share the source
/// node); any other stage starts a group. Returns group starts and the stages, each
/// group in signal order, groups in the order of their first stage.
///
/// A feedback link without a series capacitor is a DC path: the groups of its two
/// ends become one (docs/definitions.md "Feedback links").
fn dc_groups(
    order: &[usize],
    stage_driver: &[(Port, Option<f64>)],
    feedback: &[Feedback],
) -> (Vec<usize>, Vec<usize>) {
    const NONE: usize = usize::MAX;
    let mut group = vec![NONE; stage_driver.len()];
    let mut source_group = NONE;
    let mut n_groups = 0;
    for &i in order {
        group[i] = match stage_driver[i] {
            (Port::Stage(u), None) => group[u],
            (Port::Source, None) if source_group != NONE => source_group,
            (driver, _) => {
                n_groups += 1;
                if driver == Port::Source && stage_driver[i].1.is_none() {
                    source_group = n_groups - 1;
                }
                n_groups - 1
            }
        };
    }
    let resistive: Vec<(usize, usize)> = feedback
        .iter()
        .filter(|l| l.capacitance.is_none())
        .map(|l| (l.from, l.to))
        .collect();
    if !resistive.is_empty() {
        for (a, b) in resistive {
            let (keep, gone) = (group[a].min(group[b]), group[a].max(group[b]));
            group
                .iter_mut()
                .filter(|g| **g == gone)
                .for_each(|g| *g = keep);
        }
        // Number the groups again in the order of their first stage.
        let mut renumber = vec![NONE; n_groups];
        n_groups = 0;
        for &i in order {
            if renumber[group[i]] == NONE {
                renumber[group[i]] = n_groups;
                n_groups += 1;
            }
        }
        group.iter_mut().for_each(|g| *g = renumber[*g]);
    }
    let mut start = vec![0usize; n_groups + 1];
    for &g in &group {
        start[g + 1] += 1;
    }
    for g in 0..n_groups {
        start[g + 1] += start[g];
    }
    let mut fill = start.clone();
    let mut stages = vec![0usize; order.len()];
    for &i in order {
        stages[fill[group[i]]] = i;
        fill[group[i]] += 1;
    }
    (start, stages)
}

#[cfg(test)]
mod tests {
    use crate::chain::Chain;

    /// Stage ids of every DC group of a chain.
    fn groups(text: &str) -> Vec<Vec<String>> {
        let chain = Chain::from_json_str(text).expect("valid chain");
        chain
            .topology
            .dc_groups()
            .map(|g| g.iter().map(|&i| chain.stages[i].id.clone()).collect())
            .collect()
    }

    fn chain(stages: &[&str], links: &[(&str, &str, &str)]) -> String {
        let stages: Vec<String> = stages
            .iter()
            .map(|id| {
                format!(
                    r#"{{ "id": "{id}", "type": "emitter_follower", "device": "q",
                         "r_top": "100k", "r_bottom": "100k", "r_emitter": "4k7" }}"#
                )
            })
            .collect();
        let links: Vec<String> = links
            .iter()
            .map(|(f, t, c)| format!(r#"{{ "from": "{f}", "to": "{t}", "coupling": "{c}" }}"#))
            .collect();
        format!(
            r#"{{ "supply": "12 V", "devices": {{ "q": {{ "polarity": "npn", "beta": 200 }} }},
                 "source": {{ "resistance": "1k" }}, "stages": [{}],
                 "loads": [ {{ "id": "out", "resistance": "10k" }} ], "links": [{}] }}"#,
            stages.join(","),
            links.join(",")
        )
    }

    /// A chain of common-emitter stages `a`, `b`, `c` (capacitor-coupled, `a` without a
    /// divider when `a_divider` is false) with one feedback link `fb` (JSON text).
    fn looped_spec(a_divider: bool, fb: &str) -> crate::spec::ChainSpec {
        let stage = |id: &str, divider: bool| {
            let divider = if divider {
                r#""r_top": "100k", "r_bottom": "22k","#
            } else {
                ""
            };
            format!(
                r#"{{ "id": "{id}", "type": "common_emitter", "device": "q", {divider}
                     "r_collector": "10k", "r_emitter": "1k" }}"#
            )
        };
        let text = format!(
            r#"{{ "supply": "15 V", "devices": {{ "q": {{ "polarity": "npn", "beta": 200 }} }},
                 "source": {{ "resistance": "1k" }},
                 "stages": [{}, {}, {}],
                 "loads": [ {{ "id": "out", "resistance": "10k" }} ],
                 "links": [ {{ "from": "source", "to": "a", "coupling": "1u" }},
                            {{ "from": "a", "to": "b", "coupling": "1u" }},
                            {{ "from": "b", "to": "c", "coupling": "direct" }},
                            {{ "from": "c", "to": "out", "coupling": "1u" }},
                            {fb} ] }}"#,
            stage("a", a_divider),
            stage("b", true),
            stage("c", false)
        );
        crate::spec::parse_chain_text(&text).expect("JSON")
    }

    fn looped(a_divider: bool, fb: &str) -> Result<Chain, crate::chain::ChainError> {
        Chain::from_spec(&looped_spec(a_divider, fb))
    }

    #[test]
    fn a_feedback_link_is_kept_apart_with_its_loop_in_signal_order() {
        use super::{Feedback, FeedbackInto};
        let fb = r#"{ "from": "c", "to": "a", "coupling": "feedback", "resistance": "22k",
                      "capacitance": "10u", "into": "emitter" }"#;
        let chain = looped(true, fb).expect("a valid loop");
        let t = &chain.topology;
        let [l] = &t.feedback[..] else {
            panic!("one loop, found {:?}", t.feedback)
        };
        // "10u" read as 10·10⁻⁶ (a rounding away from 1e-5).
        assert!((l.capacitance.expect("series capacitor") - 10e-6).abs() < 1e-18);
        assert_eq!(
            l,
            &Feedback {
                capacitance: l.capacitance,
                from: 2,
                to: 0,
                resistance: 22e3,
                into: FeedbackInto::Emitter,
                link: 4,
                stages: vec![0, 1, 2],
            }
        );
        // The forward graph is unchanged: acyclic, four edges, c drives only the load.
        assert_eq!(t.graph.edge_count(), 4);
        assert_eq!(t.order, vec![0, 1, 2]);
        assert_eq!(t.successors(super::Port::Stage(2)).len(), 1);
    }

    #[test]
    fn a_resistive_feedback_link_joins_the_dc_groups_of_its_ends() {
        // docs/definitions.md "Feedback links": without a series capacitor the link is a
        // DC path, so its two ends are solved as one DC network; with one they are not.
        let fb = |c: &str| {
            format!(
                r#"{{ "from": "c", "to": "a", "coupling": "feedback", "resistance": "220k",
                      {c} "into": "input" }}"#
            )
        };
        let sizes = |chain: Chain| -> Vec<usize> {
            chain.topology.dc_groups().map(<[usize]>::len).collect()
        };
        let apart = sizes(looped(true, &fb(r#""capacitance": "1u","#)).expect("valid"));
        let joined = sizes(looped(true, &fb("")).expect("valid"));
        assert_eq!(joined.iter().sum::<usize>(), apart.iter().sum::<usize>());
        assert!(joined.len() < apart.len(), "{apart:?} → {joined:?}");
        assert!(
            joined.contains(&3),
            "one group holds the loop a → c: {joined:?}"
        );
    }

    #[test]
    fn a_resistive_feedback_link_into_a_base_is_its_dc_path() {
        // Without a divider the base's DC comes through the feedback resistor (as with
        // `r_feedback`); with a series capacitor in the link there is none.
        let fb = |c: &str| {
            format!(
                r#"{{ "from": "c", "to": "a", "coupling": "feedback", "resistance": "220k",
                      {c} "into": "input" }}"#
            )
        };
        assert!(looped(false, &fb("")).is_ok());
        let err = looped(false, &fb(r#""capacitance": "1u","#)).expect_err("no DC path");
        assert!(err
            .to_string()
            .contains("stage \"a\": found no DC path to its base"));
    }

    #[test]
    fn capacitors_split_dc_groups_and_direct_links_join_them() {
        // Capacitors block DC (definition of the midband/DC model in docs/definitions.md).
        let text = chain(
            &["a", "b", "c", "d"],
            &[
                ("source", "a", "1u"),
                ("a", "b", "1u"),
                ("b", "c", "direct"),
                ("c", "d", "direct"),
                ("d", "out", "1u"),
            ],
        );
        assert_eq!(groups(&text), vec![vec!["a"], vec!["b", "c", "d"]]);
    }

    #[test]
    fn stages_the_source_drives_directly_share_a_group() {
        // Two bases on the source node: one node, so one DC problem.
        let text = chain(
            &["a", "b", "c"],
            &[
                ("source", "a", "direct"),
                ("source", "b", "direct"),
                ("a", "c", "1u"),
                ("b", "out", "1u"),
                ("c", "out2", "1u"),
            ],
        )
        .replace(
            r#"{ "id": "out", "resistance": "10k" }"#,
            r#"{ "id": "out", "resistance": "10k" }, { "id": "out2", "resistance": "10k" }"#,
        );
        // Siblings may come in either order; each group is in signal order.
        let mut found = groups(&text);
        found.iter_mut().for_each(|g| g.sort());
        found.sort();
        assert_eq!(found, vec![vec!["a", "b"], vec!["c"]]);
    }
}
