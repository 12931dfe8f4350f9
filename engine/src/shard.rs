//! Sharding: `retort run RECIPE --shard K/N` runs one N-th of a recipe's fan-out.
//!
//! The unit of work dealt to shards is an *item* (a sample name): every fan-out node
//! of that item, in every step and every included recipe, goes to the same shard, so
//! an item's chain (import, calibrate, fit, quantify) is never split across machines
//! and no shard recomputes another's upstream work. Items are weighted by their number
//! of fan-out nodes and dealt by longest-processing-time-first: heaviest first (ties by
//! name), each to the least loaded shard (ties to the lowest shard). The assignment
//! therefore depends only on the set of (step, item) names: not on file order, file
//! content or cache keys, so editing a file's bytes never moves it to another shard,
//! and items of equal weight are dealt round-robin (counts differ by at most one).
//!
//! A shard runs its fan-out nodes plus every node they need (upstream closure, which
//! includes a gathering step that feeds a later fan-out), writes artifacts into the
//! shared cache and a small JSON log under `<cache>/shards/<recipe id>/`, and writes no
//! report: gathering steps and the report are left to a final plain `retort run`,
//! which finds every shard's work in the cache.
//!
//! **Invariant:** a shard run never writes outside the cache, and its log is
//! published atomically like every cache file, so `retort status` may read it at any
//! moment (a killed shard leaves its "running" log behind, which status reports).

use crate::cache::Cache;
use crate::graph::{Graph, Node, NodeInput, Ref};
use crate::plan::Plan;
use crate::record::NodeStatus;
use crate::scheduler::{self, Progress, RunOptions};
use crate::timefmt;
use petgraph::graph::DiGraph;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

pub const SHARD_LOG_SCHEMA_VERSION: u32 = 1;

/// Shard K of N (K from 1).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ShardSpec {
    pub k: usize,
    pub n: usize,
}

impl std::str::FromStr for ShardSpec {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        let bad = || format!("`{s}` is not a shard: write K/N with 1 <= K <= N, e.g. 2/8");
        let (k, n) = s.split_once('/').ok_or_else(bad)?;
        let k: usize = k.trim().parse().map_err(|_| bad())?;
        let n: usize = n.trim().parse().map_err(|_| bad())?;
        if k == 0 || n == 0 || k > n {
            return Err(bad());
        }
        Ok(ShardSpec { k, n })
    }
}

impl std::fmt::Display for ShardSpec {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.k, self.n)
    }
}

/// Deals items to `n` shards (0-based) by longest-processing-time-first.
/// `items` maps item name to weight (its number of fan-out nodes).
pub fn deal(items: &BTreeMap<String, usize>, n: usize) -> BTreeMap<String, usize> {
    let n = n.max(1);
    let mut order: Vec<(&String, usize)> = items.iter().map(|(k, &w)| (k, w)).collect();
    // Heaviest first; BTreeMap order breaks ties by name.
    order.sort_by(|a, b| b.1.cmp(&a.1).then_with(|| a.0.cmp(b.0)));
    let mut load = vec![0usize; n];
    let mut out = BTreeMap::new();
    for (item, w) in order {
        let mut best = 0;
        for s in 1..n {
            if load[s] < load[best] {
                best = s;
            }
        }
        load[best] += w;
        out.insert(item.clone(), best);
    }
    out
}

/// Item -> weight over the graph's canonical fan-out nodes.
pub fn item_weights(graph: &Graph) -> BTreeMap<String, usize> {
    let mut w = BTreeMap::new();
    for node in graph.nodes.iter().filter(|n| n.same_as.is_none()) {
        if let Some(item) = &node.item {
            *w.entry(item.clone()).or_insert(0) += 1;
        }
    }
    w
}

/// Which shard (0-based) each node's own work belongs to: Some for canonical fan-out
/// nodes, None for gathering nodes and duplicates.
pub fn assignment(graph: &Graph, n: usize) -> Vec<Option<usize>> {
    let dealt = deal(&item_weights(graph), n);
    graph
        .nodes
        .iter()
        .map(|node| match (&node.item, node.same_as) {
            (Some(item), None) => dealt.get(item).copied(),
            _ => None,
        })
        .collect()
}

