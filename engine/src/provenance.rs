//! W3C PROV-JSON (`provenance.json`): input files and artifacts are entities, node
//! runs are activities, retort is the software agent.
//!
//! Identifiers: `retort:file/<content hash>`, `retort:artifact/<node key>`,
//! `retort:run/<node key>`, `retort:engine`. Cached nodes keep the activity of the
//! run that made them (start time, duration and host come from the cache entry).
//! The PROV-JSON top level allows only PROV record types, so the format version is
//! the agent's `retort:schema_version` attribute.

use crate::graph::{Graph, NodeInput, Ref};
use crate::plan::Plan;
use crate::record::NodeStatus;
use crate::scheduler::Outcome;
use serde_json::{json, Map, Value};

pub const PROVENANCE_SCHEMA_VERSION: u32 = 1;

pub fn document(plan: &Plan, graph: &Graph, outcomes: &[Outcome], host: &str) -> Value {
    let mut entity = Map::new();
    let mut activity = Map::new();
    let mut used = Map::new();
    let mut generated = Map::new();
    let mut associated = Map::new();
    for f in &graph.files {
        entity.insert(
            format!("retort:file/{}", f.hash),
            json!({ "prov:type": "retort:InputFile", "prov:label": f.shown, "retort:blake3": f.hash, "retort:bytes": f.bytes }),
        );
    }
    let mut seen = std::collections::HashSet::new();
    for (i, node) in graph.nodes.iter().enumerate() {
        let step = &plan.steps[node.step];
        let info = step.stage.info();
        let o = &outcomes[i];
        let art = format!("retort:artifact/{}", node.key);
        let run = format!("retort:run/{}", node.key);
        if !seen.insert(node.key.clone()) {
            continue;
        }
        let (status, error) = match &o.status {
            NodeStatus::Ran => ("ran", None),
            NodeStatus::Cached => ("cached", None),
            NodeStatus::Failed { error } => ("failed", Some(error.clone())),
            NodeStatus::Skipped { because } => ("skipped", Some(because.clone())),
        };
        let mut act = Map::new();
        act.insert(
            "prov:label".into(),
            json!(crate::scheduler::node_label(plan, graph, i)),
        );
        act.insert("retort:stage".into(), json!(info.name));
        act.insert("retort:stage_version".into(), json!(info.version));
        act.insert("retort:options".into(), json!(step.options.to_string()));
        act.insert("retort:status".into(), json!(status));
        if let Some(e) = error {
            act.insert("retort:error".into(), json!(e));
        }
        if let Some(m) = &o.meta {
            act.insert("prov:startTime".into(), json!(m.started));
            act.insert("retort:duration_ms".into(), json!(m.duration_ms));
            act.insert("retort:host".into(), json!(m.host));
            act.insert("retort:engine_version".into(), json!(m.engine_version));
        }
        activity.insert(run.clone(), Value::Object(act));
        associated.insert(
            format!("_:assoc/{}", node.key),
            json!({ "prov:activity": run, "prov:agent": "retort:engine" }),
        );
        let mut n = 0;
        for inp in &node.inputs {
            let refs: Vec<Ref> = match inp {
                NodeInput::Missing => Vec::new(),
                NodeInput::One(r) => vec![*r],
                NodeInput::Many(v) => v.iter().map(|(_, r)| *r).collect(),
            };
            for r in refs {
                let ent = match r {
                    Ref::File(f) => format!("retort:file/{}", graph.files[f].hash),
                    Ref::Node(u) => format!("retort:artifact/{}", graph.nodes[u].key),
                };
                used.insert(
                    format!("_:used/{}/{n}", node.key),
                    json!({ "prov:activity": run, "prov:entity": ent }),
                );
                n += 1;
            }
        }
        if matches!(o.status, NodeStatus::Ran | NodeStatus::Cached) {
            let mut e = json!({ "prov:type": "retort:Artifact", "retort:step": step.id, "retort:key": node.key });
            if let Some(item) = &node.item {
                e["retort:item"] = json!(item);
            }
            entity.insert(art.clone(), e);
            generated.insert(
                format!("_:gen/{}", node.key),
                json!({ "prov:entity": art, "prov:activity": run }),
            );
        }
    }
    // The maps are moved in (json! would copy them through serialization).
    let mut doc = Map::new();
    doc.insert(
        "prefix".into(),
        json!({ "retort": "urn:retort:", "xsd": "http://www.w3.org/2001/XMLSchema#" }),
    );
    doc.insert(
        "agent".into(),
        json!({ "retort:engine": {
            "prov:type": "prov:SoftwareAgent",
            "prov:label": "retort",
            "retort:version": crate::VERSION,
            "retort:host": host,
            "retort:schema_version": PROVENANCE_SCHEMA_VERSION,
        } }),
    );
    doc.insert("entity".into(), Value::Object(entity));
    doc.insert("activity".into(), Value::Object(activity));
    doc.insert("used".into(), Value::Object(used));
    doc.insert("wasGeneratedBy".into(), Value::Object(generated));
    doc.insert("wasAssociatedWith".into(), Value::Object(associated));
    Value::Object(doc)
}
