//! Checks of per-particle element-map read-out and registration.

mod image_support;

use image_support::{column, image, num, run};
use serde_json::json;
use stages::stage::PortValue;
use stages::{Artifact, Value};

fn two_discs(shift: (isize, isize), a_in: [f64; 2], back: f64) -> Artifact {
    image(90, 60, Some((4.0, "nm")), "counts", |c, r| {
        let (c, r) = (c as isize - shift.0, r as isize - shift.1);
        let d = |x: isize, y: isize| (c - x).pow(2) + (r - y).pow(2) <= 100;
        if d(25, 30) {
            a_in[0]
        } else if d(65, 30) {
            a_in[1]
        } else {
            back
        }
    })
}

/// Analytic: particle 1 holds map signals 8 (A) and 2 (B), particle 2 holds 3 and 9, so the
/// signal fractions are 0.8/0.2 and 0.25/0.75; the same after registering maps shifted by
/// (3, −2) px to the micrograph.
#[test]
fn per_particle_fractions_and_registration() {
    let micro = two_discs((0, 0), [1000.0, 1000.0], 100.0);
    let mask = run(
        "particles.threshold",
        vec![PortValue::One(&micro)],
        json!({}),
    )
    .unwrap();
    let labels = run("particles.label", vec![PortValue::One(&mask)], json!({})).unwrap();
    for (shift, register) in [((0, 0), false), ((3, -2), true)] {
        let ma = two_discs(shift, [8.0, 3.0], 0.0);
        let mb = two_discs(shift, [2.0, 9.0], 0.0);
        let maps = PortValue::Many(vec![("au_map", &ma), ("ag_map", &mb)]);
        let t = run(
            "elements.per_particle",
            vec![PortValue::One(&labels), maps, PortValue::One(&micro)],
            json!({ "names": ["Au", "Ag"], "register": register }),
        )
        .unwrap();
        let fa = column(&t, "Au.fraction");
        let fb = column(&t, "Ag.fraction");
        assert!(
            (fa[0] - 0.8).abs() < 1e-12 && (fb[0] - 0.2).abs() < 1e-12,
            "{fa:?}"
        );
        assert!(
            (fa[1] - 0.25).abs() < 1e-12 && (fb[1] - 0.75).abs() < 1e-12,
            "{fa:?}"
        );
        // Share of each map's signal inside each particle: 8/(8+3) of map A in particle 1.
        let sa = column(&t, "Au.share");
        assert!((sa[0] - 8.0 / 11.0).abs() < 1e-9);
        assert_eq!(num(&t, "count"), 2.0);
        if register {
            assert!(
                t.notes
                    .iter()
                    .any(|n| n.text.contains("shifted by (3, -2) px")),
                "{:?}",
                t.notes
            );
        }
        let maps = PortValue::Many(vec![("au_map", &ma), ("ag_map", &mb)]);
        let o = run(
            "elements.overlay",
            vec![PortValue::One(&labels), maps, PortValue::One(&micro)],
            json!({ "names": ["Au", "Ag"], "register": register }),
        )
        .unwrap();
        let Value::Image(ov) = &o.value else { panic!() };
        assert_eq!(ov.get(25, 30), 1.0);
        assert_eq!(ov.get(65, 30), 2.0);
        assert_eq!(ov.get(2, 2), 0.0);
        assert_eq!(ov.metadata["overlay.classes"], "1=Au;2=Ag");
    }
}
