//! Sharded runs without Slurm: shard assignment (balanced, deterministic, independent
//! of file order and content), shards run as concurrent processes on one cache giving
//! results byte-identical to a single-process run, shard logs and `retort status`,
//! and the `retort slurm` scripts and submission (with a stand-in `sbatch`).
//! The real-cluster test is `cluster/ci-slurm-test.sh`.

mod engine_common;

use engine::shard::{self, ShardSpec};
use engine_common::{cases, read_json, retort, run};
use std::collections::BTreeMap;
use std::path::Path;

/// Writes `n` invented absorbance spectra (one band each, centre varying with the
/// index; created in reverse order when asked) and a recipe over them.
fn series(dir: &Path, n: usize, reverse: bool, shift: f64) {
    std::fs::create_dir_all(dir.join("data")).unwrap();
    // The fixture recipe `basic` without its check (which names one of its items).
    let recipe = std::fs::read_to_string(cases().join("basic/recipe.yaml")).unwrap();
    let recipe = recipe.split("\nchecks:").next().unwrap().to_string() + "\n";
    std::fs::write(dir.join("recipe.yaml"), recipe).unwrap();
    let mut idx: Vec<usize> = (0..n).collect();
    if reverse {
        idx.reverse();
    }
    for i in idx {
        let centre = 1.9 + 0.02 * i as f64 + shift;
        let mut text = String::from("energy_eV,absorbance\n");
        for p in 0..41 {
            let x = 1.0 + 0.05 * p as f64;
            let y = 0.1 + (-((x - centre) / 0.2).powi(2)).exp();
            text.push_str(&format!("{x:.2},{y:.6}\n"));
        }
        std::fs::write(dir.join(format!("data/film_{i:02}.csv")), text).unwrap();
    }
}

fn assignment_of(recipe: &Path, n: usize) -> BTreeMap<(String, String), usize> {
    let p1 = engine::plan::build(recipe, &[], false, stages::CATALOG);
    let plan = p1.plan.expect("fixture recipe is valid");
    let mut idx = Default::default();
    let graph = engine::graph::expand(&plan, &mut idx).unwrap();
    let a = shard::assignment(&graph, n);
    let mut out = BTreeMap::new();
    for (node, s) in graph.nodes.iter().zip(a) {
        if let (Some(item), Some(s)) = (&node.item, s) {
            out.insert((plan.steps[node.step].id.clone(), item.clone()), s);
        }
    }
    out
}

#[test]
fn assignment_is_balanced_deterministic_and_independent_of_file_order_and_content() {
    let a = tempfile::tempdir().unwrap();
    let b = tempfile::tempdir().unwrap();
    series(a.path(), 10, false, 0.0);
    // Same names, files created in the opposite order, different bytes.
    series(b.path(), 10, true, 0.05);
    let one = assignment_of(&a.path().join("recipe.yaml"), 4);
    assert_eq!(one, assignment_of(&a.path().join("recipe.yaml"), 4));
    assert_eq!(one, assignment_of(&b.path().join("recipe.yaml"), 4));
    // 10 items x 3 fan-out steps: every item's chain in one shard, items 3/3/2/2.
    assert_eq!(one.len(), 30);
    let mut per_shard = [0usize; 4];
    let mut shard_of_item: BTreeMap<&str, usize> = BTreeMap::new();
    for ((_, item), s) in &one {
        per_shard[*s] += 1;
        let prev = shard_of_item.insert(item, *s);
        assert!(
            prev.is_none_or(|p| p == *s),
            "item {item} split across shards"
        );
    }
    assert_eq!(per_shard, [9, 9, 6, 6]);
    // More shards than items: the extra shards are empty, none gets two items.
    let wide = assignment_of(&a.path().join("recipe.yaml"), 16);
    let mut count = BTreeMap::new();
    for s in wide.values() {
        *count.entry(*s).or_insert(0) += 1;
    }
    assert!(count.values().all(|&c| c == 3));
    assert_eq!(count.len(), 10);
}