/// The nodes shard `spec` runs: its fan-out nodes and their upstream closure.
pub fn select(graph: &Graph, spec: ShardSpec) -> Vec<bool> {
    let assigned = assignment(graph, spec.n);
    let mut keep: Vec<bool> = assigned.iter().map(|a| *a == Some(spec.k - 1)).collect();
    // Upstream indices are always lower than their dependent's: one pass downwards.
    for i in (0..graph.nodes.len()).rev() {
        if keep[i] {
            for &u in &graph.nodes[i].upstream {
                keep[u] = true;
            }
        }
    }
    keep
}

/// The kept nodes as a graph of their own (indices renumbered, duplicates resolved).
/// `keep` must be closed upwards, as [`select`] makes it.
pub fn subgraph(graph: &Graph, keep: &[bool]) -> Result<Graph, String> {
    let mut map: Vec<Option<usize>> = vec![None; graph.nodes.len()];
    let mut next = 0;
    for (i, k) in keep.iter().enumerate() {
        if *k && graph.nodes[i].same_as.is_none() {
            map[i] = Some(next);
            next += 1;
        }
    }
    let canon = |n: usize| graph.nodes[n].same_as.unwrap_or(n);
    let remap = |n: usize| -> Result<usize, String> {
        map[canon(n)].ok_or_else(|| "shard selection is not closed upwards".to_string())
    };
    let remap_ref = |r: Ref| -> Result<Ref, String> {
        Ok(match r {
            Ref::File(f) => Ref::File(f),
            Ref::Node(n) => Ref::Node(remap(n)?),
        })
    };
    let mut nodes = Vec::with_capacity(next);
    for (i, node) in graph.nodes.iter().enumerate() {
        if map[i].is_none() {
            continue;
        }
        let mut inputs = Vec::with_capacity(node.inputs.len());
        for inp in &node.inputs {
            inputs.push(match inp {
                NodeInput::Missing => NodeInput::Missing,
                NodeInput::One(r) => NodeInput::One(remap_ref(*r)?),
                NodeInput::Many(v) => NodeInput::Many(
                    v.iter()
                        .map(|(name, r)| Ok((name.clone(), remap_ref(*r)?)))
                        .collect::<Result<_, String>>()?,
                ),
            });
        }
        let mut upstream = node
            .upstream
            .iter()
            .map(|&u| remap(u))
            .collect::<Result<Vec<_>, _>>()?;
        upstream.sort();
        upstream.dedup();
        nodes.push(Node {
            step: node.step,
            item: node.item.clone(),
            inputs,
            key: node.key.clone(),
            upstream,
            files: node.files.clone(),
            same_as: None,
        });
    }
    let mut dag = DiGraph::new();
    let ids: Vec<_> = (0..nodes.len()).map(|i| dag.add_node(i)).collect();
    for (i, n) in nodes.iter().enumerate() {
        for &u in &n.upstream {
            dag.add_edge(ids[u], ids[i], ());
        }
    }
    Ok(Graph {
        files: graph.files.clone(),
        nodes,
        graph: dag,
        hashed: 0,
    })
}

/// Absolute path of the top recipe: what shard logs are filed under.
pub fn recipe_path(plan: &Plan) -> PathBuf {
    plan.policy
        .root
        .join(plan.recipes.first().map(|r| r.shown.as_str()).unwrap_or(""))
}

/// Folder of the shard logs of one recipe in a cache.
pub fn log_dir(cache_dir: &Path, plan: &Plan) -> PathBuf {
    let id = blake3::hash(recipe_path(plan).to_string_lossy().as_bytes()).to_hex();
    cache_dir.join("shards").join(&id.as_str()[..16])
}

/// Identity of the plan's work: blake3 of the sorted canonical node keys. Two runs
/// with the same plan id have exactly the same nodes to compute.
pub fn plan_id(graph: &Graph) -> String {
    let mut keys: Vec<&str> = graph
        .nodes
        .iter()
        .filter(|n| n.same_as.is_none())
        .map(|n| n.key.as_str())
        .collect();
    keys.sort_unstable();
    let mut h = blake3::Hasher::new();
    for k in keys {
        h.update(k.as_bytes());
        h.update(b"\n");
    }
    h.finalize().to_hex().to_string()
}

pub fn log_name(spec: ShardSpec) -> String {
    format!("shard-{:04}-of-{:04}.json", spec.k, spec.n)
}

