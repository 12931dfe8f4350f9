//! Reference checks of FFT lattice spacings, electron wavelengths and diffraction rings.

mod image_support;

use image_support::{column, image, num, run1, unc};
use serde_json::json;
use stages::ediff::rings::electron_wavelength;
use stages::Value;
use std::f64::consts::PI;

/// Analytic: two plane waves of periods 7.3 px (direction 20°) and 5.1 px (direction 80°),
/// pixel 0.05 nm, so d = 0.365 nm and 0.255 nm and 60° between them. The issue asks for
/// the period within 0.5%.
#[test]
fn synthetic_lattice_period_is_recovered() {
    let (p1, t1, p2, t2) = (7.3, 20f64.to_radians(), 5.1, 80f64.to_radians());
    let img = image(256, 256, Some((0.05, "nm")), "counts", |c, r| {
        let (x, y) = (c as f64, r as f64);
        1000.0
            + 100.0 * (2.0 * PI * (x * t1.cos() - y * t1.sin()) / p1).cos()
            + 70.0 * (2.0 * PI * (x * t2.cos() - y * t2.sin()) / p2).cos()
    });
    let a = run1("lattice.fft", &img, json!({ "spots": 2 }));
    let (d1, d2) = (num(&a, "spot1.d"), num(&a, "spot2.d"));
    eprintln!(
        "lattice: d1 = {d1} ± {} nm, d2 = {d2} ± {} nm",
        unc(&a, "spot1.d"),
        unc(&a, "spot2.d")
    );
    assert!((d1 - 0.365).abs() / 0.365 < 0.005, "d1 = {d1}");
    assert!((d2 - 0.255).abs() / 0.255 < 0.005, "d2 = {d2}");
    // The stated uncertainty is small against the 0.5% goal and non-zero.
    assert!(unc(&a, "spot1.d") < 0.005 * d1);
    assert!(
        (num(&a, "angle.1_2") - 60.0).abs() < 0.5,
        "angle {}",
        num(&a, "angle.1_2")
    );
    assert!((num(&a, "spot1.direction") - 20.0).abs() < 0.5);
}

/// Handbook values of the relativistic electron wavelength (Williams & Carter,
/// Transmission Electron Microscopy, 2nd ed., Table 1.1: 100 kV 0.00370 nm, 200 kV 0.00251 nm,
/// 300 kV 0.00197 nm; to four figures 3.701, 2.508, 1.969 pm as commonly tabulated).
#[test]
fn electron_wavelengths_match_the_handbook() {
    for (kv, pm) in [(100.0, 3.701), (200.0, 2.508), (300.0, 1.969)] {
        let l = electron_wavelength(kv * 1e3) * 1e12;
        assert!((l - pm).abs() < 0.0006, "{kv} kV: {l} pm vs {pm} pm");
    }
}

/// Lattice parameter of gold a = 0.40782 nm (handbook value, from memory; it only sets the
/// synthetic pattern: any spacings would do). fcc rings 111, 200, 220, 311 at R = λL/d with
/// λL = 20 nm·px, centre off the image middle, on a decaying background.
fn ring_pattern() -> (stages::Artifact, Vec<(String, f64)>) {
    let a = 0.40782;
    let hkl = [("111", 3.0), ("200", 4.0), ("220", 8.0), ("311", 11.0)];
    let d: Vec<(String, f64)> = hkl
        .iter()
        .map(|(l, s)| (l.to_string(), a / f64::sqrt(*s)))
        .collect();
    let (cx, cy, lam_l) = (201.3, 198.6, 20.0);
    let heights = [400.0, 250.0, 180.0, 150.0];
    let radii: Vec<f64> = d.iter().map(|(_, dv)| lam_l / dv).collect();
    let img = image(400, 400, None, "counts", |c, r| {
        let rr = ((c as f64 - cx).powi(2) + (r as f64 - cy).powi(2)).sqrt();
        let mut v = 50.0 + 2000.0 * (-rr / 25.0).exp();
        for (k, &r0) in radii.iter().enumerate() {
            v += heights[k] * (-0.5 * ((rr - r0) / 1.5).powi(2)).exp();
        }
        v
    });
    (img, d)
}

