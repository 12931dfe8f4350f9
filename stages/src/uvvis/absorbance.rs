//! `uvvis.absorbance`: absorbance A = −log10(T) from transmittance, percent
//! transmittance, or a sample and a reference (blank) intensity spectrum (T = I/I0).
//!
//! Method: the definition of decadic absorbance (IUPAC Compendium of Chemical
//! Terminology, "absorbance"); the reference spectrum is interpolated linearly onto the
//! sample grid when the grids differ. Point uncertainties are propagated to first order:
//! u(A) = u(T)/(T ln 10), or u²(A) = [(u_I/I)² + (u_I0/I0)²]/ln²10.

use crate::quant_util::{self, interpolate};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Curve, CurveRole, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Source {
    /// y is transmittance T (0..1).
    Transmittance,
    /// y is percent transmittance %T (0..100).
    PercentTransmittance,
    /// y is the sample intensity I; the reference port gives I0.
    Intensity,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// What y holds: `transmittance`, `percent_transmittance` or `intensity` (with a
    /// reference spectrum on the second port). Required.
    pub from: Option<Source>,
}

pub struct UvvisAbsorbance;

static INPUTS: &[Port] = &[
    Port::each(
        "sample",
        Kind::Spectrum,
        "transmittance or sample intensity spectrum",
    ),
    Port::each(
        "reference",
        Kind::Spectrum,
        "reference (blank) intensity I0 for `from: intensity`",
    )
    .optional(),
];

pub const IUPAC_ABS: Reference = Reference {
    key: "iupacgoldbook",
    citation: "IUPAC, Compendium of Chemical Terminology (the \"Gold Book\"), 2nd ed., compiled by A. D. McNaught and A. Wilkinson, Blackwell, Oxford, 1997; online version, entry \"absorbance\".",
};

impl TypedStage for UvvisAbsorbance {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.absorbance",
        version: 1,
        summary: "Absorbance A = −log10(T) from transmittance or sample/reference intensities",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[IUPAC_ABS, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.from.is_none() {
            return Err(OptionError::new(
                "from",
                "say what y holds: from: transmittance | percent_transmittance | intensity",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let what = match o.from {
            Some(Source::Transmittance) => "the transmittance T",
            Some(Source::PercentTransmittance) => "the percent transmittance (T = %T/100)",
            _ => "the ratio of sample to reference intensity (T = I/I0, reference interpolated linearly onto the sample grid)",
        };
        format!(
            "Absorbance was calculated as A = −log10(T) from {what} [iupacgoldbook], with point uncertainties propagated to first order [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let n = s.len();
        let mut t = vec![0.0; n];
        let mut ut: Vec<Option<f64>> = vec![None; n];
        match o.from {
            Some(Source::Transmittance) | Some(Source::PercentTransmittance) => {
                let scale = if o.from == Some(Source::PercentTransmittance) {
                    0.01
                } else {
                    1.0
                };
                for i in 0..n {
                    t[i] = s.y[i] * scale;
                    ut[i] = s
                        .sigma
                        .as_ref()
                        .map(|g| g[i] * scale / t[i].abs().max(f64::MIN_POSITIVE));
                }
            }
            Some(Source::Intensity) | None => {
                let r = inputs
                    .optional(1)
                    .and_then(|a| a.spectrum())
                    .ok_or_else(|| {
                        StageError::input(
                            "from: intensity needs a reference spectrum on the `reference` port",
                        )
                    })?;
                for i in 0..n {
                    let i0 = interpolate(&r.x, &r.y, s.x[i]).ok_or_else(|| {
                        StageError::input(format!(
                            "the reference spectrum does not cover x = {}",
                            s.x[i]
                        ))
                    })?;
                    if i0 <= 0.0 {
                        return Err(StageError::input(format!(
                            "reference intensity is not positive at x = {} ({i0})",
                            s.x[i]
                        )));
                    }
                    t[i] = s.y[i] / i0;
                    let ui = s
                        .sigma
                        .as_ref()
                        .map(|g| g[i] / s.y[i].abs().max(f64::MIN_POSITIVE));
                    let ur = r
                        .sigma
                        .as_ref()
                        .and_then(|g| interpolate(&r.x, g, s.x[i]))
                        .map(|g| g / i0);
                    // relative uncertainty of T
                    ut[i] = match (ui, ur) {
                        (None, None) => None,
                        (a, b) => {
                            Some((a.unwrap_or(0.0).powi(2) + b.unwrap_or(0.0).powi(2)).sqrt())
                        }
                    };
                }
            }
        }
        if let Some(i) = t.iter().position(|v| *v <= 0.0) {
            return Err(StageError::input(format!(
                "transmittance is zero or negative at x = {} ({}): absorbance undefined",
                s.x[i], t[i]
            )));
        }
        let a: Vec<f64> = t.iter().map(|v| -v.log10()).collect();
        let sigma = if ut.iter().all(|u| u.is_some()) {
            Some(ut.iter().map(|u| u.unwrap_or(0.0) / LN_10).collect())
        } else {
            None
        };
        let mut out = Spectrum::new(
            s.x.clone(),
            a,
            s.x_axis.clone(),
            Axis::new("absorbance", ""),
        );
        out.sigma = sigma;
        out.metadata = s.metadata.clone();
        if let Some(r) = inputs.optional(1).and_then(|a| a.spectrum()) {
            let y =
                s.x.iter()
                    .map(|x| interpolate(&r.x, &r.y, *x).unwrap_or(f64::NAN))
                    .collect();
            out.curves.push(Curve {
                name: "reference intensity".into(),
                role: CurveRole::Reference,
                y,
            });
        }
        let mut art = Artifact::new(Value::Spectrum(out));
        let amax = art
            .spectrum()
            .map_or(0.0, |s| s.y.iter().cloned().fold(f64::MIN, f64::max));
        if amax > 3.0 {
            art.warn(format!(
                "absorbance reaches {amax:.2}: above about 3, stray light makes values unreliable (common practice)"
            ));
        }
        Ok(art)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;

    #[test]
    fn ten_percent_transmittance_is_one_absorbance_unit() {
        // Definition: A = −log10(0.10) = 1.
        let s = Spectrum::new(
            vec![400.0, 500.0],
            vec![10.0, 100.0],
            Axis::new("wavelength", "nm"),
            Axis::new("transmittance", "%"),
        );
        let a = Artifact::new(Value::Spectrum(s));
        let o = Options {
            from: Some(Source::PercentTransmittance),
        };
        let out = UvvisAbsorbance
            .run(
                &Inputs {
                    item: None,
                    ports: vec![PortValue::One(&a), PortValue::Missing],
                },
                &o,
            )
            .unwrap();
        let y = &out.spectrum().unwrap().y;
        assert!((y[0] - 1.0).abs() < 1e-12 && y[1].abs() < 1e-12);
    }
}
