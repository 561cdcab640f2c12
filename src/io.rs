//! Reading chain files (a path or `-` for standard input) and writing output files
//! atomically.

use crate::chain::{Chain, ChainError};
use crate::error::Error;
use crate::spec::{parse_chain_text, ChainSpec};
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};

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
    // A UTF-8 byte-order mark (some editors write one) stays in the text: the reader
    // (`spec::parse_chain_text`) skips it, and `--write` keeps it.
    Ok((origin, text))
}

/// Standard output was closed when the program started (`ampchain plan … >&-`). The
/// Rust runtime then puts `/dev/null` on descriptor 1, so writes would vanish without
/// an error; the binary notes the closed descriptor before that happens
/// ([`note_stdout_closed`]) and every write to standard output fails instead.
static STDOUT_CLOSED: AtomicBool = AtomicBool::new(false);

/// Record that standard output was closed at start (called by the binary).
pub fn note_stdout_closed() {
    STDOUT_CLOSED.store(true, Ordering::Relaxed);
}

/// Write a finished output to standard output in one go. A reader that has gone (a
/// broken pipe, as in `ampchain plan … | head -1`) is no error: the output is dropped
/// quietly and the command ends as it would have (common practice for command-line
/// tools, no source). A closed standard output and every other write error are errors
/// (exit status 3).
pub fn write_stdout(bytes: &[u8]) -> Result<(), Error> {
    if STDOUT_CLOSED.load(Ordering::Relaxed) {
        return Err(Error::Write(std::io::Error::other(
            "standard output is closed",
        )));
    }
    let mut out = std::io::stdout().lock();
    match out.write_all(bytes).and_then(|_| out.flush()) {
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        written => written.map_err(Error::Write),
    }
}

/// Write `bytes` to `path` as [`Outputs`] does for one output.
pub fn write_atomically(path: &Path, bytes: &[u8], inputs: &[&str]) -> Result<(), Error> {
    let mut outputs = Outputs::new(inputs);
    outputs.add(path, bytes)?;
    outputs.commit()
}

/// Longest symbolic-link chain followed to an output (Linux's own limit is 40).
const MAX_LINKS: usize = 40;

/// How long a FIFO's or device's reader may stop taking data before the write is
/// given up (seconds).
#[cfg(unix)]
const STALL_SECONDS: i32 = 30;

/// Output files of one command, checked and prepared before any is written, so a
/// failure leaves nothing half done: every path is examined and every regular file's
/// new content written to a temporary file beside it first ([`Outputs::add`]); only
/// [`Outputs::commit`] renames them over their targets and writes the rest. Dropping
/// an uncommitted set removes its temporary files.
///
/// What a path may be:
/// - `-`: standard output;
/// - a new path or a regular file: replaced atomically (a temporary file, then a
///   rename), never over one of the command's input files; missing folders are made;
///   a replaced file keeps its permissions;
/// - a symbolic link: followed (at most 40 links); a link to a regular file keeps the
///   link and replaces its target;
/// - a FIFO or a character device (`/dev/null`, a terminal): written straight into,
///   never replaced; opened non-blocking, so a FIFO nobody reads is an error at once,
///   and a reader that stops taking data for 30 s ends the write with an error;
/// - a folder, a block device (a disk) or a socket: refused.
pub struct Outputs<'a> {
    inputs: &'a [&'a str],
    pending: Vec<(String, Pending)>,
}

enum Pending {
    Stdout(Vec<u8>),
    Replace {
        temp: tempfile::TempPath,
        target: PathBuf,
    },
    Straight {
        file: std::fs::File,
        bytes: Vec<u8>,
    },
}

/// Why an output could not be prepared.
enum Prepare {
    /// The path is no place for this output (the chain file, a folder, a disk, a
    /// socket): bad input, exit status 2 (`refusing-output`).
    Refused(String),
    /// The system would not take it (permissions, a read-only or full file system, a
    /// FIFO nobody reads): exit status 3 (`cannot-write-file`).
    Failed(String),
}

impl Prepare {
    /// The error for the output `shown`, the path as the user gave it.
    fn into_error(self, shown: &str) -> Error {
        match self {
            Prepare::Refused(reason) => Error::Output {
                path: shown.to_string(),
                reason,
            },
            Prepare::Failed(reason) => Error::WriteFile {
                path: shown.to_string(),
                reason,
            },
        }
    }
}

