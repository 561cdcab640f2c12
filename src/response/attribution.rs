//! Which capacitor sets each corner: time-constant estimates (the explanation, not
//! the numbers; the corners themselves come from the exact response).
//!
//! - Low corner: short-circuit time constants. Each low-frequency capacitor (coupling
//!   capacitors on links, the stages' own bypass capacitors) sees a resistance R with
//!   the other low-frequency capacitors shorted and device capacitances open (the
//!   midband network); f_L ≈ Σ 1/(2π·R·C), and each capacitor's share is its term.
//! - High corner: open-circuit time constants. Each device capacitance (C_π, C_μ), each
//!   op-amp's pole closed by its stage's loop (time constant 1/(2π·GBW/A_0·(1 + T))) and
//!   shunt capacitance (source, load, a low-pass stage's capacitor) sees R with the other high-frequency
//!   capacitances open and the low-frequency capacitors shorted (again the midband
//!   network); f_H ≈ 1/(2π·Σ R·C), each share is R·C/Σ R·C.
//!
//! Both are the textbook estimates (any analog electronics text, from memory). For a
//! load they take the capacitors on the signal path from the source to that load;
//! capacitors on side branches (another load's coupling or shunt capacitor, a stage
//! that does not lead to this load) change this load's response only through the
//! loading of a shared node, which the exact response includes and the estimate
//! leaves out.

use super::local::{self, Surroundings};
use crate::ac::{branch_of, driver_node};
use crate::chain::Chain;
use crate::device::DeviceModel;
use crate::evaluate::Evaluation;
use crate::graph::{Branch, Port};
use crate::network::Freq;
use num_complex::Complex64;
use serde::Serialize;
use std::f64::consts::PI;

/// Which kind of capacitor a contribution comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Element {
    /// A coupling capacitor on a link.
    Coupling,
    /// A stage's own capacitor (the emitter bypass capacitor).
    Bypass,
    /// C_π of a stage's transistor.
    CPi,
    /// C_μ of a stage's transistor.
    CMu,
    /// C_gs of a stage's JFET (in C_π's place).
    CGs,
    /// C_gd of a stage's JFET (in C_μ's place).
    CGd,
    /// The source's shunt capacitance.
    SourceCapacitance,
    /// A load's shunt capacitance.
    LoadCapacitance,
    /// A stage's own capacitor that is open at midband (a low-pass's shunt C).
    Filter,
    /// An op-amp's open-loop pole, closed by the stage's feedback: its time constant
    /// is 1/(2π·GBW/A_0·(1 + T)) (no R and C of its own: null).
    OpampPole,
}

/// One capacitor's time constant and its share of a corner estimate.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Contribution {
    pub element: Element,
    /// Stage the capacitor belongs to (bypass, C_π, C_μ).
    pub stage: Option<String>,
    /// The chain-file key of a stage's own capacitor (`c_bypass`, `c_base`,
    /// `supply_filter.capacitance`, a filter's `capacitance`); `element` is "bypass"
    /// for those shorted at midband, "filter" for those open there.
    pub field: Option<&'static str>,
    /// Index of the link in the chain file (coupling capacitors).
    pub link: Option<usize>,
    /// Ends of the link (coupling capacitors).
    pub from: Option<String>,
    pub to: Option<String>,
    /// Load the capacitance belongs to (load capacitance).
    pub load: Option<String>,
    /// C in farads.
    pub capacitance: f64,
    /// The resistance the capacitor sees, ohms.
    pub resistance: f64,
    /// R·C in seconds.
    pub time_constant: f64,
    /// 1/(2π·R·C) in hertz.
    pub frequency: f64,
    /// Share of the estimate (0..1): 1/(RC) over Σ 1/(RC) (low), RC over Σ RC (high).
    pub share: f64,
    /// The capacitor in plain words.
    pub description: String,
}

impl Contribution {
    fn new(element: Element, capacitance: f64, resistance: f64, description: String) -> Self {
        let time_constant = resistance * capacitance;
        Contribution {
            element,
            stage: None,
            field: None,
            link: None,
            from: None,
            to: None,
            load: None,
            capacitance,
            resistance,
            time_constant,
            frequency: 1.0 / (2.0 * PI * time_constant),
            share: 0.0,
            description,
        }
    }
}

