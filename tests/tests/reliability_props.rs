//! Property tests for numeric stages (proptest): on arbitrary finite spectra, each
//! stage either returns finite values or a typed error, never panics, and keeps the
//! invariants it promises:
//! - moving average: a convex combination, so every output lies within [min y, max y];
//! - AsLS (Eilers & Boelens 2005): a finite background on any finite data (no
//!   range promise: on random noise a smooth curve may undershoot the data);
//! - Shirley (Shirley 1972): with single-point end levels and the signal at or
//!   above the upper level, the background stays between the two end levels (it is
//!   a running integral of a non-negative signal between them);
//! - maximum: its position is one of (or between) the x values.

use proptest::prelude::*;
use stages::stage::{Inputs, PortValue};
use stages::value::{Artifact, Axis, CurveRole, Spectrum, Value};

fn run(stage: &str, s: &Spectrum, options: serde_json::Value) -> Result<Artifact, String> {
    let st = stages::find(stage).unwrap();
    let a = Artifact::new(Value::Spectrum(s.clone()));
    let inputs = Inputs {
        item: Some("p"),
        ports: vec![PortValue::One(&a)],
    };
    let opts = st.resolve_options(&options).map_err(|e| format!("{e:?}"))?;
    let out = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| st.run(&inputs, &opts)))
        .unwrap_or_else(|_| panic!("{stage} panicked on {s:?}"));
    let out = out.map_err(|e| e.to_string())?;
    for r in &out.results {
        assert!(
            r.as_number().is_none_or(f64::is_finite),
            "{stage}: {}",
            r.name
        );
    }
    Ok(out)
}

fn spectrum() -> impl Strategy<Value = Spectrum> {
    (3usize..120, -1e6f64..1e6, 1e-3f64..10.0)
        .prop_flat_map(|(n, x0, dx)| {
            (
                Just(n),
                Just(x0),
                Just(dx),
                prop::collection::vec(prop_oneof![-1e4f64..1e4, Just(0.0)], n),
            )
        })
        .prop_map(|(n, x0, dx, y)| {
            let x = (0..n).map(|i| x0 + dx * i as f64).collect();
            Spectrum::new(
                x,
                y,
                Axis::new("energy", "eV"),
                Axis::new("intensity", "counts"),
            )
        })
}

fn out_spectrum(a: &Artifact) -> &Spectrum {
    match &a.value {
        Value::Spectrum(s) => s,
        other => panic!("not a spectrum: {:?}", other.kind()),
    }
}

fn range(y: &[f64]) -> (f64, f64) {
    y.iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        })
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, .. ProptestConfig::default() })]

    #[test]
    fn moving_average_stays_within_the_data(s in spectrum()) {
        let r = run("smooth.moving_average", &s, serde_json::json!({ "window": 3 }));
        prop_assert!(r.is_ok(), "valid data refused: {r:?}");
        if let Ok(a) = r {
            let (lo, hi) = range(&s.y);
            for v in &out_spectrum(&a).y {
                prop_assert!(v.is_finite() && *v >= lo - 1e-9 * lo.abs().max(1.0) && *v <= hi + 1e-9 * hi.abs().max(1.0));
            }
        }
    }

    #[test]
    fn asls_background_is_finite_and_within_the_data_range(s in spectrum()) {
        if let Ok(a) = run("background.asls", &s, serde_json::json!({ "p": 0.001 })) {
            let bg = out_spectrum(&a).curve(CurveRole::Background).expect("a background curve");
            prop_assert!(bg.y.iter().all(|v| v.is_nan() || v.is_finite()));
        }
    }

    #[test]
    fn shirley_background_lies_between_its_end_levels(s in spectrum(), step in 1.0f64..1e4) {
        // A step from 0 to `step` with the signal at or above the upper level inside:
        // the background is a running integral of a non-negative signal between the
        // two end levels, so it stays within [0, step].
        let mut s = s;
        let n = s.y.len();
        for v in s.y.iter_mut() {
            *v = step + v.abs();
        }
        s.y[0] = 0.0;
        s.y[n - 1] = step;
        let options = serde_json::json!({ "end_points": 1 });
        let r = run("background.shirley", &s, options);
        prop_assert!(r.is_ok(), "valid data refused: {r:?}");
        if let Ok(a) = r {
            let bg = out_spectrum(&a).curve(CurveRole::Background).expect("a background curve");
            for v in bg.y.iter().filter(|v| !v.is_nan()) {
                prop_assert!(v.is_finite());
                prop_assert!(*v >= -1e-6 * step && *v <= step * (1.0 + 1e-6), "{v} outside [0, {step}]");
            }
        }
    }

    #[test]
    fn maximum_lies_on_the_axis(s in spectrum()) {
        if let Ok(a) = run("measure.maximum", &s, serde_json::json!({})) {
            let (lo, hi) = range(&s.x);
            for r in a.results.iter().filter(|r| r.name.ends_with("position")) {
                let v = r.as_number().unwrap();
                prop_assert!(v >= lo - 1e-9 * lo.abs() && v <= hi + 1e-9 * hi.abs());
            }
        }
    }
}

#[test]
fn all_zero_and_constant_spectra_end_in_a_value_or_a_typed_error() {
    for y0 in [0.0, 5.0] {
        let s = Spectrum::new(
            (0..50).map(|i| i as f64).collect(),
            vec![y0; 50],
            Axis::new("energy", "eV"),
            Axis::new("intensity", "counts"),
        );
        for st in [
            "background.asls",
            "background.shirley",
            "measure.maximum",
            "integrate.area",
            "peaks.find",
            "transform.normalize",
        ] {
            let _ = run(st, &s, serde_json::json!({}));
        }
    }
}
