//! `calibrate.polynomial`: an x-axis correction x' = Σ c_k x^k through several
//! (measured, true) reference pairs, by linear least squares (Legendre's method of
//! least squares; here solved by QR on centred, scaled x for conditioning).
//!
//! With exactly order + 1 pairs the polynomial interpolates them; with more, the
//! residuals true − fitted at each reference are published so the quality of the
//! calibration can be judged. Each measured value may optionally be refined first as
//! the maximum within a window, with parabolic refinement (common practice).

use super::{locate_max_near, Target, X_REFERENCE_KINDS};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// One calibration point.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Pair {
    /// Where the reference feature is found on the uncorrected axis, in x units.
    pub measured: f64,
    /// Where it belongs: a number in x units or a reference-table name.
    pub true_value: Target,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// The (measured, true) reference pairs; at least order + 1.
    pub pairs: Vec<Pair>,
    /// Polynomial order of the correction (1 = linear: offset and scale).
    pub order: usize,
    /// When given, each measured value is refined as the maximum within this
    /// half-width of it (parabolic refinement), in x units.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub refine_window: Option<f64>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            pairs: Vec::new(),
            order: 1,
            refine_window: None,
        }
    }
}

pub struct CalibratePolynomial;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to calibrate",
)];

static REFS: &[Reference] = &[Reference {
    key: "golub2013",
    citation: "G. H. Golub, C. F. Van Loan, Matrix Computations, 4th ed. (Johns Hopkins University Press, 2013), §5.3 (least squares by QR factorization).",
}];

