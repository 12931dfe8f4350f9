//! Peak profiles, each normalised to unit area and scaled by an `area` parameter, with
//! analytic partial derivatives for the Jacobian and for propagating uncertainty into
//! derived heights and widths.
//!
//! Parameter order of every shape: `center`, `area`, then its width parameters.
//! - Gaussian, FWHM `w`: σ = w / (2√(2 ln 2)); f = A exp(−(x−c)²/2σ²) / (σ√(2π)).
//! - Lorentzian, FWHM `w`: γ = w/2; f = (A/π) γ / ((x−c)² + γ²).
//! - pseudo-Voigt, FWHM `w` and Lorentzian fraction `η`: f = A [η L(w) + (1−η) G(w)], both
//!   parts with the same FWHM (the linear-combination form; common practice).
//! - Voigt, Gaussian σ and Lorentzian half width γ: f = A Re w(z) / (σ√(2π)),
//!   z = (x − c + iγ)/(σ√2), w the Faddeeva function (see `faddeeva.rs`: the
//!   `errorfunctions` crate, with Weideman's rational expansion where it is as good); w′(z) = −2 z w(z) + 2i/√π gives every
//!   derivative from the one evaluation of w per point. Its FWHM is the approximation of
//!   Olivero and Longbothum (1977), f_V ≈ 0.5346 f_L + √(0.2166 f_L² + f_G²), stated
//!   accurate to about 0.02 %.

use super::faddeeva;
use errorfunctions::RealErrorFunctions;
use nalgebra::Complex;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::f64::consts::{LN_2, PI};

const SQRT_2: f64 = std::f64::consts::SQRT_2;
/// √(2π)
const SQRT_2PI: f64 = 2.506_628_274_631_000_7;
/// 1/√π
const FRAC_1_SQRT_PI: f64 = 0.5 * std::f64::consts::FRAC_2_SQRT_PI;
/// 2/√π
const TWO_OVER_SQRT_PI: f64 = std::f64::consts::FRAC_2_SQRT_PI;

/// Olivero & Longbothum (1977) coefficients of the Voigt FWHM approximation.
const OL_A: f64 = 0.5346;
const OL_B: f64 = 0.2166;

/// FWHM of a Gaussian in units of its σ: 2√(2 ln 2).
pub fn gauss_fwhm_per_sigma() -> f64 {
    2.0 * (2.0 * LN_2).sqrt()
}

/// A peak shape.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Shape {
    /// Gaussian, parametrised by centre, area and FWHM.
    Gaussian,
    /// Lorentzian (Cauchy), parametrised by centre, area and FWHM.
    Lorentzian,
    /// Linear combination η·Lorentzian + (1 − η)·Gaussian of equal FWHM.
    PseudoVoigt,
    /// Convolution of a Gaussian (σ) and a Lorentzian (half width γ), via the Faddeeva function.
    Voigt,
}

