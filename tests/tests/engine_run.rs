//! End-to-end runs of the real `retort` binary over the fixture recipes in
//! `tests/cases/engine/`: outputs, caching, reruns, determinism, failures, kills.

mod engine_common;
use engine_common::*;
use std::path::Path;
use std::time::{Duration, SystemTime};

fn results(out: &Path) -> Vec<u8> {
    std::fs::read(out.join("results.json")).unwrap()
}

#[test]
fn a_run_writes_every_output_and_a_second_run_is_all_cached_and_identical() {
    let t = fixture("basic");
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    let out = t.path().join("out");
    for f in [
        "results.json",
        "tables/results.csv",
        "provenance.json",
        "run.json",
        "report.md",
    ] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    assert!(t.path().join(".retort/segments").is_dir());
    // 3 files x (raw, smooth, peak) + 1 table.
    assert_eq!(counts(&out), (10, 0, 0, 0));
    let first = results(&out);
    let v: serde_json::Value = serde_json::from_slice(&first).unwrap();
    assert_eq!(v["schema_version"], 1);
    assert_eq!(v["recipe"], "bands");
    let recs = v["results"].as_array().unwrap();
    assert!(!recs.is_empty());
    for r in recs {
        for k in [
            "step",
            "item",
            "name",
            "value",
            "uncertainty",
            "unit",
            "node",
        ] {
            assert!(r.get(k).is_some(), "record lacks {k}: {r}");
        }
    }
    // Every record is traceable to a node of run.json and an activity of provenance.
    let rec = read_json(&out.join("run.json"));
    let prov = read_json(&out.join("provenance.json"));
    for r in recs {
        let key = r["node"].as_str().unwrap();
        assert!(rec["nodes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n["key"] == key));
        assert!(prov["activity"].get(format!("retort:run/{key}")).is_some());
    }
    assert_eq!(
        prov["agent"]["retort:engine"]["prov:type"],
        "prov:SoftwareAgent"
    );
    assert!(prov["entity"]
        .as_object()
        .unwrap()
        .keys()
        .any(|k| k.starts_with("retort:file/")));
    assert!(prov["used"].as_object().unwrap().len() >= 10);
    // The check in the recipe passed (film_a's maximum near 2.0 eV, by construction).
    assert_eq!(rec["checks"][0]["passed"], true);
    let csv = std::fs::read_to_string(out.join("tables/results.csv")).unwrap();
    assert!(csv.starts_with("step,item,name,value,uncertainty,unit,node\n"));
    assert_eq!(csv.lines().count(), recs.len() + 1);

    // Nothing changed: the output folder is left as it is.
    let before = std::fs::read(out.join("run.json")).unwrap();
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    assert!(
        r.stdout.contains("10 nodes, all cached: the output in ")
            && r.stdout.contains(" is up to date"),
        "{}",
        r.stdout
    );
    assert_eq!(before, std::fs::read(out.join("run.json")).unwrap());
    // --rewrite writes it again, from the cache.
    let r = run(t.path(), &["run", "recipe.yaml", "--rewrite"]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("10 nodes: 0 ran, 10 cached"));
    assert_eq!(counts(&out), (0, 10, 0, 0));
    assert_eq!(first, results(&out), "results.json changed between runs");
    // A damaged output folder is not up to date.
    std::fs::remove_file(out.join("report.md")).unwrap();
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert!(r.stdout.contains("10 nodes: 0 ran, 10 cached"));
    assert!(out.join("report.md").is_file());
}

#[test]
fn changing_one_option_reruns_only_the_nodes_downstream_of_it() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let recipe = t.path().join("recipe.yaml");
    let text = std::fs::read_to_string(&recipe).unwrap();
    let text = text.replace(
        "peak: { stage: measure.maximum, from: smooth }",
        "peak: { stage: measure.maximum, from: smooth, options: { range: [1.0, 4.5] } }",
    );
    std::fs::write(&recipe, text).unwrap();
    let p = run(t.path(), &["plan", "recipe.yaml"]);
    assert_eq!(p.code, 0);
    assert!(p.stdout.contains("10 nodes, 4 to run, 6 cached"));
    assert!(p.stdout.contains("  cached   raw [film_a]\n"));
    assert!(p.stdout.contains("  cached   smooth [film_c]\n"));
    assert!(p
        .stdout
        .contains("  run      peak [film_b]  (changed options)\n"));
    assert!(p
        .stdout
        .contains("  run      table  (changed input: peak [film_a])\n"));
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    assert_eq!(counts(&t.path().join("out")), (4, 6, 0, 0));
    assert_eq!(
        status(&t.path().join("out"), "smooth", Some("film_a")),
        "Cached"
    );
}

#[test]
fn a_parameter_set_on_the_command_line_changes_its_steps_only() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let p = run(t.path(), &["plan", "recipe.yaml", "--set", "window=7"]);
    assert!(p
        .stdout
        .contains("  run      smooth [film_a]  (changed options)\n"));
    assert_eq!(
        run(t.path(), &["run", "recipe.yaml", "--set", "window=7"]).code,
        0
    );
    let out = t.path().join("out");
    assert_eq!(counts(&out), (7, 3, 0, 0));
    let rec = read_json(&out.join("run.json"));
    let w = find(&rec, "parameters", "name", "window").clone();
    assert_eq!(w["value"], 7);
    assert_eq!(w["overridden"], true);
    let smooth = find(&rec, "steps", "id", "smooth").clone();
    assert_eq!(smooth["options"]["window"], 7);
}

