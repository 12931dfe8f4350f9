//! `xrd.scherrer`: crystallite size by the Scherrer equation τ = Kλ/(β cos θ)
//! (Scherrer 1918; shape factor K discussed by Langford & Wilson 1978), with β the
//! sample broadening in radians after correcting the measured FWHM B for the
//! instrumental FWHM b: Gaussian profiles β² = B² − b², Lorentzian profiles β = B − b
//! (Klug & Alexander, X-ray Diffraction Procedures, 2nd ed., 1974, ch. 9). Uncertainty
//! propagated to first order from u(B), u(2θ), u(b) and u(λ).

use super::{check_wavelength, resolve, wavelength_words, Wavelength};
use crate::quant_util::{self, propagate};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Correction {
    /// β² = B² − b² (Gaussian profiles).
    #[default]
    Gaussian,
    /// β = B − b (Lorentzian profiles).
    Lorentzian,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct GivenPeak {
    /// Name used in the result names.
    pub name: String,
    /// Peak position.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta: f64,
    /// Standard uncertainty of the position.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta_uncertainty: Option<f64>,
    /// Measured full width at half maximum, in degrees 2θ.
    #[schemars(extend("x-unit" = "°"))]
    pub fwhm: f64,
    /// Standard uncertainty of the FWHM.
    #[schemars(extend("x-unit" = "°"))]
    pub fwhm_uncertainty: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Source wavelength (name from the built-in table or a value in Å). Required.
    pub wavelength: Option<Wavelength>,
    /// Scherrer shape factor K (0.9 is the customary value for spherical crystallites
    /// and FWHM; Langford & Wilson 1978 tabulate others).
    pub k: f64,
    /// Instrumental FWHM b (e.g. from a line-profile standard), degrees 2θ.
    #[schemars(extend("x-unit" = "°"))]
    pub instrument_fwhm: f64,
    /// Standard uncertainty of the instrumental FWHM.
    #[schemars(extend("x-unit" = "°"))]
    pub instrument_fwhm_uncertainty: Option<f64>,
    /// How the instrumental width is removed.
    pub correction: Correction,
    /// Peaks given directly (instead of a fit input's peaks).
    pub peaks: Vec<GivenPeak>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            wavelength: None,
            k: 0.9,
            instrument_fwhm: 0.0,
            instrument_fwhm_uncertainty: None,
            correction: Correction::Gaussian,
            peaks: Vec::new(),
        }
    }
}

pub struct Scherrer;

static INPUTS: &[Port] = &[Port::each(
    "fit",
    Kind::Fit,
    "a fit of the diffraction peaks (optional when peaks are given)",
)
.optional()];

pub const SCHERRER: Reference = Reference {
    key: "scherrer1918",
    citation: "P. Scherrer, Bestimmung der Grösse und der inneren Struktur von Kolloidteilchen mittels Röntgenstrahlen, Nachr. Ges. Wiss. Göttingen, Math.-Phys. Kl. (1918) 98–100.",
};
pub const LANGFORD: Reference = Reference {
    key: "langford1978",
    citation: "J. I. Langford, A. J. C. Wilson, Scherrer after sixty years: a survey and some new results in the determination of crystallite size, J. Appl. Cryst. 11 (1978) 102–113.",
};
pub const KLUG: Reference = Reference {
    key: "klug1974",
    citation: "H. P. Klug, L. E. Alexander, X-Ray Diffraction Procedures for Polycrystalline and Amorphous Materials, 2nd ed., Wiley, New York, 1974.",
};

/// τ in nm from 2θ (deg), B and b (deg), λ (Å).
fn size_nm(two_theta: f64, big_b: f64, b: f64, lambda: f64, k: f64, c: Correction) -> f64 {
    let beta_deg = match c {
        Correction::Gaussian => (big_b * big_b - b * b).sqrt(),
        Correction::Lorentzian => big_b - b,
    };
    let beta = beta_deg.to_radians();
    let th = (two_theta / 2.0).to_radians();
    k * lambda / (beta * th.cos()) / 10.0
}

