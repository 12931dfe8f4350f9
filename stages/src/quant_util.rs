//! Small numerical helpers shared by the quantification families (calibration, nmr,
//! uvvis, xps/ups, eds, xrd): polynomial least squares solved by SVD on a centred and
//! scaled abscissa, first-order (GUM) uncertainty propagation, interpolation, record
//! look-ups, peak-position sources and the reading of built-in CSV tables.
//!
//! Uncertainty propagation follows the law of propagation of uncertainty to first order
//! (JCGM 100:2008, "GUM", section 5.1), with sensitivity coefficients from analytic
//! derivatives or central differences.

use crate::stage::{OptionError, Reference, StageError};
use crate::value::{Artifact, Scalar, Spectrum, Value};
use nalgebra::{DMatrix, DVector};

/// JCGM 100:2008, cited by every stage that propagates uncertainty to first order.
pub const GUM: Reference = Reference {
    key: "jcgm2008",
    citation: "JCGM 100:2008, Evaluation of measurement data — Guide to the expression of uncertainty in measurement (GUM), Joint Committee for Guides in Metrology, 2008.",
};

/// h·c in eV·nm, from the exact SI values of h and c and the exact elementary charge
/// (CODATA 2018: h = 6.62607015e-34 J s, c = 299792458 m/s, e = 1.602176634e-19 C).
pub const HC_EV_NM: f64 = 6.626_070_15e-34 * 299_792_458.0 / 1.602_176_634e-19 * 1e9;

/// Result of a (weighted) polynomial least-squares fit `y = Σ c_k x^k`.
#[derive(Clone, Debug, PartialEq)]
pub struct PolyFit {
    /// Coefficients c_0..c_deg in the original x.
    pub coef: Vec<f64>,
    /// Covariance of the coefficients (scaled by the residual variance), row-major.
    pub cov: Vec<Vec<f64>>,
    /// Residual standard deviation s = sqrt(Σ w r² / (n − p)).
    pub residual_sd: f64,
    /// Coefficient of determination 1 − SSR/SST (weighted sums when weighted).
    pub r_squared: f64,
    pub n: usize,
    pub dof: usize,
    /// Weighted mean of x and of y (used in inverse prediction).
    pub x_mean: f64,
    pub y_mean: f64,
}

impl PolyFit {
    pub fn stderr(&self, k: usize) -> f64 {
        self.cov[k][k].max(0.0).sqrt()
    }
    pub fn eval(&self, x: f64) -> f64 {
        self.coef.iter().rev().fold(0.0, |acc, c| acc * x + c)
    }
    pub fn derivative(&self, x: f64) -> f64 {
        self.coef
            .iter()
            .enumerate()
            .skip(1)
            .map(|(k, c)| k as f64 * c * x.powi(k as i32 - 1))
            .sum()
    }
    /// Variance of the fitted curve at x: gᵀ C g with g_k = x^k.
    pub fn curve_variance(&self, x: f64) -> f64 {
        let g: Vec<f64> = (0..self.coef.len()).map(|k| x.powi(k as i32)).collect();
        quad_form(&self.cov, &g)
    }
}

/// gᵀ C g.
pub fn quad_form(c: &[Vec<f64>], g: &[f64]) -> f64 {
    let mut s = 0.0;
    for (i, gi) in g.iter().enumerate() {
        for (j, gj) in g.iter().enumerate() {
            s += gi * c[i][j] * gj;
        }
    }
    s
}

