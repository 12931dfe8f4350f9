//! Recipe lock files: `retort lock RECIPE` pins what a recipe's numbers depend on
//! besides the recipe itself — every used stage's version, every input file's
//! blake3 hash and every included recipe's hash — in `NAME.lock` beside the recipe
//! (`chapter.yaml` -> `chapter.lock`, JSON). `retort run` compares the recipe with
//! its lock: differences are warnings, and with `--locked` they refuse the run
//! (exit 2) with the list of differences.
//!
//! The top recipe is not pinned (it is the thing being run, like a manifest);
//! files are pinned by their path relative to the top recipe's folder.

use crate::exit::Exit;
use crate::graph::Graph;
use crate::plan::Plan;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

pub const LOCK_SCHEMA_VERSION: u32 = 1;

#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Lock {
    pub schema_version: u32,
    /// The locked recipe's file name.
    pub recipe: String,
    /// retort version that wrote the lock (informational; not compared).
    pub engine_version: String,
    /// Stage name -> version, for every stage a step uses.
    pub stages: BTreeMap<String, u32>,
    /// Input file (relative to the recipe's folder) -> blake3 of its bytes.
    pub files: BTreeMap<String, String>,
    /// Included recipe (relative path) -> blake3 of its bytes.
    pub includes: BTreeMap<String, String>,
}

/// Where the lock of `recipe` lives: the recipe's path with extension `.lock`.
pub fn lock_path(recipe: &Path) -> PathBuf {
    recipe.with_extension("lock")
}

/// The lock the recipe would have now.
pub fn current(plan: &Plan, graph: &Graph) -> Lock {
    let recipe = plan
        .recipes
        .first()
        .map(|r| r.shown.clone())
        .unwrap_or_default();
    Lock {
        schema_version: LOCK_SCHEMA_VERSION,
        recipe,
        engine_version: crate::VERSION.to_string(),
        stages: plan
            .steps
            .iter()
            .map(|s| (s.stage.info().name.to_string(), s.stage.info().version))
            .collect(),
        files: graph
            .files
            .iter()
            .map(|f| (f.shown.clone(), f.hash.clone()))
            .collect(),
        includes: plan
            .recipes
            .iter()
            .skip(1)
            .map(|r| (r.shown.clone(), r.hash.clone()))
            .collect(),
    }
}

fn short(h: &str) -> &str {
    h.get(..12).unwrap_or(h)
}

/// Every way `now` differs from `locked`, one line each, sorted within each kind.
pub fn differences(locked: &Lock, now: &Lock) -> Vec<String> {
    let mut out = Vec::new();
    for (name, v) in &now.stages {
        match locked.stages.get(name) {
            Some(old) if old != v => out.push(format!(
                "stage {name}: version {v}, the lock has version {old}"
            )),
            None => out.push(format!("stage {name}: used now, not in the lock")),
            _ => {}
        }
    }
    for name in locked.stages.keys() {
        if !now.stages.contains_key(name) {
            out.push(format!("stage {name}: in the lock, no longer used"));
        }
    }
    let pinned = |what: &str, old: &BTreeMap<String, String>, new: &BTreeMap<String, String>| {
        let mut v = Vec::new();
        for (path, h) in new {
            match old.get(path) {
                Some(o) if o != h => v.push(format!(
                    "{what} {path}: changed (blake3 {}, the lock has {})",
                    short(h),
                    short(o)
                )),
                None => v.push(format!("{what} {path}: new, not in the lock")),
                _ => {}
            }
        }
        for path in old.keys() {
            if !new.contains_key(path) {
                v.push(format!("{what} {path}: in the lock, missing now"));
            }
        }
        v
    };
    out.extend(pinned("input file", &locked.files, &now.files));
    out.extend(pinned("included recipe", &locked.includes, &now.includes));
    out
}

/// Reads a lock file.
pub fn read(path: &Path) -> Result<Lock, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let lock: Lock = serde_json::from_str(&text).map_err(|e| format!("{}: {e}", path.display()))?;
    if lock.schema_version != LOCK_SCHEMA_VERSION {
        return Err(format!(
            "{}: lock schema_version {} is not {LOCK_SCHEMA_VERSION}; rewrite it with `retort lock`",
            path.display(),
            lock.schema_version
        ));
    }
    Ok(lock)
}

