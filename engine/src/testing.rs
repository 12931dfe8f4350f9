//! Test-only helpers: tiny stages for exercising the engine without the science.

#![cfg(test)]

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Options of the test stages: none.
#[derive(Default, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct NoOptions {}

/// `test_stage!(Type, "family.verb", version, &[ports])`: a stage that publishes an
/// empty summary.
macro_rules! test_stage {
    ($ty:ident, $name:expr, $version:expr, $ports:expr) => {
        struct $ty;
        impl stages::stage::TypedStage for $ty {
            type Options = $crate::testing::NoOptions;
            const INFO: &'static stages::stage::StageInfo = &stages::stage::StageInfo {
                name: $name,
                version: $version,
                summary: "test",
                inputs: $ports,
                output: stages::Kind::Summary,
                references: &[],
            };
            fn methods(&self, _o: &Self::Options) -> String {
                "Test.".into()
            }
            fn run(
                &self,
                _i: &stages::stage::Inputs,
                _o: &Self::Options,
            ) -> Result<stages::Artifact, stages::StageError> {
                Ok(stages::Artifact::new(stages::Value::Summary))
            }
        }
    };
}
pub(crate) use test_stage;