impl TypedStage for Scherrer {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xrd.scherrer",
        version: 1,
        summary:
            "Crystallite size by the Scherrer equation with instrumental-broadening correction",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[SCHERRER, LANGFORD, KLUG, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_wavelength(&o.wavelength)?;
        quant_util::check_positive("k", o.k)?;
        if !(o.instrument_fwhm.is_finite() && o.instrument_fwhm >= 0.0) {
            return Err(OptionError::new(
                "instrument_fwhm",
                "instrument_fwhm must be zero or positive",
            ));
        }
        for (i, p) in o.peaks.iter().enumerate() {
            quant_util::check_positive(&format!("peaks.{i}.fwhm"), p.fwhm)?;
            quant_util::check_positive(&format!("peaks.{i}.two_theta"), p.two_theta)?;
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let corr = match o.correction {
            Correction::Gaussian => "β² = B² − b²",
            Correction::Lorentzian => "β = B − b",
        };
        format!(
            "Crystallite sizes were estimated with the Scherrer equation τ = Kλ/(β cos θ) [scherrer1918] with K = {} [langford1978] and λ = {}, the measured FWHM B corrected for an instrumental FWHM b = {}° by {corr} [klug1974], and uncertainties propagated to first order [jcgm2008].",
            o.k,
            wavelength_words(&o.wavelength),
            o.instrument_fwhm
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let (lambda, _) = resolve(&o.wavelength)?;
        let peaks: Vec<GivenPeak> = if !o.peaks.is_empty() {
            o.peaks.clone()
        } else {
            crate::quant_util::located_peaks(inputs.optional(0))
                .into_iter()
                .filter_map(|p| {
                    p.fwhm.map(|(w, uw)| GivenPeak {
                        name: p.name,
                        two_theta: p.position,
                        two_theta_uncertainty: p.uncertainty,
                        fwhm: w,
                        fwhm_uncertainty: uw,
                    })
                })
                .collect()
        };
        if peaks.is_empty() {
            return Err(StageError::input("no peaks: connect a fit or give peaks"));
        }
        let b = o.instrument_fwhm;
        let mut art = Artifact::new(Value::Summary);
        for p in &peaks {
            if p.fwhm <= b {
                return Err(StageError::input(format!(
                    "peak {}: measured FWHM {}° is not larger than the instrumental {b}°: no size can be derived",
                    p.name, p.fwhm
                )));
            }
            let x = [p.two_theta, p.fwhm, b];
            let u = [
                p.two_theta_uncertainty.unwrap_or(0.0),
                p.fwhm_uncertainty.unwrap_or(0.0),
                o.instrument_fwhm_uncertainty.unwrap_or(0.0),
            ];
            let f = |v: &[f64]| size_nm(v[0], v[1], v[2], lambda, o.k, o.correction);
            let tau = quant_util::finite("crystallite size", f(&x))?;
            let known = u.iter().any(|v| *v > 0.0);
            let ut = known.then(|| propagate(&f, &x, &u));
            let beta = match o.correction {
                Correction::Gaussian => (p.fwhm * p.fwhm - b * b).sqrt(),
                Correction::Lorentzian => p.fwhm - b,
            };
            art.record(Record::number(format!("size.{}", p.name), tau, ut, "nm"));
            art.record(Record::number(
                format!("beta.{}", p.name),
                beta.to_radians(),
                None,
                "rad",
            ));
            if b > 0.0 && p.fwhm < 1.2 * b {
                art.warn(format!("peak {}: the measured width is within 20 % of the instrumental width; the size is poorly determined", p.name));
            }
            if tau > 100.0 {
                art.warn(format!("peak {}: sizes above about 100 nm are beyond the reliable range of the Scherrer equation (common practice)", p.name));
            }
        }
        Ok(art)
    }
}
