//! The `retort` binary: the command line over the built-in stage catalog.

fn main() {
    restore_sigpipe();
    let code = engine::cli::main_with(std::env::args().collect(), stages::CATALOG);
    std::process::exit(code.code());
}

/// Rust ignores SIGPIPE, so printing into a closed pipe (`retort status | head`)
/// panics; a command-line tool should end quietly instead, as others do.
fn restore_sigpipe() {
    #[cfg(unix)]
    {
        extern "C" {
            fn signal(signum: i32, handler: usize) -> usize;
        }
        const SIGPIPE: i32 = 13;
        const SIG_DFL: usize = 0;
        // SAFETY: setting a signal's disposition to its default takes no pointers
        // and happens before any other thread exists.
        unsafe {
            signal(SIGPIPE, SIG_DFL);
        }
    }
}
