//! `gather.table`: one row per item, one column per published result of the upstream step.
//!
//! Collects the records of every item of its input (fan-in) into a table. Numeric
//! results become number columns with their uncertainties; text results become text
//! columns. Bookkeeping only; no method to cite.

use crate::stage::{Inputs, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Scalar, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Results to include, by name, in this order; all of them when empty.
    pub results: Vec<String>,
    /// Table title; the step id is used when empty.
    pub title: String,
}

pub struct GatherTable;

static INPUTS: &[Port] = &[Port::gather("items", Kind::Any, "every item of a step").records_only()];

impl TypedStage for GatherTable {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "gather.table",
        version: 1,
        summary: "Gather the results of every item into one table (one row per item)",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[],
    };

    fn methods(&self, _o: &Options) -> String {
        "Results were collected into one table with a row per sample.".to_string()
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let items = inputs.many(0);
        if items.is_empty() {
            return Err(StageError::input("no items to gather"));
        }
        let mut names: Vec<String> = o.results.clone();
        if names.is_empty() {
            for (_, a) in &items {
                for r in &a.results {
                    if !names.contains(&r.name) {
                        names.push(r.name.clone());
                    }
                }
            }
        }
        let mut columns = vec![Column {
            name: "item".into(),
            unit: String::new(),
            data: ColumnData::Text(items.iter().map(|(i, _)| i.to_string()).collect()),
        }];
        for name in &names {
            let recs: Vec<_> = items.iter().map(|(_, a)| a.result(name)).collect();
            let numeric = recs
                .iter()
                .flatten()
                .all(|r| matches!(r.value, Scalar::Number(_)));
            let unit = recs
                .iter()
                .flatten()
                .map(|r| r.unit.clone())
                .next()
                .unwrap_or_default();
            let data = if numeric {
                let values = recs
                    .iter()
                    .map(|r| r.and_then(|r| r.as_number()).unwrap_or(f64::NAN))
                    .collect();
                let has_u = recs.iter().flatten().any(|r| r.uncertainty.is_some());
                let uncertainty = has_u.then(|| {
                    recs.iter()
                        .map(|r| r.and_then(|r| r.uncertainty).unwrap_or(f64::NAN))
                        .collect()
                });
                ColumnData::Number {
                    values,
                    uncertainty,
                }
            } else {
                ColumnData::Text(
                    recs.iter()
                        .map(|r| match r.map(|r| &r.value) {
                            Some(Scalar::Text(t)) => t.clone(),
                            Some(Scalar::Number(v)) => v.to_string(),
                            None => String::new(),
                        })
                        .collect(),
                )
            };
            columns.push(Column {
                name: name.clone(),
                unit,
                data,
            });
        }
        Ok(Artifact::new(Value::Table(Table {
            title: o.title.clone(),
            columns,
        })))
    }
}
