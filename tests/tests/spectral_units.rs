//! Physical constants, axis conversions, the reference table and the calibration
//! stages, checked against CODATA 2018 and the stated sources.
mod spectral_common;
use spectral_common::*;
use stages::units;

#[test]
fn photon_energy_against_codata_2018() {
    // NIST CODATA 2018 (exact since the 2019 SI): hc = 1239.841 984... eV nm, so a
    // 1 nm photon carries 1239.84198 eV.
    assert!((units::ev_from_nm(1.0) - 1_239.841_98).abs() < 5e-6);
    assert!((units::HC_EV_NM - 1_239.841_984).abs() < 1e-6);
    // NIST CODATA 2018 energy relationships (from memory of the NIST tables):
    // 1 eV ↔ 8065.543 937 cm⁻¹ and 1 eV ↔ 2.417 989 242e14 Hz.
    let nm = units::nm_from_ev(1.0);
    assert!((units::wavenumber_from_nm(nm) - 8_065.543_937).abs() < 1e-5);
    assert!((units::hz_from_nm(nm) / 2.417_989_242e14 - 1.0).abs() < 1e-9);
}

#[test]
fn convert_axis_stage_wavelength_to_energy_keeps_order() {
    let x = vec![400.0, 500.0, 620.0];
    let a = spectrum(
        x.clone(),
        vec![0.1, 0.5, 0.2],
        "wavelength",
        "nm",
        "absorbance",
        "",
    );
    let out = run("convert.axis", &[&a], serde_json::json!({ "to": "energy" })).unwrap();
    let s = out.spectrum().unwrap();
    for (e, l) in s.x.iter().zip(&x) {
        // E = hc/λ with hc from CODATA 2018.
        assert!((e - 1_239.841_984 / l).abs() < 1e-9);
    }
    assert_eq!(s.y, vec![0.1, 0.5, 0.2]);
    // Wavenumber of 500 nm is 20 000 cm⁻¹ (10⁷/λ).
    let out = run(
        "convert.axis",
        &[&a],
        serde_json::json!({ "to": "wavenumber" }),
    )
    .unwrap();
    assert!((out.spectrum().unwrap().x[1] - 20_000.0).abs() < 1e-9);
}

#[test]
fn absorbance_stage_from_percent_transmittance() {
    // A = −log10 T (IUPAC Gold Book): 50 %T → 0.30103.
    let a = spectrum(
        vec![1.0, 2.0],
        vec![50.0, 0.1],
        "wavelength",
        "nm",
        "transmittance",
        "%",
    );
    let out = run("convert.absorbance", &[&a], serde_json::json!({})).unwrap();
    let y = &out.spectrum().unwrap().y;
    // −log10(0.5) = log10 2.
    assert!((y[0] - std::f64::consts::LOG10_2).abs() < 1e-15);
    assert!((y[1] - 3.0).abs() < 1e-14);
}

#[test]
fn reference_table_rows_have_sources_and_match_them() {
    use stages::reference::lookup;
    assert_eq!(stages::reference::table_error(), None);
    for r in stages::reference::table() {
        assert!(!r.source.trim().is_empty(), "{} has no source", r.name);
    }
    // Gottlieb, Kotlyar & Nudelman, J. Org. Chem. 1997, 62, 7512, Table 1 (1H NMR data),
    // row "solvent residual peak": CDCl3 7.26, (CD3)2SO 2.50, D2O 4.79, (CD3)2CO 2.05,
    // CD3OD 3.31, C6D6 7.16, CD3CN 1.94 ppm. Checked against a reproduction of that table.
    for (name, v) in [
        ("chcl3_in_cdcl3_1h", 7.26),
        ("dmso_d5_in_dmso_d6_1h", 2.50),
        ("hdo_in_d2o_1h", 4.79),
        ("acetone_d5_in_acetone_d6_1h", 2.05),
        ("chd2od_in_cd3od_1h", 3.31),
        ("c6d5h_in_c6d6_1h", 7.16),
        ("chd2cn_in_cd3cn_1h", 1.94),
    ] {
        let r = lookup(name).unwrap();
        assert_eq!(r.value, v, "{name}");
        assert!(r.source.contains("Gottlieb") && r.source.contains("Table 1"));
        assert!(r.source.contains("checked") && !r.source.contains("unchecked"));
    }
    // Same paper, Table 2 (13C): these values are FROM MEMORY; Table 2 could not be
    // consulted, and the rows say "unchecked".
    for (name, v) in [
        ("cdcl3_13c", 77.16),
        ("dmso_d6_13c", 39.52),
        ("cd3od_13c", 49.00),
        ("c6d6_13c", 128.06),
    ] {
        let r = lookup(name).unwrap();
        assert_eq!(r.value, v, "{name}");
        assert!(r.source.contains("Gottlieb") && r.source.contains("unchecked"));
    }
    // ISO 15472 reference binding energies for monochromated Al Kα: Au 4f7/2 83.96,
    // Ag 3d5/2 368.21, Cu 2p3/2 932.62 eV, as quoted with Seah, Gilmore & Beamson,
    // Surf. Interface Anal. 26 (1998) 642 and Seah, Surf. Interface Anal. 31 (2001) 721
    // (checked against that quotation; the standard itself was not read).
    for (name, v) in [
        ("au_4f7_2", 83.96),
        ("ag_3d5_2", 368.21),
        ("cu_2p3_2", 932.62),
    ] {
        let r = lookup(name).unwrap();
        assert_eq!(r.value, v);
        assert!(r.source.contains("ISO 15472") && r.source.contains("Seah"));
    }
    // Common practice: excitation energies.
    for (name, v) in [
        ("al_ka", 1486.6),
        ("al_ka_mono", 1486.7),
        ("mg_ka", 1253.6),
        ("he_i", 21.22),
        ("he_ii", 40.81),
    ] {
        let r = lookup(name).unwrap();
        assert_eq!((r.value, r.kind.as_str()), (v, "excitation"));
        assert!(r.source.contains("common practice"));
    }
}

