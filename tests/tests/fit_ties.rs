//! Linked parameters: a spin–orbit doublet (areas 1:2 by the p-shell degeneracy, fixed
//! splitting, shared width) on synthetic data built from the model itself. Noise-free
//! data must be recovered to 1e-8 (analytic construction); with seeded Gaussian noise
//! of known σ the free parameters must lie within three standard errors of the truth
//! and the links must hold exactly.

#[path = "fit_support.rs"]
mod support;

use stages::fit::shapes::Shape;
use stages::{Axis, ParameterStatus, Spectrum};
use support::{fit, Normal};

const TRUTH: [(&str, f64); 6] = [
    ("p32.center", 458.6),
    ("p32.area", 1200.0),
    ("p32.fwhm", 1.3),
    ("p32.eta", 0.3),
    ("background.c0", 80.0),
    ("background.c1", -1.5),
];
const SPLIT: f64 = 5.7;

fn truth(name: &str) -> f64 {
    TRUTH.iter().find(|(n, _)| *n == name).unwrap().1
}

/// The doublet model at x: p32 plus p12 (centre + split, half the area, same width
/// and η) plus the line c0 + c1·(x − 461), 461 being the middle of [452, 470].
fn model(x: f64) -> f64 {
    let mut d = [0.0; 4];
    let p = [
        truth("p32.center"),
        truth("p32.area"),
        truth("p32.fwhm"),
        truth("p32.eta"),
    ];
    let q = [p[0] + SPLIT, 0.5 * p[1], p[2], p[3]];
    Shape::PseudoVoigt.eval(&p, x, &mut d)
        + Shape::PseudoVoigt.eval(&q, x, &mut d)
        + truth("background.c0")
        + truth("background.c1") * (x - 461.0)
}

fn spectrum(noise: Option<u64>) -> Spectrum {
    let x: Vec<f64> = (0..=360).map(|i| 452.0 + 0.05 * i as f64).collect();
    let mut y: Vec<f64> = x.iter().map(|&v| model(v)).collect();
    let mut s = Spectrum::new(
        x,
        vec![],
        Axis::new("binding energy", "eV"),
        Axis::new("intensity", "arb. units"),
    );
    if let Some(seed) = noise {
        let mut g = Normal::new(seed);
        let sigma: Vec<f64> = y.iter().map(|v| 0.02 * v + 1.0).collect();
        for (v, s) in y.iter_mut().zip(&sigma) {
            *v += s * g.sample();
        }
        s.sigma = Some(sigma);
    }
    s.y = y;
    s
}

fn options() -> serde_json::Value {
    serde_json::json!({
        "shape": "pseudo_voigt",
        "background": "linear",
        "peaks": {
            "p32": { "center": 458.0, "fwhm": { "value": 1.0, "max": 3.0 } },
            "p12": { "doublet": { "of": "p32", "split": SPLIT, "ratio": "p" } }
        },
        "tolerance": 1e-14,
    })
}

#[test]
fn noise_free_doublet_is_recovered_exactly() {
    let (art, f) = fit(&spectrum(None), options()).unwrap();
    assert!(f.statistics.converged, "{}", f.statistics.reason);
    assert_eq!(f.statistics.free_parameters, 6);
    for (name, v) in TRUTH {
        let got = f.parameter(name).unwrap().value;
        assert!((got - v).abs() <= 1e-8 * v.abs(), "{name}: {got} vs {v}");
    }
    let a32 = f.peak("p32").unwrap();
    let a12 = f.peak("p12").unwrap();
    // The links hold to rounding: area ratio 1/2 and the splitting.
    assert!((a12.area.value / a32.area.value - 0.5).abs() < 1e-15);
    assert!((a12.center.value - a32.center.value - SPLIT).abs() < 1e-12);
    assert!(matches!(
        &f.parameter("p12.area").unwrap().status,
        ParameterStatus::Tied(t) if t == "0.5 * p32.area"
    ));
    assert!(art.result("p12.area").is_some() && art.result("p32.height").is_some());
}

#[test]
fn noisy_doublet_recovers_the_truth_within_standard_errors() {
    for seed in [1u64, 7, 42] {
        let (art, f) = fit(&spectrum(Some(seed)), options()).unwrap();
        assert!(f.statistics.converged, "{}", f.statistics.reason);
        assert!(f.statistics.weighted);
        let red = f.statistics.reduced_chi_square;
        assert!((0.5..2.0).contains(&red), "seed {seed}: reduced χ² {red}");
        for (name, v) in TRUTH {
            let p = f.parameter(name).unwrap();
            let se = p.stderr.unwrap();
            assert!(
                (p.value - v).abs() < 3.0 * se,
                "seed {seed} {name}: {} ± {se} vs {v}",
                p.value
            );
        }
        // The tied area's propagated error is exactly half the free one's.
        let (u32_, u12) = (
            f.peak("p32").unwrap().area.uncertainty.unwrap(),
            f.peak("p12").unwrap().area.uncertainty.unwrap(),
        );
        assert!((u12 / u32_ - 0.5).abs() < 1e-12);
        // Area covariance: cov(p12, p32) = 0.5 var(p32); correlation 1.
        let c = &f.area_covariance;
        assert!(
            (c[1] / (u32_ * u32_) - 0.5).abs() < 1e-12 && (c[2] - c[1]).abs() < 1e-12 * c[1].abs()
        );
        assert!(!art
            .notes
            .iter()
            .any(|n| n.text.contains("did not converge")));
    }
}
