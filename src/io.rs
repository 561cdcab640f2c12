//! Reading chain files (a path or `-` for standard input) and writing output files
//! atomically.

use crate::chain::{Chain, ChainError};
use crate::error::Error;
use crate::spec::{parse_chain_text, ChainSpec};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

/// Read and validate a chain file; `-` reads standard input.
pub fn read_chain(path: &str) -> Result<Chain, Error> {
    read_chain_with_text(path).map(|(chain, _)| chain)
}

/// Read and validate a chain file, keeping its text (for commands that write an
/// edited copy of it); `-` reads standard input.
pub fn read_chain_with_text(path: &str) -> Result<(Chain, String), Error> {
    let (origin, text) = read_text(path)?;
    let chain = Chain::from_json_str(&text).map_err(|source| Error::Chain { origin, source })?;
    Ok((chain, text))
}

/// Read a chain file and keep what it says beside the validated chain (the spread
/// of its values lives only in the file's form); `-` reads standard input.
pub fn read_chain_with_spec(path: &str) -> Result<(ChainSpec, Chain), Error> {
    let (origin, text) = read_text(path)?;
    let invalid = |source| Error::Chain {
        origin: origin.clone(),
        source,
    };
    let spec = parse_chain_text(&text).map_err(|e| invalid(ChainError::Syntax(e)))?;
    let chain = Chain::from_spec(&spec).map_err(invalid)?;
    Ok((spec, chain))
}

/// The name a chain file goes by in messages, and its text. A file over
/// [`crate::limits::MAX_FILE_BYTES`] is refused without being read whole.
fn read_text(path: &str) -> Result<(String, String), Error> {
    let origin = if path == "-" {
        "<stdin>".to_string()
    } else {
        path.to_string()
    };
    let max = crate::limits::MAX_FILE_BYTES;
    let too_large = |bytes: u64| Error::TooLarge {
        origin: origin.clone(),
        bytes,
        max,
    };
    let read_error = |source| Error::Read {
        origin: origin.clone(),
        source,
    };
    let mut text = String::new();
    if path == "-" {
        // At most one byte past the limit, so a huge input is never read whole.
        std::io::stdin()
            .take(max + 1)
            .read_to_string(&mut text)
            .map_err(read_error)?;
    } else {
        let file = std::fs::File::open(path).map_err(read_error)?;
        let bytes = file.metadata().map_err(read_error)?.len();
        if bytes > max {
            return Err(too_large(bytes));
        }
        file.take(max + 1)
            .read_to_string(&mut text)
            .map_err(read_error)?;
    }
    if text.len() as u64 > max {
        return Err(too_large(text.len() as u64));
    }
    Ok((origin, text))
}

/// Write `bytes` to `path` atomically: into a temporary file beside it, then renamed
/// over it, so a reader never sees a half-written file. Refuses to write over any of
/// `inputs` (e.g. the chain file) and creates missing parent folders.
pub fn write_atomically(path: &Path, bytes: &[u8], inputs: &[&str]) -> Result<(), Error> {
    let refuse = |reason: String| Error::Output {
        path: path.display().to_string(),
        reason,
    };
    for input in inputs.iter().filter(|i| **i != "-") {
        if same_file(path, Path::new(input)) {
            return Err(refuse(format!(
                "it is the input file {input}; expected a different output path"
            )));
        }
    }
    if path.is_dir() {
        return Err(refuse("it is a folder; expected a file path".into()));
    }
    let parent = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&parent)
        .map_err(|e| refuse(format!("cannot create its folder: {e}")))?;
    let name = path
        .file_name()
        .ok_or_else(|| refuse("it has no file name".into()))?
        .to_string_lossy()
        .into_owned();
    let tmp = parent.join(format!(".{name}.{}.tmp", std::process::id()));
    let written = std::fs::File::create(&tmp).and_then(|mut f| {
        f.write_all(bytes)?;
        f.sync_all()
    });
    if let Err(e) = written.and_then(|_| std::fs::rename(&tmp, path)) {
        let _ = std::fs::remove_file(&tmp);
        return Err(refuse(format!("cannot write it: {e}")));
    }
    Ok(())
}

/// True when both paths name the same existing file (or the same path text).
fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn atomic_write_refuses_the_input_and_creates_folders() {
        let dir = std::env::temp_dir().join(format!("ampchain-io-{}", std::process::id()));
        let input = dir.join("chain.json");
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(&input, "{}").unwrap();
        let input_s = input.to_string_lossy().into_owned();
        let e = write_atomically(&input, b"x", &[&input_s]).unwrap_err();
        assert!(e.to_string().contains("input file"), "{e}");
        assert_eq!(std::fs::read_to_string(&input).unwrap(), "{}");
        let out = dir.join("new/sub/out.svg");
        write_atomically(&out, b"<svg/>", &[&input_s]).unwrap();
        assert_eq!(std::fs::read(&out).unwrap(), b"<svg/>");
        let leftovers = std::fs::read_dir(dir.join("new/sub")).unwrap().count();
        assert_eq!(leftovers, 1, "no temporary file left behind");
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
