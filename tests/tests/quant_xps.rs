//! Reference checks of the photoelectron stages: analytic constructions and worked
//! examples (arithmetic beside each check).

use stages::stage::{Inputs, PortValue};
use stages::{
    Artifact, Axis, FitResult, FitStatistics, FittedPeak, Measurement, Record, Spectrum, Value,
};

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

/// Analytic UPS cutoff on a kinetic-energy axis (0.01-eV steps): baseline 10 counts
/// below E_c, a straight rise 10 + 2000 (E − E_c) up to E_c + 0.3 eV, then an
/// exponential tail. The extrapolated cutoff is E_c exactly.
fn cutoff_spectrum(ec: f64, kinetic: bool, ef_kin: f64) -> Spectrum {
    let ke: Vec<f64> = (0..=2150).map(|i| 5.0 + i as f64 * 0.01).collect();
    let y: Vec<f64> = ke
        .iter()
        .map(|&e| {
            if e < ec {
                10.0
            } else if e <= ec + 0.3 {
                10.0 + 2000.0 * (e - ec)
            } else {
                10.0 + 600.0 * (-(e - ec - 0.3) / 1.5).exp()
            }
        })
        .collect();
    if kinetic {
        Spectrum::new(
            ke,
            y,
            Axis::new("kinetic energy", "eV"),
            Axis::new("intensity", "counts"),
        )
    } else {
        let be = ke.iter().map(|k| ef_kin - k).collect();
        Spectrum::new(
            be,
            y,
            Axis::new("binding energy", "eV"),
            Axis::new("intensity", "counts"),
        )
    }
}

#[test]
fn work_function_on_a_synthetic_cutoff() {
    // He I, hν = 21.22 eV; sample work function 4.50 eV; sample biased so the Fermi
    // edge of the reference metal is at 26.22 eV kinetic energy. Then the cutoff is at
    // E_c = E_F − (hν − φ) = 26.22 − 16.72 = 9.50 eV and φ = hν − (E_F − E_c) = 4.50 eV.
    let s = cutoff_spectrum(9.50, true, 26.22);
    let a = Artifact::new(Value::Spectrum(s));
    let out = run(
        "ups.work_function",
        serde_json::json!({"photon_energy": 21.22, "fermi_level": 26.22}),
        vec![PortValue::One(&a), PortValue::Missing],
    );
    let (phi, _) = num(&out, "work_function");
    assert!((phi - 4.50).abs() < 1e-9, "{phi}");
    let (c, _) = num(&out, "cutoff");
    assert!((c - 9.50).abs() < 1e-9);
    // Same spectrum on a binding-energy axis (BE = E_F − KE): cutoff at 16.72 eV,
    // E_F = 0, φ = 21.22 − 16.72 = 4.50 eV; here E_F comes from a connected reference.
    let s = cutoff_spectrum(9.50, false, 26.22);
    let a = Artifact::new(Value::Spectrum(s));
    let fermi = Artifact::new(Value::Summary).with_results(vec![Record::number(
        "fermi_level",
        0.0,
        Some(0.01),
        "eV",
    )]);
    let out = run(
        "ups.work_function",
        serde_json::json!({"photon_energy": 21.22}),
        vec![PortValue::One(&a), PortValue::One(&fermi)],
    );
    let (phi, u) = num(&out, "work_function");
    assert!((phi - 4.50).abs() < 1e-9, "{phi}");
    // The line is exact, so the uncertainty is that of E_F alone: 0.01 eV.
    assert!((u.unwrap() - 0.01).abs() < 1e-6, "{u:?}");
}

#[test]
fn valence_band_maximum_of_a_linear_leading_edge() {
    // Binding-energy axis: zero intensity (baseline 5) from E_F down to 1.20 eV, then a
    // straight rise 5 + 400 (BE − 1.20) up to 2.0 eV and a plateau: VBM = 1.20 eV.
    let be: Vec<f64> = (0..=600).map(|i| -1.0 + i as f64 * 0.01).collect();
    let y = be
        .iter()
        .map(|&e| {
            if e < 1.2 {
                5.0
            } else if e <= 2.0 {
                5.0 + 400.0 * (e - 1.2)
            } else {
                325.0
            }
        })
        .collect();
    let s = Spectrum::new(
        be,
        y,
        Axis::new("binding energy", "eV"),
        Axis::new("intensity", "counts"),
    );
    let a = Artifact::new(Value::Spectrum(s));
    let out = run(
        "ups.valence_band_maximum",
        serde_json::json!({"edge": {"search_range": [-1, 3]}}),
        vec![PortValue::One(&a), PortValue::Missing],
    );
    let (v, _) = num(&out, "valence_band_maximum");
    assert!((v - 1.20).abs() < 1e-9, "{v}");
}

