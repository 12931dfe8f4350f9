//! The Faddeeva function w(z) = exp(−z²) erfc(−iz) for the Voigt profile, fast where
//! it can be and exact to double precision everywhere.
//!
//! Two evaluations:
//! - the `errorfunctions` crate (a port of S. G. Johnson's Faddeeva package, built on
//!   Zaghloul and Ali 2011 and continued fractions), used everywhere it must be;
//! - Weideman's rational expansion (Weideman 1994, SIAM J. Numer. Anal. 31, 1497–1518):
//!   w(z) ≈ π^(−1/2)/(L − iz) + 2/(L − iz)² Σₙ aₙ Zⁿ, Z = (L + iz)/(L − iz), with
//!   N = 40 terms, L = (N/√2)^(1/2) and the coefficients aₙ from a discrete Fourier
//!   transform of (L² + t²)exp(−t²) at t = L tan(θ/2), as in the paper. Its error is
//!   relative to |w| (measured against the crate: below 3e-14 here), so it is used only
//!   where Re w is not much smaller than |w|: Im z ≥ 0.05, Im z ≥ 0.003·|Re z| and
//!   |Re z| + Im z < 1e4 (there Re w agrees with the crate to about 2e-12 relative,
//!   checked by the tests below). It is a Horner polynomial, so evaluating several
//!   points side by side ([`w_many`]) keeps the processor busy: this is the fit's hot loop.
//!
//! Both are deterministic; each point always takes the same path for the same input.

use errorfunctions::ComplexErrorFunctions;
use nalgebra::Complex;
use std::f64::consts::PI;
use std::sync::OnceLock;

const TERMS: usize = 40;
/// Smallest Im z for the rational expansion.
const Y_MIN: f64 = 0.05;
/// Smallest Im z / |Re z| for the rational expansion.
const RATIO: f64 = 0.003;
/// Largest |Re z| + Im z for the rational expansion (tested range).
const BIG: f64 = 1e4;
/// Points evaluated side by side.
const LANES: usize = 8;

struct Rational {
    /// Polynomial coefficients, highest power first.
    coef: [f64; TERMS],
    l: f64,
}

fn rational() -> &'static Rational {
    static R: OnceLock<Rational> = OnceLock::new();
    R.get_or_init(|| {
        let n = TERMS;
        let m = 2 * n;
        let m2 = 2 * m;
        let l = (n as f64 / std::f64::consts::SQRT_2).sqrt();
        // f at θ_k = kπ/M, k = −M+1..M−1, preceded by a zero; then shifted by half.
        let mut f = vec![0.0; m2];
        for (idx, k) in (-(m as i64) + 1..m as i64).enumerate() {
            let t = l * (k as f64 * PI / m as f64 / 2.0).tan();
            f[idx + 1] = (-t * t).exp() * (l * l + t * t);
        }
        let g: Vec<f64> = (0..m2).map(|i| f[(i + m2 / 2) % m2]).collect();
        // Real part of the DFT, divided by 2M; coefficients 1..=N, highest first.
        let mut coef = [0.0; TERMS];
        for (j, c) in coef.iter_mut().enumerate() {
            let k = n - j;
            let s: f64 = g
                .iter()
                .enumerate()
                .map(|(i, v)| v * (2.0 * PI * ((i * k) % m2) as f64 / m2 as f64).cos())
                .sum();
            *c = s / m2 as f64;
        }
        Rational { coef, l }
    })
}

/// Whether the rational expansion serves z = x + iy.
#[inline]
fn fast(x: f64, y: f64) -> bool {
    y >= Y_MIN && y >= RATIO * x.abs() && x.abs() + y < BIG
}

