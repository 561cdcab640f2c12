//! Large signal: the waveform at every node of the chain for a sine at the source,
//! solved sample by sample in the chain's nonlinear network (quasi-static midband:
//! capacitors hold their operating-point voltages, transistors in the Ebers–Moll
//! transport model, op-amps as clipped sources), its distortion, and the input levels at which each stage starts
//! to distort, compress and clip.
//!
//! ```no_run
//! # fn main() -> Result<(), Box<dyn std::error::Error>> {
//! let chain = ampchain::io::read_chain("chains/mic-preamp.json")?;
//! let ev = chain.evaluate()?;
//! let mut ls = ampchain::large_signal::LargeSignal::new(&chain, &ev, 1024)?;
//! let level = ls.level(0.01)?; // 10 mV peak EMF
//! println!("THD at the first stage: {:.3} %", level.stages[0].output.thd_percent);
//! # Ok(()) }
//! ```

pub mod distortion;
pub mod flat;
pub mod network;
pub mod onset;
pub mod report;

use crate::chain::Chain;
use crate::circuit::Terminal;
use crate::evaluate::Evaluation;
use crate::graph::Port;
use crate::report::LevelReport;
use crate::stages::{Swing, Toward};
use crate::units::Level;
use distortion::{percent_and_db, Analyser, NodeDistortion, Spectrum, HIGHEST_HARMONIC};
use network::{Network, NetworkError, StageSample, Workspace};
use num_complex::Complex64;
use serde::Serialize;
use std::f64::consts::PI;

/// Samples per period unless the caller asks for another power of two.
pub const DEFAULT_SAMPLES: usize = 1024;
/// A stage counts as cut off while its collector current is below this fraction of
/// its quiescent current: its output has then covered 99 % of its swing toward
/// cutoff on the load line (our choice; the exponential never reaches zero exactly).
pub const CUTOFF_FRACTION: f64 = 0.01;
/// An op-amp's pin counts as at a rail edge within this of it, and its current at the
/// limit within this fraction of it: far above Newton's tolerance (1e-10 V, 1e-8 V at
/// the rounding floor), far below any swing (our choice).
pub const OPAMP_EDGE_V: f64 = 1e-6;
pub const OPAMP_EDGE_FRACTION: f64 = 1e-6;

/// Why a large-signal evaluation failed; the message names the stage or setting.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LargeSignalError {
    #[error(transparent)]
    Network(#[from] NetworkError),
    #[error("samples per period: found {0}, expected a power of two from 32 to 65536")]
    Samples(usize),
    /// A chain of passive stages only: nothing in it clips or distorts.
    #[error("found only passive stages ({stages}), which neither distort nor clip; expected at least one stage with a transistor (bipolar or JFET) or an op-amp (plan, response and noise handle this chain)")]
    NoDevice { stages: String },
    #[error("input level: found {0} V peak, expected a finite level of zero or more")]
    Level(f64),
    #[error("stage \"{stage}\": the gain from the source EMF to its output is {gain_db:+.0} dB; f64's rounding (about 1e-16 of the rails' volts) times that gain is {floor:.1e} V on its waveform, expected at most 1 mV for a waveform to be solved: sweep the chain as two chains, the second with its own source (plan, response and noise handle this one)")]
    GainBeyondRounding {
        stage: String,
        gain_db: f64,
        floor: f64,
    },
    /// A loop whose midband return ratio T is below −1: its feedback adds and outgrows
    /// the signal, so the circuit latches or oscillates (docs/definitions.md "Large
    /// signal").
    #[error("the loop from \"{from}\" back to \"{to}\" has T = {return_ratio:.4} at midband: its feedback adds and outgrows the signal (T below −1), so the built circuit latches into saturation or cutoff, or oscillates, and has no steady waveform to sweep; expected a loop whose feedback subtracts (T above 0: count the inverting stages on the loop and check \"into\")")]
    LoopAdds {
        from: String,
        to: String,
        return_ratio: f64,
    },
}