impl<'a> Outputs<'a> {
    /// An empty set that never writes over any of `inputs` (`-` is standard input).
    pub fn new(inputs: &'a [&'a str]) -> Self {
        Outputs {
            inputs,
            pending: Vec::new(),
        }
    }

    /// Check `path` and prepare `bytes` for it; nothing visible changes until
    /// [`Outputs::commit`].
    pub fn add(&mut self, path: &Path, bytes: &[u8]) -> Result<(), Error> {
        let shown = path.display().to_string();
        if path.as_os_str() == "-" {
            self.pending.push((shown, Pending::Stdout(bytes.to_vec())));
            return Ok(());
        }
        let refuse = |reason: String| Error::Output {
            path: shown.clone(),
            reason,
        };
        if path.as_os_str().as_encoded_bytes().ends_with(b"/") {
            return Err(refuse(
                "it ends with / (a folder); expected a file path".into(),
            ));
        }
        let prepared = |e: Prepare| e.into_error(&shown);
        let target = follow_links(path).map_err(prepared)?;
        for input in self.inputs.iter().filter(|i| **i != "-") {
            if same_file(&target, Path::new(input)) {
                return Err(refuse(format!(
                    "it is the input file {input}; expected a different output path"
                )));
            }
        }
        if self.pending.iter().any(|(_, p)| match p {
            Pending::Replace { target: t, .. } => same_file(t, &target) || *t == target,
            _ => false,
        }) {
            return Err(refuse(
                "this command writes it twice; expected a different path for each output".into(),
            ));
        }
        let pending = match std::fs::metadata(&target) {
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {
                replace(&target, bytes, None).map_err(prepared)?
            }
            Err(e) => return Err(prepared(Prepare::Failed(format!("cannot examine it: {e}")))),
            Ok(m) if m.is_dir() => {
                return Err(refuse("it is a folder; expected a file path".into()))
            }
            Ok(m) if m.is_file() => {
                replace(&target, bytes, Some(m.permissions())).map_err(prepared)?
            }
            Ok(m) => special(&target, &m, bytes).map_err(prepared)?,
        };
        self.pending.push((shown, pending));
        Ok(())
    }

    /// Rename every prepared file over its target and write the rest, in the order
    /// they were added.
    pub fn commit(self) -> Result<(), Error> {
        for (shown, pending) in self.pending {
            let failed = |e: std::io::Error| Error::WriteFile {
                path: shown.clone(),
                reason: e.to_string(),
            };
            match pending {
                Pending::Stdout(bytes) => write_stdout(&bytes)?,
                Pending::Replace { temp, target } => temp
                    .persist(&target)
                    .map_err(|e| failed(std::io::Error::other(own_words(&e.error))))?,
                Pending::Straight { file, bytes } => {
                    write_straight(file, &bytes).map_err(failed)?
                }
            }
        }
        Ok(())
    }
}

/// The path a chain of symbolic links ends at (the path itself if it is no link).
fn follow_links(path: &Path) -> Result<PathBuf, Prepare> {
    let mut p = path.to_path_buf();
    for _ in 0..MAX_LINKS {
        match std::fs::symlink_metadata(&p) {
            Ok(m) if m.file_type().is_symlink() => {
                let to = std::fs::read_link(&p).map_err(|e| {
                    Prepare::Failed(format!(
                        "cannot read the symbolic link {}: {e}",
                        p.display()
                    ))
                })?;
                p = match p.parent() {
                    Some(dir) if to.is_relative() => dir.join(to),
                    _ => to,
                };
            }
            _ => return Ok(p),
        }
    }
    Err(Prepare::Refused(format!(
        "it is a chain of more than {MAX_LINKS} symbolic links; expected a file path"
    )))
}

/// New content for a regular file or a new path, in a temporary file beside it.
fn replace(
    target: &Path,
    bytes: &[u8],
    keep: Option<std::fs::Permissions>,
) -> Result<Pending, Prepare> {
    let parent = match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    std::fs::create_dir_all(&parent).map_err(|e| {
        Prepare::Failed(format!(
            "cannot create its folder {}: {}",
            parent.display(),
            own_words(&e)
        ))
    })?;
    let name = target
        .file_name()
        .ok_or_else(|| Prepare::Refused("it has no file name; expected a file path".into()))?
        .to_string_lossy()
        .into_owned();
    let short: String = name.chars().take(32).collect();
    let prefix = format!(".{short}.");
    let mut builder = tempfile::Builder::new();
    builder.prefix(&prefix).suffix(".tmp");
    #[cfg(unix)]
    {
        // A new file gets what `File::create` would give (0666 less the umask).
        use std::os::unix::fs::PermissionsExt;
        builder.permissions(std::fs::Permissions::from_mode(0o666));
    }
    let mut file = builder.tempfile_in(&parent).map_err(|e| {
        Prepare::Failed(format!(
            "cannot create a file in its folder {}: {}",
            parent.display(),
            own_words(&e)
        ))
    })?;
    let written = file
        .write_all(bytes)
        .and_then(|_| file.as_file().sync_all())
        .and_then(|_| match keep {
            Some(p) => std::fs::set_permissions(file.path(), p),
            None => Ok(()),
        });
    written.map_err(|e| Prepare::Failed(format!("cannot write it: {}", own_words(&e))))?;
    Ok(Pending::Replace {
        temp: file.into_temp_path(),
        target: target.to_path_buf(),
    })
}

