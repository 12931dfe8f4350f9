//! `background.asls`: asymmetric least squares smoothing baseline (Eilers & Boelens
//! 2005) [eilers2005].
//!
//! The baseline z minimises Σ wᵢ(yᵢ − zᵢ)² + λ Σ(Δ²zᵢ)², i.e. solves the pentadiagonal
//! system (W + λDᵀD) z = W y, with D the second-difference matrix. Weights are
//! asymmetric: wᵢ = p where yᵢ > zᵢ and 1 − p elsewhere, starting from all ones;
//! the system is re-solved until no weight changes or `max_iterations`. Each solve is
//! a banded LDLᵀ factorisation (bandwidth 2) in O(n) time and memory. λ is
//! dimensionless (per point²): it depends on the number of points, not on x units.

use super::{in_range, range_text, with_background};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::transform::grid::check_range;
use crate::value::{Artifact, Kind, Record};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Smoothness λ (larger is stiffer); Eilers & Boelens suggest 10²–10⁹.
    pub lambda: f64,
    /// Asymmetry p: weight of points above the baseline (0.001–0.1 typical).
    pub p: f64,
    /// Most re-weighting iterations.
    pub max_iterations: usize,
    /// Compute over x within [low, high]; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub range: Option<[f64; 2]>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            lambda: 1e5,
            p: 0.01,
            max_iterations: 50,
            range: None,
        }
    }
}

pub struct AslsBackground;

static INPUTS: &[Port] = &[Port::each("spectrum", Kind::Spectrum, "the spectrum")];

static REFS: &[Reference] = &[Reference {
    key: "eilers2005",
    citation: "P. H. C. Eilers, H. F. M. Boelens, Baseline correction with asymmetric least squares smoothing, Leiden University Medical Centre report (2005).",
}];

impl TypedStage for AslsBackground {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "background.asls",
        version: 1,
        summary: "Asymmetric least squares baseline (Eilers & Boelens 2005), banded O(n) solve",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if !(o.lambda > 0.0 && o.lambda.is_finite()) {
            return Err(OptionError::new("lambda", "must be a positive number"));
        }
        if !(o.p > 0.0 && o.p < 1.0) {
            return Err(OptionError::new("p", "must lie strictly between 0 and 1"));
        }
        if o.max_iterations == 0 {
            return Err(OptionError::new("max_iterations", "at least 1"));
        }
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "The baseline was estimated {} by asymmetric least squares smoothing [eilers2005] with λ = {:e} and p = {}, re-weighting until no weight changed (at most {} iterations).",
            range_text(o.range),
            o.lambda,
            o.p,
            o.max_iterations
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let w = in_range(s, o.range, 3)?;
        let r = asls(&w.y, o.lambda, o.p, o.max_iterations)?;
        let mut a = with_background(s, &w, "asymmetric least squares baseline", &r.baseline)?;
        a.record(Record::number(
            "background.iterations",
            r.iterations as f64,
            None,
            "",
        ));
        if !r.converged {
            a.warn(format!(
                "the AsLS weights were still changing after {} iterations",
                o.max_iterations
            ));
        }
        Ok(a)
    }
}

/// Outcome of [`asls`].
#[derive(Clone, Debug, PartialEq)]
pub struct AslsResult {
    pub baseline: Vec<f64>,
    pub iterations: usize,
    pub converged: bool,
}

/// Asymmetric least squares baseline of y (Eilers & Boelens 2005).
pub fn asls(y: &[f64], lambda: f64, p: f64, max_iter: usize) -> Result<AslsResult, StageError> {
    let n = y.len();
    if n < 3 {
        return Err(StageError::input("AsLS needs at least 3 points"));
    }
    let (d0, d1, d2) = second_difference_gram(n);
    let mut w = vec![1.0; n];
    let mut z = vec![0.0; n];
    for it in 1..=max_iter {
        let a0: Vec<f64> = (0..n).map(|i| w[i] + lambda * d0[i]).collect();
        let a1: Vec<f64> = d1.iter().map(|v| lambda * v).collect();
        let a2: Vec<f64> = d2.iter().map(|v| lambda * v).collect();
        let b: Vec<f64> = (0..n).map(|i| w[i] * y[i]).collect();
        z = solve_pentadiagonal(&a0, &a1, &a2, &b)?;
        let mut changed = false;
        for i in 0..n {
            let nw = if y[i] > z[i] { p } else { 1.0 - p };
            if nw != w[i] {
                changed = true;
                w[i] = nw;
            }
        }
        if !changed {
            return Ok(AslsResult {
                baseline: z,
                iterations: it,
                converged: true,
            });
        }
    }
    Ok(AslsResult {
        baseline: z,
        iterations: max_iter,
        converged: false,
    })
}

