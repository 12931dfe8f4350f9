//! `xps.fractions`: fractions of the components of a fitted chemical-state envelope.
//!
//! Method: f_i = A_i / Σ_j A_j over the chosen peaks, with the covariance propagated
//! to first order from the fit's area covariance: C_f = J C_A Jᵀ,
//! J_ij = (δ_ij − f_i)/Σ A (JCGM 100:2008 eq. 13, correlated inputs).

use crate::quant_util;
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Peaks to include, by name; every fitted peak when empty.
    pub peaks: Vec<String>,
}

pub struct XpsFractions;

static INPUTS: &[Port] = &[Port::each(
    "fit",
    Kind::Fit,
    "a fitted envelope with area covariance",
)];

impl TypedStage for XpsFractions {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xps.fractions",
        version: 1,
        summary: "Component fractions of a fitted envelope with correlated uncertainties",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[quant_util::GUM],
    };

    fn check(&self, _o: &Options) -> Result<(), OptionError> {
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let which = if o.peaks.is_empty() {
            "all fitted components".to_string()
        } else {
            o.peaks.join(", ")
        };
        format!(
            "Component fractions of {which} were taken as each area over their sum, with uncertainties propagated from the fit's area covariance including correlations [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let Value::Fit(f) = &inputs.one(0)?.value else {
            return Err(StageError::input("the input is not a fit result"));
        };
        let n = f.peaks.len();
        let idx: Vec<usize> = if o.peaks.is_empty() {
            (0..n).collect()
        } else {
            o.peaks
                .iter()
                .map(|p| {
                    f.peaks
                        .iter()
                        .position(|q| &q.name == p)
                        .ok_or_else(|| StageError::input(format!("the fit has no peak '{p}'")))
                })
                .collect::<Result<_, _>>()?
        };
        if idx.len() < 2 {
            return Err(StageError::input("fractions need at least two peaks"));
        }
        let areas: Vec<f64> = idx.iter().map(|&i| f.peaks[i].area.value).collect();
        let total: f64 = areas.iter().sum();
        if total <= 0.0 {
            return Err(StageError::input("the summed area is not positive"));
        }
        let have_cov = f.area_covariance.len() == n * n;
        let cov = |a: usize, b: usize| f.area_covariance[idx[a] * n + idx[b]];
        let m = idx.len();
        let mut art = Artifact::new(Value::Summary);
        for i in 0..m {
            let fi = areas[i] / total;
            let u = have_cov.then(|| {
                let g: Vec<f64> = (0..m)
                    .map(|j| ((if i == j { 1.0 } else { 0.0 }) - fi) / total)
                    .collect();
                let mut v = 0.0;
                for a in 0..m {
                    for b in 0..m {
                        v += g[a] * cov(a, b) * g[b];
                    }
                }
                v.max(0.0).sqrt()
            });
            art.record(Record::number(
                format!("fraction.{}", f.peaks[idx[i]].name),
                fi,
                u,
                "",
            ));
        }
        if !have_cov {
            art.warn("the fit carries no area covariance: fractions have no uncertainty");
        }
        Ok(art)
    }
}
