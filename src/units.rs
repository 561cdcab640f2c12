//! Values with SI prefixes and units, and signal levels.
//!
//! Accepted forms (all in one string): `"4k7"` (IEC 60062 letter-and-digit code: the
//! prefix letter stands in for the decimal point), `"4.7k"`, `"4.7 kΩ"`, `"100n"`,
//! `"100 nF"`, `"2u2"`, `"0.1uF"`, `"1e3"`; `u`, `µ` (micro sign) and `μ` (Greek mu)
//! alike. A unit that does not fit the field is an error, and so is a second
//! multiplier after a letter code or an exponent (`"8k2k"`, `"1e3k"`). Plain JSON numbers are SI
//! base units and are handled by the caller.

use std::fmt;

/// The physical kind a field expects; decides which unit symbols are accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Resistance,
    Capacitance,
    Voltage,
    Current,
    Frequency,
    Power,
    Temperature,
    /// A noise voltage density (V/√Hz).
    VoltageDensity,
    /// A noise current density (A/√Hz).
    CurrentDensity,
    /// A slew rate (V/s; `"V/µs"` too).
    SlewRate,
}

impl Kind {
    /// Unit spellings accepted for this kind (exact match after the prefix).
    fn units(self) -> &'static [&'static str] {
        match self {
            Kind::Resistance => &["Ω", "\u{2126}", "ohm", "ohms", "Ohm", "Ohms", "R"],
            Kind::Capacitance => &["F"],
            Kind::Voltage => &["V"],
            Kind::Current => &["A"],
            Kind::Frequency => &["Hz"],
            Kind::Power => &["W"],
            Kind::Temperature => &["K", "C", "°C", "degC"],
            Kind::VoltageDensity => &["V/rtHz", "V/√Hz", "V/sqrtHz"],
            Kind::CurrentDensity => &["A/rtHz", "A/√Hz", "A/sqrtHz"],
            Kind::SlewRate => &["V/s", "V/us", "V/µs", "V/μs"],
        }
    }

    /// The factor of a unit spelling into SI base units: 1 except a slew rate per
    /// microsecond (`"V/µs"`, the datasheets' unit), 1e6.
    fn unit_scale(self, unit: &str) -> Option<f64> {
        if !self.units().contains(&unit) {
            return None;
        }
        Some(if self == Kind::SlewRate && unit != "V/s" {
            1e6
        } else {
            1.0
        })
    }

    /// The unit's symbol as printed (Ω, F, V, A, Hz, W, K).
    pub fn symbol(self) -> &'static str {
        self.units()[0]
    }

    /// The unit name used in messages.
    pub fn unit_name(self) -> &'static str {
        match self {
            Kind::Resistance => "a resistance in Ω",
            Kind::Capacitance => "a capacitance in F",
            Kind::Voltage => "a voltage in V",
            Kind::Current => "a current in A",
            Kind::Frequency => "a frequency in Hz",
            Kind::Power => "a power in W",
            Kind::Temperature => "a temperature in °C or K",
            Kind::VoltageDensity => "a noise density in V/√Hz (such as \"4 nV/rtHz\")",
            Kind::CurrentDensity => "a noise density in A/√Hz (such as \"0.5 pA/rtHz\")",
            Kind::SlewRate => "a slew rate in V/s or V/µs (such as \"13 V/us\")",
        }
    }

    /// The unit name with examples of this kind, for a value that does not read
    /// (the noise densities and the slew rate name theirs already).
    pub fn with_examples(self) -> String {
        let examples = match self {
            Kind::Resistance => "\"4k7\", \"4.7 kΩ\" or \"100R\"",
            Kind::Capacitance => "\"100n\", \"4u7\" or \"100 nF\"",
            Kind::Voltage => "\"12 V\", \"-15 V\" or \"200 mV\"",
            Kind::Current => "\"1.2 mA\", \"500u\" or \"2 A\"",
            Kind::Frequency => "\"1k\", \"20 Hz\" or \"3 MHz\"",
            Kind::Power => "\"250 mW\" or \"1 W\"",
            Kind::Temperature => "\"25 C\" or \"300 K\"",
            Kind::VoltageDensity | Kind::CurrentDensity | Kind::SlewRate => {
                return self.unit_name().into()
            }
        };
        format!("{} such as {examples}", self.unit_name())
    }

    /// Every kind, for callers that try them all.
    pub const ALL: [Kind; 10] = [
        Kind::Resistance,
        Kind::Capacitance,
        Kind::Voltage,
        Kind::Current,
        Kind::Frequency,
        Kind::Power,
        Kind::Temperature,
        Kind::VoltageDensity,
        Kind::CurrentDensity,
        Kind::SlewRate,
    ];
}

