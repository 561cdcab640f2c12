//! Names as a person reads them: what a name in a chain file may hold, how names are
//! shown in messages (invisible and non-ASCII characters escaped, so two names that
//! look the same can be told apart), and what differs between a name that was not
//! found and a known one that looks like it.

/// Why a name (an id, a device or rail name, a title) is refused, if it is.
///
/// Refused: the empty name (except where `allow_empty`), control characters
/// (Unicode category Cc: NUL, tab, newline, ESC, DEL, C1 controls), the
/// noncharacters U+FFFE and U+FFFF (not allowed in XML 1.0, so never in a chart), and
/// the bidirectional overrides, isolates and marks U+202A–U+202E, U+2066–U+2069,
/// U+200E, U+200F and U+061C (they reorder what a terminal shows).
pub fn refuse_name(name: &str, allow_empty: bool) -> Option<String> {
    if name.is_empty() && !allow_empty {
        return Some("an empty name".into());
    }
    let (k, c) = name.chars().enumerate().find(|(_, c)| refused_char(*c))?;
    let what = if c.is_control() {
        "the control character"
    } else if matches!(c, '\u{fffe}' | '\u{ffff}') {
        "the noncharacter"
    } else {
        "the bidirectional control"
    };
    Some(format!(
        "{} holding {what} {} at character {}",
        quote(name),
        code_point(c),
        k + 1
    ))
}

fn refused_char(c: char) -> bool {
    c.is_control()
        || matches!(
            c,
            '\u{fffe}'
                | '\u{ffff}'
                | '\u{202a}'..='\u{202e}'
                | '\u{2066}'..='\u{2069}'
                | '\u{200e}'
                | '\u{200f}'
                | '\u{61c}'
        )
}

/// Longest message text (in characters) [`visible`] keeps: a key or value echoed from
/// a file is cut there (a 100 000-character key would fill the terminal).
const LONGEST_SHOWN: usize = 2000;

/// Text that quotes the file (a reader's message) made safe to print: every
/// character that cannot be seen or that would steer the terminal (controls, ESC,
/// bidirectional controls, format characters) written as `\u{…}`, and the whole cut
/// to [`LONGEST_SHOWN`] characters, so no file can fake or clear lines of a message.
pub fn visible(text: &str) -> String {
    let mut s = String::with_capacity(text.len().min(4 * LONGEST_SHOWN));
    for (k, c) in text.chars().enumerate() {
        if k == LONGEST_SHOWN {
            s.push_str("… (cut)");
            break;
        }
        if invisible(c) || refused_char(c) {
            s.push_str(&format!("\\u{{{:x}}}", c as u32));
        } else {
            s.push(c);
        }
    }
    s
}

/// A chain-file path inside a stage as every error writes it, the stage named by its
/// id: `stages[0].r_collector (stage "gain")`.
pub fn in_stage(path: &str, id: &str) -> String {
    format!("{path} (stage {})", visible(&quote_value(id)))
}

/// A name in double quotes, every character outside printable ASCII (and `"`, `\`)
/// written as `\u{…}`: `"gain\u{200b}"`, `"g\u{430}in"`.
pub fn quote(name: &str) -> String {
    let mut s = String::with_capacity(name.len() + 2);
    s.push('"');
    for c in name.chars() {
        match c {
            '"' => s.push_str("\\\""),
            '\\' => s.push_str("\\\\"),
            ' '..='~' => s.push(c),
            _ => s.push_str(&format!("\\u{{{:x}}}", c as u32)),
        }
    }
    s.push('"');
    s
}

/// A value as written, in double quotes, with only the characters that cannot be
/// seen (controls, format characters such as U+200B, bidirectional controls)
/// written as `\u{…}`: `"4k7 Ω"`, `"8k2\u{200b}"`.
pub fn quote_value(text: &str) -> String {
    let mut s = String::with_capacity(text.len() + 2);
    s.push('"');
    for c in text.chars() {
        if invisible(c) || refused_char(c) {
            s.push_str(&format!("\\u{{{:x}}}", c as u32));
        } else {
            s.push(c);
        }
    }
    s.push('"');
    s
}

/// `U+200B (zero-width space)` for the characters that most often hide in names,
/// `U+0430 (Cyrillic)` by block for lookalike letters, else `U+XXXX`.
pub fn code_point(c: char) -> String {
    let n = c as u32;
    let name = match c {
        '\u{0}' => Some("NUL"),
        '\t' => Some("tab"),
        '\n' => Some("line feed"),
        '\r' => Some("carriage return"),
        '\u{1b}' => Some("escape"),
        '\u{7f}' => Some("delete"),
        '\u{a0}' => Some("no-break space"),
        '\u{ad}' => Some("soft hyphen"),
        '\u{200b}' => Some("zero-width space"),
        '\u{200c}' => Some("zero-width non-joiner"),
        '\u{200d}' => Some("zero-width joiner"),
        '\u{200e}' | '\u{200f}' => Some("direction mark"),
        '\u{2060}' => Some("word joiner"),
        '\u{feff}' => Some("zero-width no-break space, byte-order mark"),
        '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}' => Some("bidirectional control"),
        '\u{0370}'..='\u{03ff}' => Some("Greek"),
        '\u{0400}'..='\u{04ff}' => Some("Cyrillic"),
        '\u{ff01}'..='\u{ff5e}' => Some("fullwidth form"),
        _ => None,
    };
    match name {
        Some(name) => format!("U+{n:04X} ({name})"),
        None => format!("U+{n:04X}"),
    }
}

