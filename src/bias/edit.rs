//! Writing a designed stage back into its chain file: the original text with only the
//! changed values replaced (or a missing key added to its stage object), so that the
//! layout, key order and everything else of the file stay as the designer wrote them.
//! A value written with its tolerance keeps it: only the object's "value" changes.

use serde_json::Value;

/// One value to write: `stages[stage].key = "code"`.
#[derive(Debug, Clone, PartialEq)]
pub struct Edit {
    pub stage: usize,
    pub key: &'static str,
    pub code: String,
}

/// Why the chain text could not be edited.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum EditError {
    #[error("{0}")]
    Shape(String),
    #[error(
        "the edited chain text does not hold exactly the intended changes ({0}); nothing written"
    )]
    Check(String),
    /// The value to change is a range `{"min", "typical", "max"}`: its limits are the
    /// designer's own numbers for that part, and no rule says where they go for another
    /// value, so the designer writes them.
    #[error("stage \"{stage}\": {key}: found a range {{\"min\", \"typical\", \"max\"}}, expected a value or {{\"value\": …, \"tolerance\": …}} to write the new value {code} into; nothing written (write the range around {code} by hand, or give the part a tolerance)")]
    Range {
        stage: String,
        key: &'static str,
        code: String,
    },
}

/// A small scanner over JSON text that knows where every value starts and ends.
struct Scanner<'a> {
    b: &'a [u8],
}

impl Scanner<'_> {
    fn skip_ws(&self, mut i: usize) -> usize {
        while i < self.b.len() && self.b[i].is_ascii_whitespace() {
            i += 1;
        }
        i
    }

    fn shape(what: &str, i: usize) -> EditError {
        EditError::Shape(format!("byte {i}: expected {what}"))
    }

    /// End (exclusive) of the string starting at `i` (a `"`).
    fn string_end(&self, i: usize) -> Result<usize, EditError> {
        let mut j = i + 1;
        while j < self.b.len() {
            match self.b[j] {
                b'\\' => j += 2,
                b'"' => return Ok(j + 1),
                _ => j += 1,
            }
        }
        Err(Self::shape("the end of a string", i))
    }

    /// End (exclusive) of the value starting at `i` (whitespace skipped before).
    fn value_end(&self, i: usize) -> Result<usize, EditError> {
        let i = self.skip_ws(i);
        match self.b.get(i) {
            Some(b'"') => self.string_end(i),
            Some(b'{') => Ok(self.members(i)?.close + 1),
            Some(b'[') => {
                let (_, close) = self.elements(i)?;
                Ok(close + 1)
            }
            Some(_) => {
                let mut j = i;
                while j < self.b.len()
                    && !matches!(self.b[j], b',' | b'}' | b']')
                    && !self.b[j].is_ascii_whitespace()
                {
                    j += 1;
                }
                Ok(j)
            }
            None => Err(Self::shape("a value", i)),
        }
    }

    /// The members of the object starting at `i` (a `{`).
    fn members(&self, i: usize) -> Result<Object, EditError> {
        let mut members = Vec::new();
        let mut j = self.skip_ws(i + 1);
        if self.b.get(j) == Some(&b'}') {
            return Ok(Object { members, close: j });
        }
        loop {
            if self.b.get(j) != Some(&b'"') {
                return Err(Self::shape("a key", j));
            }
            let key_end = self.string_end(j)?;
            let key = String::from_utf8_lossy(&self.b[j + 1..key_end - 1]).into_owned();
            let colon = self.skip_ws(key_end);
            if self.b.get(colon) != Some(&b':') {
                return Err(Self::shape("':'", colon));
            }
            let start = self.skip_ws(colon + 1);
            let end = self.value_end(start)?;
            members.push((key, start, end));
            j = self.skip_ws(end);
            match self.b.get(j) {
                Some(b',') => j = self.skip_ws(j + 1),
                Some(b'}') => return Ok(Object { members, close: j }),
                _ => return Err(Self::shape("',' or '}'", j)),
            }
        }
    }

    /// Start of every element of the array starting at `i` (a `[`), and its `]`.
    fn elements(&self, i: usize) -> Result<(Vec<usize>, usize), EditError> {
        let mut starts = Vec::new();
        let mut j = self.skip_ws(i + 1);
        if self.b.get(j) == Some(&b']') {
            return Ok((starts, j));
        }
        loop {
            starts.push(j);
            let end = self.value_end(j)?;
            j = self.skip_ws(end);
            match self.b.get(j) {
                Some(b',') => j = self.skip_ws(j + 1),
                Some(b']') => return Ok((starts, j)),
                _ => return Err(Self::shape("',' or ']'", j)),
            }
        }
    }
}

/// An object's members as (key, value start, value end) and its closing brace.
struct Object {
    members: Vec<(String, usize, usize)>,
    close: usize,
}

