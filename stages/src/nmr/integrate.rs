//! `nmr.integrate`: integrals of named chemical-shift regions, normalised so that one
//! region holds a given number of nuclei; ratios and nuclei (proton) counts per region.
//!
//! Method: trapezoidal integration of y (minus the spectrum's Background curve when
//! present) over each region; the magnitude is reported (shift axes usually run
//! high to low). Normalisation n_i = N_ref·I_i/I_ref is the usual relative-integral
//! reading of a 1D spectrum (common practice; e.g. Claridge, High-Resolution NMR
//! Techniques in Organic Chemistry, 3rd ed., 2016, ch. 2). Uncertainties: per-point
//! σ from the spectrum's sigma, or from the standard deviation of a signal-free
//! `noise_range`, propagated through the trapezoid sums and the ratio to first order.

use crate::quant_util::{self, background_subtracted, check_range, indices_in, unit_product};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Normalise {
    /// Region whose integral is set to `nuclei`.
    pub region: String,
    /// Number of nuclei that region stands for (e.g. 3 for a methyl group).
    pub nuclei: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Regions to integrate: name → [low, high] chemical shift.
    #[schemars(extend("x-unit" = "ppm"))]
    pub regions: BTreeMap<String, [f64; 2]>,
    /// Normalisation: the named region counts as this many nuclei. Without it only raw
    /// integrals and ratios to the first region (by name) are given.
    pub normalise: Option<Normalise>,
    /// A signal-free shift range whose standard deviation estimates the noise of each
    /// point when the spectrum has no sigma.
    #[schemars(extend("x-unit" = "ppm"))]
    pub noise_range: Option<[f64; 2]>,
}

pub struct NmrIntegrate;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a processed 1D spectrum on a chemical-shift axis",
)];

pub const CLARIDGE: Reference = Reference {
    key: "claridge2016",
    citation: "T. D. W. Claridge, High-Resolution NMR Techniques in Organic Chemistry, 3rd ed., Elsevier, Amsterdam, 2016.",
};