/// What went wrong with one value; the chain-file layer adds where it was.
#[derive(Debug, Clone, PartialEq)]
pub struct ValueError {
    pub found: String,
    pub expected: String,
}

impl fmt::Display for ValueError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "found {}, expected {}", self.found, self.expected)
    }
}

impl std::error::Error for ValueError {}

fn err(found: impl Into<String>, expected: impl Into<String>) -> ValueError {
    ValueError {
        found: found.into(),
        expected: expected.into(),
    }
}

/// SI prefix multiplier for one character, if it is a prefix.
/// `K` is accepted as kilo (common on resistor markings) except where kelvin is meant.
fn prefix(c: char, kind: Kind) -> Option<f64> {
    Some(match c {
        'f' => 1e-15,
        'p' => 1e-12,
        'n' => 1e-9,
        'u' | 'µ' | 'μ' => 1e-6,
        'm' => 1e-3,
        'k' => 1e3,
        'K' if kind != Kind::Temperature => 1e3,
        'M' => 1e6,
        'G' => 1e9,
        'T' => 1e12,
        _ => return None,
    })
}

/// Split the longest leading decimal number (`-1.5e-3`) from the rest.
fn split_number(s: &str) -> Option<(f64, &str)> {
    let b = s.as_bytes();
    let mut i = 0;
    if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
        i += 1;
    }
    let digits_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let mut n_digits = i - digits_start;
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let frac_start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        n_digits += i - frac_start;
    }
    if n_digits == 0 {
        return None;
    }
    // An exponent only when followed by digits: "1e3" yes, "1E" (no digits) no.
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        let mut j = i + 1;
        if j < b.len() && (b[j] == b'+' || b[j] == b'-') {
            j += 1;
        }
        let exp_start = j;
        while j < b.len() && b[j].is_ascii_digit() {
            j += 1;
        }
        if j > exp_start {
            i = j;
        }
    }
    let value: f64 = s[..i].parse().ok()?;
    Some((value, &s[i..]))
}

/// IEC 60062 letter-and-digit code: `4k7`, `2u2`, `4R7`, `1M5`, `0R22`, with one
/// optional sign (`-3k3` for a voltage or a level; `"--8k2"` is no code).
fn split_letter_code(s: &str, kind: Kind) -> Option<(f64, &str)> {
    let (sign, s) = match s.strip_prefix('-') {
        Some(rest) => (-1.0, rest),
        None => (1.0, s.strip_prefix('+').unwrap_or(s)),
    };
    let int_end = s.find(|c: char| !c.is_ascii_digit())?;
    if int_end == 0 {
        return None;
    }
    let letter = s[int_end..].chars().next()?;
    let mult = if letter == 'R' && kind == Kind::Resistance {
        1.0
    } else {
        prefix(letter, kind)?
    };
    let rest = &s[int_end + letter.len_utf8()..];
    let frac_len = rest
        .find(|c: char| !c.is_ascii_digit())
        .unwrap_or(rest.len());
    if frac_len == 0 {
        return None;
    }
    let text = format!("{}.{}", &s[..int_end], &rest[..frac_len]);
    let value: f64 = text.parse().ok()?;
    Some((sign * value * mult, &rest[frac_len..]))
}

/// A second multiplier after a number that already has one, refused as a typo: after
/// an IEC 60062 letter code (its letter stands for the decimal point and the
/// multiplier) another prefix or `R` (`"8k2k"`, `"4R7k"`, `"4k7R"`); after an exponent
/// an SI prefix (`"1e3k"`). A unit stays legal (`"4k7Ω"`, `"4u7F"`, `"1e3 V"`).
/// `number` is the text before `suffix`; gives what was found after the value as
/// written and the one-multiplier forms to suggest.
fn two_multipliers(number: &str, suffix: &str, kind: Kind) -> Option<(String, String)> {
    let number = number.trim();
    let second = suffix.chars().next()?;
    let is_prefix = kind.unit_scale(suffix).is_none() && prefix(second, kind).is_some();
    // The letter of a letter code: the first character that is no digit or sign.
    let letter = number
        .chars()
        .find(|c| !(c.is_ascii_digit() || *c == '-' || *c == '+' || *c == '.'))?;
    let one_multiplier = match letter {
        'e' | 'E' if is_prefix => {
            let mantissa = &number[..number.find(letter)?];
            format!("\"{number}\" or \"{mantissa}{second}\"")
        }
        'e' | 'E' => return None,
        _ if is_prefix || (second == 'R' && kind == Kind::Resistance) => {
            let decimal = number.replacen(letter, ".", 1);
            let letter = if letter == 'R' {
                String::new()
            } else {
                letter.to_string()
            };
            format!("\"{number}\" or \"{decimal}{letter}\"")
        }
        _ => return None,
    };
    Some((
        format!("(two multipliers: \"{number}\" and \"{second}\")"),
        format!("with one multiplier, such as {one_multiplier}"),
    ))
}

