//! The scheduler: runs the graph's nodes on a rayon pool, as many at once as
//! `--jobs` allows, each as soon as its inputs are done.
//!
//! A node whose key is in the cache is verified and known by its head (records,
//! notes, no per-point arrays) instead of run; a dependent that has to run reads
//! the whole artifact back from the cache when it needs it. A failed
//! node marks everything downstream Skipped with the reason; siblings go on unless
//! `--fail-fast`. Artifacts are held in memory only while a dependent still needs
//! them, and ready nodes of later steps go first, so a long fan-out streams through
//! memory instead of piling up. What a gathering step takes is not held whole (a
//! thousand fits would pile up until the table that gathers them runs): it keeps
//! only the head when the gatherer reads records only, and otherwise reads the
//! artifact back from the cache when it runs.
//!
//! **Invariant:** the order nodes finish in never shows in any output: outcomes are
//! stored by node index and the writers sort.

use crate::cache::{Cache, Lookup, Meta};
use crate::graph::{Graph, NodeInput, Ref};
use crate::plan::Plan;
use crate::record::NodeStatus;
use crate::timefmt;
use stages::stage::{Inputs, PortValue};
use stages::{Artifact, InputFile, Note, Record, Value};
use std::collections::{BTreeSet, HashMap};
use std::sync::mpsc;
use std::sync::Arc;
use std::time::Instant;

/// What happened to one node.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub status: NodeStatus,
    /// How the artifact was made (this run or an earlier one).
    pub meta: Option<Meta>,
    pub results: Vec<Record>,
    pub notes: Vec<Note>,
    /// A cache entry was found corrupt and the node recomputed.
    pub corrupt: Option<String>,
}

impl Outcome {
    fn pending() -> Self {
        Outcome {
            status: NodeStatus::Skipped {
                because: "not reached".into(),
            },
            meta: None,
            results: Vec::new(),
            notes: Vec::new(),
            corrupt: None,
        }
    }
}

pub struct RunOptions {
    pub jobs: usize,
    pub fail_fast: bool,
    pub host: String,
}

/// Told about every finished node, in finishing order.
pub trait Progress: Sync {
    fn finished(&self, label: &str, status: &NodeStatus, ms: f64);
}

enum Done {
    Ok {
        artifact: Arc<Artifact>,
        meta: Meta,
        /// Loaded from the cache: only the head (arrays empty), not kept in memory.
        cached: bool,
        corrupt: Option<String>,
    },
    Failed {
        error: String,
        corrupt: Option<String>,
    },
    /// An upstream artifact could not be read back whole (damaged or gone since it
    /// was found): that node is run again and this one waits for it.
    Reread { upstream: usize, reason: String },
}

pub fn node_label(plan: &Plan, graph: &Graph, n: usize) -> String {
    let node = &graph.nodes[n];
    match &node.item {
        Some(i) => format!("{} [{i}]", plan.steps[node.step].id),
        None => plan.steps[node.step].id.clone(),
    }
}