#[test]
fn changed_bytes_rerun_that_items_chain_and_a_touch_reruns_nothing() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let file = t.path().join("data/film_b.csv");
    // Touch: new mtime, same bytes.
    let f = std::fs::File::options().write(true).open(&file).unwrap();
    f.set_modified(SystemTime::now() + Duration::from_secs(5))
        .unwrap();
    drop(f);
    let p = run(t.path(), &["plan", "recipe.yaml"]);
    assert!(p.stdout.contains("10 nodes, 0 to run, 10 cached"));
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains(" is up to date"), "{}", r.stdout);
    assert_eq!(run(t.path(), &["run", "recipe.yaml", "--rewrite"]).code, 0);
    assert_eq!(counts(&t.path().join("out")), (0, 10, 0, 0));
    // New bytes: film_b's raw, smooth, peak and the gathered table rerun.
    let text = std::fs::read_to_string(&file).unwrap();
    std::fs::write(&file, text.replacen("0.5", "0.6", 1)).unwrap();
    let p = run(t.path(), &["plan", "recipe.yaml"]);
    assert!(p.stdout.contains("10 nodes, 4 to run, 6 cached"));
    assert!(p
        .stdout
        .contains("  run      raw [film_b]  (changed input file data/film_b.csv)\n"));
    assert!(p.stdout.contains("  cached   raw [film_a]\n"));
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let out = t.path().join("out");
    assert_eq!(counts(&out), (4, 6, 0, 0));
    assert_eq!(status(&out, "peak", Some("film_b")), "Ran");
    assert_eq!(status(&out, "peak", Some("film_c")), "Cached");
}

#[test]
fn one_and_two_jobs_give_byte_identical_results() {
    let t = fixture("basic");
    for (jobs, out) in [("1", "one"), ("2", "two")] {
        let args = [
            "run",
            "recipe.yaml",
            "--no-cache",
            "--jobs",
            jobs,
            "--out",
            out,
        ];
        assert_eq!(run(t.path(), &args).code, 0);
    }
    assert_eq!(counts(&t.path().join("two")), (10, 0, 0, 0));
    assert_eq!(
        results(&t.path().join("one")),
        results(&t.path().join("two"))
    );
    assert_eq!(
        std::fs::read(t.path().join("one/tables/results.csv")).unwrap(),
        std::fs::read(t.path().join("two/tables/results.csv")).unwrap()
    );
    assert!(
        !t.path().join(".retort").exists(),
        "--no-cache must not write the recipe's cache"
    );
}

