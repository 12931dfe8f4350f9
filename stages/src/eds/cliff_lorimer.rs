//! `eds.cliff_lorimer`: thin-film composition by the Cliff–Lorimer ratio method.
//!
//! Method (Cliff & Lorimer, J. Microsc. 103 (1975) 203): C_A/C_B = k_AB·I_A/I_B. With
//! k-factors given relative to one element (k_i = k_i,ref), weight fractions are
//! C_i = k_i I_i / Σ_j k_j I_j (the sum-to-one closure of the thin-film approximation,
//! no absorption or fluorescence correction), and atomic fractions
//! x_i = (C_i/M_i)/Σ_j (C_j/M_j) with standard atomic weights M from
//! stages/data/atomic_masses.csv. Uncertainties of intensities and k-factors are
//! propagated to first order (numerical sensitivity coefficients, all inputs independent).

use super::lines::atomic_mass;
use crate::quant_util::{self, propagate_vec, record_number};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Element {
    /// Element symbol.
    pub element: String,
    /// Upstream result holding the element's net intensity (e.g. `net.fe_ka`).
    pub intensity: String,
    /// Cliff–Lorimer k-factor relative to the common reference element (1 for it).
    pub k: f64,
    /// Standard uncertainty of the k-factor (0 when absent).
    pub k_uncertainty: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// The elements; ratios are given relative to the first.
    pub elements: Vec<Element>,
}

pub struct CliffLorimer;

static INPUTS: &[Port] = &[Port::each(
    "intensities",
    Kind::Any,
    "a step whose results hold the net intensities",
)];

pub const CLIFF_LORIMER: Reference = Reference {
    key: "cliff1975",
    citation: "G. Cliff, G. W. Lorimer, The quantitative analysis of thin specimens, J. Microsc. 103 (1975) 203–207.",
};

/// Weight fractions then atomic fractions from intensities, k-factors and masses.
fn fractions(i: &[f64], k: &[f64], m: &[f64]) -> Vec<f64> {
    let n = i.len();
    let w: Vec<f64> = (0..n).map(|j| k[j] * i[j]).collect();
    let sw: f64 = w.iter().sum();
    let c: Vec<f64> = w.iter().map(|v| v / sw).collect();
    let a: Vec<f64> = (0..n).map(|j| c[j] / m[j]).collect();
    let sa: f64 = a.iter().sum();
    c.iter().copied().chain(a.iter().map(|v| v / sa)).collect()
}

impl TypedStage for CliffLorimer {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "eds.cliff_lorimer",
        version: 1,
        summary: "Thin-film weight and atomic fractions by the Cliff–Lorimer k-factor method",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[CLIFF_LORIMER, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.elements.len() < 2 {
            return Err(OptionError::new("elements", "give at least two elements"));
        }
        for (n, e) in o.elements.iter().enumerate() {
            if e.element.is_empty() || e.intensity.is_empty() {
                return Err(OptionError::new(
                    format!("elements.{n}"),
                    "give element and intensity",
                ));
            }
            quant_util::check_positive(&format!("elements.{n}.k"), e.k)?;
            quant_util::check_uncertainty(&format!("elements.{n}.k_uncertainty"), e.k_uncertainty)?;
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let ks: Vec<String> = o
            .elements
            .iter()
            .map(|e| format!("{} (k = {})", e.element, e.k))
            .collect();
        format!(
            "Thin-film compositions were calculated by the Cliff–Lorimer ratio method with user k-factors for {} relative to {}, normalised to unit sum without absorption or fluorescence correction [cliff1975], converted to atomic fractions with standard atomic weights, and given first-order uncertainties from the intensities and k-factors [jcgm2008].",
            ks.join(", "),
            o.elements.first().map_or("", |e| e.element.as_str())
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let a = inputs.one(0)?;
        let n = o.elements.len();
        let mut x = Vec::with_capacity(2 * n);
        let mut u = Vec::with_capacity(2 * n);
        let mut masses = Vec::with_capacity(n);
        for e in &o.elements {
            let (v, ui, _) = record_number(a, &e.intensity)?;
            if v <= 0.0 {
                return Err(StageError::input(format!(
                    "{}: intensity {v} is not positive",
                    e.element
                )));
            }
            x.push(v);
            u.push(ui.unwrap_or(0.0));
            masses.push(atomic_mass(&e.element)?.mass);
        }
        for e in &o.elements {
            x.push(e.k);
            u.push(e.k_uncertainty.unwrap_or(0.0));
        }
        let f = |v: &[f64]| fractions(&v[..n], &v[n..], &masses);
        let val = f(&x);
        let unc = propagate_vec(&f, &x, &u);
        let mut art = Artifact::new(Value::Summary);
        for (j, e) in o.elements.iter().enumerate() {
            let el = &e.element;
            art.record(Record::number(
                format!("weight_percent.{el}"),
                100.0 * quant_util::finite("weight fraction", val[j])?,
                Some(100.0 * unc[j]),
                "%",
            ));
            art.record(Record::number(
                format!("atomic_percent.{el}"),
                100.0 * val[n + j],
                Some(100.0 * unc[n + j]),
                "%",
            ));
        }
        let r0 = &o.elements[0];
        for (j, e) in o.elements.iter().enumerate().skip(1) {
            // C_j/C_0 = (k_j/k_0)(I_j/I_0)
            let g = |v: &[f64]| (v[n + j] / v[n]) * (v[j] / v[0]);
            let ratio = g(&x);
            let ur = quant_util::propagate(&g, &x, &u);
            art.record(Record::number(
                format!("weight_ratio.{}_{}", e.element, r0.element),
                ratio,
                Some(ur),
                "",
            ));
        }
        Ok(art)
    }
}
