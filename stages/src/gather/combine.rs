//! `gather.combine`: one sample's results from several steps side by side, e.g. the band
//! gap, the tin content and the crystallite size of coating TS-5 from three techniques.
//!
//! Takes one value from each listed upstream step for the same item (a `Several` port) and
//! copies the chosen records, optionally renamed, into one summary. Follow it with
//! `gather.table` for a table with one row per sample. Bookkeeping only; no method to cite.

use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// One record to copy.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Pick {
    /// The upstream step, as listed in `from` (e.g. `uvvis/gap`).
    pub step: String,
    /// The record of that step (e.g. `band_gap`).
    pub result: String,
    /// Name in the combined summary; the record's own name when absent.
    #[serde(default)]
    pub name: Option<String>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// The records to copy, in the order they should appear.
    pub columns: Vec<Pick>,
}

pub struct GatherCombine;

static INPUTS: &[Port] = &[Port::several(
    "steps",
    Kind::Any,
    "the steps whose results are combined, one value each for the same item",
)
.records_only()];

impl TypedStage for GatherCombine {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "gather.combine",
        version: 1,
        summary: "Put one sample's results from several steps side by side (one summary per item)",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.columns.is_empty() {
            return Err(OptionError::new(
                "columns",
                "list at least one record to combine",
            ));
        }
        let mut names = std::collections::BTreeSet::new();
        for (i, p) in o.columns.iter().enumerate() {
            let n = p.name.clone().unwrap_or_else(|| p.result.clone());
            if !names.insert(n.clone()) {
                return Err(OptionError::new(
                    format!("columns[{i}]"),
                    format!("the name `{n}` is used twice; give `name` to tell them apart"),
                ));
            }
        }
        Ok(())
    }

    fn methods(&self, _o: &Options) -> String {
        "Results of the individual techniques were collected per sample into one summary.".into()
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let steps = inputs.many(0);
        let mut out = Artifact::new(Value::Summary);
        for p in &o.columns {
            let Some((_, art)) = steps.iter().find(|(s, _)| *s == p.step) else {
                let listed: Vec<&str> = steps.iter().map(|(s, _)| *s).collect();
                return Err(StageError::input(format!(
                    "`{}` is not one of the combined steps ({})",
                    p.step,
                    listed.join(", ")
                )));
            };
            match art.result(&p.result) {
                Some(r) => out.record(Record {
                    name: p.name.clone().unwrap_or_else(|| p.result.clone()),
                    ..r.clone()
                }),
                None => out.warn(format!("{} has no result `{}`", p.step, p.result)),
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;

    #[test]
    fn copies_and_renames_chosen_records() {
        let gap = Artifact::new(Value::Summary).with_results(vec![Record::number(
            "band_gap",
            3.2,
            Some(0.01),
            "eV",
        )]);
        let xps = Artifact::new(Value::Summary).with_results(vec![Record::number(
            "atomic_percent.Sn",
            2.9,
            Some(0.1),
            "%",
        )]);
        let inputs = Inputs {
            item: Some("TS-5"),
            ports: vec![PortValue::Many(vec![
                ("uvvis/gap", &gap),
                ("xps/composition", &xps),
            ])],
        };
        let o = Options {
            columns: vec![
                Pick {
                    step: "uvvis/gap".into(),
                    result: "band_gap".into(),
                    name: None,
                },
                Pick {
                    step: "xps/composition".into(),
                    result: "atomic_percent.Sn".into(),
                    name: Some("sn_at_percent".into()),
                },
                Pick {
                    step: "xps/composition".into(),
                    result: "atomic_percent.Ti".into(),
                    name: None,
                },
            ],
        };
        let a = TypedStage::run(&GatherCombine, &inputs, &o).unwrap();
        assert_eq!(
            a.results[0],
            Record::number("band_gap", 3.2, Some(0.01), "eV")
        );
        assert_eq!(a.results[1].name, "sn_at_percent");
        assert_eq!(a.results.len(), 2);
        assert_eq!(a.notes.len(), 1, "a missing record is a warning");
        let bad = Options {
            columns: vec![Pick {
                step: "afm/x".into(),
                result: "Sa".into(),
                name: None,
            }],
        };
        assert!(TypedStage::run(&GatherCombine, &inputs, &bad).is_err());
    }
}
