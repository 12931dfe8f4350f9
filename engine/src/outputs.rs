//! The output folder: `results.json`, `tables/results.csv`, `provenance.json`,
//! `run.json` and the report, written into a temporary folder beside the target and
//! moved into place only when everything is written.
//!
//! **Invariant:** results.json and the CSV hold no timestamps, host names or
//! durations; they depend only on the recipe, its inputs and the stages, so they are
//! byte-identical between runs and thread counts. Records keep node order (plan step
//! order, items sorted), then the order the stage published them.

use crate::graph::Graph;
use crate::plan::{Expect, Plan, PortPlan};
use crate::record::{
    CheckRecord, NodeRecord, NodeStatus, RecipeRecord, ReferenceRecord, RunRecord, StepRecord,
    RUN_RECORD_SCHEMA_VERSION,
};
use crate::scheduler::Outcome;

use stages::Scalar;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

pub const RESULTS_SCHEMA_VERSION: u32 = 1;

/// `results.json`: every published record (node order, then publishing order) and
/// every failed or skipped node. Serialized as it is walked, so a run of many
/// thousand nodes never holds the document as a JSON tree.
pub struct Results<'a> {
    pub plan: &'a Plan,
    pub graph: &'a Graph,
    pub outcomes: &'a [Outcome],
}

/// A record's value as JSON: a number or a string.
struct ScalarJson<'a>(&'a Scalar);

impl serde::Serialize for ScalarJson<'_> {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self.0 {
            Scalar::Number(v) => s.serialize_f64(*v),
            Scalar::Text(t) => s.serialize_str(t),
        }
    }
}

#[derive(serde::Serialize)]
struct ResultRow<'a> {
    step: &'a str,
    item: &'a Option<String>,
    name: &'a str,
    value: ScalarJson<'a>,
    uncertainty: Option<f64>,
    unit: &'a str,
    node: &'a str,
}

#[derive(serde::Serialize)]
struct FailureRow<'a> {
    step: &'a str,
    item: &'a Option<String>,
    stage: &'a str,
    status: &'a str,
    cause: &'a str,
    node: &'a str,
}

impl Results<'_> {
    fn rows(&self) -> impl Iterator<Item = ResultRow<'_>> {
        self.graph
            .nodes
            .iter()
            .zip(self.outcomes)
            .flat_map(move |(node, o)| {
                let step = self.plan.steps[node.step].id.as_str();
                o.results.iter().map(move |r| ResultRow {
                    step,
                    item: &node.item,
                    name: &r.name,
                    value: ScalarJson(&r.value),
                    uncertainty: r.uncertainty,
                    unit: &r.unit,
                    node: &node.key,
                })
            })
    }
    fn failures(&self) -> impl Iterator<Item = FailureRow<'_>> {
        self.graph
            .nodes
            .iter()
            .zip(self.outcomes)
            .filter_map(move |(node, o)| {
                let step = &self.plan.steps[node.step];
                let (status, cause) = match &o.status {
                    NodeStatus::Failed { error } => ("failed", error.as_str()),
                    NodeStatus::Skipped { because } => ("skipped", because.as_str()),
                    _ => return None,
                };
                Some(FailureRow {
                    step: &step.id,
                    item: &node.item,
                    stage: step.stage.info().name,
                    status,
                    cause,
                    node: &node.key,
                })
            })
    }
}

/// Serializes an iterator as a JSON array without collecting it.
struct Each<F>(F);

impl<I, F> serde::Serialize for Each<F>
where
    F: Fn() -> I,
    I: Iterator,
    I::Item: serde::Serialize,
{
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq((self.0)())
    }
}

impl serde::Serialize for Results<'_> {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut m = s.serialize_map(Some(4))?;
        m.serialize_entry("schema_version", &RESULTS_SCHEMA_VERSION)?;
        m.serialize_entry("recipe", &self.plan.recipes.first().map(|r| r.id.as_str()))?;
        m.serialize_entry("results", &Each(|| self.rows()))?;
        m.serialize_entry("failures", &Each(|| self.failures()))?;
        m.end()
    }
}

/// `tables/results.csv`: the records of results.json, one per line, numbers in the
/// same shortest round-trip form.
pub fn results_csv(results: &Results) -> Result<Vec<u8>, String> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let e = |e: csv::Error| e.to_string();
    w.write_record([
        "step",
        "item",
        "name",
        "value",
        "uncertainty",
        "unit",
        "node",
    ])
    .map_err(e)?;
    let number = |v: f64| serde_json::to_string(&v).unwrap_or_default();
    for r in results.rows() {
        let value = match r.value.0 {
            Scalar::Number(v) => number(*v),
            Scalar::Text(t) => t.clone(),
        };
        w.write_record([
            r.step,
            r.item.as_deref().unwrap_or(""),
            r.name,
            &value,
            &r.uncertainty.map(number).unwrap_or_default(),
            r.unit,
            r.node,
        ])
        .map_err(e)?;
    }
    w.into_inner().map_err(|e| e.to_string())
}