/// Polynomial least squares of degree `deg` with optional weights (1/σ²).
///
/// The design matrix is built in t = (x − x̄)/s_x and solved by singular value
/// decomposition, so ill-conditioned data (NIST StRD Pontius, Filip) keep their
/// digits; coefficients and covariance are then mapped back to powers of x exactly
/// (binomial expansion, C_x = T C_t Tᵀ).
pub fn polyfit(x: &[f64], y: &[f64], w: Option<&[f64]>, deg: usize) -> Result<PolyFit, StageError> {
    let n = x.len();
    let p = deg + 1;
    if y.len() != n || w.is_some_and(|w| w.len() != n) {
        return Err(StageError::input("x, y and weights differ in length"));
    }
    if n <= p {
        return Err(StageError::input(format!(
            "a degree-{deg} fit needs more than {p} points (got {n})"
        )));
    }
    if x.iter().chain(y).any(|v| !v.is_finite()) {
        return Err(StageError::input("x and y must be finite numbers"));
    }
    let weights: Vec<f64> = match w {
        Some(w) => {
            if w.iter().any(|v| !v.is_finite() || *v <= 0.0) {
                return Err(StageError::input(
                    "every weight must be positive and finite (an uncertainty is zero or missing)",
                ));
            }
            w.to_vec()
        }
        None => vec![1.0; n],
    };
    let sw: f64 = weights.iter().sum();
    let xm = x.iter().zip(&weights).map(|(a, b)| a * b).sum::<f64>() / sw;
    let ym = y.iter().zip(&weights).map(|(a, b)| a * b).sum::<f64>() / sw;
    let xs = (x.iter().map(|v| (v - xm).powi(2)).sum::<f64>() / n as f64).sqrt();
    if xs == 0.0 || !xs.is_finite() {
        return Err(StageError::input(
            "all x values are equal: no fit is possible",
        ));
    }
    let mut a = DMatrix::<f64>::zeros(n, p);
    let mut b = DVector::<f64>::zeros(n);
    for i in 0..n {
        let t = (x[i] - xm) / xs;
        let sq = weights[i].sqrt();
        for k in 0..p {
            a[(i, k)] = sq * t.powi(k as i32);
        }
        b[i] = sq * y[i];
    }
    let svd = a.svd(true, true);
    let smax = svd.singular_values.max();
    let tol = smax * (n.max(p) as f64) * f64::EPSILON;
    if svd.singular_values.iter().any(|s| *s <= tol) {
        return Err(StageError::numeric(
            "the least-squares problem is rank deficient (too few distinct x values)",
        ));
    }
    let (u, vt) = match (&svd.u, &svd.v_t) {
        (Some(u), Some(vt)) => (u, vt),
        _ => return Err(StageError::numeric("singular value decomposition failed")),
    };
    // c_t = V Σ⁻¹ Uᵀ b
    let utb = u.transpose() * &b;
    let mut ct = DVector::<f64>::zeros(p);
    let mut inv_ata = DMatrix::<f64>::zeros(p, p);
    for k in 0..p {
        let sk = svd.singular_values[k];
        for i in 0..p {
            ct[i] += vt[(k, i)] * utb[k] / sk;
            for j in 0..p {
                inv_ata[(i, j)] += vt[(k, i)] * vt[(k, j)] / (sk * sk);
            }
        }
    }
    let mut ssr = 0.0;
    let mut sst = 0.0;
    for i in 0..n {
        let t = (x[i] - xm) / xs;
        let f: f64 = (0..p).map(|k| ct[k] * t.powi(k as i32)).sum();
        ssr += weights[i] * (y[i] - f).powi(2);
        sst += weights[i] * (y[i] - ym).powi(2);
    }
    let dof = n - p;
    let s2 = ssr / dof as f64;
    // T maps t-coefficients to x-coefficients: t^k = Σ_j C(k,j) x^j (−x̄)^(k−j) / s^k.
    let mut t = DMatrix::<f64>::zeros(p, p);
    for k in 0..p {
        for j in 0..=k {
            t[(j, k)] = binomial(k, j) * (-xm).powi((k - j) as i32) / xs.powi(k as i32);
        }
    }
    let cx = &t * &ct;
    let covx = &t * (inv_ata * s2) * t.transpose();
    let coef: Vec<f64> = cx.iter().copied().collect();
    let cov: Vec<Vec<f64>> = (0..p)
        .map(|i| (0..p).map(|j| covx[(i, j)]).collect())
        .collect();
    if coef
        .iter()
        .chain(cov.iter().flatten())
        .any(|v| !v.is_finite())
    {
        return Err(StageError::numeric(
            "the least-squares solution is not finite",
        ));
    }
    Ok(PolyFit {
        coef,
        cov,
        residual_sd: s2.sqrt(),
        r_squared: if sst > 0.0 { 1.0 - ssr / sst } else { 1.0 },
        n,
        dof,
        x_mean: xm,
        y_mean: ym,
    })
}

fn binomial(n: usize, k: usize) -> f64 {
    (0..k).fold(1.0, |acc, i| acc * (n - i) as f64 / (i + 1) as f64)
}