#[test]
fn a_failing_item_exits_1_and_its_siblings_results_are_present() {
    let t = fixture("basic");
    std::fs::write(
        t.path().join("data/film_d.csv"),
        "energy_eV,absorbance\n1.0,0.5\nnot,a number\n",
    )
    .unwrap();
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 1);
    assert!(
        r.stderr
            .contains("FAILED   raw [film_d]: data/film_d.csv:3:"),
        "the failure names stage input, file and line"
    );
    let out = t.path().join("out");
    // 4 raw (1 failed) + 3 smooth + 3 peak + the table ran; film_d's smooth and peak were
    // skipped. The gathering table goes on without film_d and says so in a note.
    assert_eq!(counts(&out), (10, 0, 1, 2));
    let v = read_json(&out.join("results.json"));
    for item in ["film_a", "film_b", "film_c"] {
        assert!(v["results"]
            .as_array()
            .unwrap()
            .iter()
            .any(|r| r["item"] == item && r["name"] == "max_position"));
    }
    let failures = v["failures"].as_array().unwrap();
    let f = failures.iter().find(|f| f["step"] == "raw").unwrap();
    assert_eq!(f["item"], "film_d");
    assert_eq!(f["stage"], "import.delimited");
    assert_eq!(f["status"], "failed");
    assert!(!failures.iter().any(|f| f["step"] == "table"));
    let run_json = read_json(&out.join("run.json"));
    let table = run_json["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|n| n["step"] == "table")
        .unwrap();
    assert_eq!(table["status"], "Ran");
    let md = std::fs::read_to_string(out.join("report.md")).unwrap();
    assert!(
        md.contains("gathered without 1 input(s) that did not finish: raw"),
        "the table's note names the missing item"
    );
    // --fail-fast stops scheduling after the first failure.
    let r = run(
        t.path(),
        &[
            "run",
            "recipe.yaml",
            "--no-cache",
            "--fail-fast",
            "--jobs",
            "1",
            "--out",
            "ff",
        ],
    );
    assert_eq!(r.code, 1);
    let rec = read_json(&t.path().join("ff/run.json"));
    assert!(rec["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .any(|n| n["status"]["Skipped"]["because"]
            .as_str()
            .is_some_and(|b| b.contains("--fail-fast"))));
}

#[test]
fn a_failed_check_exits_3() {
    let t = fixture("basic");
    let recipe = t.path().join("recipe.yaml");
    let text = std::fs::read_to_string(&recipe)
        .unwrap()
        .replace("within: [1.9, 2.1]", "within: [3.9, 4.1]");
    std::fs::write(&recipe, text).unwrap();
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 3);
    assert!(r
        .stderr
        .contains("check failed: peak.max_position [film_a]: found 2"));
    let rec = read_json(&t.path().join("out/run.json"));
    assert_eq!(rec["checks"][0]["passed"], false);
}

#[test]
fn a_corrupt_cache_entry_is_recomputed() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let out = t.path().join("out");
    let clean = results(&out);
    let rec = read_json(&out.join("run.json"));
    let key = rec["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|n| n["step"] == "smooth" && n["item"] == "film_a")
        .unwrap()["key"]
        .as_str()
        .unwrap()
        .to_string();
    // Flip a byte inside the entry, wherever the cache keeps it.
    let locate = || {
        engine::cache::Cache::open(&t.path().join(".retort"), true)
            .unwrap()
            .locate(&key)
            .unwrap()
    };
    let (file, offset, len) = locate();
    let mut bytes = std::fs::read(&file).unwrap();
    bytes[(offset + len) as usize - 3] ^= 0x5a;
    std::fs::write(&file, &bytes).unwrap();
    let p = run(t.path(), &["plan", "recipe.yaml"]);
    assert!(p
        .stdout
        .contains("  run      smooth [film_a]  (cache entry corrupt (checksum mismatch))\n"));
    // A run that reads the entry finds the damage (a run with nothing to do reads
    // nothing: --rewrite makes it read every head, and small bodies with them).
    let r = run(t.path(), &["run", "recipe.yaml", "--rewrite"]);
    assert_eq!(r.code, 0);
    assert!(r
        .stderr
        .contains("cache entry of smooth [film_a] was corrupt (checksum mismatch); recomputed"));
    assert!(r.stdout.contains("1 corrupt cache entries recomputed"));
    assert_eq!(counts(&out), (1, 9, 0, 0));
    assert_eq!(clean, results(&out));
    // Truncated entries too: the recomputed entry is alone in the newest segment.
    let (file2, offset2, len2) = locate();
    assert_ne!(file2, file);
    let mut bytes = std::fs::read(&file2).unwrap();
    bytes.truncate((offset2 + len2) as usize - 5);
    std::fs::write(&file2, &bytes).unwrap();
    let r = run(t.path(), &["run", "recipe.yaml", "--rewrite"]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("1 corrupt cache entries recomputed"));
    assert_eq!(counts(&out), (1, 9, 0, 0));
    assert_eq!(clean, results(&out));
}

