//! Sharing and writing recipes, end to end through the real `retort` binary:
//! `verify`, `lock` and `run --locked`, `bundle` (round trip and RO-Crate 1.1
//! metadata), `new`, `schema` (every fixture and demo recipe validated with a JSON
//! Schema validator) and the generated docs (stale-file test).

mod engine_common;
use engine_common::*;
use serde_json::Value;
use std::path::{Path, PathBuf};

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("..")
}

// ---------------------------------------------------------------- verify

#[test]
fn verify_runs_only_the_checked_nodes_and_exits_3_when_a_check_fails() {
    let t = fixture("basic");
    let r = run(t.path(), &["verify", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    // The check is on peak [film_a]: raw, smooth and peak of film_a, out of 10 nodes.
    assert!(r
        .stdout
        .contains("1 checks over 3 of 10 nodes (3 ran, 0 cached)"));
    assert!(r
        .stdout
        .contains("pass  peak.max_position [film_a]: expected between 1.9 and 2.1, found"));
    assert!(
        !t.path().join("out").exists(),
        "verify writes no output folder"
    );
    // The nodes are in the shared cache: a run reuses them.
    let r = run(t.path(), &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    assert_eq!(counts(&t.path().join("out")), (7, 3, 0, 0));
    // A check that cannot pass: exit 3, the check shown as failed with what was found.
    let recipe = t.path().join("recipe.yaml");
    let text = std::fs::read_to_string(&recipe).unwrap();
    std::fs::write(
        &recipe,
        text.replace("within: [1.9, 2.1]", "within: [2.5, 2.6]"),
    )
    .unwrap();
    let r = run(t.path(), &["verify", "recipe.yaml"]);
    assert_eq!(r.code, 3);
    assert!(r
        .stdout
        .contains("FAIL  peak.max_position [film_a]: expected between 2.5 and 2.6, found 2"));
    // A recipe error: exit 2, nothing run.
    std::fs::write(&recipe, text.replace("measure.maximum", "measure.maximun")).unwrap();
    assert_eq!(run(t.path(), &["verify", "recipe.yaml"]).code, 2);
}

#[test]
fn verify_exits_1_when_a_needed_node_fails() {
    let t = fixture("basic");
    std::fs::write(
        t.path().join("data/film_a.csv"),
        "energy_eV,absorbance\n1.0\n",
    )
    .unwrap();
    let r = run(t.path(), &["verify", "recipe.yaml"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("FAIL  peak.max_position [film_a]"));
}

// ---------------------------------------------------------------- lock

#[test]
fn a_lock_pins_inputs_and_stage_versions_and_locked_runs_refuse_changes() {
    let t = fixture("basic");
    let dir = t.path();
    // --locked without a lock: refused.
    let r = run(dir, &["run", "recipe.yaml", "--locked"]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("recipe.lock does not exist"));
    assert_eq!(run(dir, &["lock", "recipe.yaml"]).code, 0);
    let lock = read_json(&dir.join("recipe.lock"));
    assert_eq!(lock["schema_version"], 1);
    assert_eq!(
        lock["stages"]["import.delimited"],
        stages::find("import.delimited").unwrap().info().version
    );
    let hash = blake3::hash(&std::fs::read(dir.join("data/film_b.csv")).unwrap())
        .to_hex()
        .to_string();
    assert_eq!(lock["files"]["data/film_b.csv"], hash.as_str());
    assert_eq!(run(dir, &["run", "recipe.yaml", "--locked"]).code, 0);
    // Changed input, removed input, new input, changed stage version: all listed.
    std::fs::rename(dir.join("data/film_c.csv"), dir.join("data/film_b.csv")).unwrap();
    std::fs::copy(dir.join("data/film_a.csv"), dir.join("data/film_d.csv")).unwrap();
    let mut l = lock.clone();
    l["stages"]["smooth.moving_average"] = serde_json::json!(99);
    std::fs::write(
        dir.join("recipe.lock"),
        serde_json::to_vec_pretty(&l).unwrap(),
    )
    .unwrap();
    let before = std::fs::read(dir.join("out/results.json")).unwrap();
    let r = run(dir, &["run", "recipe.yaml", "--locked"]);
    assert_eq!(r.code, 2);
    for needle in [
        "differs from recipe.lock in 4 ways",
        "stage smooth.moving_average: version 1, the lock has version 99",
        "input file data/film_b.csv: changed",
        "input file data/film_d.csv: new, not in the lock",
        "input file data/film_c.csv: in the lock, missing now",
        "nothing was run",
    ] {
        assert!(r.stderr.contains(needle), "missing `{needle}`");
    }
    assert_eq!(
        std::fs::read(dir.join("out/results.json")).unwrap(),
        before,
        "a refused run writes nothing"
    );
    // Without --locked the same differences are warnings and the run goes on.
    let r = run(dir, &["run", "recipe.yaml"]);
    assert_eq!(r.code, 0);
    assert!(r
        .stderr
        .contains("warning: the run differs from recipe.lock in 4 ways"));
    // Re-locking accepts them.
    assert_eq!(run(dir, &["lock", "recipe.yaml"]).code, 0);
    let r = run(dir, &["run", "recipe.yaml", "--locked"]);
    assert_eq!(r.code, 0);
    assert!(!r.stderr.contains("differs"));
}

#[test]
fn a_lock_pins_included_recipes() {
    let t = chapter();
    assert_eq!(run(t.path(), &["lock", "chapter.yaml"]).code, 0);
    let lock = read_json(&t.path().join("chapter.lock"));
    let inc = t.path().join("bands/recipe.yaml");
    let text = std::fs::read_to_string(&inc).unwrap();
    assert_eq!(
        lock["includes"]["bands/recipe.yaml"],
        blake3::hash(text.as_bytes()).to_hex().as_str()
    );
    std::fs::write(&inc, text.replace("value: 5", "value: 3")).unwrap();
    let r = run(t.path(), &["run", "chapter.yaml", "--locked"]);
    assert_eq!(r.code, 2);
    assert!(r
        .stderr
        .contains("included recipe bands/recipe.yaml: changed"));
}

// ---------------------------------------------------------------- bundle

fn chapter() -> tempfile::TempDir {
    let t = fixture("chapter");
    copy_dir(&cases().join("basic"), &t.path().join("bands"));
    t
}

fn unzip(zip_path: &Path, to: &Path) -> Vec<String> {
    let f = std::fs::File::open(zip_path).unwrap();
    let mut z = zip::ZipArchive::new(f).unwrap();
    let names: Vec<String> = (0..z.len())
        .map(|i| z.by_index(i).unwrap().name().unwrap().to_string())
        .collect();
    for i in 0..z.len() {
        let e = z.by_index(i).unwrap();
        assert_eq!(
            e.compression(),
            zip::CompressionMethod::Deflated,
            "{:?}",
            e.name()
        );
    }
    z.extract(to).unwrap();
    names
}

#[test]
fn a_bundle_rerun_elsewhere_gives_byte_identical_results() {
    let t = chapter();
    assert_eq!(run(t.path(), &["lock", "chapter.yaml"]).code, 0);
    assert_eq!(run(t.path(), &["run", "chapter.yaml", "--locked"]).code, 0);
    let zip1 = t.path().join("../chapter-bundle-1.zip");
    let zip_path = tempfile::tempdir().unwrap();
    let zip1 = zip_path.path().join(zip1.file_name().unwrap());
    let r = run(
        t.path(),
        &["bundle", "chapter.yaml", "-o", zip1.to_str().unwrap()],
    );
    assert_eq!(r.code, 0);
    // Deterministic: the same run bundled again gives the same bytes.
    let zip2 = zip_path.path().join("again.zip");
    assert_eq!(
        run(
            t.path(),
            &["bundle", "chapter.yaml", "-o", zip2.to_str().unwrap()]
        )
        .code,
        0
    );
    assert_eq!(std::fs::read(&zip1).unwrap(), std::fs::read(&zip2).unwrap());
    let elsewhere = tempfile::tempdir().unwrap();
    let names = unzip(&zip1, elsewhere.path());
    let mut sorted = names.clone();
    sorted.sort();
    assert_eq!(names, sorted, "entries are sorted");
    for n in [
        "chapter.yaml",
        "bands/recipe.yaml",
        "bands/data/film_a.csv",
        "results/results.json",
        "results/report.html",
        "results/provenance.json",
        "results/run.json",
        "ro-crate-metadata.json",
    ] {
        assert!(names.iter().any(|x| x == n), "{n} not in the bundle");
    }
    assert!(!names
        .iter()
        .any(|n| n.starts_with(".retort") || n.starts_with("out/")));
    // The unpacked bundle runs as is, with no cache, held to its lock, and gives the
    // same results.json.
    assert!(names.iter().any(|n| n == "chapter.lock"));
    let r = run(elsewhere.path(), &["run", "chapter.yaml", "--locked"]);
    assert_eq!(r.code, 0);
    let again = std::fs::read(elsewhere.path().join("out/results.json")).unwrap();
    assert_eq!(
        again,
        std::fs::read(t.path().join("out/results.json")).unwrap()
    );
    assert_eq!(
        again,
        std::fs::read(elsewhere.path().join("results/results.json")).unwrap()
    );
    assert_eq!(
        counts(&elsewhere.path().join("out")).1,
        0,
        "nothing came from a cache"
    );
}

fn entity<'a>(graph: &'a [Value], id: &str) -> &'a Value {
    graph
        .iter()
        .find(|e| e["@id"] == id)
        .unwrap_or_else(|| panic!("no entity {id}"))
}

fn has_type(e: &Value, t: &str) -> bool {
    e["@type"] == t
        || e["@type"]
            .as_array()
            .is_some_and(|a| a.iter().any(|x| x == t))
}

#[test]
fn the_bundle_metadata_follows_ro_crate_1_1() {
    let t = chapter();
    assert_eq!(run(t.path(), &["run", "chapter.yaml"]).code, 0);
    let z = tempfile::tempdir().unwrap();
    let zip_file = z.path().join("b.zip");
    let r = run(
        t.path(),
        &[
            "bundle",
            "chapter.yaml",
            "-o",
            zip_file.to_str().unwrap(),
            "--license",
            "https://spdx.org/licenses/CC-BY-4.0",
        ],
    );
    assert_eq!(r.code, 0);
    let names = unzip(&zip_file, &z.path().join("u"));
    let meta = read_json(&z.path().join("u/ro-crate-metadata.json"));
    // RO-Crate 1.1, "Root Data Entity" and "Metadata Descriptor" sections: the context,
    // a descriptor that conformsTo the spec and is about `./`, a Dataset root with
    // name, description, datePublished (ISO 8601), license and hasPart.
    assert_eq!(meta["@context"], "https://w3id.org/ro/crate/1.1/context");
    let g = meta["@graph"].as_array().unwrap();
    let d = entity(g, "ro-crate-metadata.json");
    assert_eq!(d["@type"], "CreativeWork");
    assert_eq!(d["conformsTo"]["@id"], "https://w3id.org/ro/crate/1.1");
    assert_eq!(d["about"]["@id"], "./");
    let root = entity(g, "./");
    assert_eq!(root["@type"], "Dataset");
    assert_eq!(root["name"], "One chapter over the same films, three times");
    assert!(root["description"]
        .as_str()
        .unwrap()
        .contains("Includes the band recipe"));
    let run_json = read_json(&t.path().join("out/run.json"));
    assert_eq!(root["datePublished"], run_json["finished"]);
    assert_eq!(
        root["license"]["@id"],
        "https://spdx.org/licenses/CC-BY-4.0"
    );
    // Every file in the zip (but the descriptor) is a part of the root and a File
    // entity whose size and blake3 identifier match its bytes.
    let parts: Vec<&str> = root["hasPart"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["@id"].as_str().unwrap())
        .collect();
    for n in names.iter().filter(|n| *n != "ro-crate-metadata.json") {
        assert!(parts.contains(&n.as_str()), "{n} not in hasPart");
        let e = entity(g, n);
        assert!(has_type(e, "File"), "{n}");
        let bytes = std::fs::read(z.path().join("u").join(n)).unwrap();
        assert_eq!(e["contentSize"], bytes.len().to_string());
        assert_eq!(
            e["identifier"],
            format!("blake3:{}", blake3::hash(&bytes).to_hex())
        );
        assert!(e["encodingFormat"]
            .as_str()
            .is_some_and(|f| f.contains('/')));
    }
    assert_eq!(
        entity(g, "bands/data/film_a.csv")["encodingFormat"],
        "text/csv"
    );
    assert_eq!(
        entity(g, "results/report.html")["encodingFormat"],
        "text/html"
    );
    // The recipe is the main entity, a ComputationalWorkflow with its language; the
    // run is a CreateAction with the recipe as instrument, inputs and results.
    assert_eq!(root["mainEntity"]["@id"], "chapter.yaml");
    let wf = entity(g, "chapter.yaml");
    assert!(has_type(wf, "ComputationalWorkflow") && has_type(wf, "SoftwareSourceCode"));
    let lang = entity(g, wf["programmingLanguage"]["@id"].as_str().unwrap());
    assert_eq!(lang["@type"], "ComputerLanguage");
    let app = g
        .iter()
        .find(|e| e["@type"] == "SoftwareApplication" && e["name"] == "retort")
        .unwrap();
    assert_eq!(app["version"], env!("CARGO_PKG_VERSION"));
    let action = g.iter().find(|e| e["@type"] == "CreateAction").unwrap();
    assert_eq!(action["instrument"]["@id"], "chapter.yaml");
    assert_eq!(action["startTime"], run_json["started"]);
    let objects: Vec<&str> = action["object"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["@id"].as_str().unwrap())
        .collect();
    assert_eq!(
        objects,
        [
            "bands/data/film_a.csv",
            "bands/data/film_b.csv",
            "bands/data/film_c.csv"
        ]
    );
    assert!(action["result"]
        .as_array()
        .unwrap()
        .iter()
        .any(|r| r["@id"] == "results/results.json"));
    // Every reference in the graph resolves to an entity or is an absolute URL.
    fn ids(v: &Value, out: &mut Vec<String>) {
        match v {
            Value::Object(o) => {
                if o.len() == 1 {
                    if let Some(Value::String(s)) = o.get("@id") {
                        out.push(s.clone());
                    }
                }
                o.values().for_each(|x| ids(x, out));
            }
            Value::Array(a) => a.iter().for_each(|x| ids(x, out)),
            _ => {}
        }
    }
    let mut refs = Vec::new();
    ids(&meta["@graph"], &mut refs);
    for r in refs {
        assert!(
            r.starts_with("http") || g.iter().any(|e| e["@id"] == r.as_str()),
            "dangling {r}"
        );
    }
}

#[test]
fn a_bundle_without_data_records_paths_and_hashes_only() {
    let t = fixture("basic");
    let z = tempfile::tempdir().unwrap();
    let zip_file = z.path().join("b.zip");
    // No run yet: refused with a hint.
    let r = run(
        t.path(),
        &["bundle", "recipe.yaml", "-o", zip_file.to_str().unwrap()],
    );
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("run `retort run recipe.yaml` first"));
    assert_eq!(run(t.path(), &["run", "recipe.yaml"]).code, 0);
    assert_eq!(
        run(
            t.path(),
            &[
                "bundle",
                "recipe.yaml",
                "-o",
                zip_file.to_str().unwrap(),
                "--no-data"
            ]
        )
        .code,
        0
    );
    let names = unzip(&zip_file, &z.path().join("u"));
    assert!(!names.iter().any(|n| n.starts_with("data/")), "{names:?}");
    let meta = read_json(&z.path().join("u/ro-crate-metadata.json"));
    let g = meta["@graph"].as_array().unwrap();
    let bytes = std::fs::read(t.path().join("data/film_a.csv")).unwrap();
    let e = entity(g, "data/film_a.csv");
    assert_eq!(
        e["identifier"],
        format!("blake3:{}", blake3::hash(&bytes).to_hex())
    );
    assert_eq!(e["contentSize"], bytes.len().to_string());
    assert_eq!(entity(g, "./")["license"]["@id"], "#license-not-stated");
    // The unpacked bundle says plainly what is missing.
    let r = run(&z.path().join("u"), &["check", "recipe.yaml"]);
    assert_eq!(r.code, 2);
}

// ---------------------------------------------------------------- new

/// Per technique: a file its starter's sample set matches.
const STARTER_FIXTURES: &[(&str, &str)] = &[
    ("uvvis", "data/uvvis/film_a.csv"),
    ("xps", "data/xps/film_a_C1s.csv"),
    ("nmr", "data/nmr/batch_1.csv"),
    ("eds", "data/eds/point_1.csv"),
    ("xrd", "data/xrd/powder_a.csv"),
    ("particles", "data/images/field_1.png"),
    ("afm", "data/afm/scan_1.txt"),
    ("ediff", "data/ediff/pattern_1.png"),
];

#[test]
fn every_starter_recipe_checks_once_its_glob_matches_a_file() {
    let listed = run(Path::new("."), &["new"]);
    assert_eq!(listed.code, 0);
    for (technique, file) in STARTER_FIXTURES {
        assert!(listed.stdout.contains(technique));
        let t = tempfile::tempdir().unwrap();
        let recipe = format!("{technique}.yaml");
        assert_eq!(run(t.path(), &["new", technique, "-o", &recipe]).code, 0);
        let text = std::fs::read_to_string(t.path().join(&recipe)).unwrap();
        assert!(text.starts_with("# "), "{technique}: starts with a comment");
        // Without data the check says the pattern matched nothing.
        assert_eq!(run(t.path(), &["check", &recipe]).code, 2);
        let p = t.path().join(file);
        std::fs::create_dir_all(p.parent().unwrap()).unwrap();
        std::fs::write(&p, b"").unwrap();
        let r = run(t.path(), &["check", &recipe]);
        assert_eq!(r.code, 0, "{technique}");
        assert!(!r.stderr.contains("warning"), "{technique}: {}", r.stderr);
        // Refuses to overwrite without --force.
        assert_eq!(run(t.path(), &["new", technique, "-o", &recipe]).code, 2);
    }
    let r = run(Path::new("."), &["new", "uvvs"]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("did you mean `uvvis`"));
}

// ---------------------------------------------------------------- schema

fn schema() -> Value {
    let r = run(Path::new("."), &["schema"]);
    assert_eq!(r.code, 0);
    serde_json::from_str(&r.stdout).unwrap()
}

fn yaml_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for e in entries.flatten() {
        let p = e.path();
        let name = e.file_name().to_string_lossy().to_string();
        if p.is_dir() && !name.starts_with('.') && name != "out" && name != "bad" && name != "data"
        {
            yaml_files(&p, out);
        } else if name.ends_with(".yaml") || name.ends_with(".yml") {
            out.push(p);
        }
    }
}

