//! `uvvis.peak`: wavelength of maximum absorbance (λmax) and the absorbance there.
//!
//! Method: the largest point in the range, refined by the vertex of the parabola
//! through it and its two neighbours (common practice); uncertainties of position and
//! height propagated to first order from the three points' σ when the spectrum has it.

use crate::measure::maximum::parabolic_vertex;
use crate::quant_util::{self, check_range, indices_in, propagate};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Search range in x units (e.g. nm); the whole spectrum when absent.
    pub range: Option<[f64; 2]>,
}

pub struct UvvisPeak;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "an absorbance spectrum",
)];

impl TypedStage for UvvisPeak {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.peak",
        version: 1,
        summary: "λmax by parabolic refinement and the absorbance at λmax",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        let r = o.range.map_or("over the whole spectrum".to_string(), |r| {
            format!("between {} and {}", r[0], r[1])
        });
        format!(
            "The absorption maximum was located {r} as the vertex of the parabola through the highest point and its two neighbours, with uncertainties propagated from the point uncertainties to first order where known [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let m = refined_maximum(s, &s.y, o.range)?;
        let mut art = Artifact::new(Value::Summary);
        art.record(Record::number(
            "lambda_max",
            m.position,
            m.position_u,
            &s.x_axis.unit,
        ));
        art.record(Record::number(
            "absorbance_at_max",
            m.height,
            m.height_u,
            &s.y_axis.unit,
        ));
        if m.on_edge {
            art.warn("the maximum lies on the edge of the search range");
        }
        Ok(art)
    }
}

/// A refined maximum with first-order uncertainties.
pub struct Maximum {
    pub index: usize,
    pub position: f64,
    pub position_u: Option<f64>,
    pub height: f64,
    pub height_u: Option<f64>,
    pub on_edge: bool,
}

/// The maximum of y (a possibly baseline-corrected copy of s.y) inside range,
/// refined by a parabola; uncertainties from s.sigma.
pub fn refined_maximum(
    s: &Spectrum,
    y: &[f64],
    range: Option<[f64; 2]>,
) -> Result<Maximum, StageError> {
    let idx = match range {
        Some(r) => indices_in(&s.x, r),
        None => (0..s.len()).collect(),
    };
    if idx.len() < 3 {
        return Err(StageError::input("fewer than 3 points in the search range"));
    }
    let best = idx
        .iter()
        .copied()
        .fold(idx[0], |b, i| if y[i] > y[b] { i } else { b });
    let (position, height) = parabolic_vertex(&s.x, y, best);
    let on_edge = best == idx[0] || best == idx[idx.len() - 1];
    let (mut pu, mut hu) = (None, None);
    if let Some(sig) = &s.sigma {
        if best > 0 && best + 1 < s.len() {
            let x = &s.x;
            let pts = [y[best - 1], y[best], y[best + 1]];
            let us = [sig[best - 1], sig[best], sig[best + 1]];
            let f = |k: usize| {
                move |v: &[f64]| {
                    let yy = [v[0], v[1], v[2]];
                    let xx = [x[best - 1], x[best], x[best + 1]];
                    let r = parabolic_vertex(&xx, &yy, 1);
                    if k == 0 {
                        r.0
                    } else {
                        r.1
                    }
                }
            };
            pu = Some(propagate(&f(0), &pts, &us));
            hu = Some(propagate(&f(1), &pts, &us));
        }
    }
    Ok(Maximum {
        index: best,
        position,
        position_u: pu,
        height,
        height_u: hu,
        on_edge,
    })
}
