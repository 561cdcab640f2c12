//! The NPN transistor in forward active (docs/definitions.md "Device model"), its DC solve with a
//! Thevenin source on each terminal, and its hybrid-π parameters.

pub mod bipolar;
pub mod ebers_moll;
pub mod jfet;
pub mod model;
pub mod opamp;
pub mod temperature;

pub use model::{ActiveCurrents, DeviceModel, Quantities, RegionEdges, Toward};

use crate::network::Thevenin;

/// Boltzmann constant, exact in the 2019 SI (SI Brochure, 9th edition).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Elementary charge, exact in the 2019 SI (SI Brochure, 9th edition).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// 0 °C in kelvin.
pub const ZERO_CELSIUS: f64 = 273.15;

/// V_T = kT/q.
pub fn thermal_voltage(temperature: f64) -> f64 {
    BOLTZMANN * temperature / ELEMENTARY_CHARGE
}

/// Which way a bipolar transistor conducts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Polarity {
    #[default]
    Npn,
    /// Every device value is a magnitude; the stage is the NPN's mirror image
    /// (docs/definitions.md, "Rails, PNP"): it is solved as the NPN with every voltage negated.
    Pnp,
}

/// A named transistor parameter set from the chain file.
#[derive(Debug, Clone, PartialEq)]
pub struct Device {
    pub name: String,
    pub polarity: Polarity,
    /// Forward current gain β = I_C/I_B (without Early effect).
    pub beta: f64,
    /// Reverse current gain β_R (Ebers–Moll model only).
    pub beta_reverse: f64,
    /// Saturation current I_S.
    pub i_s: f64,
    /// Early voltage V_A; `f64::INFINITY` when absent.
    pub v_a: f64,
    /// Collector–emitter voltage below which the device counts as saturated.
    pub vce_sat: f64,
    /// Allowed collector dissipation, for warnings.
    pub max_dissipation: f64,
    /// Transition frequency f_T; `None` when the file gives none (then C_π = 0).
    pub f_t: Option<f64>,
    /// Collector–base capacitance C_μ (0 when the file gives none).
    pub c_bc: f64,
    /// Base spreading resistance r_bb' in series with the base (0: none).
    pub base_resistance: f64,
    /// Collector bulk resistance r_c in series with the collector (0: none).
    pub collector_resistance: f64,
    /// Flicker-noise corner f_c of the base current, 2qI_B·f_c/f (0: none).
    pub flicker_corner: f64,
    /// A JFET's parameters (`n_jfet`: polarity `Npn`, `p_jfet`: `Pnp`, the same
    /// mirror image); `None` for a bipolar transistor, whose values above apply.
    pub jfet: Option<jfet::Jfet>,
    /// An op-amp's parameters (`"polarity": "opamp"`; the transistor values above
    /// are then unused); `None` for a transistor.
    pub opamp: Option<opamp::OpAmp>,
}

/// The device of a stage that has none (a passive kind). Its description never
/// places it, so no analysis reads its values; at the zero operating point its
/// small-signal parameters are all zero.
pub static NO_DEVICE: Device = Device {
    name: String::new(),
    polarity: Polarity::Npn,
    beta: 1.0,
    beta_reverse: 1.0,
    i_s: 0.0,
    v_a: f64::INFINITY,
    vce_sat: 0.0,
    max_dissipation: f64::INFINITY,
    f_t: None,
    c_bc: 0.0,
    base_resistance: 0.0,
    collector_resistance: 0.0,
    flicker_corner: 0.0,
    jfet: None,
    opamp: None,
};

impl Default for Device {
    /// A plain NPN: β = 100, I_S = 10 fA, no Early effect, V_CE,sat = 0.2 V (the
    /// chain file's defaults where it has them).
    fn default() -> Self {
        Device {
            name: String::new(),
            polarity: Polarity::Npn,
            beta: 100.0,
            beta_reverse: 3.0,
            i_s: 1e-14,
            v_a: f64::INFINITY,
            vce_sat: 0.2,
            max_dissipation: 0.25,
            f_t: None,
            c_bc: 0.0,
            base_resistance: 0.0,
            collector_resistance: 0.0,
            flicker_corner: 0.0,
            jfet: None,
            opamp: None,
        }
    }
}

