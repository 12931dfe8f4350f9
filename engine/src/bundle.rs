//! `retort bundle RECIPE -o FILE.zip [--no-data]`: a recipe, everything it reads
//! and the results of its latest run in one zip, described by an RO-Crate 1.1
//! metadata file (`ro-crate-metadata.json`, JSON-LD).
//!
//! Layout inside the zip, relative to the recipe's folder as on disk, so the
//! unpacked bundle runs as is (`retort run RECIPE` in the unpacked folder):
//!
//! ```text
//! RECIPE.yaml, included recipes, NAME.lock   at their paths beside the recipe
//! data files                                 at their paths (omitted with --no-data)
//! results/                                   the latest run's output folder
//! ro-crate-metadata.json
//! ```
//!
//! The zip is deterministic: entries sorted by name, deflate only, every entry
//! dated 1980-01-01 00:00 (the zip format's earliest date) with mode 0644. The crate's
//! `datePublished` and the run's times come from the run's `run.json`, not the clock,
//! so bundling the same run twice gives the same bytes.
//!
//! RO-Crate 1.1 (https://w3id.org/ro/crate/1.1): the metadata descriptor
//! (`conformsTo` the spec, `about` the root), the root Data Entity `./` (a Dataset
//! with name, description, datePublished, license, hasPart and mainEntity), one
//! `File` per file with `encodingFormat`, `contentSize` (bytes, as text) and its
//! blake3 hash as `identifier`, the recipe as a `ComputationalWorkflow` (with
//! `programmingLanguage`), retort as a `SoftwareApplication` with its version, and
//! the run as a `CreateAction` whose `instrument` is the recipe, `object` the input
//! files and `result` the output files.

use crate::exit::Exit;
use crate::plan::Plan;
use crate::record::{NodeStatus, RunRecord};
use serde_json::{json, Value};
use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};

/// The folder inside the bundle that holds the latest run's outputs.
pub const RESULTS_DIR: &str = "results";
pub const METADATA: &str = "ro-crate-metadata.json";
const CONTEXT: &str = "https://w3id.org/ro/crate/1.1/context";
const SPEC: &str = "https://w3id.org/ro/crate/1.1";

/// What goes into a bundle, by path inside it.
#[derive(Default)]
pub struct Contents {
    /// Path -> bytes, for every file stored.
    pub files: BTreeMap<String, Vec<u8>>,
    /// Input data files left out (`--no-data`): path -> (blake3, bytes).
    pub omitted: BTreeMap<String, (String, u64)>,
    /// Recipes (top first) and input data, by path.
    pub recipes: Vec<String>,
    pub data: Vec<String>,
    pub lock: Option<String>,
    /// Paths (inside the bundle) of the run's outputs.
    pub results: Vec<String>,
}

/// The media type of a file, by extension (IANA names where they exist).
pub fn media_type(path: &str) -> &'static str {
    let ext = path
        .rsplit_once('.')
        .map(|(_, e)| e.to_ascii_lowercase())
        .unwrap_or_default();
    match ext.as_str() {
        "yaml" | "yml" => "application/yaml",
        "json" | "lock" => "application/json",
        "csv" => "text/csv",
        "tsv" => "text/tab-separated-values",
        "txt" | "dat" | "xy" | "asc" => "text/plain",
        "md" => "text/markdown",
        "html" | "htm" => "text/html",
        "svg" => "image/svg+xml",
        "png" => "image/png",
        "tif" | "tiff" => "image/tiff",
        "jdx" | "dx" | "jcamp" => "chemical/x-jcamp-dx",
        _ => "application/octet-stream",
    }
}

fn rel_inside(root: &Path, abs: &Path) -> Result<String, String> {
    abs.strip_prefix(root)
        .map(|p| p.to_string_lossy().replace('\\', "/"))
        .map_err(|_| {
            format!(
                "{} is outside the recipe's folder; a bundle holds only files inside it",
                abs.display()
            )
        })
}