/// Straight line y = a + b x (unweighted); the x-intercept −a/b and its first-order
/// standard uncertainty from the covariance of a and b.
pub fn x_intercept(fit: &PolyFit) -> Result<(f64, f64), StageError> {
    let (a, b) = (fit.coef[0], fit.coef[1]);
    if b == 0.0 {
        return Err(StageError::numeric(
            "the fitted line is horizontal: no intercept",
        ));
    }
    let x0 = -a / b;
    // ∂x0/∂a = −1/b, ∂x0/∂b = a/b² = −x0/b.
    let g = [-1.0 / b, -x0 / b];
    Ok((x0, quad_form(&fit.cov, &g).max(0.0).sqrt()))
}

/// Where the line y = a + b x crosses the level y = L (with standard uncertainty u_L,
/// uncorrelated with the line): x = (L − a)/b and its first-order uncertainty.
pub fn line_crossing(fit: &PolyFit, level: f64, u_level: f64) -> Result<(f64, f64), StageError> {
    let (a, b) = (fit.coef[0], fit.coef[1]);
    if b == 0.0 {
        return Err(StageError::numeric(
            "the fitted line is horizontal: it never crosses the level",
        ));
    }
    let x = (level - a) / b;
    // ∂x/∂a = −1/b, ∂x/∂b = −x/b, ∂x/∂L = 1/b.
    let var = quad_form(&fit.cov, &[-1.0 / b, -x / b]) + (u_level / b).powi(2);
    Ok((finite("crossing", x)?, var.max(0.0).sqrt()))
}

/// Mean of y over the given indices and its standard error (s/√n; 0 for one point).
pub fn mean_and_se(y: &[f64], idx: &[usize]) -> Option<(f64, f64)> {
    if idx.is_empty() {
        return None;
    }
    let n = idx.len() as f64;
    let m = idx.iter().map(|&i| y[i]).sum::<f64>() / n;
    if idx.len() < 2 {
        return Some((m, 0.0));
    }
    let v = idx.iter().map(|&i| (y[i] - m).powi(2)).sum::<f64>() / (n - 1.0);
    Some((m, (v / n).sqrt()))
}

/// First-order standard uncertainty of f at x for independent inputs with standard
/// uncertainties u, with sensitivity coefficients from central differences.
pub fn propagate(f: &dyn Fn(&[f64]) -> f64, x: &[f64], u: &[f64]) -> f64 {
    jacobian(&|v: &[f64]| vec![f(v)], x, u)
        .iter()
        .map(|row| {
            row.iter()
                .zip(u)
                .map(|(g, ui)| (g * ui).powi(2))
                .sum::<f64>()
        })
        .sum::<f64>()
        .sqrt()
}

/// Central-difference Jacobian of a vector function (rows: outputs, columns: inputs);
/// each step is a small fraction of the input's uncertainty (or of its size).
pub fn jacobian(f: &dyn Fn(&[f64]) -> Vec<f64>, x: &[f64], u: &[f64]) -> Vec<Vec<f64>> {
    let m = f(x).len();
    let mut jac = vec![vec![0.0; x.len()]; m];
    for j in 0..x.len() {
        let scale = if u[j] > 0.0 { u[j] } else { x[j].abs() };
        if scale == 0.0 || u[j] == 0.0 {
            continue;
        }
        let h = 1e-4 * scale;
        let mut xp = x.to_vec();
        let mut xm = x.to_vec();
        xp[j] += h;
        xm[j] -= h;
        let (fp, fm) = (f(&xp), f(&xm));
        for i in 0..m {
            jac[i][j] = (fp[i] - fm[i]) / (2.0 * h);
        }
    }
    jac
}

/// Standard uncertainties of every output of f for independent inputs.
pub fn propagate_vec(f: &dyn Fn(&[f64]) -> Vec<f64>, x: &[f64], u: &[f64]) -> Vec<f64> {
    jacobian(f, x, u)
        .iter()
        .map(|row| {
            row.iter()
                .zip(u)
                .map(|(g, ui)| (g * ui).powi(2))
                .sum::<f64>()
                .sqrt()
        })
        .collect()
}

/// Linear interpolation of (x, y) at xq; x ascending or descending. None outside.
pub fn interpolate(x: &[f64], y: &[f64], xq: f64) -> Option<f64> {
    let n = x.len();
    if n == 0 {
        return None;
    }
    for i in 0..n.saturating_sub(1) {
        let (a, b) = (x[i], x[i + 1]);
        if (a <= xq && xq <= b) || (b <= xq && xq <= a) {
            if a == b {
                return Some(y[i]);
            }
            return Some(y[i] + (y[i + 1] - y[i]) * (xq - a) / (b - a));
        }
    }
    (n == 1 && x[0] == xq).then(|| y[0])
}

