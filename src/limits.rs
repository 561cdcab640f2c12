//! What a chain file may hold: its size, how many stages, loads and devices, and the
//! range of every physical value. Outside these a file is refused with an error that
//! names the field, what was found and the limit (docs/errors.md lists them all).
//!
//! The ranges are wide: they only turn away values no real part has (a 1 TΩ collector
//! resistor, β of 10^7, a 20 kV supply), which would otherwise give numbers without
//! meaning, overflow, or slow the DC solve down.

use crate::device::ZERO_CELSIUS as ZERO_CELSIUS_K;
use crate::units::format_si;

/// Largest chain file read, in bytes (4 MiB). A chain of the largest size allowed
/// below (1000 stages written out in full) takes about 250 kB.
pub const MAX_FILE_BYTES: u64 = 4 * 1024 * 1024;
/// Most stages in a chain. ampchain plans chains of a few stages; 1000 is far beyond
/// any real one and keeps validating and evaluating a chain well under a second
/// (an evaluation grows linearly with the stages, some checks of the ids
/// quadratically).
pub const MAX_STAGES: usize = 1000;
/// Most loads in a chain (each needs a link of its own, like a stage).
pub const MAX_LOADS: usize = 1000;
/// Most named devices.
pub const MAX_DEVICES: usize = 1000;

/// A closed range of values for one field, with the reason for its ends.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Range {
    pub min: f64,
    pub max: f64,
    /// Unit symbol for messages ("" for plain numbers).
    pub unit: &'static str,
    /// Why the range ends where it does, for the message.
    pub why: &'static str,
}

impl Range {
    pub fn contains(&self, x: f64) -> bool {
        x >= self.min && x <= self.max
    }

    /// "between 1 mΩ and 100 GΩ (why)" for messages.
    pub fn describe(&self) -> String {
        format!(
            "between {} and {} ({})",
            self.show(self.min),
            self.show(self.max),
            self.why
        )
    }

    fn show(&self, x: f64) -> String {
        if self.unit == "K" {
            return format!("{:+.0} °C", x - ZERO_CELSIUS_K).replace('-', "−");
        }
        if x != 0.0 && !(1e-15..1e15).contains(&x.abs()) {
            return format!("{x:e} {}", self.unit).trim_end().to_string();
        }
        if self.unit.is_empty() {
            return format!("{x}");
        }
        // format_si gives three digits: "10.0 kV" → "10 kV", "1.00 mΩ" → "1 mΩ".
        let s = format_si(x, self.unit);
        let (number, unit) = s.split_once(' ').unwrap_or((&s, ""));
        let number = if number.contains('.') {
            number.trim_end_matches('0').trim_end_matches('.')
        } else {
            number
        };
        format!("{number} {unit}")
    }
}

