//! `xrd.cubic_lattice`: lattice parameter of a cubic phase from indexed reflections.
//!
//! Method: for a cubic lattice d = a/√(h² + k² + l²). The parameter a is the least-
//! squares solution of that model in the measured d-spacings,
//! a = Σ w_i d_i s_i⁻¹ / Σ w_i s_i⁻², s_i = √(h² + k² + l²), weighted by
//! w_i = 1/u²(d_i) when every reflection has an uncertainty (u(a) = (Σ w_i s_i⁻²)^−½),
//! unweighted otherwise (u(a) = s/(Σ s_i⁻²)^½ with s the residual standard deviation);
//! see e.g. Cullity & Stock, Elements of X-Ray Diffraction, 3rd ed., 2001, ch. 13.
//! The per-reflection values a_i = d_i·s_i are reported too.

use super::{bragg_d, resolve, wavelength_words, Wavelength, BRAGG};
use crate::quant_util::{self, located_peaks};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Reflection {
    /// Miller indices.
    pub hkl: [i32; 3],
    /// Peak position (with a wavelength), or give d or peak.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta: Option<f64>,
    /// Interplanar spacing.
    #[schemars(extend("x-unit" = "Å"))]
    pub d: Option<f64>,
    /// Name of a peak of the connected fit (its centre and standard error are used).
    pub peak: Option<String>,
    /// Standard uncertainty of 2θ (or of d when d is given).
    pub uncertainty: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Source wavelength, needed when positions are 2θ.
    pub wavelength: Option<Wavelength>,
    /// The indexed reflections (at least two).
    pub reflections: Vec<Reflection>,
}

pub struct CubicLattice;

static INPUTS: &[Port] = &[Port::each(
    "peaks",
    Kind::Any,
    "a fit or peak list whose peaks the reflections name",
)
.optional()];

pub const CULLITY: Reference = Reference {
    key: "cullity2001",
    citation: "B. D. Cullity, S. R. Stock, Elements of X-Ray Diffraction, 3rd ed., Prentice Hall, Upper Saddle River, 2001.",
};

impl TypedStage for CubicLattice {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xrd.cubic_lattice",
        version: 1,
        summary: "Cubic lattice parameter by least squares from indexed reflections",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[BRAGG, CULLITY, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.reflections.len() < 2 {
            return Err(OptionError::new(
                "reflections",
                "give at least two indexed reflections",
            ));
        }
        for (i, r) in o.reflections.iter().enumerate() {
            let n = [r.two_theta.is_some(), r.d.is_some(), r.peak.is_some()]
                .iter()
                .filter(|b| **b)
                .count();
            if n != 1 {
                return Err(OptionError::new(
                    format!("reflections.{i}"),
                    "give exactly one of two_theta, d or peak",
                ));
            }
            if r.hkl == [0, 0, 0] {
                return Err(OptionError::new(
                    format!("reflections.{i}.hkl"),
                    "hkl cannot be 000",
                ));
            }
            if (r.two_theta.is_some() || r.peak.is_some()) && o.wavelength.is_none() {
                return Err(OptionError::new(
                    "wavelength",
                    "2θ positions need a wavelength",
                ));
            }
        }
        if o.wavelength.is_some() {
            super::check_wavelength(&o.wavelength)?;
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let w = if o.wavelength.is_some() {
            format!(" (λ = {})", wavelength_words(&o.wavelength))
        } else {
            String::new()
        };
        format!(
            "The cubic lattice parameter was obtained by least squares on d = a/√(h² + k² + l²) over {} indexed reflections{w} [bragg1913] [cullity2001], with its standard uncertainty from the fit [jcgm2008].",
            o.reflections.len()
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let peaks = located_peaks(inputs.optional(0));
        let lambda = match &o.wavelength {
            Some(_) => Some(resolve(&o.wavelength)?.0),
            None => None,
        };
        let mut rows = Vec::new(); // (label, d, u_d, s)
        for r in &o.reflections {
            let (d, ud) = if let Some(d) = r.d {
                (d, r.uncertainty)
            } else {
                let lam = lambda.ok_or_else(|| StageError::input("a wavelength is needed"))?;
                let (tt, ut) = match (&r.peak, r.two_theta) {
                    (Some(name), _) => {
                        let p = peaks.iter().find(|p| &p.name == name).ok_or_else(|| {
                            StageError::input(format!("no peak '{name}' in the input"))
                        })?;
                        (p.position, p.uncertainty.or(r.uncertainty))
                    }
                    (None, Some(t)) => (t, r.uncertainty),
                    _ => return Err(StageError::input("reflection without position")),
                };
                bragg_d(tt, lam, 1, ut, 0.0)?
            };
            let [h, k, l] = r.hkl;
            let s = ((h * h + k * k + l * l) as f64).sqrt();
            rows.push((format!("{h}{k}{l}"), d, ud, s));
        }
        let weighted = rows.iter().all(|r| r.2.is_some_and(|u| u > 0.0));
        let w: Vec<f64> = rows
            .iter()
            .map(|r| {
                if weighted {
                    1.0 / r.2.unwrap_or(1.0).powi(2)
                } else {
                    1.0
                }
            })
            .collect();
        let num: f64 = rows.iter().zip(&w).map(|(r, w)| w * r.1 / r.3).sum();
        let den: f64 = rows.iter().zip(&w).map(|(r, w)| w / (r.3 * r.3)).sum();
        let a = quant_util::finite("lattice parameter", num / den)?;
        let n = rows.len() as f64;
        let chi2: f64 = rows
            .iter()
            .zip(&w)
            .map(|(r, w)| w * (r.1 - a / r.3).powi(2))
            .sum();
        let ua = if weighted {
            (1.0 / den).sqrt()
        } else {
            (chi2 / (n - 1.0) / den).sqrt()
        };
        let mut art = Artifact::new(Value::Summary);
        art.record(Record::number("lattice_parameter", a, Some(ua), "Å"));
        for r in &rows {
            art.record(Record::number(
                format!("a.{}", r.0),
                r.1 * r.3,
                r.2.map(|u| u * r.3),
                "Å",
            ));
        }
        art.record(Record::number("reflections", n, None, ""));
        if weighted && n > 1.0 {
            let rc = chi2 / (n - 1.0);
            art.record(Record::number("reduced_chi_square", rc, None, ""));
            if !(0.1..=10.0).contains(&rc) {
                art.warn(format!(
                    "reduced χ² = {rc:.2}: the d uncertainties do not match the scatter"
                ));
            }
        }
        Ok(art)
    }
}