/// An I/O error in its own words, without the ` at path "…"` that `tempfile` adds:
/// messages name the output as the user gave it, not its hidden temporary file.
fn own_words(e: &std::io::Error) -> String {
    let text = e.to_string();
    match text.find(" at path ") {
        Some(k) => text[..k].to_string(),
        None => text,
    }
}

/// A FIFO or a character device, opened for writing straight into it; anything else
/// that is not a regular file or a folder is refused.
#[cfg(unix)]
fn special(target: &Path, m: &std::fs::Metadata, bytes: &[u8]) -> Result<Pending, Prepare> {
    use std::os::unix::fs::{FileTypeExt, OpenOptionsExt};
    let t = m.file_type();
    let what = if t.is_fifo() {
        "a named pipe (FIFO)"
    } else if t.is_char_device() {
        "a character device"
    } else if t.is_block_device() {
        return Err(Prepare::Refused("it is a block device (a disk or a partition); refusing to write onto it, expected a file path".into()));
    } else if t.is_socket() {
        return Err(Prepare::Refused(
            "it is a socket; expected a file path, a FIFO or a character device".into(),
        ));
    } else {
        return Err(Prepare::Refused(
            "it is neither a file nor a FIFO nor a device; expected a file path".into(),
        ));
    };
    // O_NONBLOCK: POSIX open() of a FIFO for writing fails with ENXIO at once when no
    // process has it open for reading, instead of waiting for one.
    let file = std::fs::OpenOptions::new()
        .write(true)
        .custom_flags(libc::O_NONBLOCK | libc::O_NOCTTY)
        .open(target)
        .map_err(|e| match e.raw_os_error() {
            Some(libc::ENXIO) if t.is_fifo() => Prepare::Failed(
                "it is a named pipe (FIFO) that no process is reading; expected a reader on it (start it first) or a file path".to_string()
            ),
            _ => Prepare::Failed(format!("cannot open {what}: {e}")),
        })?;
    Ok(Pending::Straight {
        file,
        bytes: bytes.to_vec(),
    })
}

#[cfg(not(unix))]
fn special(_: &Path, _: &std::fs::Metadata, _: &[u8]) -> Result<Pending, Prepare> {
    Err(Prepare::Refused(
        "it is not a regular file; expected a file path".into(),
    ))
}

/// Write all of `bytes` into a non-blocking FIFO or device, waiting at most
/// [`STALL_SECONDS`] whenever it takes nothing.
#[cfg(unix)]
fn write_straight(mut file: std::fs::File, bytes: &[u8]) -> std::io::Result<()> {
    use std::os::unix::io::AsRawFd;
    let mut rest = bytes;
    while !rest.is_empty() {
        match file.write(rest) {
            Ok(0) => return Err(std::io::ErrorKind::WriteZero.into()),
            Ok(n) => rest = &rest[n..],
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) if e.kind() == std::io::ErrorKind::WouldBlock => {
                let mut fd = libc::pollfd {
                    fd: file.as_raw_fd(),
                    events: libc::POLLOUT,
                    revents: 0,
                };
                // SAFETY: one valid pollfd for the duration of the call.
                let ready = unsafe { libc::poll(&mut fd, 1, STALL_SECONDS * 1000) };
                if ready == 0 {
                    return Err(std::io::Error::other(format!(
                        "its reader took nothing for {STALL_SECONDS} s"
                    )));
                }
                if ready < 0 {
                    let e = std::io::Error::last_os_error();
                    if e.kind() != std::io::ErrorKind::Interrupted {
                        return Err(e);
                    }
                }
            }
            Err(e) => return Err(e),
        }
    }
    Ok(())
}

#[cfg(not(unix))]
fn write_straight(mut file: std::fs::File, bytes: &[u8]) -> std::io::Result<()> {
    file.write_all(bytes)
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
        let scratch = tempfile::tempdir().unwrap();
        let dir = scratch.path();
        let input = dir.join("chain.json");
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
    }
}
