//! The raw recipe model: what the YAML says, before anything is resolved.
//!
//! Strings stay strings (stage names, step references, `{{ parameter }}` templates);
//! maps keep their written order. Unknown keys are refused by serde with a position.
//! The [`crate::plan`] module turns this into a resolved, type-checked plan.

use serde::de::{Deserializer, MapAccess, Visitor};
use serde::Deserialize;
use std::fmt;

/// A mapping that keeps its written order (duplicates are found by the span pass).
#[derive(Debug, Clone)]
pub struct Ordered<T>(pub Vec<(String, T)>);

impl<T> Default for Ordered<T> {
    fn default() -> Self {
        Ordered(Vec::new())
    }
}

impl<'de, T: Deserialize<'de>> Deserialize<'de> for Ordered<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V<T>(std::marker::PhantomData<T>);
        impl<'de, T: Deserialize<'de>> Visitor<'de> for V<T> {
            type Value = Ordered<T>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a map of names")
            }
            fn visit_unit<E>(self) -> Result<Self::Value, E> {
                Ok(Ordered(Vec::new()))
            }
            fn visit_map<A: MapAccess<'de>>(self, mut m: A) -> Result<Self::Value, A::Error> {
                let mut v = Vec::new();
                while let Some((k, val)) = m.next_entry::<String, T>()? {
                    v.push((k, val));
                }
                Ok(Ordered(v))
            }
        }
        d.deserialize_any(V(std::marker::PhantomData))
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawRecipe {
    /// Short id, used to namespace the recipe's steps when it is included.
    pub id: String,
    #[serde(default)]
    pub title: String,
    #[serde(default)]
    pub description: String,
    #[serde(default)]
    pub author: String,
    #[serde(default)]
    pub parameters: Ordered<RawParameter>,
    /// name -> glob, or name -> { files: glob, item: regex }.
    #[serde(default)]
    pub samples: Ordered<serde_yaml::Value>,
    #[serde(default)]
    pub steps: Ordered<RawStep>,
    #[serde(default)]
    pub checks: Vec<RawCheck>,
    /// Paths, or { recipe: path, set: { name: value }, as: namespace }.
    #[serde(default)]
    pub include: Vec<serde_yaml::Value>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawParameter {
    pub value: serde_yaml::Value,
    #[serde(default)]
    pub unit: String,
    #[serde(default)]
    pub about: String,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawStep {
    pub stage: String,
    /// A name, a list of names, or a map of input name to name(s).
    #[serde(default)]
    pub from: Option<serde_yaml::Value>,
    #[serde(default)]
    pub options: Option<serde_yaml::Value>,
    #[serde(default)]
    pub about: String,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCheck {
    /// `step.result_name`.
    pub result: String,
    #[serde(default)]
    pub item: Option<String>,
    /// A number or a `{{ parameter }}` template (resolved in the plan).
    #[serde(default)]
    pub expect: Option<serde_yaml::Value>,
    #[serde(default)]
    pub tolerance: Option<serde_yaml::Value>,
    /// `[low, high]`, each a number or a template.
    #[serde(default)]
    pub within: Option<serde_yaml::Value>,
}
