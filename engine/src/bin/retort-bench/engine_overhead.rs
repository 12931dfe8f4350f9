//! Engine overhead benchmarks (part of `retort-bench`):
//!
//! 1. No-op re-plan of a recipe over 1,000 small input files after a run: phase one,
//!    graph expansion with the stat index fast path, and the cache lookup of every
//!    node (goal: well under 0.2 s).
//! 2. Engine overhead per node at 10,000 nodes (100 items x 100 steps) of a trivial
//!    stage: wall time minus the time spent inside the stage, divided by the nodes
//!    (goal: < 50 us), for the scheduler alone (cache lookups, hand-off, cache
//!    writes) and for the whole `run` command (planning, outputs and report too),
//!    with the durable cache, a throwaway cache and a second, all-cached run.

use engine::cache::Cache;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use stages::stage::{Inputs, Port, StageError, StageInfo, TypedStage};
use stages::{Artifact, Kind, Record, Stage, Value};
use std::path::Path;
use std::time::{Duration, Instant, SystemTime};

/// A stage that does nothing but publish one number.
struct Pass;

#[derive(Default, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
struct PassOptions {
    /// Added to the published number.
    offset: f64,
}

static PASS_INPUTS: &[Port] = &[Port::each("input", Kind::Any, "anything")];

impl TypedStage for Pass {
    type Options = PassOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "bench.pass",
        version: 1,
        summary: "Benchmark stage: publishes one number",
        inputs: PASS_INPUTS,
        output: Kind::Summary,
        references: &[],
    };
    fn methods(&self, _o: &PassOptions) -> String {
        "Nothing was done.".into()
    }
    fn run(&self, inputs: &Inputs, o: &PassOptions) -> Result<Artifact, StageError> {
        let n = inputs
            .one(0)?
            .results
            .first()
            .and_then(|r| r.as_number())
            .unwrap_or(0.0);
        Ok(
            Artifact::new(Value::Summary).with_results(vec![Record::number(
                "n",
                n + 1.0 + o.offset,
                None,
                "",
            )]),
        )
    }
}

static PASS: Pass = Pass;

fn write_files(dir: &Path, n: usize) {
    std::fs::create_dir_all(dir.join("data")).unwrap_or_else(|e| panic!("{e}"));
    // Old mtimes, so the stat index trusts them (files changed in the last two
    // seconds are always re-hashed).
    let old = SystemTime::now() - Duration::from_secs(3600);
    for i in 0..n {
        let p = dir.join(format!("data/s{i:05}.csv"));
        let mut s = String::from("x,y\n");
        for j in 0..20 {
            s.push_str(&format!("{j},{}\n", (i * 31 + j * 7) % 97));
        }
        std::fs::write(&p, s).unwrap_or_else(|e| panic!("{e}"));
        if let Ok(f) = std::fs::File::options().write(true).open(&p) {
            let _ = f.set_modified(old);
        }
    }
}

/// Returns the best no-op re-plan time in seconds.
pub fn replan(files: usize) -> f64 {
    let t = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write_files(t.path(), files);
    let recipe = t.path().join("r.yaml");
    std::fs::write(&recipe, "id: replan\nsamples:\n  s: data/*.csv\nsteps:\n  raw: { stage: import.delimited, from: s }\n  peak: { stage: measure.maximum, from: raw }\n").unwrap_or_else(|e| panic!("{e}"));
    let args = |v: &[&str]| v.iter().map(|s| s.to_string()).collect::<Vec<_>>();
    let r = recipe.display().to_string();
    let t0 = Instant::now();
    engine::cli::main_with(args(&["retort", "run", &r, "--quiet"]), stages::CATALOG);
    let first = t0.elapsed();
    let mut best = Duration::MAX;
    let mut parts = (Duration::ZERO, Duration::ZERO, Duration::ZERO);
    for _ in 0..5 {
        let t0 = Instant::now();
        let p1 = engine::plan::build(&recipe, &[], false, stages::CATALOG);
        let Some(plan) = p1.plan else {
            panic!("plan failed")
        };
        let t1 = Instant::now();
        let cache = Cache::open(&t.path().join(".retort"), true).unwrap_or_else(|e| panic!("{e}"));
        let mut idx = cache.stat_index();
        let g = engine::graph::expand(&plan, &mut idx).unwrap_or_else(|e| panic!("{e}"));
        let t2 = Instant::now();
        let cached = g.nodes.iter().filter(|n| cache.contains(&n.key)).count();
        let t3 = Instant::now();
        assert_eq!(cached, g.nodes.len());
        assert_eq!(g.hashed, 0, "the stat index should spare every hash");
        if t3 - t0 < best {
            best = t3 - t0;
            parts = (t1 - t0, t2 - t1, t3 - t2);
        }
    }
    println!(
        "re-plan, {files} input files, {} nodes (first run {:.2} s):",
        files * 2,
        first.as_secs_f64()
    );
    println!("  no-op re-plan      {:>8.1} ms   (recipe + plan {:.1} ms, graph + stat index {:.1} ms, cache lookups {:.1} ms; goal < 200 ms)", ms(best), ms(parts.0), ms(parts.1), ms(parts.2));
    best.as_secs_f64()
}

