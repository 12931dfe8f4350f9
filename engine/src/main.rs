fn main() {
    eprintln!("retort: not built yet");
    std::process::exit(2);
}
