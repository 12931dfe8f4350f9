//! integrate.area against analytic integrals, with and without a background curve.
mod spectral_common;
use spectral_common::*;

#[test]
fn polynomials_integrate_exactly() {
    // Analytic: ∫₀⁴ (1 + 2x − 0.5x² + 0.25x³) dx = 4 + 16 − 32/3 + 16 = 25.3333...
    // Simpson is exact for cubics on a uniform grid with an even number of intervals;
    // trapezoid on 401 points is within h²/12·(b−a)·max|f''| = 0.0017.
    let exact = 4.0 + 16.0 - 32.0 / 3.0 + 16.0;
    let x: Vec<f64> = (0..=400).map(|i| 0.01 * i as f64).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|v| 1.0 + 2.0 * v - 0.5 * v * v + 0.25 * v * v * v)
        .collect();
    let a = spectrum(x, y, "x", "eV", "y", "counts");
    let s = run(
        "integrate.area",
        &[&a],
        serde_json::json!({ "rule": "simpson" }),
    )
    .unwrap();
    let v = s.result("area").unwrap().as_number().unwrap();
    assert!((v - exact).abs() < 1e-10, "{v}");
    assert_eq!(s.result("area").unwrap().unit, "counts·eV");
    let t = run(
        "integrate.area",
        &[&a],
        serde_json::json!({ "rule": "trapezoid" }),
    )
    .unwrap();
    let v = t.result("area").unwrap().as_number().unwrap();
    assert!((v - exact).abs() < 0.0017, "{v}");
}

#[test]
fn gaussian_area_with_linear_background_on_a_descending_axis() {
    // Analytic: a Gaussian of height h and σ has area h σ √(2π); over ±10σ the tails
    // are below 1e-22. On top of a line, background.linear (end means) recovers the line
    // exactly, and integrate.area subtracts it (background: auto).
    let (h, c, sig) = (500.0, 285.0, 0.7);
    let x: Vec<f64> = (0..=1400).map(|i| 292.0 - 0.01 * i as f64).collect(); // 292 → 278, descending
    let line = |v: f64| 120.0 + 3.0 * (v - 278.0);
    let y: Vec<f64> = x
        .iter()
        .map(|&v| h * (-(v - c).powi(2) / (2.0 * sig * sig)).exp() + line(v))
        .collect();
    let a = spectrum(x, y, "binding energy", "eV", "intensity", "counts");
    let bg = run(
        "background.linear",
        &[&a],
        serde_json::json!({ "end_points": 5 }),
    )
    .unwrap();
    let exact = h * sig * (2.0 * std::f64::consts::PI).sqrt();
    for rule in ["simpson", "trapezoid"] {
        let out = run(
            "integrate.area",
            &[&bg],
            serde_json::json!({ "rule": rule }),
        )
        .unwrap();
        let v = out.result("area").unwrap().as_number().unwrap();
        // Stated tolerance 1e-9 relative: both rules converge spectrally for a smooth
        // peak whose tails vanish at the ends.
        assert!((v / exact - 1.0).abs() < 1e-9, "{rule}: {v} vs {exact}");
        assert_eq!(out.result("area.from").unwrap().as_number(), Some(278.0));
        assert!((out.result("area.to").unwrap().as_number().unwrap() - 292.0).abs() < 1e-9);
        match &out.result("area.background").unwrap().value {
            stages::Scalar::Text(t) => assert!(t.contains("linear"), "{t}"),
            _ => panic!("background record must be text"),
        }
    }
    // Without the background the line's area (trapezoid of a line: exact) is included.
    let out = run(
        "integrate.area",
        &[&bg],
        serde_json::json!({ "background": "none" }),
    )
    .unwrap();
    let v = out.result("area").unwrap().as_number().unwrap();
    let line_area = 120.0 * 14.0 + 1.5 * 14.0 * 14.0;
    assert!((v - exact - line_area).abs() < 1e-6, "{v}");
    // `required` fails on a spectrum without a background.
    assert!(run(
        "integrate.area",
        &[&a],
        serde_json::json!({ "background": "required" })
    )
    .is_err());
}

#[test]
fn poisson_sigma_propagates_into_the_area() {
    // Trapezoid weights on unit spacing are (½, 1, …, 1, ½): u(A)² = Σ wᵢ² σᵢ² with
    // σᵢ² = counts (Poisson), so for a flat 100-count spectrum of 11 points
    // u(A) = √(100·(9 + 2·¼)) = √950.
    let text: String = std::iter::once("energy (eV),counts\n".to_string())
        .chain((0..11).map(|i| format!("{i},100\n")))
        .collect();
    let f = file("flat.csv", &text);
    let s = run("import.delimited", &[&f], serde_json::json!({})).unwrap();
    let out = run(
        "integrate.area",
        &[&s],
        serde_json::json!({ "rule": "trapezoid" }),
    )
    .unwrap();
    let r = out.result("area").unwrap();
    assert_eq!(r.as_number(), Some(1000.0));
    assert!((r.uncertainty.unwrap() - 950f64.sqrt()).abs() < 1e-9);
}

#[test]
fn simpson_and_trapezoid_match_scipy_on_uneven_grids() {
    // Source: scipy 1.14.1 scipy.integrate.simpson / trapezoid on non-uniform grids
    // with odd and even numbers of intervals (tests/refgen/simpson_scipy.py ->
    // tests/data/simpson_scipy.json).
    let d = data("simpson_scipy.json");
    for case in d["cases"].as_array().unwrap() {
        let x = floats(&case["x"]);
        let y = floats(&case["y"]);
        let n = x.len();
        let a = spectrum(x, y, "x", "", "y", "");
        for rule in ["simpson", "trapezoid"] {
            let out = run("integrate.area", &[&a], serde_json::json!({ "rule": rule })).unwrap();
            let v = out.result("area").unwrap().as_number().unwrap();
            let expect = case[rule].as_f64().unwrap();
            assert!(
                (v - expect).abs() < 1e-12 * expect.abs().max(1.0),
                "{rule}, {n} points: {v} vs {expect}"
            );
        }
    }
}
