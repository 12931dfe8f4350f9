fn main() {
    afl::fuzz!(|data: &[u8]| retort_fuzz::importer(
        "import.delimited",
        data,
        serde_json::json!({ "delimiter": "semicolon", "decimal": "comma", "x": 2, "y": 1 })
    ));
}