/// Any resistor (a zero where the file allows one, e.g. a collector on the supply, is
/// not checked). Below 1 mΩ is a wire; above 100 GΩ is the insulation of the board.
pub const RESISTANCE: Range = Range {
    min: 1e-3,
    max: 100e9,
    unit: "Ω",
    why: "below is a wire, above is the insulation of the board",
};
/// Any capacitor: from a femtofarad to 10 F (the largest electrolytics and
/// double-layer capacitors).
pub const CAPACITANCE: Range = Range {
    min: 1e-15,
    max: 10.0,
    unit: "F",
    why: "no capacitor in a signal chain is smaller or larger",
};
/// The supply: up to 1 kV (small-signal transistors and carbon resistors end far
/// below; the hazard warning starts at 60 V).
pub const SUPPLY: Range = Range {
    min: 1e-3,
    max: 1e3,
    unit: "V",
    why: "a small-signal chain runs from millivolts to at most hundreds of volts",
};
/// β from 1 to 100 000: small-signal transistors have about 50 to 1000, super-β and
/// Darlington pairs reach tens of thousands (from memory).
pub const BETA: Range = Range {
    min: 1.0,
    max: 1e5,
    unit: "",
    why: "transistors, Darlington pairs included, have β from a few to tens of thousands",
};
/// Reverse β (Ebers–Moll): silicon NPNs have about 0.1 to 10 (from memory).
pub const BETA_REVERSE: Range = Range {
    min: 1e-3,
    max: 1e5,
    unit: "",
    why: "reverse β of real transistors is of order 1",
};
/// Saturation current I_S: about 1e-16 to 1e-12 A for small-signal silicon, larger
/// for power devices (from memory); the range leaves decades on both sides.
pub const SATURATION_CURRENT: Range = Range {
    min: 1e-24,
    max: 1e-6,
    unit: "A",
    why: "silicon transistors have I_S of about 1e-16 to 1e-12 A",
};
/// Early voltage: tens to hundreds of volts for real devices.
pub const EARLY_VOLTAGE: Range = Range {
    min: 1.0,
    max: 1e4,
    unit: "V",
    why: "real transistors have V_A of tens to hundreds of volts; leave it out for none",
};
/// An op-amp's open-loop gain A_0: general-purpose parts have 80 to 140 dB (from
/// memory); 1 (a buffer's open loop) to 1e9 (180 dB) leaves room on both sides.
pub const OPEN_LOOP_GAIN: Range = Range {
    min: 1.0,
    max: 1e9,
    unit: "",
    why: "op-amps have open-loop gains of about 80 to 140 dB",
};
/// An op-amp's gain–bandwidth product: from about 10 kHz (micropower parts) to some
/// GHz (from memory).
pub const GAIN_BANDWIDTH: Range = Range {
    min: 1e3,
    max: 1e11,
    unit: "Hz",
    why: "op-amps have gain-bandwidth products from about 10 kHz to a few GHz",
};
/// How near an op-amp's output comes to a rail: 0 (rail to rail) to some volts.
pub const SWING_MARGIN: Range = Range {
    min: 0.0,
    max: 100.0,
    unit: "V",
    why: "an output stops between 0 (rail to rail) and a few volts from its rails",
};
/// A JFET's I_DSS: about 0.5 to 50 mA for small-signal parts, amperes for power
/// parts (from memory); the range leaves decades on both sides.
pub const I_DSS: Range = Range {
    min: 1e-6,
    max: 10.0,
    unit: "A",
    why: "JFETs have I_DSS of about 0.5 to 50 mA (small-signal) up to amperes",
};
/// A JFET's |V_P|: about 0.3 to 10 V (from memory).
pub const PINCH_OFF_VOLTAGE: Range = Range {
    min: 0.01,
    max: 100.0,
    unit: "V",
    why: "JFETs pinch off at about 0.3 to 10 V in magnitude",
};
/// V_CE at saturation.
pub const VCE_SAT: Range = Range {
    min: 0.0,
    max: 10.0,
    unit: "V",
    why: "saturated transistors have V_CE of tenths of a volt",
};
/// Power ratings (resistors and transistors).
pub const POWER: Range = Range {
    min: 1e-6,
    max: 1e4,
    unit: "W",
    why: "parts are rated from microwatts to kilowatts",
};
/// Temperature: −100 °C to +200 °C (silicon junctions stop working above about
/// 200 °C; the model has no cryogenic effects).
pub const TEMPERATURE: Range = Range {
    min: ZERO_CELSIUS_K - 100.0,
    max: ZERO_CELSIUS_K + 200.0,
    unit: "K",
    why: "silicon stops working as a transistor above about 200 °C; the model knows no cryogenic effects",
};
/// The planned input level (EMF, rms): 1 nV to 1 kV. Below 1 nV a signal lies under
/// the thermal noise of any source (a 50 Ω source gives about 0.9 nV in 1 Hz at room
/// temperature, from 4kTR), and far smaller levels (10^-320 V) leave the range of the
/// arithmetic in dB; above 1 kV no small-signal chain runs.
pub const LEVEL: Range = Range {
    min: 1e-9,
    max: 1e3,
    unit: "V rms",
    why: "below, a signal drowns in the noise of any source; above, no small-signal chain runs",
};

/// A device's transition frequency f_T: power transistors have a few MHz, RF and
/// SiGe transistors hundreds of GHz (from memory); the range leaves a decade or more
/// on both sides.
pub const TRANSITION_FREQUENCY: Range = Range {
    min: 1e5,
    max: 1e12,
    unit: "Hz",
    why: "bipolar transistors have f_T from a few MHz to hundreds of GHz",
};
/// A device's base-current flicker corner f_c: bipolar transistors have corners from
/// below 1 Hz to some kHz (from memory); 0 is none, 1 MHz leaves wide room above.
pub const FLICKER_CORNER: Range = Range {
    min: 0.0,
    max: 1e6,
    unit: "Hz",
    why: "bipolar flicker corners lie from below 1 Hz to some kHz",
};
/// A frequency asked for on the command line (`response --from/--to`, `plan --at`,
/// `spread --at`): below 1 mHz a chain is at DC, above 100 GHz the small-signal model
/// (lumped hybrid-π) means nothing; this also keeps a sweep's grid finite.
pub const FREQUENCY: Range = Range {
    min: 1e-3,
    max: 1e11,
    unit: "Hz",
    why: "below, a chain is at DC; above, a lumped small-signal model means nothing",
};
/// Most points of a frequency sweep, per decade (a guard against a typo such as
/// `--per-decade 1000000`).
pub const MAX_PER_DECADE: usize = 10_000;
/// Most values a `response` report may hold: points × (stages + loads). Measured
/// peak memory near the cap (a 99-stage chain, 9941 frequencies, 994 100 values):
/// 290 MB for the table, 136 MB for JSON, 92 MB for CSV, well under 1 GB.
pub const MAX_RESPONSE_VALUES: usize = 1_000_000;
/// Most worker threads of `spread` (the report does not depend on the count; more
/// threads than cores only add switching).
pub const MAX_THREADS: usize = 256;
/// Largest `bias --stiffness` (divider current over base current): at 100 a divider
/// draws about as much as the collector of a β = 100 stage; 10 is common practice.
pub const MAX_STIFFNESS: f64 = 100.0;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ranges_read_well() {
        assert_eq!(
            RESISTANCE.describe(),
            "between 1 mΩ and 100 GΩ (below is a wire, above is the insulation of the board)"
        );
        assert!(BETA.contains(250.0) && !BETA.contains(1e7));
        assert!(RESISTANCE.contains(4.7e3) && !RESISTANCE.contains(1e12));
        assert_eq!(
            LEVEL.describe(),
            "between 1 nV rms and 1 kV rms (below, a signal drowns in the noise of any source; above, no small-signal chain runs)"
        );
        assert!(!LEVEL.contains(1e-320) && LEVEL.contains(1e-9));
    }
}
