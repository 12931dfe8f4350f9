fn main() {
    afl::fuzz!(|data: &[u8]| retort_fuzz::recipe(data));
}
