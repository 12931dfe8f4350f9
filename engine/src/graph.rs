//! Graph expansion: a plan becomes nodes, one per (step, item), with content keys.
//!
//! A step over items fans out (one node per item); a single-valued upstream is
//! broadcast to every item; a gathering port takes every node of its upstream in
//! item order; a `Several` port takes one node of each listed upstream for the same
//! item. Input files are keyed by content (through the stat index fast path), and a
//! node's key is blake3 of its stage name and version, canonical options, item and
//! the keys of its inputs in port order. Nodes with equal keys (the same work reached
//! from two recipes) are run once: later ones point at the first (`same_as`).
//!
//! **Invariant:** keys depend only on what can change a stage's output; nothing
//! here runs a stage or writes anything but the stat index (through the cache).

use crate::cache::{FileStat, StatIndex};
use crate::plan::{Plan, PortPlan, Src};
use crate::record::FileRecord;
use petgraph::graph::DiGraph;
use rayon::prelude::*;
use std::collections::HashMap;
use std::path::PathBuf;

/// An input file with its content hash.
#[derive(Debug, Clone)]
pub struct FileEntry {
    pub path: PathBuf,
    pub shown: String,
    pub hash: String,
    pub bytes: u64,
    /// Key of the file as a node input: blake3 of its shown name and content hash.
    pub key: String,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Ref {
    File(usize),
    Node(usize),
}

#[derive(Debug, Clone)]
pub enum NodeInput {
    Missing,
    One(Ref),
    /// (name, input): item names for a gathering port, upstream step ids for `Several`.
    Many(Vec<(String, Ref)>),
}

#[derive(Debug, Clone)]
pub struct Node {
    pub step: usize,
    pub item: Option<String>,
    pub inputs: Vec<NodeInput>,
    pub key: String,
    /// Upstream nodes (distinct, ascending).
    pub upstream: Vec<usize>,
    /// Files read directly.
    pub files: Vec<usize>,
    /// The first node with the same key, when this one duplicates it.
    pub same_as: Option<usize>,
}

#[derive(Debug)]
pub struct Graph {
    pub files: Vec<FileEntry>,
    /// In plan step order, items in order within a step.
    pub nodes: Vec<Node>,
    pub graph: DiGraph<usize, ()>,
    /// How many files were hashed (not taken from the stat index).
    pub hashed: usize,
}

impl Graph {
    pub fn file_records(&self, n: &Node) -> Vec<FileRecord> {
        n.files
            .iter()
            .map(|&f| FileRecord {
                path: self.files[f].shown.clone(),
                hash: self.files[f].hash.clone(),
                bytes: self.files[f].bytes,
            })
            .collect()
    }
    pub fn ref_key(&self, r: Ref) -> &str {
        match r {
            Ref::File(f) => &self.files[f].key,
            Ref::Node(n) => &self.nodes[n].key,
        }
    }
}

fn stat_of(md: &std::fs::Metadata) -> (u64, i64, u32, u64) {
    #[cfg(unix)]
    use std::os::unix::fs::MetadataExt;
    let (s, ns) = match md
        .modified()
        .ok()
        .and_then(|m| m.duration_since(std::time::UNIX_EPOCH).ok())
    {
        Some(d) => (d.as_secs() as i64, d.subsec_nanos()),
        None => (0, 0),
    };
    #[cfg(unix)]
    let ino = md.ino();
    #[cfg(not(unix))]
    let ino = 0;
    (md.len(), s, ns, ino)
}

/// Hashes every file of the plan's sample sets, using and updating `index`.
fn hash_files(plan: &Plan, index: &mut StatIndex) -> Result<(Vec<FileEntry>, usize), String> {
    let mut wanted: Vec<(PathBuf, String)> = Vec::new();
    let mut seen = HashMap::new();
    for set in &plan.sets {
        for f in &set.files {
            if seen.insert(f.path.clone(), wanted.len()).is_none() {
                wanted.push((f.path.clone(), f.shown.clone()));
            }
        }
    }
    let now = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs() as i64)
        .unwrap_or(0);
    let idx: &StatIndex = index;
    type Hashed = Result<(FileEntry, Option<FileStat>, bool), String>;
    let results: Vec<Hashed> = wanted
        .par_iter()
        .map(|(path, shown)| {
            let md = std::fs::metadata(path).map_err(|e| format!("{shown}: {e}"))?;
            let (size, ms, mns, ino) = stat_of(&md);
            let abs = path.to_string_lossy().to_string();
            let (hash, hashed) = match idx.get(&abs) {
                Some(s)
                    if s.size == size && s.mtime_s == ms && s.mtime_ns == mns && s.inode == ino =>
                {
                    (s.hash.clone(), false)
                }
                _ => {
                    let bytes = std::fs::read(path).map_err(|e| format!("{shown}: {e}"))?;
                    (blake3::hash(&bytes).to_hex().to_string(), true)
                }
            };
            // A file modified in the last two seconds may change again within the
            // same mtime tick: do not trust its stat next time.
            let stat = (ms < now - 2).then(|| FileStat {
                size,
                mtime_s: ms,
                mtime_ns: mns,
                inode: ino,
                hash: hash.clone(),
            });
            let key = file_key(shown, &hash);
            Ok((
                FileEntry {
                    path: path.clone(),
                    shown: shown.clone(),
                    hash,
                    bytes: size,
                    key,
                },
                stat,
                hashed,
            ))
        })
        .collect();
    let mut files = Vec::new();
    let mut hashed = 0;
    for r in results {
        let (entry, stat, h) = r?;
        hashed += h as usize;
        let abs = entry.path.to_string_lossy().to_string();
        match stat {
            Some(s) => {
                index.insert(abs, s);
            }
            None => {
                index.remove(&abs);
            }
        }
        files.push(entry);
    }
    Ok((files, hashed))
}

