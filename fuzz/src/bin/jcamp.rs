fn main() {
    afl::fuzz!(|data: &[u8]| retort_fuzz::importer(
        "import.jcamp",
        data,
        serde_json::json!({ "table": "xypoints" })
    ));
}
