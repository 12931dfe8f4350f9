//! Reference checks of `calibration.curve` against the NIST Statistical Reference
//! Datasets for linear regression (NIST/ITL StRD, https://www.itl.nist.gov/div898/strd/):
//! Norris (straight line, "lower difficulty") and Pontius (quadratic). The certified
//! values are parsed from the headers of the NIST files themselves, not retyped.
//! Each observation becomes one item whose `y` record is the response; its x is the
//! known value of the standard. Certified values are given to 15 digits; we require
//! agreement to 9 significant digits (relative 1e-9) for the estimates, their standard
//! deviations, the residual standard deviation and R².

use stages::stage::{Inputs, PortValue};
use stages::{Artifact, Record, Value};

struct Certified {
    params: Vec<(f64, f64)>,
    residual_sd: f64,
    r_squared: f64,
    data: Vec<(f64, f64)>, // (x, y)
}

fn parse(text: &str) -> Certified {
    let mut params = Vec::new();
    let mut residual_sd = f64::NAN;
    let mut r_squared = f64::NAN;
    let mut data = Vec::new();
    let mut in_data = false;
    let mut prev = "";
    for line in text.lines() {
        let t: Vec<&str> = line.split_whitespace().collect();
        if in_data {
            if t.len() == 2 {
                let y: f64 = t[0].parse().unwrap();
                let x: f64 = t[1].parse().unwrap();
                data.push((x, y));
            }
        } else if t.len() == 3 && t[0].starts_with('B') && t[0][1..].parse::<u32>().is_ok() {
            params.push((t[1].parse().unwrap(), t[2].parse().unwrap()));
        } else if t.first() == Some(&"Standard") && prev.trim() == "Residual" {
            residual_sd = t[2].parse().unwrap();
        } else if t.first() == Some(&"R-Squared") {
            r_squared = t[1].parse().unwrap();
        } else if t.first() == Some(&"Data:") && t.get(1) == Some(&"y") {
            in_data = true;
        }
        prev = line;
    }
    Certified {
        params,
        residual_sd,
        r_squared,
        data,
    }
}

fn run(c: &Certified, model: &str) -> Artifact {
    let arts: Vec<(String, Artifact)> = c
        .data
        .iter()
        .enumerate()
        .map(|(i, (_, y))| {
            (
                format!("obs{i:03}"),
                Artifact::new(Value::Summary).with_results(vec![Record::number("y", *y, None, "")]),
            )
        })
        .collect();
    let standards: serde_json::Map<String, serde_json::Value> = c
        .data
        .iter()
        .enumerate()
        .map(|(i, (x, _))| (format!("obs{i:03}"), serde_json::json!(x)))
        .collect();
    let stage = stages::find("calibration.curve").unwrap();
    let opts = stage
        .resolve_options(
            &serde_json::json!({"response": "y", "standards": standards, "model": model}),
        )
        .unwrap();
    let inputs = Inputs {
        item: None,
        ports: vec![PortValue::Many(
            arts.iter().map(|(n, a)| (n.as_str(), a)).collect(),
        )],
    };
    stage.run(&inputs, &opts).unwrap()
}

fn close(name: &str, got: f64, want: f64) {
    let rel = ((got - want) / want).abs();
    eprintln!("{name}: got {got:e}, certified {want:e}, relative deviation {rel:.1e}");
    assert!(
        rel < 1e-9,
        "{name}: got {got:e}, certified {want:e} (relative {rel:e})"
    );
}

fn check(file: &str, model: &str, names: &[&str]) {
    let Some(text) = tests::reference_file(&format!("nist-strd/{file}"), file) else {
        return;
    };
    let c = parse(&text);
    assert_eq!(c.params.len(), names.len());
    assert!(c.data.len() >= 30, "{file}: data not parsed");
    let out = run(&c, model);
    for (name, (est, sd)) in names.iter().zip(&c.params) {
        let r = out.result(name).unwrap();
        close(name, r.as_number().unwrap(), *est);
        close(&format!("{name} sd"), r.uncertainty.unwrap(), *sd);
    }
    close(
        "residual sd",
        out.result("residual_sd").unwrap().as_number().unwrap(),
        c.residual_sd,
    );
    close(
        "R²",
        out.result("r_squared").unwrap().as_number().unwrap(),
        c.r_squared,
    );
}

#[test]
fn nist_norris_straight_line() {
    // Certified B0, B1 with standard deviations, residual SD, R²: NIST StRD Norris.dat.
    check("Norris.dat", "line", &["intercept", "slope"]);
}

#[test]
fn nist_pontius_quadratic() {
    // Certified B0, B1, B2 with standard deviations, residual SD, R²: NIST StRD Pontius.dat.
    check(
        "Pontius.dat",
        "quadratic",
        &["intercept", "slope", "curvature"],
    );
}
