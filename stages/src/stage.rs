//! The `Stage` trait: what a stage declares (kept apart from running it) and how it runs.
//!
//! A stage is described by a static [`StageInfo`] (name, version, ports, output kind,
//! published sources), a typed options struct (serde + schemars, unknown fields
//! refused, defaults documented), a methods sentence built from the resolved options,
//! and `run`. Stages are written against [`TypedStage`]; the blanket impl turns each
//! into a [`Stage`] object the engine can hold in the registry.
//!
//! **Invariant:** nothing here knows about recipes, caches, files or threads. A stage
//! is a pure function of its inputs and options (same inputs, same output, bit for bit).

use crate::value::{Artifact, Kind};
use schemars::JsonSchema;
use serde::de::DeserializeOwned;
use serde::Serialize;
use thiserror::Error;

/// A published source of a method, listed in the report's references.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Reference {
    /// Short stable key, e.g. `savitzky1964`.
    pub key: &'static str,
    /// Full citation as it should appear in a reference list.
    pub citation: &'static str,
}

/// How a port takes its upstream values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Arity {
    /// One value per run; over a sample set the step fans out, one run per item.
    /// An upstream with a single value (no items) is broadcast to every item.
    Each,
    /// All items of the upstream at once (fan-in), ordered by item name.
    Gather,
    /// One value from each of several upstream steps listed in the recipe, for the
    /// same item (e.g. the C 1s, O 1s and Ti 2p areas of one sample), in the order
    /// listed; each entry is named by its upstream step id.
    Several,
}

/// One input of a stage.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Port {
    /// Name used in recipes when a step has several inputs (`from: { sample: a, blank: b }`).
    pub name: &'static str,
    pub kind: Kind,
    pub arity: Arity,
    /// An optional port may be left out of the recipe.
    pub optional: bool,
    pub about: &'static str,
    /// Whether the stage reads its inputs' per-point arrays (spectrum points and
    /// curves, image samples, label maps). A port that reads only records, notes,
    /// fitted peaks and tables says `false` ([`Port::records_only`]): the engine may
    /// then hand it artifacts whose arrays are empty, read cheaply from the cache.
    pub arrays: bool,
}

impl Port {
    pub const fn each(name: &'static str, kind: Kind, about: &'static str) -> Port {
        Port {
            name,
            kind,
            arity: Arity::Each,
            optional: false,
            about,
            arrays: true,
        }
    }
    pub const fn gather(name: &'static str, kind: Kind, about: &'static str) -> Port {
        Port {
            name,
            kind,
            arity: Arity::Gather,
            optional: false,
            about,
            arrays: true,
        }
    }
    pub const fn several(name: &'static str, kind: Kind, about: &'static str) -> Port {
        Port {
            name,
            kind,
            arity: Arity::Several,
            optional: false,
            about,
            arrays: true,
        }
    }
    pub const fn optional(self) -> Port {
        Port {
            optional: true,
            ..self
        }
    }
    /// The stage reads only records, notes, fitted peaks and tables of this port's
    /// inputs, never their per-point arrays.
    pub const fn records_only(self) -> Port {
        Port {
            arrays: false,
            ..self
        }
    }
}

/// The static description of a stage, known before anything runs.
#[derive(Clone, Copy, Debug)]
pub struct StageInfo {
    /// Dotted `family.verb` name, unique in the registry.
    pub name: &'static str,
    /// Bump whenever the numbers the stage gives can change: it is part of cache keys.
    pub version: u32,
    /// One line for the catalog.
    pub summary: &'static str,
    pub inputs: &'static [Port],
    pub output: Kind,
    /// Published sources of the method (empty only for pure bookkeeping stages).
    pub references: &'static [Reference],
}

/// An option problem found before running: `path` is the dotted option path
/// (`peaks.cc.fwhm.max`), empty for the options as a whole.
#[derive(Clone, Debug, PartialEq, Eq, Error)]
#[error("{message}")]
pub struct OptionError {
    pub path: String,
    pub message: String,
    /// For unknown keys: the key and the keys that would have been accepted,
    /// so the engine can suggest the nearest one.
    pub unknown_key: Option<UnknownKey>,
}

