//! The generated documents: `retort stages --markdown` (docs/stages.md, the stage
//! catalog) and `retort stages --methods` (docs/methods.md, every method with its
//! published source). Both come from the registry only, so a test can regenerate
//! them and fail when the committed files are stale.

use serde_json::Value;
use stages::stage::Stage;
use std::collections::BTreeMap;

/// Text for a Markdown table cell: one line, pipes escaped.
fn cell(v: &Value) -> String {
    let s = match v {
        Value::Null => String::new(),
        Value::String(t) => t.clone(),
        other => format!("`{other}`"),
    };
    s.replace('\n', " ").replace('|', "\\|")
}

fn text(v: &Value) -> String {
    match v {
        Value::String(t) => t.clone(),
        Value::Null => String::new(),
        other => other.to_string(),
    }
}

/// The anchor GitHub-style renderers give a heading (lowercase, dots dropped).
fn anchor(name: &str) -> String {
    name.chars()
        .filter(|c| c.is_alphanumeric() || *c == '_' || *c == '-')
        .collect::<String>()
        .to_lowercase()
}

/// docs/stages.md.
pub fn stages_markdown(catalog: &[&'static dyn Stage]) -> String {
    let docs: Vec<Value> = catalog.iter().map(|s| crate::cli::stage_json(*s)).collect();
    let mut out = String::new();
    out.push_str("# Stage catalog\n\n");
    out.push_str(
        "Generated from the stage registry by `retort stages --markdown > docs/stages.md`;\n",
    );
    out.push_str("do not edit by hand (a test fails when this file is stale).\n\n");
    out.push_str("| stage | version | what it does |\n| --- | --- | --- |\n");
    for d in &docs {
        let name = text(&d["name"]);
        out.push_str(&format!(
            "| [`{name}`](#{}) | {} | {} |\n",
            anchor(&name),
            d["version"],
            cell(&d["summary"])
        ));
    }
    for d in &docs {
        let name = text(&d["name"]);
        out.push_str(&format!("\n## {name}\n\n"));
        out.push_str(&format!(
            "Version {}. {}\n\n",
            d["version"],
            text(&d["summary"])
        ));
        out.push_str("**Inputs**\n\n| input | kind | taken | about |\n| --- | --- | --- | --- |\n");
        for p in d["inputs"].as_array().into_iter().flatten() {
            let taken = format!(
                "{}{}",
                text(&p["arity"]),
                if p["optional"] == true {
                    ", optional"
                } else {
                    ""
                }
            );
            out.push_str(&format!(
                "| `{}` | {} | {taken} | {} |\n",
                text(&p["name"]),
                cell(&p["kind"]),
                cell(&p["about"])
            ));
        }
        out.push_str(&format!("\n**Gives** {}.\n\n", text(&d["output"])));
        let opts = d["options"].as_array().cloned().unwrap_or_default();
        if opts.is_empty() {
            out.push_str("**Options**: none.\n");
        } else {
            out.push_str(
                "**Options**\n\n| option | type | default | unit | description |\n| --- | --- | --- | --- | --- |\n",
            );
            for o in &opts {
                let default = match &o["default"] {
                    Value::Null => "none".to_string(),
                    v => format!("`{}`", v.to_string().replace('|', "\\|")),
                };
                out.push_str(&format!(
                    "| `{}` | {} | {default} | {} | {} |\n",
                    text(&o["name"]),
                    cell(&o["type"]),
                    cell(&o["unit"]),
                    cell(&o["description"])
                ));
            }
        }
        let refs = d["references"].as_array().cloned().unwrap_or_default();
        if !refs.is_empty() {
            out.push_str("\n**References**\n\n");
            for r in refs {
                out.push_str(&format!(
                    "- [{}] {}\n",
                    text(&r["key"]),
                    text(&r["citation"])
                ));
            }
        }
    }
    out
}

/// docs/methods.md: each stage's method and sources, then every source once.
pub fn methods_markdown(catalog: &[&'static dyn Stage]) -> String {
    let mut out = String::new();
    out.push_str("# Methods and their published sources\n\n");
    out.push_str(
        "Generated from the stage registry by `retort stages --methods > docs/methods.md`;\n",
    );
    out.push_str("do not edit by hand (a test fails when this file is stale). Each stage's own\n");
    out.push_str(
        "methods sentence, with every setting of a run, is written into that run's report.\n\n",
    );
    out.push_str("| stage | method | sources |\n| --- | --- | --- |\n");
    let mut sources: BTreeMap<&str, (&str, Vec<&str>)> = BTreeMap::new();
    for s in catalog {
        let info = s.info();
        let keys: Vec<String> = info
            .references
            .iter()
            .map(|r| format!("[{}](#{})", r.key, anchor(r.key)))
            .collect();
        out.push_str(&format!(
            "| `{}` | {} | {} |\n",
            info.name,
            info.summary.replace('|', "\\|"),
            if keys.is_empty() {
                "common practice (no single source)".to_string()
            } else {
                keys.join(", ")
            }
        ));
        for r in info.references {
            sources
                .entry(r.key)
                .or_insert((r.citation, Vec::new()))
                .1
                .push(info.name);
        }
    }
    out.push_str("\n## Sources\n");
    for (key, (citation, users)) in &sources {
        let used: Vec<String> = users.iter().map(|u| format!("`{u}`")).collect();
        out.push_str(&format!(
            "\n### {key}\n\n{citation}\n\nUsed by {}.\n",
            used.join(", ")
        ));
    }
    out
}