fn read(path: &Path) -> Result<Vec<u8>, String> {
    std::fs::read(path).map_err(|e| format!("{}: {e}", path.display()))
}

/// Every file under `dir`, as (path relative to `dir`, absolute path), sorted.
fn walk(dir: &Path) -> Result<Vec<(String, PathBuf)>, String> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        let entries = std::fs::read_dir(&d).map_err(|e| format!("{}: {e}", d.display()))?;
        for e in entries.flatten() {
            let p = e.path();
            if p.is_dir() {
                stack.push(p);
            } else if p.is_file() {
                out.push((rel_inside(dir, &p)?, p));
            }
        }
    }
    out.sort();
    Ok(out)
}

/// Gathers the recipe tree, its inputs and the run in `out`.
pub fn gather(
    plan: &Plan,
    recipe: &Path,
    out: &Path,
    with_data: bool,
) -> Result<(Contents, RunRecord), String> {
    let root = &plan.policy.root;
    let mut c = Contents::default();
    for r in &plan.recipes {
        let abs = root.join(&r.shown);
        let rel = rel_inside(root, &abs.canonicalize().unwrap_or(abs.clone()))?;
        if !c.files.contains_key(&rel) {
            c.files.insert(rel.clone(), read(&abs)?);
            c.recipes.push(rel);
        }
    }
    let lock = crate::lock::lock_path(recipe);
    if let Ok(abs) = lock.canonicalize() {
        let rel = rel_inside(root, &abs)?;
        c.files.insert(rel.clone(), read(&abs)?);
        c.lock = Some(rel);
    }
    for set in &plan.sets {
        for f in &set.files {
            let rel = rel_inside(root, &f.path)?;
            if c.files.contains_key(&rel) || c.omitted.contains_key(&rel) {
                continue;
            }
            let bytes = read(&f.path)?;
            if with_data {
                c.files.insert(rel.clone(), bytes);
            } else {
                let hash = blake3::hash(&bytes).to_hex().to_string();
                c.omitted.insert(rel.clone(), (hash, bytes.len() as u64));
            }
            c.data.push(rel);
        }
    }
    c.data.sort();
    let run_json = out.join("run.json");
    let text = std::fs::read_to_string(&run_json).map_err(|_| {
        format!(
            "no finished run in {} (no run.json): run `retort run {}` first, or name the run's folder with --out",
            out.display(),
            recipe.display()
        )
    })?;
    let record: RunRecord =
        serde_json::from_str(&text).map_err(|e| format!("{}: {e}", run_json.display()))?;
    let prefix = format!("{RESULTS_DIR}/");
    if let Some(clash) = c
        .files
        .keys()
        .chain(c.omitted.keys())
        .find(|k| k.starts_with(&prefix))
    {
        return Err(format!(
            "{clash} is inside a `{RESULTS_DIR}/` folder beside the recipe, where a bundle keeps the run's outputs; move it"
        ));
    }
    for (rel, abs) in walk(out)? {
        let inside = format!("{RESULTS_DIR}/{rel}");
        c.files.insert(inside.clone(), read(&abs)?);
        c.results.push(inside);
    }
    Ok((c, record))
}

fn file_entity(path: &str, bytes: u64, hash: &str, name: Option<&str>) -> Value {
    json!({
        "@id": path,
        "@type": "File",
        "name": name.unwrap_or_else(|| path.rsplit('/').next().unwrap_or(path)),
        "encodingFormat": media_type(path),
        "contentSize": bytes.to_string(),
        "identifier": format!("blake3:{hash}"),
    })
}