/// Low or high corner.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Band {
    Low,
    High,
}

impl Band {
    pub fn name(self) -> &'static str {
        match self {
            Band::Low => "low",
            Band::High => "high",
        }
    }
}

fn port_id(chain: &Chain, p: Port) -> String {
    match p {
        Port::Source => "source".into(),
        Port::Stage(i) => chain.stages[i].id.clone(),
        Port::Load(k) => chain.loads[k].id.clone(),
    }
}

/// The link (as a branch of its driver) that feeds `to`.
fn feeding_branch(chain: &Chain, driver: Port, to: Port) -> Branch {
    *chain
        .topology
        .successors(driver)
        .iter()
        .find(|b| b.to == to)
        .expect("the topology lists every link under its driver")
}

/// Stages on the signal path from the source to load `k`, in signal order, and the
/// links on it (each as its driver and branch).
fn path_to_load(chain: &Chain, k: usize) -> (Vec<usize>, Vec<(Port, Branch)>) {
    let topo = &chain.topology;
    let mut stages = Vec::new();
    let mut links = Vec::new();
    let (mut driver, _) = topo.load_driver[k];
    links.push((driver, feeding_branch(chain, driver, Port::Load(k))));
    while let Port::Stage(i) = driver {
        stages.push(i);
        let (up, _) = topo.stage_driver[i];
        links.push((up, feeding_branch(chain, up, Port::Stage(i))));
        driver = up;
    }
    stages.reverse();
    links.reverse();
    (stages, links)
}

/// The loop stage `i` is on and its position there.
fn loop_position(chain: &Chain, i: usize) -> Option<(usize, usize)> {
    let k = chain.topology.loop_of[i]?;
    let p = chain.topology.feedback[k]
        .stages
        .iter()
        .position(|&s| s == i)?;
    Some((k, p))
}

/// The loop and the driver's position when the link from `driver` to `to` runs inside
/// a loop (both ends on it).
fn in_loop_link(chain: &Chain, driver: Port, to: Port) -> Option<(usize, usize)> {
    let (Port::Stage(a), Port::Stage(b)) = (driver, to) else {
        return None;
    };
    let (k, p) = loop_position(chain, a)?;
    (chain.topology.feedback[k].stages.get(p + 1) == Some(&b)).then_some((k, p))
}

/// Midband surroundings of stage `i`: its driver (with the link, a short at
/// midband) and its load.
fn surroundings(mid: &Evaluation, i: usize) -> Surroundings {
    Surroundings {
        z_source: mid.ac[i].z_source,
        y_load: mid.ac[i].y_load,
    }
}

