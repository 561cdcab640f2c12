//! AC pass: every stage's two-port at one frequency, cascaded through the graph.
//!
//! Backward (against signal order): each output node's load is the sum of its
//! successors' branch admittances (link impedance in series with the successor's
//! input impedance), which fixes each stage's input admittance and loaded gain.
//! Forward (signal order): the source divider, each stage's input voltage, its
//! cumulative gain and its output impedance with the real upstream source.
//! Stages meet only at their port nodes and ground, so this cascade is exact.

use crate::chain::Chain;
use crate::dc::DcState;
use crate::device::DeviceModel;
use crate::graph::{Branch, Port};
use crate::loops::group::Upstream;
use crate::loops::solve as loop_solve;
use crate::loops::LoopAc;
use crate::network::{cdiv, Freq, TwoPort};
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);
const ONE: Complex64 = Complex64::new(1.0, 0.0);

/// Small-signal results of one stage, per volt of source EMF where a level is meant.
#[derive(Debug, Clone, Copy)]
pub struct AcState {
    pub two_port: TwoPort,
    /// Admittance hung on the output node by the successors.
    pub y_load: Complex64,
    /// Admittance looking into the input node, bias network included, loaded.
    pub y_in: Complex64,
    /// Admittance the driver sees into this stage's branch (link + input).
    pub y_branch: Complex64,
    /// v(output)/v(input).
    pub gain: Complex64,
    /// v(input)/EMF.
    pub v_in: Complex64,
    /// v(output)/EMF.
    pub cumulative: Complex64,
    /// Impedance of what drives the input node (through the link).
    pub z_source: Complex64,
    /// Admittance looking back into the output node, load removed.
    pub y_out: Complex64,
    /// Admittance of the output node with everything on it: `y_out + y_load`, except
    /// on a loop, where the loop closes through the node.
    pub y_node: Complex64,
}

impl Default for AcState {
    fn default() -> Self {
        AcState {
            two_port: TwoPort::new(ZERO, ZERO, ZERO, ZERO),
            y_load: ZERO,
            y_in: ZERO,
            y_branch: ZERO,
            gain: ZERO,
            v_in: ZERO,
            cumulative: ZERO,
            z_source: ZERO,
            y_out: ZERO,
            y_node: ZERO,
        }
    }
}

/// Admittance of a link (series coupling) into an input admittance `y_in`:
/// 1/(Z_link + 1/Y_in) = Y_in/(1 + Z_link·Y_in); zero when the link is open (a
/// capacitor at DC), `y_in` itself through a short (a direct link, or a capacitor at
/// midband).
pub(crate) fn branch_admittance(z_link: Option<Complex64>, y_in: Complex64) -> Complex64 {
    match z_link {
        Some(z) if z == ZERO => y_in,
        Some(z) => cdiv(y_in, ONE + z * y_in),
        None => ZERO,
    }
}

/// Voltage across an input admittance `y_in` fed from node voltage `v_node` through
/// the link: the divider 1/(1 + Z_link·Y_in); `v_node` itself through a short.
fn through_link(v_node: Complex64, z_link: Option<Complex64>, y_in: Complex64) -> Complex64 {
    match z_link {
        Some(z) if z == ZERO => v_node,
        Some(z) => cdiv(v_node, ONE + z * y_in),
        None => ZERO,
    }
}

/// 1/Y, infinite for Y = 0 (a node that only a current source meets: a cascode's
/// lower collector without r_o, its branch removed).
pub(crate) fn impedance(y: Complex64) -> Complex64 {
    if y == ZERO {
        Complex64::new(f64::INFINITY, 0.0)
    } else {
        cdiv(ONE, y)
    }
}

/// Admittance of load `k`: 1/R_L plus its capacitance at a real frequency.
pub fn load_admittance(chain: &Chain, freq: Freq, k: usize) -> Complex64 {
    let load = &chain.loads[k];
    Complex64::new(1.0 / load.r_l, 0.0) + freq.shunt(load.capacitance)
}

/// Admittance a driver node sees into branch `b` (link + what it feeds).
pub fn branch_of(chain: &Chain, freq: Freq, ac: &[AcState], b: &Branch) -> Complex64 {
    match b.to {
        Port::Stage(d) => ac[d].y_branch,
        Port::Load(k) => {
            branch_admittance(freq.coupling(b.coupling), load_admittance(chain, freq, k))
        }
        Port::Source => ZERO,
    }
}

/// Total admittance the source's output node carries besides R_S: its shunt
/// capacitance and all its branches.
fn source_node_load(chain: &Chain, freq: Freq, ac: &[AcState]) -> Complex64 {
    let branches: Complex64 = chain
        .topology
        .successors(Port::Source)
        .iter()
        .map(|b| branch_of(chain, freq, ac, b))
        .sum();
    branches + freq.shunt(chain.source.capacitance)
}