/// A multiplier before `R` as the unit of a resistance (`"4.7kR"`, `"470 mR"`), refused
/// as ambiguous: in the IEC 60062 letter code R marks the decimal point of a value in
/// ohms (`"4R7"` is 4.7 Ω), so after a multiplier it is no plain unit. `number` is the
/// text before `suffix`; gives what was found after the value as written and the
/// spellings to suggest.
fn multiplier_and_r(number: &str, suffix: &str, kind: Kind) -> Option<(String, String)> {
    let p = suffix.chars().next()?;
    if kind != Kind::Resistance || prefix(p, kind).is_none() {
        return None;
    }
    if suffix[p.len_utf8()..].trim_start() != "R" {
        return None;
    }
    let number = number.trim();
    let mut forms = vec![format!("\"{number}{p}\"")];
    // The letter code of a plain decimal: "4.7" with "k" is "4k7".
    let digits = |t: &str| !t.is_empty() && t.bytes().all(|b| b.is_ascii_digit());
    if let Some((whole, fraction)) = number.split_once('.') {
        if digits(whole.trim_start_matches(['+', '-'])) && digits(fraction) {
            forms.push(format!("\"{whole}{p}{fraction}\""));
        }
    }
    let last = format!("\"{number} {p}Ω\"");
    Some((
        format!("(the multiplier \"{p}\" before R, which IEC 60062 reads as a decimal point in ohms, as in \"4R7\")"),
        format!("{} such as {} or {last}", kind.unit_name(), forms.join(", ")),
    ))
}

/// Which kind a unit suffix (with optional prefix) belongs to, for error messages.
fn unit_kind_of(suffix: &str) -> Option<Kind> {
    Kind::ALL.into_iter().find(|&k| {
        k.units().contains(&suffix)
            || suffix
                .chars()
                .next()
                .filter(|&c| prefix(c, k).is_some())
                .map(|c| k.units().contains(&suffix[c.len_utf8()..].trim_start()))
                .unwrap_or(false)
    })
}

/// Multiplier of a suffix such as `""`, `"k"`, `"kΩ"`, `"n F"`, `"mV"` for the given kind.
fn suffix_multiplier(suffix: &str, kind: Kind) -> Option<f64> {
    let suffix = suffix.trim();
    if suffix.is_empty() {
        return Some(1.0);
    }
    if let Some(scale) = kind.unit_scale(suffix) {
        return Some(scale);
    }
    let c = suffix.chars().next()?;
    let mult = prefix(c, kind)?;
    let rest = suffix[c.len_utf8()..].trim_start();
    if rest.is_empty() {
        Some(mult)
    } else {
        kind.unit_scale(rest).map(|scale| mult * scale)
    }
}

/// The typographic characters a value may be written with, as the ASCII the parser
/// reads: U+2212 MINUS SIGN (which ampchain itself prints) as `-`, U+212A KELVIN SIGN
/// as `K`, U+2126 OHM SIGN kept (a unit of its own), and the no-break and narrow
/// no-break spaces U+00A0, U+202F (between number and unit) as a space.
fn typographic_to_ascii(text: &str) -> std::borrow::Cow<'_, str> {
    if text.is_ascii() {
        return std::borrow::Cow::Borrowed(text);
    }
    std::borrow::Cow::Owned(
        text.chars()
            .map(|c| match c {
                '\u{2212}' => '-',
                '\u{212a}' => 'K',
                '\u{a0}' | '\u{202f}' | '\u{2009}' => ' ',
                c => c,
            })
            .collect(),
    )
}

