//! Distortion of one period of a waveform: the discrete Fourier transform (rustfft) of
//! N samples taken at t = k·T/N, k = 0 … N−1, of a signal whose fundamental has
//! period T. Harmonic n then sits exactly in bin n, and its peak amplitude is
//! 2·|X_n|/N (no window is needed for a whole number of periods).

use num_complex::Complex64;
use rustfft::{Fft, FftPlanner};
use serde::Serialize;
use std::sync::Arc;

/// Highest harmonic reported (harmonics 2 to 10 enter the THD).
pub const HIGHEST_HARMONIC: usize = 10;

/// Spectrum of one period: DC, the fundamental (complex, so phases can be compared)
/// and the complex harmonics 2 … 10.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Spectrum {
    /// Mean value.
    pub dc: f64,
    /// Complex amplitude of each harmonic n = 1 … 10 (index n − 1), scaled so that
    /// A·cos(nωt + φ) gives A·e^(jφ).
    pub bins: [Complex64; HIGHEST_HARMONIC],
}

impl Spectrum {
    /// Peak amplitude of the fundamental.
    pub fn fundamental(&self) -> f64 {
        self.bins[0].norm()
    }

    /// Peak amplitude of harmonic `n` (1 = fundamental).
    pub fn harmonic(&self, n: usize) -> f64 {
        self.bins[n - 1].norm()
    }

    /// Total harmonic distortion as a ratio: √(Σ_{n=2}^{10} A_n²)/A_1 (IEC 60268-3's
    /// THD relative to the fundamental; from memory). Zero for a silent node.
    pub fn thd(&self) -> f64 {
        let a1 = self.fundamental();
        if a1 == 0.0 {
            return 0.0;
        }
        let sum: f64 = (2..=HIGHEST_HARMONIC)
            .map(|n| self.harmonic(n).powi(2))
            .sum();
        sum.sqrt() / a1
    }
}

/// A ratio in percent and in decibels (20·log10).
pub fn percent_and_db(ratio: f64) -> (f64, f64) {
    (100.0 * ratio, 20.0 * ratio.log10())
}

/// Forward FFT of a fixed length with its buffers, allocated once.
pub struct Analyser {
    fft: Arc<dyn Fft<f64>>,
    buffer: Vec<Complex64>,
    scratch: Vec<Complex64>,
}

impl std::fmt::Debug for Analyser {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "Analyser({} points)", self.buffer.len())
    }
}

impl Analyser {
    /// An analyser for `n` samples per period (n > 2·HIGHEST_HARMONIC).
    pub fn new(n: usize) -> Analyser {
        assert!(n > 2 * HIGHEST_HARMONIC, "at least 21 samples per period");
        let fft = FftPlanner::new().plan_fft_forward(n);
        let scratch = vec![Complex64::new(0.0, 0.0); fft.get_inplace_scratch_len()];
        Analyser {
            fft,
            buffer: vec![Complex64::new(0.0, 0.0); n],
            scratch,
        }
    }

    pub fn len(&self) -> usize {
        self.buffer.len()
    }

    pub fn is_empty(&self) -> bool {
        self.buffer.is_empty()
    }

    /// Spectrum of one period given sample by sample (`samples.len()` = the length).
    pub fn spectrum(&mut self, samples: impl Iterator<Item = f64>) -> Spectrum {
        let n = self.buffer.len();
        let mut count = 0;
        for (slot, x) in self.buffer.iter_mut().zip(samples) {
            *slot = Complex64::new(x, 0.0);
            count += 1;
        }
        debug_assert_eq!(count, n);
        self.fft
            .process_with_scratch(&mut self.buffer, &mut self.scratch);
        let scale = 2.0 / n as f64;
        let mut bins = [Complex64::new(0.0, 0.0); HIGHEST_HARMONIC];
        for (k, b) in bins.iter_mut().enumerate() {
            // X_n = Σ x_k e^(−j2πnk/N); for A·cos(nωt + φ), X_n = (N/2)·A·e^(jφ).
            *b = self.buffer[k + 1] * scale;
        }
        Spectrum {
            dc: self.buffer[0].re / n as f64,
            bins,
        }
    }
}

