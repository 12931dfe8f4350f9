//! A quick throughput measurement of `fit::fit_spectrum` (not a test; nothing asserts
//! on time): 2,000-point synthetic spectra, three Voigt peaks on a linear background
//! with seeded Gaussian noise, fitted from start values offset from the truth.
//!
//! Run: `cargo run --release -p stages --example fit_voigt_speed [count] [tolerance]`

use stages::fit::shapes::Shape;
use stages::fit::{fit_spectrum, FitSpec};
use stages::{Axis, Spectrum};
use std::time::Instant;

/// (centre, area, sigma, gamma) of the three invented peaks.
const PEAKS: [(f64, f64, f64, f64); 3] = [
    (30.0, 400.0, 1.2, 0.8),
    (45.0, 250.0, 1.0, 1.5),
    (62.0, 600.0, 1.6, 0.6),
];

struct Lcg(u64);
impl Lcg {
    fn normal(&mut self) -> f64 {
        let mut u = || {
            self.0 = self
                .0
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        };
        let (a, b) = (u(), u());
        (-2.0 * a.ln()).sqrt() * (2.0 * std::f64::consts::PI * b).cos()
    }
}

fn spectrum(seed: u64) -> Spectrum {
    let mut g = Lcg(seed);
    let mut d = [0.0; 4];
    let x: Vec<f64> = (0..2000).map(|i| i as f64 * 0.05).collect();
    let y = x
        .iter()
        .map(|&v| {
            let peaks: f64 = PEAKS
                .iter()
                .map(|&(c, a, s, gm)| Shape::Voigt.eval(&[c, a, s, gm], v, &mut d))
                .sum();
            peaks + 20.0 + 0.1 * v + 1.0 * g.normal()
        })
        .collect();
    Spectrum::new(x, y, Axis::new("x", "arb"), Axis::new("intensity", "arb"))
}

fn main() {
    let count: usize = std::env::args()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .unwrap_or(200);
    let tolerance: f64 = std::env::args()
        .nth(2)
        .and_then(|s| s.parse().ok())
        .unwrap_or(1e-10);
    let spec: FitSpec = serde_json::from_value(serde_json::json!({
        "tolerance": tolerance,
        "shape": "voigt",
        "background": "linear",
        "weights": "none",
        "peaks": {
            "a": { "center": 30.5, "area": 300.0, "sigma": 1.0, "gamma": 1.0 },
            "b": { "center": 44.5, "area": 300.0, "sigma": 1.0, "gamma": 1.0 },
            "c": { "center": 61.5, "area": 500.0, "sigma": 1.0, "gamma": 1.0 }
        }
    }))
    .expect("valid options");
    let data: Vec<Spectrum> = (0..count as u64).map(|k| spectrum(k + 1)).collect();
    let t0 = Instant::now();
    let mut iterations = 0;
    let mut worst_center = 0.0f64;
    let mut failures = 0;
    for s in &data {
        match fit_spectrum(s, &spec) {
            Ok(f) if f.statistics.converged => {
                iterations += f.statistics.iterations;
                for (p, t) in f.peaks.iter().zip(PEAKS) {
                    worst_center = worst_center.max((p.center.value - t.0).abs());
                }
            }
            _ => failures += 1,
        }
    }
    let dt = t0.elapsed().as_secs_f64();
    println!(
        "{count} fits of 2000 points (3 Voigt + linear), tolerance {tolerance:e}: {:.3} s, {:.1} spectra/s on one core, {:.2} ms per fit, mean {:.1} iterations, {failures} not converged, worst centre error {:.4}",
        dt,
        count as f64 / dt,
        1e3 * dt / count as f64,
        iterations as f64 / (count - failures).max(1) as f64,
        worst_center
    );
}
