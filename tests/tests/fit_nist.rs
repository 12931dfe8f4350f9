//! NIST StRD nonlinear regression, Gauss1 and Gauss2 (Rust, B., NIST 1996; certified
//! values in the file headers, parsed from the files), fitted through the real
//! `fit.peaks` stage from both certified starting points.
//!
//! NIST model: y = b1·exp(−b2·x) + b3·exp(−(x−b4)²/b5²) + b6·exp(−(x−b7)²/b8²).
//! Ours: exponential background a·exp(−b·x) plus two Gaussians by centre c, area A and
//! FWHM w. With σ the Gaussian standard deviation, b5 = √2·σ and w = 2√(2 ln 2)·σ, so
//! b5 = w / (2√ln 2); the height is b3 = A / (σ√(2π)) = A / (b5 √π).
//! Hence the start values A = b3·b5·√π, w = 2√(ln 2)·b5, and back
//! b3 = A/(b5√π), b5 = w/(2√ln 2), with standard errors by first-order propagation
//! through the full covariance rebuilt from the reported correlations and errors.

#[path = "fit_support.rs"]
mod support;

use stages::{Artifact, Axis, FitResult, Spectrum};

struct Certified {
    start1: [f64; 8],
    start2: [f64; 8],
    value: [f64; 8],
    stderr: [f64; 8],
    rss: f64,
    rsd: f64,
    x: Vec<f64>,
    y: Vec<f64>,
}

/// Reads `bK = start1 start2 value stderr` lines, the residual sum of squares and the
/// `y x` data rows after the `Data:   y   x` header.
fn parse(text: &str) -> Certified {
    let mut c = Certified {
        start1: [0.0; 8],
        start2: [0.0; 8],
        value: [0.0; 8],
        stderr: [0.0; 8],
        rss: f64::NAN,
        rsd: f64::NAN,
        x: vec![],
        y: vec![],
    };
    let mut seen = [false; 8];
    let mut in_data = false;
    for line in text.lines() {
        let t = line.trim();
        if in_data {
            let v: Vec<f64> = t
                .split_whitespace()
                .filter_map(|s| s.parse().ok())
                .collect();
            if v.len() == 2 {
                c.y.push(v[0]);
                c.x.push(v[1]);
            }
            continue;
        }
        if t.starts_with("Data:") && t.contains(" y") && t.ends_with('x') {
            in_data = true;
        } else if let Some(rest) = t.strip_prefix("Residual Sum of Squares:") {
            c.rss = rest.trim().parse().unwrap();
        } else if let Some(rest) = t.strip_prefix("Residual Standard Deviation:") {
            c.rsd = rest.trim().parse().unwrap();
        } else if let Some((name, rest)) = t.split_once('=') {
            let name = name.trim();
            if let Some(k) = name.strip_prefix('b').and_then(|k| k.parse::<usize>().ok()) {
                let v: Vec<f64> = rest
                    .split_whitespace()
                    .map(|s| s.parse().unwrap())
                    .collect();
                assert_eq!(v.len(), 4, "line {line}");
                c.start1[k - 1] = v[0];
                c.start2[k - 1] = v[1];
                c.value[k - 1] = v[2];
                c.stderr[k - 1] = v[3];
                seen[k - 1] = true;
            }
        }
    }
    assert!(
        seen.iter().all(|s| *s),
        "all eight parameters in the header"
    );
    assert_eq!(c.x.len(), 250, "250 observations");
    assert!(
        c.rss.is_finite() && c.rsd.is_finite(),
        "certified RSS and RSD in the header"
    );
    c
}

fn options(b: &[f64; 8], tolerance: Option<f64>) -> serde_json::Value {
    let pi_sqrt = std::f64::consts::PI.sqrt();
    let ln2_sqrt = std::f64::consts::LN_2.sqrt();
    let peak = |h: f64, c: f64, b5: f64| serde_json::json!({ "center": c, "area": h * b5 * pi_sqrt, "fwhm": 2.0 * ln2_sqrt * b5 });
    let mut o = serde_json::json!({
        "shape": "gaussian",
        "background": "exponential",
        "background_parameters": { "a": b[0], "b": b[1] },
        "peaks": { "g1": peak(b[2], b[3], b[4]), "g2": peak(b[5], b[6], b[7]) },
        "weights": "none",
        "max_iterations": 1000
    });
    if let Some(t) = tolerance {
        o["tolerance"] = serde_json::json!(t);
    }
    o
}

fn run(c: &Certified, start: &[f64; 8], tolerance: Option<f64>) -> (Artifact, FitResult) {
    let s = Spectrum::new(
        c.x.clone(),
        c.y.clone(),
        Axis::new("x", ""),
        Axis::new("y", ""),
    );
    support::fit(&s, options(start, tolerance)).unwrap()
}