/// Compares the run with the recipe's lock before anything runs. Warns about each
/// difference; with `locked`, refuses (Some(Exit::Usage)) when there are any or when
/// there is no lock to hold the run to.
pub fn enforce(recipe: &Path, plan: &Plan, graph: &Graph, locked: bool) -> Option<Exit> {
    let path = lock_path(recipe);
    if !path.exists() {
        if locked {
            eprintln!(
                "error: --locked, but {} does not exist; write it with `retort lock {}`",
                path.display(),
                recipe.display()
            );
            return Some(Exit::Usage);
        }
        return None;
    }
    let lock = match read(&path) {
        Ok(l) => l,
        Err(e) => {
            eprintln!("{}: {e}", if locked { "error" } else { "warning" });
            return locked.then_some(Exit::Usage);
        }
    };
    let diffs = differences(&lock, &current(plan, graph));
    if diffs.is_empty() {
        return None;
    }
    let level = if locked { "error" } else { "warning" };
    eprintln!(
        "{level}: the run differs from {} in {} way{}:",
        path.display(),
        diffs.len(),
        if diffs.len() == 1 { "" } else { "s" }
    );
    for d in &diffs {
        eprintln!("  - {d}");
    }
    if locked {
        eprintln!(
            "nothing was run; check the changes, then `retort lock {}` to accept them",
            recipe.display()
        );
        Some(Exit::Usage)
    } else {
        eprintln!("(`retort lock` accepts them; `--locked` refuses such a run)");
        None
    }
}

/// `retort lock RECIPE`.
pub fn command(a: &crate::cli::RecipeArgs, catalog: &[&'static dyn stages::stage::Stage]) -> Exit {
    let plan = match crate::cli::phase1(a, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    let result = (|| -> Result<(), String> {
        let cache = crate::cache::Cache::open(&crate::cli::cache_dir(a, &plan), true)?;
        let graph = crate::cli::expand(&plan, &cache)?;
        let lock = current(&plan, &graph);
        let path = lock_path(&a.recipe);
        let bytes = crate::outputs::json_bytes(&lock)?;
        let tmp = path.with_extension("lock.tmp");
        std::fs::write(&tmp, &bytes).map_err(|e| format!("{}: {e}", tmp.display()))?;
        std::fs::rename(&tmp, &path).map_err(|e| format!("{}: {e}", path.display()))?;
        println!(
            "{}: {} stages, {} input files, {} included recipes pinned",
            path.display(),
            lock.stages.len(),
            lock.files.len(),
            lock.includes.len()
        );
        Ok(())
    })();
    match result {
        Ok(()) => Exit::Ok,
        Err(e) => {
            eprintln!("error: {e}");
            Exit::StepFailed
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lock() -> Lock {
        Lock {
            schema_version: 1,
            recipe: "r.yaml".into(),
            engine_version: "0".into(),
            stages: [("a.b".to_string(), 1)].into_iter().collect(),
            files: [("d/x.csv".to_string(), "aa".to_string())]
                .into_iter()
                .collect(),
            includes: BTreeMap::new(),
        }
    }

    #[test]
    fn every_kind_of_difference_is_listed() {
        let old = lock();
        assert!(differences(&old, &old).is_empty());
        let mut new = lock();
        new.stages.insert("a.b".into(), 2);
        new.stages.insert("c.d".into(), 1);
        new.files.insert("d/x.csv".into(), "bb".into());
        new.files.insert("d/y.csv".into(), "cc".into());
        new.includes.insert("inc.yaml".into(), "dd".into());
        new.engine_version = "9".into();
        let d = differences(&old, &new);
        assert_eq!(d.len(), 5, "{d:?}");
        assert!(d[0].contains("a.b: version 2, the lock has version 1"));
        assert!(d[1].contains("c.d: used now"));
        assert!(d[2].contains("d/x.csv: changed"));
        assert!(d[3].contains("d/y.csv: new"));
        assert!(d[4].contains("inc.yaml: new"));
        let gone = differences(&new, &old);
        assert!(gone
            .iter()
            .any(|l| l.contains("d/y.csv: in the lock, missing now")));
        assert!(gone
            .iter()
            .any(|l| l.contains("c.d: in the lock, no longer used")));
    }
}
