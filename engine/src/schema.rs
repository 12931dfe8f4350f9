//! `retort schema`: a JSON Schema (draft 2020-12) of the recipe format, built from
//! the stage registry so editors complete and check every stage's options.
//!
//! The recipe's own keys mirror [`crate::recipe::raw`] (a unit test keeps the two in
//! step). Each step is `{ stage, from, options, about }`; `stage` is one of the
//! registry's names, and an `if`/`then` per stage puts that stage's options schema
//! (its `schemars` schema, `$defs` moved to the top under `<stage>.<Name>`) under
//! `options`. Any option value may instead be a `{{ parameter }}` template, which is
//! resolved and type-checked by `retort check`.

use serde_json::{json, Map, Value};
use stages::stage::Stage;

/// The `$defs` name of a template string.
const TEMPLATE: &str = "#/$defs/template";

/// Rewrites `#/$defs/X` references of one stage's schema to `#/$defs/<prefix>.X`.
fn rename_refs(v: &mut Value, prefix: &str) {
    match v {
        Value::Object(o) => {
            if let Some(Value::String(r)) = o.get_mut("$ref") {
                if let Some(name) = r.strip_prefix("#/$defs/") {
                    *r = format!("#/$defs/{prefix}.{name}");
                }
            }
            for (_, x) in o.iter_mut() {
                rename_refs(x, prefix);
            }
        }
        Value::Array(a) => a.iter_mut().for_each(|x| rename_refs(x, prefix)),
        _ => {}
    }
}

/// Whether a schema node says what a value may be (as opposed to a bare annotation).
fn is_value_schema(o: &Map<String, Value>) -> bool {
    ["type", "enum", "const", "oneOf", "anyOf", "allOf", "$ref"]
        .iter()
        .any(|k| o.contains_key(*k))
}

/// Lets every value in `v` be a `{{ parameter }}` template as well.
fn templatable(v: Value) -> Value {
    templatable_node(v, true)
}

/// As [`templatable`]; `wrap` false leaves the node itself as it is (its values
/// still take templates).
fn templatable_node(v: Value, wrap: bool) -> Value {
    let Value::Object(mut o) = v else { return v };
    for key in ["properties", "$defs", "patternProperties"] {
        if let Some(Value::Object(props)) = o.remove(key) {
            let inner: Map<String, Value> = props
                .into_iter()
                .map(|(k, s)| (k, templatable(s)))
                .collect();
            o.insert(key.into(), Value::Object(inner));
        }
    }
    for key in ["items", "additionalProperties"] {
        if let Some(s) = o.remove(key) {
            let s = if s.is_object() { templatable(s) } else { s };
            o.insert(key.into(), s);
        }
    }
    if let Some(Value::Array(items)) = o.remove("prefixItems") {
        o.insert(
            "prefixItems".into(),
            Value::Array(items.into_iter().map(templatable).collect()),
        );
    }
    for key in ["oneOf", "anyOf", "allOf"] {
        if let Some(Value::Array(branches)) = o.remove(key) {
            // Branches keep their shape; the node as a whole takes a template.
            let inner = branches
                .into_iter()
                .map(|b| match b {
                    Value::Object(mut bo) => {
                        for k in ["properties", "items", "additionalProperties", "prefixItems"] {
                            if let Some(x) = bo.remove(k) {
                                let mut tmp = Map::new();
                                tmp.insert(k.into(), x);
                                if let Value::Object(t) = templatable(Value::Object(tmp)) {
                                    bo.extend(t);
                                }
                            }
                        }
                        Value::Object(bo)
                    }
                    other => other,
                })
                .collect();
            o.insert(key.into(), Value::Array(inner));
        }
    }
    let is_string_only = o.get("type") == Some(&json!("string")) && !o.contains_key("enum");
    if wrap && is_value_schema(&o) && !is_string_only {
        // Annotations stay outside so editors still show them.
        let mut outer = Map::new();
        for k in ["description", "default", "title", "x-unit"] {
            if let Some(x) = o.remove(k) {
                outer.insert(k.into(), x);
            }
        }
        outer.insert(
            "anyOf".into(),
            json!([Value::Object(o), { "$ref": TEMPLATE }]),
        );
        return Value::Object(outer);
    }
    Value::Object(o)
}

