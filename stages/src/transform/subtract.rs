//! `transform.subtract` (y − scale · blank, the blank interpolated linearly onto the
//! sample's grid) and `transform.subtract_background` (y − the background curve).
//! Common practice; σ combined in quadrature for independent data.

use super::grid::{background, interp};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Curve, CurveRole, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Factor the blank is multiplied by before subtraction.
    pub scale: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options { scale: 1.0 }
    }
}

pub struct Subtract;

static INPUTS: &[Port] = &[
    Port::each("sample", Kind::Spectrum, "the sample spectrum"),
    Port::each(
        "blank",
        Kind::Spectrum,
        "the blank or solvent spectrum to subtract",
    ),
];

impl TypedStage for Subtract {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "transform.subtract",
        version: 1,
        summary: "Subtract a scaled blank/solvent spectrum, interpolated onto the sample's grid",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if !o.scale.is_finite() {
            return Err(OptionError::new("scale", "must be a finite number"));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "A blank spectrum, interpolated linearly onto the sample's grid and multiplied by {}, was subtracted from each spectrum.",
            o.scale
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let b = inputs.spectrum(1)?;
        super::grid::require_monotonic(b, 2)?;
        if !b.y_axis.unit.is_empty() && !s.y_axis.unit.is_empty() && b.y_axis.unit != s.y_axis.unit
        {
            return Err(StageError::input(format!(
                "the sample's y is in {} but the blank's in {}",
                s.y_axis.unit, b.y_axis.unit
            )));
        }
        let mut blank = Vec::with_capacity(s.len());
        for &q in &s.x {
            blank.push(
                interp(&b.x, &b.y, q).ok_or_else(|| {
                    StageError::input(format!(
                    "sample point x = {q} lies outside the blank ({} to {}); crop the sample first",
                    b.x[0],
                    b.x[b.len() - 1]
                ))
                })? * o.scale,
            );
        }
        let mut out = s.clone();
        for (v, bl) in out.y.iter_mut().zip(&blank) {
            *v -= bl;
        }
        if let (Some(ss), Some(bs)) = (&mut out.sigma, &b.sigma) {
            for (v, &q) in ss.iter_mut().zip(&s.x) {
                let sb = interp(&b.x, bs, q).unwrap_or(0.0) * o.scale;
                *v = (*v * *v + sb * sb).sqrt();
            }
        }
        out.curves.push(Curve {
            name: "blank".into(),
            role: CurveRole::Reference,
            y: blank,
        });
        Ok(
            Artifact::new(Value::Spectrum(out)).with_results(vec![Record::number(
                "blank_scale",
                o.scale,
                None,
                "",
            )]),
        )
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct NoOptions {}

pub struct SubtractBackground;

static BG_INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a spectrum carrying a background curve",
)];

impl TypedStage for SubtractBackground {
    type Options = NoOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "transform.subtract_background",
        version: 1,
        summary: "Subtract the spectrum's background curve from y (keeps the raw data as a reference curve)",
        inputs: BG_INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn methods(&self, _o: &NoOptions) -> String {
        "The background curve was subtracted from the data point by point.".into()
    }

    fn run(&self, inputs: &Inputs, _o: &NoOptions) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let bg = background(s).ok_or_else(|| {
            StageError::input(
                "the spectrum carries no background curve (run a background stage first)",
            )
        })?;
        let mut out = s.clone();
        for (i, (v, b)) in out.y.iter_mut().zip(&bg.y).enumerate() {
            if !b.is_finite() {
                return Err(StageError::input(format!(
                    "the background '{}' is not defined at x = {} (it covers only part of the spectrum); crop to its range first",
                    bg.name, s.x[i]
                )));
            }
            *v -= b;
        }
        let name = bg.name.clone();
        out.curves.retain(|c| c.role != CurveRole::Background);
        out.curves.push(Curve {
            name: "before background subtraction".into(),
            role: CurveRole::Reference,
            y: s.y.clone(),
        });
        out.metadata
            .insert("background_subtracted".into(), name.clone());
        Ok(
            Artifact::new(Value::Spectrum(out))
                .with_results(vec![Record::text("background", name)]),
        )
    }
}
