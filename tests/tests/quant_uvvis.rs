//! Reference checks of the UV-vis stages against analytic constructions and worked
//! examples (arithmetic written beside each check).

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Axis, Spectrum, Value};

const HC: f64 = stages::quant_util::HC_EV_NM; // exact SI h, c, e (CODATA 2018)

fn run(stage: &str, opts: serde_json::Value, ports: Vec<PortValue>) -> Artifact {
    let s = stages::find(stage).unwrap();
    let o = s.resolve_options(&opts).unwrap();
    s.run(
        &Inputs {
            item: Some("x"),
            ports,
        },
        &o,
    )
    .unwrap()
}

fn num(a: &Artifact, name: &str) -> (f64, Option<f64>) {
    let r = a.result(name).unwrap_or_else(|| panic!("no result {name}"));
    (r.as_number().unwrap(), r.uncertainty)
}

fn spectrum(x: Vec<f64>, y: Vec<f64>, xq: &str, xu: &str) -> Artifact {
    Artifact::new(Value::Spectrum(Spectrum::new(
        x,
        y,
        Axis::new(xq, xu),
        Axis::new("absorbance", ""),
    )))
}

/// Absorbance on a 1-nm wavelength grid from α(E) = K (E − Eg)^n / E above the gap
/// (0 below), the analytic form behind the Tauc plot; optionally saturated as
/// A' = 3·tanh(A/3) to mimic stray light at high absorbance.
fn edge(eg: f64, n: f64, k: f64, from_nm: usize, to_nm: usize, saturate: bool) -> Artifact {
    let x: Vec<f64> = (from_nm..=to_nm).map(|l| l as f64).collect();
    let y = x
        .iter()
        .map(|l| {
            let e = HC / l;
            let a = if e > eg {
                k * (e - eg).powf(n) / e
            } else {
                0.0
            };
            if saturate {
                3.0 * (a / 3.0).tanh()
            } else {
                a
            }
        })
        .collect();
    spectrum(x, y, "wavelength", "nm")
}

#[test]
fn tauc_direct_allowed_gap_recovered() {
    // Analytic edge with Eg = 2.350 eV, n = 1/2: (αhν)² = K²(hν − Eg) exactly; the
    // automatic window must give Eg within 0.01 eV (issue 4 acceptance).
    for saturate in [false, true] {
        let a = edge(2.35, 0.5, 4.0, 300, 800, saturate);
        let out = run(
            "uvvis.tauc",
            serde_json::json!({"transition": "direct_allowed"}),
            vec![PortValue::One(&a)],
        );
        let (eg, u) = num(&out, "band_gap");
        eprintln!(
            "direct, saturate={saturate}: Eg = {eg} ± {u:?} eV, window {:?}–{:?} eV",
            num(&out, "fit_from").0,
            num(&out, "fit_to").0
        );
        assert!((eg - 2.35).abs() < 0.01, "saturate={saturate}: Eg = {eg}");
        assert!(u.unwrap() < 0.01);
        let s = out.spectrum().unwrap();
        assert_eq!(s.x_axis.unit, "eV");
        assert!(s.curves.iter().any(|c| c.name == "Tauc line"));
    }
}

#[test]
fn tauc_indirect_allowed_gap_recovered() {
    // Analytic edge with Eg = 1.800 eV, n = 2: (αhν)^(1/2) = √K (hν − Eg) exactly.
    for saturate in [false, true] {
        let a = edge(1.80, 2.0, 1.5, 400, 1000, saturate);
        let out = run(
            "uvvis.tauc",
            serde_json::json!({"transition": "indirect_allowed"}),
            vec![PortValue::One(&a)],
        );
        let (eg, u) = num(&out, "band_gap");
        eprintln!(
            "indirect, saturate={saturate}: Eg = {eg} ± {u:?} eV, window {:?}–{:?} eV",
            num(&out, "fit_from").0,
            num(&out, "fit_to").0
        );
        assert!((eg - 1.80).abs() < 0.01, "saturate={saturate}: Eg = {eg}");
    }
}

#[test]
fn tauc_refuses_a_missing_transition_type() {
    let s = stages::find("uvvis.tauc").unwrap();
    let e = s.resolve_options(&serde_json::json!({})).unwrap_err();
    assert!(e.message.contains("required"));
}

