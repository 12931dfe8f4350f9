//! `smooth.savitzky_golay`: least-squares polynomial smoothing and differentiation
//! (Savitzky & Golay 1964, with the corrections of Steinier, Termonia & Deltour 1972)
//! [savitzky1964] [steinier1972].
//!
//! Each interior point is replaced by the value (or the first or second derivative)
//! at its centre of the polynomial of the given order fitted by least squares to the
//! `window` points around it: a fixed convolution. At the edges the polynomial fitted
//! to the first (last) `window` points is evaluated at each of the first (last)
//! `window/2` points, so nothing is padded or extrapolated (the same convention as
//! scipy.signal.savgol_filter with mode='interp'). Derivatives are divided by the x
//! step (mean spacing, signed) to the power of the derivative order, so they are in
//! y units per x unit. The weights are computed from the Vandermonde matrix of the
//! window by QR least squares on offsets scaled to [−1, 1], which is well conditioned
//! up to order 6.

use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::transform::grid::{is_uniform, mean_step};
use crate::value::{Artifact, Axis, Curve, CurveRole, Kind, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Window width in points; odd, larger than the polynomial order.
    #[schemars(extend("x-unit" = "points"))]
    pub window: usize,
    /// Order of the fitted polynomial, 0–6.
    pub order: usize,
    /// Derivative to return: 0 (smoothing), 1 or 2; at most the order.
    pub derivative: usize,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            window: 11,
            order: 2,
            derivative: 0,
        }
    }
}

pub struct SavitzkyGolay;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to smooth or differentiate",
)];

pub(crate) static REFS: &[Reference] = &[
    Reference {
        key: "savitzky1964",
        citation: "A. Savitzky, M. J. E. Golay, Smoothing and differentiation of data by simplified least squares procedures, Anal. Chem. 36, 1627–1639 (1964).",
    },
    Reference {
        key: "steinier1972",
        citation: "J. Steinier, Y. Termonia, J. Deltour, Comments on smoothing and differentiation of data by simplified least square procedure, Anal. Chem. 44, 1906–1909 (1972).",
    },
];

/// Checks window, order and derivative; the message says what is wrong.
pub fn check_params(window: usize, order: usize, deriv: usize) -> Result<(), String> {
    if window.is_multiple_of(2) {
        return Err(format!(
            "window must be an odd number of points (got {window})"
        ));
    }
    if order > 6 {
        return Err(format!("order must be 0–6 (got {order})"));
    }
    if order >= window {
        return Err(format!(
            "order {order} needs a window of at least {} points",
            order + 1
        ));
    }
    if deriv > 2 {
        return Err(format!("derivative must be 0, 1 or 2 (got {deriv})"));
    }
    if deriv > order {
        return Err(format!(
            "a derivative of order {deriv} needs a polynomial of order ≥ {deriv}"
        ));
    }
    Ok(())
}

impl TypedStage for SavitzkyGolay {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "smooth.savitzky_golay",
        version: 1,
        summary: "Savitzky–Golay smoothing or derivative (odd window, order 0–6, derivative 0–2), polynomial fits at the edges",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_params(o.window, o.order, o.derivative).map_err(|m| OptionError::new("window", m))
    }

    fn methods(&self, o: &Options) -> String {
        let what = match o.derivative {
            0 => "smoothed".to_string(),
            1 => "differentiated (first derivative, per unit x)".to_string(),
            _ => "differentiated (second derivative, per unit x squared)".to_string(),
        };
        format!(
            "Spectra were {what} with a Savitzky–Golay filter (window of {} points, polynomial order {}) [savitzky1964] [steinier1972], the polynomial fitted to the first and last windows being evaluated at the edge points.",
            o.window, o.order
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        crate::transform::grid::require_monotonic(s, o.window)?;
        let h = mean_step(&s.x);
        let mut out = s.clone();
        let y = savitzky_golay_delta(&s.y, o.window, o.order, o.derivative, h)
            .map_err(StageError::input)?;
        if o.derivative == 0 {
            out.curves.push(Curve {
                name: "unsmoothed".into(),
                role: CurveRole::Reference,
                y: s.y.clone(),
            });
        } else {
            // Curves on the original scale do not belong to a derivative.
            out.curves.clear();
            let xu = &s.x_axis.unit;
            let yu = &s.y_axis.unit;
            let unit = match (o.derivative, xu.is_empty()) {
                (_, true) => yu.clone(),
                (1, false) => format!("{yu}/{xu}"),
                (_, false) => format!("{yu}/{xu}²"),
            };
            let q = if o.derivative == 1 { "d" } else { "d²" };
            out.y_axis = Axis::new(
                format!(
                    "{q}({})/d{}",
                    s.y_axis.quantity,
                    if o.derivative == 1 { "x" } else { "x²" }
                ),
                unit,
            );
        }
        // σ of a linear filter of independent points: √Σ c_k² σ_k²; propagated exactly
        // with the interior and edge weights.
        if let Some(sig) = &s.sigma {
            let var: Vec<f64> = sig.iter().map(|v| v * v).collect();
            let w = SgWeights::new(o.window, o.order, o.derivative).map_err(StageError::numeric)?;
            let scale = if o.derivative > 0 {
                h.powi(o.derivative as i32)
            } else {
                1.0
            };
            out.sigma = Some(
                w.apply_squared(&var)
                    .into_iter()
                    .map(|v| v.sqrt() / scale.abs())
                    .collect(),
            );
        }
        out.y = y;
        let mut a = Artifact::new(Value::Spectrum(out));
        if !is_uniform(&s.x, 1e-3) {
            a.warn(
                "the x grid is not uniform: Savitzky–Golay assumes equal spacing (resample first)",
            );
        }
        Ok(a)
    }
}