fn errors(validator: &jsonschema::Validator, doc: &Value) -> Vec<String> {
    validator
        .iter_errors(doc)
        .map(|e| format!("{} at {}", e, e.instance_path()))
        .collect()
}

#[test]
fn every_fixture_demo_and_starter_recipe_validates_against_the_schema() {
    let s = schema();
    assert_eq!(s["$schema"], "https://json-schema.org/draft/2020-12/schema");
    let validator = jsonschema::validator_for(&s).expect("the schema is a valid JSON Schema");
    let mut files = Vec::new();
    yaml_files(&repo().join("tests/cases/engine"), &mut files);
    yaml_files(&repo().join("engine/src/scaffolds"), &mut files);
    let demo = repo().join("recipes-demo");
    let before = files.len();
    yaml_files(&demo, &mut files);
    if files.len() == before {
        eprintln!("NOTE: no recipes under recipes-demo/ yet; only fixtures and starters validated");
    }
    assert!(before >= 10, "{files:?}");
    for f in &files {
        let doc: Value = serde_yaml::from_str(&std::fs::read_to_string(f).unwrap()).unwrap();
        let errs = errors(&validator, &doc);
        assert!(errs.is_empty(), "{}: {errs:#?}", f.display());
    }
}

#[test]
fn the_schema_refuses_what_check_refuses() {
    let validator = jsonschema::validator_for(&schema()).unwrap();
    let ok: Value = serde_yaml::from_str("id: r\nparameters:\n  w: { value: 5 }\nsamples:\n  s: data/*.csv\nsteps:\n  raw: { stage: import.delimited, from: s }\n  smooth: { stage: smooth.moving_average, from: raw, options: { window: '{{ w }}' } }\nchecks:\n  - { result: smooth.x, item: a, expect: 1, tolerance: 0.1 }\n").unwrap();
    assert!(
        errors(&validator, &ok).is_empty(),
        "{:?}",
        errors(&validator, &ok)
    );
    let bad = |from: &str, to: &str| {
        let text = serde_json::to_string(&ok).unwrap().replace(from, to);
        assert_ne!(
            text,
            serde_json::to_string(&ok).unwrap(),
            "`{from}` not in the recipe"
        );
        let doc: Value = serde_json::from_str(&text).unwrap();
        errors(&validator, &doc)
    };
    // A misspelt stage, an unknown option, an option of the wrong type, an unknown
    // top-level key, a check with both forms.
    // `options:` left empty (null) is no options, as for `check`.
    assert!(bad("{\"window\":\"{{ w }}\"}", "null").is_empty());
    assert!(!bad("smooth.moving_average", "smooth.moving_avg").is_empty());
    assert!(!bad("\"window\"", "\"windw\"").is_empty());
    assert!(!bad("{{ w }}", "five").is_empty());
    assert!(!bad("\"checks\"", "\"chekcs\"").is_empty());
    assert!(!bad("\"tolerance\":0.1", "\"tolerance\":0.1,\"within\":[0,1]").is_empty());
}

// ---------------------------------------------------------------- generated docs

#[test]
fn the_committed_stage_catalog_and_methods_list_are_current() {
    for (file, flag) in [
        ("docs/stages.md", "--markdown"),
        ("docs/methods.md", "--methods"),
    ] {
        let r = run(Path::new("."), &["stages", flag]);
        assert_eq!(r.code, 0);
        let committed = std::fs::read_to_string(repo().join(file)).unwrap_or_default();
        assert!(
            committed == r.stdout,
            "{file} is stale: regenerate it with `cargo run -p engine -- stages {flag} > {file}` and commit it"
        );
    }
    // Every stage is in both, with each of its references.
    let stages_md = std::fs::read_to_string(repo().join("docs/stages.md")).unwrap();
    let methods_md = std::fs::read_to_string(repo().join("docs/methods.md")).unwrap();
    for s in stages::CATALOG {
        let info = s.info();
        assert!(
            stages_md.contains(&format!("\n## {}\n", info.name)),
            "{}",
            info.name
        );
        for r in info.references {
            assert!(methods_md.contains(&format!("### {}", r.key)), "{}", r.key);
        }
    }
}
