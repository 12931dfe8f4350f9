//! W3C PROV-JSON (`provenance.json`): input files and artifacts are entities, node
//! runs are activities, retort is the software agent.
//!
//! Identifiers: `retort:file/<content hash>`, `retort:artifact/<node key>`,
//! `retort:run/<node key>`, `retort:engine`. Cached nodes keep the activity of the
//! run that made them (start time, duration and host come from the cache entry).
//! The PROV-JSON top level allows only PROV record types, so the format version is
//! the agent's `retort:schema_version` attribute.
//!
//! The document is serialized as it is walked ([`Document`] implements `Serialize`),
//! so a run of many thousand nodes never holds it in memory as a JSON tree.

use crate::graph::{Graph, NodeInput, Ref};
use crate::plan::Plan;
use crate::record::NodeStatus;
use crate::scheduler::Outcome;
use serde::ser::{SerializeMap, Serializer};
use serde::Serialize;
use serde_json::{json, Map, Value};
use std::collections::HashSet;

pub const PROVENANCE_SCHEMA_VERSION: u32 = 1;

/// The PROV-JSON document of a run.
pub struct Document<'a> {
    pub plan: &'a Plan,
    pub graph: &'a Graph,
    pub outcomes: &'a [Outcome],
    pub host: &'a str,
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum Part {
    Entity,
    Activity,
    Used,
    Generated,
    Associated,
}

impl Document<'_> {
    /// Calls `emit(id, record)` for every record of one part, in a fixed order
    /// (files, then nodes in graph order; each distinct key once).
    fn each<E>(
        &self,
        part: Part,
        mut emit: impl FnMut(String, Value) -> Result<(), E>,
    ) -> Result<(), E> {
        let (plan, graph) = (self.plan, self.graph);
        if part == Part::Entity {
            let mut seen = HashSet::new();
            for f in graph.files.iter().filter(|f| seen.insert(&f.hash)) {
                let e = json!({ "prov:type": "retort:InputFile", "prov:label": f.shown, "retort:blake3": f.hash, "retort:bytes": f.bytes });
                emit(format!("retort:file/{}", f.hash), e)?;
            }
        }
        let mut seen = HashSet::new();
        for (i, node) in graph.nodes.iter().enumerate() {
            if !seen.insert(&node.key) {
                continue;
            }
            let step = &plan.steps[node.step];
            let o = &self.outcomes[i];
            let run = format!("retort:run/{}", node.key);
            let art = format!("retort:artifact/{}", node.key);
            let made = matches!(o.status, NodeStatus::Ran | NodeStatus::Cached);
            match part {
                Part::Activity => emit(run, activity(plan, graph, i, o))?,
                Part::Associated => emit(
                    format!("_:assoc/{}", node.key),
                    json!({ "prov:activity": run, "prov:agent": "retort:engine" }),
                )?,
                Part::Used => {
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
                            emit(
                                format!("_:used/{}/{n}", node.key),
                                json!({ "prov:activity": run, "prov:entity": ent }),
                            )?;
                            n += 1;
                        }
                    }
                }
                Part::Entity if made => {
                    let mut e = json!({ "prov:type": "retort:Artifact", "retort:step": step.id, "retort:key": node.key });
                    if let Some(item) = &node.item {
                        e["retort:item"] = json!(item);
                    }
                    emit(art, e)?;
                }
                Part::Generated if made => emit(
                    format!("_:gen/{}", node.key),
                    json!({ "prov:entity": art, "prov:activity": run }),
                )?,
                Part::Entity | Part::Generated => {}
            }
        }
        Ok(())
    }
}

fn activity(plan: &Plan, graph: &Graph, i: usize, o: &Outcome) -> Value {
    let node = &graph.nodes[i];
    let step = &plan.steps[node.step];
    let info = step.stage.info();
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
    Value::Object(act)
}

/// One part of the document, serialized as a map while it is walked.
struct Section<'a>(&'a Document<'a>, Part);

impl Serialize for Section<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(None)?;
        self.0.each(self.1, |k, v| m.serialize_entry(&k, &v))?;
        m.end()
    }
}

impl Serialize for Document<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(None)?;
        m.serialize_entry(
            "prefix",
            &json!({ "retort": "urn:retort:", "xsd": "http://www.w3.org/2001/XMLSchema#" }),
        )?;
        let agent = json!({ "retort:engine": {
            "prov:type": "prov:SoftwareAgent",
            "prov:label": "retort",
            "retort:version": crate::VERSION,
            "retort:host": self.host,
            "retort:schema_version": PROVENANCE_SCHEMA_VERSION,
        } });
        m.serialize_entry("agent", &agent)?;
        for (name, part) in [
            ("entity", Part::Entity),
            ("activity", Part::Activity),
            ("used", Part::Used),
            ("wasGeneratedBy", Part::Generated),
            ("wasAssociatedWith", Part::Associated),
        ] {
            m.serialize_entry(name, &Section(self, part))?;
        }
        m.end()
    }
}
