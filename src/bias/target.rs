//! What a bias design aims at, and how far an evaluated chain is from it.
//!
//! # The centred Q point
//!
//! docs/definitions.md's swing limits on the AC load line, with r_line the load line's
//! resistance (V_CE falls by r_line per ampere of collector current):
//!
//! - common emitter, R_ac = R_C ∥ load, R_E,ac the unbypassed emitter resistor,
//!   r_line = R_ac + R_E,ac/α:
//!   limit_up = I_CQ·R_ac (cutoff), limit_down = (V_CEQ − V_CE,sat)·R_ac/r_line (saturation);
//!   equal when I_CQ·r_line = V_CEQ − V_CE,sat.
//! - emitter follower, R_E,ac = R_E ∥ load, r_line = R_C + R_E,ac/α:
//!   limit_down = I_EQ·R_E,ac = I_CQ·R_E,ac/α (cutoff),
//!   limit_up = (V_CEQ − V_CE,sat)·R_E,ac/(α·R_C + R_E,ac) = (V_CEQ − V_CE,sat)·R_E,ac/(α·r_line);
//!   equal when I_CQ·r_line = V_CEQ − V_CE,sat.
//!
//! Both kinds: the swing is centred when the Q point halves the AC load line between
//! saturation (V_CE,sat) and cutoff (V_CEQ + I_CQ·r_line). The divider moves the Q
//! point along the DC load line V_CEQ = V_open − I_CQ·R_DC (R_DC = R_Cth + R_Eth/α);
//! together:
//!
//! ```text
//!     I_CQ = (V_open − V_CE,sat) / (R_DC + r_line)
//! ```
//!
//! With no unbypassed emitter resistor (R_E,ac = 0, r_line = R_AC) and the supply as
//! V_open this is the classic I_CQ = (V_CC − V_CE,sat)/(R_DC + R_AC) (handbook, from
//! memory).
//!
//! A stage with region limits (docs/definitions.md "Region limits": a JFET, a common
//! base, a common emitter with collector feedback) has no such closed form: its swing
//! is centred where the limits `plan` reports meet, limit toward cutoff = limit toward
//! saturation (a JFET: ohmic; docs/definitions.md "Bias"). For a JFET raising R_S
//! lowers I_D, which shrinks the first and widens the second: their ratio falls
//! monotonically in ln R_S. A cascode's upper stage keeps the current its lower stage
//! sets; its divider moves V_CE alone, and with it the limit toward saturation.

use crate::chain::Chain;
use crate::device::Toward;
use crate::evaluate::Evaluation;
use crate::stages::Swing;
use crate::units::{format_si, parse_value, Kind};

/// The collector current that centres the swing (see the module comment):
/// I_CQ = (V_open − V_CE,sat)/(R_DC + r_line).
pub fn centred_i_c(v_open: f64, r_dc: f64, r_line: f64, vce_sat: f64) -> f64 {
    (v_open - vce_sat) / (r_dc + r_line)
}

/// The centred collector current of stage `i` on its own present load lines (NaN for
/// a stage without them: the bias designer refuses passive stages first).
pub fn centred_i_c_of(ev: &Evaluation, i: usize, vce_sat: f64) -> f64 {
    let h = &ev.headroom[i];
    let Some(dc_line) = h.dc_line else {
        return f64::NAN;
    };
    centred_i_c(
        dc_line.v_ce_intercept,
        -1.0 / dc_line.slope,
        h.swing.r_line,
        vce_sat,
    )
}

/// The centring residual of a stage with region limits (see the module comment):
/// (limit toward cutoff − limit toward the other edge of the active region:
/// saturation, a JFET's ohmic edge) / limit toward cutoff. Positive when the current
/// is too high (or V_CE too low for it), NaN when the swing does not meet both edges.
/// The limit toward cutoff, I_C times the output's AC resistance, is the scale: where
/// the current is held (a cascode's upper stage) proposals rank by |limit_up −
/// limit_down|.
pub fn region_balance(swing: &Swing) -> f64 {
    let limit = |edge: fn(Toward) -> bool| {
        if edge(swing.up_toward) {
            swing.limit_up
        } else if edge(swing.down_toward) {
            swing.limit_down
        } else {
            f64::NAN
        }
    };
    let cutoff = limit(|t| t == Toward::Cutoff);
    let other = limit(|t| matches!(t, Toward::Saturation | Toward::Ohmic));
    (cutoff - other) / cutoff
}

/// The names of a stage's Q-point current and voltage in reports: I_C and V_CE, a
/// JFET's I_D and V_DS (`ic=` and `vce=` mean those), an op-amp's pin I_out and V_out
/// (`spread`, `tune`; `bias` refuses op-amp stages).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct QNames {
    pub current: &'static str,
    pub voltage: &'static str,
}

