//! Shared bodies of the fuzz targets, also callable from a plain test or a
//! replay of a saved crash: each must return without panicking on any bytes.

use stages::stage::{Inputs, PortValue};
use stages::value::{Artifact, InputFile, Value};

/// The recipe loader's byte-level path: guard, span pass, raw model.
pub fn recipe(bytes: &[u8]) {
    let Ok(text) = engine::recipe::guard::decode(bytes) else {
        return;
    };
    if engine::recipe::guard::check(&text).is_err() {
        return;
    }
    let _ = engine::recipe::spans::Spans::scan(&text);
    let _ = serde_yaml::from_str::<engine::recipe::raw::RawRecipe>(&text);
}

/// One importer over `bytes`, with default options (and a second option set
/// chosen by the first byte, so option-dependent paths are reached too).
pub fn importer(stage: &str, bytes: &[u8], alt: serde_json::Value) {
    let Some(s) = stages::find(stage) else {
        panic!("no stage {stage}");
    };
    let file = Artifact::new(Value::File(InputFile {
        name: "fuzz.dat".into(),
        bytes: bytes.to_vec(),
    }));
    let inputs = Inputs {
        item: Some("fuzz"),
        ports: vec![PortValue::One(&file)],
    };
    let use_alt = bytes.first().is_some_and(|b| b & 1 == 1);
    let raw = if use_alt { alt } else { serde_json::json!({}) };
    if let Ok(opts) = s.resolve_options(&raw) {
        if let Ok(a) = s.run(&inputs, &opts) {
            for r in &a.results {
                assert!(
                    r.as_number().is_none_or(f64::is_finite),
                    "non-finite {}",
                    r.name
                );
            }
        }
    }
}
