//! Small linear-network pieces shared by the passes: Thevenin sources for DC, the
//! frequency at which AC is evaluated, and stage two-ports in Y parameters.

use num_complex::Complex64;
use std::f64::consts::PI;

/// A DC source as seen from one terminal: open-circuit voltage `v` behind resistance `r`.
/// `r = 0` is an ideal source; `r = ∞` means nothing is connected (no DC path).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Thevenin {
    pub v: f64,
    pub r: f64,
}

impl Default for Thevenin {
    /// Nothing connected.
    fn default() -> Self {
        Thevenin::OPEN
    }
}

impl Thevenin {
    pub const OPEN: Thevenin = Thevenin {
        v: 0.0,
        r: f64::INFINITY,
    };

    pub fn new(v: f64, r: f64) -> Self {
        Thevenin { v, r }
    }

    /// A resistor to a fixed voltage, or nothing when the resistor is absent.
    pub fn resistor_to(r: Option<f64>, v: f64) -> Self {
        match r {
            Some(r) => Thevenin { v, r },
            None => Thevenin::OPEN,
        }
    }

    pub fn is_open(self) -> bool {
        self.r.is_infinite()
    }

    /// Two sources on one node: Millman's theorem, V = Σ(V/R)/Σ(1/R), R = 1/Σ(1/R),
    /// for two sources V = (V₁·R₂ + V₂·R₁)/(R₁ + R₂), R = R₁·R₂/(R₁ + R₂) (one
    /// division). An ideal source (r = 0) wins; an open one drops out.
    pub fn parallel(self, other: Thevenin) -> Thevenin {
        if self.r == 0.0 || other.is_open() {
            return self;
        }
        if other.r == 0.0 || self.is_open() {
            return other;
        }
        let inv_sum = 1.0 / (self.r + other.r);
        Thevenin {
            v: (self.v * other.r + other.v * self.r) * inv_sum,
            r: self.r * other.r * inv_sum,
        }
    }

    /// Add a linear load drawing `i0 + g·(V − v0)` from the node (a linearised
    /// successor input), keeping the result as a Thevenin source.
    pub fn with_norton_load(self, g: f64, i_at_zero: f64) -> Thevenin {
        // Load current: g·V − i_at_zero, i.e. a Norton source i_at_zero into the node with conductance g.
        if g <= 0.0 || self.r == 0.0 {
            return self;
        }
        if self.is_open() {
            return Thevenin {
                v: i_at_zero / g,
                r: 1.0 / g,
            };
        }
        // Millman with the Norton source itself: V = (V_s/R_s + i)/(1/R_s + g)
        // = (V_s + i·R_s)/(1 + g·R_s), R = R_s/(1 + g·R_s) (one division).
        let inv_den = 1.0 / (1.0 + g * self.r);
        Thevenin {
            v: (self.v + i_at_zero * self.r) * inv_den,
            r: self.r * inv_den,
        }
    }
}

/// Where an AC quantity is evaluated.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Freq {
    /// Capacitors open, device capacitances absent: the incremental DC network.
    Dc,
    /// Coupling and bypass capacitors short, device capacitances absent (docs/definitions.md).
    Midband,
    /// A real frequency in hertz: s = j·2πf.
    Hz(f64),
}

impl Freq {
    /// The frequency in hertz; `None` for DC and midband (reports write it as null).
    pub fn hz(self) -> Option<f64> {
        match self {
            Freq::Hz(f) => Some(f),
            _ => None,
        }
    }

    /// Impedance of a capacitor; `None` when it is open (at DC).
    pub fn capacitor(self, c: f64) -> Option<Complex64> {
        match self {
            Freq::Dc => None,
            Freq::Midband => Some(Complex64::new(0.0, 0.0)),
            // Z = 1/(jωC)
            Freq::Hz(f) => Some(Complex64::new(0.0, -1.0 / (2.0 * PI * f * c))),
        }
    }

    /// Series coupling element of a link: `None` for an open (a capacitor at DC).
    pub fn coupling(self, c: Option<f64>) -> Option<Complex64> {
        match c {
            None => Some(Complex64::new(0.0, 0.0)),
            Some(c) => self.capacitor(c),
        }
    }

    /// Admittance s·C of a shunt capacitance (device, source or load capacitance):
    /// exactly zero at DC and midband, where those capacitances are open.
    pub fn shunt(self, c: f64) -> Complex64 {
        if c == 0.0 {
            return Complex64::new(0.0, 0.0);
        }
        self.s() * c
    }

    /// Complex frequency s for device capacitances (zero at DC and midband).
    pub fn s(self) -> Complex64 {
        match self {
            Freq::Dc | Freq::Midband => Complex64::new(0.0, 0.0),
            Freq::Hz(f) => Complex64::new(0.0, 2.0 * PI * f),
        }
    }
}

