//! Reading the mpmath fixtures under tests/fixtures/mittag_leffler/ (each written by the
//! script beside it), shared by the Mittag-Leffler reference tests.

/// The fixture file `name` in tests/fixtures/mittag_leffler/, parsed, and its `values` array.
pub fn read(name: &str) -> (serde_json::Value, Vec<serde_json::Value>) {
    let path = format!("{}/tests/fixtures/mittag_leffler/{name}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).expect("fixture file readable");
    let json: serde_json::Value = serde_json::from_str(&text).expect("fixture is valid JSON");
    let values = json["values"].as_array().expect("fixture has a values array").clone();
    (json, values)
}

/// The number `name` of one fixture entry.
pub fn field(entry: &serde_json::Value, name: &str) -> f64 {
    entry[name].as_f64().expect("every fixture entry holds a number under the names the test reads")
}
