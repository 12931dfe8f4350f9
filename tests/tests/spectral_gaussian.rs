//! smooth.gaussian against scipy.ndimage.gaussian_filter1d away from the ends.
mod spectral_common;
use spectral_common::*;

#[test]
fn interior_matches_scipy_gaussian_filter1d() {
    // Source: scipy 1.14.1 gaussian_filter1d(truncate=4), committed by
    // tests/refgen/gaussian_scipy.py into tests/data/gaussian_scipy.json. Same
    // normalised kernel over the same reach, so interior points agree to rounding.
    let d = data("gaussian_scipy.json");
    let x = floats(&d["x"]);
    let y = floats(&d["y"]);
    let a = spectrum(x, y, "energy", "eV", "intensity", "");
    for case in d["cases"].as_array().unwrap() {
        let sigma = case["sigma_points"].as_f64().unwrap();
        let r = case["radius"].as_u64().unwrap() as usize;
        let expect = floats(&case["y"]);
        let out = run(
            "smooth.gaussian",
            &[&a],
            serde_json::json!({ "sigma": sigma, "sigma_unit": "points" }),
        )
        .unwrap();
        let got = &out.spectrum().unwrap().y;
        let n = got.len();
        let err = max_abs_diff(&got[r..n - r], &expect[r..n - r]);
        assert!(err < 1e-12, "σ = {sigma} points: max diff {err}");
    }
}
