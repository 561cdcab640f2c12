//! Common-emitter stage: input at the base, output at the collector, emitter to ground
//! through an unbypassed resistor `r_emitter` in series with `r_emitter_bypassed`,
//! which `c_bypass` shorts for AC.

use super::{
    bias_power, parallel, AcTerminals, BaseBias, DcTerminals, LocalElement, LocalNode, StageModel,
    Swing, Toward,
};
use crate::chain::{ChainError, Fields};
use crate::device::OperatingPoint;
use crate::network::{series_with_bypassed, Freq, OutputTerminal, Termination, Thevenin};
use crate::spec::ValueSpec;
use crate::units::Kind;
use num_complex::Complex64;
use serde::Deserialize;

/// The chain-file entry (`"type": "common_emitter"`).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CommonEmitterSpec {
    pub id: String,
    pub device: String,
    #[serde(default)]
    pub r_top: Option<ValueSpec>,
    #[serde(default)]
    pub r_bottom: Option<ValueSpec>,
    pub r_collector: ValueSpec,
    #[serde(default)]
    pub r_emitter: Option<ValueSpec>,
    #[serde(default)]
    pub r_emitter_bypassed: Option<ValueSpec>,
    #[serde(default)]
    pub c_bypass: Option<ValueSpec>,
}

/// Circuit values of a common-emitter stage, SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct CommonEmitter {
    pub bias: BaseBias,
    pub r_collector: f64,
    /// Unbypassed emitter resistance R_E1 (0 when absent).
    pub r_emitter: f64,
    /// Bypassed emitter resistance R_E2 (0 when absent).
    pub r_emitter_bypassed: f64,
    /// Bypass capacitor across R_E2.
    pub c_bypass: Option<f64>,
}

impl CommonEmitterSpec {
    /// What the file gives for part `i` of [`CommonEmitter::PARTS`].
    pub fn part(&self, i: usize) -> Option<&ValueSpec> {
        match i {
            0 => self.r_top.as_ref(),
            1 => self.r_bottom.as_ref(),
            2 => Some(&self.r_collector),
            3 => self.r_emitter.as_ref(),
            4 => self.r_emitter_bypassed.as_ref(),
            5 => self.c_bypass.as_ref(),
            _ => None,
        }
    }
}

impl CommonEmitter {
    /// The stage's resistors and capacitors by chain-file name (for tolerances).
    pub const PARTS: &'static [(&'static str, Kind)] = &[
        ("r_top", Kind::Resistance),
        ("r_bottom", Kind::Resistance),
        ("r_collector", Kind::Resistance),
        ("r_emitter", Kind::Resistance),
        ("r_emitter_bypassed", Kind::Resistance),
        ("c_bypass", Kind::Capacitance),
    ];

    /// The value of part `i` of [`Self::PARTS`]; `None` when the stage has no such part.
    pub fn part_mut(&mut self, i: usize) -> Option<&mut f64> {
        match i {
            0 => self.bias.r_top.as_mut(),
            1 => self.bias.r_bottom.as_mut(),
            2 => Some(&mut self.r_collector),
            // Absent emitter resistors are kept as 0.
            3 if self.r_emitter > 0.0 => Some(&mut self.r_emitter),
            4 if self.r_emitter_bypassed > 0.0 => Some(&mut self.r_emitter_bypassed),
            5 => self.c_bypass.as_mut(),
            _ => None,
        }
    }

    pub fn build(s: &CommonEmitterSpec, f: &Fields) -> Result<Self, ChainError> {
        let r_emitter_bypassed = f.optional_positive(
            "r_emitter_bypassed",
            s.r_emitter_bypassed.as_ref(),
            Kind::Resistance,
        )?;
        let c_bypass = f.optional_positive("c_bypass", s.c_bypass.as_ref(), Kind::Capacitance)?;
        if r_emitter_bypassed.is_some() && c_bypass.is_none() {
            return Err(f.invalid(
                "c_bypass",
                "nothing",
                "a bypass capacitor, since r_emitter_bypassed is set",
            ));
        }
        if c_bypass.is_some() && r_emitter_bypassed.is_none() {
            return Err(f.invalid(
                "r_emitter_bypassed",
                "nothing",
                "the resistor that c_bypass bypasses (or drop c_bypass)",
            ));
        }
        Ok(CommonEmitter {
            bias: BaseBias::read(f, s.r_top.as_ref(), s.r_bottom.as_ref())?,
            r_collector: f.positive("r_collector", &s.r_collector, Kind::Resistance)?,
            r_emitter: f
                .optional_positive("r_emitter", s.r_emitter.as_ref(), Kind::Resistance)?
                .unwrap_or(0.0),
            r_emitter_bypassed: r_emitter_bypassed.unwrap_or(0.0),
            c_bypass,
        })
    }

    /// Emitter impedance to ground at `freq`: R_E1 + (R_E2 ∥ 1/(jωC_E)).
    pub fn emitter_impedance(&self, freq: Freq) -> Complex64 {
        let z_c = match self.c_bypass {
            Some(c) => freq.capacitor(c),
            None => None,
        };
        series_with_bypassed(self.r_emitter, self.r_emitter_bypassed, z_c)
    }
}

