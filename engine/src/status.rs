//! `retort status JOB_DIR | OUTDIR | RECIPE`: how far a (sharded) run has got.
//!
//! A node is *done* when its artifact is in the cache, *failed* when it is not and a
//! shard log of the current plan records its failure, and *pending* otherwise
//! (not started, running, or in a shard that was killed). Gathering nodes are done
//! only after the final run. The shard logs come from `<cache>/shards/<recipe id>/`
//! (see [`crate::shard`]); logs of an earlier version of the recipe are shown as stale
//! and do not count. Given a job folder written by `retort slurm`, the recipe, cache
//! and settings come from its `slurm/job.json`; given a plain output folder, the
//! counts come from its `run.json`.

use crate::cache::Cache;
use crate::cli::RecipeArgs;
use crate::exit::Exit;
use crate::record::{NodeStatus, RunRecord};
use crate::shard::{self, ShardLog};
use stages::stage::Stage;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

#[derive(clap::Args, Debug, Clone)]
pub struct StatusArgs {
    /// A job folder (from `retort slurm --out`), an output folder, or a recipe.
    pub target: PathBuf,
    /// Override a parameter, as given to the run (repeatable; recipe only).
    #[arg(long = "set", value_name = "NAME=VALUE")]
    pub set: Vec<String>,
    /// Allow reading files outside the recipe's folder (recipe only).
    #[arg(long)]
    pub allow_outside: bool,
    /// Cache folder (default: $RETORT_CACHE, else .retort/ beside the recipe).
    #[arg(long, value_name = "DIR")]
    pub cache: Option<PathBuf>,
}

/// Counts of the current plan's nodes.
#[derive(Debug, Default, PartialEq, Eq)]
pub struct Counts {
    pub total: usize,
    pub done: usize,
    pub failed: usize,
    pub pending: usize,
}

