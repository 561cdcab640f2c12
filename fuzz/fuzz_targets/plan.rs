//! Parse then plan, as `ampchain plan` does: parse and validate, evaluate at midband,
//! collect warnings, and write the report as a table and as JSON. Must never panic
//! or hang, whatever the file says.
#![no_main]

use ampchain::report::{Exporter, JsonExporter, PlanReport, TableExporter};
use ampchain::units::Level;
use ampchain::{Chain, Freq};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let Ok(chain) = Chain::from_json_str(text) else {
        return;
    };
    let level = chain.source.level.unwrap_or(Level::from_vrms(0.01));
    let Ok(ev) = chain.evaluate() else {
        return;
    };
    let report = PlanReport::new(&chain, &ev, level);
    let mut out = Vec::new();
    TableExporter.export(&report, &mut out).expect("table");
    JsonExporter.export(&report, &mut out).expect("json");
    // Another frequency exercises the complex paths of the AC pass.
    let _ = chain.evaluate_at(Freq::Hz(1e3));
});