/// Counts of one shard's nodes.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct ShardCounts {
    pub total: usize,
    pub ran: usize,
    pub cached: usize,
    pub failed: usize,
    pub skipped: usize,
}

/// A failed node in a shard log.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShardFailure {
    pub node: String,
    pub key: String,
    pub error: String,
}

/// One node's timing in a shard log.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShardTiming {
    pub node: String,
    pub status: String,
    pub ms: f64,
}

/// The log a shard run leaves in the cache (`shard-KKKK-of-NNNN.json`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShardLog {
    pub schema_version: u32,
    /// Absolute path of the top recipe.
    pub recipe: String,
    /// [`plan_id`] of the work this shard was part of.
    pub plan: String,
    pub shard: usize,
    pub shards: usize,
    /// `running` while the shard works, then `finished` (even with failed nodes:
    /// they are data failures, recorded here and shown by the final report) or
    /// `error` (the shard could not do its work: cache unwritable and the like).
    pub state: String,
    pub host: String,
    pub pid: u32,
    /// The Slurm job (`SLURM_ARRAY_JOB_ID_SLURM_ARRAY_TASK_ID`) when run by Slurm.
    pub job: Option<String>,
    pub started: String,
    pub finished: Option<String>,
    pub elapsed_ms: f64,
    pub nodes: ShardCounts,
    pub failed: Vec<ShardFailure>,
    pub error: Option<String>,
    /// Every node of the shard, in graph order.
    pub timings: Vec<ShardTiming>,
}

pub fn read_logs(dir: &Path) -> Vec<(PathBuf, Result<ShardLog, String>)> {
    let mut paths: Vec<PathBuf> = std::fs::read_dir(dir)
        .map(|d| {
            d.flatten()
                .map(|e| e.path())
                .filter(|p| {
                    p.extension().is_some_and(|x| x == "json")
                        && p.file_name()
                            .is_some_and(|n| n.to_string_lossy().starts_with("shard-"))
                })
                .collect()
        })
        .unwrap_or_default();
    paths.sort();
    paths
        .into_iter()
        .map(|p| {
            let r = std::fs::read_to_string(&p)
                .map_err(|e| e.to_string())
                .and_then(|t| serde_json::from_str::<ShardLog>(&t).map_err(|e| e.to_string()));
            (p, r)
        })
        .collect()
}

fn slurm_job() -> Option<String> {
    let a = std::env::var("SLURM_ARRAY_JOB_ID").ok()?;
    let t = std::env::var("SLURM_ARRAY_TASK_ID").ok()?;
    Some(format!("{a}_{t}"))
}

/// Forwards progress and keeps every node's timing for the shard log.
struct Recorder<'a> {
    inner: &'a dyn Progress,
    seen: Mutex<Vec<(String, NodeStatus, f64)>>,
}

impl Progress for Recorder<'_> {
    fn finished(&self, label: &str, status: &NodeStatus, ms: f64) {
        self.inner.finished(label, status, ms);
        if let Ok(mut s) = self.seen.lock() {
            s.push((label.to_string(), status.clone(), ms));
        }
    }
}

fn publish_log(cache: &Cache, path: &Path, log: &ShardLog) -> Result<(), String> {
    let mut bytes = serde_json::to_vec_pretty(log).map_err(|e| e.to_string())?;
    bytes.push(b'\n');
    cache.publish(path, &bytes)
}