/// Runs every node; returns one outcome per node (duplicates copy their original's).
pub fn run(
    plan: &Plan,
    graph: &Graph,
    cache: &Cache,
    opts: &RunOptions,
    progress: &dyn Progress,
) -> Result<Vec<Outcome>, String> {
    let n = graph.nodes.len();
    let canonical: Vec<usize> = (0..n)
        .filter(|&i| graph.nodes[i].same_as.is_none())
        .collect();
    let mut waiting: Vec<usize> = vec![0; n];
    let mut dependents: Vec<Vec<usize>> = vec![Vec::new(); n];
    for &i in &canonical {
        waiting[i] = graph.nodes[i].upstream.len();
        for &u in &graph.nodes[i].upstream {
            dependents[u].push(i);
        }
    }
    let mut refcount: Vec<usize> = dependents.iter().map(Vec::len).collect();
    let mut outcomes: Vec<Outcome> = (0..n).map(|_| Outcome::pending()).collect();
    let mut memory: HashMap<usize, Arc<Artifact>> = HashMap::new();
    // What to hold of a finished node: whole when a dependent takes it item by item
    // and reads its arrays, else its head (arrays emptied) for the dependents that
    // read records only; gatherers that read arrays read it back from the cache.
    let hold_whole: Vec<bool> = (0..n)
        .map(|u| {
            dependents[u]
                .iter()
                .any(|&d| reads_arrays_of(plan, graph, d, u) && !gathers_from(plan, graph, d, u))
        })
        .collect();
    let mut head_only: std::collections::HashSet<usize> = std::collections::HashSet::new();
    // Gathering nodes' inputs that failed or were skipped: (upstream, its label).
    let mut lost: HashMap<usize, Vec<(usize, String)>> = HashMap::new();
    // Ready nodes, later steps first, then by index.
    let mut ready: BTreeSet<(std::cmp::Reverse<usize>, usize)> = canonical
        .iter()
        .filter(|&&i| waiting[i] == 0)
        .map(|&i| (std::cmp::Reverse(graph.nodes[i].step), i))
        .collect();
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(opts.jobs.max(1))
        .build()
        .map_err(|e| format!("cannot start worker threads: {e}"))?;
    let (tx, rx) = mpsc::channel::<(usize, Done, f64)>();
    // Enough nodes in flight to hide the hand-off latency, few enough that their
    // inputs stay a small part of memory.
    let limit = opts.jobs.max(1) * 16;
    let mut in_flight = 0usize;
    // Nodes run again because a dependent could not read them back, with the
    // dependents waiting for them.
    let mut rerun: HashMap<usize, Vec<usize>> = HashMap::new();
    let mut stopped = false;
    let mut remaining = canonical.len();
    pool.in_place_scope(|scope| {
        loop {
            while !stopped && in_flight < limit {
                let Some(&first) = ready.iter().next() else { break };
                ready.remove(&first);
                let i = first.1;
                let mut inputs: HashMap<usize, Option<Arc<Artifact>>> = HashMap::new();
                let gone = lost.get(&i).cloned().unwrap_or_default();
                for &u in &graph.nodes[i].upstream {
                    if !gone.iter().any(|(g, _)| *g == u) {
                        let held = memory.get(&u).filter(|_| {
                            !head_only.contains(&u) || !reads_arrays_of(plan, graph, i, u)
                        });
                        inputs.insert(u, held.cloned());
                    }
                }
                let tx = tx.clone();
                in_flight += 1;
                scope.spawn(move |_| {
                    let t0 = Instant::now();
                    let done = work(plan, graph, cache, opts, i, inputs, &gone);
                    let ms = t0.elapsed().as_secs_f64() * 1000.0;
                    let _ = tx.send((i, done, ms));
                });
            }
            if in_flight == 0 {
                break;
            }
            let _ = cache.flush_due();
            let (i, done, ms) = match rx.recv_timeout(crate::cache::SEGMENT_AGE) {
                Ok(m) => m,
                Err(mpsc::RecvTimeoutError::Timeout) => continue,
                Err(mpsc::RecvTimeoutError::Disconnected) => break,
            };
            in_flight -= 1;
            if let Done::Reread { upstream: u, reason } = done {
                waiting[i] += 1;
                ready.remove(&(std::cmp::Reverse(graph.nodes[i].step), i));
                let waiters = rerun.entry(u).or_default();
                if waiters.is_empty() {
                    remaining += 1;
                    outcomes[u] = Outcome {
                        corrupt: Some(reason),
                        ..Outcome::pending()
                    };
                    ready.insert((std::cmp::Reverse(graph.nodes[u].step), u));
                }
                waiters.push(i);
                continue;
            }
            remaining -= 1;
            let label = node_label(plan, graph, i);
            // A node run again notifies only the dependents that waited for it.
            let notify = rerun.remove(&i).unwrap_or_else(|| dependents[i].clone());
            match done {
                Done::Reread { .. } => {}
                Done::Ok { artifact, meta, cached, corrupt } => {
                    let corrupt = corrupt.or_else(|| outcomes[i].corrupt.take());
                    let status = if cached { NodeStatus::Cached } else { NodeStatus::Ran };
                    progress.finished(&label, &status, ms);
                    let (results, notes) = match Arc::try_unwrap(artifact) {
                        Ok(a) if cached || refcount[i] == 0 => (a.results, a.notes),
                        Ok(mut a) => {
                            let kept = (a.results.clone(), a.notes.clone());
                            if !hold_whole[i] {
                                a.take_arrays();
                                head_only.insert(i);
                            }
                            memory.insert(i, Arc::new(a));
                            kept
                        }
                        Err(a) => (a.results.clone(), a.notes.clone()),
                    };
                    outcomes[i] = Outcome { status, meta: Some(meta), results, notes, corrupt };
                    for &d in &notify {
                        waiting[d] -= 1;
                        if waiting[d] == 0 && matches!(outcomes[d].status, NodeStatus::Skipped { ref because } if because == "not reached") {
                            ready.insert((std::cmp::Reverse(graph.nodes[d].step), d));
                        }
                    }
                }
                Done::Failed { error, corrupt } => {
                    let corrupt = corrupt.or_else(|| outcomes[i].corrupt.take());
                    let status = NodeStatus::Failed { error: error.clone() };
                    progress.finished(&label, &status, ms);
                    outcomes[i] = Outcome { status, corrupt, ..Outcome::pending() };
                    // Everything downstream is skipped, except that a gathering node
                    // goes on without the lost items (and says which in a note).
                    let mut stack: Vec<(usize, usize)> =
                        notify.iter().map(|&d| (d, i)).collect();
                    while let Some((d, from)) = stack.pop() {
                        if !matches!(outcomes[d].status, NodeStatus::Skipped { ref because } if because == "not reached") {
                            continue;
                        }
                        if !opts.fail_fast && gathers_from(plan, graph, d, from) {
                            lost.entry(d).or_default().push((from, label.clone()));
                            waiting[d] -= 1;
                            if waiting[d] == 0 {
                                if gathers_something(plan, graph, d, &lost[&d]) {
                                    ready.insert((std::cmp::Reverse(graph.nodes[d].step), d));
                                } else {
                                    outcomes[d].status = NodeStatus::Skipped {
                                        because: "every gathered item failed".into(),
                                    };
                                    progress.finished(&node_label(plan, graph, d), &outcomes[d].status, 0.0);
                                    remaining -= 1;
                                    stack.extend(dependents[d].iter().map(|&x| (x, d)));
                                }
                            }
                            continue;
                        }
                        outcomes[d].status = NodeStatus::Skipped { because: format!("{label} failed") };
                        progress.finished(&node_label(plan, graph, d), &outcomes[d].status, 0.0);
                        remaining -= 1;
                        ready.retain(|(_, x)| *x != d);
                        stack.extend(dependents[d].iter().map(|&x| (x, d)));
                    }
                    if opts.fail_fast {
                        stopped = true;
                    }
                }
            }
            for &u in &graph.nodes[i].upstream {
                refcount[u] = refcount[u].saturating_sub(1);
                if refcount[u] == 0 {
                    memory.remove(&u);
                    head_only.remove(&u);
                }
            }
            if remaining == 0 && in_flight == 0 {
                break;
            }
        }
    });
    for o in outcomes.iter_mut() {
        if matches!(&o.status, NodeStatus::Skipped { because } if because == "not reached") {
            o.status = NodeStatus::Skipped {
                because: "stopped after the first failure (--fail-fast)".into(),
            };
        }
    }
    for i in 0..n {
        if let Some(orig) = graph.nodes[i].same_as {
            outcomes[i] = outcomes[orig].clone();
        }
    }
    Ok(outcomes)
}

