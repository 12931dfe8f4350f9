//! Levenberg–Marquardt least squares with bounds, on nalgebra.
//!
//! Minimises χ² = Σ rᵢ(θ)² (Levenberg 1944; Marquardt 1963). Each step solves the damped
//! normal equations (JᵀJ + λD) δ = −Jᵀr with D the diagonal of JᵀJ (Marquardt's scaling,
//! kept at its running maximum as in MINPACK, Moré 1978) by Cholesky, falling back to LU.
//! λ is updated from the gain ratio ρ = actual / predicted reduction as in Nielsen (1999):
//! on success λ ← λ·max(1/3, 1 − (2ρ − 1)³), on failure λ ← λ·ν, ν ← 2ν.
//! Convergence: relative χ² reduction (actual and predicted) below `ftol`, every step
//! component below `xtol`·(|u| + `xtol`), or the cosine between r and every column of J
//! below `gtol` (MINPACK's gradient test); otherwise it stops at `max_iterations`.
//!
//! Bounds are handled by the smooth transformations of the MINUIT manual (James and Roos
//! 1975): p = lo + (hi − lo)(sin u + 1)/2 for two bounds, p = lo − s + √(u² + s²) for a
//! lower bound only (upper alike), with s the initial distance from the bound (the
//! manual uses s = 1; scaling by the start makes it independent of units). The solver
//! works in u and returns the parameters and the Jacobian in p, from which the caller
//! forms the covariance; a parameter that ends within a relative 1e-6 of a bound is
//! reported at its bound.

use nalgebra::{DMatrix, DVector};

/// A least-squares problem in external parameters θ.
pub trait Problem {
    fn n_residuals(&self) -> usize;
    fn n_params(&self) -> usize;
    /// Residuals at θ; false when the model cannot be evaluated there (non-finite values).
    fn residuals(&mut self, theta: &[f64], r: &mut [f64]) -> bool;
    /// Jacobian ∂r/∂θ at the θ of the latest `residuals` call (which returned true).
    fn jacobian(&mut self, theta: &[f64], j: &mut DMatrix<f64>);
}

/// Bounds of one parameter (either may be absent).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bounds {
    pub lo: Option<f64>,
    pub hi: Option<f64>,
}

#[derive(Clone, Copy, Debug)]
enum Transform {
    None,
    Both { lo: f64, hi: f64 },
    Lower { lo: f64, s: f64 },
    Upper { hi: f64, s: f64 },
}

impl Transform {
    fn new(b: Bounds, start: f64) -> Transform {
        let scale = |d: f64| if d > 0.0 && d.is_finite() { d } else { 1.0 };
        match (b.lo, b.hi) {
            (Some(lo), Some(hi)) => Transform::Both { lo, hi },
            (Some(lo), None) => Transform::Lower {
                lo,
                s: scale(start - lo),
            },
            (None, Some(hi)) => Transform::Upper {
                hi,
                s: scale(hi - start),
            },
            (None, None) => Transform::None,
        }
    }
    fn to_internal(self, p: f64) -> f64 {
        match self {
            Transform::None => p,
            Transform::Both { lo, hi } => {
                (2.0 * (p - lo) / (hi - lo) - 1.0).clamp(-1.0, 1.0).asin()
            }
            Transform::Lower { lo, s } => ((p - lo + s).powi(2) - s * s).max(0.0).sqrt(),
            Transform::Upper { hi, s } => ((hi - p + s).powi(2) - s * s).max(0.0).sqrt(),
        }
    }
    /// p(u) and dp/du.
    fn to_external(self, u: f64) -> (f64, f64) {
        match self {
            Transform::None => (u, 1.0),
            Transform::Both { lo, hi } => (
                lo + (hi - lo) * (u.sin() + 1.0) / 2.0,
                (hi - lo) * u.cos() / 2.0,
            ),
            Transform::Lower { lo, s } => {
                let r = (u * u + s * s).sqrt();
                (lo - s + r, u / r)
            }
            Transform::Upper { hi, s } => {
                let r = (u * u + s * s).sqrt();
                (hi + s - r, -u / r)
            }
        }
    }
    fn at_bound(self, p: f64) -> bool {
        let near = |b: f64, scale: f64| (p - b).abs() <= 1e-6 * scale.max(b.abs()).max(1e-300);
        match self {
            Transform::None => false,
            Transform::Both { lo, hi } => near(lo, hi - lo) || near(hi, hi - lo),
            Transform::Lower { lo, s } => near(lo, s),
            Transform::Upper { hi, s } => near(hi, s),
        }
    }
}

