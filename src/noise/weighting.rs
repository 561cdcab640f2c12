//! Frequency weighting of noise power (docs/definitions.md "Noise"): none, or the
//! A-weighting of IEC 61672-1 in its analytic form, applied to power.

/// How output noise power is weighted over frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Weighting {
    #[default]
    None,
    /// IEC 61672-1 A-weighting.
    A,
}

impl Weighting {
    /// The name reports echo: `"none"` or `"a"`.
    pub fn name(self) -> &'static str {
        match self {
            Weighting::None => "none",
            Weighting::A => "a",
        }
    }

    /// The power weight at `f` hertz (1 without weighting).
    pub fn power(self, f: f64) -> f64 {
        match self {
            Weighting::None => 1.0,
            Weighting::A => {
                let a = a_weighting_gain(f);
                a * a
            }
        }
    }
}

/// Pole frequencies of the IEC 61672-1 weightings (f1 … f4, from memory of the
/// standard's annex: 20.6 Hz, 107.7 Hz, 737.9 Hz, 12 194 Hz).
const F1: f64 = 20.598_997;
const F2: f64 = 107.652_65;
const F3: f64 = 737.862_23;
const F4: f64 = 12_194.217;
/// A1000: the A-weighting of the bare pole form at 1 kHz, −2.000 dB in the standard;
/// its gain is taken out, so A(1 kHz) = 0.000 dB to the standard's three decimals
/// (+0.00034 dB exactly, since −2.000 dB is itself rounded).
const A1000_DB: f64 = -2.0;

/// The A-weighting's amplitude gain at `f`: 10^(A(f)/20) with
/// A(f) = 20·log10(f4²·f⁴ / ((f² + f1²)·√((f² + f2²)(f² + f3²))·(f² + f4²))) − A1000
/// (IEC 61672-1, analytic form).
pub fn a_weighting_gain(f: f64) -> f64 {
    let f2 = f * f;
    let r_a = F4 * F4 * f2 * f2
        / ((f2 + F1 * F1) * ((f2 + F2 * F2) * (f2 + F3 * F3)).sqrt() * (f2 + F4 * F4));
    r_a / 10f64.powf(A1000_DB / 20.0)
}

/// The A-weighting in dB at `f`.
pub fn a_weighting_db(f: f64) -> f64 {
    20.0 * a_weighting_gain(f).log10()
}