pub fn file_key(shown: &str, hash: &str) -> String {
    let mut h = blake3::Hasher::new();
    h.update(b"retort-file\0");
    h.update(shown.as_bytes());
    h.update(b"\0");
    h.update(hash.as_bytes());
    h.finalize().to_hex().to_string()
}

/// Expands the plan. Fails only when an input file cannot be read.
pub fn expand(plan: &Plan, index: &mut StatIndex) -> Result<Graph, String> {
    let (files, hashed) = hash_files(plan, index)?;
    let file_of: HashMap<PathBuf, usize> = files
        .iter()
        .enumerate()
        .map(|(i, f)| (f.path.clone(), i))
        .collect();
    let set_file = |si: usize, item: &str| -> Option<usize> {
        plan.sets[si]
            .files
            .iter()
            .find(|f| f.item == item)
            .and_then(|f| file_of.get(&f.path).copied())
    };
    let mut nodes: Vec<Node> = Vec::new();
    // step -> (item or None) -> node
    let mut step_nodes: Vec<Vec<(Option<String>, usize)>> = Vec::new();
    let mut by_key: HashMap<String, usize> = HashMap::new();
    for (si, step) in plan.steps.iter().enumerate() {
        let items: Vec<Option<String>> = match &step.domain {
            Some(d) => d.iter().cloned().map(Some).collect(),
            None => vec![None],
        };
        let mut mine = Vec::new();
        for item in items {
            let one = |src: Src, item: &Option<String>| -> Option<Ref> {
                match src {
                    Src::Set(s) => item.as_deref().and_then(|i| set_file(s, i)).map(Ref::File),
                    Src::Step(j) => {
                        let list = step_nodes.get(j)?;
                        list.iter()
                            .find(|(it, _)| it == item)
                            .or_else(|| list.iter().find(|(it, _)| it.is_none()))
                            .map(|(_, n)| Ref::Node(*n))
                    }
                }
            };
            let all = |src: Src| -> Vec<(String, Ref)> {
                match src {
                    Src::Set(s) => plan.sets[s]
                        .files
                        .iter()
                        .filter_map(|f| {
                            set_file(s, &f.item).map(|x| (f.item.clone(), Ref::File(x)))
                        })
                        .collect(),
                    Src::Step(j) => step_nodes
                        .get(j)
                        .map(|l| {
                            l.iter()
                                .map(|(it, n)| {
                                    (
                                        it.clone().unwrap_or_else(|| plan.steps[j].id.clone()),
                                        Ref::Node(*n),
                                    )
                                })
                                .collect()
                        })
                        .unwrap_or_default(),
                }
            };
            let mut inputs = Vec::new();
            for p in &step.ports {
                inputs.push(match p {
                    PortPlan::Missing => NodeInput::Missing,
                    PortPlan::One(s) => one(*s, &item)
                        .map(NodeInput::One)
                        .unwrap_or(NodeInput::Missing),
                    PortPlan::Gather(s) => NodeInput::Many(all(*s)),
                    PortPlan::Several(v) => NodeInput::Many(
                        v.iter()
                            .filter_map(|s| {
                                let name = match s {
                                    Src::Set(x) => plan.sets[*x].name.clone(),
                                    Src::Step(j) => {
                                        // Named as the consuming step's recipe writes it:
                                        // `c1s_area` inside xps, `xps/c1s_area` from a chapter.
                                        let ns = &plan.recipes[step.recipe].namespace;
                                        plan.steps[*j]
                                            .id
                                            .strip_prefix(ns.as_str())
                                            .unwrap_or(&plan.steps[*j].id)
                                            .to_string()
                                    }
                                };
                                one(*s, &item).map(|r| (name, r))
                            })
                            .collect(),
                    ),
                });
            }
            let mut upstream = Vec::new();
            let mut direct_files = Vec::new();
            for inp in &inputs {
                let refs: Vec<Ref> = match inp {
                    NodeInput::Missing => Vec::new(),
                    NodeInput::One(r) => vec![*r],
                    NodeInput::Many(v) => v.iter().map(|(_, r)| *r).collect(),
                };
                for r in refs {
                    match r {
                        Ref::Node(n) => upstream.push(nodes[n].same_as.unwrap_or(n)),
                        Ref::File(f) => direct_files.push(f),
                    }
                }
            }
            upstream.sort();
            upstream.dedup();
            direct_files.sort();
            direct_files.dedup();
            let key = node_key(
                step.stage.info().name,
                step.stage.info().version,
                &step.options,
                item.as_deref(),
                &inputs,
                |r| match r {
                    Ref::File(f) => files[f].key.clone(),
                    Ref::Node(n) => nodes[n].key.clone(),
                },
            );
            let same_as = by_key.get(&key).copied();
            if same_as.is_none() {
                by_key.insert(key.clone(), nodes.len());
            }
            mine.push((item.clone(), nodes.len()));
            nodes.push(Node {
                step: si,
                item,
                inputs,
                key,
                upstream,
                files: direct_files,
                same_as,
            });
        }
        step_nodes.push(mine);
    }
    let mut graph = DiGraph::new();
    let ids: Vec<_> = (0..nodes.len()).map(|i| graph.add_node(i)).collect();
    for (i, n) in nodes.iter().enumerate() {
        for &u in &n.upstream {
            graph.add_edge(ids[u], ids[i], ());
        }
    }
    Ok(Graph {
        files,
        nodes,
        graph,
        hashed,
    })
}