/// Solver settings.
#[derive(Clone, Copy, Debug)]
pub struct Settings {
    pub max_iterations: usize,
    pub ftol: f64,
    pub xtol: f64,
    pub gtol: f64,
}

/// What the solver found.
#[derive(Clone, Debug)]
pub struct Solution {
    pub theta: Vec<f64>,
    pub chi_square: f64,
    pub iterations: usize,
    pub converged: bool,
    pub reason: String,
    /// Which parameters ended on a bound.
    pub at_bound: Vec<bool>,
    /// ∂r/∂θ at the solution (external parameters).
    pub jacobian: DMatrix<f64>,
    pub residuals: Vec<f64>,
}

/// Why the solver could not even start.
#[derive(Clone, Debug, PartialEq)]
pub struct SolveError(pub String);

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Runs Levenberg–Marquardt from `start` (which must lie within the bounds).
pub fn solve<P: Problem>(
    problem: &mut P,
    start: &[f64],
    bounds: &[Bounds],
    settings: Settings,
) -> Result<Solution, SolveError> {
    let n = problem.n_residuals();
    let p = problem.n_params();
    if start.len() != p || bounds.len() != p {
        return Err(SolveError("parameter and bound counts differ".into()));
    }
    let tr: Vec<Transform> = bounds
        .iter()
        .zip(start)
        .map(|(b, &s)| Transform::new(*b, s))
        .collect();
    let mut u: Vec<f64> = tr
        .iter()
        .zip(start)
        .map(|(t, &s)| t.to_internal(s))
        .collect();
    let mut theta = vec![0.0; p];
    let mut dtheta = vec![0.0; p];
    let external = |u: &[f64], theta: &mut [f64], dtheta: &mut [f64]| {
        for k in 0..u.len() {
            let (v, d) = tr[k].to_external(u[k]);
            theta[k] = v;
            dtheta[k] = d;
        }
    };
    external(&u, &mut theta, &mut dtheta);
    let mut r = vec![0.0; n];
    if !problem.residuals(&theta, &mut r) || r.iter().any(|v| !v.is_finite()) {
        return Err(SolveError(
            "the model cannot be evaluated at the starting values (non-finite result)".into(),
        ));
    }
    let mut chi2 = dot(&r, &r);
    let mut jac = DMatrix::zeros(n, p);
    problem.jacobian(&theta, &mut jac);
    let mut r_new = vec![0.0; n];
    let mut u_new = vec![0.0; p];
    let mut theta_new = vec![0.0; p];
    let mut dtheta_new = vec![0.0; p];
    let mut a = DMatrix::zeros(p, p);
    let mut g = DVector::zeros(p);
    let mut diag_max = vec![0.0f64; p];
    let mut lambda = 1e-3;
    let mut nu = 2.0;
    let mut iterations = 0;
    let (converged, reason) = 'outer: loop {
        if p == 0 {
            break (true, "no free parameters".to_string());
        }
        if chi2 == 0.0 {
            break (true, "χ² is zero (the model fits exactly)".to_string());
        }
        // Normal matrix and gradient in u: scale by dθ/du (A_u = S A_θ S, g_u = S g_θ).
        normal_equations(&jac, &r, &mut a, &mut g);
        for r_ in 0..p {
            g[r_] *= dtheta[r_];
            for c in 0..p {
                a[(r_, c)] *= dtheta[r_] * dtheta[c];
            }
        }
        // Gradient test: cosine between r and each column.
        let rnorm = chi2.sqrt();
        let mut gmax = 0.0f64;
        for k in 0..p {
            let cn = a[(k, k)].sqrt();
            if cn > 0.0 {
                gmax = gmax.max(g[k].abs() / (cn * rnorm));
            }
        }
        if gmax <= settings.gtol {
            break (
                true,
                format!(
                    "gradient test met (cosine {gmax:.1e} ≤ {:.1e})",
                    settings.gtol
                ),
            );
        }
        for k in 0..p {
            diag_max[k] = diag_max[k].max(a[(k, k)]);
        }
        let dmax = diag_max.iter().cloned().fold(0.0, f64::max);
        loop {
            if iterations >= settings.max_iterations {
                break 'outer (
                    false,
                    format!(
                        "stopped at the iteration limit ({}) before meeting the tolerance",
                        settings.max_iterations
                    ),
                );
            }
            iterations += 1;
            let mut m = a.clone();
            for k in 0..p {
                let d = diag_max[k].max(1e-15 * dmax).max(1e-300);
                m[(k, k)] += lambda * d;
            }
            let rhs = -&g;
            let delta = match m.clone().cholesky() {
                Some(c) => Some(c.solve(&rhs)),
                None => m.lu().solve(&rhs),
            };
            let Some(delta) = delta.filter(|d| d.iter().all(|v| v.is_finite())) else {
                lambda *= nu;
                nu *= 2.0;
                continue;
            };
            for k in 0..p {
                u_new[k] = u[k] + delta[k];
            }
            external(&u_new, &mut theta_new, &mut dtheta_new);
            let ok =
                problem.residuals(&theta_new, &mut r_new) && r_new.iter().all(|v| v.is_finite());
            let chi2_new = if ok {
                dot(&r_new, &r_new)
            } else {
                f64::INFINITY
            };
            // Predicted reduction −2gᵀδ − δᵀAδ = −gᵀδ + λ δᵀDδ.
            let mut pred = -g.dot(&delta);
            for k in 0..p {
                let d = diag_max[k].max(1e-15 * dmax).max(1e-300);
                pred += lambda * d * delta[k] * delta[k];
            }
            let small_step =
                (0..p).all(|k| delta[k].abs() <= settings.xtol * (u[k].abs() + settings.xtol));
            if chi2_new < chi2 {
                let rho = (chi2 - chi2_new) / pred.max(f64::MIN_POSITIVE);
                let rel_actual = (chi2 - chi2_new) / chi2;
                let rel_pred = pred / chi2;
                lambda *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
                nu = 2.0;
                std::mem::swap(&mut u, &mut u_new);
                std::mem::swap(&mut theta, &mut theta_new);
                std::mem::swap(&mut dtheta, &mut dtheta_new);
                std::mem::swap(&mut r, &mut r_new);
                chi2 = chi2_new;
                problem.jacobian(&theta, &mut jac);
                if rel_actual <= settings.ftol && rel_pred <= settings.ftol {
                    break 'outer (
                        true,
                        format!(
                            "relative reduction of χ² below the tolerance {:.1e}",
                            settings.ftol
                        ),
                    );
                }
                if small_step {
                    break 'outer (
                        true,
                        format!("relative step below the tolerance {:.1e}", settings.xtol),
                    );
                }
                continue 'outer;
            }
            // Rejected. Near the minimum rounding stops further reduction: converged
            // when the predicted gain or the step is already below the tolerances.
            if ok && (pred / chi2 <= settings.ftol * 1e-2 || small_step) {
                break 'outer (
                    true,
                    "no further reduction of χ² possible within the tolerance".to_string(),
                );
            }
            lambda *= nu;
            nu *= 2.0;
            if lambda > 1e30 {
                break 'outer (
                    false,
                    "the damping grew without bound: no step reduces χ²".to_string(),
                );
            }
        }
    };
    let at_bound = tr.iter().zip(&theta).map(|(t, &v)| t.at_bound(v)).collect();
    Ok(Solution {
        theta,
        chi_square: chi2,
        iterations,
        converged,
        reason,
        at_bound,
        jacobian: jac,
        residuals: r,
    })
}