impl Shape {
    pub fn key(self) -> &'static str {
        match self {
            Shape::Gaussian => "gaussian",
            Shape::Lorentzian => "lorentzian",
            Shape::PseudoVoigt => "pseudo_voigt",
            Shape::Voigt => "voigt",
        }
    }
    pub fn words(self) -> &'static str {
        match self {
            Shape::Gaussian => "Gaussian",
            Shape::Lorentzian => "Lorentzian",
            Shape::PseudoVoigt => "pseudo-Voigt",
            Shape::Voigt => "Voigt",
        }
    }
    /// Parameter names in order.
    pub fn params(self) -> &'static [&'static str] {
        match self {
            Shape::Gaussian | Shape::Lorentzian => &["center", "area", "fwhm"],
            Shape::PseudoVoigt => &["center", "area", "fwhm", "eta"],
            Shape::Voigt => &["center", "area", "sigma", "gamma"],
        }
    }
    pub fn n_params(self) -> usize {
        self.params().len()
    }

    /// Profile value at `x` for parameters `p`; `d` (length `n_params`) receives ∂f/∂p.
    #[inline]
    pub fn eval(self, p: &[f64], x: f64, d: &mut [f64]) -> f64 {
        self.eval_with(p, x, None, d)
    }

    /// As [`Shape::eval`]; for a Voigt, `w` may carry w(z) already evaluated at
    /// z = ((x − c) + iγ)/(σ√2) (see [`voigt_arguments`]), so the fit evaluates it
    /// for all points at once.
    #[inline]
    pub fn eval_with(self, p: &[f64], x: f64, w: Option<(f64, f64)>, d: &mut [f64]) -> f64 {
        let (c, a) = (p[0], p[1]);
        let t = x - c;
        match self {
            Shape::Gaussian => {
                let (g, dgc, dgw) = gauss_unit(t, p[2]);
                d[0] = a * dgc;
                d[1] = g;
                d[2] = a * dgw;
                a * g
            }
            Shape::Lorentzian => {
                let (l, dlc, dlw) = lorentz_unit(t, p[2]);
                d[0] = a * dlc;
                d[1] = l;
                d[2] = a * dlw;
                a * l
            }
            Shape::PseudoVoigt => {
                let eta = p[3];
                let (g, dgc, dgw) = gauss_unit(t, p[2]);
                let (l, dlc, dlw) = lorentz_unit(t, p[2]);
                let u = eta * l + (1.0 - eta) * g;
                d[0] = a * (eta * dlc + (1.0 - eta) * dgc);
                d[1] = u;
                d[2] = a * (eta * dlw + (1.0 - eta) * dgw);
                d[3] = a * (l - g);
                a * u
            }
            Shape::Voigt => {
                let (zr, zi) = voigt_arguments(p, x);
                let z = Complex::new(zr, zi);
                let (wr, wi) = w.unwrap_or_else(|| faddeeva::w(zr, zi));
                let w = Complex::new(wr, wi);
                // w'(z) = -2 z w(z) + 2i/sqrt(pi)
                let dw = Complex::new(0.0, TWO_OVER_SQRT_PI) - 2.0 * z * w;
                let inv_s2 = 1.0 / (p[2] * SQRT_2);
                let inv_sigma = inv_s2 * SQRT_2;
                let norm = inv_s2 * FRAC_1_SQRT_PI; // 1/(σ√(2π))
                let v = w.re * norm;
                // dz/dc = -1/s2, dz/dgamma = i/s2, dz/dsigma = -z/sigma.
                let an = a * norm;
                d[0] = -an * dw.re * inv_s2;
                d[1] = v;
                d[2] = -(a * v + an * (dw * z).re) * inv_sigma;
                d[3] = -an * dw.im * inv_s2;
                a * v
            }
        }
    }

    /// Height (maximum, at the centre) and its gradient with respect to the parameters.
    pub fn height(self, p: &[f64], grad: &mut [f64]) -> f64 {
        grad.iter_mut().for_each(|g| *g = 0.0);
        let a = p[1];
        match self {
            Shape::Gaussian | Shape::Lorentzian | Shape::PseudoVoigt => {
                let w = p[2];
                let kg = 2.0 * (LN_2 / PI).sqrt(); // Gaussian height × FWHM / area
                let kl = 2.0 / PI; // Lorentzian height × FWHM / area
                let (k, dk_deta) = match self {
                    Shape::Gaussian => (kg, 0.0),
                    Shape::Lorentzian => (kl, 0.0),
                    _ => (p[3] * kl + (1.0 - p[3]) * kg, kl - kg),
                };
                let h = a * k / w;
                grad[1] = k / w;
                grad[2] = -h / w;
                if self == Shape::PseudoVoigt {
                    grad[3] = a * dk_deta / w;
                }
                h
            }
            Shape::Voigt => {
                let (sigma, gamma) = (p[2], p[3]);
                let y = gamma / (sigma * SQRT_2);
                let e = y.erfcx();
                let de = 2.0 * y * e - TWO_OVER_SQRT_PI; // d erfcx / dy
                let norm = 1.0 / (sigma * SQRT_2PI);
                let h = a * e * norm;
                grad[1] = e * norm;
                grad[2] = -h / sigma + a * norm * de * (-y / sigma);
                grad[3] = a * norm * de / (sigma * SQRT_2);
                h
            }
        }
    }

    /// FWHM and its gradient with respect to the parameters.
    pub fn fwhm(self, p: &[f64], grad: &mut [f64]) -> f64 {
        grad.iter_mut().for_each(|g| *g = 0.0);
        match self {
            Shape::Voigt => {
                let (fv, dfs, dfg) = voigt_fwhm(p[2], p[3]);
                grad[2] = dfs;
                grad[3] = dfg;
                fv
            }
            _ => {
                grad[2] = 1.0;
                p[2]
            }
        }
    }
}

/// The scaled offset (x − c)/(σ√2) and the common imaginary part γ/(σ√2) of the
/// Faddeeva argument of a Voigt with parameters `p` at `x` (the same arithmetic as
/// [`Shape::eval_with`], so precomputed values match bit for bit).
#[inline]
pub fn voigt_arguments(p: &[f64], x: f64) -> (f64, f64) {
    let inv_s2 = 1.0 / (p[2] * SQRT_2);
    ((x - p[0]) * inv_s2, p[3] * inv_s2)
}

/// Olivero & Longbothum (1977) Voigt FWHM from σ and γ, with ∂/∂σ and ∂/∂γ.
pub fn voigt_fwhm(sigma: f64, gamma: f64) -> (f64, f64, f64) {
    let k = gauss_fwhm_per_sigma();
    let fg = k * sigma;
    let fl = 2.0 * gamma;
    let root = (OL_B * fl * fl + fg * fg).sqrt();
    let fv = OL_A * fl + root;
    let (dfs, dfg) = if root > 0.0 {
        (k * fg / root, 2.0 * (OL_A + OL_B * fl / root))
    } else {
        (k, 2.0 * OL_A)
    };
    (fv, dfs, dfg)
}