/// b1..b8 and their standard errors from our parameters and covariance.
fn nist_parameters(f: &FitResult) -> ([f64; 8], [f64; 8]) {
    let free: Vec<&str> = f
        .parameters
        .iter()
        .filter(|p| p.stderr.is_some())
        .map(|p| p.name.as_str())
        .collect();
    assert_eq!(free.len(), 8, "eight free parameters: {free:?}");
    let n = free.len();
    let se = |name: &str| f.parameter(name).unwrap().stderr.unwrap();
    let val = |name: &str| f.parameter(name).unwrap().value;
    let cov = |a: usize, b: usize| f.correlation[a * n + b] * se(free[a]) * se(free[b]);
    let pos = |name: &str| free.iter().position(|p| *p == name).unwrap();
    let sqrt_pi = std::f64::consts::PI.sqrt();
    let two_sqrt_ln2 = 2.0 * std::f64::consts::LN_2.sqrt();
    let mut b = [0.0; 8];
    let mut e = [0.0; 8];
    // b1, b2: the background's a and b directly.
    b[0] = val("background.a");
    e[0] = se("background.a");
    b[1] = val("background.b");
    e[1] = se("background.b");
    for (k, peak) in ["g1", "g2"].iter().enumerate() {
        let (a, c, w) = (
            val(&format!("{peak}.area")),
            val(&format!("{peak}.center")),
            val(&format!("{peak}.fwhm")),
        );
        let b5 = w / two_sqrt_ln2;
        let height = a / (b5 * sqrt_pi);
        // Gradient of the height with respect to (area, fwhm): (h/A, −h/w).
        let ia = pos(&format!("{peak}.area"));
        let iw = pos(&format!("{peak}.fwhm"));
        let (ga, gw) = (height / a, -height / w);
        let var_h = ga * ga * cov(ia, ia) + 2.0 * ga * gw * cov(ia, iw) + gw * gw * cov(iw, iw);
        b[2 + 3 * k] = height;
        e[2 + 3 * k] = var_h.sqrt();
        b[3 + 3 * k] = c;
        e[3 + 3 * k] = se(&format!("{peak}.center"));
        b[4 + 3 * k] = b5;
        e[4 + 3 * k] = se(&format!("{peak}.fwhm")) / two_sqrt_ln2;
        // The stage's own propagated height agrees with this one.
        let fp = f.peak(peak).unwrap();
        assert!((fp.height.value / height - 1.0).abs() < 1e-12);
        assert!((fp.height.uncertainty.unwrap() / var_h.sqrt() - 1.0).abs() < 1e-9);
    }
    (b, e)
}

fn check(file: &str) {
    let Some(text) = tests::reference_file(
        &format!("nist-strd/{file}"),
        &format!("NIST StRD {file} fit"),
    ) else {
        return;
    };
    let c = parse(&text);
    // A tight tolerance, and the stage's default one (1e-10), which must be enough too.
    let runs = [
        ("Start 1, tolerance 1e-15", &c.start1, Some(1e-15)),
        ("Start 2, tolerance 1e-15", &c.start2, Some(1e-15)),
        ("Start 1, default tolerance", &c.start1, None),
        ("Start 2, default tolerance", &c.start2, None),
    ];
    for (label, start, tolerance) in runs {
        let (art, f) = run(&c, start, tolerance);
        assert!(
            f.statistics.converged,
            "{file} {label}: {}",
            f.statistics.reason
        );
        assert_eq!(
            art.result("converged").unwrap().value,
            stages::Scalar::Text("true".into())
        );
        let (b, e) = nist_parameters(&f);
        for k in 0..8 {
            // Certified values: at least 6 significant digits; standard errors: 4.
            let rv = (b[k] - c.value[k]).abs() / c.value[k].abs();
            let re = (e[k] - c.stderr[k]).abs() / c.stderr[k].abs();
            assert!(
                rv < 1e-6,
                "{file} {label} b{}: {} vs certified {} (rel {rv:.1e})",
                k + 1,
                b[k],
                c.value[k]
            );
            assert!(
                re < 1e-4,
                "{file} {label} se(b{}): {} vs certified {} (rel {re:.1e})",
                k + 1,
                e[k],
                c.stderr[k]
            );
        }
        // Residual sum of squares (certified): unweighted χ² is the RSS.
        let rss = f.statistics.chi_square;
        assert!(
            (rss / c.rss - 1.0).abs() < 1e-8,
            "{file} {label} RSS {rss} vs {}",
            c.rss
        );
        // Residual standard deviation (certified) = √(reduced χ²) of an unweighted fit.
        let rsd = f.statistics.reduced_chi_square.sqrt();
        assert!(
            (rsd / c.rsd - 1.0).abs() < 1e-8,
            "{file} {label} RSD {rsd} vs {}",
            c.rsd
        );
        assert_eq!(f.statistics.points, 250);
        assert_eq!(f.statistics.free_parameters, 8);
        eprintln!(
            "{file} {label}: {} iterations, {}; worst relative errors: values {:.1e}, standard errors {:.1e}",
            f.statistics.iterations,
            f.statistics.reason,
            (0..8).map(|k| ((b[k] - c.value[k]) / c.value[k]).abs()).fold(0.0, f64::max),
            (0..8).map(|k| ((e[k] - c.stderr[k]) / c.stderr[k]).abs()).fold(0.0, f64::max),
        );
    }
}

#[test]
fn gauss1_certified_values_from_both_starts() {
    check("Gauss1.dat");
}

#[test]
fn gauss2_certified_values_from_both_starts() {
    check("Gauss2.dat");
}