/// Distortion figures of one node at one level.
#[derive(Debug, Clone, Serialize)]
pub struct NodeDistortion {
    /// Peak amplitude of the fundamental, V.
    pub fundamental: f64,
    /// Peak amplitudes of harmonics 2 to 10, V.
    pub harmonics: Vec<f64>,
    pub thd_percent: f64,
    pub thd_db: f64,
    /// Mean over the period minus the operating-point voltage, V.
    pub dc_shift: f64,
    /// Largest rise above the operating-point voltage, V (≥ 0).
    pub peak_positive: f64,
    /// Largest fall below the operating-point voltage, V (≥ 0).
    pub peak_negative: f64,
}

impl NodeDistortion {
    /// From the spectrum, the operating-point voltage `v_q` and the extremes of the
    /// waveform.
    pub fn new(s: &Spectrum, v_q: f64, min: f64, max: f64) -> NodeDistortion {
        let (thd_percent, thd_db) = percent_and_db(s.thd());
        NodeDistortion {
            fundamental: s.fundamental(),
            harmonics: (2..=HIGHEST_HARMONIC).map(|n| s.harmonic(n)).collect(),
            thd_percent,
            thd_db,
            dc_shift: s.dc - v_q,
            peak_positive: (max - v_q).max(0.0),
            peak_negative: (v_q - min).max(0.0),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    #[test]
    fn exact_harmonics_of_a_synthetic_signal() {
        // A sum of cosines with known amplitudes and phases: the DFT of a whole number
        // of periods puts each one exactly in its bin (orthogonality of the discrete
        // exponentials, any signal-processing text; from memory).
        let n = 1024;
        let amplitudes = [1.5, 0.3, 0.0, 0.05, 0.02, 0.0, 0.01, 0.004, 0.002, 0.001];
        let phases = [0.1, -1.0, 0.0, 2.0, 0.5, 0.0, -2.5, 1.2, 3.0, -0.7];
        let dc = 0.25;
        let x = (0..n).map(|k| {
            let t = k as f64 / n as f64;
            dc + (1..=10)
                .map(|h| amplitudes[h - 1] * (2.0 * PI * h as f64 * t + phases[h - 1]).cos())
                .sum::<f64>()
                // Harmonics above 10 and far below Nyquist must not leak into 1 … 10.
                + 0.5 * (2.0 * PI * 37.0 * t).cos()
        });
        let mut a = Analyser::new(n);
        let s = a.spectrum(x);
        assert!((s.dc - dc).abs() < 1e-9);
        for h in 1..=10 {
            assert!(
                (s.harmonic(h) - amplitudes[h - 1]).abs() < 1e-9,
                "harmonic {h}: {} vs {}",
                s.harmonic(h),
                amplitudes[h - 1]
            );
            if amplitudes[h - 1] > 0.0 {
                let phase = s.bins[h - 1].arg();
                assert!((phase - phases[h - 1]).abs() < 1e-9, "phase {h}");
            }
        }
        // THD by its definition: √(Σ A_n², n = 2 … 10)/A_1.
        let expected = amplitudes[1..].iter().map(|a| a * a).sum::<f64>().sqrt() / amplitudes[0];
        assert!((s.thd() - expected).abs() < 1e-9);
    }

    #[test]
    fn clipped_sine_thd_matches_the_square_wave_series() {
        // A square wave of amplitude 1 has odd harmonics 4/(πn) (Fourier series, any
        // text): THD over harmonics 3, 5, 7, 9 is √(1/9 + 1/25 + 1/49 + 1/81). Sampled
        // at N points the discrete amplitudes differ by (πn/N)²/6 relative (aliasing,
        // below 1e-5 here).
        let n = 4096;
        let square = (0..n).map(|k| {
            let t = (k as f64 + 0.5) / n as f64;
            if t < 0.5 {
                1.0
            } else {
                -1.0
            }
        });
        let mut a = Analyser::new(n);
        let s = a.spectrum(square);
        let series = (1.0_f64 / 9.0 + 1.0 / 25.0 + 1.0 / 49.0 + 1.0 / 81.0).sqrt();
        assert!((s.thd() - series).abs() < 1e-4, "{}", s.thd());
        assert!((s.fundamental() - 4.0 / PI).abs() < 1e-4);
        assert!(
            s.harmonic(2) < 1e-9 && s.harmonic(4) < 1e-9,
            "even harmonics vanish"
        );
        let nd = NodeDistortion::new(&s, 0.0, -1.0, 1.0);
        assert!((nd.thd_db - 20.0 * series.log10()).abs() < 0.01);
        assert_eq!(nd.harmonics.len(), 9);
    }
}