/// Dot product with four accumulators (lets the compiler use vector registers).
#[inline]
fn dot4(a: &[f64], b: &[f64]) -> f64 {
    let mut s = [0.0; 4];
    let (ca, cb) = (a.chunks_exact(4), b.chunks_exact(4));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        for k in 0..4 {
            s[k] += x[k] * y[k];
        }
    }
    let tail: f64 = ra.iter().zip(rb).map(|(x, y)| x * y).sum();
    (s[0] + s[1]) + (s[2] + s[3]) + tail
}

/// A = JᵀJ (both triangles from one) and g = Jᵀr, from J's contiguous columns.
fn normal_equations(j: &DMatrix<f64>, r: &[f64], a: &mut DMatrix<f64>, g: &mut DVector<f64>) {
    let n = j.nrows();
    let p = j.ncols();
    let js = j.as_slice();
    for c1 in 0..p {
        let col1 = &js[c1 * n..(c1 + 1) * n];
        g[c1] = dot4(col1, r);
        for c2 in c1..p {
            let v = dot4(col1, &js[c2 * n..(c2 + 1) * n]);
            a[(c1, c2)] = v;
            a[(c2, c1)] = v;
        }
    }
}

/// (JᵀJ)⁻¹ by Cholesky on the column-scaled normal matrix; None when singular.
pub fn inverse_normal_matrix(j: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let p = j.ncols();
    let a = j.tr_mul(j);
    let scale: Vec<f64> = (0..p)
        .map(|k| {
            let d = a[(k, k)];
            if d > 0.0 {
                1.0 / d.sqrt()
            } else {
                0.0
            }
        })
        .collect();
    if scale.iter().any(|&s| s == 0.0 || !s.is_finite()) {
        return None;
    }
    let mut s = a;
    for r in 0..p {
        for c in 0..p {
            s[(r, c)] *= scale[r] * scale[c];
        }
    }
    let inv = s.cholesky()?.inverse();
    let mut out = inv;
    for r in 0..p {
        for c in 0..p {
            out[(r, c)] *= scale[r] * scale[c];
        }
    }
    out.iter().all(|v| v.is_finite()).then_some(out)
}