/// Runs shard `spec` of the graph into the cache and writes its log.
/// Exit: 0 when every node of the shard is done, 1 when some failed (recorded in the
/// log), Err when the shard could not do its work.
pub fn run_shard(
    plan: &Plan,
    graph: &Graph,
    cache: &Cache,
    opts: &RunOptions,
    progress: &dyn Progress,
    spec: ShardSpec,
    quiet: bool,
) -> Result<crate::exit::Exit, String> {
    let t0 = std::time::Instant::now();
    let sub = subgraph(graph, &select(graph, spec))?;
    let dir = log_dir(&cache.dir, plan);
    let path = dir.join(log_name(spec));
    let mut log = ShardLog {
        schema_version: SHARD_LOG_SCHEMA_VERSION,
        recipe: recipe_path(plan).to_string_lossy().to_string(),
        plan: plan_id(graph),
        shard: spec.k,
        shards: spec.n,
        state: "running".into(),
        host: opts.host.clone(),
        pid: std::process::id(),
        job: slurm_job(),
        started: timefmt::now_rfc3339(),
        finished: None,
        elapsed_ms: 0.0,
        nodes: ShardCounts {
            total: sub.nodes.len(),
            ..ShardCounts::default()
        },
        failed: Vec::new(),
        error: None,
        timings: Vec::new(),
    };
    publish_log(cache, &path, &log)?;
    let recorder = Recorder {
        inner: progress,
        seen: Mutex::new(Vec::new()),
    };
    let result = scheduler::run(plan, &sub, cache, opts, &recorder);
    let flushed = cache.flush();
    log.finished = Some(timefmt::now_rfc3339());
    log.elapsed_ms = t0.elapsed().as_secs_f64() * 1000.0;
    let outcomes = match result.and_then(|o| flushed.map(|_| o)) {
        Ok(o) => o,
        Err(e) => {
            log.state = "error".into();
            log.error = Some(e.clone());
            publish_log(cache, &path, &log)?;
            return Err(e);
        }
    };
    let mut ms_of: BTreeMap<String, f64> = BTreeMap::new();
    if let Ok(seen) = recorder.seen.lock() {
        for (label, _, ms) in seen.iter() {
            ms_of.insert(label.clone(), *ms);
        }
    }
    for (i, o) in outcomes.iter().enumerate() {
        let label = scheduler::node_label(plan, &sub, i);
        let status = match &o.status {
            NodeStatus::Ran => {
                log.nodes.ran += 1;
                "ran"
            }
            NodeStatus::Cached => {
                log.nodes.cached += 1;
                "cached"
            }
            NodeStatus::Failed { error } => {
                log.nodes.failed += 1;
                log.failed.push(ShardFailure {
                    node: label.clone(),
                    key: sub.nodes[i].key.clone(),
                    error: error.clone(),
                });
                "failed"
            }
            NodeStatus::Skipped { .. } => {
                log.nodes.skipped += 1;
                "skipped"
            }
        };
        log.timings.push(ShardTiming {
            ms: ms_of.get(&label).copied().unwrap_or(0.0),
            node: label,
            status: status.into(),
        });
    }
    log.state = "finished".into();
    publish_log(cache, &path, &log)?;
    if !quiet {
        println!(
            "shard {spec}: {} nodes: {} ran, {} cached, {} failed, {} skipped; log {}",
            log.nodes.total,
            log.nodes.ran,
            log.nodes.cached,
            log.nodes.failed,
            log.nodes.skipped,
            path.display()
        );
    }
    Ok(if log.nodes.failed + log.nodes.skipped > 0 {
        crate::exit::Exit::StepFailed
    } else {
        crate::exit::Exit::Ok
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn items(names: &[&str], w: usize) -> BTreeMap<String, usize> {
        names.iter().map(|n| (n.to_string(), w)).collect()
    }

    #[test]
    fn parses_k_of_n() {
        assert_eq!("2/8".parse::<ShardSpec>(), Ok(ShardSpec { k: 2, n: 8 }));
        for bad in ["0/4", "5/4", "1/0", "x/2", "3", "1/2/3"] {
            assert!(bad.parse::<ShardSpec>().is_err(), "{bad}");
        }
    }

    #[test]
    fn equal_items_are_dealt_evenly() {
        let names: Vec<String> = (0..10).map(|i| format!("s{i:02}")).collect();
        let refs: Vec<&str> = names.iter().map(String::as_str).collect();
        let dealt = deal(&items(&refs, 3), 4);
        let mut count = [0usize; 4];
        for s in dealt.values() {
            count[*s] += 1;
        }
        assert_eq!(count, [3, 3, 2, 2]);
    }

    #[test]
    fn heavy_items_are_spread_by_weight() {
        let mut m = BTreeMap::new();
        m.insert("a".to_string(), 5);
        m.insert("b".to_string(), 1);
        m.insert("c".to_string(), 1);
        m.insert("d".to_string(), 4);
        let dealt = deal(&m, 2);
        let mut load = [0usize; 2];
        for (k, s) in &dealt {
            load[*s] += m[k];
        }
        assert_eq!(load, [6, 5]);
    }
}