#[test]
fn shard_selection_is_closed_upwards_and_covers_every_fan_out_node_once() {
    let t = tempfile::tempdir().unwrap();
    series(t.path(), 7, false, 0.0);
    let p1 = engine::plan::build(&t.path().join("recipe.yaml"), &[], false, stages::CATALOG);
    let plan = p1.plan.unwrap();
    let mut idx = Default::default();
    let graph = engine::graph::expand(&plan, &mut idx).unwrap();
    let mut owners = vec![0usize; graph.nodes.len()];
    for k in 1..=3 {
        let keep = shard::select(&graph, ShardSpec { k, n: 3 });
        for (i, node) in graph.nodes.iter().enumerate() {
            if keep[i] {
                for &u in &node.upstream {
                    assert!(keep[u], "shard {k} keeps a node without its input");
                }
                owners[i] += 1;
            }
        }
        let sub = shard::subgraph(&graph, &keep).unwrap();
        assert_eq!(sub.nodes.len(), keep.iter().filter(|k| **k).count());
    }
    for (i, node) in graph.nodes.iter().enumerate() {
        let want = usize::from(node.item.is_some());
        assert_eq!(
            owners[i], want,
            "node {i} ({:?}) owned {} times",
            node.item, owners[i]
        );
    }
}

#[test]
fn concurrent_shards_then_a_plain_run_match_a_single_process_run_byte_for_byte() {
    let t = tempfile::tempdir().unwrap();
    series(t.path(), 12, false, 0.0);
    let cache = t.path().join("shared-cache");
    // The four shards at once, as four processes on one cache.
    let children: Vec<_> = (1..=4)
        .map(|k| {
            std::process::Command::new(engine_common::binary())
                .current_dir(t.path())
                .env_remove("RETORT_CACHE")
                .args([
                    "run",
                    "recipe.yaml",
                    "--shard",
                    &format!("{k}/4"),
                    "--quiet",
                ])
                .arg("--cache")
                .arg(&cache)
                .stdout(std::process::Stdio::piped())
                .stderr(std::process::Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    for (k, c) in children.into_iter().enumerate() {
        let out = c.wait_with_output().unwrap();
        assert!(
            out.status.success(),
            "shard {} failed: {}",
            k + 1,
            String::from_utf8_lossy(&out.stderr)
        );
    }
    // Shard runs write no output folder.
    assert!(!t.path().join("out").exists());
    let st = run(
        t.path(),
        &["status", "recipe.yaml", "--cache", cache.to_str().unwrap()],
    );
    assert_eq!(st.code, 0);
    assert!(
        st.stdout
            .contains("37 nodes: 36 done (in the cache), 0 failed, 1 pending"),
        "{}",
        st.stdout
    );
    assert_eq!(st.stdout.matches("; finished ").count(), 4, "{}", st.stdout);
    // Every shard published its own segment files (host and pid in the name).
    let segments: Vec<_> = std::fs::read_dir(cache.join("segments"))
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "seg"))
        .collect();
    assert!(segments.len() >= 3, "{segments:?}");
    let names: std::collections::BTreeSet<_> = segments.iter().map(|p| p.file_name()).collect();
    assert_eq!(names.len(), segments.len());
    let gathered = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--cache",
            cache.to_str().unwrap(),
            "--out",
            "sharded",
        ],
    );
    assert_eq!(gathered.code, 0);
    // Only the gathering step ran; every fan-out node came from the shards.
    assert!(
        gathered.stdout.contains("37 nodes: 1 ran, 36 cached"),
        "{}",
        gathered.stdout
    );
    let single = run(
        t.path(),
        &["run", "recipe.yaml", "--no-cache", "--out", "single"],
    );
    assert_eq!(single.code, 0);
    assert_eq!(
        std::fs::read(t.path().join("sharded/results.json")).unwrap(),
        std::fs::read(t.path().join("single/results.json")).unwrap()
    );
    assert_eq!(
        std::fs::read(t.path().join("sharded/tables/results.csv")).unwrap(),
        std::fs::read(t.path().join("single/tables/results.csv")).unwrap()
    );
    // Each shard log lists its nodes with timings; together they cover the fan-out.
    let logs = shard::read_logs(
        &cache
            .canonicalize()
            .unwrap()
            .join("shards")
            .read_dir()
            .unwrap()
            .next()
            .unwrap()
            .unwrap()
            .path(),
    );
    assert_eq!(logs.len(), 4);
    let total: usize = logs
        .iter()
        .map(|(_, l)| l.as_ref().unwrap().nodes.ran)
        .sum();
    assert_eq!(total, 36);
    for (_, l) in &logs {
        let l = l.as_ref().unwrap();
        assert_eq!(l.state, "finished");
        assert_eq!(l.timings.len(), l.nodes.total);
    }
    // A damaged entry in the shared cache (as a faulty network filesystem might leave)
    // is detected by its checksum and recomputed, never trusted.
    let mut bytes = std::fs::read(&segments[0]).unwrap();
    let last = bytes.len() - 1;
    bytes[last] ^= 0x5a;
    std::fs::write(&segments[0], &bytes).unwrap();
    let again = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--cache",
            cache.to_str().unwrap(),
            "--out",
            "again",
        ],
    );
    assert_eq!(again.code, 0);
    assert!(
        again.stdout.contains("1 corrupt cache entries recomputed"),
        "{}",
        again.stdout
    );
    assert_eq!(
        std::fs::read(t.path().join("again/results.json")).unwrap(),
        std::fs::read(t.path().join("single/results.json")).unwrap()
    );
}