#[cfg(test)]
#[allow(clippy::needless_range_loop)] // index loops read clearer in these checks
mod tests {
    use super::*;

    /// r = y − a·exp(−b·x), a classic two-parameter problem.
    struct Expo {
        x: Vec<f64>,
        y: Vec<f64>,
    }
    impl Problem for Expo {
        fn n_residuals(&self) -> usize {
            self.x.len()
        }
        fn n_params(&self) -> usize {
            2
        }
        fn residuals(&mut self, t: &[f64], r: &mut [f64]) -> bool {
            for i in 0..self.x.len() {
                r[i] = self.y[i] - t[0] * (-t[1] * self.x[i]).exp();
            }
            true
        }
        fn jacobian(&mut self, t: &[f64], j: &mut DMatrix<f64>) {
            for i in 0..self.x.len() {
                let e = (-t[1] * self.x[i]).exp();
                j[(i, 0)] = -e;
                j[(i, 1)] = t[0] * self.x[i] * e;
            }
        }
    }

    fn settings() -> Settings {
        Settings {
            max_iterations: 200,
            ftol: 1e-14,
            xtol: 1e-14,
            gtol: 1e-14,
        }
    }

    #[test]
    fn recovers_exact_exponential_and_respects_bounds() {
        // Analytic: noise-free data of 3·exp(−0.7x) are fitted exactly.
        let x: Vec<f64> = (0..20).map(|i| i as f64 * 0.25).collect();
        let y = x.iter().map(|v| 3.0 * (-0.7 * v).exp()).collect();
        let mut pr = Expo { x, y };
        let free = [Bounds { lo: None, hi: None }; 2];
        let s = solve(&mut pr, &[1.0, 0.1], &free, settings()).unwrap();
        assert!(s.converged, "{}", s.reason);
        assert!((s.theta[0] - 3.0).abs() < 1e-10 && (s.theta[1] - 0.7).abs() < 1e-10);
        // With b bounded to [0, 0.5] the best fit puts b on its upper bound.
        let b = [
            Bounds { lo: None, hi: None },
            Bounds {
                lo: Some(0.0),
                hi: Some(0.5),
            },
        ];
        let s = solve(&mut pr, &[1.0, 0.1], &b, settings()).unwrap();
        assert!(
            s.theta[1] <= 0.5 && s.at_bound[1] && !s.at_bound[0],
            "{:?}",
            s.theta
        );
        // A lower bound that is not active leaves the answer unchanged.
        let b = [
            Bounds {
                lo: Some(0.0),
                hi: None,
            },
            Bounds {
                lo: Some(0.0),
                hi: None,
            },
        ];
        let s = solve(&mut pr, &[1.0, 0.1], &b, settings()).unwrap();
        assert!((s.theta[1] - 0.7).abs() < 1e-9 && !s.at_bound[1]);
    }

    #[test]
    fn iteration_limit_is_reported_as_not_converged() {
        let x: Vec<f64> = (0..20).map(|i| i as f64 * 0.25).collect();
        let y = x
            .iter()
            .map(|v| 3.0 * (-0.7 * v).exp() + 0.01 * v.sin())
            .collect();
        let mut pr = Expo { x, y };
        let mut st = settings();
        st.max_iterations = 2;
        let s = solve(
            &mut pr,
            &[1.0, 0.1],
            &[Bounds { lo: None, hi: None }; 2],
            st,
        )
        .unwrap();
        assert!(!s.converged && s.reason.contains("iteration limit"));
    }

    #[test]
    fn singular_normal_matrix_gives_none() {
        let j = DMatrix::from_row_slice(3, 2, &[1.0, 2.0, 2.0, 4.0, 3.0, 6.0]);
        assert!(inverse_normal_matrix(&j).is_none());
        let j = DMatrix::from_row_slice(3, 2, &[1.0, 0.0, 0.0, 2.0, 1.0, 1.0]);
        let inv = inverse_normal_matrix(&j).unwrap();
        // Analytic: JᵀJ = [[2,1],[1,5]], inverse = [[5,−1],[−1,2]]/9.
        assert!((inv[(0, 0)] - 5.0 / 9.0).abs() < 1e-15 && (inv[(0, 1)] + 1.0 / 9.0).abs() < 1e-15);
    }
}
