//! The `retort` binary: the command line over the built-in stage catalog.

fn main() {
    let code = engine::cli::main_with(std::env::args().collect(), stages::CATALOG);
    std::process::exit(code.code());
}