#[test]
fn a_failed_item_is_recorded_in_its_shard_log_and_listed_by_status() {
    let t = tempfile::tempdir().unwrap();
    series(t.path(), 4, false, 0.0);
    std::fs::write(
        t.path().join("data/film_02.csv"),
        "energy_eV,absorbance\n1.0,abc\n",
    )
    .unwrap();
    let cache = t.path().join("c");
    let c = cache.to_str().unwrap();
    let mut codes = Vec::new();
    for k in 1..=2 {
        codes.push(
            run(
                t.path(),
                &[
                    "run",
                    "recipe.yaml",
                    "--shard",
                    &format!("{k}/2"),
                    "--cache",
                    c,
                ],
            )
            .code,
        );
    }
    codes.sort();
    assert_eq!(codes, [0, 1]);
    let st = run(t.path(), &["status", "recipe.yaml", "--cache", c]);
    assert_eq!(st.code, 1);
    assert!(st.stdout.contains("failed nodes:"), "{}", st.stdout);
    assert!(st.stdout.contains("raw [film_02]: "), "{}", st.stdout);
    assert!(
        st.stdout.contains("film_02.csv"),
        "the error names the file: {}",
        st.stdout
    );
    // smooth and peak of film_02 and the table are pending; 9 fan-out nodes done.
    assert!(
        st.stdout
            .contains("13 nodes: 9 done (in the cache), 1 failed, 3 pending"),
        "{}",
        st.stdout
    );
}

/// A stand-in for sbatch that records its arguments and prints job ids.
fn fake_sbatch(dir: &Path) -> std::path::PathBuf {
    let p = dir.join("sbatch");
    std::fs::write(
        &p,
        "#!/bin/sh\necho \"$@\" >> \"$(dirname \"$0\")/calls\"\nn=$(wc -l < \"$(dirname \"$0\")/calls\")\necho $((1000 + n))\n",
    )
    .unwrap();
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&p, std::fs::Permissions::from_mode(0o755)).unwrap();
    }
    p
}

