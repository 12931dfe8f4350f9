//! Shared helpers for the end-to-end and reference tests.

use std::path::PathBuf;

/// The certified reference data folder: `$RETORT_REFERENCE_DIR`, else `../shared/reference`
/// beside the repository. Tests never copy its files into the repo.
pub fn reference_dir() -> Option<PathBuf> {
    let dir = std::env::var_os("RETORT_REFERENCE_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| {
            PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../shared/reference")
        });
    dir.is_dir().then_some(dir)
}

/// Reads a reference file, or prints plainly which check cannot run and returns None.
pub fn reference_file(rel: &str, check: &str) -> Option<String> {
    match reference_dir() {
        Some(d) => match std::fs::read_to_string(d.join(rel)) {
            Ok(s) => Some(s),
            Err(e) => {
                eprintln!("SKIPPED {check}: reference file {rel} unreadable: {e}");
                None
            }
        },
        None => {
            eprintln!(
                "SKIPPED {check}: reference data folder not found (set RETORT_REFERENCE_DIR)"
            );
            None
        }
    }
}