/// Indices of points with x in [lo, hi] (either order of the pair).
pub fn indices_in(x: &[f64], range: [f64; 2]) -> Vec<usize> {
    let (lo, hi) = (range[0].min(range[1]), range[0].max(range[1]));
    (0..x.len()).filter(|&i| x[i] >= lo && x[i] <= hi).collect()
}

/// y minus the spectrum's Background curve where it has one (NaN treated as 0), and
/// whether a background was used.
pub fn background_subtracted(s: &Spectrum) -> (Vec<f64>, bool) {
    match s.curve(crate::value::CurveRole::Background) {
        Some(c) => (
            s.y.iter()
                .zip(&c.y)
                .map(|(y, b)| if b.is_finite() { y - b } else { *y })
                .collect(),
            true,
        ),
        None => (s.y.clone(), false),
    }
}

/// Option check: a [low, high] pair with finite low < high.
pub fn check_range(path: &str, r: Option<[f64; 2]>) -> Result<(), OptionError> {
    if let Some([a, b]) = r {
        if !(a.is_finite() && b.is_finite() && a < b) {
            return Err(OptionError::new(
                path,
                format!("{path} must be [low, high] with low < high (got [{a}, {b}])"),
            ));
        }
    }
    Ok(())
}

/// Option check: a finite, strictly positive number.
pub fn check_positive(path: &str, v: f64) -> Result<(), OptionError> {
    if !(v.is_finite() && v > 0.0) {
        return Err(OptionError::new(
            path,
            format!("{path} must be a positive number (got {v})"),
        ));
    }
    Ok(())
}

/// Option check: an uncertainty is finite and not negative.
pub fn check_uncertainty(path: &str, v: Option<f64>) -> Result<(), OptionError> {
    if let Some(u) = v {
        if !(u.is_finite() && u >= 0.0) {
            return Err(OptionError::new(
                path,
                format!("{path} must be a non-negative number (got {u})"),
            ));
        }
    }
    Ok(())
}

/// A numeric record of an upstream artifact: value, uncertainty, unit.
pub fn record_number(a: &Artifact, name: &str) -> Result<(f64, Option<f64>, String), StageError> {
    let r = a.result(name).ok_or_else(|| {
        let have: Vec<&str> = a.results.iter().map(|r| r.name.as_str()).collect();
        StageError::input(format!(
            "the input has no result named '{name}' (it has: {})",
            if have.is_empty() {
                "none".to_string()
            } else {
                have.join(", ")
            }
        ))
    })?;
    match r.value {
        Scalar::Number(v) if v.is_finite() => Ok((v, r.uncertainty, r.unit.clone())),
        _ => Err(StageError::input(format!(
            "result '{name}' is not a finite number"
        ))),
    }
}

/// A peak position with its name and standard uncertainty (when known).
#[derive(Clone, Debug, PartialEq)]
pub struct Located {
    pub name: String,
    pub position: f64,
    pub uncertainty: Option<f64>,
    /// Full width at half maximum when the source knows it, with its uncertainty.
    pub fwhm: Option<(f64, Option<f64>)>,
    pub height: Option<f64>,
}

/// Peak positions from a fit (centres with standard errors, named by peak), a peak
/// list (positions, numbered 1..), or nothing (an empty list).
pub fn located_peaks(a: Option<&Artifact>) -> Vec<Located> {
    match a.map(|a| &a.value) {
        Some(Value::Fit(f)) => f
            .peaks
            .iter()
            .map(|p| Located {
                name: p.name.clone(),
                position: p.center.value,
                uncertainty: p.center.uncertainty,
                fwhm: Some((p.fwhm.value, p.fwhm.uncertainty)),
                height: Some(p.height.value),
            })
            .collect(),
        Some(Value::Peaks(pl)) => pl
            .peaks
            .iter()
            .enumerate()
            .map(|(i, p)| Located {
                name: (i + 1).to_string(),
                position: p.position,
                uncertainty: None,
                fwhm: (p.fwhm > 0.0).then_some((p.fwhm, None)),
                height: Some(p.height),
            })
            .collect(),
        _ => Vec::new(),
    }
}