impl Device {
    /// The JFET model of a JFET device, with the device's `v_a` and polarity (the
    /// values `spread` changes in place), `None` for a bipolar transistor.
    pub fn jfet_model(&self) -> Option<jfet::Jfet> {
        self.jfet.map(|j| jfet::Jfet {
            v_a: self.v_a,
            sign: self.sign(),
            ..j
        })
    }

    /// +1 for NPN, −1 for PNP: the sign that turns a mirrored NPN voltage into the
    /// real one.
    pub fn sign(&self) -> f64 {
        match self.polarity {
            Polarity::Npn => 1.0,
            Polarity::Pnp => -1.0,
        }
    }

    /// C_π = g_m/(2π·f_T) − C_μ before clamping (the charge-control relation
    /// f_T = g_m/(2π(C_π + C_μ)), any BJT text); `None` without f_T. Negative when
    /// C_μ alone exceeds what f_T allows at this g_m.
    pub fn c_pi_unclamped(&self, g_m: f64) -> Option<f64> {
        self.f_t
            .map(|f_t| g_m / (2.0 * std::f64::consts::PI * f_t) - self.c_bc)
    }
}

/// DC operating point of one transistor; node voltages against ground.
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct OperatingPoint {
    pub i_c: f64,
    pub i_b: f64,
    pub i_e: f64,
    /// |V_B − V_E| at the terminals (with r_bb' it includes I_B·r_bb').
    pub v_be: f64,
    /// The junction voltage in the exponent (equal to `v_be` without r_bb').
    pub v_be_junction: f64,
    pub v_ce: f64,
    pub v_b: f64,
    pub v_c: f64,
    pub v_e: f64,
}

impl OperatingPoint {
    /// α = I_C/I_E at this point (β/(β+1) without Early effect).
    pub fn alpha(&self) -> f64 {
        self.i_c / self.i_e
    }

    /// The transistor's own dissipation P = V_CE·I_C + V_BE·I_B (docs/definitions.md
    /// "Tune", constraints).
    pub fn transistor_power(&self) -> f64 {
        self.v_ce * self.i_c + self.v_be * self.i_b
    }
}

/// Why a transistor has no forward-active operating point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BiasFault {
    /// The base–emitter junction is not forward biased: the collector current at the
    /// solution is below [`I_CUTOFF`].
    NoForwardBias { v_be: f64, i_c: f64 },
    /// V_CE below `vce_sat`.
    Saturated { v_ce: f64, i_c: f64, vce_sat: f64 },
    /// The transistor's own V_CE, inside its collector resistance `r_c`, at or below
    /// zero while V_CE at the terminals is not: r_c drops more than the collector has,
    /// the forward-active law no longer holds (docs/definitions.md "Bipolar").
    InsideCollectorResistance {
        v_ce_inside: f64,
        i_c: f64,
        r_c: f64,
    },
    /// A terminal has no DC path.
    NoDcPath { terminal: &'static str },
    /// The base is driven so hard that nothing limits the current.
    Unlimited,
    /// Newton's method on a DC network's nodes (`circuit::coupled`) stopped without
    /// converging: after `iterations` steps the last one still moved a node by `step`
    /// volts (infinite: the step could not be computed).
    NoConvergence { iterations: usize, step: f64 },
    /// A feedback loop closed at DC (a feedback link without a series capacitor) whose
    /// network has no forward-active solution Newton can reach: its current ran away
    /// (`Unlimited`) or the steps did not settle (`NoConvergence`) with the loop in it.
    /// Typical of a loop whose DC feedback adds to the bias.
    LoopNoSolution,
    /// A JFET whose gate–source voltage pinches the channel off (V_GS at or below
    /// V_P, in the n-channel frame; `v_p` is |V_P|).
    PinchedOff { v_gs: f64, v_p: f64 },
    /// A JFET whose V_DS lies below V_GS − V_P (`edge`): in the ohmic region.
    Ohmic { v_ds: f64, i_d: f64, edge: f64 },
    /// An op-amp whose output would rest at `v_out`, outside the reach `lo`…`hi` of its
    /// pin (the stage's rails less `swing_margin`): it sits at a rail.
    OpampOutputOutOfReach { v_out: f64, lo: f64, hi: f64 },
    /// An op-amp whose pin current at rest, `i_out`, lies beyond ± `i_limit`
    /// (`output_current_limit`): it sits in current limiting.
    OpampCurrentLimited { i_out: f64, i_limit: f64 },
}