/// Parse a value string for a field of the given kind, into SI base units.
/// Temperatures come back in kelvin (`"25 C"` → 298.15).
pub fn parse_value(text: &str, kind: Kind) -> Result<f64, ValueError> {
    let normal = typographic_to_ascii(text);
    let s = normal.trim();
    // Invisible and non-ASCII characters escaped, so the message shows which is wrong.
    let quoted = || crate::text::quote_value(text);
    if s.is_empty() {
        return Err(err("an empty string", kind.unit_name()));
    }
    let (number, suffix) = match split_letter_code(s, kind) {
        Some((v, rest)) => (v, rest),
        None => split_number(s).ok_or_else(|| err(quoted(), kind.with_examples()))?,
    };
    let suffix = suffix.trim();
    let number_text = &s[..s.len() - suffix.len()];
    if let Some((found, one)) = two_multipliers(number_text, suffix, kind) {
        return Err(err(
            format!("{} {found}", quoted()),
            format!("{} {one}", kind.unit_name()),
        ));
    }
    if let Some((found, forms)) = multiplier_and_r(number_text, suffix, kind) {
        return Err(err(format!("{} {found}", quoted()), forms));
    }
    let mult = match suffix_multiplier(suffix, kind) {
        Some(m) => m,
        None => {
            return Err(match unit_kind_of(suffix) {
                Some(other) if other != kind => err(
                    format!("{} ({})", quoted(), other.unit_name()),
                    kind.unit_name(),
                ),
                _ => err(
                    format!(
                        "{} (unknown unit or prefix {})",
                        quoted(),
                        crate::text::quote_value(suffix)
                    ),
                    kind.unit_name(),
                ),
            })
        }
    };
    let mut value = number * mult;
    if kind == Kind::Temperature {
        if suffix.is_empty() {
            return Err(err(
                format!("{} (no unit)", quoted()),
                "a temperature with its unit, such as \"25 C\" or \"298.15 K\"",
            ));
        }
        let is_kelvin = suffix.ends_with('K');
        if !is_kelvin {
            value += 273.15; // °C → K
        }
    }
    if !value.is_finite() {
        return Err(err(quoted(), "a finite number"));
    }
    Ok(value)
}

/// 0 dBu: 1 mW into 600 Ω, √0.6 V ≈ 0.7746 V rms.
pub const DBU_REF_VRMS: f64 = 0.774_596_669_241_483_4;
/// 0 dBV: 1 V rms.
pub const DBV_REF_VRMS: f64 = 1.0;

/// A sine level, kept as its rms value in volts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Level {
    pub vrms: f64,
}

impl Level {
    pub fn from_vrms(vrms: f64) -> Self {
        Level { vrms }
    }
    pub fn from_vpeak(vpk: f64) -> Self {
        Level {
            vrms: vpk / std::f64::consts::SQRT_2,
        }
    }
    pub fn vpeak(self) -> f64 {
        self.vrms * std::f64::consts::SQRT_2
    }
    pub fn vpp(self) -> f64 {
        2.0 * self.vpeak()
    }
    pub fn dbu(self) -> f64 {
        20.0 * (self.vrms / DBU_REF_VRMS).log10()
    }
    pub fn dbv(self) -> f64 {
        20.0 * (self.vrms / DBV_REF_VRMS).log10()
    }
}

/// Parse a voltage gain: a plain ratio (`200000`, `"200k"`, `"2e5 V/V"`) or decibels
/// (`"106 dB"`: 10^(dB/20), the voltage-ratio decibel).
pub fn parse_gain(text: &str) -> Result<f64, ValueError> {
    let normal = typographic_to_ascii(text);
    let s = normal.trim();
    let expected = "a voltage gain as a ratio or in decibels, such as 200000, \"200k\", \"2e5 V/V\" or \"106 dB\"";
    let Some((number, suffix)) = split_letter_code(s, Kind::Voltage).or_else(|| split_number(s))
    else {
        return Err(err(crate::text::quote_value(text), expected));
    };
    let number_text = &s[..s.len() - suffix.len()];
    let suffix = suffix.trim();
    let ratio = if let Some(db) = suffix.strip_suffix("dB") {
        if !db.trim().is_empty() {
            return Err(err(crate::text::quote_value(text), expected));
        }
        10f64.powf(number / 20.0)
    } else {
        let unit = suffix.strip_suffix("V/V").unwrap_or(suffix).trim();
        if let Some((found, one)) = two_multipliers(number_text, unit, Kind::Voltage) {
            return Err(err(
                format!("{} {found}", crate::text::quote_value(text)),
                format!("a voltage gain {one}"),
            ));
        }
        match unit.chars().next() {
            None => number,
            Some(c) if unit.len() == c.len_utf8() => match prefix(c, Kind::Voltage) {
                Some(m) => number * m,
                None => return Err(err(crate::text::quote_value(text), expected)),
            },
            Some(_) => return Err(err(crate::text::quote_value(text), expected)),
        }
    };
    if !ratio.is_finite() {
        return Err(err(crate::text::quote_value(text), "a finite gain"));
    }
    Ok(ratio)
}