/// Characters that show as nothing: format characters (Cf) and the like, dropped
/// when comparing how two names look.
fn invisible(c: char) -> bool {
    matches!(c,
        '\u{ad}' | '\u{34f}' | '\u{61c}' | '\u{115f}' | '\u{1160}' | '\u{17b4}' | '\u{17b5}'
        | '\u{180b}'..='\u{180f}' | '\u{200b}'..='\u{200f}' | '\u{202a}'..='\u{202e}'
        | '\u{2060}'..='\u{206f}' | '\u{3164}' | '\u{fe00}'..='\u{fe0f}' | '\u{feff}'
        | '\u{ffa0}')
        || c.is_control()
}

/// The Latin letter a Greek or Cyrillic letter is commonly mistaken for (a few
/// dozen pairs; Unicode TR #39 has the full table), or the character itself.
fn latin_lookalike(c: char) -> char {
    match c {
        'а' => 'a',
        'в' => 'b',
        'с' => 'c',
        'ԁ' => 'd',
        'е' => 'e',
        'һ' => 'h',
        'і' => 'i',
        'ј' => 'j',
        'к' => 'k',
        'ӏ' => 'l',
        'м' => 'm',
        'п' => 'n',
        'о' | 'ο' => 'o',
        'р' | 'ρ' => 'p',
        'ԛ' => 'q',
        'г' => 'r',
        'ѕ' => 's',
        'т' | 'τ' => 't',
        'υ' => 'u',
        'ν' => 'v',
        'ԝ' => 'w',
        'х' | 'χ' => 'x',
        'у' | 'γ' => 'y',
        'А' | 'Α' => 'A',
        'В' | 'Β' => 'B',
        'С' => 'C',
        'Е' | 'Ε' => 'E',
        'Н' | 'Η' => 'H',
        'І' | 'Ι' => 'I',
        'Ј' => 'J',
        'К' | 'Κ' => 'K',
        'М' | 'Μ' => 'M',
        'О' | 'Ο' => 'O',
        'Р' | 'Ρ' => 'P',
        'Ѕ' => 'S',
        'Т' | 'Τ' => 'T',
        'Х' | 'Χ' => 'X',
        'У' | 'Υ' => 'Y',
        'Ζ' => 'Z',
        '\u{ff01}'..='\u{ff5e}' => char::from_u32(c as u32 - 0xfee0).unwrap_or(c),
        _ => c,
    }
}

/// How a name looks: invisible characters dropped, lookalike letters mapped to Latin.
fn skeleton(name: &str) -> String {
    name.chars()
        .filter(|c| !invisible(*c))
        .map(latin_lookalike)
        .collect()
}

/// When `found` was not found but looks like one of `known`, what differs:
/// `; "gain" looks the same but is another name: "gain\u{200b}" holds U+200B
/// (zero-width space) at character 5`. Empty when no known name looks like it.
pub fn lookalike<'a>(found: &str, known: impl IntoIterator<Item = &'a str>) -> String {
    let look = skeleton(found);
    let Some(twin) = known
        .into_iter()
        .find(|k| *k != found && skeleton(k) == look)
    else {
        return String::new();
    };
    let mut differences = Vec::new();
    let (f, t): (Vec<char>, Vec<char>) = (found.chars().collect(), twin.chars().collect());
    let (mut i, mut j) = (0, 0);
    while i < f.len() || j < t.len() {
        match (f.get(i), t.get(j)) {
            (Some(a), Some(b)) if a == b => {
                i += 1;
                j += 1;
            }
            (Some(a), _) if invisible(*a) => {
                differences.push(format!("{} at character {}", code_point(*a), i + 1));
                i += 1;
            }
            (_, Some(b)) if invisible(*b) => {
                differences.push(format!(
                    "no {} where the other has it (character {})",
                    code_point(*b),
                    j + 1
                ));
                j += 1;
            }
            (Some(a), Some(b)) => {
                differences.push(format!(
                    "{} at character {} where the other has {}",
                    code_point(*a),
                    i + 1,
                    code_point(*b)
                ));
                i += 1;
                j += 1;
            }
            _ => break,
        }
    }
    format!(
        " ({} looks the same but differs: {} holds {})",
        quote(twin),
        quote(found),
        differences.join(", ")
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_with_controls_or_nothing_are_refused() {
        assert_eq!(refuse_name("", false).unwrap(), "an empty name");
        assert!(refuse_name("", true).is_none());
        assert!(refuse_name("gain stage µ-amp", false).is_none());
        let e = refuse_name("a\nerror: b", false).unwrap();
        assert_eq!(
            e,
            "\"a\\u{a}error: b\" holding the control character U+000A (line feed) at character 2"
        );
        assert!(refuse_name("x\u{ffff}", false)
            .unwrap()
            .contains("noncharacter"));
        assert!(refuse_name("\u{202e}abc", false)
            .unwrap()
            .contains("bidirectional"));
    }

    #[test]
    fn lookalikes_say_what_differs() {
        // Unicode U+200B ZERO WIDTH SPACE and U+0430 CYRILLIC SMALL LETTER A.
        let known = ["gain", "out"];
        assert_eq!(
            lookalike("gain\u{200b}", known),
            " (\"gain\" looks the same but differs: \"gain\\u{200b}\" holds U+200B (zero-width space) at character 5)"
        );
        assert_eq!(
            lookalike("g\u{430}in", known),
            " (\"gain\" looks the same but differs: \"g\\u{430}in\" holds U+0430 (Cyrillic) at character 2 where the other has U+0061)"
        );
        assert_eq!(lookalike("gian", known), "");
        assert_eq!(quote("a\"b\\c"), "\"a\\\"b\\\\c\"");
        assert_eq!(quote_value("4k7 Ω\u{200b}"), "\"4k7 Ω\\u{200b}\"");
    }
}