/// The weights c_k with value (or derivative, per unit offset) at offset `pos` from
/// the first point of a `window`-point fit: Σ_k c_k y_k, k = 0..window.
pub fn sg_weights_at(
    window: usize,
    order: usize,
    deriv: usize,
    pos: usize,
) -> Result<Vec<f64>, String> {
    check_params(window, order, deriv)?;
    let half = (window / 2) as f64;
    let scale = if half > 0.0 { half } else { 1.0 };
    let m = order + 1;
    // Vandermonde in u = (k − half)/scale.
    let a =
        nalgebra::DMatrix::from_fn(window, m, |k, j| ((k as f64 - half) / scale).powi(j as i32));
    let qr = a.qr();
    let r = qr.r();
    let q = qr.q();
    // Row of the pseudo-inverse giving the derivative at u0 of the fitted polynomial:
    // p^(d)(u0) = Σ_j coef_j · j!/(j−d)! · u0^(j−d);  coef = R⁻¹ Qᵀ y.
    let u0 = (pos as f64 - half) / scale;
    let mut e = nalgebra::DVector::zeros(m);
    for j in deriv..m {
        let mut f = 1.0;
        for t in 0..deriv {
            f *= (j - t) as f64;
        }
        e[j] = f * u0.powi((j - deriv) as i32);
    }
    // c = Q R⁻ᵀ e.
    let z = r
        .transpose()
        .solve_lower_triangular(&e)
        .ok_or_else(|| "singular Savitzky–Golay system".to_string())?;
    let c = q * z;
    let per_offset = scale.powi(deriv as i32);
    Ok(c.iter().map(|v| v / per_offset).collect())
}

/// The interior convolution weights (centre point), in the order of the window's
/// points (lowest offset first), for unit x spacing. For the 5-point quadratic these
/// are (−3, 12, 17, 12, −3)/35 [savitzky1964].
pub fn sg_coefficients(window: usize, order: usize, deriv: usize) -> Result<Vec<f64>, String> {
    sg_weights_at(window, order, deriv, window / 2)
}

/// Interior and edge weights of one filter.
struct SgWeights {
    window: usize,
    centre: Vec<f64>,
    /// Weights for the first window/2 points (pos 0..half), fitted to the first window.
    head: Vec<Vec<f64>>,
    /// Weights for the last window/2 points (pos half+1..window), fitted to the last window.
    tail: Vec<Vec<f64>>,
}

impl SgWeights {
    fn new(window: usize, order: usize, deriv: usize) -> Result<Self, String> {
        let half = window / 2;
        Ok(SgWeights {
            window,
            centre: sg_weights_at(window, order, deriv, half)?,
            head: (0..half)
                .map(|p| sg_weights_at(window, order, deriv, p))
                .collect::<Result<_, _>>()?,
            tail: (half + 1..window)
                .map(|p| sg_weights_at(window, order, deriv, p))
                .collect::<Result<_, _>>()?,
        })
    }