/// Evaluates the recipe's checks against the outcomes.
pub fn checks(plan: &Plan, graph: &Graph, outcomes: &[Outcome]) -> Vec<CheckRecord> {
    plan.checks
        .iter()
        .map(|c| {
            let expected = match c.expect {
                Expect::Near { value, tolerance } => format!("{value} ± {tolerance}"),
                Expect::Within { low, high } => format!("between {low} and {high}"),
            };
            let node = graph
                .nodes
                .iter()
                .position(|n| n.step == c.step && n.item == c.item);
            let mut rec = CheckRecord {
                recipe: plan.recipes[c.recipe].id.clone(),
                result: c.result.clone(),
                item: c.item.clone(),
                expected,
                found: None,
                unit: String::new(),
                passed: false,
                message: String::new(),
            };
            let Some(n) = node else {
                rec.message = "no such node".into();
                return rec;
            };
            match &outcomes[n].status {
                NodeStatus::Failed { .. } | NodeStatus::Skipped { .. } => {
                    rec.message = "the step did not finish".into();
                    return rec;
                }
                _ => {}
            }
            let Some(r) = outcomes[n].results.iter().find(|r| r.name == c.name) else {
                let names: Vec<&str> = outcomes[n]
                    .results
                    .iter()
                    .map(|r| r.name.as_str())
                    .collect();
                rec.message = format!(
                    "the step published no result `{}` (it published: {})",
                    c.name,
                    names.join(", ")
                );
                return rec;
            };
            rec.unit = r.unit.clone();
            let Some(v) = r.as_number() else {
                rec.message = "the result is not a number".into();
                return rec;
            };
            rec.found = Some(v);
            rec.passed = match c.expect {
                Expect::Near { value, tolerance } => (v - value).abs() <= tolerance,
                Expect::Within { low, high } => v >= low && v <= high,
            };
            if !rec.passed {
                rec.message = format!("found {v}, expected {}", rec.expected);
            }
            rec
        })
        .collect()
}

#[allow(clippy::too_many_arguments)]
pub fn run_record(
    plan: &Plan,
    graph: &Graph,
    outcomes: &[Outcome],
    checks: Vec<CheckRecord>,
    started: String,
    finished: String,
    host: &str,
    cache_dir: &Path,
) -> RunRecord {
    let recipes = plan
        .recipes
        .iter()
        .map(|r| RecipeRecord {
            id: r.id.clone(),
            title: r.title.clone(),
            description: r.description.clone(),
            author: r.author.clone(),
            path: r.shown.clone(),
            source: r.source.clone(),
            hash: r.hash.clone(),
        })
        .collect();
    let steps = plan
        .steps
        .iter()
        .map(|s| {
            let info = s.stage.info();
            let mut inputs = Vec::new();
            for p in &s.ports {
                match p {
                    PortPlan::Missing => {}
                    PortPlan::One(x) | PortPlan::Gather(x) => inputs.push(plan.src_name(*x)),
                    PortPlan::Several(v) => inputs.extend(v.iter().map(|x| plan.src_name(*x))),
                }
            }
            StepRecord {
                id: s.id.clone(),
                recipe: plan.recipes[s.recipe].id.clone(),
                stage: info.name.to_string(),
                stage_version: info.version,
                options: s.options.clone(),
                methods: s.methods.clone(),
                references: info
                    .references
                    .iter()
                    .map(|r| ReferenceRecord {
                        key: r.key.to_string(),
                        citation: r.citation.to_string(),
                    })
                    .collect(),
                output_kind: info.output.name().to_string(),
                inputs,
                gathers: s.ports.iter().any(|p| matches!(p, PortPlan::Gather(_))),
            }
        })
        .collect();
    let nodes = graph
        .nodes
        .iter()
        .enumerate()
        .map(|(i, n)| NodeRecord {
            step: plan.steps[n.step].id.clone(),
            recipe: plan.recipes[plan.steps[n.step].recipe].id.clone(),
            item: n.item.clone(),
            key: n.key.clone(),
            status: outcomes[i].status.clone(),
            files: graph.file_records(n),
            upstream: n
                .upstream
                .iter()
                .map(|&u| graph.nodes[u].key.clone())
                .collect(),
            duration_ms: match (&outcomes[i].status, &outcomes[i].meta) {
                (NodeStatus::Ran, Some(m)) => m.duration_ms,
                _ => 0.0,
            },
        })
        .collect();
    RunRecord {
        schema_version: RUN_RECORD_SCHEMA_VERSION,
        engine_version: crate::VERSION.to_string(),
        recipes,
        parameters: plan.parameters.clone(),
        steps,
        nodes,
        checks,
        started,
        finished,
        host: host.to_string(),
        cache_dir: cache_dir.display().to_string(),
    }
}