pub fn command(a: &StatusArgs, catalog: &[&'static dyn Stage]) -> Exit {
    let t = &a.target;
    let result = if t.join("slurm").join("job.json").is_file() {
        crate::slurm::read_job(t).and_then(|job| {
            let mut set = Vec::new();
            let mut allow_outside = false;
            let mut it = job.run_args.iter();
            while let Some(x) = it.next() {
                match x.as_str() {
                    "--set" => set.extend(it.next().cloned()),
                    "--allow-outside" => allow_outside = true,
                    _ => {}
                }
            }
            println!("job folder: {}", job.job_dir);
            for s in &job.submissions {
                println!(
                    "  submitted {}: shards job {} (tasks {}), gather job {}",
                    s.at,
                    s.shards_job.as_deref().unwrap_or("-"),
                    if s.tasks.is_empty() { "none" } else { &s.tasks },
                    s.gather_job
                );
            }
            let report = Path::new(&job.report_dir).join("run.json");
            if report.is_file() {
                println!("  report: {} (finished)", job.report_dir);
            } else {
                println!("  report: not yet written");
            }
            let args = RecipeArgs {
                recipe: PathBuf::from(&job.recipe),
                set,
                allow_outside,
                cache: Some(PathBuf::from(&job.cache)),
            };
            recipe_status(&args, Some(job.shards), catalog)
        })
    } else if t.join("run.json").is_file() {
        run_status(t)
    } else if t.is_dir() {
        Err(format!(
            "{} is neither a job folder (no slurm/job.json) nor an output folder (no run.json)",
            t.display()
        ))
    } else {
        let args = RecipeArgs {
            recipe: t.clone(),
            set: a.set.clone(),
            allow_outside: a.allow_outside,
            cache: a.cache.clone(),
        };
        recipe_status(&args, None, catalog)
    };
    match result {
        Ok(c) if c.failed > 0 => Exit::StepFailed,
        Ok(_) => Exit::Ok,
        Err(e) if e.is_empty() => Exit::Usage,
        Err(e) => {
            eprintln!("error: {e}");
            Exit::Usage
        }
    }
}

fn run_status(dir: &Path) -> Result<Counts, String> {
    let path = dir.join("run.json");
    let text = std::fs::read_to_string(&path).map_err(|e| format!("{}: {e}", path.display()))?;
    let record: RunRecord =
        serde_json::from_str(&text).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut c = Counts {
        total: record.nodes.len(),
        ..Counts::default()
    };
    let mut failures = Vec::new();
    for n in &record.nodes {
        match &n.status {
            NodeStatus::Ran | NodeStatus::Cached => c.done += 1,
            NodeStatus::Failed { error } => {
                c.failed += 1;
                let label = match &n.item {
                    Some(i) => format!("{} [{i}]", n.step),
                    None => n.step.clone(),
                };
                failures.push(format!("{label}: {error}"));
            }
            NodeStatus::Skipped { .. } => c.pending += 1,
        }
    }
    println!(
        "run finished {} on {}: {} nodes: {} done, {} failed, {} not run (after a failure)",
        record.finished, record.host, c.total, c.done, c.failed, c.pending
    );
    if !failures.is_empty() {
        println!("failed nodes:");
        for f in failures {
            println!("  {f}");
        }
    }
    Ok(c)
}

fn describe(log: &ShardLog) -> String {
    let job = log
        .job
        .as_ref()
        .map(|j| format!(", slurm job {j}"))
        .unwrap_or_default();
    match log.state.as_str() {
        "running" => format!(
            "running since {} on {} (pid {}{job}); if that job is gone, the shard was killed: resubmit",
            log.started, log.host, log.pid
        ),
        "error" => format!(
            "could not finish on {}{job}: {}",
            log.host,
            log.error.as_deref().unwrap_or("unknown error")
        ),
        _ => format!(
            "finished {} on {}{job}: {} nodes: {} ran, {} cached, {} failed, {} skipped in {:.1} s",
            log.finished.as_deref().unwrap_or("?"),
            log.host,
            log.nodes.total,
            log.nodes.ran,
            log.nodes.cached,
            log.nodes.failed,
            log.nodes.skipped,
            log.elapsed_ms / 1000.0
        ),
    }
}

fn recipe_status(
    a: &RecipeArgs,
    shards: Option<usize>,
    catalog: &[&'static dyn Stage],
) -> Result<Counts, String> {
    let plan = crate::cli::phase1(a, catalog).map_err(|_| String::new())?;
    let dir = crate::cli::cache_dir(a, &plan);
    // Looking must not create a cache: a missing one is read as an empty one.
    let empty = if dir.is_dir() {
        None
    } else {
        println!("(no cache at {} yet: nothing has run)", dir.display());
        Some(tempfile::tempdir().map_err(|e| e.to_string())?)
    };
    let cache = Cache::open(empty.as_ref().map_or(dir.as_path(), |t| t.path()), true)?;
    let graph = crate::cli::expand(&plan, &cache)?;
    let current = shard::plan_id(&graph);
    let logs = shard::read_logs(&shard::log_dir(&cache.dir, &plan));
    // Failures recorded by current logs: key -> (node, error, shard).
    let mut failed: BTreeMap<String, (String, String, String)> = BTreeMap::new();
    let mut current_logs: BTreeMap<usize, ShardLog> = BTreeMap::new();
    let mut stale = 0;
    let mut unreadable = Vec::new();
    for (path, log) in logs {
        match log {
            Ok(l) if l.plan == current => {
                for f in &l.failed {
                    failed.insert(
                        f.key.clone(),
                        (
                            f.node.clone(),
                            f.error.clone(),
                            format!("{}/{}", l.shard, l.shards),
                        ),
                    );
                }
                if shards.is_none_or(|n| n == l.shards) {
                    current_logs.insert(l.shard, l);
                }
            }
            Ok(_) => stale += 1,
            Err(e) => unreadable.push(format!("{}: {e}", path.display())),
        }
    }
    let n = shards
        .or_else(|| current_logs.values().map(|l| l.shards).max())
        .unwrap_or(0);
    let assigned = (n > 0).then(|| shard::assignment(&graph, n));
    let mut c = Counts::default();
    let mut per_shard: Vec<Counts> = (0..n).map(|_| Counts::default()).collect();
    let mut failures = Vec::new();
    let mut gathering = 0;
    for (i, node) in graph.nodes.iter().enumerate() {
        if node.same_as.is_some() {
            continue;
        }
        let slot = assigned
            .as_ref()
            .and_then(|a| a[i])
            .and_then(|s| per_shard.get_mut(s));
        let mut one = Counts {
            total: 1,
            ..Counts::default()
        };
        if cache.contains(&node.key) {
            one.done = 1;
        } else if let Some((label, error, shard)) = failed.get(&node.key) {
            one.failed = 1;
            failures.push(format!("{label}: {error} (shard {shard})"));
        } else {
            one.pending = 1;
            if node.item.is_none() {
                gathering += 1;
            }
        }
        for t in [Some(&mut c), slot].into_iter().flatten() {
            t.total += one.total;
            t.done += one.done;
            t.failed += one.failed;
            t.pending += one.pending;
        }
    }
    println!("recipe: {}", shard::recipe_path(&plan).display());
    println!(
        "cache:  {}",
        if empty.is_some() { &dir } else { &cache.dir }.display()
    );
    println!(
        "{} nodes: {} done (in the cache), {} failed, {} pending",
        c.total, c.done, c.failed, c.pending
    );
    if gathering > 0 {
        println!(
            "  ({gathering} of the pending nodes gather or run once: the final run does them)"
        );
    }
    if n > 0 {
        println!("shards ({n}; fan-out nodes done/failed/pending):");
        for (s, pc) in per_shard.iter().enumerate() {
            let k = s + 1;
            let what = match current_logs.get(&k) {
                Some(l) => describe(l),
                None => "no log: not started".into(),
            };
            println!(
                "  shard {k}/{n}: {}/{}/{} of {}; {what}",
                pc.done, pc.failed, pc.pending, pc.total
            );
        }
    }
    if stale > 0 {
        println!("({stale} shard logs are from an earlier version of the recipe or its data and were ignored)");
    }
    for u in unreadable {
        println!("unreadable shard log {u}");
    }
    if !failures.is_empty() {
        println!("failed nodes:");
        for f in failures {
            println!("  {f}");
        }
    }
    Ok(c)
}
