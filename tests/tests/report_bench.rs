//! Benchmark, not a timed test: renders the report of a run over 1,000 spectra
//! (import, background and a three-component fit each, 2,000 points per spectrum)
//! and prints the time and the size of report.html. The size limit (20 MB) is
//! asserted; the time (target under 5 s in a release build) is only printed.
//!
//! `cargo test --release -p tests --test report_bench -- --ignored --nocapture`

mod report_fixture;

#[test]
#[ignore = "benchmark: run with --ignored"]
fn thousand_spectra() {
    let f = report_fixture::many(1000);
    let dir = tempfile::tempdir().unwrap();
    let src = f.source();
    let t = std::time::Instant::now();
    let s = engine::report::render(&f.record, &src, dir.path(), None).unwrap();
    let elapsed = t.elapsed();
    let html = std::fs::metadata(dir.path().join("report.html"))
        .unwrap()
        .len();
    let md = std::fs::metadata(dir.path().join("report.md"))
        .unwrap()
        .len();
    println!(
        "1000 spectra: {} figures ({} inlined), {} tables in {:.2} s; report.html {:.1} MB, report.md {:.1} MB",
        s.figures,
        s.inlined,
        s.tables,
        elapsed.as_secs_f64(),
        html as f64 / 1e6,
        md as f64 / 1e6
    );
    assert_eq!(s.figures, 3000);
    assert!(html < 20_000_000, "report.html is {html} bytes");
}