/// Whether `out` may be replaced by a run's output: it must not hold the recipe's
/// folder or the cache, and if it exists and is not empty it must be an earlier
/// output (it has a run.json).
pub fn check_target(out: &Path, root: &Path, cache: &Path) -> Result<(), String> {
    let abs = std::path::absolute(out).map_err(|e| format!("{}: {e}", out.display()))?;
    let abs = abs.canonicalize().unwrap_or(abs);
    let cache = std::path::absolute(cache).unwrap_or_else(|_| cache.to_path_buf());
    if root.starts_with(&abs) || cache.starts_with(&abs) {
        return Err(format!(
            "the output folder {} would hold the recipe or its cache; choose another --out",
            out.display()
        ));
    }
    if abs.is_dir() {
        let empty = std::fs::read_dir(&abs)
            .map(|mut d| d.next().is_none())
            .unwrap_or(false);
        if !empty && !abs.join("run.json").is_file() {
            return Err(format!(
                "{} is not empty and is not a retort output folder (no run.json); it is not replaced",
                out.display()
            ));
        }
    } else if abs.exists() {
        return Err(format!("{} exists and is not a folder", out.display()));
    }
    Ok(())
}

fn out_name(out: &Path) -> String {
    out.file_name()
        .map(|n| n.to_string_lossy().to_string())
        .unwrap_or_else(|| "out".into())
}

/// A fresh temporary folder beside `out` (named with this process id), after
/// removing any left by runs that were killed.
pub fn temp_beside(out: &Path) -> Result<tempfile::TempDir, String> {
    let parent = out
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    std::fs::create_dir_all(parent).map_err(|e| format!("{}: {e}", parent.display()))?;
    let name = out_name(out);
    remove_stale(parent, &name);
    tempfile::Builder::new()
        .prefix(&format!(".{name}.tmp-{}-", std::process::id()))
        .tempdir_in(parent)
        .map_err(|e| format!("{}: {e}", parent.display()))
}

/// Removes `.NAME.tmp-PID-*` and `.NAME.old-PID` folders whose process is gone
/// (where the system lets us ask: Linux `/proc`).
fn remove_stale(parent: &Path, name: &str) {
    if !Path::new("/proc/self").exists() {
        return;
    }
    let Ok(entries) = std::fs::read_dir(parent) else {
        return;
    };
    for e in entries.flatten() {
        let file = e.file_name().to_string_lossy().to_string();
        let rest = file
            .strip_prefix(&format!(".{name}.tmp-"))
            .or_else(|| file.strip_prefix(&format!(".{name}.old-")));
        let Some(pid) = rest.and_then(|r| r.split('-').next()) else {
            continue;
        };
        if pid.parse::<u32>().is_ok() && !Path::new("/proc").join(pid).exists() {
            let _ = std::fs::remove_dir_all(e.path());
        }
    }
}

pub fn write(dir: &Path, rel: &str, bytes: &[u8]) -> Result<(), String> {
    let path = dir.join(rel);
    if let Some(p) = path.parent() {
        std::fs::create_dir_all(p).map_err(|e| format!("{}: {e}", p.display()))?;
    }
    std::fs::write(&path, bytes).map_err(|e| format!("{}: {e}", path.display()))
}

/// Writes `v` as pretty JSON (and a final newline) to `dir/rel`, streaming.
pub fn write_json<T: serde::Serialize>(dir: &Path, rel: &str, v: &T) -> Result<(), String> {
    use std::io::Write as _;
    let path = dir.join(rel);
    let err = |e: &dyn std::fmt::Display| format!("{}: {e}", path.display());
    let file = std::fs::File::create(&path).map_err(|e| err(&e))?;
    let mut w = std::io::BufWriter::new(file);
    serde_json::to_writer_pretty(&mut w, v).map_err(|e| err(&e))?;
    w.write_all(b"\n").map_err(|e| err(&e))?;
    w.flush().map_err(|e| err(&e))
}

pub fn json_bytes<T: serde::Serialize>(v: &T) -> Result<Vec<u8>, String> {
    let mut b = serde_json::to_vec_pretty(v).map_err(|e| e.to_string())?;
    b.push(b'\n');
    Ok(b)
}

