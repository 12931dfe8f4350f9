//! `retort verify RECIPE`: run only what the recipe's checks need, then judge them.
//!
//! The needed nodes are the checked (step, item) nodes and everything upstream of
//! them (through inputs, upstream links and `same_as` originals). The graph is cut
//! down to those nodes ([`needed`], [`subgraph`]) and handed to the ordinary
//! scheduler with the ordinary cache, so a later `run` reuses every node verified.
//! Nothing is written to an output folder.

use crate::exit::Exit;
use crate::graph::{Graph, Node, NodeInput, Ref};
use crate::plan::Plan;
use crate::record::{CheckRecord, NodeStatus};
use std::collections::BTreeSet;

/// Indices of the nodes the checks need, ascending.
pub fn needed(plan: &Plan, graph: &Graph) -> Vec<usize> {
    let mut keep = BTreeSet::new();
    let mut stack: Vec<usize> = plan
        .checks
        .iter()
        .filter_map(|c| {
            graph
                .nodes
                .iter()
                .position(|n| n.step == c.step && n.item == c.item)
        })
        .collect();
    while let Some(i) = stack.pop() {
        if !keep.insert(i) {
            continue;
        }
        let n = &graph.nodes[i];
        stack.extend(n.upstream.iter().copied());
        stack.extend(n.same_as);
        for inp in &n.inputs {
            for r in refs(inp) {
                if let Ref::Node(u) = r {
                    stack.push(u);
                }
            }
        }
    }
    keep.into_iter().collect()
}

fn refs(inp: &NodeInput) -> Vec<Ref> {
    match inp {
        NodeInput::Missing => Vec::new(),
        NodeInput::One(r) => vec![*r],
        NodeInput::Many(v) => v.iter().map(|(_, r)| *r).collect(),
    }
}

/// The graph restricted to `keep` (ascending, closed under upstream links), with
/// node indices renumbered; files are kept whole.
pub fn subgraph(graph: &Graph, keep: &[usize]) -> Graph {
    let mut new_index = vec![usize::MAX; graph.nodes.len()];
    for (n, &old) in keep.iter().enumerate() {
        new_index[old] = n;
    }
    let map_ref = |r: Ref| match r {
        Ref::Node(n) => Ref::Node(new_index[n]),
        f => f,
    };
    let nodes: Vec<Node> = keep
        .iter()
        .map(|&old| {
            let n = &graph.nodes[old];
            Node {
                step: n.step,
                item: n.item.clone(),
                inputs: n
                    .inputs
                    .iter()
                    .map(|inp| match inp {
                        NodeInput::Missing => NodeInput::Missing,
                        NodeInput::One(r) => NodeInput::One(map_ref(*r)),
                        NodeInput::Many(v) => NodeInput::Many(
                            v.iter().map(|(s, r)| (s.clone(), map_ref(*r))).collect(),
                        ),
                    })
                    .collect(),
                key: n.key.clone(),
                upstream: n.upstream.iter().map(|&u| new_index[u]).collect(),
                files: n.files.clone(),
                same_as: n.same_as.map(|s| new_index[s]),
            }
        })
        .collect();
    let mut g = petgraph::graph::DiGraph::new();
    let ids: Vec<_> = (0..nodes.len()).map(|i| g.add_node(i)).collect();
    for (i, n) in nodes.iter().enumerate() {
        for &u in &n.upstream {
            g.add_edge(ids[u], ids[i], ());
        }
    }
    Graph {
        files: graph.files.clone(),
        nodes,
        graph: g,
        hashed: graph.hashed,
    }
}

/// The lines `verify` prints, one per check, and the exit code they call for.
pub fn summary(checks: &[CheckRecord], failed_nodes: usize) -> (Vec<String>, Exit) {
    let mut lines = Vec::new();
    for c in checks {
        let what = match &c.item {
            Some(i) => format!("{} [{i}]", c.result),
            None => c.result.clone(),
        };
        let found = match c.found {
            Some(v) if c.unit.is_empty() => format!("{v}"),
            Some(v) => format!("{v} {}", c.unit),
            None => "none".to_string(),
        };
        let verdict = if c.passed { "pass" } else { "FAIL" };
        let mut line = format!("{verdict}  {what}: expected {}, found {found}", c.expected);
        if !c.passed && c.found.is_none() && !c.message.is_empty() {
            line.push_str(&format!(" ({})", c.message));
        }
        lines.push(line);
    }
    let failed = checks.iter().filter(|c| !c.passed).count();
    let exit = if failed_nodes > 0 {
        Exit::StepFailed
    } else if failed > 0 {
        Exit::CheckFailed
    } else {
        Exit::Ok
    };
    (lines, exit)
}

/// Whether a node's status counts as failed for the exit code.
pub fn is_failure(s: &NodeStatus) -> bool {
    matches!(s, NodeStatus::Failed { .. } | NodeStatus::Skipped { .. })
}

/// `retort verify`: the checks' nodes only, through the ordinary cache.
pub fn command(
    a: &crate::cli::RecipeArgs,
    jobs: Option<usize>,
    catalog: &[&'static dyn stages::stage::Stage],
) -> Exit {
    let plan = match crate::cli::phase1(a, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    if plan.checks.is_empty() {
        println!(
            "{}: the recipe has no checks; nothing to verify",
            a.recipe.display()
        );
        return Exit::Ok;
    }
    let result = (|| -> Result<Exit, String> {
        let cache = crate::cache::Cache::open(&crate::cli::cache_dir(a, &plan), true)?;
        let full = crate::cli::expand(&plan, &cache)?;
        let keep = needed(&plan, &full);
        let graph = subgraph(&full, &keep);
        let opts = crate::scheduler::RunOptions {
            jobs: crate::cli::jobs_or_cores(jobs),
            fail_fast: false,
            host: crate::cli::host(),
        };
        let reporter = crate::cli::Reporter {
            bar: None,
            plain: false,
        };
        let outcomes = crate::scheduler::run(&plan, &graph, &cache, &opts, &reporter);
        cache.flush()?;
        let outcomes = outcomes?;
        let failed = outcomes.iter().filter(|o| is_failure(&o.status)).count();
        let checks = crate::outputs::checks(&plan, &graph, &outcomes);
        let (lines, exit) = summary(&checks, failed);
        let ran = outcomes
            .iter()
            .filter(|o| matches!(o.status, NodeStatus::Ran))
            .count();
        println!(
            "{}: {} checks over {} of {} nodes ({ran} ran, {} cached{})",
            a.recipe.display(),
            checks.len(),
            graph.nodes.len(),
            full.nodes.len(),
            graph.nodes.len() - ran - failed,
            if failed > 0 {
                format!(", {failed} failed or skipped")
            } else {
                String::new()
            }
        );
        for l in lines {
            println!("  {l}");
        }
        Ok(exit)
    })();
    match result {
        Ok(e) => e,
        Err(msg) => {
            eprintln!("error: {msg}");
            Exit::StepFailed
        }
    }
}