/// `text` with every edit applied; checked by reading both texts as JSON values. A
/// UTF-8 byte-order mark the text begins with is kept, as are its line endings (only
/// value spans change).
pub fn apply(text: &str, edits: &[Edit]) -> Result<String, EditError> {
    match text.strip_prefix(BOM) {
        Some(body) => apply_to_json(body, edits).map(|out| format!("{BOM}{out}")),
        None => apply_to_json(text, edits),
    }
}

/// The UTF-8 byte-order mark (U+FEFF), which some editors write before the JSON.
const BOM: char = '\u{feff}';

/// [`apply`] on the JSON text itself (no byte-order mark).
fn apply_to_json(text: &str, edits: &[Edit]) -> Result<String, EditError> {
    // Comments and trailing commas are found on a strict copy of the same byte layout
    // (`annotated::plain`); the edits go into the text as written, comments and all.
    let plain = crate::annotated::plain(text)
        .map_err(|u| EditError::Shape(format!("a comment that never ends at line {}", u.line)))?;
    let sc = Scanner {
        b: plain.as_bytes(),
    };
    let top_start = sc.skip_ws(0);
    if sc.b.get(top_start) != Some(&b'{') {
        return Err(EditError::Shape("expected the chain object".into()));
    }
    let top = sc.members(top_start)?;
    let (_, stages_start, _) = top
        .members
        .iter()
        .find(|(k, _, _)| k == "stages")
        .ok_or_else(|| EditError::Shape("expected a \"stages\" list".into()))?;
    if sc.b.get(*stages_start) != Some(&b'[') {
        return Err(EditError::Shape("expected \"stages\" to be a list".into()));
    }
    let (stage_starts, _) = sc.elements(*stages_start)?;

    // (position, bytes removed, text inserted), applied from the end backwards.
    let mut splices: Vec<(usize, usize, String)> = Vec::with_capacity(edits.len());
    for e in edits {
        let start = *stage_starts
            .get(e.stage)
            .ok_or_else(|| EditError::Shape(format!("expected stages[{}] in the file", e.stage)))?;
        if sc.b.get(start) != Some(&b'{') {
            return Err(EditError::Shape(format!(
                "expected stages[{}] to be an object",
                e.stage
            )));
        }
        let obj = sc.members(start)?;
        let quoted = format!("\"{}\"", e.code);
        match obj.members.iter().find(|(k, _, _)| k == e.key) {
            // A value with its tolerance, {"value": …, "tolerance": …}: only "value"
            // changes, the tolerance and the rest of the object stay as written.
            Some((_, v_start, _)) if sc.b[*v_start] == b'{' => {
                let spread = sc.members(*v_start)?;
                match spread.members.iter().find(|(k, _, _)| k == "value") {
                    Some((_, s, end)) => splices.push((*s, end - s, quoted)),
                    None => {
                        return Err(EditError::Range {
                            stage: stage_name(text, &obj, e.stage),
                            key: e.key,
                            code: e.code.clone(),
                        })
                    }
                }
            }
            Some((_, v_start, v_end)) => splices.push((*v_start, v_end - v_start, quoted)),
            None => {
                // After the last member's value, before the closing brace.
                let at = obj.members.last().map_or(start + 1, |(_, _, end)| *end);
                let sep = if obj.members.is_empty() { "" } else { ", " };
                splices.push((at, 0, format!("{sep}\"{}\": {quoted}", e.key)));
            }
        }
    }
    splices.sort_by_key(|s| std::cmp::Reverse(s.0));
    let mut out = text.to_string();
    for (at, removed, inserted) in splices {
        out.replace_range(at..at + removed, &inserted);
    }
    let edited = crate::annotated::plain(&out)
        .map_err(|u| EditError::Check(format!("a comment that never ends at line {}", u.line)))?;
    check(&plain, &edited, edits)?;
    Ok(out)
}

/// The stage's id as written, for messages; `stages[i]` when it has none readable.
fn stage_name(text: &str, stage: &Object, index: usize) -> String {
    stage
        .members
        .iter()
        .find(|(k, _, _)| k == "id")
        .and_then(|(_, s, e)| serde_json::from_str::<String>(&text[*s..*e]).ok())
        .unwrap_or_else(|| format!("stages[{index}]"))
}

