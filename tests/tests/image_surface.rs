//! Reference checks of surface levelling, roughness, profiles and step heights.

mod image_support;

use image_support::{image, num, run1, unc, Lcg};
use serde_json::json;
use stages::Value;
use std::f64::consts::{PI, SQRT_2};

/// Analytic: for z = A sin(2πx/λ) over whole periods, Ra = Sa = 2A/π, Rq = Sq = A/√2,
/// Ssk = 0, Sku = 3/2, Sp = Sv = A, Sz = 2A. The sampled mean of |sin| over N = 64 points
/// per period differs from 2/π by less than 1e-3 relative; the sampled mean of sin² is
/// exactly 1/2 and of sin⁴ exactly 3/8 (N > 4), so Rq, Sq and Sku are exact up to f32
/// storage of the heights.
#[test]
fn sinusoidal_surface_matches_analytic_roughness() {
    let a = 5.0;
    let lambda = 64.0;
    let img = image(256, 32, Some((10.0, "nm")), "nm", |c, _| {
        a * (2.0 * PI * c as f64 / lambda).sin()
    });
    let r = run1("surface.roughness", &img, json!({}));
    for (name, expected, tol) in [
        ("sa", 2.0 * a / PI, 1e-3),
        ("ra", 2.0 * a / PI, 1e-3),
        ("sq", a / SQRT_2, 1e-6),
        ("rq", a / SQRT_2, 1e-6),
        ("sp", a, 1e-6),
        ("sv", a, 1e-6),
        ("sz", 2.0 * a, 1e-6),
    ] {
        let v = num(&r, name);
        assert!(
            (v - expected).abs() <= tol * expected,
            "{name}: {v} vs analytic {expected}"
        );
    }
    assert!(num(&r, "ssk").abs() < 1e-5, "ssk {}", num(&r, "ssk"));
    assert!(
        (num(&r, "sku") - 1.5).abs() < 1e-5,
        "sku {}",
        num(&r, "sku")
    );
    // One row gives the same line values.
    let r5 = run1("surface.roughness", &img, json!({ "row": 5 }));
    assert!((num(&r5, "rq") - a / SQRT_2).abs() < 1e-6 * a);
}

/// A tilted sinusoid levelled by the least-squares plane keeps the analytic Sq within 1%
/// (the plane fit absorbs a little of the sinusoid; the tilt is otherwise removed).
#[test]
fn levelling_removes_tilt_before_roughness() {
    let a = 2.0;
    let img = image(256, 64, Some((5.0, "nm")), "nm", |c, r| {
        a * (2.0 * PI * c as f64 / 32.0).sin() + 0.3 * c as f64 + 0.1 * r as f64
    });
    let lev = run1("surface.level", &img, json!({ "method": "plane" }));
    let r = run1("surface.roughness", &lev, json!({}));
    assert!(
        (num(&r, "sq") - a / SQRT_2).abs() < 0.01 * a / SQRT_2,
        "{}",
        num(&r, "sq")
    );
    let lev2 = run1("surface.level", &img, json!({ "method": "line_linear" }));
    let r2 = run1("surface.roughness", &lev2, json!({}));
    assert!(
        (num(&r2, "rq") - a / SQRT_2).abs() < 0.02 * a / SQRT_2,
        "{}",
        num(&r2, "rq")
    );
}

/// A generated random surface: every parameter against the ISO 25178-2 / ISO 4287
/// definitions re-implemented here independently (two-pass sums in f64 from the f32 data).
#[test]
fn random_surface_matches_independent_definitions() {
    let (w, h) = (97, 61);
    let mut rng = Lcg(42);
    let noise: Vec<f64> = (0..w * h)
        .map(|_| rng.normal() + 0.3 * rng.next().powi(3) * 8.0)
        .collect();
    let img = image(w, h, Some((2.0, "nm")), "nm", |c, r| noise[r * w + c]);
    let Value::Image(im) = &img.value else {
        unreachable!()
    };
    let z: Vec<f64> = im.data.iter().map(|&v| v as f64).collect();
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let d: Vec<f64> = z.iter().map(|v| v - mean).collect();
    let sq = (d.iter().map(|v| v * v).sum::<f64>() / n).sqrt();
    let sa = d.iter().map(|v| v.abs()).sum::<f64>() / n;
    let ssk = d.iter().map(|v| v.powi(3)).sum::<f64>() / n / sq.powi(3);
    let sku = d.iter().map(|v| v.powi(4)).sum::<f64>() / n / sq.powi(4);
    let sp = d.iter().cloned().fold(f64::MIN, f64::max);
    let sv = -d.iter().cloned().fold(f64::MAX, f64::min);
    let mut ra = 0.0;
    let mut rq = 0.0;
    for row in z.chunks(w) {
        let m = row.iter().sum::<f64>() / w as f64;
        ra += row.iter().map(|v| (v - m).abs()).sum::<f64>() / w as f64 / h as f64;
        rq += (row.iter().map(|v| (v - m).powi(2)).sum::<f64>() / w as f64).sqrt() / h as f64;
    }
    let r = run1("surface.roughness", &img, json!({}));
    for (name, v) in [
        ("sa", sa),
        ("sq", sq),
        ("ssk", ssk),
        ("sku", sku),
        ("sp", sp),
        ("sv", sv),
        ("sz", sp + sv),
        ("ra", ra),
        ("rq", rq),
    ] {
        assert!(
            (num(&r, name) - v).abs() <= 1e-9 * v.abs().max(1.0),
            "{name}: {} vs {v}",
            num(&r, name)
        );
    }
    assert!(ssk.abs() > 0.1, "the generated surface should be skewed");
}