#[test]
fn nmr_referencing_to_residual_chloroform() {
    // A singlet recorded at 7.31 ppm is shifted to CHCl3 in CDCl3, 7.26 ppm (Gottlieb
    // et al. 1997).
    let x: Vec<f64> = (0..1000).map(|i| 10.0 - 0.01 * i as f64).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|v| 100.0 / (1.0 + ((v - 7.31) / 0.01f64).powi(2)))
        .collect();
    let a = spectrum(x, y, "chemical shift", "ppm", "intensity", "");
    let out = run(
        "calibrate.shift",
        &[&a],
        serde_json::json!({ "near": 7.3, "window": 0.1, "to": "chcl3_in_cdcl3_1h" }),
    )
    .unwrap();
    let shift = out.result("shift").unwrap().as_number().unwrap();
    assert!((shift + 0.05).abs() < 1e-6, "{shift}");
    let stage = stages::find("calibrate.shift").unwrap();
    let c = stage
        .resolve_options(
            &serde_json::json!({ "near": 7.3, "window": 0.1, "to": "chcl3_in_cdcl3_1h" }),
        )
        .unwrap();
    assert!(stage.methods(&c).contains("[gottlieb1997]"));
}

#[test]
fn binding_energy_from_kinetic_energy_with_named_source() {
    // BE = hν − KE − φ with hν(al_ka_mono) = 1486.7 eV and φ = 4.5 eV: KE 1197.4 eV
    // gives BE 284.8 eV (arithmetic).
    let a = spectrum(
        vec![1190.0, 1197.4, 1200.0],
        vec![1.0, 2.0, 3.0],
        "kinetic energy",
        "eV",
        "intensity",
        "counts",
    );
    let out = run(
        "calibrate.binding_energy",
        &[&a],
        serde_json::json!({ "source": "al_ka_mono", "work_function": 4.5 }),
    )
    .unwrap();
    let s = out.spectrum().unwrap();
    assert!((s.x[1] - 284.8).abs() < 1e-9);
    assert!(s.x[0] > s.x[2], "order of points kept");
    assert_eq!(s.x_axis.quantity, "binding energy");
}

#[test]
fn polynomial_calibration_through_iso_references() {
    // Synthetic spectrometer error: measured = 0.15 + 1.0004·true at the three ISO 15472
    // peaks. A linear correction through (measured, true) maps them back exactly.
    let truths = [83.96, 368.21, 932.62];
    let pairs: Vec<serde_json::Value> = truths
        .iter()
        .zip(["au_4f7_2", "ag_3d5_2", "cu_2p3_2"])
        .map(|(t, n)| serde_json::json!({ "measured": 0.15 + 1.0004 * t, "true_value": n }))
        .collect();
    let x: Vec<f64> = (0..1000).map(|i| i as f64).collect();
    let a = spectrum(
        x,
        vec![1.0; 1000],
        "binding energy",
        "eV",
        "intensity",
        "counts",
    );
    let out = run(
        "calibrate.polynomial",
        &[&a],
        serde_json::json!({ "pairs": pairs, "order": 1 }),
    )
    .unwrap();
    for k in 1..=3 {
        let r = out
            .result(&format!("residual.{k}"))
            .unwrap()
            .as_number()
            .unwrap();
        assert!(r.abs() < 1e-9, "residual {k}: {r}");
    }
    let c1 = out.result("coefficient.1").unwrap().as_number().unwrap();
    assert!((c1 - 1.0 / 1.0004).abs() < 1e-12);
    assert!(out.result("residual_rms").is_some());
}