impl LargeSignalError {
    /// Exit status: a solve that fails is an internal failure (3), a bad setting is bad
    /// input (2).
    pub fn exit_code(&self) -> i32 {
        match self {
            // A level too hard to solve is the input's (docs/errors.md `sweep-no-waveform`).
            LargeSignalError::Network(NetworkError::SampleNoConvergence { .. }) => {
                crate::error::EXIT_BAD_INPUT
            }
            LargeSignalError::Network(_) => crate::error::EXIT_INTERNAL,
            _ => crate::error::EXIT_BAD_INPUT,
        }
    }
}

/// The levels a chain file may plan (`limits::LEVEL`, rms) as peak EMFs: the most a
/// sweep's default range and its onset search cover.
pub fn level_bounds_vpeak() -> (f64, f64) {
    let peak = std::f64::consts::SQRT_2;
    (
        crate::limits::LEVEL.min * peak,
        crate::limits::LEVEL.max * peak,
    )
}

/// What the planner says about one stage, kept for comparisons.
#[derive(Debug, Clone)]
pub struct PlanStage {
    pub id: String,
    /// Which transistor terminal the output node is, and the node's name in the
    /// stage's description ("collector").
    pub output_terminal: Terminal,
    pub output_name: &'static str,
    pub driver: Port,
    /// v(output)/v(input), signed (midband).
    pub gain: f64,
    /// v(output)/EMF, signed (midband).
    pub cumulative: f64,
    /// Load-line clip level, peak EMF (infinite for a stage without a transistor).
    pub clip_vpeak: f64,
    /// The stage has a transistor (a passive stage never saturates or cuts off; an
    /// op-amp stage clips at `opamp`'s edges instead).
    pub transistor: bool,
    /// An op-amp stage's pin edges: V_lo, V_hi and the current limit.
    pub opamp: Option<(f64, f64, f64)>,
    pub toward: Toward,
    pub swing: Swing,
    pub vce_sat: f64,
    /// A JFET's sign (+1 n, −1 p) and |V_P|: its voltage edge is the ohmic edge
    /// V_DS = V_GS − V_P instead of `vce_sat`.
    pub ohmic: Option<(f64, f64)>,
}

/// One stage at one input level.
#[derive(Debug, Clone, Serialize)]
pub struct StageLevel {
    pub id: String,
    /// The stage's output node (from its description).
    pub output: NodeDistortion,
    /// Fundamental at the output over the source EMF, signed (the large-signal
    /// counterpart of the planner's `cumulative_gain`).
    pub cumulative_gain: f64,
    /// Fundamental at the output over the fundamental at the stage's input node (the
    /// base, or the emitter of a common base), signed (the counterpart of the
    /// planner's `gain`).
    pub gain: f64,
    /// Gain from the driver's node to this output against its small-signal value, dB
    /// (negative: compression). The driver's node is the source EMF for a stage the
    /// source drives.
    pub compression_db: f64,
    /// Gain from the source EMF to this output against its small-signal value
    /// (`plan`'s `cumulative_gain`), dB: the compression referred to the source
    /// (docs/definitions.md, large signal).
    pub source_compression_db: f64,
    /// Distortion this stage adds to what its driver's node carries:
    /// √(Σ|X_n − r·D_n|²)/|X_1| over n = 2 … 10, with D the driver node's harmonics
    /// and r the small-signal gain from there, in percent.
    pub added_thd_percent: f64,
    /// Smallest V_CE and I_C, largest I_B over the period.
    pub v_ce_min: f64,
    pub i_c_min: f64,
    pub i_b_max: f64,
    /// V_CE fell to the device's `vce_sat` (a JFET: V_DS to V_GS − V_P) somewhere
    /// in the period.
    pub saturates: bool,
    /// How far a JFET's V_DS came to its ohmic edge V_GS − V_P at the closest, V
    /// (negative: past it); ∞ for a bipolar stage. Not reported.
    #[serde(skip)]
    pub ohmic_margin_min: f64,
    /// I_C fell below [`CUTOFF_FRACTION`] of its quiescent value somewhere.
    pub cuts_off: bool,
    /// An op-amp stage: its pin reached a rail edge (within `swing_margin` of a rail)
    /// somewhere in the period (absent for other stages).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rail: Option<bool>,
    /// An op-amp stage: its pin current reached ± `output_current_limit` somewhere.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub current_limit: Option<bool>,
    /// Samples held at a rail edge and at the current limit (an op-amp's clip depth,
    /// which decides the side when both happen). Not reported.
    #[serde(skip)]
    pub opamp_edge_samples: (usize, usize),
}

