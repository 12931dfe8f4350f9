//! `transform.normalize`: divide y by its maximum, by its area (trapezoidal rule,
//! absolute value) or by the height of a reference peak (maximum within a window,
//! parabolic refinement). Common practice; the factor is published.

use super::grid::{check_range, indices_in, span};
use crate::calibrate::locate_max_near;
use crate::integrate::area::{integrate, Rule};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// What y is divided by.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum NormalizeBy {
    /// The largest y (within `range` when given).
    Max,
    /// The trapezoidal area |∫ y dx| (within `range` when given).
    Area,
    /// The height of the peak located within `window` of `near`.
    Peak,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// What y is divided by.
    pub by: NormalizeBy,
    /// For `max` and `area`: only x within [low, high]; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub range: Option<[f64; 2]>,
    /// For `peak`: expected position of the reference peak, in x units.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub near: Option<f64>,
    /// For `peak`: half-width of the search window, in x units.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub window: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            by: NormalizeBy::Max,
            range: None,
            near: None,
            window: 1.0,
        }
    }
}

pub struct Normalize;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to normalise",
)];

impl TypedStage for Normalize {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "transform.normalize",
        version: 1,
        summary: "Divide y by its maximum, its area or a reference peak's height",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_range("range", o.range)?;
        if o.by == NormalizeBy::Peak && o.near.is_none() {
            return Err(OptionError::new(
                "near",
                "normalising by a peak needs its expected position",
            ));
        }
        if o.window.is_nan() || o.window <= 0.0 {
            return Err(OptionError::new("window", "must be positive"));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let r = match o.range {
            Some([a, b]) => format!(" between {a} and {b}"),
            None => " over the whole spectrum".to_string(),
        };
        match o.by {
            NormalizeBy::Max => format!("Spectra were normalised to their maximum{r}."),
            NormalizeBy::Area => format!("Spectra were normalised to unit area (trapezoidal rule){r}."),
            NormalizeBy::Peak => format!(
                "Spectra were normalised to the height of the reference peak located as the maximum within ±{} of {} (parabolic refinement).",
                o.window,
                o.near.unwrap_or(f64::NAN)
            ),
        }
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let (lo, hi) = span(&s.x, o.range);
        let idx = indices_in(&s.x, lo, hi);
        if idx.is_empty() {
            return Err(StageError::input(format!(
                "no points between {lo} and {hi}"
            )));
        }
        let factor = match o.by {
            NormalizeBy::Max => idx
                .iter()
                .map(|&i| s.y[i])
                .fold(f64::NEG_INFINITY, f64::max),
            NormalizeBy::Area => {
                let xs: Vec<f64> = idx.iter().map(|&i| s.x[i]).collect();
                let ys: Vec<f64> = idx.iter().map(|&i| s.y[i]).collect();
                integrate(&xs, &ys, Rule::Trapezoid)?.abs()
            }
            NormalizeBy::Peak => locate_max_near(s, o.near.unwrap_or(f64::NAN), o.window)?.1,
        };
        if !(factor.is_finite() && factor > 0.0) {
            return Err(StageError::input(format!(
                "the normalisation factor is {factor}: it must be a positive number"
            )));
        }
        let mut out = s.clone();
        for v in &mut out.y {
            *v /= factor;
        }
        if let Some(sig) = &mut out.sigma {
            for v in sig.iter_mut() {
                *v /= factor;
            }
        }
        for c in &mut out.curves {
            for v in &mut c.y {
                *v /= factor;
            }
        }
        let unit = match o.by {
            NormalizeBy::Area => super::grid::area_unit(s),
            _ => s.y_axis.unit.clone(),
        };
        out.y_axis = Axis::new(format!("normalised {}", s.y_axis.quantity), "");
        Ok(
            Artifact::new(Value::Spectrum(out)).with_results(vec![Record::number(
                "normalization_factor",
                factor,
                None,
                &unit,
            )]),
        )
    }
}
