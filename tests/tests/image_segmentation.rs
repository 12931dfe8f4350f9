//! Reference checks of thresholding, labelling, watershed splitting and particle measurement.

mod image_support;

use image_support::{column, image, num, run, run1};
use serde_json::json;
use stages::stage::PortValue;
use stages::{Artifact, InputFile, Value};
use std::f64::consts::PI;

fn data_path(rel: &str) -> std::path::PathBuf {
    std::path::PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("data")
        .join(rel)
}

/// Source: scikit-image 0.24.0 `threshold_otsu` (numpy 2.1.3), values committed by
/// tests/refgen/otsu_values.py in tests/data/otsu_values.json for the images it wrote:
/// four on a 256-bin histogram of the range, one 16-bit image one bin per integer level.
#[test]
fn otsu_threshold_matches_scikit_image() {
    let text = std::fs::read_to_string(data_path("otsu_values.json")).unwrap();
    let doc: serde_json::Value = serde_json::from_str(&text).unwrap();
    let values = doc["values"].as_object().unwrap();
    assert_eq!(values.len(), 5);
    for (name, v) in values {
        let file = v["file"].as_str().unwrap();
        let bytes = std::fs::read(data_path(file)).unwrap();
        let f = Artifact::new(Value::File(InputFile {
            name: file.into(),
            bytes,
        }));
        let img = run1("image.import", &f, json!({}));
        // 256 bins over the range, or one bin per integer level (bins = 0) for the uint16 case.
        let bins = v["bins"].as_u64().unwrap_or(256);
        let mask = run1(
            "particles.threshold",
            &img,
            json!({ "method": "otsu", "bins": bins }),
        );
        let t = num(&mask, "threshold");
        let expected = v["threshold"].as_f64().unwrap();
        let bin = v["bin_width"].as_f64().unwrap();
        // Same histogram and criterion: the same bin centre, up to float rounding.
        assert!(
            (t - expected).abs() <= 1e-6 * bin.max(1.0),
            "{name}: {t} vs scikit-image {expected}"
        );
    }
}

/// Draws discs (value 1000 on 100) with pixels whose centre lies within r of (cx, cy).
fn discs(w: usize, h: usize, list: &[(f64, f64, f64)], pixel: Option<(f64, &str)>) -> Artifact {
    image(w, h, pixel, "counts", |c, r| {
        let inside = list
            .iter()
            .any(|&(cx, cy, rad)| (c as f64 - cx).powi(2) + (r as f64 - cy).powi(2) <= rad * rad);
        if inside {
            1000.0
        } else {
            100.0
        }
    })
}

/// Analytic: area πr², equivalent diameter 2r. Discretisation tolerance (stated): the
/// digital disc's pixel count differs from πr² by at most half a pixel per unit of perimeter,
/// so |A − πr²| ≤ πr (relative 1/r) and |ECD − 2r| ≤ 1 px. Feret diameters of the pixel
/// corners' hull lie between 2r and 2r + √2 px (pixel squares add up to half a diagonal at
/// each end).
#[test]
fn discs_of_known_radius_are_measured() {
    let px = 2.0; // nm per pixel
    let list = [
        (30.0, 30.0, 5.0),
        (80.0, 35.0, 8.0),
        (40.0, 90.0, 12.0),
        (110.0, 110.0, 20.0),
        (0.0, 70.0, 6.0),
        (140.0, 20.0, 0.5),
    ];
    let img = discs(150, 140, &list, Some((px, "nm")));
    let mask = run1("particles.threshold", &img, json!({}));
    let labels = run1(
        "particles.label",
        &mask,
        json!({ "connectivity": 8, "exclude_border": true, "min_area": 5 }),
    );
    assert_eq!(num(&labels, "count"), 4.0);
    assert_eq!(num(&labels, "excluded_border"), 1.0);
    assert_eq!(num(&labels, "excluded_small"), 1.0);
    let m = run(
        "particles.measure",
        vec![PortValue::One(&labels), PortValue::One(&img)],
        json!({}),
    )
    .unwrap();
    let area = column(&m, "area");
    let ecd = column(&m, "equivalent_diameter");
    let fmax = column(&m, "feret_max");
    let fmin = column(&m, "feret_min");
    let circ = column(&m, "circularity");
    let cx = column(&m, "centroid_x");
    let cy = column(&m, "centroid_y");
    let mean_i = column(&m, "mean_intensity");
    // Labels are numbered in raster order of first pixel: (30,30), (80,35), (40,90), (110,110).
    for (k, &(x0, y0, r)) in list[..4].iter().enumerate() {
        let a = area[k] / (px * px);
        assert!(
            (a - PI * r * r).abs() <= PI * r,
            "r={r}: {a} px² vs π r² = {}",
            PI * r * r
        );
        assert!(
            (ecd[k] / px - 2.0 * r).abs() <= 1.0,
            "r={r}: ECD {}",
            ecd[k] / px
        );
        for f in [fmax[k], fmin[k]] {
            let f = f / px;
            assert!(
                f >= 2.0 * r - 1e-9 && f <= 2.0 * r + 2f64.sqrt() + 1e-9,
                "r={r}: Feret {f}"
            );
        }
        // Circularity of a disc is 1 (analytic); the digital Crofton perimeter carries a
        // discretisation bias of order one pixel, so the stated tolerance is 1/r.
        eprintln!("r={r}: circularity {}", circ[k]);
        assert!(
            (circ[k] - 1.0).abs() < 1.0 / r,
            "r={r}: circularity {}",
            circ[k]
        );
        // Centroid: the disc centre (pixel centres at c + 0.5), exact by symmetry.
        assert!((cx[k] - (x0 + 0.5) * px).abs() < 1e-9 && (cy[k] - (y0 + 0.5) * px).abs() < 1e-9);
        assert_eq!(mean_i[k], 1000.0);
    }
    assert_eq!(
        m.result("threshold_method").map(|r| r.value.clone()),
        Some(stages::Scalar::Text("otsu".into()))
    );
    assert_eq!(num(&m, "excluded_border"), 1.0);
}