/// The rational expansion at K points with a common imaginary part.
#[inline(always)]
fn rational_lanes<const K: usize>(x: &[f64; K], y: f64, re: &mut [f64; K], im: &mut [f64; K]) {
    let r = rational();
    let l = r.l;
    let mut zr = [0.0; K];
    let mut zi = [0.0; K];
    let mut ir = [0.0; K];
    let mut ii = [0.0; K];
    for k in 0..K {
        // L − iz = (L + y) − i x;  L + iz = (L − y) + i x.
        let (dr, di) = (l + y, -x[k]);
        let (nr, ni) = (l - y, x[k]);
        let d = dr * dr + di * di;
        zr[k] = (nr * dr + ni * di) / d;
        zi[k] = (ni * dr - nr * di) / d;
        ir[k] = dr / d;
        ii[k] = -di / d;
    }
    let mut pr = [0.0; K];
    let mut pi = [0.0; K];
    for &a in &r.coef {
        for k in 0..K {
            let t = pr[k] * zr[k] - pi[k] * zi[k] + a;
            pi[k] = pr[k] * zi[k] + pi[k] * zr[k];
            pr[k] = t;
        }
    }
    let isp = 1.0 / PI.sqrt();
    for k in 0..K {
        let (sr, si) = (ir[k] * ir[k] - ii[k] * ii[k], 2.0 * ir[k] * ii[k]);
        re[k] = 2.0 * (pr[k] * sr - pi[k] * si) + isp * ir[k];
        im[k] = 2.0 * (pr[k] * si + pi[k] * sr) + isp * ii[k];
    }
}

/// w(x + iy).
pub fn w(x: f64, y: f64) -> (f64, f64) {
    if fast(x, y) {
        let (mut re, mut im) = ([0.0], [0.0]);
        rational_lanes(&[x], y, &mut re, &mut im);
        (re[0], im[0])
    } else {
        let v = Complex::new(x, y).w();
        (v.re, v.im)
    }
}

/// w(xᵢ + iy) for every xᵢ, into `re` and `im` (same lengths as `x`); the same numbers
/// as [`w`] point by point.
pub fn w_many(x: &[f64], y: f64, re: &mut [f64], im: &mut [f64]) {
    let n = x.len().min(re.len()).min(im.len());
    let mut i = 0;
    while i + LANES <= n {
        let chunk: &[f64; LANES] = match x[i..i + LANES].try_into() {
            Ok(c) => c,
            Err(_) => break, // cannot happen: the slice has LANES elements
        };
        if chunk.iter().all(|&v| fast(v, y)) {
            let (mut r, mut m) = ([0.0; LANES], [0.0; LANES]);
            rational_lanes(chunk, y, &mut r, &mut m);
            re[i..i + LANES].copy_from_slice(&r);
            im[i..i + LANES].copy_from_slice(&m);
        } else {
            for k in i..i + LANES {
                (re[k], im[k]) = w(x[k], y);
            }
        }
        i += LANES;
    }
    for k in i..n {
        (re[k], im[k]) = w(x[k], y);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference: the errorfunctions crate (machine-precision port of the Faddeeva package).
    #[test]
    fn rational_region_agrees_with_the_crate() {
        let mut worst_w = 0.0f64;
        let mut worst_re = 0.0f64;
        let mut used = 0;
        for xi in 0..3000 {
            let x = if xi < 1500 {
                xi as f64 * 0.007
            } else {
                10f64.powf(1.0 + 3.0 * (xi - 1500) as f64 / 1500.0)
            };
            for yi in 0..60 {
                let y = 10f64.powf(-3.0 + 7.0 * yi as f64 / 59.0);
                for x in [x, -x] {
                    if !fast(x, y) {
                        continue;
                    }
                    used += 1;
                    let a = Complex::new(x, y).w();
                    let (br, bi) = w(x, y);
                    worst_w = worst_w.max((a.re - br).hypot(a.im - bi) / a.norm());
                    worst_re = worst_re.max((a.re - br).abs() / a.re.abs());
                }
            }
        }
        assert!(used > 50_000);
        assert!(worst_w < 1e-13, "worst relative error of w {worst_w:e}");
        assert!(
            worst_re < 5e-12,
            "worst relative error of Re w {worst_re:e}"
        );
    }

    #[test]
    fn batched_and_single_evaluations_are_identical() {
        let x: Vec<f64> = (0..103).map(|i| -40.0 + 0.8 * i as f64).collect();
        for y in [0.01, 0.3, 2.0] {
            let mut re = vec![0.0; x.len()];
            let mut im = vec![0.0; x.len()];
            w_many(&x, y, &mut re, &mut im);
            for i in 0..x.len() {
                assert_eq!((re[i], im[i]), w(x[i], y));
            }
        }
        // Outside the rational region the crate answers.
        let v = Complex::new(3.0, 0.001).w();
        assert_eq!(w(3.0, 0.001), (v.re, v.im));
    }
}