/// Whether node `d` takes upstream node `u` through a gathering port (so it can go on
/// without it).
fn gathers_from(plan: &Plan, graph: &Graph, d: usize, u: usize) -> bool {
    let node = &graph.nodes[d];
    let ports = plan.steps[node.step].stage.info().inputs;
    node.inputs.iter().enumerate().any(|(p, inp)| {
        matches!(ports.get(p).map(|x| x.arity), Some(stages::stage::Arity::Gather))
            && matches!(inp, NodeInput::Many(v) if v.iter().any(|(_, r)| matches!(r, Ref::Node(n) if *n == u)))
    })
}

/// Whether a gathering node still has at least one input on every gathering port.
fn gathers_something(plan: &Plan, graph: &Graph, d: usize, lost: &[(usize, String)]) -> bool {
    let node = &graph.nodes[d];
    let ports = plan.steps[node.step].stage.info().inputs;
    node.inputs.iter().enumerate().all(|(p, inp)| match inp {
        NodeInput::Many(v)
            if matches!(
                ports.get(p).map(|x| x.arity),
                Some(stages::stage::Arity::Gather)
            ) =>
        {
            v.iter()
                .any(|(_, r)| !matches!(r, Ref::Node(n) if lost.iter().any(|(g, _)| g == n)))
        }
        _ => true,
    })
}

/// Whether node `d` reads the per-point arrays of upstream node `u` (it takes `u`
/// through at least one port that is not records-only).
fn reads_arrays_of(plan: &Plan, graph: &Graph, d: usize, u: usize) -> bool {
    let node = &graph.nodes[d];
    let ports = plan.steps[node.step].stage.info().inputs;
    node.inputs.iter().enumerate().any(|(p, inp)| {
        let takes_u = match inp {
            NodeInput::Missing => false,
            NodeInput::One(r) => matches!(r, Ref::Node(n) if *n == u),
            NodeInput::Many(v) => v.iter().any(|(_, r)| matches!(r, Ref::Node(n) if *n == u)),
        };
        takes_u && ports.get(p).is_none_or(|port| port.arrays)
    })
}