/// The RO-Crate metadata document for these contents and this run.
pub fn metadata(plan: &Plan, c: &Contents, run: &RunRecord, license: Option<&str>) -> Value {
    let top = plan.recipes.first();
    let title = top
        .map(|r| {
            if r.title.is_empty() {
                r.id.clone()
            } else {
                r.title.clone()
            }
        })
        .unwrap_or_default();
    let description = top
        .map(|r| r.description.trim().to_string())
        .filter(|d| !d.is_empty())
        .unwrap_or_else(|| {
            format!("A retort recipe, its inputs and the results of its run: {title}.")
        });
    let recipe_id = c.recipes.first().cloned().unwrap_or_default();
    let app_id = format!("#retort-{}", crate::VERSION);
    let lang_id = "#retort-recipe-format";
    let license_ref = match license {
        Some(url) => json!({ "@id": url }),
        None => json!({ "@id": "#license-not-stated" }),
    };
    let mut graph = vec![json!({
        "@id": METADATA,
        "@type": "CreativeWork",
        "conformsTo": { "@id": SPEC },
        "about": { "@id": "./" },
    })];
    let mut parts: Vec<String> = c.files.keys().cloned().collect();
    parts.extend(c.omitted.keys().cloned());
    parts.sort();
    parts.dedup();
    graph.push(json!({
        "@id": "./",
        "@type": "Dataset",
        "name": title,
        "description": description,
        "datePublished": run.finished,
        "license": license_ref,
        "mainEntity": { "@id": recipe_id },
        "hasPart": parts.iter().map(|p| json!({ "@id": p })).collect::<Vec<_>>(),
    }));
    for (path, bytes) in &c.files {
        let hash = blake3::hash(bytes).to_hex().to_string();
        let mut e = file_entity(path, bytes.len() as u64, &hash, None);
        if c.recipes.first() == Some(path) {
            e["@type"] = json!(["File", "SoftwareSourceCode", "ComputationalWorkflow"]);
            e["name"] = json!(title);
            e["programmingLanguage"] = json!({ "@id": lang_id });
            let others: Vec<Value> = c.recipes[1..].iter().map(|p| json!({ "@id": p })).collect();
            if !others.is_empty() {
                e["hasPart"] = json!(others);
            }
            if let Some(r) = top {
                if !r.author.is_empty() {
                    e["creator"] = json!(r.author);
                }
            }
        } else if c.recipes.contains(path) {
            e["@type"] = json!(["File", "SoftwareSourceCode"]);
            e["programmingLanguage"] = json!({ "@id": lang_id });
            e["description"] = json!("A recipe included by the main recipe.");
        } else if c.lock.as_deref() == Some(path.as_str()) {
            e["description"] =
                json!("The recipe's lock file: pinned stage versions and input hashes.");
        }
        graph.push(e);
    }
    for (path, (hash, bytes)) in &c.omitted {
        let mut e = file_entity(path, *bytes, hash, None);
        e["description"] =
            json!("Input file left out of the bundle (--no-data); its size and hash identify it.");
        graph.push(e);
    }
    // Stage versions used, as parts of the application.
    let mut stages: BTreeMap<&str, u32> = BTreeMap::new();
    for s in &plan.steps {
        stages.insert(s.stage.info().name, s.stage.info().version);
    }
    let stage_ids: Vec<Value> = stages
        .keys()
        .map(|n| json!({ "@id": format!("#stage-{n}") }))
        .collect();
    graph.push(json!({
        "@id": app_id,
        "@type": "SoftwareApplication",
        "name": "retort",
        "version": crate::VERSION,
        "description": "Reproducible analysis recipes for materials characterization data.",
        "hasPart": stage_ids,
    }));
    for (name, version) in &stages {
        graph.push(json!({
            "@id": format!("#stage-{name}"),
            "@type": "SoftwareApplication",
            "name": name,
            "version": version.to_string(),
            "description": "A retort stage (its version changes whenever its numbers can).",
        }));
    }
    graph.push(json!({
        "@id": lang_id,
        "@type": "ComputerLanguage",
        "name": "retort recipe",
        "alternateName": "retort recipe YAML",
        "version": crate::VERSION,
        "description": "YAML recipes of retort; `retort schema` prints their JSON Schema.",
    }));
    if license.is_none() {
        graph.push(json!({
            "@id": "#license-not-stated",
            "@type": "CreativeWork",
            "name": "License not stated",
            "description": "The bundle's author gave no license (retort bundle --license URL); ask the authors before reuse.",
        }));
    }
    let failed = run.nodes.iter().any(|n| {
        matches!(
            n.status,
            NodeStatus::Failed { .. } | NodeStatus::Skipped { .. }
        )
    });
    let checks_failed = run.checks.iter().filter(|c| !c.passed).count();
    graph.push(json!({
        "@id": "#run",
        "@type": "CreateAction",
        "name": format!("retort run of {title}"),
        "description": format!(
            "{} nodes, {} checks ({checks_failed} failed), on host {}.",
            run.nodes.len(),
            run.checks.len(),
            run.host
        ),
        "instrument": { "@id": recipe_id },
        "agent": { "@id": app_id },
        "startTime": run.started,
        "endTime": run.finished,
        "actionStatus": if failed { "http://schema.org/FailedActionStatus" } else { "http://schema.org/CompletedActionStatus" },
        "object": c.data.iter().map(|p| json!({ "@id": p })).collect::<Vec<_>>(),
        "result": c.results.iter().map(|p| json!({ "@id": p })).collect::<Vec<_>>(),
    }));
    json!({ "@context": CONTEXT, "@graph": graph })
}