impl std::fmt::Display for BiasFault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        use crate::units::format_si;
        match *self {
            BiasFault::NoForwardBias { v_be, i_c } => write!(
                f,
                "is cut off at DC: V_BE = {} gives I_C = {}, below {}; expected a forward-biased base–emitter junction (V_BE around 0.6 V)",
                format_si(v_be, "V"),
                format_si(i_c, "A"),
                format_si(I_CUTOFF, "A")
            ),
            BiasFault::Saturated { v_ce, i_c, vce_sat } => write!(
                f,
                "is saturated at DC: forward-active bias would put V_CE at {} with I_C = {}, below vce_sat = {}; expected V_CE well above saturation (less base drive or a smaller collector or emitter resistance)",
                format_si(v_ce, "V"),
                format_si(i_c, "A"),
                format_si(vce_sat, "V")
            ),
            BiasFault::InsideCollectorResistance {
                v_ce_inside,
                i_c,
                r_c,
            } => write!(
                f,
                "has its transistor's own V_CE, inside its collector_resistance of {}, at {} with I_C = {}: r_c alone drops {}, more than the collector has, so the junction is saturated; expected a collector resistance small against the collector load (a bulk resistance of ohms to tens of ohms)",
                format_si(r_c, "Ω"),
                format_si(v_ce_inside, "V"),
                format_si(i_c, "A"),
                format_si(i_c * r_c, "V")
            ),
            BiasFault::NoDcPath { terminal } => write!(
                f,
                "has no DC path at its {terminal}; expected a resistor or a direct link there"
            ),
            BiasFault::Unlimited => write!(
                f,
                "has its base–emitter junction driven with nothing to limit the current (no base or emitter resistance); expected a junction current below {} (a resistance in the base or emitter circuit, or a base drive nearer the emitter's rail)",
                format_si(I_MAX, "A")
            ),
            BiasFault::NoConvergence { iterations, step } => write!(
                f,
                "has no converged DC solution: after {iterations} Newton steps on the nodes of its DC network (the stage, or its group of direct-coupled stages) the last one still moved a node by {}; expected the steps to shrink to rounding (check for resistances many orders of magnitude apart)",
                format_si(step, "V")
            ),
            BiasFault::LoopNoSolution => write!(
                f,
                "has no forward-active operating point with its feedback loop closed at DC: the loop's network has none that Newton's method reaches (a current runs away or the steps do not settle), as when the loop's DC feedback adds to the bias and latches the stages into saturation or cutoff; expected a loop whose feedback subtracts at DC (check the link's \"into\" and the number of inverting stages on the loop) or a capacitor in series with the feedback resistor"
            ),
            BiasFault::PinchedOff { v_gs, v_p } if v_gs.abs() < 0.99 * v_p => write!(
                f,
                "is cut off at DC: its drain current stays below {} with |V_GS| at {}, inside the pinch-off voltage's {}, so its drain and source resistances let no current through; expected a drain current of at least {} (a smaller drain or source resistance)",
                format_si(I_CUTOFF, "A"),
                format_si(v_gs.abs(), "V"),
                format_si(v_p, "V"),
                format_si(I_CUTOFF, "A")
            ),
            BiasFault::PinchedOff { v_gs, v_p } => write!(
                f,
                "is pinched off at DC: its gate bias puts |V_GS| at {} or more, beyond the pinch-off voltage's {}; expected |V_GS| below |V_P| (a smaller source resistance or gate bias toward the source)",
                format_si(v_gs.abs(), "V"),
                format_si(v_p, "V")
            ),
            BiasFault::Ohmic { v_ds, i_d, edge } => write!(
                f,
                "is in the ohmic region at DC: the saturation-region law would put V_DS at {} with I_D = {}, below V_GS − V_P = {}; expected V_DS above that edge (a smaller drain or source resistance)",
                format_si(v_ds, "V"),
                format_si(i_d, "A"),
                format_si(edge, "V")
            ),
            BiasFault::OpampOutputOutOfReach { v_out, lo, hi } => write!(
                f,
                "has its op-amp output at {} at DC, outside the {} … {} its pin can reach (the stage's rails less swing_margin): it sits at a rail; expected a DC level within reach (the reference times the stage's DC gain: check reference, a direct-coupled input's DC level and the feedback resistors)",
                format_si(v_out, "V"),
                format_si(lo, "V"),
                format_si(hi, "V")
            ),
            BiasFault::OpampCurrentLimited { i_out, i_limit } => write!(
                f,
                "has its op-amp output current at {} at DC, beyond its output_current_limit of {}: it rests in current limiting; expected a DC pin current within the limit (a capacitor-coupled or larger load, or a reference nearer ground)",
                format_si(i_out.abs(), "A"),
                format_si(i_limit, "A")
            ),
        }
    }
}

