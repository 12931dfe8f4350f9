//! The README's first command on the demo: the chapter recipe runs from a clean copy of
//! `recipes-demo/` (no cache, no output), every included recipe gets its section, the
//! deliberately bad file fails visibly and explained, and nothing else is lost.
//!
//! The demo data are invented (recipes-demo/generate.py); the numbers checked here are
//! the generator's own construction values, not published data.

mod engine_common;

use engine_common::{copy_dir, run};
use std::path::PathBuf;

fn demo_copy() -> tempfile::TempDir {
    let t = tempfile::tempdir().unwrap();
    let demo = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../recipes-demo");
    copy_dir(&demo, t.path());
    t
}

#[test]
fn the_chapter_runs_clean_and_shows_the_bad_file() {
    let dir = demo_copy();
    let r = run(dir.path(), &["run", "chapter.yaml", "--quiet"]);
    // Exit 1: one item (TS-9, an interrupted export) fails by design; all else succeeds.
    assert_eq!(r.code, 1, "stdout:\n{}\nstderr:\n{}", r.stdout, r.stderr);
    let out = dir.path().join("out");
    for f in [
        "report.html",
        "report.md",
        "results.json",
        "provenance.json",
        "run.json",
        "tables/results.csv",
    ] {
        assert!(out.join(f).is_file(), "missing {f}");
    }
    let results: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("results.json")).unwrap()).unwrap();
    let records = results["results"].as_array().unwrap();
    // Every included recipe published results under its namespace.
    for ns in ["uvvis/", "xps/", "eds/", "nmr/", "xrd/", "tem/", "afm/"] {
        assert!(
            records
                .iter()
                .any(|r| r["step"].as_str().unwrap().starts_with(ns)),
            "no results from {ns}"
        );
    }
    // The bad file: a failure naming the file and line, its dependents not run.
    let failures = results["failures"].as_array().unwrap();
    let bad = failures
        .iter()
        .find(|f| f["status"] == "failed")
        .expect("one failure");
    assert_eq!(bad["step"], "uvvis/spectra");
    assert_eq!(bad["item"], "TS-9");
    assert!(
        bad["cause"]
            .as_str()
            .unwrap()
            .contains("data/uvvis/TS-9.csv:73"),
        "{bad}"
    );
    assert!(
        failures.iter().all(|f| f["item"] == "TS-9"),
        "only TS-9 may fail: {failures:?}"
    );
    // The gathered band-gap table still has the four good coatings.
    let table = std::fs::read_to_string(out.join("tables/uvvis__gaps.csv"))
        .or_else(|_| std::fs::read_to_string(out.join("tables/uvvis_gaps.csv")))
        .unwrap_or_default();
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    for title in [
        "Optical band gaps and silver plasmon bands of the TS coatings",
        "Surface chemistry and composition of the TS coatings",
        "Elements in coating TS-5 by energy-dispersive X-ray spectroscopy",
        "Purity of ligand L1 by quantitative 1H NMR",
        "Anatase crystallite size of the TS coatings",
        "Silver nanoparticles on coating TS-5 by TEM",
        "Surface roughness of the TS coatings by AFM",
        "The TS coatings across techniques",
    ] {
        assert!(html.contains(title), "report lacks the section {title}");
    }
    assert!(
        html.contains("TS-9.csv:73"),
        "the failure is explained in the report"
    );
    if !table.is_empty() {
        for item in ["TS-0", "TS-2", "TS-5", "TS-8"] {
            assert!(
                table.contains(item),
                "{item} missing from the gap table:\n{table}"
            );
        }
    }
    // Both checks of the demo (reference coating gap, reference lot purity) pass.
    let run_json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("run.json")).unwrap()).unwrap();
    let checks = run_json["checks"].as_array().unwrap();
    assert_eq!(checks.len(), 2);
    assert!(checks.iter().all(|c| c["passed"] == true), "{checks:?}");
    // Construction values of the invented data (generate.py): TS-0 gap 3.21 eV, lot 07
    // purity 0.962, TEM median diameter 11 nm; recovered within the analysis' own scatter.
    let value = |step: &str, item: Option<&str>, name: &str| -> f64 {
        records
            .iter()
            .find(|r| r["step"] == step && r["name"] == name && r["item"].as_str() == item)
            .and_then(|r| r["value"].as_f64())
            .unwrap_or_else(|| panic!("no {step} {item:?} {name}"))
    };
    assert!((value("uvvis/gap", Some("TS-0"), "band_gap") - 3.21).abs() < 0.05);
    assert!((value("nmr/lot07_purity", Some("ligand_lot07"), "purity") - 0.962).abs() < 0.005);
    assert!((value("tem/sizes", None, "median") - 11.0).abs() < 1.0);
}
