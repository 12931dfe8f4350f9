//! `background.linear`: the straight line through the mean of the first few and the
//! last few points of a range (common practice for a local baseline under a band).

use super::{in_range, range_text, with_background};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::transform::grid::check_range;
use crate::value::{Artifact, Kind, Record};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Compute over x within [low, high]; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub range: Option<[f64; 2]>,
    /// Points averaged at each end (x and y both averaged).
    #[schemars(extend("x-unit" = "points"))]
    pub end_points: usize,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            range: None,
            end_points: 5,
        }
    }
}

pub struct LinearBackground;

static INPUTS: &[Port] = &[Port::each("spectrum", Kind::Spectrum, "the spectrum")];

impl TypedStage for LinearBackground {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "background.linear",
        version: 1,
        summary:
            "Straight-line background between the means of a few points at each end of a range",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.end_points == 0 {
            return Err(OptionError::new(
                "end_points",
                "at least 1 point at each end",
            ));
        }
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "A straight-line background was drawn {} through the mean of the {} points at each end.",
            range_text(o.range),
            o.end_points
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let w = in_range(s, o.range, 2 * o.end_points)?;
        let (b, slope, icpt) = linear_background(&w.x, &w.y, o.end_points);
        let xu = &s.x_axis.unit;
        let yu = &s.y_axis.unit;
        let mut a = with_background(s, &w, "linear background", &b)?;
        a.record(Record::number(
            "background.slope",
            slope,
            None,
            &if xu.is_empty() {
                yu.clone()
            } else {
                format!("{yu}/{xu}")
            },
        ));
        a.record(Record::number("background.intercept", icpt, None, yu));
        Ok(a)
    }
}

/// The line through (mean x, mean y) of the first and last `k` points; returns the
/// background at each x, the slope and the intercept at x = 0.
pub fn linear_background(x: &[f64], y: &[f64], k: usize) -> (Vec<f64>, f64, f64) {
    use super::{mean_head, mean_tail};
    let (x0, y0) = (mean_head(x, k), mean_head(y, k));
    let (x1, y1) = (mean_tail(x, k), mean_tail(y, k));
    let slope = if x1 != x0 { (y1 - y0) / (x1 - x0) } else { 0.0 };
    let icpt = y0 - slope * x0;
    (x.iter().map(|v| icpt + slope * v).collect(), slope, icpt)
}