#[test]
fn synthetic_ring_pattern_gives_the_right_spacings() {
    let (img, d) = ring_pattern();
    let prof = run1("ediff.radial_profile", &img, json!({}));
    assert!(
        (num(&prof, "centre_x") - 201.3).abs() < 0.25,
        "{}",
        num(&prof, "centre_x")
    );
    assert!(
        (num(&prof, "centre_y") - 198.6).abs() < 0.25,
        "{}",
        num(&prof, "centre_y")
    );
    let expected: Vec<_> = d
        .iter()
        .map(|(l, v)| json!({ "label": l, "d": v }))
        .collect();
    let rings = run1(
        "ediff.rings",
        &prof,
        json!({ "camera_constant": 20.0, "expected": expected, "max_rings": 4 }),
    );
    let ds = column(&rings, "d");
    eprintln!(
        "rings: centre ({}, {}), d = {ds:?}",
        num(&prof, "centre_x"),
        num(&prof, "centre_y")
    );
    assert_eq!(ds.len(), 4);
    for (k, (label, dv)) in d.iter().enumerate() {
        assert!(
            (ds[k] - dv).abs() / dv < 0.005,
            "{label}: {} vs {dv}",
            ds[k]
        );
        assert_eq!(
            rings
                .result(&format!("ring{}.index", k + 1))
                .map(|r| r.value.clone()),
            Some(stages::Scalar::Text(label.clone()))
        );
    }
    // Calibrated on the 111 ring instead of a given camera constant.
    let cal = run1(
        "ediff.rings",
        &prof,
        json!({ "calibrant": { "ring": 1, "d": d[0].1 }, "max_rings": 4 }),
    );
    assert!((num(&cal, "camera_constant") - 20.0).abs() / 20.0 < 0.005);
    let dc = column(&cal, "d");
    assert!((dc[3] - d[3].1).abs() / d[3].1 < 0.005);
    // The voltage route: 200 kV, L chosen so that λL = 20 nm·px with 10 µm pixels.
    let l_mm = 20.0 * 10e-6 / (electron_wavelength(200e3) * 1e9) * 1e3;
    let v = run1(
        "ediff.rings",
        &prof,
        json!({ "voltage_kv": 200.0, "camera_length_mm": l_mm, "detector_pixel_um": 10.0, "max_rings": 4 }),
    );
    assert!((num(&v, "camera_constant") - 20.0).abs() < 1e-9);
    assert!((num(&v, "electron_wavelength") - 2.508).abs() < 0.0006);
    let Value::Table(_) = &v.value else { panic!() };
}

/// Analytic: a hexagonal lattice of Gaussian atomic columns (lattice constant a = 9.4 px,
/// rotated 12°) with Gaussian noise; the first-order spacing of a hexagonal lattice is
/// d = a·√3/2 (three equivalent spot pairs 60° apart). Within 0.5%.
#[test]
fn noisy_hexagonal_lattice_of_columns() {
    let (a, rot) = (9.4, 12f64.to_radians());
    let (w, h) = (256usize, 256usize);
    let a1 = (a * rot.cos(), a * rot.sin());
    let a2 = (a * (rot + PI / 3.0).cos(), a * (rot + PI / 3.0).sin());
    let mut z = vec![0.0f64; w * h];
    for i in -60i32..60 {
        for j in -60i32..60 {
            let (x, y) = (
                i as f64 * a1.0 + j as f64 * a2.0,
                i as f64 * a1.1 + j as f64 * a2.1,
            );
            if x < -5.0 || y < -5.0 || x > w as f64 + 5.0 || y > h as f64 + 5.0 {
                continue;
            }
            for r in (y as i64 - 5).max(0)..(y as i64 + 6).min(h as i64) {
                for c in (x as i64 - 5).max(0)..(x as i64 + 6).min(w as i64) {
                    let d2 = (c as f64 - x).powi(2) + (r as f64 - y).powi(2);
                    z[r as usize * w + c as usize] += 500.0 * (-d2 / (2.0 * 1.6 * 1.6)).exp();
                }
            }
        }
    }
    let mut rng = image_support::Lcg(11);
    let noise: Vec<f64> = (0..w * h).map(|_| 60.0 * rng.normal()).collect();
    let img = image(w, h, Some((0.02, "nm")), "counts", |c, r| {
        100.0 + z[r * w + c] + noise[r * w + c]
    });
    let out = run1("lattice.fft", &img, json!({ "spots": 3 }));
    let d_expected = 9.4 * 3f64.sqrt() / 2.0 * 0.02;
    for k in 1..=3 {
        let d = num(&out, &format!("spot{k}.d"));
        assert!(
            (d - d_expected).abs() / d_expected < 0.005,
            "spot {k}: {d} vs {d_expected}"
        );
    }
    for pair in ["1_2", "1_3", "2_3"] {
        let ang = num(&out, &format!("angle.{pair}"));
        assert!((ang - 60.0).abs() < 1.0, "angle {pair}: {ang}");
    }
}