impl QNames {
    pub const BIPOLAR: QNames = QNames {
        current: "I_C",
        voltage: "V_CE",
    };
    pub const JFET: QNames = QNames {
        current: "I_D",
        voltage: "V_DS",
    };
    pub const OPAMP: QNames = QNames {
        current: "I_out",
        voltage: "V_out",
    };

    /// The names for stage `i` of `chain`.
    pub fn of(chain: &Chain, i: usize) -> QNames {
        let device = chain.device_of(i);
        if device.opamp.is_some() {
            QNames::OPAMP
        } else if device.jfet.is_some() {
            QNames::JFET
        } else {
            QNames::BIPOLAR
        }
    }
}

/// The Q point a designer asks for (`--target`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Target {
    /// Equal limits toward cutoff and saturation on the AC load line.
    Centre,
    /// A collector current, A.
    Current(f64),
    /// A collector–emitter voltage, V.
    Vce(f64),
}

impl Target {
    /// `centre` (or `center`), `ic=1mA`, `vce=6V`.
    pub fn parse(text: &str) -> Result<Target, String> {
        let t = text.trim();
        let expected = "expected centre, ic=<current> (e.g. ic=1mA) or vce=<voltage> (e.g. vce=6V)";
        if t.eq_ignore_ascii_case("centre") || t.eq_ignore_ascii_case("center") {
            return Ok(Target::Centre);
        }
        let Some((key, value)) = t.split_once('=') else {
            return Err(format!("--target: found \"{text}\"; {expected}"));
        };
        let (kind, make): (Kind, fn(f64) -> Target) = match key.trim().to_ascii_lowercase().as_str()
        {
            "ic" | "i_c" => (Kind::Current, Target::Current),
            "vce" | "v_ce" => (Kind::Voltage, Target::Vce),
            _ => return Err(format!("--target: found \"{key}\"; {expected}")),
        };
        let x = parse_value(value, kind)
            .map_err(|e| format!("--target {key}: found {}, expected {}", e.found, e.expected))?;
        if x <= 0.0 {
            return Err(format!(
                "--target {key}: found {value}, expected {} above zero",
                kind.unit_name()
            ));
        }
        Ok(make(x))
    }

    pub fn describe(self, n: QNames) -> String {
        match self {
            Target::Centre => "centred swing (equal limits up and down)".into(),
            Target::Current(i) => format!("{} = {}", n.current, format_si(i, "A")),
            Target::Vce(v) => format!("{} = {}", n.voltage, format_si(v, "V")),
        }
    }
}

/// One condition a design meets by moving one resistor. Each residual is a relative
/// error, positive when the collector current is too high.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Condition {
    /// I_C at the centred value of the stage's own load lines.
    Centred,
    /// I_C at this value.
    Current(f64),
    /// V_CE at this value.
    Vce(f64),
    /// |gain| of the stage at this value.
    Gain(f64),
}

impl Condition {
    /// Relative error of stage `i` in an evaluated chain.
    pub fn residual(self, chain: &Chain, ev: &Evaluation, i: usize, vce_sat: f64) -> f64 {
        let op = &ev.dc[i].op;
        match self {
            // Region limits (a JFET, a common base, collector feedback): the limits
            // themselves; the closed form holds on v1's load lines only.
            Condition::Centred if !chain.stages[i].kind.model().keeps_load_lines() => {
                region_balance(&ev.headroom[i].swing)
            }
            Condition::Centred => op.i_c / centred_i_c_of(ev, i, vce_sat) - 1.0,
            Condition::Current(i_c) => op.i_c / i_c - 1.0,
            Condition::Vce(v_ce) => 1.0 - op.v_ce / v_ce,
            Condition::Gain(g) => ev.ac[i].gain.norm() / g - 1.0,
        }
    }

    pub fn describe(self, n: QNames) -> String {
        match self {
            Condition::Centred => "centred swing".into(),
            Condition::Current(i) => format!("{} = {}", n.current, format_si(i, "A")),
            Condition::Vce(v) => format!("{} = {}", n.voltage, format_si(v, "V")),
            Condition::Gain(g) => format!("|gain| = {g:.3} V/V"),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn targets_parse() {
        assert_eq!(Target::parse("centre"), Ok(Target::Centre));
        assert_eq!(Target::parse("Center"), Ok(Target::Centre));
        assert_eq!(Target::parse("ic=1mA"), Ok(Target::Current(1e-3)));
        assert_eq!(Target::parse("vce = 6 V"), Ok(Target::Vce(6.0)));
        assert!(Target::parse("ic=6V").unwrap_err().contains("current"));
        assert!(Target::parse("gain=3")
            .unwrap_err()
            .contains("expected centre"));
        assert!(Target::parse("ic=-1mA").is_err());
    }
}