#[test]
fn atomic_percent_with_normalisation_correlation() {
    // Areas (counts·eV) C 1s 10000 ± 100, O 1s 14650 ± 150 with Scofield-type RSFs
    // C 1s 1.00 and O 1s 2.93 given explicitly:
    //   A/S: C 10000, O 5000, T = 15000 → C 66.667 %, O 33.333 %.
    // Two components: X_C = a/(a + b), ∂X_C/∂a = b/T² = 5000/15000² = 2.2222e-5,
    //   ∂X_C/∂b = −a/T² = −4.4444e-5, u(a) = 100, u(b) = 150/2.93 = 51.195;
    //   u(X_C) = √((2.2222e-5·100)² + (4.4444e-5·51.195)²) = √(4.938e-6 + 5.177e-6)
    //   = 3.1805e-3 → 0.31805 %, the same for O (X_O = 1 − X_C).
    let c = Artifact::new(Value::Summary).with_results(vec![Record::number(
        "area",
        10000.0,
        Some(100.0),
        "counts·eV",
    )]);
    let o = Artifact::new(Value::Summary).with_results(vec![Record::number(
        "area",
        14650.0,
        Some(150.0),
        "counts·eV",
    )]);
    let out = run(
        "xps.atomic_percent",
        serde_json::json!({"regions": {"c1s": {"element": "C", "level": "1s", "rsf": 1.0},
                                        "o1s": {"element": "O", "level": "1s", "rsf": 2.93}}}),
        vec![PortValue::Many(vec![("c1s", &c), ("o1s", &o)])],
    );
    let (xc, uc) = num(&out, "atomic_percent.C");
    let (xo, uo) = num(&out, "atomic_percent.O");
    assert!((xc - 66.6667).abs() < 1e-3 && (xo - 33.3333).abs() < 1e-3);
    assert!((uc.unwrap() - 0.31805).abs() < 1e-4, "{uc:?}");
    assert!((uo.unwrap() - uc.unwrap()).abs() < 1e-12);
    // The built-in table gives the same numbers for C 1s / O 1s (rows of
    // stages/data/xps_sensitivity.csv, set scofield_al_ka).
    let out2 = run(
        "xps.atomic_percent",
        serde_json::json!({"regions": {"c1s": {"element": "C", "level": "1s"}, "o1s": {"element": "O", "level": "1s"}}}),
        vec![PortValue::Many(vec![("c1s", &c), ("o1s", &o)])],
    );
    assert!((num(&out2, "atomic_percent.C").0 - xc).abs() < 1e-12);
}

fn peak(name: &str, area: f64) -> FittedPeak {
    let m = |v| Measurement::new(v, None, "");
    FittedPeak {
        name: name.into(),
        shape: "gaussian".into(),
        center: m(0.0),
        area: m(area),
        fwhm: m(1.0),
        height: m(1.0),
    }
}

#[test]
fn component_fractions_with_correlated_areas() {
    // Areas 600 and 400 with covariance [[100, −30], [−30, 64]]:
    // f1 = 0.6; J = [(1 − 0.6)/1000, −0.6/1000] = [4e-4, −6e-4];
    // var = 16e-8·100 + 36e-8·64 + 2·(4e-4)(−6e-4)(−30) = 1.6e-5 + 2.304e-5 + 1.44e-5
    //     = 5.344e-5 → u(f1) = 7.3103e-3.
    let fit = FitResult {
        model: "2 peaks".into(),
        parameters: vec![],
        correlation: vec![],
        peaks: vec![peak("a", 600.0), peak("b", 400.0)],
        area_covariance: vec![100.0, -30.0, -30.0, 64.0],
        spectrum: Spectrum::new(
            vec![0.0, 1.0],
            vec![0.0, 0.0],
            Axis::new("binding energy", "eV"),
            Axis::new("intensity", "counts"),
        ),
        statistics: FitStatistics {
            chi_square: 1.0,
            reduced_chi_square: 1.0,
            r_squared: 1.0,
            points: 2,
            free_parameters: 0,
            iterations: 0,
            converged: true,
            reason: String::new(),
            weighted: false,
        },
    };
    let a = Artifact::new(Value::Fit(fit));
    let out = run(
        "xps.fractions",
        serde_json::json!({}),
        vec![PortValue::One(&a)],
    );
    let (f, u) = num(&out, "fraction.a");
    assert!((f - 0.6).abs() < 1e-12);
    assert!((u.unwrap() - 5.344e-5f64.sqrt()).abs() < 1e-9, "{u:?}");
}

#[test]
fn fermi_level_of_a_fermi_dirac_edge_feeds_the_work_function() {
    // Metal reference at 300 K on a binding-energy axis: y = 10 + 990·f(BE), with the
    // Fermi–Dirac occupancy f = 1/(1 + exp(−BE/kT)), kT = 0.025852 eV, E_F at BE = 0.
    // f(−x) = 1 − f(x), so on a grid symmetric about 0 the least-squares line through
    // the 20–80 % points passes through (0, 505), the half height between the baseline
    // (10, mean of −1…−0.5 eV) and the plateau (1000, mean of 1.5…2 eV): E_F = 0.
    let kt = 0.025852;
    let be: Vec<f64> = (0..=600).map(|i| -1.0 + i as f64 * 0.005).collect();
    let y = be
        .iter()
        .map(|e| 10.0 + 990.0 / (1.0 + (-e / kt).exp()))
        .collect();
    let s = Spectrum::new(
        be,
        y,
        Axis::new("binding energy", "eV"),
        Axis::new("intensity", "counts"),
    );
    let a = Artifact::new(Value::Spectrum(s));
    let ef = run(
        "ups.fermi_level",
        serde_json::json!({"plateau_range": [1.5, 2.0], "edge": {"baseline_range": [-1.0, -0.5]}}),
        vec![PortValue::One(&a)],
    );
    let (e, _) = num(&ef, "fermi_level");
    assert!(e.abs() < 1e-6, "{e}");
    // Connected to the work-function stage (BE axis, cutoff at 16.72 eV): φ = 4.50 eV.
    let cut = Artifact::new(Value::Spectrum(cutoff_spectrum(9.50, false, 26.22)));
    let out = run(
        "ups.work_function",
        serde_json::json!({"photon_energy": 21.22}),
        vec![PortValue::One(&cut), PortValue::One(&ef)],
    );
    assert!((num(&out, "work_function").0 - 4.50).abs() < 1e-5);
}