/// Parse a sine level: `"50 mV rms"`, `"0.2 Vpk"`, `"1 Vpp"`, `"-20 dBu"`, `"-10 dBV"`.
pub fn parse_level(text: &str) -> Result<Level, ValueError> {
    let normal = typographic_to_ascii(text);
    let s = normal.trim();
    let expected =
        "a sine level such as \"50 mV rms\", \"0.2 Vpk\", \"1 Vpp\", \"-20 dBu\" or \"-10 dBV\"";
    let bad = || err(crate::text::quote_value(text), expected);
    let lower = s.to_ascii_lowercase();
    for (tag, reference) in [("dbu", DBU_REF_VRMS), ("dbv", DBV_REF_VRMS)] {
        if let Some(num) = lower.strip_suffix(tag) {
            let db: f64 = num.trim().parse().map_err(|_| bad())?;
            if !db.is_finite() {
                return Err(bad());
            }
            let vrms = reference * 10f64.powf(db / 20.0);
            if !vrms.is_finite() {
                return Err(err(
                    format!("{} (beyond any voltage)", crate::text::quote_value(text)),
                    expected,
                ));
            }
            return Ok(Level { vrms });
        }
    }
    // Volts with a waveform measure: rms, pk / peak / p, pp / p-p.
    let measures: [(&str, f64); 7] = [
        ("rms", 1.0),
        ("pp", 2.0 * std::f64::consts::SQRT_2),
        ("p-p", 2.0 * std::f64::consts::SQRT_2),
        ("peak", std::f64::consts::SQRT_2),
        ("pk", std::f64::consts::SQRT_2),
        ("p", std::f64::consts::SQRT_2),
        ("", 1.0),
    ];
    for (tag, rms_to_measure) in measures {
        let Some(volts) = s.strip_suffix(tag) else {
            continue;
        };
        let volts = volts.trim_end();
        if tag.is_empty() && !(volts.ends_with('V') || split_number(volts).is_some()) {
            return Err(bad());
        }
        let v = parse_value(volts, Kind::Voltage).map_err(|_| bad())?;
        if v < 0.0 {
            return Err(err(
                format!("{} (negative)", crate::text::quote_value(text)),
                expected,
            ));
        }
        return Ok(Level {
            vrms: v / rms_to_measure,
        });
    }
    Err(bad())
}

