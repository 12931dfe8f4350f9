//! peaks.find against scipy.signal.find_peaks / peak_prominences / peak_widths.
mod spectral_common;
use spectral_common::*;

#[test]
fn peaks_prominences_and_widths_match_scipy() {
    // Source: scipy 1.14.1 find_peaks, peak_prominences, peak_widths(rel_height=0.5),
    // committed by tests/refgen/peaks_scipy.py into tests/data/peaks_scipy.json. The
    // grid has unit spacing, so scipy's sample widths and distances are x units.
    let d = data("peaks_scipy.json");
    let x = floats(&d["x"]);
    let y = floats(&d["y"]);
    let a = spectrum(x, y, "x", "", "intensity", "");
    for case in d["cases"].as_array().unwrap() {
        let mut opts = serde_json::json!({
            "min_prominence": case["min_prominence"],
            "min_width": case["min_width"],
            "min_separation": case["min_separation"],
        });
        if !case["min_height"].is_null() {
            opts["min_height"] = case["min_height"].clone();
        }
        let out = run("peaks.find", &[&a], opts.clone()).unwrap();
        let list = match &out.value {
            stages::Value::Peaks(p) => p,
            _ => panic!("peaks.find must give a peak list"),
        };
        let idx: Vec<u64> = list.peaks.iter().map(|p| p.index as u64).collect();
        let expect: Vec<u64> = case["peaks"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_u64().unwrap())
            .collect();
        assert_eq!(idx, expect, "peak indices for {opts}");
        let prom: Vec<f64> = list.peaks.iter().map(|p| p.prominence).collect();
        let widths: Vec<f64> = list.peaks.iter().map(|p| p.fwhm).collect();
        assert!(
            max_abs_diff(&prom, &floats(&case["prominences"])) < 1e-12,
            "prominences for {opts}"
        );
        assert!(
            max_abs_diff(&widths, &floats(&case["widths"])) < 1e-9,
            "widths for {opts}"
        );
        assert_eq!(
            out.result("peak_count").unwrap().as_number(),
            Some(expect.len() as f64)
        );
    }
}

#[test]
fn refined_position_of_a_sampled_gaussian() {
    // Analytic: a Gaussian sampled at unit spacing with centre 50.3 and σ = 4; the
    // parabola through the top three samples locates it within 0.01 (the parabolic
    // vertex bias for σ = 4 samples is below 1 % of the spacing).
    let x: Vec<f64> = (0..100).map(|i| i as f64).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|v| 10.0 * (-(v - 50.3f64).powi(2) / 32.0).exp())
        .collect();
    let a = spectrum(x, y, "x", "", "y", "");
    let out = run(
        "peaks.find",
        &[&a],
        serde_json::json!({ "min_prominence": 1.0 }),
    )
    .unwrap();
    let p = out.result("peak1.position").unwrap().as_number().unwrap();
    assert!((p - 50.3).abs() < 0.01, "{p}");
    // FWHM of a Gaussian is 2√(2 ln 2) σ = 9.4190; linear interpolation of the
    // half-height crossings on unit spacing is within 0.05.
    let w = out.result("peak1.fwhm").unwrap().as_number().unwrap();
    assert!(
        (w - 2.0 * (2.0 * 2f64.ln()).sqrt() * 4.0).abs() < 0.05,
        "{w}"
    );
}