/// Contributions to the low corner of load `k`, shares filled, largest first.
/// `mid` is the chain evaluated at midband.
pub fn low_frequency(chain: &Chain, mid: &Evaluation, k: usize) -> Vec<Contribution> {
    let freq = Freq::Midband;
    let (stages, links) = path_to_load(chain, k);
    let mut out = Vec::new();
    for (driver, branch) in links {
        let Some(c) = branch.coupling else { continue };
        let r = match in_loop_link(chain, driver, branch.to) {
            // A link inside a loop: what its capacitor sees with the loop closed.
            Some((k, p)) => {
                let l = &chain.topology.feedback[k];
                let (a, b) = (l.stages[p], l.stages[p + 1]);
                crate::loops::solve::resistance_between(
                    chain,
                    mid,
                    k,
                    (p, mid.dc[a].circuit.output),
                    (p + 1, mid.dc[b].circuit.input),
                    Some(crate::loops::group::link_out_of(p)),
                )
            }
            None => {
                // R = (driver node with this branch removed) + (what the link feeds).
                let y_branch = branch_of(chain, freq, &mid.ac, &branch);
                let (_, z_node) = driver_node(chain, freq, &mid.ac, driver, y_branch);
                let z_into = match branch.to {
                    Port::Stage(d) => 1.0 / mid.ac[d].y_in,
                    Port::Load(l) => Complex64::new(chain.loads[l].r_l, 0.0),
                    Port::Source => Complex64::new(0.0, 0.0),
                };
                (z_node + z_into).re
            }
        };
        let (from, to) = (port_id(chain, driver), port_id(chain, branch.to));
        let mut ct = Contribution::new(
            Element::Coupling,
            c,
            r,
            format!("the coupling capacitor from \"{from}\" to \"{to}\""),
        );
        ct.link = Some(branch.link);
        ct.from = Some(from);
        ct.to = Some(to);
        out.push(ct);
    }
    for &i in &stages {
        let stage = &chain.stages[i];
        let model = stage.kind.model();
        let hp = chain.device_of(i).small_signal(&mid.dc[i].op, mid.v_t);
        let circuit = model.circuit(chain.device_of(i));
        // Element indices of the capacitors, for the loop network's `open`.
        let elements: Vec<usize> = circuit
            .elements()
            .iter()
            .enumerate()
            .filter(|(_, e)| {
                matches!(
                    e,
                    crate::circuit::Element::Capacitor {
                        open_at_midband: false,
                        ..
                    }
                )
            })
            .map(|(j, _)| j)
            .collect();
        for (j, (a, b, c, what, field)) in
            local::capacitors(&circuit, false).into_iter().enumerate()
        {
            let r = match loop_position(chain, i) {
                Some((k, p)) => crate::loops::solve::resistance_between(
                    chain,
                    mid,
                    k,
                    (p, a),
                    (p, b),
                    Some((p, elements[j])),
                ),
                None => {
                    local::resistance_between(&circuit, &hp, surroundings(mid, i), a, b, Some(j))
                }
            };
            let mut ct = Contribution::new(
                Element::Bypass,
                c,
                r,
                format!("the {what} of stage \"{}\"", stage.id),
            );
            ct.stage = Some(stage.id.clone());
            ct.field = Some(field);
            out.push(ct);
        }
    }
    share(Band::Low, &mut out);
    out
}

