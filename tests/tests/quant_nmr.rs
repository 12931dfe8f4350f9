//! Reference checks of the NMR quantification stages on worked examples whose
//! arithmetic is written out beside each check (our own examples; the equations are
//! the published ones named in each stage).

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Axis, Record, Spectrum, Value};

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

#[test]
fn qnmr_internal_standard_worked_example() {
    // Internal-standard qNMR equation (Holzgrabe, Prog. NMR Spectrosc. 57 (2010) 229):
    //   P_a = (I_a/I_std)(N_std/N_a)(M_a/M_std)(m_std/m_a) P_std
    // Worked example (our own numbers; an aromatic acid analyte, 3 nuclei, against a
    // 2-nuclei olefinic standard):
    //   I_a = 1.9000 ± 0.0040, N_a = 3, M_a = 180.16 ± 0.01 g/mol, m_a = 20.05 ± 0.02 mg
    //   I_std = 1.0000 ± 0.0020, N_std = 2, M_std = 116.07 ± 0.01 g/mol, m_std = 10.02 ± 0.02 mg
    //   P_std = 0.9990 ± 0.0010
    //   I_a/I_std = 1.9; N_std/N_a = 0.666 667; M_a/M_std = 180.16/116.07 = 1.552 167;
    //   m_std/m_a = 10.02/20.05 = 0.499 751
    //   P_a = 1.9 × 0.666 667 × 1.552 167 × 0.499 751 × 0.999 = 0.981 566
    // Uncertainty budget (relative, u/x): 0.004/1.9 = 0.002 105; 0.002/1 = 0.002;
    //   0.01/180.16 = 5.55e-5; 0.01/116.07 = 8.62e-5; 0.02/20.05 = 9.975e-4;
    //   0.02/10.02 = 1.996e-3; 0.001/0.999 = 1.001e-3.
    //   Sum of squares = 4.4321e-6 + 4.0e-6 + 3.1e-9 + 7.4e-9 + 9.950e-7 + 3.9840e-6
    //   + 1.0020e-6 = 1.44237e-5; u_rel = 0.003 798; u(P_a) = 0.981 566 × 0.003 798 = 0.003 728.
    let integrals = Artifact::new(Value::Summary).with_results(vec![
        Record::number("integral.analyte", 1.9, Some(0.004), ""),
        Record::number("integral.standard", 1.0, Some(0.002), ""),
    ]);
    let out = run(
        "nmr.qnmr_purity",
        serde_json::json!({
            "analyte": {"integral": "integral.analyte", "nuclei": 3, "molar_mass": 180.16,
                         "molar_mass_uncertainty": 0.01, "mass": 20.05, "mass_uncertainty": 0.02},
            "standard": {"integral": "integral.standard", "nuclei": 2, "molar_mass": 116.07,
                          "molar_mass_uncertainty": 0.01, "mass": 10.02, "mass_uncertainty": 0.02},
            "standard_purity": 0.999, "standard_purity_uncertainty": 0.001
        }),
        vec![PortValue::One(&integrals)],
    );
    let (p, u) = num(&out, "purity");
    assert!((p - 0.981566).abs() < 1e-6, "{p}");
    assert!((u.unwrap() - 0.003728).abs() < 1e-6, "{u:?}");
    let (r, _) = num(&out, "purity_relative_uncertainty");
    assert!((r - 0.003798).abs() < 1e-6);
    let (b, _) = num(&out, "budget.mass_standard");
    assert!((b - 1.996e-3).abs() < 1e-6);
    let (pp, _) = num(&out, "purity_percent");
    assert!((pp - 98.1566).abs() < 1e-4);
}

#[test]
fn integrals_normalised_to_a_methyl_group() {
    // Analytic spectrum: two Lorentzian lines of equal width w (HWHM 0.002 ppm) with
    // areas 3 : 2 (heights scaled), on a 0.0005-ppm grid. Integrating each over
    // ±0.25 ppm (±125 half-widths) captures (2/π)·atan(125) = 99.49 % of each
    // Lorentzian, the same fraction for both, so the normalised counts are 3 and 2
    // within the truncation asymmetry (< 1e-3). Normalising the first to 3 nuclei
    // must give 2.000 for the second.
    let g = 0.002;
    let lor =
        |x: f64, c: f64, area: f64| area * g / std::f64::consts::PI / ((x - c).powi(2) + g * g);
    let x: Vec<f64> = (0..=8000).map(|i| 4.0 - i as f64 * 0.0005).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|&v| lor(v, 3.0, 3.0) + lor(v, 1.5, 2.0))
        .collect();
    let s = Spectrum::new(
        x,
        y,
        Axis::new("chemical shift", "ppm"),
        Axis::new("intensity", ""),
    );
    let a = Artifact::new(Value::Spectrum(s));
    let out = run(
        "nmr.integrate",
        serde_json::json!({"regions": {"ch3": [2.75, 3.25], "ch2": [1.25, 1.75]},
                           "normalise": {"region": "ch3", "nuclei": 3}}),
        vec![PortValue::One(&a)],
    );
    let (n, _) = num(&out, "nuclei.ch2");
    assert!((n - 2.0).abs() < 1e-3, "{n}");
    let (i3, _) = num(&out, "integral.ch3");
    // Fraction of a Lorentzian inside ±125 HWHM: (2/π)·atan(125) = 0.994907.
    assert!(
        (i3 / 3.0 - (2.0 / std::f64::consts::PI) * 125f64.atan()).abs() < 1e-4,
        "{i3}"
    );
}

#[test]
fn coupling_from_metadata_frequency() {
    // A triplet with lines at 1.2350, 1.2175, 1.2000 ppm on a 400.13 MHz spectrometer:
    // spacings 0.0175 ppm × 400.13 MHz = 7.002 275 Hz each.
    let mut s = Spectrum::new(
        vec![0.0, 1.0],
        vec![0.0, 0.0],
        Axis::new("chemical shift", "ppm"),
        Axis::new("intensity", ""),
    );
    s.metadata
        .insert("spectrometer_frequency_mhz".into(), "400.13".into());
    let a = Artifact::new(Value::Spectrum(s));
    let out = run(
        "nmr.coupling",
        serde_json::json!({"lines": [1.2350, 1.2175, 1.2000]}),
        vec![PortValue::One(&a)],
    );
    let (j, _) = num(&out, "j_mean");
    assert!((j - 7.002275).abs() < 1e-6, "{j}");
}