#[derive(Clone, Debug, PartialEq, Eq)]
pub struct UnknownKey {
    pub key: String,
    pub expected: Vec<String>,
}

impl OptionError {
    pub fn new(path: impl Into<String>, message: impl Into<String>) -> Self {
        OptionError {
            path: path.into(),
            message: message.into(),
            unknown_key: None,
        }
    }
}

/// Why a stage run failed. Data errors name the file and line when they come from one.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum StageError {
    /// The input data cannot be read or used: file (as shown to people), 1-based line
    /// when known, and what was wrong.
    #[error("{file}{}: {message}", line.map(|l| format!(":{l}")).unwrap_or_default())]
    Data {
        file: String,
        line: Option<usize>,
        message: String,
    },
    /// The inputs are valid data but do not suit the options (range outside the data...).
    #[error("{0}")]
    Input(String),
    /// A numerical method failed (singular matrix, no convergence that is fatal...).
    #[error("{0}")]
    Numeric(String),
}

impl StageError {
    pub fn data(file: &str, line: Option<usize>, message: impl Into<String>) -> Self {
        StageError::Data {
            file: file.to_string(),
            line,
            message: message.into(),
        }
    }
    pub fn input(message: impl Into<String>) -> Self {
        StageError::Input(message.into())
    }
    pub fn numeric(message: impl Into<String>) -> Self {
        StageError::Numeric(message.into())
    }
}

/// What one port received.
#[derive(Debug)]
pub enum PortValue<'a> {
    /// Nothing: an optional port left out.
    Missing,
    One(&'a Artifact),
    /// A gathering port: (item, artifact) ordered by item name; or a `Several`
    /// port: (upstream step id, artifact) in the order the recipe lists them.
    Many(Vec<(&'a str, &'a Artifact)>),
}

/// The inputs of one run, one entry per declared port, in port order.
#[derive(Debug)]
pub struct Inputs<'a> {
    /// The item this run is for (file stem), or None for a single run.
    pub item: Option<&'a str>,
    pub ports: Vec<PortValue<'a>>,
}

impl<'a> Inputs<'a> {
    /// The single artifact on port `i`; an error if it is missing or gathered.
    pub fn one(&self, i: usize) -> Result<&'a Artifact, StageError> {
        match self.ports.get(i) {
            Some(PortValue::One(a)) => Ok(a),
            _ => Err(StageError::input(format!(
                "input {i} is not a single value"
            ))),
        }
    }
    pub fn optional(&self, i: usize) -> Option<&'a Artifact> {
        match self.ports.get(i) {
            Some(PortValue::One(a)) => Some(a),
            _ => None,
        }
    }
    /// The gathered artifacts on port `i` (a single value counts as one item).
    pub fn many(&self, i: usize) -> Vec<(&'a str, &'a Artifact)> {
        match self.ports.get(i) {
            Some(PortValue::Many(v)) => v.clone(),
            Some(PortValue::One(a)) => vec![(self.item.unwrap_or(""), *a)],
            _ => Vec::new(),
        }
    }
    /// The spectrum on port `i` (inside a Spectrum, Fit or Peaks value).
    pub fn spectrum(&self, i: usize) -> Result<&'a crate::value::Spectrum, StageError> {
        self.one(i)?
            .spectrum()
            .ok_or_else(|| StageError::input(format!("input {i} carries no spectrum")))
    }
}

