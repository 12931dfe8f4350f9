//! The catalog entries of the spectral stages: every option documented with its
//! default, units given, and a published source for every method stage.

const SPECTRAL: &[&str] = &[
    "import.delimited",
    "import.jcamp",
    "convert.axis",
    "convert.absorbance",
    "calibrate.shift",
    "calibrate.polynomial",
    "calibrate.binding_energy",
    "transform.crop",
    "transform.resample",
    "transform.normalize",
    "transform.subtract",
    "transform.subtract_background",
    "gather.average",
    "smooth.savitzky_golay",
    "smooth.moving_average",
    "smooth.gaussian",
    "background.polynomial",
    "background.linear",
    "background.asls",
    "background.shirley",
    "background.tougaard",
    "peaks.find",
    "integrate.area",
];

/// Bookkeeping stages with no published method to cite.
const NO_METHOD: &[&str] = &[
    "import.delimited",
    "transform.crop",
    "transform.resample",
    "transform.normalize",
    "transform.subtract",
    "transform.subtract_background",
    "smooth.moving_average",
    "background.linear",
];

#[test]
fn every_spectral_stage_is_registered_documented_and_sourced() {
    for name in SPECTRAL {
        let s = stages::find(name).unwrap_or_else(|| panic!("{name} is not registered"));
        let info = s.info();
        if !NO_METHOD.contains(name) {
            assert!(!info.references.is_empty(), "{name} cites no source");
        }
        for r in info.references {
            assert!(
                r.citation.len() > 30,
                "{name}: citation '{}' too short",
                r.key
            );
        }
        let schema = serde_json::to_value(s.options_schema()).unwrap();
        let props = schema["properties"]
            .as_object()
            .cloned()
            .unwrap_or_default();
        for (k, v) in &props {
            assert!(v.get("description").is_some(), "{name}.{k} undocumented");
            // A default is shown for every option (serde default on the container).
            assert!(
                v.get("default").is_some(),
                "{name}.{k} shows no default: {v}"
            );
        }
    }
    // Units appear where there is one.
    let schema = serde_json::to_value(
        stages::find("background.tougaard")
            .unwrap()
            .options_schema(),
    )
    .unwrap();
    assert_eq!(schema["properties"]["c"]["x-unit"], "eV²");
    assert_eq!(schema["properties"]["c"]["default"], 1643.0);
    let schema = serde_json::to_value(
        stages::find("smooth.savitzky_golay")
            .unwrap()
            .options_schema(),
    )
    .unwrap();
    assert_eq!(schema["properties"]["window"]["x-unit"], "points");
}

#[test]
fn methods_sentences_state_the_defaults() {
    let s = stages::find("background.asls").unwrap();
    let c = s.resolve_options(&serde_json::Value::Null).unwrap();
    let m = s.methods(&c);
    assert!(
        m.contains("λ = 1e5") && m.contains("p = 0.01") && m.contains("[eilers2005]"),
        "{m}"
    );
    let s = stages::find("smooth.savitzky_golay").unwrap();
    let c = s.resolve_options(&serde_json::Value::Null).unwrap();
    let m = s.methods(&c);
    assert!(m.contains("window of 11 points, polynomial order 2"), "{m}");
}
