//! Helpers shared by the image reference tests: run a registered stage through the
//! `Stage` trait object and build images.
#![allow(dead_code)]

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Axis, Image, PixelSize, StageError, Value};

/// Runs the registered stage `name` on the given ports with raw JSON options.
pub fn run(
    name: &str,
    ports: Vec<PortValue>,
    options: serde_json::Value,
) -> Result<Artifact, StageError> {
    let stage = stages::find(name).unwrap_or_else(|| panic!("stage {name} is not registered"));
    let canonical = stage
        .resolve_options(&options)
        .unwrap_or_else(|e| panic!("{name}: options refused: {e}"));
    stage.run(
        &Inputs {
            item: Some("test"),
            ports,
        },
        &canonical,
    )
}

/// Runs a stage on one input artifact.
pub fn run1(name: &str, input: &Artifact, options: serde_json::Value) -> Artifact {
    run(name, vec![PortValue::One(input)], options).unwrap_or_else(|e| panic!("{name} failed: {e}"))
}

/// An image artifact from a function of (column, row).
pub fn image(
    w: usize,
    h: usize,
    pixel: Option<(f64, &str)>,
    z_unit: &str,
    f: impl Fn(usize, usize) -> f64,
) -> Artifact {
    Artifact::new(Value::Image(Image {
        width: w,
        height: h,
        data: (0..w * h).map(|i| f(i % w, i / w) as f32).collect(),
        pixel_size: pixel.map(|(v, u)| PixelSize {
            x: v,
            y: v,
            unit: u.to_string(),
        }),
        z_axis: Axis::new(
            if z_unit == "nm" {
                "height"
            } else {
                "intensity"
            },
            z_unit,
        ),
        source_bits: 16,
        metadata: Default::default(),
    }))
}

/// A numeric result of an artifact.
pub fn num(a: &Artifact, name: &str) -> f64 {
    a.result(name)
        .and_then(|r| r.as_number())
        .unwrap_or_else(|| {
            panic!(
                "no numeric result {name}; have {:?}",
                a.results.iter().map(|r| &r.name).collect::<Vec<_>>()
            )
        })
}

/// Standard uncertainty of a result.
pub fn unc(a: &Artifact, name: &str) -> f64 {
    a.result(name)
        .and_then(|r| r.uncertainty)
        .unwrap_or_else(|| panic!("{name} has no uncertainty"))
}

/// A number column of a table artifact.
pub fn column(a: &Artifact, name: &str) -> Vec<f64> {
    let Value::Table(t) = &a.value else {
        panic!("not a table")
    };
    match &t
        .column(name)
        .unwrap_or_else(|| panic!("no column {name}"))
        .data
    {
        stages::ColumnData::Number { values, .. } => values.clone(),
        stages::ColumnData::Text(_) => panic!("{name} is text"),
    }
}

/// Deterministic pseudo-random numbers in [0, 1) (64-bit LCG, Knuth's MMIX constants).
pub struct Lcg(pub u64);

impl Lcg {
    pub fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Standard normal by Box–Muller.
    pub fn normal(&mut self) -> f64 {
        let u = self.next().max(1e-300);
        let v = self.next();
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}