/// Moves the finished temporary folder to `out`, replacing what was there.
pub fn publish(tmp: tempfile::TempDir, out: &Path) -> Result<(), String> {
    let tmp_path: PathBuf = tmp.keep();
    let err = |e: std::io::Error| format!("cannot move the output into {}: {e}", out.display());
    if out.exists() {
        if !out.is_dir() {
            return Err(format!("{} exists and is not a folder", out.display()));
        }
        let name = out
            .file_name()
            .map(|n| n.to_string_lossy().to_string())
            .unwrap_or_default();
        let old = out.with_file_name(format!(".{name}.old-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&old);
        std::fs::rename(out, &old).map_err(err)?;
        std::fs::rename(&tmp_path, out).map_err(err)?;
        let _ = std::fs::remove_dir_all(&old);
    } else {
        std::fs::rename(&tmp_path, out).map_err(err)?;
    }
    Ok(())
}

pub const MANIFEST_SCHEMA_VERSION: u32 = 1;

/// `manifest.json`: what an output folder holds and what it was made from. A run
/// whose [`run_digest`] equals the manifest's, with every node in the cache and
/// every listed file present at its size, has nothing to change and leaves the
/// folder as it is; a later render reuses the listed figures whose keys match.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct Manifest {
    pub schema_version: u32,
    /// [`run_digest`] of the run that wrote the folder.
    pub digest: String,
    /// RFC 3339 UTC time the folder was written.
    pub written: String,
    /// The exit code of that run and what it printed (summary, failed checks), so a
    /// run that finds the folder up to date answers the same.
    pub exit: i32,
    pub messages: Vec<String>,
    /// Every file of the folder (relative path, `/`-separated) and its size, this
    /// manifest excepted.
    pub files: BTreeMap<String, u64>,
    pub figures: BTreeMap<String, crate::report::FigureFile>,
}

/// What a run's outputs depend on, as one blake3 hex digest: the engine version and
/// the run record's structure — recipes (with their text's hash), parameters,
/// steps with options, methods sentences and references, and every node's key,
/// inputs and upstream — but not statuses, times or host. Node keys fix every
/// artifact, so equal digests mean equal results, tables and figures.
pub fn run_digest(plan: &Plan, graph: &Graph) -> String {
    let placeholder: Vec<Outcome> = graph
        .nodes
        .iter()
        .map(|_| Outcome {
            status: NodeStatus::Cached,
            meta: None,
            results: Vec::new(),
            notes: Vec::new(),
            corrupt: None,
        })
        .collect();
    let skeleton = run_record(
        plan,
        graph,
        &placeholder,
        Vec::new(),
        String::new(),
        String::new(),
        "",
        Path::new(""),
    );
    let mut h = blake3::Hasher::new();
    h.update(b"retort-outputs-1\0");
    h.update(crate::VERSION.as_bytes());
    h.update(b"\0");
    let _ = serde_json::to_writer(&mut h, &skeleton);
    h.finalize().to_hex().to_string()
}

/// Lists every file under `dir` with its size (paths relative, `/`-separated).
pub fn list_files(dir: &Path) -> Result<BTreeMap<String, u64>, String> {
    let mut out = BTreeMap::new();
    let mut stack = vec![PathBuf::new()];
    while let Some(rel) = stack.pop() {
        let here = dir.join(&rel);
        let entries = std::fs::read_dir(&here).map_err(|e| format!("{}: {e}", here.display()))?;
        for e in entries {
            let e = e.map_err(|e| format!("{}: {e}", here.display()))?;
            let name = rel.join(e.file_name());
            let meta = e
                .metadata()
                .map_err(|err| format!("{}: {err}", name.display()))?;
            if meta.is_dir() {
                stack.push(name);
            } else {
                let shown = name
                    .components()
                    .map(|c| c.as_os_str().to_string_lossy())
                    .collect::<Vec<_>>()
                    .join("/");
                out.insert(shown, meta.len());
            }
        }
    }
    Ok(out)
}

/// The manifest of an output folder, if it has a readable one.
pub fn read_manifest(out: &Path) -> Option<Manifest> {
    let bytes = std::fs::read(out.join("manifest.json")).ok()?;
    let m: Manifest = serde_json::from_slice(&bytes).ok()?;
    (m.schema_version == MANIFEST_SCHEMA_VERSION).then_some(m)
}

/// Whether `out` already holds exactly what a run with `digest` would write: its
/// manifest has the digest and every listed file is there at its size.
pub fn up_to_date(out: &Path, digest: &str) -> Option<Manifest> {
    let m = read_manifest(out)?;
    if m.digest != digest {
        return None;
    }
    let intact = m.files.iter().all(|(rel, &bytes)| {
        std::fs::metadata(out.join(rel)).is_ok_and(|x| x.is_file() && x.len() == bytes)
    });
    intact.then_some(m)
}
