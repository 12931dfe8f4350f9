//! Weighting of counting data (common practice: σ = √counts, floor 1): a synthetic
//! counts spectrum with noise of exactly that size must give a reduced χ² near 1
//! (its expectation is 1 for a correct model and correct σ; for 800 − 5 degrees of
//! freedom its standard deviation is √(2/795) ≈ 0.05), and unweighted fitting of the
//! same data must be reported as unweighted.

#[path = "fit_support.rs"]
mod support;

use stages::fit::shapes::Shape;
use stages::{Axis, Spectrum};
use support::{fit, Normal};

fn counts(seed: u64) -> Spectrum {
    let mut g = Normal::new(seed);
    let mut d = [0.0; 3];
    let x: Vec<f64> = (0..800).map(|i| 100.0 + 0.025 * i as f64).collect();
    let y = x
        .iter()
        .map(|&v| {
            let mean =
                Shape::Gaussian.eval(&[110.0, 4000.0, 1.4], v, &mut d) + 200.0 - 3.0 * (v - 110.0);
            // Gaussian approximation of Poisson noise, good at these counts (≥ 170).
            (mean + mean.sqrt() * g.sample()).round()
        })
        .collect();
    Spectrum::new(
        x,
        y,
        Axis::new("binding energy", "eV"),
        Axis::new("intensity", "counts"),
    )
}

#[test]
fn poisson_weights_are_the_default_for_counts_and_give_reduced_chi_square_near_one() {
    for seed in [3u64, 11] {
        let (a, f) = fit(
            &counts(seed),
            serde_json::json!({ "shape": "gaussian", "peaks": { "main": {} } }),
        )
        .unwrap();
        assert!(f.statistics.weighted && f.statistics.converged);
        let red = f.statistics.reduced_chi_square;
        assert!((red - 1.0).abs() < 0.2, "seed {seed}: reduced χ² {red}");
        assert!(
            a.result("fit_weighting").unwrap().value
                == stages::Scalar::Text("weighted by Poisson σ = √counts (floor 1)".into())
        );
        assert!(!a.notes.iter().any(|n| n.text.contains("reduced χ²")));
        let main = f.peak("main").unwrap();
        let se = main.area.uncertainty.unwrap();
        assert!(
            (main.area.value - 4000.0).abs() < 3.0 * se,
            "area {} ± {se}",
            main.area.value
        );
    }
    let (_, f) = fit(
        &counts(3),
        serde_json::json!({ "shape": "gaussian", "weights": "none", "peaks": { "main": {} } }),
    )
    .unwrap();
    assert!(!f.statistics.weighted);
}
