fn main() {
    afl::fuzz!(|data: &[u8]| retort_fuzz::importer(
        "image.import",
        data,
        serde_json::json!({ "format": "png", "max_pixels": 1000000 })
    ));
}