/// Hybrid-π small-signal parameters at one operating point.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct HybridPi {
    pub g_m: f64,
    /// 1/r_π
    pub g_pi: f64,
    /// 1/r_o (0 without Early effect)
    pub g_o: f64,
    /// C_π and C_μ (zero in the midband model)
    pub c_pi: f64,
    pub c_mu: f64,
}

/// Device terminals in [`HybridPi::admittance_matrix`]: base, collector, emitter.
pub const TERMINAL_B: usize = 0;
pub const TERMINAL_C: usize = 1;
pub const TERMINAL_E: usize = 2;

impl HybridPi {
    /// Nodal admittance matrix of the transistor alone on its terminals (B, C, E):
    /// row = current leaving the terminal into the device, column = terminal voltage.
    /// r_π ∥ C_π between B and E, C_μ between B and C, r_o between C and E, and the
    /// controlled source g_m·v_be from C to E inside the device.
    pub fn admittance_matrix(&self, s: Complex64) -> [[Complex64; 3]; 3] {
        if s == Complex64::new(0.0, 0.0) {
            return self
                .admittance_matrix_real()
                .map(|row| row.map(|x| Complex64::new(x, 0.0)));
        }
        let (b, c, e) = (TERMINAL_B, TERMINAL_C, TERMINAL_E);
        let mut y = [[Complex64::new(0.0, 0.0); 3]; 3];
        let mut between = |p: usize, q: usize, g: Complex64| {
            y[p][p] += g;
            y[q][q] += g;
            y[p][q] -= g;
            y[q][p] -= g;
        };
        between(b, e, self.g_pi + s * self.c_pi); // r_π ∥ C_π
        between(b, c, s * self.c_mu); // C_μ
        between(c, e, Complex64::new(self.g_o, 0.0)); // r_o
        let g_m = Complex64::new(self.g_m, 0.0);
        y[c][b] += g_m;
        y[c][e] -= g_m;
        y[e][b] -= g_m;
        y[e][e] += g_m;
        y
    }

    /// [`HybridPi::admittance_matrix`] at s = 0 (DC and midband), in real numbers:
    /// r_π between B and E, r_o between C and E, g_m·v_be from C to E.
    pub fn admittance_matrix_real(&self) -> [[f64; 3]; 3] {
        let (g_pi, g_o, g_m) = (self.g_pi, self.g_o, self.g_m);
        [
            [g_pi, 0.0, -g_pi],
            [g_m, g_o, -g_m - g_o],
            [-g_pi - g_m, -g_o, g_pi + g_m + g_o],
        ]
    }
}

/// a/b. At DC and midband every quantity of the AC pass is real, and a real
/// division is a fraction of a complex one's cost (`cargo bench --bench evaluate`); the
/// result is the same to rounding.
#[inline]
pub fn cdiv(a: Complex64, b: Complex64) -> Complex64 {
    if a.im == 0.0 && b.im == 0.0 {
        Complex64::new(a.re / b.re, 0.0)
    } else {
        a / b
    }
}

/// A two-port in Y parameters: [i1; i2] = [[y11, y12], [y21, y22]]·[v1; v2], or one
/// of the limits where Y parameters do not exist (a wire through the stage; an output
/// on ground; an output held by an ideal voltage source).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TwoPort {
    pub y11: Complex64,
    pub y12: Complex64,
    pub y21: Complex64,
    pub y22: Complex64,
    form: PortForm,
}

/// Which [`TwoPort`] it is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum PortForm {
    Y,
    /// Input and output are one node carrying the shunt admittance `y11`.
    Through,
    /// The output is on ground; `y11` is the input's admittance to ground.
    GroundedOutput,
    /// The output an ideal voltage source (an op-amp with `output_resistance` 0):
    /// `y11` is the input admittance and `y21` the gain, whatever the load.
    Source,
}

impl TwoPort {
    #[inline]
    pub fn new(y11: Complex64, y12: Complex64, y21: Complex64, y22: Complex64) -> TwoPort {
        TwoPort {
            y11,
            y12,
            y21,
            y22,
            form: PortForm::Y,
        }
    }

    /// Input and output one node, with shunt admittance `y` on it: the load adds to
    /// it, the gain is 1.
    pub fn through(y: Complex64) -> TwoPort {
        let zero = Complex64::new(0.0, 0.0);
        TwoPort {
            form: PortForm::Through,
            ..TwoPort::new(y, zero, zero, zero)
        }
    }

    /// The output on ground, admittance `y` from the input to ground: no gain, no
    /// output impedance.
    pub fn grounded_output(y: Complex64) -> TwoPort {
        let zero = Complex64::new(0.0, 0.0);
        TwoPort {
            form: PortForm::GroundedOutput,
            ..TwoPort::new(y, zero, zero, zero)
        }
    }

