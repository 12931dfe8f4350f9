//! Helpers shared by the fit tests (included with `#[path]`; also builds alone as an
//! empty test crate).
#![allow(dead_code)]

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, FitResult, Spectrum, StageError, Value};

/// Runs `fit.peaks` through the registry on a spectrum with JSON options.
pub fn fit(s: &Spectrum, options: serde_json::Value) -> Result<(Artifact, FitResult), StageError> {
    let stage = stages::find("fit.peaks").expect("fit.peaks is registered");
    let canonical = stage
        .resolve_options(&options)
        .map_err(|e| StageError::input(format!("options: {e} at {}", e.path)))?;
    let input = Artifact::new(Value::Spectrum(s.clone()));
    let inputs = Inputs {
        item: None,
        ports: vec![PortValue::One(&input)],
    };
    let a = stage.run(&inputs, &canonical)?;
    match a.value.clone() {
        Value::Fit(f) => Ok((a, f)),
        other => panic!("fit.peaks gave {:?}", other.kind()),
    }
}

/// Deterministic standard normal deviates (64-bit LCG of Knuth's MMIX constants and the
/// Box–Muller transform); seeded, so tests are reproducible.
pub struct Normal(u64);

impl Normal {
    pub fn new(seed: u64) -> Self {
        Normal(seed)
    }
    fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    pub fn sample(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}