#[test]
fn sigkill_mid_run_then_rerun_gives_the_results_of_a_clean_run() {
    let t = fixture("basic");
    // Enough work that the run is still going when it is killed.
    for i in 0..400 {
        let mut s = String::from("energy_eV,absorbance\n");
        for j in 0..2000 {
            s.push_str(&format!(
                "{},{}\n",
                1.0 + j as f64 * 0.01,
                ((i * 7 + j * 13) % 101) as f64
            ));
        }
        std::fs::write(t.path().join(format!("data/bulk_{i:03}.csv")), s).unwrap();
    }
    let bin = binary();
    let mut child = std::process::Command::new(&bin)
        .current_dir(t.path())
        .args(["run", "recipe.yaml", "--jobs", "1", "--quiet"])
        .spawn()
        .unwrap();
    // Kill once some (not all) work is in the cache.
    let segments = t.path().join(".retort/segments");
    let count = || std::fs::read_dir(&segments).map_or(0, |d| d.count());
    let t0 = std::time::Instant::now();
    while count() < 1 && t0.elapsed() < Duration::from_secs(60) {
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().unwrap(); // SIGKILL on Unix
    let _ = child.wait();
    assert!(count() > 0, "some work was saved before the kill");
    assert!(
        !t.path().join("out").exists(),
        "the killed run wrote no output"
    );
    let r = run(t.path(), &["run", "recipe.yaml", "--quiet"]);
    assert_eq!(r.code, 0);
    let out = t.path().join("out");
    let (ran, cached, failed, skipped) = counts(&out);
    assert_eq!((failed, skipped), (0, 0));
    assert_eq!(ran + cached, 403 * 3 + 1);
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
    assert_eq!(results(&out), results(&t.path().join("clean")));
}

#[test]
fn includes_are_namespaced_and_identical_work_from_two_recipes_runs_once() {
    let t = fixture("chapter");
    copy_dir(&cases().join("basic"), &t.path().join("bands"));
    let r = run(t.path(), &["run", "chapter.yaml"]);
    assert_eq!(r.code, 0);
    let out = t.path().join("out");
    let rec = read_json(&out.join("run.json"));
    let nodes = rec["nodes"].as_array().unwrap();
    // 3 includes x 10 nodes + 3 letters_raw + 1 summary.
    assert_eq!(nodes.len(), 34);
    // first and third are the same work; second shares only the imports; `summary`
    // gathers second/peak exactly as second/table does.
    // first: 10; second: 3 smooth + 3 peak + 1 table; letters_raw: 3.
    let unique: std::collections::BTreeSet<&str> =
        nodes.iter().map(|n| n["key"].as_str().unwrap()).collect();
    assert_eq!(unique.len(), 20);
    assert_eq!(
        r.stderr.matches("ran      ").count(),
        20,
        "each distinct node runs once"
    );
    let steps: Vec<&str> = rec["steps"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["id"].as_str().unwrap())
        .collect();
    assert!(
        steps.contains(&"first/peak")
            && steps.contains(&"second/smooth")
            && steps.contains(&"third/table")
    );
    let second = find(&rec, "steps", "id", "second/smooth").clone();
    assert_eq!(second["options"]["window"], 7);
    let first = find(&rec, "steps", "id", "first/smooth").clone();
    assert_eq!(first["options"]["window"], 5);
    // Items named by the regex's first capture group.
    let letters: Vec<&str> = nodes
        .iter()
        .filter(|n| n["step"] == "letters_raw")
        .map(|n| n["item"].as_str().unwrap())
        .collect();
    assert_eq!(letters, ["a", "b", "c"]);
    // Checks of included recipes run in their namespace.
    assert_eq!(rec["checks"].as_array().unwrap().len(), 3);
    assert_eq!(rec["recipes"].as_array().unwrap().len(), 4);
}

#[test]
fn the_catalog_lists_every_stage_with_options_units_and_defaults() {
    let t = tempfile::tempdir().unwrap();
    let r = run(t.path(), &["stages", "--json"]);
    assert_eq!(r.code, 0);
    let v: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    let names: Vec<&str> = v["stages"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["name"].as_str().unwrap())
        .collect();
    for s in stages::CATALOG {
        assert!(names.contains(&s.info().name));
    }
    let r = run(t.path(), &["stages", "smooth.moving_average"]);
    assert_eq!(r.code, 0);
    assert!(r.stdout.contains("window") && r.stdout.contains("default 5 (points)"));
    let r = run(t.path(), &["stages", "smooth.moving_avg"]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("did you mean `smooth.moving_average`?"));
}

#[test]
fn report_rerenders_from_run_json_and_the_cache() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let report = t.path().join("out/report.md");
    let before = std::fs::read(&report).unwrap();
    std::fs::remove_file(&report).unwrap();
    let r = run(t.path(), &["report", "out"]);
    assert_eq!(r.code, 0);
    assert_eq!(std::fs::read(&report).unwrap(), before);
}