impl StageLevel {
    /// The stage's output clipped somewhere in the period: a transistor saturated or
    /// cut off, or an op-amp's pin at a rail edge or its current limit.
    pub fn clips(&self) -> bool {
        self.saturates
            || self.cuts_off
            || self.rail == Some(true)
            || self.current_limit == Some(true)
    }
}

/// One load at one input level.
#[derive(Debug, Clone, Serialize)]
pub struct LoadLevel {
    pub id: String,
    pub output: NodeDistortion,
}

/// Every node at one input level.
#[derive(Debug, Clone, Serialize)]
pub struct LevelResult {
    /// Source EMF.
    pub input: LevelReport,
    pub stages: Vec<StageLevel>,
    pub loads: Vec<LoadLevel>,
}

/// The chain's large-signal evaluator: the network with its operating point, the
/// planner's figures for comparison, and the waveform buffers (allocated once).
#[derive(Debug)]
pub struct LargeSignal {
    net: Network,
    ws: Workspace,
    fft: Analyser,
    samples: usize,
    pub plan: Vec<PlanStage>,
    pub load_ids: Vec<String>,
    pub load_drivers: Vec<Port>,
    /// Operating point of every stage in the Ebers–Moll network.
    pub quiescent: Vec<StageSample>,
    pub quiescent_loads: Vec<f64>,
    /// Source EMF over the last period evaluated.
    pub emf: Vec<f64>,
    /// Stage `i`'s samples at `[i·N .. (i+1)·N]`.
    pub stage_waves: Vec<StageSample>,
    /// Load `k`'s node voltage at `[k·N .. (k+1)·N]`.
    pub load_waves: Vec<f64>,
    /// Peak EMF of the last period evaluated.
    pub last_level: f64,
    /// Planner's lowest clip level (peak EMF) and the stage it belongs to.
    pub plan_first_clip: usize,
    /// Called after every period solved (a progress display's hook).
    on_period: OnPeriod,
}

/// What [`LargeSignal::on_period`] installed.
struct OnPeriod(Option<Box<dyn FnMut() + Send>>);

impl std::fmt::Debug for OnPeriod {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(if self.0.is_some() { "Some(..)" } else { "None" })
    }
}

fn signed(z: Complex64) -> f64 {
    z.norm().copysign(z.re)
}

/// The large-signal network is built from every stage's description (`flat.rs`), so
/// any stage is modelled: PNP, any rails, r_bb' and r_c, `r_feedback`,
/// `supply_filter`, `common_base`, JFET, op-amp and passive stages. A chain without any
/// device has nothing to sweep and is refused.
pub fn check_supported(chain: &Chain) -> Result<(), LargeSignalError> {
    if chain.stages.iter().all(|s| s.device.is_none()) {
        return Err(LargeSignalError::NoDevice {
            stages: crate::chain::name_list(chain.stages.iter().map(|s| s.id.as_str())),
        });
    }
    Ok(())
}