/// The edited text must read as the original with exactly the edits applied: a plain
/// value replaced (or added), or the "value" of a `{"value", "tolerance"}` object.
fn check(original: &str, edited: &str, edits: &[Edit]) -> Result<(), EditError> {
    let fail = |what: String| EditError::Check(what);
    let mut expected: Value =
        serde_json::from_str(original).map_err(|e| fail(format!("original: {e}")))?;
    for e in edits {
        let stage = expected
            .get_mut("stages")
            .and_then(|s| s.get_mut(e.stage))
            .and_then(Value::as_object_mut)
            .ok_or_else(|| fail(format!("no stages[{}]", e.stage)))?;
        let code = Value::String(e.code.clone());
        match stage.get_mut(e.key).and_then(Value::as_object_mut) {
            Some(spread) if spread.contains_key("value") => {
                spread.insert("value".into(), code);
            }
            _ => {
                stage.insert(e.key.to_string(), code);
            }
        }
    }
    let got: Value = serde_json::from_str(edited).map_err(|e| fail(format!("edited: {e}")))?;
    if got != expected {
        return Err(fail("the values differ".into()));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    const TEXT: &str = r#"{
  "supply": "15 V",
  "stages": [
    { "id": "gain", "type": "common_emitter", "device": "q",
      "r_top": "150k", "r_bottom": 22000, "r_collector": "10k" },
    { "id": "buffer", "type": "emitter_follower", "device": "q",
      "r_emitter": "4k7" }
  ],
  "links": [ { "from": "a", "to": "b", "coupling": "1u" } ]
}"#;

    fn edit(stage: usize, key: &'static str, code: &str) -> Edit {
        Edit {
            stage,
            key,
            code: code.into(),
        }
    }

    #[test]
    fn replaces_values_and_nothing_else() {
        let out = apply(
            TEXT,
            &[
                edit(0, "r_top", "120k"),
                edit(0, "r_bottom", "18k"),
                edit(1, "r_emitter", "3k9"),
            ],
        )
        .unwrap();
        let expected = TEXT
            .replace("\"150k\"", "\"120k\"")
            .replace("22000", "\"18k\"")
            .replace("\"4k7\"", "\"3k9\"");
        assert_eq!(out, expected);
    }

    #[test]
    fn adds_a_missing_key_to_its_stage() {
        let out = apply(TEXT, &[edit(1, "r_collector", "1k")]).unwrap();
        assert!(
            out.contains(r#""r_emitter": "4k7", "r_collector": "1k" }"#),
            "{out}"
        );
    }

    #[test]
    fn strings_with_braces_and_escapes_do_not_confuse_it() {
        let text = TEXT.replace("\"15 V\"", "\"15 V\", \"title\": \"a \\\"{[\\\\\"");
        let out = apply(&text, &[edit(0, "r_top", "120k")]).unwrap();
        assert_eq!(out, text.replace("\"150k\"", "\"120k\""));
    }

    #[test]
    fn a_value_keeps_its_tolerance_and_layout() {
        // README "Spread in the chain file": the tolerance belongs to the part, so a new
        // value for the part keeps it; only the text of "value" changes.
        let text = TEXT.replace(
            "\"r_collector\": \"10k\"",
            "\"r_collector\": {\n        \"value\": \"10k\",  \"tolerance\": \"1%\",\n        \"distribution\": \"normal\" }",
        );
        let out = apply(&text, &[edit(0, "r_collector", "12k")]).unwrap();
        assert_eq!(
            out,
            text.replace("\"value\": \"10k\"", "\"value\": \"12k\"")
        );
        let v: Value = serde_json::from_str(&out).unwrap();
        let r_c = &v["stages"][0]["r_collector"];
        assert_eq!(r_c["value"], "12k");
        assert_eq!(r_c["tolerance"], "1%");
        assert_eq!(r_c["distribution"], "normal");
    }

    #[test]
    fn a_range_is_refused_with_stage_and_key() {
        let text = TEXT.replace(
            "\"r_top\": \"150k\"",
            "\"r_top\": {\"min\": \"140k\", \"typical\": \"150k\", \"max\": \"155k\"}",
        );
        let e = apply(&text, &[edit(0, "r_top", "120k")]).unwrap_err();
        let msg = e.to_string();
        assert!(matches!(e, EditError::Range { .. }), "{e:?}");
        assert!(
            msg.starts_with("stage \"gain\": r_top: found a range") && msg.contains("120k"),
            "{msg}"
        );
    }

    #[test]
    fn the_check_sees_a_tolerance_lost() {
        // The verification step compares values: writing a plain value where the file
        // holds {"value", "tolerance"} is not what was intended.
        let text = TEXT.replace(
            "\"r_collector\": \"10k\"",
            "\"r_collector\": {\"value\": \"10k\", \"tolerance\": \"1%\"}",
        );
        let lost = TEXT.replace("\"10k\"", "\"12k\"");
        let e = check(&text, &lost, &[edit(0, "r_collector", "12k")]).unwrap_err();
        assert!(matches!(e, EditError::Check(_)), "{e:?}");
    }

    #[test]
    fn a_byte_order_mark_and_crlf_line_ends_are_kept() {
        // The mark U+FEFF (UTF-8 EF BB BF) some editors write, and CRLF line ends.
        let text = format!("\u{feff}{}", TEXT.replace('\n', "\r\n"));
        let out = apply(
            &text,
            &[edit(0, "r_top", "120k"), edit(1, "r_collector", "1k")],
        )
        .unwrap();
        let expected = text.replace("\"150k\"", "\"120k\"").replace(
            r#""r_emitter": "4k7" }"#,
            r#""r_emitter": "4k7", "r_collector": "1k" }"#,
        );
        assert_eq!(out, expected);
    }

    #[test]
    fn a_missing_stage_is_named() {
        let e = apply(TEXT, &[edit(5, "r_top", "1k")]).unwrap_err();
        assert!(e.to_string().contains("stages[5]"), "{e}");
    }
}
