//! Resistor values written the IEC 60062 way, as a designer writes them in a chain
//! file: the letter stands for the decimal point and the multiplier (`4k7`, `120k`,
//! `1M5`, `0R22`), whole ohms below a kilohm as plain numbers (`220`).

use crate::units::{parse_value, Kind};

/// The IEC 60062 letter code of a resistance, to three significant digits (the
/// precision of every IEC 60063 value up to E192).
pub fn resistor_code(r: f64) -> String {
    value_code(r, Kind::Resistance)
}

/// The IEC 60062 letter code of a resistance (`4k7`, `0R22`, whole ohms below a
/// kilohm as plain numbers) or a capacitance (`2u2`, `100n`, `4p7`), to three
/// significant digits.
pub fn value_code(x: f64, kind: Kind) -> String {
    // x = n·10^(e−2) with n a three-digit integer.
    let mut e = x.log10().floor() as i32;
    let mut n = (x / 10f64.powi(e - 2)).round() as i64;
    if n >= 1000 {
        n /= 10;
        e += 1;
    }
    let (shift, letter) = match (kind, e) {
        (Kind::Capacitance, -3..) => (-3, 'm'),
        (Kind::Capacitance, -6..=-4) => (-6, 'u'),
        (Kind::Capacitance, -9..=-7) => (-9, 'n'),
        (Kind::Capacitance, _) => (-12, 'p'),
        (_, 9..) => (9, 'G'),
        (_, 6..=8) => (6, 'M'),
        (_, 3..=5) => (3, 'k'),
        _ => (0, 'R'),
    };
    // Digits before the decimal point: 1 to 3 from one unit of the letter up, none below.
    let int_digits = e - shift + 1;
    let digits = n.to_string();
    let (whole, fraction) = if int_digits <= 0 {
        (
            "0".to_string(),
            "0".repeat((-int_digits) as usize) + &digits,
        )
    } else if int_digits as usize >= digits.len() {
        (
            digits.clone() + &"0".repeat(int_digits as usize - digits.len()),
            String::new(),
        )
    } else {
        let (w, f) = digits.split_at(int_digits as usize);
        (w.to_string(), f.to_string())
    };
    let fraction = fraction.trim_end_matches('0');
    match (fraction.is_empty(), letter) {
        (true, 'R') => whole,
        (true, _) => format!("{whole}{letter}"),
        (false, _) => format!("{whole}{letter}{fraction}"),
    }
}

/// A resistance rounded to what its code says: the value a chain file holding
/// [`resistor_code`]`(r)` is read back as, so that an evaluation with this value and
/// one of the written file agree to the last bit.
pub fn as_written(r: f64) -> f64 {
    as_written_kind(r, Kind::Resistance)
}

/// A resistance or capacitance rounded to what its [`value_code`] says (see
/// [`as_written`]).
pub fn as_written_kind(x: f64, kind: Kind) -> f64 {
    parse_value(&value_code(x, kind), kind).unwrap_or(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iec_60062_codes() {
        // IEC 60062 letter-and-digit codes: R, k, M, G mark the decimal point and the
        // multiplier (e.g. 4k7 = 4.7 kΩ, 0R22 = 0.22 Ω, 1M5 = 1.5 MΩ).
        let cases = [
            (4700.0, "4k7"),
            (120e3, "120k"),
            (1.5e6, "1M5"),
            (0.22, "0R22"),
            (4.7, "4R7"),
            (220.0, "220"),
            (1000.0, "1k"),
            (10e3, "10k"),
            (10.2e3, "10k2"),
            (2210.0, "2k21"),
            (47.5, "47R5"),
            (1e6, "1M"),
            (2.2e9, "2G2"),
            (999.5, "1k"),
        ];
        for (r, code) in cases {
            assert_eq!(resistor_code(r), code, "{r} Ω");
        }
    }

    #[test]
    fn codes_read_back_as_the_same_value() {
        // The chain-file parser (IEC 60062 reading) must return the value written.
        for r in [4700.0, 120e3, 1.5e6, 0.22, 4.7, 220.0, 10.2e3, 2210.0, 47.5] {
            let back = parse_value(&resistor_code(r), Kind::Resistance).unwrap();
            assert!((back - r).abs() <= 1e-12 * r, "{r} → {back}");
            assert_eq!(as_written(back), back, "reading is a fixed point");
        }
    }

    #[test]
    fn capacitor_codes() {
        // IEC 60062 letter-and-digit codes for capacitors: p, n, u (µ), m mark the
        // decimal point and the multiplier (e.g. 2u2 = 2.2 µF, 4n7 = 4.7 nF).
        let cases = [
            (2.2e-6, "2u2"),
            (100e-9, "100n"),
            (4.7e-12, "4p7"),
            (22e-6, "22u"),
            (4.7e-9, "4n7"),
            (470e-6, "470u"),
            (1e-3, "1m"),
        ];
        for (c, code) in cases {
            assert_eq!(value_code(c, Kind::Capacitance), code, "{c} F");
            let back = parse_value(code, Kind::Capacitance).unwrap();
            assert!((back - c).abs() <= 1e-12 * c, "{c} → {back}");
        }
    }
}
