//! Any bytes as a JSON snapshot: parsing, validation, analysis and the output
//! document must return a value or an error, never panic, and the output must
//! serialise (no NaN or infinity leaks into JSON).
#![no_main]

use libfuzzer_sys::fuzz_target;
use logstrip::wire::{analyze_valid, output::analysis_doc, parse_snapshot};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    let Ok(snapshot) = parse_snapshot(text) else { return };
    if let Ok((snapshot, analysis)) = analyze_valid(snapshot) {
        let doc = analysis_doc(&snapshot, &analysis);
        serde_json::to_string(&doc).expect("an analysis serialises to JSON");
    }
});