/// Collector current below which a stage counts as cut off at DC: a junction that
/// conducts less than this is not forward biased in any useful sense.
pub const I_CUTOFF: f64 = 1e-7;

/// Largest collector current the solver looks at, as a bracket for V_BE.
pub(crate) const I_MAX: f64 = 1e3;
/// The V_BE search stops once a Halley step is below this many V_T (see `solve_bjt`):
/// the error left, about step³/V_T², is then below 1e-15·V_T.
const CUBIC_STOP: f64 = 1e-5;
/// A step of at most this many V_T moves u = I_S·e^(V_BE/V_T) by [`exp_near_zero`]
/// instead of a fresh exponential.
const SERIES_STEP: f64 = 1.0 / 16.0;
/// V_BE of a small-signal silicon transistor at about a milliampere, for the first
/// guess only (common practice, no source).
pub(crate) const V_BE_TYPICAL: f64 = 0.65;

/// e^x for |x| ≤ [`SERIES_STEP`]: its Taylor series to x⁸ (the first term left out,
/// x⁹/9!, is below 4.1e-17 there: within the rounding of f64). The polynomial is
/// summed in pairs over x², x⁴ (Estrin's scheme) rather than nested (Horner's): the
/// same terms, a third of the chain of dependent multiplications.
fn exp_near_zero(x: f64) -> f64 {
    const C: [f64; 8] = [
        1.0,
        1.0 / 2.0,
        1.0 / 6.0,
        1.0 / 24.0,
        1.0 / 120.0,
        1.0 / 720.0,
        1.0 / 5040.0,
        1.0 / 40320.0,
    ];
    let x2 = x * x;
    let x4 = x2 * x2;
    let low = (C[0] + C[1] * x) + (C[2] + C[3] * x) * x2;
    let high = (C[4] + C[5] * x) + (C[6] + C[7] * x) * x2;
    1.0 + x * (low + high * x4)
}

/// First guess from the base–emitter loop, as one biases by hand: with V_BE ≈ 0.65 V
/// the loop V_Bth − V_Eth − V_BE = I_B·R_B + I_E·R_E, with I_B = u/β and
/// I_E = u·(1/β + I_C/u), gives u; I_C/u is first the Early factor `a` at small
/// currents, then corrected once by the collector loop, (a − b·u)/(1 + c·u). Then
/// V_BE = V_T·ln(u/I_S). `None` when the drive is too weak for the estimate or nothing
/// limits the current.
fn cold_start(
    device: &Device,
    v_t: f64,
    drive: f64,
    r_b: f64,
    r_e: f64,
    abc: [f64; 3],
) -> Option<Start> {
    let [a, b, c] = abc;
    let over = drive - V_BE_TYPICAL;
    let inv_beta = 1.0 / device.beta;
    let loop_u = |ic_per_u: f64| over / (r_b * inv_beta + r_e * (inv_beta + ic_per_u));
    if over <= 0.0 || a <= 0.0 || r_b + r_e <= 0.0 {
        return None;
    }
    let u = loop_u(a);
    // loop_u((a − b·u)/(1 + c·u)) with the fraction cleared: one division.
    let den = 1.0 + c * u;
    let u = over * den / ((r_b + r_e) * inv_beta * den + r_e * (a - b * u));
    let v_be = v_t * (u / device.i_s).ln();
    (u > 0.0 && v_be > 0.0).then_some(Start { v_be, u })
}