#[test]
fn slurm_scripts_use_absolute_paths_and_resubmission_runs_only_missing_shards() {
    let t = tempfile::tempdir().unwrap();
    series(t.path(), 8, false, 0.0);
    let cache = t.path().join("cache");
    let c = cache.to_str().unwrap();
    let dry = run(
        t.path(),
        &[
            "slurm",
            "recipe.yaml",
            "--shards",
            "4",
            "--cache",
            c,
            "--partition",
            "short",
            "--time",
            "20:00",
            "--cpus",
            "2",
            "--mem",
            "3G",
            "--account",
            "lab7",
            "--prelude",
            "module load toolchain",
            "--dry-run",
        ],
    );
    assert_eq!(dry.code, 0);
    let exe = engine_common::binary().canonicalize().unwrap();
    let recipe = t.path().join("recipe.yaml").canonicalize().unwrap();
    for want in [
        "#SBATCH --array=0-3".to_string(),
        "#SBATCH --partition=short".into(),
        "#SBATCH --time=20:00".into(),
        "#SBATCH --cpus-per-task=2".into(),
        "#SBATCH --mem=3G".into(),
        "#SBATCH --account=lab7".into(),
        "module load toolchain".into(),
        "--shard \"$K/4\"".into(),
        "K=$((SLURM_ARRAY_TASK_ID + 1))".into(),
        "#SBATCH --kill-on-invalid-dep=yes".into(),
        format!("{} run {}", exe.display(), recipe.display()),
    ] {
        assert!(
            dry.stdout.contains(&want),
            "missing `{want}` in\n{}",
            dry.stdout
        );
    }
    // Dry mode writes nothing.
    assert!(!t.path().join("slurm-job").exists());
    assert!(!cache.exists());

    let bin = tempfile::tempdir().unwrap();
    let sbatch = fake_sbatch(bin.path());
    let submit = |t: &Path| {
        let out = retort(t)
            .env("RETORT_SBATCH", &sbatch)
            .args([
                "slurm",
                "recipe.yaml",
                "--shards",
                "4",
                "--cache",
                c,
                "--out",
                "job",
                "--submit",
            ])
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8_lossy(&out.stdout).to_string()
    };
    let first = submit(t.path());
    assert!(
        first.contains("submitted shards job 1001 (array tasks 0-3 of 0-3) and gather job 1002"),
        "{first}"
    );
    let calls = std::fs::read_to_string(bin.path().join("calls")).unwrap();
    let lines: Vec<&str> = calls.lines().collect();
    let job = t.path().join("job").canonicalize().unwrap();
    assert_eq!(
        lines[0],
        format!(
            "--parsable --array=0-3 {}/slurm/shards.sbatch",
            job.display()
        )
    );
    assert_eq!(
        lines[1],
        format!(
            "--parsable --dependency=afterok:1001 {}/slurm/gather.sbatch",
            job.display()
        )
    );
    let script = std::fs::read_to_string(job.join("slurm/shards.sbatch")).unwrap();
    assert!(script.contains(&format!(
        "--cache {}",
        cache.canonicalize().unwrap().display()
    )));
    // Run shards 1, 2 and 4 by hand; resubmission asks only for task 2 (shard 3).
    for k in [1, 2, 4] {
        assert_eq!(
            run(
                t.path(),
                &[
                    "run",
                    "recipe.yaml",
                    "--shard",
                    &format!("{k}/4"),
                    "--cache",
                    c
                ]
            )
            .code,
            0
        );
    }
    let second = submit(t.path());
    assert!(second.contains("(array tasks 2 of 0-3)"), "{second}");
    let st = run(t.path(), &["status", "job"]);
    assert_eq!(st.code, 0);
    assert!(
        st.stdout
            .contains("shard 3/4: 0/0/6 of 6; no log: not started"),
        "{}",
        st.stdout
    );
    assert!(
        st.stdout.contains("shards job 1003 (tasks 2)"),
        "{}",
        st.stdout
    );
    assert_eq!(
        run(
            t.path(),
            &["run", "recipe.yaml", "--shard", "3/4", "--cache", c]
        )
        .code,
        0
    );
    let third = submit(t.path());
    assert!(third.contains("submitting the gather job only"), "{third}");
    let calls = std::fs::read_to_string(bin.path().join("calls")).unwrap();
    assert_eq!(
        calls.lines().last().unwrap(),
        format!("--parsable {}/slurm/gather.sbatch", job.display())
    );
    let spec = read_json(&job.join("slurm/job.json"));
    assert_eq!(spec["submissions"].as_array().unwrap().len(), 3);
}