/// Analytic: a 12 nm step with region noise of known standard deviation; the step is
/// recovered within three standard uncertainties, and u = √(s_A²/n_A + s_B²/n_B) (GUM).
#[test]
fn step_height_between_two_regions() {
    let mut rng = Lcg(7);
    let noise: Vec<f64> = (0..80 * 40).map(|_| 0.5 * rng.normal()).collect();
    let img = image(
        80,
        40,
        Some((20.0, "nm")),
        "nm",
        |c, r| if c >= 40 { 12.0 } else { 0.0 } + noise[r * 80 + c],
    );
    let s = run1(
        "surface.step_height",
        &img,
        json!({ "region_a": [5, 5, 25, 30], "region_b": [50, 5, 25, 30] }),
    );
    let (step, u) = (num(&s, "step_height"), unc(&s, "step_height"));
    assert!((step - 12.0).abs() < 3.0 * u, "{step} ± {u}");
    let expected_u = ((num(&s, "sd_a").powi(2) + num(&s, "sd_b").powi(2)) / 750.0).sqrt();
    assert!((u - expected_u).abs() < 1e-12);
    assert!((u - 0.5 * (2.0f64 / 750.0).sqrt()).abs() < 0.2 * u);
}

/// Analytic: bilinear interpolation is exact on a plane; the profile of z = 3c + 2r nm
/// from (2, 5) to (10, 11) px has physical length 10 px × 2 nm = 20 nm.
#[test]
fn profile_on_a_plane() {
    let img = image(20, 20, Some((2.0, "nm")), "nm", |c, r| {
        3.0 * c as f64 + 2.0 * r as f64
    });
    let p = run1(
        "surface.profile",
        &img,
        json!({ "from": [2.0, 5.0], "to": [10.0, 11.0] }),
    );
    assert!((num(&p, "profile_length") - 20.0).abs() < 1e-12);
    let Value::Spectrum(s) = &p.value else {
        panic!()
    };
    assert_eq!(s.x_axis.unit, "nm");
    for (x, y) in s.x.iter().zip(&s.y) {
        let t = x / 20.0;
        let (c, r) = (2.0 + 8.0 * t, 5.0 + 6.0 * t);
        assert!((y - (3.0 * c + 2.0 * r)).abs() < 1e-4, "{x}: {y}");
    }
}

/// The height-map path end to end: a plain-text matrix with this project's header lines
/// (`# pixel_size: 4 nm`, `# z_unit: nm`), comma-separated, imported, levelled and measured;
/// a cosine of amplitude 3 nm over whole periods (orthogonal to the plane's terms, so the
/// plane fit leaves it intact) on a tilt gives Sq = 3/√2 nm (analytic, within 0.1%), and the
/// unit comes from the header.
#[test]
fn text_height_map_import_level_roughness() {
    let mut text = String::from("# exported height map\n# pixel_size: 4 nm\n# z_unit: nm\n");
    for r in 0..40 {
        let row: Vec<String> = (0..128)
            .map(|c| {
                format!(
                    "{:.6}",
                    3.0 * (2.0 * PI * c as f64 / 32.0).cos() + 0.05 * c as f64 - 0.02 * r as f64
                )
            })
            .collect();
        text.push_str(&row.join(","));
        text.push('\n');
    }
    let f = stages::Artifact::new(Value::File(stages::InputFile {
        name: "map.csv".into(),
        bytes: text.into_bytes(),
    }));
    let img = run1("image.import", &f, json!({}));
    assert_eq!(num(&img, "pixel_size"), 4.0);
    let lev = run1("surface.level", &img, json!({}));
    let r = run1("surface.roughness", &lev, json!({}));
    assert_eq!(r.result("sq").unwrap().unit, "nm");
    assert!(
        (num(&r, "sq") - 3.0 / SQRT_2).abs() < 0.001 * 3.0 / SQRT_2,
        "{}",
        num(&r, "sq")
    );
}