/// Solve the forward-active transistor with a Thevenin source on each terminal:
/// V_B = V_Bth − I_B·R_B, V_E = V_Eth + I_E·R_E, V_C = V_Cth − I_C·R_C, with
/// I_C = I_S·e^(V_BE/V_T)·(1 + V_CE/V_A) and I_B = (I_S/β)·e^(V_BE/V_T).
///
/// With u = I_S·e^(V_BE/V_T) the collector current follows in closed form from the
/// collector and emitter loops; what remains is one monotone equation in V_BE,
/// solved by Halley's method (Newton's with the second derivative) kept inside a
/// bisection bracket, from a first guess made the way one biases by hand.
pub fn solve_bjt(
    device: &Device,
    v_t: f64,
    base: Thevenin,
    emitter: Thevenin,
    collector: Thevenin,
    warm_v_be: Option<f64>,
) -> Result<OperatingPoint, BiasFault> {
    let start = warm_v_be.map(|v_be| Start {
        v_be,
        u: device.i_s * (v_be / v_t).exp(),
    });
    solve_bjt_from(device, v_t, base, emitter, collector, start)
}

/// A point to start the V_BE search from: V_BE and u = I_S·e^(V_BE/V_T) there.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Start {
    pub v_be: f64,
    pub u: f64,
}

impl Start {
    /// From an earlier solution of the same transistor: u = β·I_B (I_B = u/β), so no
    /// exponential is needed.
    pub fn from_solution(op: &OperatingPoint, device: &Device) -> Start {
        Start {
            v_be: op.v_be_junction,
            u: device.beta * op.i_b,
        }
    }
}

/// [`solve_bjt`] from a given starting point (`None`: a first guess from the base loop).
pub fn solve_bjt_from(
    device: &Device,
    v_t: f64,
    base: Thevenin,
    emitter: Thevenin,
    collector: Thevenin,
    start: Option<Start>,
) -> Result<OperatingPoint, BiasFault> {
    let op = solve_active_from(device, v_t, base, emitter, collector, start)?;
    check_active(&op, device)?;
    Ok(op)
}

/// The device's forward-active operating point on its three Thevenin networks: a JFET
/// by its own solve (`jfet::Jfet::solve`), a BJT by [`solve_junction_from`]. The
/// choice is made here, once, so the bipolar solve stays small enough to inline
/// (a check inside it cost about 10 % of `cargo bench --bench evaluate`).
pub fn solve_active_from(
    device: &Device,
    v_t: f64,
    base: Thevenin,
    emitter: Thevenin,
    collector: Thevenin,
    start: Option<Start>,
) -> Result<OperatingPoint, BiasFault> {
    match device.jfet_model() {
        Some(j) => j.solve(base, emitter, collector),
        None => solve_junction_from(device, v_t, base, emitter, collector, start),
    }
}

/// The edge of the active region at the terminals: a JFET's ohmic edge
/// (`jfet::Jfet::check_ohmic`), a BJT's saturation ([`check_saturation`]).
pub fn check_active(op: &OperatingPoint, device: &Device) -> Result<(), BiasFault> {
    match device.jfet_model() {
        Some(j) => j.check_ohmic(op),
        None => check_saturation(op, device),
    }
}

/// A forward-active solution with V_CE below `vce_sat` is saturated (docs/definitions.md); the
/// caller passes V_CE at the terminals. Bipolar only: [`check_active`] chooses.
pub fn check_saturation(op: &OperatingPoint, device: &Device) -> Result<(), BiasFault> {
    if op.v_ce < device.vce_sat || !op.i_c.is_finite() {
        return Err(BiasFault::Saturated {
            v_ce: op.v_ce,
            i_c: op.i_c,
            vce_sat: device.vce_sat,
        });
    }
    Ok(())
}

