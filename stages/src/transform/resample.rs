//! `transform.resample`: linear interpolation onto a common grid, given by start,
//! stop and step or taken from another spectrum on a second port.
//!
//! Linear interpolation between neighbouring samples (common practice); σ is
//! interpolated with the same weights, σ² = (1−t)²σ₀² + t²σ₁² (first-order propagation
//! for independent points). Grid points outside the data are refused, not extrapolated.

use super::grid::{interp, is_monotonic, require_monotonic};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// First grid point, in x units (with `stop` and `step`; not with a grid port).
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub start: Option<f64>,
    /// Last grid point (included when it falls on the grid), in x units.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub stop: Option<f64>,
    /// Grid spacing, in x units; its sign is taken from start → stop.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub step: Option<f64>,
}

pub struct Resample;

static INPUTS: &[Port] = &[
    Port::each("spectrum", Kind::Spectrum, "the spectrum to resample"),
    Port::each("grid", Kind::Spectrum, "a spectrum whose x grid is used").optional(),
];

impl TypedStage for Resample {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "transform.resample",
        version: 1,
        summary:
            "Linear interpolation onto a common grid (start/stop/step or another spectrum's grid)",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        let given = [o.start, o.stop, o.step]
            .iter()
            .filter(|v| v.is_some())
            .count();
        if given != 0 && given != 3 {
            return Err(OptionError::new(
                "",
                "give all of start, stop and step, or none (then a grid port)",
            ));
        }
        if let (Some(a), Some(b), Some(h)) = (o.start, o.stop, o.step) {
            if !(h != 0.0 && h.is_finite() && a.is_finite() && b.is_finite() && a != b) {
                return Err(OptionError::new(
                    "step",
                    "need finite start ≠ stop and a non-zero step",
                ));
            }
            if ((b - a) / h).abs() > 1e8 {
                return Err(OptionError::new(
                    "step",
                    "the grid would have more than 10⁸ points",
                ));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        match (o.start, o.stop, o.step) {
            (Some(a), Some(b), Some(h)) => format!(
                "Spectra were resampled by linear interpolation onto a grid from {a} to {b} in steps of {}.",
                h.abs()
            ),
            _ => "Spectra were resampled by linear interpolation onto the grid of the reference spectrum.".into(),
        }
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let grid: Vec<f64> = match (o.start, o.stop, o.step, inputs.optional(1)) {
            (Some(a), Some(b), Some(h), None) => make_grid(a, b, h),
            (None, None, None, Some(g)) => g
                .spectrum()
                .ok_or_else(|| StageError::input("the grid input carries no spectrum"))?
                .x
                .clone(),
            (Some(_), _, _, Some(_)) => {
                return Err(StageError::input(
                    "give either start/stop/step or a grid input, not both",
                ))
            }
            _ => {
                return Err(StageError::input(
                    "give start, stop and step, or a grid input",
                ))
            }
        };
        let out = resample(s, &grid)?;
        Ok(Artifact::new(Value::Spectrum(out)))
    }
}

/// start, start+h, ... up to stop (inclusive within a 1e-9 step tolerance).
pub fn make_grid(start: f64, stop: f64, step: f64) -> Vec<f64> {
    let h = step.abs() * (stop - start).signum();
    let n = ((stop - start) / h + 1e-9).floor() as usize + 1;
    (0..n).map(|i| start + h * i as f64).collect()
}

/// The spectrum interpolated onto `grid`; every grid point must lie in the data.
pub fn resample(s: &Spectrum, grid: &[f64]) -> Result<Spectrum, StageError> {
    require_monotonic(s, 2)?;
    if grid.len() < 2 || !is_monotonic(grid) {
        return Err(StageError::input(
            "the target grid must have 2 or more strictly monotonic points",
        ));
    }
    let mut y = Vec::with_capacity(grid.len());
    for &q in grid {
        y.push(interp(&s.x, &s.y, q).ok_or_else(|| {
            StageError::input(format!(
                "grid point {q} lies outside the data ({} to {}); crop the grid",
                s.x[0],
                s.x[s.len() - 1]
            ))
        })?);
    }
    let mut out = s.clone();
    out.sigma = s.sigma.as_ref().map(|sig| {
        let var: Vec<f64> = sig.iter().map(|v| v * v).collect();
        grid.iter()
            .map(|&q| interp_var(&s.x, &var, q).sqrt())
            .collect()
    });
    for c in &mut out.curves {
        c.y = grid
            .iter()
            .map(|&q| interp(&s.x, &c.y, q).unwrap_or(f64::NAN))
            .collect();
    }
    out.x = grid.to_vec();
    out.y = y;
    Ok(out)
}

/// Variance of a linear interpolation of independent values: (1−t)²v₀ + t²v₁.
fn interp_var(x: &[f64], var: &[f64], q: f64) -> f64 {
    let n = x.len();
    for j in 0..n - 1 {
        let (a, b) = (x[j], x[j + 1]);
        if (q >= a.min(b)) && (q <= a.max(b)) {
            let t = if b == a { 0.0 } else { (q - a) / (b - a) };
            return (1.0 - t).powi(2) * var[j] + t * t * var[j + 1];
        }
    }
    f64::NAN
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::value::Axis;

    #[test]
    fn linear_data_is_reproduced_exactly() {
        // Analytic: linear interpolation of a straight line is exact.
        let x: Vec<f64> = (0..11).map(|i| i as f64).collect();
        let y: Vec<f64> = x.iter().map(|v| 3.0 * v - 1.0).collect();
        let s = Spectrum::new(x, y, Axis::new("x", ""), Axis::new("y", ""));
        let g = make_grid(0.5, 9.5, 0.25);
        assert_eq!(g.len(), 37);
        let r = resample(&s, &g).unwrap();
        for (q, v) in r.x.iter().zip(&r.y) {
            assert!((v - (3.0 * q - 1.0)).abs() < 1e-12);
        }
        assert!(resample(&s, &[5.0, 11.0]).is_err());
    }
}