/// The three distinct diagonals of DᵀD for the (n−2)×n second-difference matrix D:
/// main (n), first off-diagonal (n−1), second off-diagonal (n−2).
pub fn second_difference_gram(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut d0 = vec![0.0; n];
    let mut d1 = vec![0.0; n.saturating_sub(1)];
    let mut d2 = vec![0.0; n.saturating_sub(2)];
    let row = [1.0, -2.0, 1.0];
    for k in 0..n.saturating_sub(2) {
        for a in 0..3 {
            d0[k + a] += row[a] * row[a];
            if a + 1 < 3 {
                d1[k + a] += row[a] * row[a + 1];
            }
        }
        d2[k] += row[0] * row[2];
    }
    (d0, d1, d2)
}

/// Solves a symmetric positive-definite pentadiagonal system by banded LDLᵀ:
/// main diagonal a0, first off-diagonal a1 (a1[i] = A[i][i+1]), second a2.
pub fn solve_pentadiagonal(
    a0: &[f64],
    a1: &[f64],
    a2: &[f64],
    b: &[f64],
) -> Result<Vec<f64>, StageError> {
    let n = a0.len();
    let mut d = vec![0.0; n];
    // l1[i] = L[i][i−1], l2[i] = L[i][i−2].
    let mut l1 = vec![0.0; n];
    let mut l2 = vec![0.0; n];
    for i in 0..n {
        if i >= 2 {
            l2[i] = a2[i - 2] / d[i - 2];
        }
        if i >= 1 {
            let mut v = a1[i - 1];
            if i >= 2 {
                v -= l2[i] * l1[i - 1] * d[i - 2];
            }
            l1[i] = v / d[i - 1];
        }
        let mut di = a0[i];
        if i >= 1 {
            di -= l1[i] * l1[i] * d[i - 1];
        }
        if i >= 2 {
            di -= l2[i] * l2[i] * d[i - 2];
        }
        if di.is_nan() || di <= 0.0 || !di.is_finite() {
            return Err(StageError::numeric(format!(
                "the banded system is not positive definite (pivot {i} = {di})"
            )));
        }
        d[i] = di;
    }
    // L u = b.
    let mut u = vec![0.0; n];
    for i in 0..n {
        let mut v = b[i];
        if i >= 1 {
            v -= l1[i] * u[i - 1];
        }
        if i >= 2 {
            v -= l2[i] * u[i - 2];
        }
        u[i] = v;
    }
    // D v = u; Lᵀ z = v.
    let mut z = vec![0.0; n];
    for i in (0..n).rev() {
        let mut v = u[i] / d[i];
        if i + 1 < n {
            v -= l1[i + 1] * z[i + 1];
        }
        if i + 2 < n {
            v -= l2[i + 2] * z[i + 2];
        }
        z[i] = v;
    }
    Ok(z)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn banded_solve_matches_dense() {
        // A random-ish SPD pentadiagonal matrix; compare with nalgebra's dense LU.
        let n = 9;
        let (d0, d1, d2) = second_difference_gram(n);
        let a0: Vec<f64> = d0
            .iter()
            .enumerate()
            .map(|(i, v)| 3.0 * v + 1.0 + 0.1 * i as f64)
            .collect();
        let a1: Vec<f64> = d1.iter().map(|v| 3.0 * v).collect();
        let a2: Vec<f64> = d2.iter().map(|v| 3.0 * v).collect();
        let b: Vec<f64> = (0..n).map(|i| (i as f64).sin() + 2.0).collect();
        let z = solve_pentadiagonal(&a0, &a1, &a2, &b).unwrap();
        let m = nalgebra::DMatrix::from_fn(n, n, |i, j| match i.abs_diff(j) {
            0 => a0[i],
            1 => a1[i.min(j)],
            2 => a2[i.min(j)],
            _ => 0.0,
        });
        let zz = m.lu().solve(&nalgebra::DVector::from_vec(b)).unwrap();
        for i in 0..n {
            assert!((z[i] - zz[i]).abs() < 1e-12);
        }
    }

    #[test]
    fn straight_line_is_its_own_baseline() {
        // Analytic: Δ² of a line is zero, so with all weights equal it is reproduced.
        let y: Vec<f64> = (0..50).map(|i| 2.0 + 0.5 * i as f64).collect();
        let r = asls(&y, 1e6, 0.5, 10).unwrap();
        for (a, b) in r.baseline.iter().zip(&y) {
            assert!((a - b).abs() < 1e-8);
        }
    }
}
