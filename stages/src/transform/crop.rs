//! `transform.crop`: keep the points with x inside a range (bookkeeping; no method).

use super::grid::check_range;
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Keep x within [low, high], inclusive, in x units. Required.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub range: Option<[f64; 2]>,
}

pub struct Crop;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to crop",
)];

impl TypedStage for Crop {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "transform.crop",
        version: 1,
        summary: "Keep the points whose x lies inside a range",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.range.is_none() {
            return Err(OptionError::new(
                "range",
                "give the range to keep as [low, high]",
            ));
        }
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        match o.range {
            Some([a, b]) => format!("Spectra were cropped to {a}–{b} on the x axis."),
            None => "Spectra were cropped (no range given).".into(),
        }
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let [a, b] = o.range.ok_or_else(|| StageError::input("no range given"))?;
        let out = crop(s, a, b)?;
        Ok(Artifact::new(Value::Spectrum(out)))
    }
}

/// The points of `s` with a ≤ x ≤ b, curves and sigma cut alike.
pub fn crop(s: &Spectrum, a: f64, b: f64) -> Result<Spectrum, StageError> {
    let idx = super::grid::indices_in(&s.x, a, b);
    if idx.len() < 2 {
        return Err(StageError::input(format!(
            "fewer than 2 points between {a} and {b}"
        )));
    }
    Ok(select(s, &idx))
}

/// The spectrum restricted to the given indices.
pub fn select(s: &Spectrum, idx: &[usize]) -> Spectrum {
    let pick = |v: &[f64]| idx.iter().map(|&i| v[i]).collect::<Vec<f64>>();
    let mut out = s.clone();
    out.x = pick(&s.x);
    out.y = pick(&s.y);
    out.sigma = s.sigma.as_deref().map(pick);
    for c in &mut out.curves {
        c.y = pick(&c.y);
    }
    out
}
