//! `measure.maximum`: position and height of the largest y, and the trapezoidal area.
//!
//! The maximum is refined by the vertex of the parabola through the highest sample and
//! its two neighbours (common practice for locating a peak between grid points).
//! The area is the trapezoidal integral of y over the whole spectrum (or `range`),
//! without any background removed; both range and background go into the results.

use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Only consider x within [low, high] (in x units); the whole spectrum when absent.
    pub range: Option<[f64; 2]>,
}

pub struct Maximum;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to measure",
)];

impl TypedStage for Maximum {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "measure.maximum",
        version: 1,
        summary:
            "Position and height of the maximum (parabolic refinement) and the trapezoidal area",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if let Some([a, b]) = o.range {
            if a.partial_cmp(&b) != Some(std::cmp::Ordering::Less) {
                return Err(OptionError::new(
                    "range",
                    format!("range must be [low, high] with low < high (got [{a}, {b}])"),
                ));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let range = match o.range {
            Some([a, b]) => format!("between {a} and {b}"),
            None => "over the whole recorded range".to_string(),
        };
        format!(
            "The maximum was located {range} by a parabola through the highest point and its neighbours, and the area was integrated by the trapezoidal rule with no background removed."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let idx: Vec<usize> = (0..s.len())
            .filter(|&i| o.range.is_none_or(|[a, b]| s.x[i] >= a && s.x[i] <= b))
            .collect();
        if idx.len() < 2 {
            return Err(StageError::input(format!(
                "fewer than 2 points in the range {:?}",
                o.range.unwrap_or([f64::NEG_INFINITY, f64::INFINITY])
            )));
        }
        let mut best = idx[0];
        for &i in &idx {
            if s.y[i] > s.y[best] {
                best = i;
            }
        }
        let (pos, height) = parabolic_vertex(&s.x, &s.y, best);
        let mut area = 0.0;
        for w in idx.windows(2) {
            let (i, j) = (w[0], w[1]);
            area += 0.5 * (s.y[i] + s.y[j]) * (s.x[j] - s.x[i]);
        }
        // Descending x integrates to a negative number; the area is a magnitude.
        let area = area.abs();
        let xu = &s.x_axis.unit;
        let yu = &s.y_axis.unit;
        let area_unit = match (yu.is_empty(), xu.is_empty()) {
            (false, false) => format!("{yu}·{xu}"),
            (false, true) => yu.clone(),
            (true, false) => xu.clone(),
            (true, true) => String::new(),
        };
        let lo = idx.iter().map(|&i| s.x[i]).fold(f64::INFINITY, f64::min);
        let hi = idx
            .iter()
            .map(|&i| s.x[i])
            .fold(f64::NEG_INFINITY, f64::max);
        let mut a = Artifact::new(Value::Summary).with_results(vec![
            Record::number("max_position", pos, None, xu),
            Record::number("max_height", height, None, yu),
            Record::number("area", area, None, &area_unit),
            Record::number("area_from", lo, None, xu),
            Record::number("area_to", hi, None, xu),
            Record::text("area_background", "none"),
        ]);
        if best == idx[0] || best == *idx.last().unwrap_or(&best) {
            a.warn("the maximum lies on the edge of the range; it may be outside it");
        }
        Ok(a)
    }
}

/// Vertex of the parabola through points i-1, i, i+1 (the point itself at an edge).
pub fn parabolic_vertex(x: &[f64], y: &[f64], i: usize) -> (f64, f64) {
    if i == 0 || i + 1 >= x.len() {
        return (x[i], y[i]);
    }
    let (x0, x1, x2) = (x[i - 1], x[i], x[i + 1]);
    let (y0, y1, y2) = (y[i - 1], y[i], y[i + 1]);
    let d = (x0 - x1) * (x0 - x2) * (x1 - x2);
    if d == 0.0 {
        return (x1, y1);
    }
    let a = (x2 * (y1 - y0) + x1 * (y0 - y2) + x0 * (y2 - y1)) / d;
    let b = (x2 * x2 * (y0 - y1) + x1 * x1 * (y2 - y0) + x0 * x0 * (y1 - y2)) / d;
    let c = (x1 * x2 * (x1 - x2) * y0 + x2 * x0 * (x2 - x0) * y1 + x0 * x1 * (x0 - x1) * y2) / d;
    if a >= 0.0 {
        return (x1, y1);
    }
    let xv = -b / (2.0 * a);
    (xv, c - b * b / (4.0 * a))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parabola_vertex_is_exact_for_a_parabola() {
        // Analytic: y = 5 - (x - 1.3)^2 has its vertex at (1.3, 5).
        let x = [0.0, 1.0, 2.0, 3.0];
        let y: Vec<f64> = x.iter().map(|v| 5.0 - (v - 1.3f64).powi(2)).collect();
        let (p, h) = parabolic_vertex(&x, &y, 1);
        assert!((p - 1.3).abs() < 1e-12 && (h - 5.0).abs() < 1e-12);
    }
}
