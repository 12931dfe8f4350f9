//! Savitzky–Golay weights and filters against the published tables and scipy.
mod spectral_common;
use spectral_common::*;
use stages::smooth::savitzky_golay::{savitzky_golay_delta, sg_coefficients};

/// (window, order, derivative, integer convolutes, normaliser). Source: Savitzky &
/// Golay, Anal. Chem. 1964, 36, 1627, Tables I–III (smoothing, first and second
/// derivative convolutes), as corrected by Steinier, Termonia & Deltour, Anal. Chem.
/// 1972, 44, 1906. Cited from memory; every entry is also checked against
/// scipy.signal.savgol_coeffs below, and the integers against exact least squares.
const TABLES: &[(usize, usize, usize, &[f64], f64)] = &[
    (5, 2, 0, &[-3.0, 12.0, 17.0, 12.0, -3.0], 35.0),
    (7, 2, 0, &[-2.0, 3.0, 6.0, 7.0, 6.0, 3.0, -2.0], 21.0),
    (
        9,
        2,
        0,
        &[-21.0, 14.0, 39.0, 54.0, 59.0, 54.0, 39.0, 14.0, -21.0],
        231.0,
    ),
    (
        11,
        3,
        0,
        &[
            -36.0, 9.0, 44.0, 69.0, 84.0, 89.0, 84.0, 69.0, 44.0, 9.0, -36.0,
        ],
        429.0,
    ),
    (7, 4, 0, &[5.0, -30.0, 75.0, 131.0, 75.0, -30.0, 5.0], 231.0),
    (
        9,
        4,
        0,
        &[15.0, -55.0, 30.0, 135.0, 179.0, 135.0, 30.0, -55.0, 15.0],
        429.0,
    ),
    (5, 2, 1, &[-2.0, -1.0, 0.0, 1.0, 2.0], 10.0),
    (7, 2, 1, &[-3.0, -2.0, -1.0, 0.0, 1.0, 2.0, 3.0], 28.0),
    (5, 3, 1, &[1.0, -8.0, 0.0, 8.0, -1.0], 12.0),
    (
        7,
        3,
        1,
        &[22.0, -67.0, -58.0, 0.0, 58.0, 67.0, -22.0],
        252.0,
    ),
    (5, 2, 2, &[2.0, -1.0, -2.0, -1.0, 2.0], 7.0),
    (7, 2, 2, &[5.0, 0.0, -3.0, -4.0, -3.0, 0.0, 5.0], 42.0),
];

#[test]
fn convolution_weights_match_the_published_tables() {
    for &(w, o, d, ints, norm) in TABLES {
        let c = sg_coefficients(w, o, d).unwrap();
        // The second-derivative tables give the convolute for d²y/di² / 2! in some
        // printings; the entries above are the true second derivative weights ×norm.
        for (a, b) in c.iter().zip(ints) {
            assert!(
                (a - b / norm).abs() < 1e-13,
                "window {w} order {o} deriv {d}: {a} vs {}",
                b / norm
            );
        }
    }
}

#[test]
fn weights_match_scipy_savgol_coeffs() {
    // Source: scipy.signal.savgol_coeffs(use='dot'), scipy 1.14.1, committed by
    // tests/refgen/savgol_scipy.py into tests/data/savgol_scipy.json.
    let d = data("savgol_scipy.json");
    for case in d["coeffs"].as_array().unwrap() {
        let (w, o, dv) = (
            case["window"].as_u64().unwrap() as usize,
            case["order"].as_u64().unwrap() as usize,
            case["deriv"].as_u64().unwrap() as usize,
        );
        let c = sg_coefficients(w, o, dv).unwrap();
        let expect = floats(&case["c"]);
        let err = max_abs_diff(&c, &expect);
        assert!(
            err < 1e-12,
            "window {w} order {o} deriv {dv}: max diff {err}"
        );
    }
}

#[test]
fn filtered_signals_and_edges_match_scipy_mode_interp() {
    // Source: scipy.signal.savgol_filter(mode='interp', delta=0.05), scipy 1.14.1;
    // mode='interp' fits a polynomial to the first/last window for the edge points.
    let d = data("savgol_scipy.json");
    let x = floats(&d["x"]);
    let y = floats(&d["y"]);
    for case in d["filters"].as_array().unwrap() {
        let (w, o, dv) = (
            case["window"].as_u64().unwrap() as usize,
            case["order"].as_u64().unwrap() as usize,
            case["deriv"].as_u64().unwrap() as usize,
        );
        let expect = floats(&case["y"]);
        let got = savitzky_golay_delta(&y, w, o, dv, 0.05).unwrap();
        let scale = expect.iter().map(|v| v.abs()).fold(1.0, f64::max);
        let err = max_abs_diff(&got, &expect);
        // Stated tolerance 1e-9 relative to the largest value: scipy fits the edge
        // windows with numpy.polyfit on unscaled offsets, and derivatives divide
        // rounding by δ^d (δ² = 0.0025).
        assert!(
            err < 1e-9 * scale,
            "window {w} order {o} deriv {dv}: max diff {err} (scale {scale})"
        );
        // The same through the registered stage (delta taken from the x grid).
        let a = spectrum(x.clone(), y.clone(), "energy", "eV", "intensity", "counts");
        let out = run(
            "smooth.savitzky_golay",
            &[&a],
            serde_json::json!({ "window": w, "order": o, "derivative": dv }),
        )
        .unwrap();
        let s = out.spectrum().unwrap();
        let err = max_abs_diff(&s.y, &expect);
        assert!(
            err < 1e-8 * scale,
            "stage: window {w} order {o} deriv {dv}: max diff {err}"
        );
    }
}
