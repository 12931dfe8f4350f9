//! Robustness of the quantification stages: on arbitrary small spectra (empty, flat,
//! negative, unsorted, repeated x) they return a value or a typed error, never panic,
//! and never publish a non-finite number.

use proptest::prelude::*;
use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Axis, Scalar, Spectrum, Value};

fn cases() -> Vec<(&'static str, serde_json::Value, &'static str, &'static str)> {
    vec![
        (
            "uvvis.tauc",
            serde_json::json!({"transition": "direct_allowed", "min_points": 3}),
            "wavelength",
            "nm",
        ),
        (
            "uvvis.tauc",
            serde_json::json!({"transition": "indirect_allowed", "min_points": 3}),
            "photon energy",
            "eV",
        ),
        (
            "uvvis.onset",
            serde_json::json!({"tangent_points": 3}),
            "wavelength",
            "nm",
        ),
        ("uvvis.plasmon", serde_json::json!({}), "wavelength", "nm"),
        ("uvvis.peak", serde_json::json!({}), "wavelength", "nm"),
        (
            "uvvis.absorbance",
            serde_json::json!({"from": "transmittance"}),
            "wavelength",
            "nm",
        ),
        (
            "nmr.integrate",
            serde_json::json!({"regions": {"a": [0.0, 5.0]}, "noise_range": [5.0, 10.0]}),
            "chemical shift",
            "ppm",
        ),
        (
            "ups.work_function",
            serde_json::json!({"photon_energy": 21.22}),
            "binding energy",
            "eV",
        ),
        (
            "ups.valence_band_maximum",
            serde_json::json!({}),
            "binding energy",
            "eV",
        ),
        (
            "ups.fermi_level",
            serde_json::json!({}),
            "kinetic energy",
            "eV",
        ),
        ("eds.identify", serde_json::json!({}), "energy", "keV"),
        (
            "eds.net_intensity",
            serde_json::json!({"windows": {"a": [2.0, 3.0]}}),
            "energy",
            "keV",
        ),
        (
            "eds.calibrate",
            serde_json::json!({"lines": [{"position": 2.0, "line": "Al Ka1"}, {"position": 8.0, "line": "Cu Ka1"}], "refine": 1.0}),
            "channel",
            "",
        ),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    #[test]
    fn stages_never_panic_or_publish_non_finite_numbers(
        pts in proptest::collection::vec((0.0f64..10.0, -5.0f64..1000.0), 0..40),
        sort in any::<bool>(),
    ) {
        let mut pts = pts;
        if sort {
            pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        }
        let (x, y): (Vec<f64>, Vec<f64>) = pts.into_iter().unzip();
        for (name, opts, q, u) in cases() {
            let s = stages::find(name).unwrap();
            let o = s.resolve_options(&opts).unwrap();
            let x = if u == "nm" { x.iter().map(|v| 200.0 + 100.0 * v).collect() } else { x.clone() };
            let spec = Spectrum::new(x, y.clone(), Axis::new(q, u), Axis::new("intensity", "counts"));
            let a = Artifact::new(Value::Spectrum(spec));
            let ports = s.info().inputs.iter().enumerate().map(|(i, _)| if i == 0 { PortValue::One(&a) } else { PortValue::Missing }).collect();
            if let Ok(out) = s.run(&Inputs { item: Some("x"), ports }, &o) {
                for r in &out.results {
                    if let Scalar::Number(v) = r.value {
                        prop_assert!(v.is_finite(), "{name}: {} = {v}", r.name);
                    }
                    if let Some(u) = r.uncertainty {
                        prop_assert!(u.is_finite(), "{name}: u({}) = {u}", r.name);
                    }
                }
            }
        }
    }
}
