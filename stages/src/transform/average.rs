//! `gather.average`: the mean of repeated spectra on one grid, with the standard
//! uncertainty of the mean per point, s/√N with s the sample standard deviation
//! (GUM, JCGM 100:2008, §4.2). Spectra on different grids must be resampled first.

use crate::stage::{Inputs, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Largest difference between the grids allowed, as a fraction of the point spacing.
    pub grid_tolerance: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            grid_tolerance: 1e-6,
        }
    }
}

pub struct GatherAverage;

static INPUTS: &[Port] = &[Port::gather(
    "repeats",
    Kind::Spectrum,
    "every repeat spectrum",
)];

static REFS: &[Reference] = &[Reference {
    key: "gum2008",
    citation: "JCGM 100:2008, Evaluation of measurement data — Guide to the expression of uncertainty in measurement (BIPM, 2008), §4.2.",
}];

impl TypedStage for GatherAverage {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "gather.average",
        version: 1,
        summary:
            "Average repeated spectra point by point, with the standard uncertainty of the mean",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), crate::stage::OptionError> {
        if o.grid_tolerance.is_nan() || o.grid_tolerance < 0.0 {
            return Err(crate::stage::OptionError::new(
                "grid_tolerance",
                "must be ≥ 0",
            ));
        }
        Ok(())
    }

    fn methods(&self, _o: &Options) -> String {
        "Repeated spectra were averaged point by point, with the standard uncertainty of each mean taken as s/√N from the scatter of the N repeats [gum2008].".into()
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let items = inputs.many(0);
        let spectra: Vec<(&str, &crate::value::Spectrum)> = items
            .iter()
            .map(|(n, a)| {
                a.spectrum()
                    .map(|s| (*n, s))
                    .ok_or_else(|| StageError::input(format!("item {n} carries no spectrum")))
            })
            .collect::<Result<_, _>>()?;
        let (mean, sem) = average(&spectra.iter().map(|(_, s)| &s.y[..]).collect::<Vec<_>>())
            .map_err(StageError::input)?;
        let first = spectra[0].1;
        let h = super::grid::mean_step(&first.x).abs();
        for (name, s) in &spectra[1..] {
            if s.x.len() != first.x.len()
                || s.x
                    .iter()
                    .zip(&first.x)
                    .any(|(a, b)| (a - b).abs() > o.grid_tolerance * h)
            {
                return Err(StageError::input(format!(
                    "{name} is not on the grid of {} (resample the repeats onto a common grid first)",
                    spectra[0].0
                )));
            }
            if s.y_axis.unit != first.y_axis.unit {
                return Err(StageError::input(format!(
                    "{name} has y in '{}' but {} in '{}'",
                    s.y_axis.unit, spectra[0].0, first.y_axis.unit
                )));
            }
        }
        let mut out = first.clone();
        out.y = mean;
        out.sigma = Some(sem);
        out.curves.clear();
        out.metadata.insert(
            "averaged".into(),
            spectra
                .iter()
                .map(|(n, _)| *n)
                .collect::<Vec<_>>()
                .join(", "),
        );
        Ok(
            Artifact::new(Value::Spectrum(out)).with_results(vec![Record::number(
                "repeats",
                spectra.len() as f64,
                None,
                "",
            )]),
        )
    }
}

/// Point-wise mean and standard uncertainty of the mean s/√N (N ≥ 2, equal lengths).
pub fn average(ys: &[&[f64]]) -> Result<(Vec<f64>, Vec<f64>), String> {
    let n = ys.len();
    if n < 2 {
        return Err(format!("averaging needs at least 2 repeats, got {n}"));
    }
    let m = ys[0].len();
    if ys.iter().any(|y| y.len() != m) {
        return Err("the repeats have different numbers of points".into());
    }
    let nf = n as f64;
    let mut mean = vec![0.0; m];
    let mut sem = vec![0.0; m];
    for j in 0..m {
        let mu = ys.iter().map(|y| y[j]).sum::<f64>() / nf;
        let var = ys.iter().map(|y| (y[j] - mu).powi(2)).sum::<f64>() / (nf - 1.0);
        mean[j] = mu;
        sem[j] = (var / nf).sqrt();
    }
    Ok((mean, sem))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mean_and_sem_by_hand() {
        // Hand arithmetic: values 1, 2, 3 -> mean 2, s = 1, s/√3 = 0.57735...
        let (m, s) = average(&[&[1.0, 5.0], &[2.0, 5.0], &[3.0, 5.0]]).unwrap();
        assert_eq!(m, vec![2.0, 5.0]);
        assert!((s[0] - 1.0 / 3f64.sqrt()).abs() < 1e-15 && s[1] == 0.0);
        assert!(average(&[&[1.0]]).is_err());
    }
}
