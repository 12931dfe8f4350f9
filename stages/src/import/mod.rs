pub mod delimited;
pub mod encoding;
pub mod jcamp;

use crate::stage::{Inputs, StageError};
use crate::value::{InputFile, Value};

/// The file on port 0 of an importer.
pub fn input_file<'a>(inputs: &Inputs<'a>) -> Result<&'a InputFile, StageError> {
    match &inputs.one(0)?.value {
        Value::File(f) => Ok(f),
        other => Err(StageError::input(format!(
            "expected a file, got a {}",
            other.kind().name()
        ))),
    }
}
