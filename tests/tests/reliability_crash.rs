//! Crash safety: SIGKILL at seeded random moments during a 200-item run. After each
//! kill the cache must hold no corrupt entry (`retort plan` reports none), the next
//! run must complete, and its results.json must equal a clean run's byte for byte.
//! 10 kill points by default; `RETORT_KILL_POINTS=N` for more.
//! Also: an output folder that cannot be written gives a clear error and leaves the
//! previous outputs intact.

mod engine_common;
use engine_common::*;
use std::time::{Duration, Instant};

/// A small deterministic PRNG (SplitMix64, Steele, Lea & Flood 2014) for kill times.
fn splitmix(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

fn write_items(dir: &std::path::Path, n: usize) {
    for i in 0..n {
        let mut s = String::from("energy_eV,absorbance\n");
        for j in 0..400 {
            s.push_str(&format!(
                "{},{}\n",
                1.0 + j as f64 * 0.01,
                ((i * 7 + j * 13) % 101) as f64
            ));
        }
        std::fs::write(dir.join(format!("data/bulk_{i:03}.csv")), s).unwrap();
    }
}

#[test]
fn sigkill_at_seeded_moments_never_corrupts_the_cache_or_the_results() {
    let t = fixture("basic");
    write_items(t.path(), 197); // 200 items with the fixture's three
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
    let clean_results = std::fs::read(t.path().join("clean/results.json")).unwrap();
    // How long a full run takes here, to spread the kill moments over it.
    let t0 = Instant::now();
    let probe = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--no-cache",
            "--quiet",
            "--out",
            "probe",
        ],
    );
    assert_eq!(probe.code, 0);
    let full = t0.elapsed().as_millis().max(50) as u64;
    let points: usize = std::env::var("RETORT_KILL_POINTS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10);
    let mut seed = 0x5eed_u64;
    let mut survived = 0;
    for k in 0..points {
        // A fresh cache every few points, so kills land early in a run too.
        if k % 3 == 0 {
            let _ = std::fs::remove_dir_all(t.path().join(".retort"));
        }
        let delay = splitmix(&mut seed) % full;
        let mut child = std::process::Command::new(binary())
            .current_dir(t.path())
            .args([
                "run",
                "recipe.yaml",
                "--jobs",
                "2",
                "--quiet",
                "--out",
                "killed",
            ])
            .spawn()
            .unwrap();
        std::thread::sleep(Duration::from_millis(delay));
        let _ = child.kill(); // SIGKILL on Unix
        let _ = child.wait();
        // No corrupt entry: plan verifies what it would reuse.
        let p = run(t.path(), &["plan", "recipe.yaml"]);
        assert_eq!(p.code, 0);
        assert!(
            !p.stdout.contains("corrupt"),
            "kill {k} at {delay} ms left a corrupt entry"
        );
        let r = run(
            t.path(),
            &["run", "recipe.yaml", "--quiet", "--out", "after"],
        );
        assert_eq!(r.code, 0, "kill {k}: the next run failed");
        assert!(
            !r.stdout.contains("corrupt"),
            "kill {k}: corrupt entries recomputed"
        );
        let got = std::fs::read(t.path().join("after/results.json")).unwrap();
        assert!(
            got == clean_results,
            "kill {k} at {delay} ms: results differ"
        );
        survived += 1;
    }
    eprintln!("survived {survived} kill points over a {full} ms run");
    assert_eq!(survived, points);
}

#[test]
fn an_unwritable_output_folder_gives_a_clear_error_and_keeps_the_old_outputs() {
    use std::os::unix::fs::PermissionsExt;
    let t = fixture("basic");
    assert_eq!(
        run(t.path(), &["run", "recipe.yaml", "--out", "out/x"]).code,
        0
    );
    let before = std::fs::read(t.path().join("out/x/results.json")).unwrap();
    let parent = t.path().join("out");
    std::fs::set_permissions(&parent, std::fs::Permissions::from_mode(0o555)).unwrap();
    // root ignores permission bits; then the check cannot run here.
    let probe = std::fs::write(parent.join("probe"), b"x");
    if probe.is_ok() {
        let _ = std::fs::remove_file(parent.join("probe"));
        std::fs::set_permissions(&parent, std::fs::Permissions::from_mode(0o755)).unwrap();
        eprintln!(
            "SKIPPED permission-denied check: running as root, permission bits are not enforced"
        );
        return;
    }
    let r = run(
        t.path(),
        &["run", "recipe.yaml", "--out", "out/x", "--set", "window=7"],
    );
    std::fs::set_permissions(&parent, std::fs::Permissions::from_mode(0o755)).unwrap();
    assert_ne!(r.code, 0);
    assert!(
        r.stderr.contains("out"),
        "the error names the folder: {}",
        r.stderr
    );
    assert!(
        r.stderr.to_lowercase().contains("permission"),
        "{}",
        r.stderr
    );
    assert_eq!(
        before,
        std::fs::read(t.path().join("out/x/results.json")).unwrap()
    );
}

#[test]
fn a_full_disk_gives_a_clear_error_and_keeps_the_old_outputs() {
    // Needs a tiny tmpfs: root and mount(8). Skipped plainly otherwise.
    let t = fixture("basic");
    let mnt = t.path().join("tiny");
    std::fs::create_dir_all(&mnt).unwrap();
    let ok = std::process::Command::new("mount")
        .args(["-t", "tmpfs", "-o", "size=2m", "tmpfs"])
        .arg(&mnt)
        .status()
        .is_ok_and(|s| s.success());
    if !ok {
        eprintln!("SKIPPED disk-full check: cannot mount a tmpfs here (needs root)");
        return;
    }
    let umount = || {
        let _ = std::process::Command::new("umount").arg(&mnt).status();
    };
    let first = run(t.path(), &["run", "recipe.yaml", "--out", "tiny/out"]);
    if first.code != 0 {
        umount();
        panic!("the small run should fit in 2 MiB: {}", first.stderr);
    }
    let before = std::fs::read(mnt.join("out/results.json")).unwrap();
    // Fill the disk, then run again with a change so outputs must be rewritten.
    let _ = std::fs::write(mnt.join("filler"), vec![0u8; 4 * 1024 * 1024]);
    let r = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--out",
            "tiny/out",
            "--set",
            "window=7",
        ],
    );
    let after = std::fs::read(mnt.join("out/results.json"));
    umount();
    assert_ne!(r.code, 0, "a full disk must not pass silently");
    assert!(
        r.stderr.contains("No space left") || r.stderr.to_lowercase().contains("space"),
        "{}",
        r.stderr
    );
    assert_eq!(before, after.unwrap(), "previous outputs intact");
}
