//! Any bytes as a CSV snapshot (underlying and as_of given outside the table, as
//! the service's query parameters do): parsing, validation, analysis and the output
//! document must return a value or an error, never panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use logstrip::wire::csv_input::{parse_snapshot_csv, CsvHeader};
use logstrip::wire::{analyze_valid, output::analysis_doc};

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    let header = CsvHeader { underlying: Some("FUZZIDX".into()), as_of: Some("2026-11-30T15:30:00Z".into()) };
    let Ok(snapshot) = parse_snapshot_csv(text, &header) else { return };
    if let Ok((snapshot, analysis)) = analyze_valid(snapshot) {
        let doc = analysis_doc(&snapshot, &analysis);
        serde_json::to_string(&doc).expect("an analysis serialises to JSON");
    }
});