impl TypedStage for CalibratePolynomial {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "calibrate.polynomial",
        version: 1,
        summary: "Linear or polynomial x-axis correction through several (measured, true) reference pairs, with residuals",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.order > 5 {
            return Err(OptionError::new(
                "order",
                "polynomial order above 5 is not supported",
            ));
        }
        if o.pairs.len() < o.order + 1 {
            return Err(OptionError::new(
                "pairs",
                format!(
                    "an order-{} correction needs at least {} reference pairs, got {}",
                    o.order,
                    o.order + 1,
                    o.pairs.len()
                ),
            ));
        }
        for (i, p) in o.pairs.iter().enumerate() {
            p.true_value
                .resolve(X_REFERENCE_KINDS)
                .map_err(|m| OptionError::new(format!("pairs.{i}.true_value"), m))?;
        }
        if let Some(w) = o.refine_window {
            if w.is_nan() || w <= 0.0 {
                return Err(OptionError::new("refine_window", "must be positive"));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let pts: Vec<String> = o
            .pairs
            .iter()
            .map(|p| {
                format!(
                    "{} → {}",
                    p.measured,
                    p.true_value.describe(X_REFERENCE_KINDS)
                )
            })
            .collect();
        let refine = match o.refine_window {
            Some(w) => format!(", each measured position refined as the maximum within ±{w} by parabolic interpolation"),
            None => String::new(),
        };
        format!(
            "The x axis was corrected by an order-{} polynomial fitted by least squares [golub2013] through {} reference pairs ({}){refine}.",
            o.order,
            o.pairs.len(),
            if pts.is_empty() { "none given".to_string() } else { pts.join("; ") }
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let mut measured = Vec::new();
        let mut truth = Vec::new();
        for p in &o.pairs {
            let m = match o.refine_window {
                Some(w) => locate_max_near(s, p.measured, w)?.0,
                None => p.measured,
            };
            measured.push(m);
            truth.push(
                p.true_value
                    .resolve(X_REFERENCE_KINDS)
                    .map_err(StageError::input)?
                    .0,
            );
        }
        let poly = fit_polynomial(&measured, &truth, o.order)?;
        let mut out = s.clone();
        for v in &mut out.x {
            *v = poly.eval(*v);
        }
        let xu = s.x_axis.unit.as_str();
        let mut recs = Vec::new();
        for (k, c) in poly.coefficients().iter().enumerate() {
            let unit = match k {
                0 => xu.to_string(),
                1 => String::new(),
                _ if xu.is_empty() => String::new(),
                _ => format!("{xu}^-{}", k - 1),
            };
            recs.push(Record::number(format!("coefficient.{k}"), *c, None, &unit));
        }
        let mut ss = 0.0;
        for (i, (m, t)) in measured.iter().zip(&truth).enumerate() {
            let r = t - poly.eval(*m);
            ss += r * r;
            recs.push(Record::number(format!("residual.{}", i + 1), r, None, xu));
            recs.push(Record::number(format!("measured.{}", i + 1), *m, None, xu));
        }
        let dof = measured.len() as f64 - (o.order + 1) as f64;
        if dof > 0.0 {
            recs.push(Record::number(
                "residual_rms",
                (ss / measured.len() as f64).sqrt(),
                None,
                xu,
            ));
        }
        let mut a = Artifact::new(Value::Spectrum(out)).with_results(recs);
        if dof == 0.0 {
            a.info("as many reference pairs as coefficients: the correction interpolates them and the residuals are zero by construction");
        }
        Ok(a)
    }
}

/// A polynomial in the centred, scaled variable u = (x − shift)/scale.
#[derive(Clone, Debug, PartialEq)]
pub struct Polynomial {
    shift: f64,
    scale: f64,
    /// Coefficients in u, lowest order first.
    coef_u: Vec<f64>,
}

impl Polynomial {
    pub fn eval(&self, x: f64) -> f64 {
        let u = (x - self.shift) / self.scale;
        self.coef_u.iter().rev().fold(0.0, |acc, c| acc * u + c)
    }
    /// Coefficients in x (lowest order first), expanded from the scaled form.
    pub fn coefficients(&self) -> Vec<f64> {
        let n = self.coef_u.len();
        let mut out = vec![0.0; n];
        // Σ a_k ((x − s)/h)^k = Σ a_k h^-k Σ_j C(k,j) x^j (−s)^(k−j)
        for (k, a) in self.coef_u.iter().enumerate() {
            let f = a / self.scale.powi(k as i32);
            let mut binom = 1.0;
            for (j, o) in out.iter_mut().enumerate().take(k + 1) {
                if j > 0 {
                    binom = binom * (k + 1 - j) as f64 / j as f64;
                }
                *o += f * binom * (-self.shift).powi((k - j) as i32);
            }
        }
        out
    }
}

/// Least-squares polynomial of the given order through (x, y), via QR.
pub fn fit_polynomial(x: &[f64], y: &[f64], order: usize) -> Result<Polynomial, StageError> {
    fit_polynomial_weighted(x, y, None, order)
}

/// Weighted least-squares polynomial (weights multiply the squared residuals).
pub fn fit_polynomial_weighted(
    x: &[f64],
    y: &[f64],
    w: Option<&[f64]>,
    order: usize,
) -> Result<Polynomial, StageError> {
    let n = x.len();
    if n < order + 1 || y.len() != n {
        return Err(StageError::numeric(format!(
            "an order-{order} polynomial needs at least {} points, got {n}",
            order + 1
        )));
    }
    let lo = x.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = x.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let shift = 0.5 * (lo + hi);
    let scale = if hi > lo { 0.5 * (hi - lo) } else { 1.0 };
    let m = order + 1;
    let a = nalgebra::DMatrix::from_fn(n, m, |i, k| {
        let sw = w.map_or(1.0, |w| w[i].sqrt());
        sw * ((x[i] - shift) / scale).powi(k as i32)
    });
    let b = nalgebra::DVector::from_fn(n, |i, _| w.map_or(1.0, |w| w[i].sqrt()) * y[i]);
    let qr = a.qr();
    let r = qr.r();
    // Rank check: a tiny diagonal of R means the points cannot fix every coefficient.
    let rmax = (0..m).map(|i| r[(i, i)].abs()).fold(0.0, f64::max);
    if (0..m).any(|i| r[(i, i)].abs() <= 1e-12 * rmax.max(f64::MIN_POSITIVE)) {
        return Err(StageError::numeric(format!(
            "the points do not determine an order-{order} polynomial (repeated x values?)"
        )));
    }
    let qtb = qr.q().transpose() * b;
    let sol = r
        .solve_upper_triangular(&qtb)
        .ok_or_else(|| StageError::numeric("singular least-squares system"))?;
    let coef_u: Vec<f64> = sol.iter().copied().collect();
    if coef_u.iter().any(|c| !c.is_finite()) {
        return Err(StageError::numeric(
            "polynomial fit gave non-finite coefficients",
        ));
    }
    Ok(Polynomial {
        shift,
        scale,
        coef_u,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_line_and_quadratic_recovered() {
        // Analytic: points on y = 0.5 + 1.002 x are fitted exactly.
        let x = [84.1, 368.4, 932.9];
        let y: Vec<f64> = x.iter().map(|v| 0.5 + 1.002 * v).collect();
        let p = fit_polynomial(&x, &y, 1).unwrap();
        let c = p.coefficients();
        assert!((c[0] - 0.5).abs() < 1e-9 && (c[1] - 1.002).abs() < 1e-12);
        let y2: Vec<f64> = x.iter().map(|v| 1.0 - 2.0 * v + 3e-4 * v * v).collect();
        let c = fit_polynomial(&x, &y2, 2).unwrap().coefficients();
        assert!(
            (c[0] - 1.0).abs() < 1e-8 && (c[1] + 2.0).abs() < 1e-10 && (c[2] - 3e-4).abs() < 1e-14
        );
        assert!(fit_polynomial(&[1.0, 1.0], &[2.0, 3.0], 1).is_err());
    }
}