#[test]
fn a_failed_run_keeps_the_previous_output() {
    let t = fixture("basic");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let before = results(&t.path().join("out"));
    std::fs::write(
        t.path().join("recipe.yaml"),
        "id: broken\nsteps:\n  a: { stage: nope.nothing }\n",
    )
    .unwrap();
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 2);
    assert_eq!(results(&t.path().join("out")), before);
}

#[test]
fn an_output_folder_that_is_not_ours_is_never_replaced() {
    let t = fixture("basic");
    for out in [".", "data"] {
        let r = run(t.path(), &["run", "recipe.yaml", "--out", out]);
        assert_eq!(r.code, 2, "--out {out} must be refused");
    }
    assert!(t.path().join("recipe.yaml").is_file());
    assert!(t.path().join("data/film_a.csv").is_file());
    let r = run(t.path(), &["run", "recipe.yaml", "--out", "data"]);
    assert!(r.stderr.contains("is not a retort output folder"));
}

#[test]
fn temporary_folders_left_by_a_killed_run_are_cleaned_up() {
    let t = fixture("basic");
    // A process id that cannot be running (above the kernel's pid_max limit).
    let stale = t.path().join(".out.tmp-4294967295-abc");
    std::fs::create_dir_all(&stale).unwrap();
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    assert!(!stale.exists());
    let left: Vec<_> = std::fs::read_dir(t.path())
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().to_string())
        .filter(|n| n.starts_with(".out."))
        .collect();
    assert!(left.is_empty(), "{left:?}");
}

