//! Crop, resample, normalise, subtract and average through the registered stages,
//! checked against analytic results.
mod spectral_common;
use spectral_common::*;

#[test]
fn resample_subtract_and_normalize() {
    // Analytic: linear interpolation is exact for straight lines, so a blank
    // b(x) = 0.1 + 0.01x on another grid is removed exactly from s(x) = b(x) + g(x).
    let xs: Vec<f64> = (0..=200).map(|i| 400.0 + 1.0 * i as f64).collect();
    let g = |v: f64| 2.0 * (-(v - 500.0f64).powi(2) / 200.0).exp();
    let b = |v: f64| 0.1 + 0.01 * v;
    let sample = spectrum(
        xs.clone(),
        xs.iter().map(|&v| b(v) + g(v)).collect(),
        "wavelength",
        "nm",
        "absorbance",
        "",
    );
    let xb: Vec<f64> = (0..=90).map(|i| 390.0 + 2.5 * i as f64).collect();
    let blank = spectrum(
        xb.clone(),
        xb.iter().map(|&v| b(v)).collect(),
        "wavelength",
        "nm",
        "absorbance",
        "",
    );
    let diff = run(
        "transform.subtract",
        &[&sample, &blank],
        serde_json::json!({}),
    )
    .unwrap();
    let d = diff.spectrum().unwrap();
    for (x, y) in d.x.iter().zip(&d.y) {
        assert!((y - g(*x)).abs() < 1e-12);
    }
    // Normalised to the maximum: the peak (at a grid point) becomes 1.
    let n = run(
        "transform.normalize",
        &[&diff],
        serde_json::json!({ "by": "max" }),
    )
    .unwrap();
    assert!(
        (n.result("normalization_factor")
            .unwrap()
            .as_number()
            .unwrap()
            - 2.0)
            .abs()
            < 1e-12
    );
    // Area normalisation: ∫ g = 2·√(200π) = 50.13..., trapezoid within 1e-9 here.
    let n = run(
        "transform.normalize",
        &[&diff],
        serde_json::json!({ "by": "area" }),
    )
    .unwrap();
    let f = n
        .result("normalization_factor")
        .unwrap()
        .as_number()
        .unwrap();
    assert!(
        (f - 2.0 * (200.0 * std::f64::consts::PI).sqrt()).abs() < 1e-6,
        "{f}"
    );
    // Resample onto start/stop/step and crop.
    let r = run(
        "transform.resample",
        &[&sample],
        serde_json::json!({ "start": 450.0, "stop": 550.0, "step": 0.5 }),
    )
    .unwrap();
    assert_eq!(r.spectrum().unwrap().len(), 201);
    let c = run(
        "transform.crop",
        &[&sample],
        serde_json::json!({ "range": [450.0, 460.0] }),
    )
    .unwrap();
    assert_eq!(c.spectrum().unwrap().len(), 11);
}

#[test]
fn average_of_repeats_gives_mean_and_standard_error() {
    // GUM §4.2: the standard uncertainty of a mean of N repeats is s/√N.
    let x = vec![1.0, 2.0, 3.0];
    let a = spectrum(x.clone(), vec![1.0, 10.0, 4.0], "x", "", "y", "counts");
    let b = spectrum(x.clone(), vec![2.0, 10.0, 6.0], "x", "", "y", "counts");
    let c = spectrum(x, vec![3.0, 10.0, 8.0], "x", "", "y", "counts");
    let out = run_gather(
        "gather.average",
        &[("a", &a), ("b", &b), ("c", &c)],
        serde_json::json!({}),
    )
    .unwrap();
    let s = out.spectrum().unwrap();
    assert_eq!(s.y, vec![2.0, 10.0, 6.0]);
    let sig = s.sigma.as_ref().unwrap();
    assert!((sig[0] - 1.0 / 3f64.sqrt()).abs() < 1e-15);
    assert_eq!(sig[1], 0.0);
    assert!((sig[2] - 2.0 / 3f64.sqrt()).abs() < 1e-15);
}