/// Reads an embedded CSV table (header row, `#` comments skipped) into string rows,
/// checking the header; the error names the table and 1-based line.
pub fn read_table(name: &str, text: &str, header: &[&str]) -> Result<Vec<Vec<String>>, StageError> {
    let mut rd = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .trim(csv::Trim::All)
        .from_reader(text.as_bytes());
    let h = rd
        .headers()
        .map_err(|e| StageError::data(name, Some(1), e.to_string()))?
        .clone();
    let got: Vec<&str> = h.iter().collect();
    if got != header {
        return Err(StageError::data(
            name,
            Some(1),
            format!("header is {got:?}, expected {header:?}"),
        ));
    }
    let mut rows = Vec::new();
    for rec in rd.records() {
        let rec = rec.map_err(|e| {
            StageError::data(name, e.position().map(|p| p.line() as usize), e.to_string())
        })?;
        rows.push(rec.iter().map(str::to_string).collect());
    }
    Ok(rows)
}

/// Parses a number cell of a built-in table.
pub fn cell_number(table: &str, row: usize, text: &str) -> Result<f64, StageError> {
    text.parse::<f64>()
        .ok()
        .filter(|v| v.is_finite())
        .ok_or_else(|| StageError::data(table, Some(row + 2), format!("'{text}' is not a number")))
}

/// Unit of a product of two units ("counts·eV"), leaving out empty ones.
pub fn unit_product(a: &str, b: &str) -> String {
    match (a.is_empty(), b.is_empty()) {
        (false, false) => format!("{a}·{b}"),
        (false, true) => a.to_string(),
        (true, false) => b.to_string(),
        (true, true) => String::new(),
    }
}

/// Unit of a ratio ("counts/ppm").
pub fn unit_ratio(a: &str, b: &str) -> String {
    match (a.is_empty(), b.is_empty()) {
        (_, true) => a.to_string(),
        (true, false) => format!("1/{b}"),
        (false, false) => format!("{a}/{b}"),
    }
}

/// Refuses a non-finite number before it reaches a record.
pub fn finite(name: &str, v: f64) -> Result<f64, StageError> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err(StageError::numeric(format!(
            "{name} is not a finite number"
        )))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn polyfit_recovers_an_exact_quadratic() {
        // Analytic: y = 2 − 3x + 0.5x² is reproduced exactly.
        let x: Vec<f64> = (0..10).map(|i| i as f64 * 1.5 + 1000.0).collect();
        let y: Vec<f64> = x.iter().map(|v| 2.0 - 3.0 * v + 0.5 * v * v).collect();
        let f = polyfit(&x, &y, None, 2).unwrap();
        assert!((f.coef[2] - 0.5).abs() < 1e-9);
        assert!((f.coef[1] + 3.0).abs() < 1e-5);
        assert!((f.r_squared - 1.0).abs() < 1e-12);
    }

    #[test]
    fn straight_line_standard_errors_match_the_textbook_formulas() {
        // Closed forms for y = a + b x: s_b = s/√Sxx, s_a = s √(Σx²/(n Sxx)).
        let x = [1.0, 2.0, 3.0, 4.0, 5.0];
        let y = [1.1, 1.9, 3.2, 3.9, 5.1];
        let f = polyfit(&x, &y, None, 1).unwrap();
        let sxx: f64 = 10.0;
        let sx2: f64 = 55.0;
        assert!((f.stderr(1) - f.residual_sd / sxx.sqrt()).abs() < 1e-12);
        assert!((f.stderr(0) - f.residual_sd * (sx2 / (5.0 * sxx)).sqrt()).abs() < 1e-12);
    }

    #[test]
    fn numeric_propagation_matches_analytic_for_a_product() {
        // u(xy)² = y² u_x² + x² u_y².
        let u = propagate(&|v| v[0] * v[1], &[3.0, 4.0], &[0.1, 0.2]);
        assert!((u - (16.0f64 * 0.01 + 9.0 * 0.04).sqrt()).abs() < 1e-9);
    }

    #[test]
    fn rank_deficient_fit_is_refused() {
        assert!(polyfit(&[1.0, 1.0, 1.0], &[1.0, 2.0, 3.0], None, 1).is_err());
        assert!(polyfit(&[1.0, 2.0, 1.0, 2.0], &[1.0, 2.0, 3.0, 4.0], None, 2).is_err());
    }

    #[test]
    fn interpolation_works_on_descending_axes() {
        assert_eq!(
            interpolate(&[3.0, 2.0, 1.0], &[30.0, 20.0, 10.0], 1.5),
            Some(15.0)
        );
        assert_eq!(interpolate(&[3.0, 2.0], &[30.0, 20.0], 5.0), None);
    }
}