impl LargeSignal {
    /// Build the network of an evaluated chain and solve its operating point
    /// (Newton from the planner's forward-active operating point).
    pub fn new(
        chain: &Chain,
        ev: &Evaluation,
        samples: usize,
    ) -> Result<LargeSignal, LargeSignalError> {
        if !samples.is_power_of_two() || !(32..=65536).contains(&samples) {
            return Err(LargeSignalError::Samples(samples));
        }
        check_supported(chain)?;
        // A midband T below −1: no equilibrium the circuit stays at.
        for (l, figures) in chain.topology.feedback.iter().zip(&ev.loops) {
            let t = figures.return_ratio;
            if ev.freq == crate::network::Freq::Midband && t.re < -1.0 {
                return Err(LargeSignalError::LoopAdds {
                    from: chain.stages[l.from].id.clone(),
                    to: chain.stages[l.to].id.clone(),
                    return_ratio: t.re,
                });
            }
        }
        let mut net = Network::build(chain, ev.v_t)?;
        // The largest gain from the source to a stage's output sets how far rounding
        // carries (docs/definitions.md "Large signal").
        let (loudest, gain) =
            ev.ac
                .iter()
                .map(|a| a.cumulative.norm())
                .enumerate()
                .fold(
                    (0, 0.0),
                    |best, (i, g)| if g > best.1 { (i, g) } else { best },
                );
        let floor = network::rounding_floor(gain, chain.span());
        if floor > network::MAX_ROUNDING_FLOOR_V {
            return Err(LargeSignalError::GainBeyondRounding {
                stage: chain.stages[loudest].id.clone(),
                gain_db: 20.0 * gain.log10(),
                floor,
            });
        }
        net.set_rounding_floor(floor);
        let mut ws = net.workspace();
        let guess: Vec<_> = ev.dc.iter().map(|d| d.op).collect();
        net.solve_dc(Some(&guess), &mut ws)?;
        let plan = chain
            .stages
            .iter()
            .enumerate()
            .map(|(i, s)| PlanStage {
                id: s.id.clone(),
                output_terminal: net.netlist().stages[i].output_terminal,
                output_name: net.netlist().stages[i].output_name,
                driver: chain.topology.stage_driver[i].0,
                gain: signed(ev.ac[i].gain),
                cumulative: signed(ev.ac[i].cumulative),
                clip_vpeak: ev.headroom[i].clip_input_vpeak,
                transistor: s.device.is_some() && chain.device_of(i).opamp.is_none(),
                opamp: chain.device_of(i).opamp.map(|amp| {
                    let r = chain.stage_rails(i);
                    (
                        r.bottom + amp.swing_margin,
                        r.top - amp.swing_margin,
                        amp.i_limit,
                    )
                }),
                toward: ev.headroom[i].toward,
                swing: ev.headroom[i].swing,
                vce_sat: chain.device_of(i).vce_sat,
                ohmic: chain.device_of(i).jfet_model().map(|j| (j.sign, j.v_p)),
            })
            .collect();
        let n_stages = chain.stages.len();
        let n_loads = chain.loads.len();
        Ok(LargeSignal {
            quiescent: (0..n_stages).map(|i| net.dc_stage(i)).collect(),
            quiescent_loads: (0..n_loads).map(|k| net.dc_load(k)).collect(),
            net,
            ws,
            fft: Analyser::new(samples),
            samples,
            plan,
            load_ids: chain.loads.iter().map(|l| l.id.clone()).collect(),
            load_drivers: chain.topology.load_driver.iter().map(|d| d.0).collect(),
            emf: vec![0.0; samples],
            stage_waves: vec![StageSample::default(); n_stages * samples],
            load_waves: vec![0.0; n_loads * samples],
            last_level: 0.0,
            plan_first_clip: ev.first_clip,
            on_period: OnPeriod(None),
        })
    }

    pub fn samples(&self) -> usize {
        self.samples
    }

    pub fn network(&self) -> &Network {
        &self.net
    }

