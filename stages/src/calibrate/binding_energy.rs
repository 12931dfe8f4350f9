//! `calibrate.binding_energy`: kinetic to binding energy for photoelectron spectra,
//! BE = hν − KE − φ (Einstein's photoelectric relation with the spectrometer work
//! function φ; Briggs & Seah, Practical Surface Analysis, 2nd ed., 1990, ch. 1).
//!
//! The excitation energy hν is a number or a source name from the reference table
//! (`al_ka` 1486.6 eV and `al_ka_mono` 1486.7 eV as commonly quoted, `mg_ka`
//! 1253.6 eV, `he_i` 21.22 eV, `he_ii` 40.81 eV; common practice). The points keep
//! their order, so an ascending KE axis becomes a descending BE axis.

use super::Target;
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Excitation energy hν: a number in eV or a source name (`al_ka`, `al_ka_mono`,
    /// `mg_ka`, `he_i`, `he_ii`). Required.
    #[schemars(extend("x-unit" = "eV"))]
    pub source: Option<Target>,
    /// Spectrometer work function φ, in eV. Required (the value from the instrument's
    /// calibration; 0 when kinetic energies are already referenced to the Fermi level).
    #[schemars(extend("x-unit" = "eV"))]
    pub work_function: Option<f64>,
}

pub struct CalibrateBindingEnergy;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a photoelectron spectrum on a kinetic-energy axis (eV)",
)];

static REFS: &[Reference] = &[Reference {
    key: "briggs1990",
    citation: "D. Briggs, M. P. Seah (eds.), Practical Surface Analysis, Vol. 1: Auger and X-ray Photoelectron Spectroscopy, 2nd ed. (Wiley, Chichester, 1990), chapter 1.",
}];

const EXCITATION: &[&str] = &["excitation"];

impl TypedStage for CalibrateBindingEnergy {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "calibrate.binding_energy",
        version: 1,
        summary: "Kinetic to binding energy, BE = hν − KE − φ, with the excitation source by name or value",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        let src = o.source.as_ref().ok_or_else(|| {
            OptionError::new(
                "source",
                "give the excitation energy (eV) or a source name such as al_ka_mono",
            )
        })?;
        src.resolve(EXCITATION)
            .map_err(|m| OptionError::new("source", m))?;
        match o.work_function {
            None => Err(OptionError::new(
                "work_function",
                "give the spectrometer work function in eV",
            )),
            Some(w) if !w.is_finite() => {
                Err(OptionError::new("work_function", "must be a finite number"))
            }
            _ => Ok(()),
        }
    }

    fn methods(&self, o: &Options) -> String {
        let src = match &o.source {
            Some(Target::Value(v)) => format!("{v} eV"),
            Some(t) => t.describe(EXCITATION),
            None => "(not given)".to_string(),
        };
        format!(
            "Kinetic energies were converted to binding energies as BE = hν − KE − φ [briggs1990] with hν = {src} and a spectrometer work function φ = {} eV.",
            o.work_function.map_or("(not given)".to_string(), |w| w.to_string())
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let (hv, _, src) = o
            .source
            .as_ref()
            .ok_or_else(|| StageError::input("no excitation source given"))?
            .resolve(EXCITATION)
            .map_err(StageError::input)?;
        let phi = o
            .work_function
            .ok_or_else(|| StageError::input("no work function given"))?;
        if !s.x_axis.unit.is_empty() && !s.x_axis.unit.eq_ignore_ascii_case("eV") {
            return Err(StageError::input(format!(
                "the x axis is in {}, not eV",
                s.x_axis.unit
            )));
        }
        if s.x_axis.quantity.to_ascii_lowercase().contains("binding") {
            return Err(StageError::input("the x axis is already a binding energy"));
        }
        let mut out = s.clone();
        out.x = s.x.iter().map(|ke| binding_energy(hv, *ke, phi)).collect();
        out.x_axis = Axis::new("binding energy", "eV");
        out.metadata
            .insert("excitation_energy_ev".into(), format!("{hv}"));
        let mut a = Artifact::new(Value::Spectrum(out)).with_results(vec![
            Record::number("excitation_energy", hv, None, "eV"),
            Record::number("work_function", phi, None, "eV"),
            Record::text("excitation_source", src),
        ]);
        if s.x.iter().any(|&ke| ke > hv) {
            a.warn("some kinetic energies exceed the excitation energy: negative binding energies");
        }
        Ok(a)
    }
}

/// BE = hν − KE − φ.
pub fn binding_energy(hv: f64, ke: f64, phi: f64) -> f64 {
    hv - ke - phi
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn named_source_and_relation() {
        // Arithmetic: 1486.6 − 1201.8 − 4.0 = 280.8 eV.
        assert!((binding_energy(1486.6, 1201.8, 4.0) - 280.8).abs() < 1e-9);
        let o = Options {
            source: Some(Target::Named("mg_ka".into())),
            work_function: Some(4.5),
        };
        assert!(CalibrateBindingEnergy.check(&o).is_ok());
        assert!(
            CalibrateBindingEnergy
                .methods(&o)
                .contains("1253.6 eV (mg_ka)"),
            "{}",
            CalibrateBindingEnergy.methods(&o)
        );
        let bad = Options {
            source: Some(Target::Named("adventitious_c1s".into())),
            work_function: Some(4.5),
        };
        assert!(CalibrateBindingEnergy.check(&bad).is_err());
    }
}