/// A driver's output node as one of its branches sees it: the node voltage per volt
/// of EMF, and the node's impedance with that branch (admittance `y_branch`) removed.
/// Needs the AC states of the driver (forward pass done up to it) and of its branches.
pub fn driver_node(
    chain: &Chain,
    freq: Freq,
    ac: &[AcState],
    driver: Port,
    y_branch: Complex64,
) -> (Complex64, Complex64) {
    match driver {
        Port::Source => {
            // EMF behind R_S, loaded by y: v = 1/(1 + R_S·y); Z without the branch
            // = R_S ∥ 1/(y − y_branch), written to allow R_S = 0.
            let r_s = Complex64::new(chain.source.r_s, 0.0);
            let y = source_node_load(chain, freq, ac);
            (
                cdiv(ONE, ONE + r_s * y),
                cdiv(r_s, ONE + r_s * (y - y_branch)),
            )
        }
        Port::Stage(u) => (ac[u].cumulative, impedance(ac[u].y_node - y_branch)),
        Port::Load(_) => (ZERO, ZERO),
    }
}

/// An op-amp stage's two-port from its own network (`circuit::opamp`); a network
/// that cannot be solved gives NaN, which the gain check reports.
fn opamp_two_port(
    chain: &Chain,
    i: usize,
    net: &crate::circuit::opamp::OpAmpNetwork,
    freq: Freq,
) -> TwoPort {
    let nan = Complex64::new(f64::NAN, 0.0);
    chain
        .device_of(i)
        .opamp
        .and_then(|amp| net.two_port(&amp, freq))
        .unwrap_or(TwoPort::new(nan, nan, nan, nan))
}

/// Run the AC pass at `freq` on the operating points in `dc`.
pub fn solve(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    dc: &[DcState],
    ac: &mut [AcState],
    load_gain: &mut [Complex64],
) {
    solve_with_loops(chain, freq, v_t, dc, ac, load_gain, &mut []);
}

/// [`solve`], and each loop's figures into `loops` (one per feedback link; an empty
/// slice asks for none). A loop group is solved as one network at its first stage
/// (`loops::solve`); the cascade runs around it.
pub fn solve_with_loops(
    chain: &Chain,
    freq: Freq,
    v_t: f64,
    dc: &[DcState],
    ac: &mut [AcState],
    load_gain: &mut [Complex64],
    loops: &mut [LoopAc],
) {
    let topo = &chain.topology;
    let branch_of = |ac: &[AcState], b: &Branch| branch_of(chain, freq, ac, b);

    for &i in topo.order.iter().rev() {
        let tp = match &dc[i].opamp {
            Some(net) => opamp_two_port(chain, i, net, freq),
            None => {
                let hp = chain.device_of(i).small_signal(&dc[i].op, v_t);
                dc[i].plan.two_port(&dc[i].circuit, &hp, freq)
            }
        };
        // A stage on a loop: its quantities come from the loop's network.
        if let Some(k) = topo.loop_of[i] {
            ac[i].two_port = tp;
            if topo.feedback[k].to == i {
                let work = loops.get_mut(k).map(|l| &mut l.work);
                loop_solve::backward(chain, freq, v_t, dc, ac, k, work);
            }
            continue;
        }
        let y_load: Complex64 = topo
            .successors(Port::Stage(i))
            .iter()
            .map(|b| branch_of(ac, b))
            .sum();
        let y_in = tp.input_admittance(y_load);
        let st = &mut ac[i];
        st.two_port = tp;
        st.y_load = y_load;
        st.y_in = y_in;
        st.gain = tp.voltage_gain(y_load);
        st.y_branch = branch_admittance(freq.coupling(topo.stage_driver[i].1), y_in);
    }

    for &i in &topo.order {
        let looped = topo.loop_of[i];
        if looped.is_some_and(|k| topo.feedback[k].to != i) {
            continue; // filled at the loop's first stage
        }
        let (driver, coupling) = topo.stage_driver[i];
        // Node voltage of the driver and its impedance with this branch removed.
        let (v_node, z_node) = driver_node(chain, freq, ac, driver, ac[i].y_branch);
        let z_link = freq.coupling(coupling);
        let st = &mut ac[i];
        st.v_in = through_link(v_node, z_link, st.y_in);
        st.z_source = z_link.map_or(Complex64::new(f64::INFINITY, 0.0), |z| z + z_node);
        if let Some(k) = looped {
            let upstream = match z_link {
                None => Upstream::Open,
                Some(z) if z_node.is_finite() => {
                    // The driver's open-circuit voltage: v_node·(1 + Z_node·Y_branch).
                    Upstream::Thevenin(v_node * (ONE + z_node * st.y_branch), z + z_node)
                }
                Some(_) => Upstream::Norton(v_node * st.y_branch),
            };
            loop_solve::forward(chain, freq, v_t, dc, ac, k, upstream, loops.get_mut(k));
            continue;
        }
        st.y_out = st.two_port.output_admittance(st.z_source);
        st.cumulative = st.v_in * st.gain;
        st.y_node = st.y_out + st.y_load;
    }

    for (k, g) in load_gain.iter_mut().enumerate() {
        let (driver, coupling) = topo.load_driver[k];
        let (v_node, _) = driver_node(chain, freq, ac, driver, ZERO);
        *g = through_link(
            v_node,
            freq.coupling(coupling),
            load_admittance(chain, freq, k),
        );
    }
}
