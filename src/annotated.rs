//! Chain files a person can annotate: JSON with comments (`//` to the end of the line,
//! `/* … */`) and trailing commas, the JSON-with-comments convention. [`plain`] turns
//! such text into strict JSON of the very same byte layout — every comment byte and
//! every trailing comma becomes a space, line breaks stay — so the reader's error
//! positions (line, column) and the `--write` editor's byte offsets hold for the text
//! as written. Nothing else is relaxed: single quotes, unquoted keys and other JSON5
//! forms stay errors of the JSON reader.

use std::borrow::Cow;

/// A comment that never ends.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Unterminated {
    /// Line and column (1-based, in bytes) of the `/*` that opens it.
    pub line: usize,
    pub column: usize,
}

/// `text` as strict JSON of the same byte layout (see the module).
pub fn plain(text: &str) -> Result<Cow<'_, str>, Unterminated> {
    let mut b = text.as_bytes().to_vec();
    blank_comments(&mut b)?;
    blank_trailing_commas(&mut b);
    if b == text.as_bytes() {
        return Ok(Cow::Borrowed(text));
    }
    // Only ASCII bytes were replaced by spaces, and only whole characters (a comment's
    // bytes, including a multi-byte character's), so the text stays UTF-8.
    Ok(Cow::Owned(
        String::from_utf8(b).expect("blanking keeps UTF-8"),
    ))
}

/// Replace every comment byte outside strings by a space, keeping line breaks.
fn blank_comments(b: &mut [u8]) -> Result<(), Unterminated> {
    let mut i = 0;
    let mut in_string = false;
    while i < b.len() {
        let c = b[i];
        if in_string {
            match c {
                b'\\' => i += 1,
                b'"' => in_string = false,
                _ => {}
            }
            i += 1;
            continue;
        }
        match (c, b.get(i + 1)) {
            (b'"', _) => in_string = true,
            (b'/', Some(b'/')) => {
                while i < b.len() && b[i] != b'\n' {
                    b[i] = b' ';
                    i += 1;
                }
                continue;
            }
            (b'/', Some(b'*')) => {
                let open = i;
                let end = b[i + 2..]
                    .windows(2)
                    .position(|w| w == b"*/")
                    .map(|p| i + 2 + p + 2)
                    .ok_or_else(|| position(b, open))?;
                for x in &mut b[i..end] {
                    if *x != b'\n' && *x != b'\r' {
                        *x = b' ';
                    }
                }
                i = end;
                continue;
            }
            _ => {}
        }
        i += 1;
    }
    Ok(())
}

/// Replace by a space every comma outside strings whose next non-blank byte closes an
/// object or a list.
fn blank_trailing_commas(b: &mut [u8]) {
    let mut in_string = false;
    let mut i = 0;
    while i < b.len() {
        let c = b[i];
        if in_string {
            match c {
                b'\\' => i += 1,
                b'"' => in_string = false,
                _ => {}
            }
        } else if c == b'"' {
            in_string = true;
        } else if c == b',' {
            let next = b[i + 1..].iter().find(|x| !x.is_ascii_whitespace());
            if matches!(next, Some(b'}') | Some(b']')) {
                b[i] = b' ';
            }
        }
        i += 1;
    }
}

fn position(b: &[u8], at: usize) -> Unterminated {
    let before = &b[..at];
    let line = 1 + before.iter().filter(|&&x| x == b'\n').count();
    let line_start = before
        .iter()
        .rposition(|&x| x == b'\n')
        .map_or(0, |p| p + 1);
    Unterminated {
        line,
        column: at - line_start + 1,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn comments_and_trailing_commas_become_spaces_in_place() {
        // The JSON-with-comments convention (as editors read .jsonc files): comments
        // and trailing commas go, strings are untouched, the byte layout is kept.
        let text = "{ // gain stage\n  \"a\": \"x//y\", /* note\n µ */ \"b\": [1, 2,],\n}";
        let p = plain(text).unwrap();
        assert_eq!(p.len(), text.len());
        assert_eq!(p.lines().count(), text.lines().count());
        let v: serde_json::Value = serde_json::from_str(&p).unwrap();
        assert_eq!(v, serde_json::json!({ "a": "x//y", "b": [1, 2] }));
        // An escaped quote does not end a string; a comma inside one stays.
        let v: serde_json::Value =
            serde_json::from_str(&plain(r#"{"a": "q\" ,}", }"#).unwrap()).unwrap();
        assert_eq!(v["a"], "q\" ,}");
        // Strict JSON passes unchanged (borrowed).
        assert!(matches!(plain("{\"a\": [1, 2]}"), Ok(Cow::Borrowed(_))));
        // A comment that never ends is named where it opens.
        assert_eq!(
            plain("{\n  /* open\n}").unwrap_err(),
            Unterminated { line: 2, column: 3 }
        );
        // Single quotes stay an error of the JSON reader.
        assert!(serde_json::from_str::<serde_json::Value>(&plain("{'a': 1}").unwrap()).is_err());
    }
}
