//! `convert.absorbance`: absorbance A = −log10 T from transmittance T or %T.
//!
//! The Beer–Lambert decadic absorbance (IUPAC Gold Book, "absorbance"). Points with
//! T ≤ 0 have no absorbance and are refused with their x. Standard uncertainties are
//! propagated to first order: σ_A = σ_T / (T ln 10).

use crate::stage::{Inputs, Port, Reference, StageError, StageInfo, TypedStage};
use crate::units;
use crate::value::{Artifact, Axis, Kind, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// What y holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum TransmittanceScale {
    /// Percent when the y unit is `%` or the quantity says percent/%T, else a fraction.
    Auto,
    /// Transmittance as a fraction 0–1.
    Fraction,
    /// Transmittance in percent 0–100.
    Percent,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Whether y is a fraction or a percentage.
    pub scale: TransmittanceScale,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            scale: TransmittanceScale::Auto,
        }
    }
}

pub struct ConvertAbsorbance;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a transmittance spectrum",
)];

static REFS: &[Reference] = &[Reference {
    key: "iupac_absorbance",
    citation: "IUPAC, Compendium of Chemical Terminology (the Gold Book), entry 'absorbance', A = −log10(T).",
}];

impl TypedStage for ConvertAbsorbance {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "convert.absorbance",
        version: 1,
        summary: "Decadic absorbance A = −log10 T from transmittance (fraction or %T)",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn methods(&self, o: &Options) -> String {
        let scale = match o.scale {
            TransmittanceScale::Auto => {
                "transmittance read as percent when so labelled and as a fraction otherwise"
            }
            TransmittanceScale::Fraction => "transmittance given as a fraction",
            TransmittanceScale::Percent => "transmittance given in percent",
        };
        format!("Transmittance was converted to decadic absorbance, A = −log10 T [iupac_absorbance], with {scale}.")
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let percent = match o.scale {
            TransmittanceScale::Percent => true,
            TransmittanceScale::Fraction => false,
            TransmittanceScale::Auto => {
                let u = s.y_axis.unit.to_ascii_lowercase();
                let q = s.y_axis.quantity.to_ascii_lowercase();
                u.contains('%')
                    || u.contains("percent")
                    || q.contains("%t")
                    || q.contains("percent")
            }
        };
        let div = if percent { 100.0 } else { 1.0 };
        let mut out = s.clone();
        for (i, (&t, a)) in s.y.iter().zip(out.y.iter_mut()).enumerate() {
            let t = t / div;
            if t <= 0.0 {
                return Err(StageError::input(format!(
                    "transmittance at x = {} is {} (≤ 0): it has no absorbance",
                    s.x[i], s.y[i]
                )));
            }
            *a = units::absorbance_from_transmittance(t);
        }
        if let Some(sig) = &mut out.sigma {
            for (v, &t) in sig.iter_mut().zip(&s.y) {
                *v = (*v / div) / ((t / div) * std::f64::consts::LN_10);
            }
        }
        out.curves.clear();
        out.y_axis = Axis::new("absorbance", "");
        let mut a = Artifact::new(Value::Spectrum(out));
        if s.y.iter().any(|&t| t / div > 1.0) {
            a.warn("some transmittance values exceed 100 %: negative absorbance (check the scale or the reference)");
        }
        Ok(a)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::{Inputs, PortValue};
    use crate::value::Spectrum;

    #[test]
    fn percent_transmittance_gives_absorbance() {
        let s = Spectrum::new(
            vec![1.0, 2.0, 3.0],
            vec![100.0, 10.0, 1.0],
            Axis::new("wavelength", "nm"),
            Axis::new("transmittance", "%"),
        );
        let art = Artifact::new(Value::Spectrum(s));
        let inputs = Inputs {
            item: None,
            ports: vec![PortValue::One(&art)],
        };
        let out = TypedStage::run(&ConvertAbsorbance, &inputs, &Options::default()).unwrap();
        let y = &out.spectrum().unwrap().y;
        // A = −log10 T: 100 %T → 0, 10 %T → 1, 1 %T → 2.
        for (a, b) in y.iter().zip([0.0, 1.0, 2.0]) {
            assert!((a - b).abs() < 1e-14);
        }
    }
}