    fn apply_with(&self, y: &[f64], f: impl Fn(f64) -> f64) -> Vec<f64> {
        let n = y.len();
        let w = self.window;
        let half = w / 2;
        let dot = |c: &[f64], seg: &[f64]| c.iter().zip(seg).map(|(a, b)| f(*a) * b).sum::<f64>();
        let mut out = vec![0.0; n];
        for i in half..n - half {
            out[i] = dot(&self.centre, &y[i - half..i + half + 1]);
        }
        for (p, c) in self.head.iter().enumerate() {
            out[p] = dot(c, &y[..w]);
        }
        for (k, c) in self.tail.iter().enumerate() {
            out[n - w + half + 1 + k] = dot(c, &y[n - w..]);
        }
        out
    }

    fn apply_squared(&self, var: &[f64]) -> Vec<f64> {
        self.apply_with(var, |c| c * c)
    }
}

/// Savitzky–Golay filter for unit x spacing (derivatives per point).
pub fn savitzky_golay(
    y: &[f64],
    window: usize,
    order: usize,
    deriv: usize,
) -> Result<Vec<f64>, String> {
    savitzky_golay_delta(y, window, order, deriv, 1.0)
}

/// Savitzky–Golay filter with x spacing `delta` (derivatives divided by delta^deriv).
pub fn savitzky_golay_delta(
    y: &[f64],
    window: usize,
    order: usize,
    deriv: usize,
    delta: f64,
) -> Result<Vec<f64>, String> {
    check_params(window, order, deriv)?;
    if y.len() < window {
        return Err(format!(
            "the window of {window} points is longer than the data ({})",
            y.len()
        ));
    }
    if deriv > 0 && !(delta != 0.0 && delta.is_finite()) {
        return Err("the x step must be non-zero for a derivative".into());
    }
    let w = SgWeights::new(window, order, deriv)?;
    let out = w.apply_with(y, |c| c);
    if deriv == 0 {
        Ok(out)
    } else {
        let d = delta.powi(deriv as i32);
        Ok(out.into_iter().map(|v| v / d).collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn published_five_and_seven_point_quadratic_weights() {
        // Savitzky & Golay 1964, Table I (convolutes for quadratic/cubic smoothing):
        // 5 points (−3, 12, 17, 12, −3)/35; 7 points (−2, 3, 6, 7, 6, 3, −2)/21.
        let c = sg_coefficients(5, 2, 0).unwrap();
        for (a, b) in c.iter().zip([-3.0, 12.0, 17.0, 12.0, -3.0]) {
            assert!((a - b / 35.0).abs() < 1e-14);
        }
        let c = sg_coefficients(7, 3, 0).unwrap();
        for (a, b) in c.iter().zip([-2.0, 3.0, 6.0, 7.0, 6.0, 3.0, -2.0]) {
            assert!((a - b / 21.0).abs() < 1e-14);
        }
    }

    #[test]
    fn polynomials_pass_unchanged_including_edges() {
        // Analytic: a fit of order ≥ the data's degree reproduces it everywhere.
        let y: Vec<f64> = (0..30)
            .map(|i| {
                let x = i as f64 * 0.5;
                1.0 - x + 0.3 * x * x
            })
            .collect();
        let s = savitzky_golay(&y, 9, 2, 0).unwrap();
        for (a, b) in s.iter().zip(&y) {
            assert!((a - b).abs() < 1e-10);
        }
        // First derivative with delta 0.5: d/dx = −1 + 0.6 x.
        let d = savitzky_golay_delta(&y, 9, 3, 1, 0.5).unwrap();
        for (i, v) in d.iter().enumerate() {
            assert!((v - (-1.0 + 0.6 * (i as f64 * 0.5))).abs() < 1e-9, "{i}");
        }
        let d2 = savitzky_golay_delta(&y, 7, 2, 2, 0.5).unwrap();
        assert!(d2.iter().all(|v| (v - 0.6).abs() < 1e-9));
    }

    #[test]
    fn bad_parameters_are_refused() {
        assert!(check_params(4, 2, 0).is_err());
        assert!(check_params(5, 7, 0).is_err());
        assert!(check_params(5, 1, 2).is_err());
        assert!(check_params(3, 3, 0).is_err());
        assert!(savitzky_golay(&[1.0, 2.0], 5, 2, 0).is_err());
    }
}