impl TypedStage for NmrIntegrate {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "nmr.integrate",
        version: 1,
        summary: "Integrate named shift regions and normalise to a known number of nuclei",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[CLARIDGE, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.regions.is_empty() {
            return Err(OptionError::new(
                "regions",
                "give at least one region, e.g. regions: { ch3: [0.8, 1.0] }",
            ));
        }
        for (k, r) in &o.regions {
            check_range(&format!("regions.{k}"), Some(*r))?;
        }
        check_range("noise_range", o.noise_range)?;
        if let Some(n) = &o.normalise {
            if !o.regions.contains_key(&n.region) {
                return Err(OptionError::new(
                    "normalise.region",
                    format!("'{}' is not one of the regions", n.region),
                ));
            }
            quant_util::check_positive("normalise.nuclei", n.nuclei)?;
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let regs: Vec<String> = o
            .regions
            .iter()
            .map(|(k, r)| format!("{k} ({}–{} ppm)", r[0], r[1]))
            .collect();
        let norm = match &o.normalise {
            Some(n) => format!(
                "normalised so that {} corresponds to {} nuclei",
                n.region, n.nuclei
            ),
            None => "reported as raw integrals and ratios to the first region".to_string(),
        };
        let noise = match o.noise_range {
            Some(r) => format!(
                "with point uncertainties from the spectrum's σ or the noise between {} and {} ppm",
                r[0], r[1]
            ),
            None => "with point uncertainties from the spectrum's σ where present".to_string(),
        };
        format!(
            "Regions {} were integrated by the trapezoidal rule after subtracting the background curve where present, {norm}, {noise} propagated to first order [claridge2016] [jcgm2008].",
            regs.join(", ")
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let (y, has_bg) = background_subtracted(s);
        let sigma = point_sigma(s, &y, o.noise_range)?;
        let unit = unit_product(&s.y_axis.unit, &s.x_axis.unit);
        let mut ints: Vec<(String, f64, Option<f64>)> = Vec::new();
        for (name, r) in &o.regions {
            let (v, u) = trapezoid(&s.x, &y, sigma.as_deref(), *r)
                .map_err(|e| StageError::input(format!("region {name}: {e}")))?;
            ints.push((name.clone(), v, u));
        }
        let mut art = Artifact::new(Value::Spectrum(s.clone()));
        for (name, v, u) in &ints {
            art.record(Record::number(format!("integral.{name}"), *v, *u, &unit));
            let r = o.regions[name];
            art.record(Record::number(
                format!("range_from.{name}"),
                r[0],
                None,
                "ppm",
            ));
            art.record(Record::number(
                format!("range_to.{name}"),
                r[1],
                None,
                "ppm",
            ));
        }
        art.record(Record::text(
            "background",
            if has_bg {
                "background curve subtracted"
            } else {
                "none"
            },
        ));
        let (ref_name, ref_nuclei) = match &o.normalise {
            Some(n) => (n.region.clone(), Some(n.nuclei)),
            None => (ints[0].0.clone(), None),
        };
        let (_, iref, uref) = ints
            .iter()
            .find(|(n, _, _)| *n == ref_name)
            .cloned()
            .ok_or_else(|| StageError::input("normalisation region not integrated"))?;
        if iref == 0.0 {
            return Err(StageError::input(format!(
                "the integral of the reference region {ref_name} is zero"
            )));
        }
        let mut total = 0.0;
        for (name, v, u) in &ints {
            let ratio = v / iref;
            // u²(I/Iref) = (u/Iref)² + (I·uref/Iref²)², zero for the reference itself.
            let ur = if *name == ref_name {
                Some(0.0)
            } else {
                match (u, uref) {
                    (Some(u), Some(ur)) => {
                        Some(((u / iref).powi(2) + (v * ur / (iref * iref)).powi(2)).sqrt())
                    }
                    _ => None,
                }
            };
            art.record(Record::number(format!("ratio.{name}"), ratio, ur, ""));
            if let Some(n) = ref_nuclei {
                total += n * ratio;
                art.record(Record::number(
                    format!("nuclei.{name}"),
                    n * ratio,
                    ur.map(|u| n * u),
                    "nuclei",
                ));
            }
        }
        if ref_nuclei.is_some() {
            art.record(Record::number("nuclei_total", total, None, "nuclei"));
        }
        Ok(art)
    }
}

/// Standard uncertainty of each point: the spectrum's sigma, else the sample standard
/// deviation of y in the noise range, else None.
pub fn point_sigma(
    s: &Spectrum,
    y: &[f64],
    noise_range: Option<[f64; 2]>,
) -> Result<Option<Vec<f64>>, StageError> {
    if let Some(sig) = &s.sigma {
        return Ok(Some(sig.clone()));
    }
    let Some(r) = noise_range else {
        return Ok(None);
    };
    let idx = indices_in(&s.x, r);
    if idx.len() < 3 {
        return Err(StageError::input(format!(
            "the noise range {r:?} holds fewer than 3 points"
        )));
    }
    let m = idx.iter().map(|&i| y[i]).sum::<f64>() / idx.len() as f64;
    let v = idx.iter().map(|&i| (y[i] - m).powi(2)).sum::<f64>() / (idx.len() - 1) as f64;
    Ok(Some(vec![v.sqrt(); y.len()]))
}

/// Trapezoidal integral of y over the points with x in range (magnitude), with the
/// standard uncertainty propagated from independent point uncertainties.
pub fn trapezoid(
    x: &[f64],
    y: &[f64],
    sigma: Option<&[f64]>,
    range: [f64; 2],
) -> Result<(f64, Option<f64>), StageError> {
    let idx = indices_in(x, range);
    if idx.len() < 2 {
        return Err(StageError::input(format!(
            "fewer than 2 points between {} and {}",
            range[0], range[1]
        )));
    }
    let mut area = 0.0;
    let mut coef = vec![0.0; idx.len()];
    for k in 0..idx.len() - 1 {
        let (i, j) = (idx[k], idx[k + 1]);
        let h = (x[j] - x[i]).abs();
        area += 0.5 * (y[i] + y[j]) * (x[j] - x[i]);
        coef[k] += 0.5 * h;
        coef[k + 1] += 0.5 * h;
    }
    let u = sigma.map(|sg| {
        idx.iter()
            .zip(&coef)
            .map(|(&i, c)| (c * sg[i]).powi(2))
            .sum::<f64>()
            .sqrt()
    });
    Ok((area.abs(), u))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;
    use crate::value::Axis;

    #[test]
    fn two_rectangles_give_a_three_to_two_ratio() {
        // Analytic: y = 3 on [1, 2] ppm and 2 on [3, 4] ppm, zero elsewhere (steps of
        // 0.01 ppm, so the trapezoid is exact up to the half-step shoulders).
        let x: Vec<f64> = (0..=500).map(|i| (500 - i) as f64 / 100.0).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|&v| {
                if (1.0..=2.0).contains(&v) {
                    3.0
                } else if (3.0..=4.0).contains(&v) {
                    2.0
                } else {
                    0.0
                }
            })
            .collect();
        let s = Spectrum::new(
            x,
            y,
            Axis::new("chemical shift", "ppm"),
            Axis::new("intensity", ""),
        );
        let a = Artifact::new(Value::Spectrum(s));
        let o = Options {
            regions: [("a".to_string(), [0.9, 2.1]), ("b".to_string(), [2.9, 4.1])]
                .into_iter()
                .collect(),
            normalise: Some(Normalise {
                region: "b".into(),
                nuclei: 2.0,
            }),
            noise_range: None,
        };
        let out = NmrIntegrate
            .run(
                &Inputs {
                    item: None,
                    ports: vec![PortValue::One(&a)],
                },
                &o,
            )
            .unwrap();
        let n = out.result("nuclei.a").unwrap().as_number().unwrap();
        assert!((n - 3.0).abs() < 1e-9, "{n}");
    }
}