/// Unit-area Gaussian of FWHM `w` at offset `t = x − c`, with ∂/∂c and ∂/∂w.
#[inline]
fn gauss_unit(t: f64, w: f64) -> (f64, f64, f64) {
    let inv_w = 1.0 / w;
    let inv_sigma = gauss_fwhm_per_sigma() * inv_w;
    let q = t * inv_sigma;
    let g = (-0.5 * q * q).exp() * inv_sigma * (1.0 / SQRT_2PI);
    (g, g * q * inv_sigma, g * (q * q - 1.0) * inv_w)
}

/// Unit-area Lorentzian of FWHM `w` at offset `t`, with ∂/∂c and ∂/∂w.
#[inline]
fn lorentz_unit(t: f64, w: f64) -> (f64, f64, f64) {
    let h = 0.5 * w;
    let den = t * t + h * h;
    let l = h / (PI * den);
    (
        l,
        l * 2.0 * t / den,
        0.5 * (t * t - h * h) / (PI * den * den),
    )
}

/// The Faddeeva function w(z) = exp(−z²) erfc(−iz) as the fit evaluates it.
pub fn faddeeva(re: f64, im: f64) -> (f64, f64) {
    faddeeva::w(re, im)
}

#[cfg(test)]
#[allow(clippy::needless_range_loop)] // index loops read clearer in these checks
mod tests {
    use super::*;

    fn all_shapes() -> Vec<(Shape, Vec<f64>)> {
        vec![
            (Shape::Gaussian, vec![1.3, 2.5, 0.8]),
            (Shape::Lorentzian, vec![1.3, 2.5, 0.8]),
            (Shape::PseudoVoigt, vec![1.3, 2.5, 0.8, 0.3]),
            (Shape::Voigt, vec![1.3, 2.5, 0.4, 0.25]),
        ]
    }

    /// Central differences of `f` with respect to p[k].
    fn numeric(f: &dyn Fn(&[f64]) -> f64, p: &[f64], k: usize) -> f64 {
        let h = 1e-6 * p[k].abs().max(1e-3);
        let mut a = p.to_vec();
        let mut b = p.to_vec();
        a[k] += h;
        b[k] -= h;
        (f(&a) - f(&b)) / (2.0 * h)
    }

    #[test]
    fn analytic_derivatives_match_central_differences() {
        for (shape, p) in all_shapes() {
            let mut d = vec![0.0; shape.n_params()];
            let scratch = d.clone();
            for &x in &[-1.0, 0.2, 1.25, 1.3, 1.9, 4.0] {
                shape.eval(&p, x, &mut d);
                for k in 0..p.len() {
                    let f = |q: &[f64]| shape.eval(q, x, &mut scratch.clone());
                    let n = numeric(&f, &p, k);
                    let tol = 1e-7 * (n.abs() + 1e-3);
                    assert!(
                        (d[k] - n).abs() < tol,
                        "{shape:?} x={x} d/d{}: analytic {} numeric {n}",
                        shape.params()[k],
                        d[k]
                    );
                }
            }
            // Height and FWHM gradients too.
            let mut g = vec![0.0; p.len()];
            shape.height(&p, &mut g);
            for k in 0..p.len() {
                let n = numeric(&|q: &[f64]| shape.height(q, &mut scratch.clone()), &p, k);
                assert!(
                    (g[k] - n).abs() < 1e-7 * (n.abs() + 1e-3),
                    "{shape:?} height"
                );
            }
            shape.fwhm(&p, &mut g);
            for k in 0..p.len() {
                let n = numeric(&|q: &[f64]| shape.fwhm(q, &mut scratch.clone()), &p, k);
                assert!((g[k] - n).abs() < 1e-7 * (n.abs() + 1e-3), "{shape:?} fwhm");
            }
        }
    }

    #[test]
    fn unit_area_height_and_half_maximum() {
        // Analytic: each profile integrates to its area, peaks at its height, and for
        // the three FWHM-parametrised shapes falls to half height at c ± w/2.
        for (shape, p) in all_shapes() {
            let mut d = vec![0.0; p.len()];
            let (lo, hi, n) = (-400.0, 400.0, 800_001);
            let step = (hi - lo) / (n - 1) as f64;
            let mut s = 0.0;
            for i in 0..n {
                let x = lo + step * i as f64;
                let w = if i == 0 || i == n - 1 { 0.5 } else { 1.0 };
                s += w * shape.eval(&p, x, &mut d);
            }
            // Lorentzian tails beyond ±400 hold about w/(π·400) of the area.
            let tail = if shape == Shape::Gaussian { 0.0 } else { 2e-3 };
            assert!(
                (s * step / p[1] - 1.0).abs() < tail + 1e-6,
                "{shape:?} area {}",
                s * step
            );
            let mut g = vec![0.0; p.len()];
            let h = shape.height(&p, &mut g);
            assert!((shape.eval(&p, p[0], &mut d) - h).abs() < 1e-12 * h);
            let fw = shape.fwhm(&p, &mut g);
            let half = shape.eval(&p, p[0] + fw / 2.0, &mut d) / h;
            // Olivero–Longbothum is stated accurate to 0.02 %; the others are exact.
            let tol = if shape == Shape::Voigt { 1e-3 } else { 1e-12 };
            assert!(
                (half - 0.5).abs() < tol,
                "{shape:?} half height ratio {half}"
            );
        }
    }
}