/// Two overlapping discs of radius 15 px, centres 22 px apart: one component without
/// splitting, two after the distance-transform watershed, each near its own disc centre
/// and each holding about half the union (analytic by symmetry).
#[test]
fn watershed_splits_two_overlapping_discs() {
    let list = [(40.0, 40.0, 15.0), (62.0, 40.0, 15.0)];
    let img = discs(100, 80, &list, None);
    let mask = run1("particles.threshold", &img, json!({}));
    let whole = run1("particles.label", &mask, json!({}));
    assert_eq!(num(&whole, "count"), 1.0);
    let split = run1(
        "particles.label",
        &mask,
        json!({ "split": true, "smooth": 1.0, "min_height": 1.0 }),
    );
    assert_eq!(num(&split, "count"), 2.0);
    let m = run(
        "particles.measure",
        vec![PortValue::One(&split), PortValue::Missing],
        json!({}),
    )
    .unwrap();
    let cx = column(&m, "centroid_x");
    let area = column(&m, "area");
    assert!(
        (cx[0] - 40.5).abs() < 2.0 && (cx[1] - 62.5).abs() < 2.0,
        "{cx:?}"
    );
    assert!((area[0] - area[1]).abs() <= 0.05 * area[0], "{area:?}");
    // A lone disc must not be over-split.
    let one = discs(60, 60, &[(30.0, 30.0, 14.0)], None);
    let l1 = run1(
        "particles.label",
        &run1("particles.threshold", &one, json!({})),
        json!({ "split": true }),
    );
    assert_eq!(num(&l1, "count"), 1.0);
}

/// A chain of three touching discs of different radii (12, 9 and 15 px) splits into three,
/// each particle's area within 10% of its disc's share (the cut follows the neck).
#[test]
fn watershed_splits_a_chain_of_three() {
    let list = [(25.0, 30.0, 12.0), (44.0, 30.0, 9.0), (66.0, 32.0, 15.0)];
    let img = discs(100, 64, &list, Some((1.0, "nm")));
    let mask = run1("particles.threshold", &img, json!({}));
    let split = run1("particles.label", &mask, json!({ "split": true }));
    assert_eq!(num(&split, "count"), 3.0);
    let m = run(
        "particles.measure",
        vec![PortValue::One(&split), PortValue::One(&img)],
        json!({}),
    )
    .unwrap();
    let cx = column(&m, "centroid_x");
    let mut order: Vec<usize> = (0..3).collect();
    order.sort_by(|&a, &b| cx[a].total_cmp(&cx[b]));
    let area = column(&m, "area");
    for (k, &(_, _, r)) in list.iter().enumerate() {
        let a = area[order[k]];
        assert!(
            (a - PI * r * r).abs() < 0.1 * PI * r * r,
            "disc {k}: {a} vs {}",
            PI * r * r
        );
    }
}

/// Gathered over two images: N, exclusions and the count per area (N / total area; analytic),
/// and the warning below 100 particles.
#[test]
fn distribution_over_images_reports_n_and_warns() {
    let a = discs(
        100,
        100,
        &[(25.0, 25.0, 6.0), (70.0, 60.0, 9.0), (0.0, 50.0, 5.0)],
        Some((1.5, "nm")),
    );
    let b = discs(100, 100, &[(30.0, 70.0, 7.0)], Some((1.5, "nm")));
    let mut tables = Vec::new();
    for img in [&a, &b] {
        let l = run1(
            "particles.label",
            &run1("particles.threshold", img, json!({})),
            json!({}),
        );
        tables.push(
            run(
                "particles.measure",
                vec![PortValue::One(&l), PortValue::One(img)],
                json!({}),
            )
            .unwrap(),
        );
    }
    let port = PortValue::Many(vec![("a", &tables[0]), ("b", &tables[1])]);
    let d = run("particles.distribution", vec![port], json!({})).unwrap();
    assert_eq!(num(&d, "n"), 3.0);
    assert_eq!(num(&d, "excluded_border"), 1.0);
    let area = 2.0 * 100.0 * 100.0 * 1.5 * 1.5;
    assert!((num(&d, "count_per_area") - 3.0 / area).abs() < 1e-15);
    assert!(d.notes.iter().any(|n| n.text.contains("fewer than 100")));
    let counts = column(&d, "count");
    assert_eq!(counts.iter().sum::<f64>(), 3.0);
}

/// Analytic: an adaptive threshold finds dim and bright discs on a steep ramp that defeats
/// one global threshold; a morphological opening removes single-pixel specks.
#[test]
fn adaptive_threshold_and_opening() {
    let img = image(120, 60, None, "counts", |c, r| {
        let ramp = 20.0 * c as f64;
        let disc = |x: f64, y: f64| (c as f64 - x).powi(2) + (r as f64 - y).powi(2) <= 49.0;
        let speck = (c, r) == (60, 10);
        ramp + if disc(20.0, 30.0) || disc(95.0, 30.0) || speck {
            300.0
        } else {
            0.0
        }
    });
    let mask = run1(
        "particles.threshold",
        &img,
        json!({ "method": "adaptive_mean", "window": 31, "offset": 50 }),
    );
    let opened = run1(
        "particles.morphology",
        &mask,
        json!({ "operation": "open", "shape": "disk", "radius": 1 }),
    );
    let l = run1("particles.label", &opened, json!({}));
    assert_eq!(num(&l, "count"), 2.0);
}