    /// The range a sweep covers unless told otherwise (peak EMF): from 40 dB below to
    /// 10 dB above the planner's first clip level, the 50 dB kept inside the levels a
    /// file may plan (docs/definitions.md "Large signal"), so it never shrinks to a point.
    pub fn default_range(&self) -> (f64, f64) {
        let first = self.plan[self.plan_first_clip].clip_vpeak;
        let (least, most) = level_bounds_vpeak();
        let span = 10f64.powf(50.0 / 20.0);
        let high = (first * 10f64.powf(10.0 / 20.0)).clamp(least * span, most);
        (high / span, high)
    }

    /// Call `hook` after every period solved from now on (sweeps, onset searches):
    /// how a caller shows progress on long runs.
    pub fn on_period(&mut self, hook: impl FnMut() + Send + 'static) {
        self.on_period = OnPeriod(Some(Box::new(hook)));
    }

    /// Solve one period with a sine EMF of peak `e_pk`: e(t_k) = e_pk·sin(2πk/N).
    /// Sample 0 (EMF 0) is the operating point; each sample starts from the last.
    pub fn run(&mut self, e_pk: f64) -> Result<(), LargeSignalError> {
        if !e_pk.is_finite() || e_pk < 0.0 {
            return Err(LargeSignalError::Level(e_pk));
        }
        let n = self.samples;
        self.net.start_signal(&mut self.ws);
        let mut previous = 0.0;
        for k in 0..n {
            let e = e_pk * (2.0 * PI * k as f64 / n as f64).sin();
            self.net.solve_sample(e, previous, k, n, &mut self.ws)?;
            previous = e;
            self.emf[k] = e;
            for i in 0..self.plan.len() {
                self.stage_waves[i * n + k] = self.net.stage_sample(i, &self.ws);
            }
            for j in 0..self.load_ids.len() {
                self.load_waves[j * n + k] = self.net.load_voltage(j, &self.ws);
            }
        }
        self.last_level = e_pk;
        if let Some(hook) = &mut self.on_period.0 {
            hook();
        }
        Ok(())
    }

    /// Solve one period at peak EMF `e_pk` and measure every node.
    pub fn level(&mut self, e_pk: f64) -> Result<LevelResult, LargeSignalError> {
        self.run(e_pk)?;
        Ok(self.measure())
    }

    /// Spectrum of stage `i`'s output over the last period.
    fn output_spectrum(&mut self, i: usize) -> Spectrum {
        let n = self.samples;
        let waves = &self.stage_waves[i * n..(i + 1) * n];
        self.fft.spectrum(waves.iter().map(|s| s.v_out))
    }

