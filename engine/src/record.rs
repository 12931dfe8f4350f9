//! The run record: everything a finished run hands to the report, written as
//! `run.json` in the output folder so `retort report OUTDIR` can re-render without
//! recomputing anything.
//!
//! **Invariant:** this is a serialized contract (`schema_version`); add fields with
//! `#[serde(default)]`, never repurpose one. The report reads only this record and
//! the artifacts it names (through [`ArtifactSource`]); it knows nothing of recipes,
//! the graph or the scheduler.

use serde::{Deserialize, Serialize};
use stages::Artifact;

pub const RUN_RECORD_SCHEMA_VERSION: u32 = 1;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RunRecord {
    pub schema_version: u32,
    /// `retort` version that produced the run.
    pub engine_version: String,
    /// The top recipe, then every included recipe in include order.
    pub recipes: Vec<RecipeRecord>,
    /// Parameters as used (defaults overridden by `--set`).
    pub parameters: Vec<ParameterRecord>,
    /// Steps in graph (topological, then recipe) order.
    pub steps: Vec<StepRecord>,
    /// Nodes in graph order: one per (step, item).
    pub nodes: Vec<NodeRecord>,
    pub checks: Vec<CheckRecord>,
    /// Start and end of the run, RFC 3339 UTC. Only here and in provenance: never in
    /// results.json, tables or figures, which must be byte-identical between runs.
    pub started: String,
    pub finished: String,
    pub host: String,
    /// Where the cache lives (absolute), so artifacts can be found again.
    pub cache_dir: String,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RecipeRecord {
    pub id: String,
    pub title: String,
    pub description: String,
    pub author: String,
    /// Path relative to the top recipe's folder (the top recipe: its file name).
    pub path: String,
    /// The recipe file verbatim, for the provenance appendix.
    pub source: String,
    /// blake3 of the recipe file's bytes (hex).
    pub hash: String,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ParameterRecord {
    /// Id of the recipe that declared it.
    pub recipe: String,
    pub name: String,
    pub value: serde_json::Value,
    pub unit: String,
    pub about: String,
    /// True when set on the command line.
    pub overridden: bool,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepRecord {
    /// Step id as written in its recipe.
    pub id: String,
    /// Id of the recipe the step belongs to.
    pub recipe: String,
    pub stage: String,
    pub stage_version: u32,
    /// Options as resolved: parameters substituted, every default filled in.
    pub options: serde_json::Value,
    /// The stage's methods sentence for these options (reference keys in brackets).
    pub methods: String,
    pub references: Vec<ReferenceRecord>,
    /// Kind of the value the step gives (`spectrum`, `fit result`, ...).
    pub output_kind: String,
    /// Ids of the steps (or sample sets, prefixed `samples:`) it reads.
    pub inputs: Vec<String>,
    /// True when the step gathers all items into one run.
    pub gathers: bool,
}

#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ReferenceRecord {
    pub key: String,
    pub citation: String,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct NodeRecord {
    /// Step id (as in [`StepRecord::id`]) and its recipe id.
    pub step: String,
    pub recipe: String,
    /// Item (file stem) or None for a single (gathered) node.
    pub item: Option<String>,
    /// Cache key, hex.
    pub key: String,
    pub status: NodeStatus,
    /// Input files read directly by this node: path relative to the top recipe folder
    /// and blake3 content hash.
    pub files: Vec<FileRecord>,
    /// Cache keys of the upstream nodes.
    pub upstream: Vec<String>,
    /// Wall time of the stage run (0 when cached). Provenance only.
    pub duration_ms: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum NodeStatus {
    /// Ran in this run.
    Ran,
    /// Taken from the cache.
    Cached,
    /// The stage returned an error.
    Failed { error: String },
    /// Not run because an upstream node failed.
    Skipped { because: String },
}

#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileRecord {
    pub path: String,
    pub hash: String,
    pub bytes: u64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CheckRecord {
    /// Recipe that declared the check.
    pub recipe: String,
    /// `step.result` as written.
    pub result: String,
    pub item: Option<String>,
    /// What was expected, in words ("0.62 ± 0.03", "between 3.1 and 3.3").
    pub expected: String,
    pub found: Option<f64>,
    pub unit: String,
    pub passed: bool,
    /// Why it failed (no such result, out of tolerance...), empty when passed.
    pub message: String,
}

/// Where the report gets the artifact of a node.
pub trait ArtifactSource: Sync {
    /// The artifact stored under this cache key, if it can be read.
    fn load(&self, key: &str) -> Option<Artifact>;
    /// The same artifact with its per-point arrays empty (what tables, captions and
    /// figure bookkeeping read); a source that stores heads apart answers cheaply.
    fn load_head(&self, key: &str) -> Option<Artifact> {
        self.load(key).map(|mut a| {
            a.take_arrays();
            a
        })
    }
}

impl<F: Fn(&str) -> Option<Artifact> + Sync> ArtifactSource for F {
    fn load(&self, key: &str) -> Option<Artifact> {
        self(key)
    }
}