#[test]
fn files_outside_the_recipe_folder_need_allow_outside_even_through_a_symlink() {
    let t = fixture("basic");
    let sub = t.path().join("sub");
    std::fs::create_dir_all(&sub).unwrap();
    let recipe = "id: outside\nsamples:\n  s: ../data/*.csv\nsteps:\n  raw: { stage: import.delimited, from: s }\n";
    std::fs::write(sub.join("up.yaml"), recipe).unwrap();
    let r = run(&sub, &["check", "up.yaml"]);
    assert_eq!(r.code, 2);
    assert!(r
        .stderr
        .contains("up.yaml:3:6: error: `../data/*.csv` is outside the recipe's folder"));
    assert_eq!(run(&sub, &["run", "up.yaml", "--allow-outside"]).code, 0);
    #[cfg(unix)]
    {
        std::os::unix::fs::symlink(t.path().join("data"), sub.join("link")).unwrap();
        let recipe = "id: link\nsamples:\n  s: link/*.csv\nsteps:\n  raw: { stage: import.delimited, from: s }\n";
        std::fs::write(sub.join("link.yaml"), recipe).unwrap();
        let r = run(&sub, &["check", "link.yaml"]);
        assert_eq!(r.code, 2);
        assert!(r.stderr.contains("is outside the recipe's folder"));
        assert_eq!(
            run(&sub, &["check", "link.yaml", "--allow-outside"]).code,
            0
        );
    }
}

#[test]
fn two_runs_at_once_on_one_cache_both_succeed_with_the_same_results() {
    let t = fixture("basic");
    let spawn = |out: &str| {
        std::process::Command::new(binary())
            .current_dir(t.path())
            .args(["run", "recipe.yaml", "--quiet", "--out", out])
            .spawn()
            .unwrap()
    };
    let (mut a, mut b) = (spawn("a"), spawn("b"));
    assert!(a.wait().unwrap().success());
    assert!(b.wait().unwrap().success());
    assert_eq!(results(&t.path().join("a")), results(&t.path().join("b")));
    assert_eq!(run(t.path(), &["run", "recipe.yaml", "--out", "c"]).code, 0);
    assert_eq!(counts(&t.path().join("c")), (0, 10, 0, 0));
    assert_eq!(results(&t.path().join("a")), results(&t.path().join("c")));
}