/// [`solve_bjt_from`] without the saturation check, for a caller that first moves
/// V_CE to the terminals (a collector resistance r_c). Bipolar only:
/// [`solve_active_from`] chooses.
pub fn solve_junction_from(
    device: &Device,
    v_t: f64,
    base: Thevenin,
    emitter: Thevenin,
    collector: Thevenin,
    start: Option<Start>,
) -> Result<OperatingPoint, BiasFault> {
    if base.is_open() {
        return Err(BiasFault::NoDcPath { terminal: "base" });
    }
    if emitter.is_open() {
        return Err(BiasFault::NoDcPath {
            terminal: "emitter",
        });
    }
    if collector.is_open() {
        return Err(BiasFault::NoDcPath {
            terminal: "collector",
        });
    }
    let beta = device.beta;
    let (r_b, r_e, r_c) = (base.r, emitter.r, collector.r);
    let inv_va = if device.v_a.is_finite() {
        1.0 / device.v_a
    } else {
        0.0
    };
    let drive = base.v - emitter.v;
    // I_C(u) = u·(a − b·u)/(1 + c·u): the collector loop solved for I_C.
    let a = 1.0 + (collector.v - emitter.v) * inv_va;
    let b = r_e / beta * inv_va;
    let c = (r_c + r_e) * inv_va;
    let inv_beta = 1.0 / beta;
    let inv_v_t = 1.0 / v_t;
    // I_C = N/D with N = a·u − b·u², D = 1 + c·u.
    let collector_current = |u: f64| u * (a - b * u) / (1.0 + c * u);
    // f(V_BE) = V_Bth − V_Eth − I_B·R_B − I_E·R_E − V_BE, decreasing in V_BE, and its
    // first two derivatives, given u = I_S·e^(V_BE/V_T) (du/dV_BE = u/V_T). All three
    // share I_C's denominator D; scaled by D, D² and D³ they need no division, and a
    // Halley step only one. With N' = a − 2b·u, M = N'·D − c·N (I_C' = M/D²,
    // I_C'' = −2(b·D² + c·M)/D³), R = R_B + R_E and du = u/V_T:
    //   F = f·D    = (V_Bth − V_Eth − V_BE − u·R/β)·D − R_E·N
    //   G = f'·D²  = −(1 + du·R/β)·D² − R_E·du·M
    //   H = f''·D³ = (G·D + D³)/V_T + 2·R_E·du²·(b·D² + c·M)   (f'' = (f' + 1)/V_T − R_E·I_C''·du²)
    // Returns (F, G, H, D); D ≥ 1, so F and G carry the signs of f and f'.
    let r_base_loop = (r_b + r_e) * inv_beta;
    let scaled_residual_at = |v_be: f64, u: f64| -> (f64, f64, f64, f64) {
        let d = 1.0 + c * u;
        let n = u * (a - b * u);
        let m = (a - 2.0 * b * u) * d - c * n;
        let du = u * inv_v_t;
        let d2 = d * d;
        let f = (drive - v_be - u * r_base_loop) * d - r_e * n;
        let df = -(1.0 + du * r_base_loop) * d2 - r_e * du * m;
        let d2f = (df * d + d2 * d) * inv_v_t + 2.0 * r_e * du * du * (b * d2 + c * m);
        (f, df, d2f, d)
    };

    // At V_BE = 0, u = I_S exactly.
    let (f0, _, _, _) = scaled_residual_at(0.0, device.i_s);
    if drive <= 0.0 || f0 <= 0.0 {
        return Err(BiasFault::NoForwardBias {
            v_be: drive.min(0.0),
            i_c: 0.0,
        });
    }
    // Bracket [lo, hi] for V_BE. The top is also capped where u passes I_MAX; that
    // cap costs a logarithm, so it is found on the way: a point with u above I_MAX
    // becomes the new top.
    let mut lo = 0.0;
    let mut hi = drive;
    let junction = |v: f64| device.i_s * (v / v_t).exp();
    let (mut v, mut u) = match start
        .filter(|s| s.v_be > lo && s.v_be < hi)
        .or_else(|| cold_start(device, v_t, drive, r_b, r_e, [a, b, c]).filter(|s| s.v_be < hi))
    {
        Some(s) => (s.v_be, s.u),
        None => {
            let v = if hi > 0.7 { 0.6 } else { 0.5 * (lo + hi) };
            (v, junction(v))
        }
    };
    let tolerance = 1e-15 * v_t.max(v.abs());
    let mut converged = false;
    for _ in 0..200 {
        // A step inside the bracket, in V_T: u follows by the series when it is small.
        let mut moved = f64::INFINITY;
        if u > I_MAX || !u.is_finite() {
            hi = v;
            v = 0.5 * (lo + hi);
        } else {
            let (f, df, d2f, d) = scaled_residual_at(v, u);
            // Halley's step, third order (f'' costs little for an exponential):
            // Δ = −2·f·f'/(2f'² − f·f''), Newton's −f/f' corrected by the curvature;
            // in the scaled F, G, H: −2·F·G·D/(2G² − F·H).
            let halley = -2.0 * f * df * d / (2.0 * df * df - f * d2f);
            // Converged: the step is below rounding of V_BE.
            if halley.abs() <= tolerance {
                v += halley;
                u *= 1.0 + halley * inv_v_t;
                converged = true;
                break;
            }
            if f > 0.0 {
                lo = v;
            } else {
                hi = v;
            }
            // f falls with V_BE, so the step must go the way f's sign says; where
            // Halley's does not (far from the root), Newton's.
            let cubic = halley.is_finite() && (halley > 0.0) == (f > 0.0);
            let step = if cubic { halley } else { -f * d / df };
            let next = v + step;
            if df < 0.0 && next > lo && next < hi {
                v = next;
                // Halley converges cubically here: the error after this step is at
                // most about step³/V_T² (f''/f' and f'''/f' are of order 1/V_T and
                // 1/V_T² for the exponential; about step³/(12·V_T²) measured), so a
                // step below CUBIC_STOP·V_T leaves an error below 1e-15·V_T, the
                // rounding of V_BE; u follows from e^(step/V_T) to third order (the
                // next term is below 1e-21 relative).
                if cubic && step.abs() <= CUBIC_STOP * v_t {
                    let x = step * inv_v_t;
                    u *= 1.0 + x * (1.0 + 0.5 * x * (1.0 + x * (1.0 / 3.0)));
                    converged = true;
                    break;
                }
                moved = step * inv_v_t;
            } else {
                v = 0.5 * (lo + hi);
            }
        }
        if hi - lo <= tolerance {
            break;
        }
        u = if moved.abs() <= SERIES_STEP {
            u * exp_near_zero(moved)
        } else {
            junction(v)
        };
    }
    if !converged {
        // Stopped on the bracket: unlimited when the root lies above the cap.
        let cap = drive.min(v_t * (I_MAX / device.i_s).ln());
        if scaled_residual_at(cap, junction(cap)).0 > 0.0 {
            return Err(BiasFault::Unlimited);
        }
        u = junction(v);
    }

    let i_c = collector_current(u);
    let i_b = u * inv_beta;
    let i_e = i_b + i_c;
    let v_b = base.v - i_b * r_b;
    let v_e = emitter.v + i_e * r_e;
    let v_c = collector.v - i_c * r_c;
    let op = OperatingPoint {
        i_c,
        i_b,
        i_e,
        v_be: v_b - v_e,
        v_be_junction: v_b - v_e,
        v_ce: v_c - v_e,
        v_b,
        v_c,
        v_e,
    };
    if op.i_c < I_CUTOFF {
        return Err(BiasFault::NoForwardBias {
            v_be: op.v_be,
            i_c: op.i_c,
        });
    }
    if !op.i_c.is_finite() {
        return Err(BiasFault::Saturated {
            v_ce: op.v_ce,
            i_c: op.i_c,
            vce_sat: device.vce_sat,
        });
    }
    Ok(op)
}

