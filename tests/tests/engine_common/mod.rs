//! Helpers shared by the engine end-to-end tests: a temp folder per test holding a
//! copy of fixtures from `tests/cases/engine/`, and the real `retort` binary.

#![allow(dead_code)]

use assert_cmd::Command;
use std::path::{Path, PathBuf};

pub fn cases() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("cases/engine")
}

pub fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        if e.file_name() == ".retort" || e.file_name() == "out" {
            continue;
        }
        let target = to.join(e.file_name());
        if e.path().is_dir() {
            copy_dir(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), target).unwrap();
        }
    }
}

/// A temp folder with a copy of `tests/cases/engine/<case>`.
pub fn fixture(case: &str) -> tempfile::TempDir {
    let t = tempfile::tempdir().unwrap();
    copy_dir(&cases().join(case), t.path());
    t
}

/// The `retort` binary, built once per test process: `cargo test -p tests` does not
/// build another package's binaries, and a stale binary would test old code.
pub fn binary() -> PathBuf {
    static BUILT: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    BUILT
        .get_or_init(|| {
            let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".into());
            // Build with the profile these tests were built with.
            let release = std::env::current_exe()
                .is_ok_and(|p| p.components().any(|c| c.as_os_str() == "release"));
            let mut args = vec!["build", "--quiet", "-p", "engine", "--bin", "retort"];
            if release {
                args.push("--release");
            }
            let status = std::process::Command::new(cargo)
                .args(&args)
                .current_dir(env!("CARGO_MANIFEST_DIR"))
                .status()
                .expect("cargo runs");
            assert!(status.success(), "building retort failed");
            assert_cmd::cargo::cargo_bin("retort")
        })
        .clone()
}

pub fn retort(dir: &Path) -> Command {
    let mut c = Command::new(binary());
    c.current_dir(dir).env_remove("RETORT_CACHE");
    c
}

/// Output of a finished command, printed in full so failures explain themselves.
pub struct Ran {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

pub fn run(dir: &Path, args: &[&str]) -> Ran {
    let out = retort(dir).args(args).output().unwrap();
    let r = Ran {
        code: out.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&out.stdout).to_string(),
        stderr: String::from_utf8_lossy(&out.stderr).to_string(),
    };
    eprintln!(
        "$ retort {}\n[exit {}]\n--- stdout\n{}--- stderr\n{}",
        args.join(" "),
        r.code,
        r.stdout,
        r.stderr
    );
    r
}

pub fn read_json(p: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

/// (ran, cached, failed, skipped) from a run's run.json.
pub fn counts(out: &Path) -> (usize, usize, usize, usize) {
    let rec = read_json(&out.join("run.json"));
    let mut c = (0, 0, 0, 0);
    for n in rec["nodes"].as_array().unwrap() {
        match &n["status"] {
            serde_json::Value::String(s) if s == "Ran" => c.0 += 1,
            serde_json::Value::String(s) if s == "Cached" => c.1 += 1,
            serde_json::Value::Object(o) if o.contains_key("Failed") => c.2 += 1,
            serde_json::Value::Object(o) if o.contains_key("Skipped") => c.3 += 1,
            other => panic!("unexpected status {other}"),
        }
    }
    c
}

/// Status of the node (step, item) in a run's run.json.
pub fn status(out: &Path, step: &str, item: Option<&str>) -> serde_json::Value {
    let rec = read_json(&out.join("run.json"));
    rec["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|n| n["step"] == step && n["item"].as_str() == item)
        .map(|n| n["status"].clone())
        .unwrap_or_else(|| panic!("no node {step} {item:?}"))
}

/// The entry of `list` (an array in run.json) whose `field` equals `value`.
pub fn find<'a>(
    rec: &'a serde_json::Value,
    list: &str,
    field: &str,
    value: &str,
) -> &'a serde_json::Value {
    rec[list]
        .as_array()
        .unwrap()
        .iter()
        .find(|e| e[field] == value)
        .unwrap_or_else(|| panic!("no {list} entry with {field} = {value}"))
}

/// Runs every `<name>.yaml` in `dir` through `check` and `run` (in a temp copy of
/// `dir`): exit 2, stderr equal to `<name>.expected` (rewritten when `RETORT_BLESS`
/// is set), and nothing written. Returns the number of cases.
pub fn check_bad_recipe_corpus(dir: &Path) -> usize {
    let bless = std::env::var_os("RETORT_BLESS").is_some();
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().to_string())
        .filter_map(|n| n.strip_suffix(".yaml").map(str::to_string))
        .collect();
    names.sort();
    let mut mismatches = Vec::new();
    for name in &names {
        let t = tempfile::tempdir().unwrap();
        copy_dir(dir, t.path());
        let recipe = format!("{name}.yaml");
        let r = run(t.path(), &["check", &recipe]);
        assert_eq!(r.code, 2, "{name}: check must exit 2");
        assert!(
            r.stderr.contains(&format!("{recipe}:")) || r.stderr.contains(".yaml:"),
            "{name}: no file:line:column"
        );
        assert!(!r.stderr.contains("panicked"), "{name}: panic");
        let expected_path = dir.join(format!("{name}.expected"));
        if bless {
            std::fs::write(&expected_path, &r.stderr).unwrap();
        } else {
            let expected = std::fs::read_to_string(&expected_path).unwrap_or_else(|_| {
                panic!("{name}: missing {name}.expected (bless with RETORT_BLESS=1)")
            });
            if expected != r.stderr {
                mismatches.push(format!(
                    "== {name}\n-- expected\n{expected}-- got\n{}",
                    r.stderr
                ));
            }
        }
        let r = run(t.path(), &["run", &recipe]);
        assert_eq!(r.code, 2, "{name}: run must exit 2");
        assert!(
            !t.path().join("out").exists(),
            "{name}: an output folder was written"
        );
        assert!(
            !t.path().join(".retort").exists(),
            "{name}: a cache was written"
        );
    }
    assert!(mismatches.is_empty(), "{}", mismatches.join("\n"));
    names.len()
}