/// Contributions to the high corner of load `k`, shares filled, largest first.
pub fn high_frequency(chain: &Chain, mid: &Evaluation, k: usize) -> Vec<Contribution> {
    let freq = Freq::Midband;
    let (stages, links) = path_to_load(chain, k);
    let mut out = Vec::new();
    if chain.source.capacitance > 0.0 {
        // R at the source's output node: R_S ∥ everything it feeds.
        let (_, z) = driver_node(chain, freq, &mid.ac, Port::Source, Complex64::new(0.0, 0.0));
        out.push(Contribution::new(
            Element::SourceCapacitance,
            chain.source.capacitance,
            z.re,
            "the source capacitance".into(),
        ));
    }
    for &i in &stages {
        let stage = &chain.stages[i];
        let model = stage.kind.model();
        let hp = chain.device_of(i).small_signal(&mid.dc[i].op, mid.v_t);
        let around = surroundings(mid, i);
        let circuit = model.circuit(chain.device_of(i));
        let looped = loop_position(chain, i);
        let between = |a: usize, b: usize| match looped {
            Some((k, p)) => {
                crate::loops::solve::resistance_between(chain, mid, k, (p, a), (p, b), None)
            }
            None => local::resistance_between(&circuit, &hp, around, a, b, None),
        };
        for (a, b, c, what, field) in local::capacitors(&circuit, true) {
            let r = between(a, b);
            let mut ct = Contribution::new(
                Element::Filter,
                c,
                r,
                format!("the {what} of stage \"{}\"", stage.id),
            );
            ct.stage = Some(stage.id.clone());
            ct.field = Some(field);
            out.push(ct);
        }
        if let (Some(net), Some(amp)) = (&mid.dc[i].opamp, chain.device_of(i).opamp) {
            // On a loop, T in the closed loop; else in the stage's surroundings.
            let t = match looped {
                Some((k, p)) => crate::loops::solve::opamp_loop_gain(chain, mid, k, p),
                None => net.loop_gain(&amp, around.z_source, around.y_load),
            };
            if let Some(t) = t {
                // One pole: the closed loop moves it from GBW/A_0 to GBW/A_0·(1 + T).
                let f = amp.pole() * (1.0 + t);
                let mut ct = Contribution::new(
                    Element::OpampPole,
                    f64::NAN,
                    f64::NAN,
                    format!(
                        "the op-amp pole of stage \"{}\" (loop gain {:.4e})",
                        stage.id, t
                    ),
                );
                ct.time_constant = 1.0 / (2.0 * PI * f);
                ct.frequency = f;
                ct.stage = Some(stage.id.clone());
                out.push(ct);
            }
        }
        let Some(d) = circuit.bjt_nodes() else {
            continue;
        };
        let names = if chain.device_of(i).jfet.is_some() {
            [
                (Element::CGs, "C_gs (gate–source)"),
                (Element::CGd, "C_gd (gate–drain)"),
            ]
        } else {
            [
                (Element::CPi, "C_π (base–emitter)"),
                (Element::CMu, "C_μ (collector–base)"),
            ]
        };
        for ((element, name), c, other) in [(names[0], hp.c_pi, d.e), (names[1], hp.c_mu, d.c)] {
            if c <= 0.0 {
                continue;
            }
            let r = between(d.b, other);
            let mut ct =
                Contribution::new(element, c, r, format!("{name} of stage \"{}\"", stage.id));
            ct.stage = Some(stage.id.clone());
            out.push(ct);
        }
    }
    let load = &chain.loads[k];
    if load.capacitance > 0.0 {
        // R across the load: R_L ∥ (driver node with the load removed, link shorted).
        let (driver, branch) = links.last().copied().expect("a load has a feeding link");
        let y_branch = branch_of(chain, freq, &mid.ac, &branch);
        let (_, z_node) = driver_node(chain, freq, &mid.ac, driver, y_branch);
        let r = 1.0 / (1.0 / load.r_l + (1.0 / z_node).re);
        let mut ct = Contribution::new(
            Element::LoadCapacitance,
            load.capacitance,
            r,
            format!("the capacitance of load \"{}\"", load.id),
        );
        ct.load = Some(load.id.clone());
        out.push(ct);
    }
    share(Band::High, &mut out);
    out
}

/// Fill the shares and sort, largest first.
fn share(band: Band, list: &mut [Contribution]) {
    let weight = |c: &Contribution| match band {
        Band::Low => 1.0 / c.time_constant,
        Band::High => c.time_constant,
    };
    let total: f64 = list.iter().map(weight).sum();
    for c in list.iter_mut() {
        c.share = if total > 0.0 { weight(c) / total } else { 0.0 };
    }
    list.sort_by(|a, b| b.share.total_cmp(&a.share));
}

/// The time-constant estimate of the corner: Σ 1/(2π·R·C) (low) or 1/(2π·Σ R·C)
/// (high); `None` without capacitors.
pub fn estimate(band: Band, list: &[Contribution]) -> Option<f64> {
    if list.is_empty() {
        return None;
    }
    Some(match band {
        Band::Low => list.iter().map(|c| c.frequency).sum(),
        Band::High => 1.0 / (2.0 * PI * list.iter().map(|c| c.time_constant).sum::<f64>()),
    })
}

/// One plain sentence naming the capacitor that dominates, e.g. "the bypass
/// capacitor of stage \"gain\" sets the low corner (71 % of the estimate)".
pub fn sentence(band: Band, list: &[Contribution]) -> Option<String> {
    let first = list.first()?;
    let pct = |c: &Contribution| format!("{:.0} %", 100.0 * c.share);
    Some(if first.share >= 0.5 || list.len() == 1 {
        format!(
            "{} sets the {} corner ({} of the estimate)",
            first.description,
            band.name(),
            pct(first)
        )
    } else {
        let second = &list[1];
        format!(
            "{} contributes most to the {} corner ({} of the estimate), then {} ({})",
            first.description,
            band.name(),
            pct(first),
            second.description,
            pct(second)
        )
    })
}