#[test]
fn plasmon_fwhm_of_an_analytic_lorentzian() {
    // L(λ) = H / (1 + ((λ − c)/γ)²) has FWHM = 2γ exactly: c = 520 nm, γ = 40 nm →
    // FWHM 80 nm; reference band at 515 nm → shift +5 nm. Linear interpolation of the
    // half-maximum crossings on a 0.5-nm grid is good to well below 0.01 nm here.
    let lor = |c: f64| {
        let x: Vec<f64> = (0..=600).map(|i| 400.0 + i as f64 * 0.5).collect();
        let y = x
            .iter()
            .map(|l| 0.8 / (1.0 + ((l - c) / 40.0).powi(2)))
            .collect();
        spectrum(x, y, "wavelength", "nm")
    };
    let (a, r) = (lor(520.0), lor(515.0));
    let out = run(
        "uvvis.plasmon",
        serde_json::json!({"baseline": "none"}),
        vec![PortValue::One(&a), PortValue::One(&r)],
    );
    let (f, _) = num(&out, "fwhm");
    assert!((f - 80.0).abs() < 0.01, "{f}");
    let (c, _) = num(&out, "band_centre");
    assert!((c - 520.0).abs() < 1e-3, "{c}");
    let (sh, _) = num(&out, "shift");
    assert!((sh - 5.0).abs() < 1e-3, "{sh}");
}

#[test]
fn onset_of_a_logistic_edge() {
    // A(λ) = 0.05 + 1/(1 + exp((λ − 550)/10)). Steepest point 550 nm, A = 0.55 there.
    // A least-squares line through the 5 points 548..552 nm has intercept 0.55 at 550 nm
    // (the edge is antisymmetric there) and slope f' + f'''·Σx⁴/(6Σx²) with
    // f' = −0.025 /nm, f''' = 1.25e-4 /nm³, Σx⁴/Σx² = 34/10: slope = −0.024 929.
    // It meets the baseline 0.05 (mean over 750–800 nm) at 550 + 0.5/0.024 929 = 570.057 nm.
    let x: Vec<f64> = (400..=800).map(|l| l as f64).collect();
    let y = x
        .iter()
        .map(|l| 0.05 + 1.0 / (1.0 + ((l - 550.0) / 10.0).exp()))
        .collect();
    let a = spectrum(x, y, "wavelength", "nm");
    let out = run(
        "uvvis.onset",
        serde_json::json!({"baseline_range": [750, 800]}),
        vec![PortValue::One(&a)],
    );
    let (on, _) = num(&out, "onset");
    assert!((on - 570.0568).abs() < 0.005, "{on}");
    let (e, _) = num(&out, "onset_energy");
    assert!((e - HC / on).abs() < 1e-12);
}

#[test]
fn beer_lambert_worked_example() {
    // c = A/(εl) = 0.452/(15000 L mol⁻¹ cm⁻¹ × 1.000 cm) = 3.0133e-5 mol/L.
    // u_rel² = (0.004/0.452)² + (300/15000)² + (0.005/1)² = 7.8315e-5 + 4e-4 + 2.5e-5
    //        = 5.0331e-4 → u_rel = 0.022435 → u(c) = 6.7603e-7 mol/L.
    let out = run(
        "uvvis.beer_lambert",
        serde_json::json!({"absorbance_value": 0.452, "absorbance_uncertainty": 0.004, "epsilon": 15000,
                            "epsilon_uncertainty": 300, "path_length": 1.0, "path_length_uncertainty": 0.005}),
        vec![PortValue::Missing],
    );
    let (c, u) = num(&out, "concentration");
    assert!((c - 3.013333e-5).abs() < 1e-10);
    assert!((u.unwrap() - 6.7603e-7).abs() < 1e-10);
}

#[test]
fn absorbance_from_sample_and_reference_intensities() {
    // A = −log10(I/I0): I = 250, I0 = 2500 → 1.000; I = 2500·10^−0.3 → 0.300.
    let x = vec![400.0, 500.0];
    let i = Artifact::new(Value::Spectrum(Spectrum::new(
        x.clone(),
        vec![250.0, 2500.0 * 10f64.powf(-0.3)],
        Axis::new("wavelength", "nm"),
        Axis::new("intensity", "counts"),
    )));
    let i0 = Artifact::new(Value::Spectrum(Spectrum::new(
        x,
        vec![2500.0, 2500.0],
        Axis::new("wavelength", "nm"),
        Axis::new("intensity", "counts"),
    )));
    let out = run(
        "uvvis.absorbance",
        serde_json::json!({"from": "intensity"}),
        vec![PortValue::One(&i), PortValue::One(&i0)],
    );
    let y = &out.spectrum().unwrap().y;
    assert!((y[0] - 1.0).abs() < 1e-12 && (y[1] - 0.3).abs() < 1e-12);
    // λmax of an analytic parabola A = 1 − ((λ − 452.3)/50)² sampled every nm: 452.3 nm.
    let x: Vec<f64> = (400..=500).map(|l| l as f64).collect();
    let y = x
        .iter()
        .map(|l| 1.0 - ((l - 452.3) / 50.0).powi(2))
        .collect();
    let p = run(
        "uvvis.peak",
        serde_json::json!({}),
        vec![PortValue::One(&spectrum(x, y, "wavelength", "nm"))],
    );
    let (lm, _) = num(&p, "lambda_max");
    assert!((lm - 452.3).abs() < 1e-9);
}