fn ms(d: Duration) -> f64 {
    d.as_secs_f64() * 1000.0
}

pub fn overhead(items: usize, steps: usize) {
    let t = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write_files(t.path(), items);
    let mut y = String::from(
        "id: overhead\nsamples:\n  s: data/*.csv\nsteps:\n  p0: { stage: bench.pass, from: s }\n",
    );
    for k in 1..steps {
        y.push_str(&format!(
            "  p{k}: {{ stage: bench.pass, from: p{} }}\n",
            k - 1
        ));
    }
    let recipe = t.path().join("r.yaml");
    std::fs::write(&recipe, y).unwrap_or_else(|e| panic!("{e}"));
    let catalog: &[&'static dyn Stage] = &[&PASS];
    let nodes = items * steps;
    let r = recipe.display().to_string();
    println!("engine overhead, {nodes} nodes of a trivial stage ({items} items x {steps} steps):");
    // The scheduler alone (cache lookups, input hand-off, stage call, cache writes).
    for (label, durable) in [
        ("scheduler, durable cache", true),
        ("scheduler, throwaway cache", false),
    ] {
        let cache_dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
        let p1 = engine::plan::build(&recipe, &[], false, catalog);
        let Some(plan) = p1.plan else {
            panic!("plan failed")
        };
        let cache = Cache::open(cache_dir.path(), durable).unwrap_or_else(|e| panic!("{e}"));
        let graph =
            engine::graph::expand(&plan, &mut Default::default()).unwrap_or_else(|e| panic!("{e}"));
        let opts = engine::scheduler::RunOptions {
            jobs: std::thread::available_parallelism().map_or(1, |n| n.get()),
            fail_fast: false,
            host: "bench".into(),
        };
        struct Quiet;
        impl engine::scheduler::Progress for Quiet {
            fn finished(&self, _: &str, _: &engine::record::NodeStatus, _: f64) {}
        }
        let t0 = Instant::now();
        let outcomes = engine::scheduler::run(&plan, &graph, &cache, &opts, &Quiet)
            .unwrap_or_else(|e| panic!("{e}"));
        cache.flush().unwrap_or_else(|e| panic!("{e}"));
        let wall = t0.elapsed().as_secs_f64();
        let in_stage: f64 = outcomes
            .iter()
            .filter_map(|o| o.meta.as_ref())
            .map(|m| m.duration_ms)
            .sum::<f64>()
            / 1000.0;
        let per = (wall - in_stage) / nodes as f64 * 1e6;
        println!("  {label:<34} wall {wall:>7.2} s, in stages {in_stage:>6.3} s, overhead {per:>7.1} us/node (goal < 50 us)");
    }
    // The whole command: plan, graph, scheduler, results, provenance, run.json, report.
    for (label, extra) in [
        ("whole `run`, durable cache", vec![]),
        ("whole `run`, --no-cache", vec!["--no-cache"]),
        ("whole `run`, second run, all cached", vec![]),
    ] {
        let mut args: Vec<String> = ["retort", "run", &r, "--quiet"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        args.extend(extra.iter().map(|s| s.to_string()));
        let t0 = Instant::now();
        let code = engine::cli::main_with(args, catalog);
        let wall = t0.elapsed();
        let rec: engine::record::RunRecord = serde_json::from_str(
            &std::fs::read_to_string(t.path().join("out/run.json")).unwrap_or_default(),
        )
        .unwrap_or_else(|e| panic!("{e}"));
        let in_stage: f64 = rec.nodes.iter().map(|n| n.duration_ms).sum::<f64>() / 1000.0;
        let per = (wall.as_secs_f64() - in_stage) / nodes as f64 * 1e6;
        println!("  {label:<34} wall {:>7.2} s, in stages {:>6.3} s, overhead {per:>7.1} us/node (exit {:?})", wall.as_secs_f64(), in_stage, code);
    }
}