    /// Measure every node of the last period evaluated.
    pub fn measure(&mut self) -> LevelResult {
        let n = self.samples;
        let n_stages = self.plan.len();
        let emf = self.fft.spectrum(self.emf.iter().copied());
        let outputs: Vec<Spectrum> = (0..n_stages).map(|i| self.output_spectrum(i)).collect();
        let mut stages = Vec::with_capacity(n_stages);
        for i in 0..n_stages {
            let waves = &self.stage_waves[i * n..(i + 1) * n];
            let input = self.fft.spectrum(waves.iter().map(|s| s.v_in));
            let out = &outputs[i];
            let plan = &self.plan[i];
            // The driver's node and the small-signal gain from it to this output.
            let (driver, r) = match plan.driver {
                Port::Stage(u) => (&outputs[u], plan.cumulative / self.plan[u].cumulative),
                _ => (&emf, plan.cumulative),
            };
            let added: f64 = (2..=HIGHEST_HARMONIC)
                .map(|h| (out.bins[h - 1] - driver.bins[h - 1] * r).norm_sqr())
                .sum::<f64>()
                .sqrt();
            let a1 = out.fundamental();
            let ratio = |a: Complex64, b: Complex64| {
                if b.norm() > 0.0 {
                    a / b
                } else {
                    Complex64::new(0.0, 0.0)
                }
            };
            let through = ratio(out.bins[0], driver.bins[0]).norm() / r.abs();
            let q = self.quiescent[i];
            let v_q = q.v_out;
            let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
            let (mut v_ce_min, mut i_c_min, mut i_b_max) =
                (f64::INFINITY, f64::INFINITY, f64::NEG_INFINITY);
            let mut ohmic_margin_min = f64::INFINITY;
            // An op-amp's samples at a rail edge and at its current limit.
            let (mut at_rail, mut at_limit) = (0, 0);
            for s in waves {
                if let Some((v_lo, v_hi, i_limit)) = plan.opamp {
                    let v = s.v_out;
                    at_rail += usize::from(v >= v_hi - OPAMP_EDGE_V || v <= v_lo + OPAMP_EDGE_V);
                    at_limit += usize::from(s.i_c.abs() >= i_limit * (1.0 - OPAMP_EDGE_FRACTION));
                }
                let v = s.v_out;
                lo = lo.min(v);
                hi = hi.max(v);
                v_ce_min = v_ce_min.min(s.v_ce);
                i_c_min = i_c_min.min(s.i_c);
                i_b_max = i_b_max.max(s.i_b);
                if let Some((sign, v_p)) = plan.ohmic {
                    ohmic_margin_min =
                        ohmic_margin_min.min(s.v_ce - (sign * (s.v_b - s.v_e) + v_p));
                }
            }
            stages.push(StageLevel {
                id: plan.id.clone(),
                output: NodeDistortion::new(out, v_q, lo, hi),
                cumulative_gain: signed(ratio(out.bins[0], emf.bins[0])),
                gain: signed(ratio(out.bins[0], input.bins[0])),
                compression_db: 20.0 * through.log10(),
                source_compression_db: 20.0
                    * (ratio(out.bins[0], emf.bins[0]).norm() / plan.cumulative.abs()).log10(),
                added_thd_percent: if a1 > 0.0 {
                    percent_and_db(added / a1).0
                } else {
                    0.0
                },
                v_ce_min,
                i_c_min,
                i_b_max,
                saturates: plan.transistor
                    && match plan.ohmic {
                        Some(_) => ohmic_margin_min <= 0.0,
                        None => v_ce_min <= plan.vce_sat,
                    },
                ohmic_margin_min,
                cuts_off: plan.transistor && i_c_min <= CUTOFF_FRACTION * q.i_c,
                rail: plan.opamp.map(|_| at_rail > 0),
                current_limit: plan.opamp.map(|_| at_limit > 0),
                opamp_edge_samples: (at_rail, at_limit),
            });
        }
        let loads = (0..self.load_ids.len())
            .map(|k| {
                let w = &self.load_waves[k * n..(k + 1) * n];
                let s = self.fft.spectrum(w.iter().copied());
                let lo = w.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = w.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                LoadLevel {
                    id: self.load_ids[k].clone(),
                    output: NodeDistortion::new(&s, self.quiescent_loads[k], lo, hi),
                }
            })
            .collect();
        LevelResult {
            input: Level::from_vpeak(self.last_level).into(),
            stages,
            loads,
        }
    }

    /// Evaluate a list of peak EMF levels.
    pub fn sweep(&mut self, levels: &[f64]) -> Result<Vec<LevelResult>, LargeSignalError> {
        levels.iter().map(|&e| self.level(e)).collect()
    }
}

/// `n` levels (peak EMF) spaced evenly in decibels from `from` to `to`.
pub fn level_steps(from: f64, to: f64, n: usize) -> Vec<f64> {
    if n <= 1 {
        return vec![from];
    }
    let (a, b) = (from.ln(), to.ln());
    (0..n)
        .map(|k| (a + (b - a) * k as f64 / (n - 1) as f64).exp())
        .collect()
}
