//! The chain file parser and validator: any bytes. Must give a chain or an error
//! naming the place, never panic or hang.
#![no_main]

use ampchain::Chain;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Chain::from_json_str(text) {
        Ok(chain) => assert!(!chain.stages.is_empty()),
        Err(e) => assert!(!e.to_string().is_empty()),
    }
});