/// The cache key of a node in an output folder's run.json.
fn node_key(out: &Path, step: &str, item: &str) -> String {
    let rec = read_json(&out.join("run.json"));
    rec["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .find(|n| n["step"] == step && n["item"] == item)
        .unwrap()["key"]
        .as_str()
        .unwrap()
        .to_string()
}

/// The run succeeded and says it found `node`'s cache entry damaged and recomputed it.
fn assert_recomputed(r: &Ran, node: &str) {
    assert_eq!(r.code, 0, "{}", r.stderr);
    let said = format!("cache entry of {node} was corrupt (checksum mismatch); recomputed");
    assert!(r.stderr.contains(&said), "{}", r.stderr);
}

/// Flips a byte `from_end` bytes before the end of a cache entry, wherever it is kept.
fn damage_entry(root: &Path, key: &str, from_end: u64) {
    let (file, offset, len) = engine::cache::Cache::open(&root.join(".retort"), true)
        .unwrap()
        .locate(key)
        .unwrap();
    let mut bytes = std::fs::read(&file).unwrap();
    bytes[(offset + len - from_end) as usize] ^= 0x5a;
    std::fs::write(&file, &bytes).unwrap();
}

#[test]
fn damaged_large_arrays_are_found_when_read_and_recomputed() {
    let t = fixture("basic");
    // 4,000 points: arrays too large to be checked along with the entry's head.
    let mut text = String::from("energy_eV,absorbance\n");
    for i in 0..4000 {
        let x = 1.0 + f64::from(i) * 0.001;
        text.push_str(&format!("{x:.4},{:.6}\n", (-(x - 3.0).powi(2)).exp()));
    }
    std::fs::write(t.path().join("data/film_big.csv"), text).unwrap();
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    let out = t.path().join("out");
    let clean = results(&out);
    let key = node_key(&out, "raw", "film_big");
    damage_entry(t.path(), &key, 3);
    // Drawing its figure into a fresh folder reads the arrays: found, recomputed.
    let r = run(t.path(), &["run", "recipe.yaml", "--out", "fresh"]);
    assert_recomputed(&r, "raw [film_big]");
    assert!(r.stdout.contains("1 corrupt cache entries recomputed"));
    assert_eq!(clean, results(&t.path().join("fresh")));
    // A dependent that has to run reads it too: found, recomputed, then used.
    damage_entry(t.path(), &key, 3);
    let r = run(t.path(), &["run", "recipe.yaml", "--set", "window=7"]);
    assert_recomputed(&r, "raw [film_big]");
    assert_eq!(status(&out, "raw", Some("film_big")), "Ran");
    assert_eq!(status(&out, "smooth", Some("film_big")), "Ran");
}

#[test]
fn checks_take_parameters_and_say_when_one_is_not_a_number() {
    let t = fixture("basic");
    let recipe = t.path().join("recipe.yaml");
    let text = std::fs::read_to_string(&recipe).unwrap();
    let text = text
        .replace(
            "  window: { value: 5, unit: points, about: smoothing window }\n",
            "  window: { value: 5, unit: points, about: smoothing window }\n  peak_at: { value: 2.0, unit: eV, about: expected band maximum }\n  lower: { value: 1.5, unit: eV, about: lowest band maximum }\n  label: { value: film, about: a word }\n",
        )
        .replace(
            "  - { result: peak.max_position, item: film_a, within: [1.9, 2.1] }",
            "  - { result: peak.max_position, item: film_a, expect: \"{{ peak_at }}\", tolerance: 0.1 }\n  - { result: peak.max_position, item: film_a, within: [\"{{ lower }}\", 2.5] }",
        );
    std::fs::write(&recipe, &text).unwrap();
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let rec = read_json(&t.path().join("out/run.json"));
    assert_eq!(rec["checks"][0]["expected"], "2 ± 0.1");
    assert_eq!(rec["checks"][1]["expected"], "between 1.5 and 2.5");
    // Overridden from the command line, the expectation moves with it.
    let r = run(t.path(), &["run", "recipe.yaml", "--set", "peak_at=3.0"]);
    assert_eq!(r.code, 3, "{}", r.stderr);
    assert!(r.stderr.contains("expected 3 ± 0.1"), "{}", r.stderr);
    // A parameter that is not a number is an error at the check, before anything runs.
    std::fs::write(
        &recipe,
        text.replace("\"{{ peak_at }}\", tolerance", "\"{{ label }}\", tolerance"),
    )
    .unwrap();
    let r = run(t.path(), &["check", "recipe.yaml"]);
    assert_eq!(r.code, 2);
    assert!(
        r.stderr.contains("expected a number, found `film`"),
        "{}",
        r.stderr
    );
    assert!(r.stderr.contains("recipe.yaml:"), "{}", r.stderr);
}

#[test]
fn output_into_a_closed_pipe_ends_quietly() {
    use std::io::Read;
    // docs/stages.md is far larger than a pipe's buffer, so the writer meets the
    // closed end.
    let mut child = std::process::Command::new(binary())
        .args(["stages", "--markdown"])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let mut first = [0u8; 64];
    child.stdout.take().unwrap().read_exact(&mut first).unwrap();
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(!stderr.contains("panicked"), "{stderr}");
}

#[test]
fn prune_keeps_the_recipe_and_the_last_runs_and_removes_older_results() {
    let t = fixture("basic");
    for window in ["5", "7", "9"] {
        let set = format!("window={window}");
        assert_eq!(
            run(t.path(), &["run", "recipe.yaml", "--set", &set]).code,
            0
        );
    }
    let p = run(t.path(), &["prune", "recipe.yaml"]);
    assert_eq!(p.code, 0, "{}", p.stderr);
    // window 7's smooth, peak and table nodes (3 + 3 + 1) are neither the recipe as it
    // stands (window 5) nor any node's last run (window 9).
    assert!(p.stdout.contains("removed 7;"), "{}", p.stdout);
    let out = t.path().join("out");
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    assert_eq!(counts(&out), (0, 10, 0, 0));
    assert_eq!(
        run(t.path(), &["run", "recipe.yaml", "--set", "window=9"]).code,
        0
    );
    assert_eq!(counts(&out), (0, 10, 0, 0));
    assert_eq!(
        run(t.path(), &["run", "recipe.yaml", "--set", "window=7"]).code,
        0
    );
    assert_eq!(counts(&out), (7, 3, 0, 0));
}
