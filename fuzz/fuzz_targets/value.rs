//! The value parser: any text, for every kind of field, and as a signal level.
//! Must return a value or an error, never panic or hang; a value it returns is finite
//! and formats.
#![no_main]

use ampchain::units::{format_si, parse_level, parse_value, Kind};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    for kind in Kind::ALL {
        if let Ok(x) = parse_value(text, kind) {
            assert!(x.is_finite(), "{text:?} as {kind:?} gave {x}");
            let _ = format_si(x, "V");
        }
    }
    if let Ok(level) = parse_level(text) {
        assert!(level.vrms.is_finite() && level.vrms >= 0.0, "{text:?}: {level:?}");
        let _ = (level.dbu(), level.vpeak());
    }
});