/// A test transistor: the defaults (I_S = 10 fA, V_CE,sat = 0.2 V) with this β and V_A.
#[cfg(test)]
pub(crate) fn test_npn(beta: f64, v_a: f64) -> Device {
    Device {
        name: "t".into(),
        beta,
        v_a,
        ..Default::default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn npn(beta: f64, v_a: f64) -> Device {
        test_npn(beta, v_a)
    }

    #[test]
    fn the_short_series_is_the_exponential_near_zero() {
        // Reference: the platform's e^x (libm), correctly rounded to within an ulp.
        for k in -1000..=1000 {
            let x = SERIES_STEP * k as f64 / 1000.0;
            let (series, exact) = (exp_near_zero(x), x.exp());
            assert!(
                (series - exact).abs() <= 3e-16 * exact,
                "{x}: {series} vs {exact}"
            );
        }
    }

    #[test]
    fn thermal_voltage_si_brochure() {
        // kT/q at 300 K with the exact 2019 SI constants: 25.852 mV (SI Brochure, 9th ed.).
        assert!((thermal_voltage(300.0) - 0.025_852).abs() < 5e-7);
        // About 26 mV at room temperature (common practice, no source).
        assert!((thermal_voltage(298.15) - 0.026).abs() < 0.0005);
    }

    #[test]
    fn divider_biased_stage_satisfies_its_loops() {
        // Check the solution against the circuit laws it must obey (KVL/KCL and the
        // device equations of docs/definitions.md), evaluated independently of the solver.
        let dev = npn(200.0, 80.0);
        let v_t = thermal_voltage(298.15);
        let base = Thevenin::new(12.0, 82e3).parallel(Thevenin::new(0.0, 15e3));
        let op = solve_bjt(
            &dev,
            v_t,
            base,
            Thevenin::new(0.0, 1e3),
            Thevenin::new(12.0, 4.7e3),
            None,
        )
        .unwrap();
        let u = dev.i_s * (op.v_be / v_t).exp();
        assert!((op.i_c - u * (1.0 + op.v_ce / dev.v_a)).abs() < 1e-12 * op.i_c);
        assert!((op.i_b - u / dev.beta).abs() < 1e-12 * op.i_b);
        assert!((op.v_b - (base.v - op.i_b * base.r)).abs() < 1e-12);
        assert!((op.v_e - op.i_e * 1e3).abs() < 1e-12);
        assert!((op.v_c - (12.0 - op.i_c * 4.7e3)).abs() < 1e-12);
        // Handbook estimate (stiff divider, V_BE ≈ 0.65 V): I_E ≈ (V_th − 0.65)/R_E; within 10 %.
        let estimate = (base.v - 0.65) / 1e3;
        assert!((op.i_e - estimate).abs() < 0.1 * estimate, "{op:?}");
    }

    #[test]
    fn faults_are_named() {
        let dev = npn(200.0, f64::INFINITY);
        let v_t = thermal_voltage(298.15);
        // Base at ground: no forward bias.
        let r = solve_bjt(
            &dev,
            v_t,
            Thevenin::new(0.0, 10e3),
            Thevenin::new(0.0, 1e3),
            Thevenin::new(12.0, 4.7e3),
            None,
        );
        assert!(matches!(r, Err(BiasFault::NoForwardBias { .. })));
        // Collector resistor far too large: saturated.
        let r = solve_bjt(
            &dev,
            v_t,
            Thevenin::new(3.0, 10e3),
            Thevenin::new(0.0, 1e3),
            Thevenin::new(12.0, 470e3),
            None,
        );
        assert!(matches!(r, Err(BiasFault::Saturated { .. })));
        let r = solve_bjt(
            &dev,
            v_t,
            Thevenin::OPEN,
            Thevenin::new(0.0, 1e3),
            Thevenin::new(12.0, 4.7e3),
            None,
        );
        assert!(matches!(r, Err(BiasFault::NoDcPath { .. })));
    }

    #[test]
    fn nothing_limits_the_current() {
        // Base driven from an ideal source, emitter straight to ground: the junction
        // equation has no solution below I_MAX (Shockley's law, from memory).
        let dev = npn(200.0, f64::INFINITY);
        let v_t = thermal_voltage(298.15);
        let r = solve_bjt(
            &dev,
            v_t,
            Thevenin::new(2.0, 0.0),
            Thevenin::new(0.0, 0.0),
            Thevenin::new(12.0, 1e3),
            None,
        );
        assert!(matches!(r, Err(BiasFault::Unlimited)), "{r:?}");
    }

    #[test]
    fn start_point_does_not_change_the_solution() {
        // The same circuit from a cold start, from its own solution, and from a poor
        // guess: one root of one monotone equation, so the same numbers to rounding.
        let dev = npn(150.0, 60.0);
        let v_t = thermal_voltage(310.0);
        let base = Thevenin::new(12.0, 47e3).parallel(Thevenin::new(0.0, 10e3));
        let (e, c) = (Thevenin::new(0.0, 680.0), Thevenin::new(12.0, 3.3e3));
        let cold = solve_bjt(&dev, v_t, base, e, c, None).unwrap();
        let warm = solve_bjt_from(
            &dev,
            v_t,
            base,
            e,
            c,
            Some(Start::from_solution(&cold, &dev)),
        )
        .unwrap();
        let poor = solve_bjt(&dev, v_t, base, e, c, Some(0.3)).unwrap();
        for op in [warm, poor] {
            assert!(
                (op.i_c - cold.i_c).abs() <= 1e-14 * cold.i_c,
                "{op:?} vs {cold:?}"
            );
            assert!((op.v_ce - cold.v_ce).abs() <= 1e-13, "{op:?} vs {cold:?}");
        }
    }
}
