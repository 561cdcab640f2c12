//! Reading chain files (a path or `-` for standard input).

use crate::chain::Chain;
use crate::error::Error;
use std::io::Read;

/// Read and validate a chain file; `-` reads standard input.
pub fn read_chain(path: &str) -> Result<Chain, Error> {
    let origin = if path == "-" {
        "<stdin>".to_string()
    } else {
        path.to_string()
    };
    let text = if path == "-" {
        let mut s = String::new();
        std::io::stdin()
            .read_to_string(&mut s)
            .map_err(|source| Error::Read {
                origin: origin.clone(),
                source,
            })?;
        s
    } else {
        std::fs::read_to_string(path).map_err(|source| Error::Read {
            origin: origin.clone(),
            source,
        })?
    };
    Chain::from_json_str(&text).map_err(|source| Error::Chain { origin, source })
}
