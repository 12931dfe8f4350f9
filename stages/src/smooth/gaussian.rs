//! `smooth.gaussian`: convolution with a normalised Gaussian kernel
//! w(Δx) ∝ exp(−Δx²/2σ²), truncated at ±4σ, σ given in x units or in points
//! (common practice; e.g. Press et al., Numerical Recipes, 3rd ed., 2007, §13.1).
//!
//! Weights use the actual x distances, so a non-uniform grid is handled; near the ends
//! the truncated kernel is renormalised over the points that exist (no padding), which
//! keeps a constant constant but lets slopes bend slightly within 4σ of the ends.

use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::transform::grid::mean_step;
use crate::value::{Artifact, Curve, CurveRole, Kind, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// The unit of `sigma`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum WidthUnit {
    /// σ in the units of the x axis.
    X,
    /// σ in points (multiplied by the mean spacing).
    Points,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Standard deviation of the Gaussian kernel, in the unit `sigma_unit` says.
    pub sigma: f64,
    /// Whether `sigma` is in x units or in points.
    pub sigma_unit: WidthUnit,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            sigma: 2.0,
            sigma_unit: WidthUnit::Points,
        }
    }
}

/// Kernel half-width in σ.
const TRUNCATE_SIGMAS: f64 = 4.0;

pub struct GaussianSmooth;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to smooth",
)];

static REFS: &[Reference] = &[Reference {
    key: "press2007",
    citation: "W. H. Press, S. A. Teukolsky, W. T. Vetterling, B. P. Flannery, Numerical Recipes: The Art of Scientific Computing, 3rd ed. (Cambridge University Press, 2007), §13.1 (convolution and smoothing).",
}];

impl TypedStage for GaussianSmooth {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "smooth.gaussian",
        version: 1,
        summary:
            "Gaussian-kernel smoothing, σ in x units or points, kernel renormalised at the edges",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if !(o.sigma > 0.0 && o.sigma.is_finite()) {
            return Err(OptionError::new("sigma", "must be a positive width"));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let u = match o.sigma_unit {
            WidthUnit::X => "x units",
            WidthUnit::Points => "points",
        };
        format!(
            "Spectra were smoothed by convolution with a Gaussian kernel of standard deviation {} {u}, truncated at ±{TRUNCATE_SIGMAS}σ and renormalised near the ends [press2007].",
            o.sigma
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        crate::transform::grid::require_monotonic(s, 2)?;
        let sigma_x = match o.sigma_unit {
            WidthUnit::X => o.sigma,
            WidthUnit::Points => o.sigma * mean_step(&s.x).abs(),
        };
        let (y, w2) = gaussian_smooth(&s.x, &s.y, sigma_x);
        let mut out = s.clone();
        if let Some(sig) = &s.sigma {
            // σ of a weighted mean of independent points: √Σ w² σ² (weights sum to 1).
            let var: Vec<f64> = sig.iter().map(|v| v * v).collect();
            out.sigma = Some(w2(&var).into_iter().map(f64::sqrt).collect());
        }
        out.curves.push(Curve {
            name: "unsmoothed".into(),
            role: CurveRole::Reference,
            y: s.y.clone(),
        });
        out.y = y;
        Ok(Artifact::new(Value::Spectrum(out)))
    }
}

/// Gaussian smoothing of (x, y) with σ in x units on a monotonic grid. Returns the
/// smoothed values and a function propagating variances through the same weights.
pub fn gaussian_smooth(
    x: &[f64],
    y: &[f64],
    sigma: f64,
) -> (Vec<f64>, impl Fn(&[f64]) -> Vec<f64>) {
    let n = x.len();
    let reach = TRUNCATE_SIGMAS * sigma;
    // For each point, the index window [lo, hi) within reach (x monotonic).
    let mut windows = Vec::with_capacity(n);
    let (mut lo, mut hi) = (0usize, 0usize);
    for i in 0..n {
        while lo < i && (x[i] - x[lo]).abs() > reach {
            lo += 1;
        }
        if hi < i + 1 {
            hi = i + 1;
        }
        while hi < n && (x[hi] - x[i]).abs() <= reach {
            hi += 1;
        }
        windows.push((lo, hi));
    }
    let weights: Vec<Vec<f64>> = (0..n)
        .map(|i| {
            let (a, b) = windows[i];
            let w: Vec<f64> = (a..b)
                .map(|j| (-(x[j] - x[i]).powi(2) / (2.0 * sigma * sigma)).exp())
                .collect();
            let sum: f64 = w.iter().sum();
            w.into_iter().map(|v| v / sum).collect()
        })
        .collect();
    let out = (0..n)
        .map(|i| {
            let (a, _) = windows[i];
            weights[i]
                .iter()
                .enumerate()
                .map(|(k, w)| w * y[a + k])
                .sum()
        })
        .collect();
    let prop = move |var: &[f64]| -> Vec<f64> {
        (0..var.len())
            .map(|i| {
                let (a, _) = windows[i];
                weights[i]
                    .iter()
                    .enumerate()
                    .map(|(k, w)| w * w * var[a + k])
                    .sum()
            })
            .collect()
    };
    (out, prop)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constant_is_kept_and_gaussian_widens_in_quadrature() {
        let x: Vec<f64> = (0..801).map(|i| -20.0 + 0.05 * i as f64).collect();
        let (c, _) = gaussian_smooth(&x, &vec![3.0; x.len()], 0.7);
        assert!(c.iter().all(|v| (v - 3.0).abs() < 1e-12));
        // Analytic: a Gaussian of σ=1 smoothed with σ=0.75 becomes σ=1.25 with the
        // same area, so its peak falls to 1/1.25 of the original.
        let y: Vec<f64> = x.iter().map(|v| (-v * v / 2.0).exp()).collect();
        let (s, _) = gaussian_smooth(&x, &y, 0.75);
        assert!((s[400] - 1.0 / 1.25).abs() < 1e-4, "{}", s[400]);
    }
}
