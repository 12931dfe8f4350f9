//! Helpers shared by the spectral reference tests: run a registered stage through the
//! `Stage` trait object exactly as the engine does (resolve options, then run).
#![allow(dead_code)]

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Axis, InputFile, Spectrum, StageError, Value};
use std::path::PathBuf;

/// Resolves `options` for stage `name` and runs it on single-value ports.
pub fn run(
    name: &str,
    ports: &[&Artifact],
    options: serde_json::Value,
) -> Result<Artifact, StageError> {
    let stage = stages::find(name).unwrap_or_else(|| panic!("stage {name} is not registered"));
    let canonical = stage
        .resolve_options(&options)
        .unwrap_or_else(|e| panic!("{name}: options rejected: {e} at '{}'", e.path));
    let inputs = Inputs {
        item: None,
        ports: ports.iter().map(|a| PortValue::One(a)).collect(),
    };
    stage.run(&inputs, &canonical)
}

/// Runs a stage on one gathering port.
pub fn run_gather(
    name: &str,
    items: &[(&str, &Artifact)],
    options: serde_json::Value,
) -> Result<Artifact, StageError> {
    let stage = stages::find(name).unwrap_or_else(|| panic!("stage {name} is not registered"));
    let canonical = stage.resolve_options(&options).expect("options");
    let inputs = Inputs {
        item: None,
        ports: vec![PortValue::Many(items.to_vec())],
    };
    stage.run(&inputs, &canonical)
}

pub fn spectrum(x: Vec<f64>, y: Vec<f64>, xq: &str, xu: &str, yq: &str, yu: &str) -> Artifact {
    Artifact::new(Value::Spectrum(Spectrum::new(
        x,
        y,
        Axis::new(xq, xu),
        Axis::new(yq, yu),
    )))
}

pub fn file(name: &str, text: &str) -> Artifact {
    Artifact::new(Value::File(InputFile {
        name: name.to_string(),
        bytes: text.as_bytes().to_vec(),
    }))
}

/// Reads a committed reference file from tests/data.
pub fn data(name: &str) -> serde_json::Value {
    let p = PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("data")
        .join(name);
    let text = std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
    serde_json::from_str(&text).expect("valid JSON")
}

pub fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|e| e.as_f64().expect("number"))
        .collect()
}

pub fn max_abs_diff(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter()
        .zip(b)
        .map(|(p, q)| (p - q).abs())
        .fold(0.0, f64::max)
}