    /// An output held by an ideal voltage source at `gain`·v1, input admittance `y_in`:
    /// neither depends on the load, and the output impedance is zero.
    pub fn source(y_in: Complex64, gain: Complex64) -> TwoPort {
        let zero = Complex64::new(0.0, 0.0);
        TwoPort {
            form: PortForm::Source,
            ..TwoPort::new(y_in, zero, gain, zero)
        }
    }

    /// Input admittance with admittance `y_l` on the output port: y11 − y12·y21/(y22 + Y_L).
    #[inline]
    pub fn input_admittance(&self, y_l: Complex64) -> Complex64 {
        match self.form {
            PortForm::Y => self.y11 - cdiv(self.y12 * self.y21, self.y22 + y_l),
            PortForm::Through => self.y11 + y_l,
            PortForm::GroundedOutput | PortForm::Source => self.y11,
        }
    }

    /// Voltage gain v2/v1 with admittance `y_l` on the output port: −y21/(y22 + Y_L).
    #[inline]
    pub fn voltage_gain(&self, y_l: Complex64) -> Complex64 {
        match self.form {
            PortForm::Y => cdiv(-self.y21, self.y22 + y_l),
            PortForm::Through => Complex64::new(1.0, 0.0),
            PortForm::GroundedOutput => Complex64::new(0.0, 0.0),
            PortForm::Source => self.y21,
        }
    }

    /// Output admittance with a source of impedance `z_s` on the input port:
    /// y22 − y12·y21/(y11 + 1/Z_S), written to allow Z_S = 0; with the input open
    /// (Z_S infinite: a capacitor at DC, or a driver that is a current source) the
    /// limit y22 − y12·y21/y11. Through the stage: y11 + 1/Z_S; an output on ground:
    /// infinite.
    #[inline]
    pub fn output_admittance(&self, z_s: Complex64) -> Complex64 {
        let open = z_s.re.is_infinite() || z_s.im.is_infinite();
        match self.form {
            PortForm::Y => {}
            PortForm::Through if open => return self.y11,
            PortForm::Through => return self.y11 + cdiv(Complex64::new(1.0, 0.0), z_s),
            PortForm::GroundedOutput | PortForm::Source => {
                return Complex64::new(f64::INFINITY, 0.0)
            }
        }
        if open {
            if self.y11 == Complex64::new(0.0, 0.0) {
                return self.y22;
            }
            return self.y22 - cdiv(self.y12 * self.y21, self.y11);
        }
        self.y22
            - cdiv(
                self.y12 * self.y21 * z_s,
                Complex64::new(1.0, 0.0) + self.y11 * z_s,
            )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn norton_load_on_a_source_is_kcl_at_the_node() {
        // A 5 V source behind 10k loaded by a linearised input drawing g·V − i
        // (g = 1/47k, i = 20 µA): KCL at the node, (5 − V)/10k = V/47k − 20 µA, gives
        // V = (5/10k + 20 µA)/(1/10k + 1/47k), R = 10k∥47k (Millman's theorem).
        let (g, i) = (1.0 / 47e3, 20e-6);
        let th = Thevenin::new(5.0, 10e3).with_norton_load(g, i);
        let v = (5.0 / 10e3 + i) / (1.0 / 10e3 + g);
        assert!((th.v - v).abs() <= 1e-15 * v, "{} vs {v}", th.v);
        let r = 10e3 * 47e3 / 57e3;
        assert!((th.r - r).abs() <= 1e-15 * r, "{} vs {r}", th.r);
        // Open: the load alone, V = i/g, R = 1/g.
        let alone = Thevenin::OPEN.with_norton_load(g, i);
        assert!((alone.v - i / g).abs() <= 1e-15 * (i / g));
        // 1e11 Ω (the largest resistance a chain file takes) against 1k: R within rounding.
        let th = Thevenin::new(1.0, 1e11).parallel(Thevenin::new(0.0, 1e3));
        let r = 1e11 * 1e3 / (1e11 + 1e3);
        assert!((th.r - r).abs() <= 2e-16 * r && (th.v - 1e3 / (1e11 + 1e3)).abs() <= 1e-23);
    }

    #[test]
    fn millman_divider() {
        // Divider 100k to 12 V and 22k to ground: V_th = 12·22/122, R_th = 100k∥22k (Thevenin's theorem).
        let th = Thevenin::new(12.0, 100e3).parallel(Thevenin::new(0.0, 22e3));
        assert!((th.v - 12.0 * 22.0 / 122.0).abs() < 1e-12);
        assert!((th.r - 100e3 * 22e3 / 122e3).abs() < 1e-6);
        assert_eq!(Thevenin::OPEN.parallel(th), th);
        assert_eq!(
            Thevenin::new(1.0, 0.0).parallel(th),
            Thevenin::new(1.0, 0.0)
        );
    }
}
