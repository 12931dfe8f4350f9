//! The Voigt profile and the Faddeeva function used by `fit.peaks` against
//! scipy.special.voigt_profile and scipy.special.wofz (SciPy 1.17.1, NumPy 2.4.6;
//! values in tests/data/voigt_scipy.csv, made by tests/refgen/voigt_values.py).

use stages::fit::shapes::{faddeeva, Shape};

fn rows() -> Vec<(String, [f64; 5])> {
    let text = include_str!("../data/voigt_scipy.csv");
    assert!(
        text.starts_with("# Voigt profile and Faddeeva function from scipy.special (SciPy 1.17.1")
    );
    text.lines()
        .filter(|l| !l.starts_with('#') && !l.starts_with("function"))
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            let v: Vec<f64> = f[1..].iter().map(|s| s.parse().unwrap()).collect();
            (f[0].to_string(), [v[0], v[1], v[2], v[3], v[4]])
        })
        .collect()
}

fn close(ours: f64, reference: f64) -> bool {
    // ~1e-10 relative; values that underflow to (near) zero compare absolutely.
    (ours - reference).abs() <= 1e-10 * reference.abs() + 1e-300
}

#[test]
fn voigt_profile_matches_scipy() {
    let mut n = 0;
    let mut d = [0.0; 4];
    for (f, [x, sigma, gamma, v, _]) in rows() {
        if f != "voigt_profile" {
            continue;
        }
        // The fit's own evaluation path: unit area, centre 0.
        let ours = Shape::Voigt.eval(&[0.0, 1.0, sigma, gamma], x, &mut d);
        assert!(
            close(ours, v),
            "V({x}; σ={sigma}, γ={gamma}) = {ours}, scipy {v}"
        );
        n += 1;
    }
    assert_eq!(n, 9 * 4 * 6);
}

#[test]
fn faddeeva_matches_scipy_wofz() {
    let mut n = 0;
    for (f, [re, im, _, wr, wi]) in rows() {
        if f != "wofz" {
            continue;
        }
        let (r, i) = faddeeva(re, im);
        let m = wr.hypot(wi);
        assert!(
            (r - wr).hypot(i - wi) <= 1e-10 * m + 1e-300,
            "w({re}{im:+}i) = {r}{i:+}i, scipy {wr}{wi:+}i"
        );
        n += 1;
    }
    assert_eq!(n, 9 * 10);
}
