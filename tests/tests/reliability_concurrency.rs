//! Concurrency on one cache: two `retort run` processes over a 40-item recipe at
//! once both finish with results identical to a clean run's, and a third run then
//! reuses everything; a run killed with SIGKILL while another runs on the same
//! cache does not disturb it. The cache takes no locks (entries are published by
//! rename and checksummed), so there is no stale lock to clear.

mod engine_common;
use engine_common::*;
use std::time::Duration;

fn bulk(dir: &std::path::Path, n: usize) {
    for i in 0..n {
        let mut s = String::from("energy_eV,absorbance\n");
        for j in 0..300 {
            s.push_str(&format!(
                "{},{}\n",
                1.0 + j as f64 * 0.01,
                ((i * 11 + j * 17) % 97) as f64
            ));
        }
        std::fs::write(dir.join(format!("data/bulk_{i:03}.csv")), s).unwrap();
    }
}

fn spawn(dir: &std::path::Path, out: &str) -> std::process::Child {
    std::process::Command::new(binary())
        .current_dir(dir)
        .args(["run", "recipe.yaml", "--quiet", "--jobs", "2", "--out", out])
        .spawn()
        .unwrap()
}

#[test]
fn two_runs_on_one_cache_and_a_killed_third_all_leave_correct_results() {
    let t = fixture("basic");
    bulk(t.path(), 37);
    let clean = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--no-cache",
            "--quiet",
            "--out",
            "clean",
        ],
    );
    assert_eq!(clean.code, 0);
    let want = std::fs::read(t.path().join("clean/results.json")).unwrap();
    // Two at once, plus a third killed part-way through.
    let (mut a, mut b, mut c) = (
        spawn(t.path(), "a"),
        spawn(t.path(), "b"),
        spawn(t.path(), "c"),
    );
    std::thread::sleep(Duration::from_millis(300));
    let _ = c.kill();
    let _ = c.wait();
    assert!(a.wait().unwrap().success());
    assert!(b.wait().unwrap().success());
    for out in ["a", "b"] {
        let got = std::fs::read(t.path().join(out).join("results.json")).unwrap();
        assert!(got == want, "run {out}: results differ from a clean run");
    }
    assert!(
        !t.path().join("c/results.json").exists() || {
            // c may have finished before the kill; then it must be right too.
            std::fs::read(t.path().join("c/results.json")).unwrap() == want
        }
    );
    let r = run(t.path(), &["run", "recipe.yaml", "--quiet", "--out", "d"]);
    assert_eq!(r.code, 0);
    assert!(!r.stdout.contains("corrupt") && !r.stderr.contains("corrupt"));
    let (ran, cached, failed, _) = counts(&t.path().join("d"));
    assert_eq!((ran, failed), (0, 0), "everything reused");
    assert_eq!(cached, 40 * 3 + 1);
    assert!(std::fs::read(t.path().join("d/results.json")).unwrap() == want);
}