/// Format a value with an SI prefix and unit symbol, three significant digits: `4.70 kΩ`.
pub fn format_si(value: f64, unit: &str) -> String {
    if !value.is_finite() {
        return if value.is_nan() {
            "—".into()
        } else {
            format!("∞ {unit}")
        };
    }
    if value == 0.0 {
        return format!("0 {unit}");
    }
    const PREFIXES: [(f64, &str); 9] = [
        (1e12, "T"),
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
    ];
    let mag = value.abs();
    // Beyond the prefixes (a level behind thousands of dB of gain): powers of ten,
    // never hundreds of digits or a value shown as 0.
    if !(1e-15 * 0.999_5..999.5e12).contains(&mag) {
        return format!("{value:.2e} {unit}");
    }
    let (scale, p) = PREFIXES
        .iter()
        .copied()
        .find(|(scale, _)| mag >= *scale * 0.999_5)
        .unwrap_or((1e-15, "f"));
    let scaled = value / scale;
    let digits = if scaled.abs() >= 99.95 {
        0
    } else if scaled.abs() >= 9.995 {
        1
    } else {
        2
    };
    format!("{scaled:.digits$} {p}{unit}")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
    }

    #[test]
    fn iec_60062_letter_codes() {
        // IEC 60062 marking codes: the letter stands for the decimal point and the multiplier.
        assert!(close(parse_value("4k7", Kind::Resistance).unwrap(), 4700.0));
        assert!(close(parse_value("4R7", Kind::Resistance).unwrap(), 4.7));
        assert!(close(parse_value("0R22", Kind::Resistance).unwrap(), 0.22));
        assert!(close(parse_value("1M5", Kind::Resistance).unwrap(), 1.5e6));
        // With a sign, as a voltage may need: "-3k3" is −3.3 kV, "-1m5" −1.5 mV.
        assert!(close(parse_value("-3k3", Kind::Voltage).unwrap(), -3300.0));
        assert!(close(parse_value("-1m5", Kind::Voltage).unwrap(), -1.5e-3));
        assert!(close(
            parse_value("+2u2", Kind::Capacitance).unwrap(),
            2.2e-6
        ));
        assert!(close(
            parse_value("2u2", Kind::Capacitance).unwrap(),
            2.2e-6
        ));
        assert!(close(
            parse_value("4n7", Kind::Capacitance).unwrap(),
            4.7e-9
        ));
        assert!(close(
            parse_value("2µ2F", Kind::Capacitance).unwrap(),
            2.2e-6
        ));
    }

    #[test]
    fn prefixes_and_units() {
        assert!(close(
            parse_value("4.7k", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(
            parse_value("4.7 kΩ", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(
            parse_value("4.7 kohm", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(parse_value("100R", Kind::Resistance).unwrap(), 100.0));
        assert!(close(
            parse_value("100n", Kind::Capacitance).unwrap(),
            100e-9
        ));
        assert!(close(
            parse_value("100 nF", Kind::Capacitance).unwrap(),
            100e-9
        ));
        assert!(close(
            parse_value("0.1uF", Kind::Capacitance).unwrap(),
            0.1e-6
        ));
        assert!(close(
            parse_value("0.1 µF", Kind::Capacitance).unwrap(),
            0.1e-6
        ));
        assert!(close(
            parse_value("0.1 μF", Kind::Capacitance).unwrap(),
            0.1e-6
        ));
        assert!(close(parse_value("10f", Kind::Current).unwrap(), 10e-15));
        assert!(close(parse_value("15 V", Kind::Voltage).unwrap(), 15.0));
        assert!(close(parse_value("200 mV", Kind::Voltage).unwrap(), 0.2));
        assert!(close(parse_value("1e3", Kind::Resistance).unwrap(), 1000.0));
        assert!(close(
            parse_value("2.5e-3 A", Kind::Current).unwrap(),
            2.5e-3
        ));
        assert!(close(
            parse_value("1 kHz", Kind::Frequency).unwrap(),
            1000.0
        ));
        assert!(close(parse_value("250 mW", Kind::Power).unwrap(), 0.25));
    }

    #[test]
    fn temperatures_in_kelvin() {
        // 0 °C = 273.15 K by definition of the Celsius scale (SI Brochure, 9th ed.).
        assert!(close(
            parse_value("25 C", Kind::Temperature).unwrap(),
            298.15
        ));
        assert!(close(
            parse_value("25 °C", Kind::Temperature).unwrap(),
            298.15
        ));
        assert!(close(
            parse_value("300 K", Kind::Temperature).unwrap(),
            300.0
        ));
        assert!(close(
            parse_value("-40 C", Kind::Temperature).unwrap(),
            233.15
        ));
    }

    #[test]
    fn wrong_units_are_named() {
        let e = parse_value("10uF", Kind::Resistance).unwrap_err();
        assert!(e.found.contains("capacitance"), "{e}");
        assert!(e.expected.contains("resistance"), "{e}");
        let e = parse_value("4k7 Ω", Kind::Capacitance).unwrap_err();
        assert!(e.expected.contains("capacitance"), "{e}");
        assert!(e.found.contains("resistance"), "{e}");
        assert!(parse_value("ten", Kind::Resistance).is_err());
        assert!(parse_value("", Kind::Resistance).is_err());
        assert!(parse_value("NaN", Kind::Resistance).is_err());
        assert!(parse_value("4.7 kQ", Kind::Resistance).is_err());
        assert!(parse_value("1e999", Kind::Resistance).is_err());
    }

    #[test]
    fn a_letter_code_takes_one_sign() {
        // A number has at most one sign (common practice, no source): two signs are a
        // typo, never a value ("--8k2" once read as 8.2 kΩ, "--0k015" as +15 V).
        for text in ["--8k2", "++2u2", "+-8k2", "-+8k2", "--0k015"] {
            assert!(parse_value(text, Kind::Voltage).is_err(), "{text}");
        }
        assert!(parse_value("--8k2", Kind::Resistance).is_err());
        assert_eq!(parse_value("-3k3", Kind::Voltage).unwrap(), -3300.0);
        assert_eq!(parse_value("+4k7", Kind::Resistance).unwrap(), 4700.0);
        assert_eq!(parse_value("-0k015", Kind::Voltage).unwrap(), -15.0);
    }

    #[test]
    fn two_multipliers_are_refused() {
        // IEC 60062: the letter of "8k2" stands for the decimal point and the
        // multiplier, so a prefix or R after it is a second multiplier: a typo.
        for (text, kind, found, one) in [
            (
                "8k2k",
                Kind::Resistance,
                "\"8k2\" and \"k\"",
                "\"8k2\" or \"8.2k\"",
            ),
            (
                "1k1k",
                Kind::Resistance,
                "\"1k1\" and \"k\"",
                "\"1k1\" or \"1.1k\"",
            ),
            (
                "2M2k",
                Kind::Resistance,
                "\"2M2\" and \"k\"",
                "\"2M2\" or \"2.2M\"",
            ),
            (
                "4R7k",
                Kind::Resistance,
                "\"4R7\" and \"k\"",
                "\"4R7\" or \"4.7\"",
            ),
            (
                "4k7R",
                Kind::Resistance,
                "\"4k7\" and \"R\"",
                "\"4k7\" or \"4.7k\"",
            ),
            (
                "4k7 kΩ",
                Kind::Resistance,
                "\"4k7\" and \"k\"",
                "\"4k7\" or \"4.7k\"",
            ),
            (
                "4u7u",
                Kind::Capacitance,
                "\"4u7\" and \"u\"",
                "\"4u7\" or \"4.7u\"",
            ),
            (
                "-3k3m",
                Kind::Voltage,
                "\"-3k3\" and \"m\"",
                "\"-3k3\" or \"-3.3k\"",
            ),
            // An exponent is a multiplier too.
            (
                "1e3k",
                Kind::Resistance,
                "\"1e3\" and \"k\"",
                "\"1e3\" or \"1k\"",
            ),
            (
                "2.2e-3 mA",
                Kind::Current,
                "\"2.2e-3\" and \"m\"",
                "\"2.2e-3\" or \"2.2m\"",
            ),
        ] {
            let e = parse_value(text, kind).unwrap_err();
            assert_eq!(
                e.found,
                format!("\"{text}\" (two multipliers: {found})"),
                "{text}"
            );
            assert_eq!(
                e.expected,
                format!("{} with one multiplier, such as {one}", kind.unit_name()),
                "{text}"
            );
        }
        // A unit after a letter code or an exponent stays legal (IEC 60062 codes with
        // their unit; common practice, no source).
        assert!(close(
            parse_value("4k7Ω", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(
            parse_value("4k7 ohm", Kind::Resistance).unwrap(),
            4700.0
        ));
        assert!(close(
            parse_value("4u7F", Kind::Capacitance).unwrap(),
            4.7e-6
        ));
        assert!(close(parse_value("1m5 V", Kind::Voltage).unwrap(), 1.5e-3));
        assert!(close(parse_value("1e3 V", Kind::Voltage).unwrap(), 1e3));
        assert!(close(parse_value("1e3R", Kind::Resistance).unwrap(), 1e3));
        assert!(close(
            parse_value("2k5 K", Kind::Temperature).unwrap(),
            2500.0
        ));
        // Open-loop gains: the same rule; a plain ratio, a code or dB as before.
        assert!(parse_gain("2k2k")
            .unwrap_err()
            .found
            .contains("two multipliers"));
        assert!(parse_gain("2e5k")
            .unwrap_err()
            .found
            .contains("two multipliers"));
        assert!(close(parse_gain("2k2").unwrap(), 2200.0));
        assert!(close(parse_gain("2e5 V/V").unwrap(), 2e5));
        assert!(close(parse_gain("200k").unwrap(), 2e5));
    }

    #[test]
    fn a_multiplier_before_r_is_refused() {
        // IEC 60062: R marks the decimal point of a value in ohms ("4R7" = 4.7 Ω), so
        // "4.7kR" holds a multiplier and a decimal marker after it: refused as
        // ambiguous, as "4k7R" is, with the spellings that mean 4.7 kΩ.
        for (text, found, forms) in [
            ("4.7kR", "\"k\"", "\"4.7k\", \"4k7\" or \"4.7 kΩ\""),
            ("4.7 kR", "\"k\"", "\"4.7k\", \"4k7\" or \"4.7 kΩ\""),
            ("470mR", "\"m\"", "\"470m\" or \"470 mΩ\""),
            ("1.5M R", "\"M\"", "\"1.5M\", \"1M5\" or \"1.5 MΩ\""),
            ("2.2KR", "\"K\"", "\"2.2K\", \"2K2\" or \"2.2 KΩ\""),
            ("1e3kR", "", ""),
        ] {
            let e = parse_value(text, Kind::Resistance).unwrap_err();
            if found.is_empty() {
                // An exponent with a prefix is two multipliers first.
                assert!(e.found.contains("two multipliers"), "{text}: {e}");
                continue;
            }
            assert_eq!(
                e.found,
                format!("\"{text}\" (the multiplier {found} before R, which IEC 60062 reads as a decimal point in ohms, as in \"4R7\")"),
                "{text}"
            );
            assert_eq!(
                e.expected,
                format!("a resistance in Ω such as {forms}"),
                "{text}"
            );
        }
        // R alone stays the ohm: as the decimal point, or as the unit of a value
        // without a multiplier (common practice, no source); Ω and ohm with a prefix.
        for (text, ohms) in [
            ("4R7", 4.7),
            ("4.7R", 4.7),
            ("100R", 100.0),
            ("4.7 Ω", 4.7),
            ("4.7 ohm", 4.7),
            ("4.7 kΩ", 4700.0),
            ("4.7 kohm", 4700.0),
            ("4.7k", 4700.0),
            ("4k7", 4700.0),
        ] {
            assert!(
                close(parse_value(text, Kind::Resistance).unwrap(), ohms),
                "{text}"
            );
        }
    }

    #[test]
    fn examples_fit_the_kind() {
        // Each kind's message shows values of that kind (common practice, no source).
        let expected = |text, kind| parse_value(text, kind).unwrap_err().expected;
        assert_eq!(
            expected("NaN", Kind::Voltage),
            "a voltage in V such as \"12 V\", \"-15 V\" or \"200 mV\""
        );
        assert_eq!(
            expected("NaN C", Kind::Temperature),
            "a temperature in °C or K such as \"25 C\" or \"300 K\""
        );
        assert_eq!(
            expected("abc", Kind::Current),
            "a current in A such as \"1.2 mA\", \"500u\" or \"2 A\""
        );
        assert_eq!(
            expected("twenty k", Kind::Resistance),
            "a resistance in Ω such as \"4k7\", \"4.7 kΩ\" or \"100R\""
        );
        for kind in Kind::ALL {
            // Every example given reads as a value of its own kind.
            let text = kind.with_examples();
            for example in text.split('"').skip(1).step_by(2) {
                assert!(parse_value(example, kind).is_ok(), "{kind:?}: {example}");
            }
        }
    }

    #[test]
    fn levels() {
        // dBu reference: 0 dBu = 0.7746 V rms (1 mW in 600 Ω; AES/IEC usage, from memory).
        let l = parse_level("0 dBu").unwrap();
        assert!((l.vrms - 0.7746).abs() < 1e-4);
        let l = parse_level("-20 dBu").unwrap();
        assert!((l.vrms - 0.077_46).abs() < 1e-5);
        // 0 dBV = 1 V rms (definition).
        assert!(close(
            parse_level("-10 dBV").unwrap().vrms,
            10f64.powf(-0.5)
        ));
        assert!(close(parse_level("50 mV rms").unwrap().vrms, 0.05));
        assert!(close(parse_level("50mVrms").unwrap().vrms, 0.05));
        // Sine: peak = √2·rms, peak-to-peak = 2√2·rms (definition of rms of a sine).
        assert!(close(
            parse_level("0.2 Vpk").unwrap().vrms,
            0.2 / std::f64::consts::SQRT_2
        ));
        assert!(close(
            parse_level("1 Vpp").unwrap().vrms,
            0.5 / std::f64::consts::SQRT_2
        ));
        assert!(close(parse_level("0.3 V").unwrap().vrms, 0.3));
        assert!(parse_level("loud").is_err());
        assert!(parse_level("-1 Vrms").is_err());
        assert!(parse_level("1 A rms").is_err());
    }

    #[test]
    fn si_formatting() {
        assert_eq!(format_si(4700.0, "Ω"), "4.70 kΩ");
        assert_eq!(format_si(0.000_62, "A"), "620 µA");
        assert_eq!(format_si(-12.34, "V"), "-12.3 V");
    }
}