/// Writes the zip: entries sorted, deflate, fixed date and mode.
pub fn write_zip(target: &Path, files: &BTreeMap<String, Vec<u8>>) -> Result<(), String> {
    use zip::write::SimpleFileOptions;
    let parent = target
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let tmp = tempfile::NamedTempFile::new_in(parent)
        .map_err(|e| format!("{}: {e}", parent.display()))?;
    let mut w = zip::ZipWriter::new(tmp.reopen().map_err(|e| e.to_string())?);
    let opts = SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Deflated)
        .last_modified_time(zip::DateTime::default())
        .unix_permissions(0o644);
    let zerr = |e: zip::result::ZipError| format!("{}: {e}", target.display());
    for (name, bytes) in files {
        w.start_file(name.as_str(), opts).map_err(zerr)?;
        w.write_all(bytes)
            .map_err(|e| format!("{}: {e}", target.display()))?;
    }
    w.finish().map_err(zerr)?;
    tmp.persist(target)
        .map_err(|e| format!("{}: {e}", target.display()))?;
    Ok(())
}

/// `retort bundle`.
pub fn command(
    a: &crate::cli::RecipeArgs,
    output: &Path,
    out: Option<&Path>,
    no_data: bool,
    license: Option<&str>,
    catalog: &[&'static dyn stages::stage::Stage],
) -> Exit {
    let plan = match crate::cli::phase1(a, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    let out = out
        .map(Path::to_path_buf)
        .unwrap_or_else(|| plan.policy.root.join("out"));
    let (mut c, run) = match gather(&plan, &a.recipe, &out, !no_data) {
        Ok(x) => x,
        Err(e) => {
            eprintln!("error: {e}");
            return Exit::Usage;
        }
    };
    if let (Some(now), Some(then)) = (plan.recipes.first(), run.recipes.first()) {
        if now.hash != then.hash {
            eprintln!(
                "warning: the recipe changed since the run in {}; the bundle holds the recipe as it is now and that older run's results",
                out.display()
            );
        }
    }
    let doc = metadata(&plan, &c, &run, license);
    let bytes = match crate::outputs::json_bytes(&doc) {
        Ok(b) => b,
        Err(e) => {
            eprintln!("error: {e}");
            return Exit::StepFailed;
        }
    };
    c.files.insert(METADATA.to_string(), bytes);
    if let Err(e) = write_zip(output, &c.files) {
        eprintln!("error: {e}");
        return Exit::StepFailed;
    }
    println!(
        "{}: {} files ({} recipes, {} data files{}, {} results) and {METADATA}",
        output.display(),
        c.files.len(),
        c.recipes.len(),
        c.data.len(),
        if no_data { " by hash only" } else { "" },
        c.results.len()
    );
    Exit::Ok
}