impl StageModel for CommonEmitter {
    fn type_name(&self) -> &'static str {
        "common_emitter"
    }

    fn output(&self) -> OutputTerminal {
        OutputTerminal::Collector
    }

    fn bias(&self) -> BaseBias {
        self.bias
    }

    fn dc_terminals(&self, v_cc: f64, out_load: Thevenin) -> DcTerminals {
        DcTerminals {
            emitter: Thevenin::new(0.0, self.r_emitter + self.r_emitter_bypassed),
            collector: Thevenin::new(v_cc, self.r_collector).parallel(out_load),
        }
    }

    fn ac_terminals(&self, freq: Freq) -> AcTerminals {
        AcTerminals {
            y_output: Complex64::new(1.0 / self.r_collector, 0.0),
            third: Termination::from_impedance(self.emitter_impedance(freq)),
        }
    }

    /// DESIGN.md: R_ac = R_C ∥ load, R_E,ac = unbypassed emitter resistance, α = I_C/I_E;
    /// toward cutoff the collector rises by I_CQ·R_ac, toward saturation it falls by
    /// (V_CEQ − V_CE,sat)·R_ac/(R_ac + R_E,ac/α).
    fn swing(&self, op: &OperatingPoint, vce_sat: f64, r_load: f64) -> Swing {
        let r_ac = parallel(self.r_collector, r_load);
        let r_line = r_ac + self.r_emitter / op.alpha();
        Swing {
            limit_up: op.i_c * r_ac,
            up_toward: Toward::Cutoff,
            limit_down: (op.v_ce - vce_sat) * r_ac / r_line,
            down_toward: Toward::Saturation,
            r_line,
        }
    }

    /// R_C from the collector to AC ground; R_E1 from the emitter to the inner node M,
    /// R_E2 ∥ C_E from M to ground (M is the emitter itself when R_E1 is absent).
    fn local_network(&self) -> Vec<LocalElement> {
        use LocalNode::{Collector, Emitter, Ground, Inner};
        let mut net = vec![LocalElement::Resistor {
            a: Collector,
            b: Ground,
            r: self.r_collector,
        }];
        let Some(c_e) = self.c_bypass else {
            // No bypassed part: R_E1 straight to ground (0 Ω: a wire).
            net.push(LocalElement::Resistor {
                a: Emitter,
                b: Ground,
                r: self.r_emitter,
            });
            return net;
        };
        let m = if self.r_emitter > 0.0 {
            net.push(LocalElement::Resistor {
                a: Emitter,
                b: Inner(0),
                r: self.r_emitter,
            });
            Inner(0)
        } else {
            Emitter
        };
        net.push(LocalElement::Resistor {
            a: m,
            b: Ground,
            r: self.r_emitter_bypassed,
        });
        net.push(LocalElement::Capacitor {
            a: m,
            b: Ground,
            c: c_e,
            field: "c_bypass",
            what: "bypass capacitor",
        });
        net
    }

    fn resistor_power(&self, op: &OperatingPoint, v_cc: f64) -> Vec<(&'static str, f64)> {
        let mut p = bias_power(&self.bias(), op, v_cc);
        p.push(("r_collector", (v_cc - op.v_c).powi(2) / self.r_collector));
        if self.r_emitter > 0.0 {
            p.push(("r_emitter", op.i_e.powi(2) * self.r_emitter));
        }
        if self.r_emitter_bypassed > 0.0 {
            p.push((
                "r_emitter_bypassed",
                op.i_e.powi(2) * self.r_emitter_bypassed,
            ));
        }
        p
    }
}