/// The JSON Schema of a recipe, for this catalog.
pub fn recipe_schema(catalog: &[&'static dyn Stage]) -> Value {
    let mut defs = Map::new();
    let mut conditions = Vec::new();
    let names: Vec<&str> = catalog.iter().map(|s| s.info().name).collect();
    for s in catalog {
        let name = s.info().name;
        let mut schema = serde_json::to_value(s.options_schema()).unwrap_or(json!({}));
        rename_refs(&mut schema, name);
        if let Some(o) = schema.as_object_mut() {
            o.remove("$schema");
            if let Some(Value::Object(sub)) = o.remove("$defs") {
                for (k, d) in sub {
                    defs.insert(format!("{name}.{k}"), templatable(d));
                }
            }
            if !o.contains_key("description") {
                o.insert("description".into(), json!(s.info().summary));
            }
        }
        let options_def = format!("{name}.options");
        defs.insert(options_def.clone(), templatable_node(schema, false));
        // `options:` left empty is null: no options given.
        conditions.push(json!({
            "if": { "properties": { "stage": { "const": name } }, "required": ["stage"] },
            "then": { "properties": { "options": {
                "anyOf": [{ "type": "null" }, { "$ref": format!("#/$defs/{options_def}") }]
            } } }
        }));
    }
    let stage_choices: Vec<Value> = catalog
        .iter()
        .map(|s| json!({ "const": s.info().name, "description": s.info().summary }))
        .collect();
    defs.insert(
        "template".into(),
        json!({
            "description": "A `{{ parameter }}` template, replaced by the parameter's value.",
            "type": "string",
            "pattern": "\\{\\{\\s*[A-Za-z0-9_-]+\\s*\\}\\}"
        }),
    );
    defs.insert(
        "names".into(),
        json!({
            "description": "A sample set or step, or a list of them (steps of an included recipe as `ns/step`).",
            "oneOf": [
                { "type": "string" },
                { "type": "array", "items": { "type": "string" } }
            ]
        }),
    );
    defs.insert(
        "step".into(),
        json!({
            "description": "One step: a stage applied to its inputs with options.",
            "type": "object",
            "additionalProperties": false,
            "required": ["stage"],
            "properties": {
                "stage": { "description": "The stage (see `retort stages`).", "oneOf": stage_choices },
                "from": {
                    "description": "Inputs: a name, a list of names, or a map of input port to name(s).",
                    "oneOf": [
                        { "$ref": "#/$defs/names" },
                        { "type": "object", "additionalProperties": { "$ref": "#/$defs/names" } }
                    ]
                },
                "options": { "description": "The stage's options (see `retort stages NAME`).", "type": ["object", "null"] },
                "about": { "description": "A note on the step, shown in the report.", "type": "string" }
            },
            "allOf": conditions
        }),
    );
    let _ = names;
    json!({
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": format!("urn:retort:recipe-schema:{}", crate::VERSION),
        "title": "retort recipe",
        "description": "A retort analysis recipe. Generated by `retort schema` from the stage catalog.",
        "type": "object",
        "additionalProperties": false,
        "required": ["id"],
        "properties": {
            "id": { "description": "Short id; namespaces the recipe's steps when it is included.", "type": "string" },
            "title": { "type": "string" },
            "description": { "type": "string" },
            "author": { "type": "string" },
            "parameters": {
                "description": "Typed parameters with defaults; `--set NAME=VALUE` and `include: set:` override them.",
                "type": ["object", "null"],
                "additionalProperties": {
                    "type": "object",
                    "additionalProperties": false,
                    "required": ["value"],
                    "properties": {
                        "value": { "type": ["number", "string", "boolean", "array"] },
                        "unit": { "type": "string" },
                        "about": { "type": "string" }
                    }
                }
            },
            "samples": {
                "description": "Sample sets: a file pattern (one item per file, named by its stem) or { files, item }.",
                "type": ["object", "null"],
                "additionalProperties": {
                    "oneOf": [
                        { "type": "string" },
                        {
                            "type": "object",
                            "additionalProperties": false,
                            "required": ["files"],
                            "properties": {
                                "files": { "type": "string" },
                                "item": { "description": "Regex on the file name; its first group names the item.", "type": "string" }
                            }
                        }
                    ]
                }
            },
            "steps": {
                "description": "Steps by id; each runs once per item of its inputs, or once when it gathers.",
                "type": ["object", "null"],
                "additionalProperties": { "$ref": "#/$defs/step" }
            },
            "checks": {
                "description": "Expected values: `expect` with `tolerance`, or `within: [low, high]`.",
                "type": "array",
                "items": {
                    "type": "object",
                    "additionalProperties": false,
                    "required": ["result"],
                    "properties": {
                        "result": { "description": "`step.result_name`.", "type": "string" },
                        "item": { "type": "string" },
                        "expect": { "anyOf": [{ "type": "number" }, { "$ref": "#/$defs/template" }] },
                        "tolerance": { "anyOf": [{ "type": "number", "minimum": 0 }, { "$ref": "#/$defs/template" }] },
                        "within": { "type": "array", "items": { "anyOf": [{ "type": "number" }, { "$ref": "#/$defs/template" }] }, "minItems": 2, "maxItems": 2 }
                    },
                    "oneOf": [
                        { "required": ["expect", "tolerance"], "not": { "required": ["within"] } },
                        { "required": ["within"], "not": { "anyOf": [{ "required": ["expect"] }, { "required": ["tolerance"] }] } }
                    ]
                }
            },
            "include": {
                "description": "Other recipes (relative paths), or { recipe, set, as }.",
                "type": "array",
                "items": {
                    "oneOf": [
                        { "type": "string" },
                        {
                            "type": "object",
                            "additionalProperties": false,
                            "required": ["recipe"],
                            "properties": {
                                "recipe": { "type": "string" },
                                "set": { "type": "object" },
                                "as": { "type": "string" }
                            }
                        }
                    ]
                }
            }
        },
        "$defs": defs
    })
}

/// `retort schema`.
pub fn command(catalog: &[&'static dyn Stage]) -> crate::exit::Exit {
    match serde_json::to_string_pretty(&recipe_schema(catalog)) {
        Ok(s) => {
            println!("{s}");
            crate::exit::Exit::Ok
        }
        Err(e) => {
            eprintln!("error: {e}");
            crate::exit::Exit::StepFailed
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn templates_are_accepted_where_numbers_are_expected() {
        let s = templatable(json!({ "type": "integer", "description": "d", "default": 5 }));
        assert_eq!(s["description"], "d");
        assert_eq!(s["anyOf"][1]["$ref"], TEMPLATE);
        assert_eq!(s["anyOf"][0]["type"], "integer");
        // Strings take templates already.
        assert_eq!(
            templatable(json!({ "type": "string" })),
            json!({ "type": "string" })
        );
    }

    #[test]
    fn every_stage_has_its_options_under_its_name() {
        let s = recipe_schema(stages::CATALOG);
        for st in stages::CATALOG {
            let n = st.info().name;
            assert!(s["$defs"].get(format!("{n}.options")).is_some(), "{n}");
        }
        // Every $ref points at a definition that exists.
        fn refs(v: &Value, out: &mut Vec<String>) {
            match v {
                Value::Object(o) => {
                    if let Some(Value::String(r)) = o.get("$ref") {
                        out.push(r.clone());
                    }
                    o.values().for_each(|x| refs(x, out));
                }
                Value::Array(a) => a.iter().for_each(|x| refs(x, out)),
                _ => {}
            }
        }
        let mut all = Vec::new();
        refs(&s, &mut all);
        for r in all {
            let name = r.strip_prefix("#/$defs/").expect("local ref");
            assert!(s["$defs"].get(name).is_some(), "dangling {r}");
        }
    }

    #[test]
    fn the_schema_knows_every_key_of_the_raw_recipe() {
        // The raw model refuses unknown keys; the schema must list the same ones.
        let s = recipe_schema(stages::CATALOG);
        let keys: Vec<&String> = s["properties"].as_object().expect("props").keys().collect();
        let text = include_str!("recipe/raw.rs");
        let raw_block = text
            .split("pub struct RawRecipe {")
            .nth(1)
            .and_then(|t| t.split("\n}\n").next())
            .expect("RawRecipe");
        let fields: Vec<&str> = raw_block
            .lines()
            .filter_map(|l| l.trim().strip_prefix("pub "))
            .map(|f| f.split(':').next().unwrap_or("").trim())
            .collect();
        for name in &fields {
            assert!(keys.iter().any(|k| k == name), "schema lacks `{name}`");
        }
        assert_eq!(keys.len(), fields.len(), "{fields:?}");
    }
}
