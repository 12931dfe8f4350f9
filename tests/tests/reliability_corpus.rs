//! The bad-input corpus (`tests/cases/bad-input/`), one data-driven harness:
//! - `recipes/<name>.yaml` + `<name>.expected`: broken recipes; `check` and `run`
//!   exit 2 with exactly the expected diagnostics and write nothing;
//! - `data/**` (written by `make_data.py`) read by `data.yaml`: every bad file fails
//!   its own item with a message naming the file (and line where there is one),
//!   good files beside them succeed, exit 1, nothing non-finite in results.json.
//!   `data.expected` is the status of every node, one line each.
//!
//! `RETORT_BLESS=1 cargo test -p tests --test reliability_corpus` rewrites the
//! expected files; review the diff before committing.

mod engine_common;
use engine_common::*;
use std::path::{Path, PathBuf};

fn corpus() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("cases/bad-input")
}

#[test]
fn bad_recipes_give_the_expected_diagnostics_and_write_nothing() {
    let n = check_bad_recipe_corpus(&corpus().join("recipes"));
    assert!(n >= 30, "recipe corpus too small: {n}");
}

fn data_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        if e.path().is_dir() {
            data_files(&e.path(), out);
        } else {
            out.push(e.path());
        }
    }
}

#[test]
fn bad_data_files_fail_their_own_item_with_the_expected_message() {
    let t = tempfile::tempdir().unwrap();
    copy_dir(&corpus(), t.path());
    let r = run(t.path(), &["run", "data.yaml", "--quiet"]);
    assert_eq!(r.code, 1, "some items fail, the run goes on");
    assert!(!r.stderr.contains("panicked"));
    let out = t.path().join("out");
    let rec = read_json(&out.join("run.json"));
    let mut lines = Vec::new();
    for n in rec["nodes"].as_array().unwrap() {
        let item = n["item"].as_str().unwrap_or("-");
        let step = n["step"].as_str().unwrap();
        let s = &n["status"];
        let status = match s {
            serde_json::Value::String(s) => s.replace("Ran", "ok").replace("Cached", "ok"),
            serde_json::Value::Object(o) if o.contains_key("Failed") => {
                let e = o["Failed"]["error"].as_str().unwrap();
                assert!(!e.contains("panicked"), "{item} {step}: {e}");
                format!("FAILED {e}")
            }
            serde_json::Value::Object(o) if o.contains_key("Skipped") => "skipped".into(),
            other => panic!("unexpected status {other}"),
        };
        lines.push(format!("{item} {step}: {status}"));
    }
    lines.sort();
    let got = lines.join("\n") + "\n";
    let path = corpus().join("data.expected");
    if std::env::var_os("RETORT_BLESS").is_some() {
        std::fs::write(&path, &got).unwrap();
    } else {
        let want = std::fs::read_to_string(&path).unwrap();
        assert_eq!(
            want, got,
            "data.expected differs (bless with RETORT_BLESS=1)"
        );
    }
    // Every data file is an item; every bad one failed with its own file named.
    let mut files = Vec::new();
    data_files(&corpus().join("data"), &mut files);
    assert!(files.len() >= 40, "data corpus too small: {}", files.len());
    for f in &files {
        let stem = f.file_stem().unwrap().to_string_lossy().to_string();
        let mine: Vec<&String> = lines
            .iter()
            .filter(|l| l.starts_with(&format!("{stem} ")))
            .collect();
        assert!(!mine.is_empty(), "{stem}: not an item");
        if stem.starts_with("good") {
            assert!(mine.iter().all(|l| l.ends_with(": ok")), "{stem}: {mine:?}");
        }
    }
    for l in lines.iter().filter(|l| l.contains("FAILED data/")) {
        let file = l
            .split("FAILED ")
            .nth(1)
            .unwrap()
            .split(':')
            .next()
            .unwrap();
        assert!(t.path().join(file).exists(), "{l}: names no real file");
    }
    // results.json: only finite numbers (JSON has no NaN; serde_json writes null).
    let res = read_json(&out.join("results.json"));
    let results = res["results"].as_array().unwrap();
    assert!(!results.is_empty());
    for r in results {
        assert!(
            r["value"].is_number() || r["value"].is_string(),
            "not a finite value: {r}"
        );
        assert!(r["uncertainty"].is_null() || r["uncertainty"].is_number());
    }
}