/// The object-safe face of a stage, held by the registry and used by the engine.
pub trait Stage: Send + Sync {
    fn info(&self) -> &'static StageInfo;
    /// JSON Schema of the options (descriptions, defaults, units as `x-unit`).
    fn options_schema(&self) -> schemars::Schema;
    /// Parses and checks raw options (JSON, after parameter substitution) and returns
    /// them canonical: every default filled in, keys in declaration order. The
    /// canonical form is what cache keys, provenance and the methods paragraph use.
    fn resolve_options(&self, raw: &serde_json::Value) -> Result<serde_json::Value, OptionError>;
    /// The methods sentence for resolved options.
    fn methods(&self, canonical: &serde_json::Value) -> String;
    /// Runs the stage on canonical options.
    fn run(&self, inputs: &Inputs, canonical: &serde_json::Value) -> Result<Artifact, StageError>;
}

/// What a stage author implements.
pub trait TypedStage: Send + Sync + 'static {
    /// `#[serde(deny_unknown_fields, default)]`, every field documented, units given
    /// with `#[schemars(extend("x-unit" = "eV"))]`.
    type Options: DeserializeOwned + Serialize + JsonSchema + Default;
    const INFO: &'static StageInfo;
    /// Checks between options that serde cannot express (odd window, min < max...).
    fn check(&self, _options: &Self::Options) -> Result<(), OptionError> {
        Ok(())
    }
    /// One sentence of scientific prose stating what was done with every setting,
    /// defaults included, e.g. "Spectra were smoothed with a 11-point, second-order
    /// Savitzky–Golay filter [savitzky1964]." Reference keys in square brackets.
    fn methods(&self, options: &Self::Options) -> String;
    fn run(&self, inputs: &Inputs, options: &Self::Options) -> Result<Artifact, StageError>;
}

/// Parses options into the typed struct, with the dotted path of the first problem.
pub fn parse_options<T: DeserializeOwned>(raw: &serde_json::Value) -> Result<T, OptionError> {
    let raw = if raw.is_null() {
        serde_json::Value::Object(Default::default())
    } else {
        raw.clone()
    };
    serde_path_to_error::deserialize(raw).map_err(|e| {
        let path = e.path().to_string();
        let path = if path == "." { String::new() } else { path };
        let message = e.inner().to_string();
        let unknown_key = parse_unknown_field(&message);
        OptionError {
            path,
            message,
            unknown_key,
        }
    })
}

/// serde's wording is "unknown field `windw`, expected one of `window`, `order`".
fn parse_unknown_field(message: &str) -> Option<UnknownKey> {
    let rest = message.strip_prefix("unknown field `")?;
    let end = rest.find('`')?;
    let key = rest[..end].to_string();
    let expected = rest[end..]
        .split('`')
        .skip(2)
        .step_by(2)
        .map(str::to_string)
        .collect();
    Some(UnknownKey { key, expected })
}

impl<T: TypedStage> Stage for T {
    fn info(&self) -> &'static StageInfo {
        T::INFO
    }
    fn options_schema(&self) -> schemars::Schema {
        schemars::schema_for!(T::Options)
    }
    fn resolve_options(&self, raw: &serde_json::Value) -> Result<serde_json::Value, OptionError> {
        let typed: T::Options = parse_options(raw)?;
        self.check(&typed)?;
        serde_json::to_value(&typed).map_err(|e| OptionError::new("", e.to_string()))
    }
    fn methods(&self, canonical: &serde_json::Value) -> String {
        match parse_options::<T::Options>(canonical) {
            Ok(o) => TypedStage::methods(self, &o),
            Err(e) => format!("(options could not be read back: {e})"),
        }
    }
    fn run(&self, inputs: &Inputs, canonical: &serde_json::Value) -> Result<Artifact, StageError> {
        let typed: T::Options = parse_options(canonical)
            .map_err(|e| StageError::input(format!("options: {} at '{}'", e.message, e.path)))?;
        TypedStage::run(self, inputs, &typed)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unknown_field_message_is_split_into_key_and_expected() {
        let u = parse_unknown_field("unknown field `windw`, expected one of `window`, `order`")
            .unwrap();
        assert_eq!(u.key, "windw");
        assert_eq!(u.expected, vec!["window", "order"]);
        let u = parse_unknown_field("unknown field `x`, expected `window`").unwrap();
        assert_eq!(u.expected, vec!["window"]);
    }
}