/// Loads or runs one node on a worker thread.
fn work(
    plan: &Plan,
    graph: &Graph,
    cache: &Cache,
    opts: &RunOptions,
    i: usize,
    mut held: HashMap<usize, Option<Arc<Artifact>>>,
    lost: &[(usize, String)],
) -> Done {
    let node = &graph.nodes[i];
    let step = &plan.steps[node.step];
    let info = step.stage.info();
    let mut corrupt = None;
    match cache.load_head(&node.key) {
        Lookup::Found(b) => {
            let (meta, artifact) = *b;
            return Done::Ok {
                artifact: Arc::new(artifact),
                meta,
                cached: true,
                corrupt: None,
            };
        }
        Lookup::Corrupt(reason) => corrupt = Some(reason),
        Lookup::Missing => {}
    }
    let fail = |error: String, corrupt: Option<String>| Done::Failed { error, corrupt };
    // Upstream artifacts not held in memory are read back from the cache; one that
    // cannot be is run again first.
    for (u, slot) in held.iter_mut() {
        if slot.is_none() {
            let key = &graph.nodes[*u].key;
            let found = if reads_arrays_of(plan, graph, i, *u) {
                cache.load(key)
            } else {
                cache.load_head(key)
            };
            match found {
                Lookup::Found(b) => *slot = Some(Arc::new(b.1)),
                Lookup::Corrupt(reason) => {
                    return Done::Reread {
                        upstream: *u,
                        reason,
                    }
                }
                Lookup::Missing => {
                    return Done::Reread {
                        upstream: *u,
                        reason: "it is no longer in the cache".into(),
                    }
                }
            }
        }
    }
    let mut files: HashMap<usize, Artifact> = HashMap::new();
    for &f in &node.files {
        let entry = &graph.files[f];
        let bytes = match std::fs::read(&entry.path) {
            Ok(b) => b,
            Err(e) => return fail(format!("cannot read {}: {e}", entry.shown), corrupt),
        };
        if blake3::hash(&bytes).to_hex().as_str() != entry.hash {
            return fail(
                format!(
                    "{} changed while the run was being planned; run again",
                    entry.shown
                ),
                corrupt,
            );
        }
        files.insert(
            f,
            Artifact::new(Value::File(InputFile {
                name: entry.shown.clone(),
                bytes,
            })),
        );
    }
    let get = |r: Ref| -> Option<&Artifact> {
        match r {
            Ref::File(f) => files.get(&f),
            Ref::Node(n) => held
                .get(&graph.nodes[n].same_as.unwrap_or(n))
                .and_then(|a| a.as_deref()),
        }
    };
    let mut ports = Vec::new();
    for inp in &node.inputs {
        ports.push(match inp {
            NodeInput::Missing => PortValue::Missing,
            NodeInput::One(r) => match get(*r) {
                Some(a) => PortValue::One(a),
                None => return fail("an input is missing".into(), corrupt),
            },
            NodeInput::Many(v) => {
                let mut many = Vec::new();
                for (name, r) in v {
                    if let Ref::Node(n) = r {
                        if lost.iter().any(|(g, _)| *g == *n) {
                            continue;
                        }
                    }
                    match get(*r) {
                        Some(a) => many.push((name.as_str(), a)),
                        None => return fail("an input is missing".into(), corrupt),
                    }
                }
                PortValue::Many(many)
            }
        });
    }
    let inputs = Inputs {
        item: node.item.as_deref(),
        ports,
    };
    let started = timefmt::now_rfc3339();
    let t0 = Instant::now();
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        step.stage.run(&inputs, &step.options)
    }));
    let duration_ms = t0.elapsed().as_secs_f64() * 1000.0;
    let mut artifact = match result {
        Ok(Ok(a)) => a,
        Ok(Err(e)) => return fail(e.to_string(), corrupt),
        Err(p) => {
            let msg = p
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| p.downcast_ref::<String>().cloned())
                .unwrap_or_default();
            return fail(format!("stage {} panicked: {msg}", info.name), corrupt);
        }
    };
    if let Some(r) = artifact.results.iter().find(|r| {
        r.as_number().is_some_and(|v| !v.is_finite())
            || r.uncertainty.is_some_and(|u| !u.is_finite())
    }) {
        return fail(
            format!(
                "stage {} published a non-finite value for `{}`",
                info.name, r.name
            ),
            corrupt,
        );
    }
    if !lost.is_empty() {
        let names: Vec<&str> = lost.iter().map(|(_, l)| l.as_str()).collect();
        artifact.warn(format!(
            "gathered without {} input(s) that did not finish: {}",
            lost.len(),
            names.join(", ")
        ));
    }
    let meta = Meta {
        stage: info.name.to_string(),
        stage_version: info.version,
        engine_version: crate::VERSION.to_string(),
        started,
        duration_ms,
        host: opts.host.clone(),
    };
    if let Err(e) = cache.store(&node.key, &meta, &mut artifact) {
        return fail(format!("cannot write the cache: {e}"), corrupt);
    }
    Done::Ok {
        artifact: Arc::new(artifact),
        meta,
        cached: false,
        corrupt,
    }
}