/// The content key of a node.
pub fn node_key(
    stage: &str,
    version: u32,
    options: &serde_json::Value,
    item: Option<&str>,
    inputs: &[NodeInput],
    key_of: impl Fn(Ref) -> String,
) -> String {
    let mut h = blake3::Hasher::new();
    h.update(b"retort-node\0v1\0");
    h.update(stage.as_bytes());
    h.update(b"\0");
    h.update(&version.to_le_bytes());
    h.update(options.to_string().as_bytes());
    h.update(b"\0");
    match item {
        Some(i) => {
            h.update(b"I");
            h.update(i.as_bytes());
        }
        None => {
            h.update(b"N");
        }
    }
    for inp in inputs {
        h.update(b"\0P");
        match inp {
            NodeInput::Missing => {
                h.update(b"-");
            }
            NodeInput::One(r) => {
                h.update(b"1");
                h.update(key_of(*r).as_bytes());
            }
            NodeInput::Many(v) => {
                h.update(b"*");
                h.update(&(v.len() as u64).to_le_bytes());
                for (name, r) in v {
                    h.update(name.as_bytes());
                    h.update(b"\0");
                    h.update(key_of(*r).as_bytes());
                }
            }
        }
    }
    h.finalize().to_hex().to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testing::test_stage;
    use stages::stage::{Port, Stage};
    use stages::Kind;

    test_stage!(
        Read,
        "t.read",
        1,
        &[Port::each("file", Kind::File, "a file")]
    );
    test_stage!(
        Both,
        "t.both",
        1,
        &[
            Port::each("sample", Kind::Any, "per item"),
            Port::each("blank", Kind::Any, "broadcast")
        ]
    );
    test_stage!(
        Many,
        "t.several",
        1,
        &[Port::several("parts", Kind::Any, "several steps")]
    );
    test_stage!(
        All,
        "t.gather",
        1,
        &[Port::gather("items", Kind::Any, "all items")]
    );
    static CATALOG: &[&dyn Stage] = &[&Read, &Both, &Many, &All];

    fn setup(recipe: &str, files: &[&str]) -> (tempfile::TempDir, Graph, Plan) {
        let t = tempfile::tempdir().unwrap();
        for f in files {
            let p = t.path().join(f);
            std::fs::create_dir_all(p.parent().unwrap()).unwrap();
            std::fs::write(&p, f.as_bytes()).unwrap();
        }
        std::fs::write(t.path().join("r.yaml"), recipe).unwrap();
        let p1 = crate::plan::build(&t.path().join("r.yaml"), &[], false, CATALOG);
        assert!(!p1.has_errors(), "{}", p1.render_diagnostics());
        let plan = p1.plan.unwrap();
        let g = expand(&plan, &mut StatIndex::new()).unwrap();
        (t, g, plan)
    }

    const RECIPE: &str = "id: t\nsamples:\n  c1s: { files: 'd/*_C1s.csv', item: '^(.*)_C1s' }\n  o1s: { files: 'd/*_O1s.csv', item: '^(.*)_O1s' }\n  blank: d/blank.txt\nsteps:\n  c: { stage: t.read, from: c1s }\n  o: { stage: t.read, from: o1s }\n  b: { stage: t.gather, from: blank }\n  sum: { stage: t.several, from: [c, o] }\n  minus: { stage: t.both, from: { sample: c, blank: b } }\n  all: { stage: t.gather, from: sum }\n";

    #[test]
    fn several_ports_pair_items_across_steps_and_single_values_broadcast() {
        let files = [
            "d/fa_C1s.csv",
            "d/fa_O1s.csv",
            "d/fb_C1s.csv",
            "d/fb_O1s.csv",
            "d/blank.txt",
        ];
        let (_t, g, plan) = setup(RECIPE, &files);
        let step = |id: &str| plan.steps.iter().position(|s| s.id == id).unwrap();
        let nodes = |id: &str| {
            g.nodes
                .iter()
                .filter(|n| n.step == step(id))
                .collect::<Vec<_>>()
        };
        // Items named by the regex capture: fa and fb in both sets.
        assert_eq!(
            nodes("c")
                .iter()
                .map(|n| n.item.clone().unwrap())
                .collect::<Vec<_>>(),
            ["fa", "fb"]
        );
        // `b` gathers the one-file blank set into a single value, which `minus`
        // receives for every item (broadcast) beside the item's own `c`.
        let b = nodes("b");
        assert_eq!((b.len(), b[0].item.clone()), (1, None));
        let b_index = g.nodes.iter().position(|n| n.step == step("b")).unwrap();
        for m in nodes("minus") {
            assert!(matches!(m.inputs[1], NodeInput::One(Ref::Node(n)) if n == b_index));
            assert!(
                matches!(m.inputs[0], NodeInput::One(Ref::Node(n)) if g.nodes[n].item == m.item)
            );
        }
        assert_eq!(nodes("minus").len(), 2);
        let sum = nodes("sum");
        assert_eq!(sum.len(), 2);
        match &sum[0].inputs[0] {
            NodeInput::Many(v) => {
                let names: Vec<&str> = v.iter().map(|(n, _)| n.as_str()).collect();
                assert_eq!(names, ["c", "o"]);
                let items: Vec<Option<String>> = v
                    .iter()
                    .map(|(_, r)| match r {
                        Ref::Node(n) => g.nodes[*n].item.clone(),
                        Ref::File(_) => None,
                    })
                    .collect();
                assert_eq!(items, [Some("fa".to_string()), Some("fa".to_string())]);
            }
            other => panic!("{other:?}"),
        }
        // `all` gathers both items of `sum`, in item order, in one node.
        let all = nodes("all");
        assert_eq!(all.len(), 1);
        assert!(
            matches!(&all[0].inputs[0], NodeInput::Many(v) if v.iter().map(|(n, _)| n.as_str()).collect::<Vec<_>>() == ["fa", "fb"])
        );
        // Keys differ per item and are stable across expansions.
        assert_ne!(sum[0].key, sum[1].key);
        let (_t2, g2, _) = setup(RECIPE, &files);
        assert_eq!(
            g.nodes.iter().map(|n| &n.key).collect::<Vec<_>>(),
            g2.nodes.iter().map(|n| &n.key).collect::<Vec<_>>()
        );
    }

    #[test]
    fn items_not_in_every_input_are_dropped_with_a_warning() {
        let (t, _g, _plan) = setup(
            RECIPE,
            &[
                "d/fa_C1s.csv",
                "d/fa_O1s.csv",
                "d/fb_C1s.csv",
                "d/blank.txt",
            ],
        );
        let p1 = crate::plan::build(&t.path().join("r.yaml"), &[], false, CATALOG);
        let text = p1.render_diagnostics();
        assert!(
            text.contains("warning: step `sum`: items fb are not in every input and are left out"),
            "{text}"
        );
    }
}
