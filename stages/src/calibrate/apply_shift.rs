//! `calibrate.apply_shift`: shifts x by the amount another step found, so every region of a
//! sample gets the charge correction determined on one reference line (common practice in
//! photoelectron spectroscopy: the shift that brings adventitious C 1s to its reference
//! value is applied to all core levels of the same sample).
//!
//! The shift is read from the `shift` record (or another named record) of the reference
//! input, which is normally a `calibrate.shift` step over the same items.

use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Name of the record on the `shift_from` input that holds the shift, in x units.
    pub record: String,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            record: "shift".into(),
        }
    }
}

pub struct ApplyShift;

static INPUTS: &[Port] = &[
    Port::each("spectrum", Kind::Spectrum, "the spectrum to shift"),
    Port::each(
        "shift_from",
        Kind::Any,
        "the step that determined the shift for the same item (e.g. calibrate.shift)",
    ),
];

impl TypedStage for ApplyShift {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "calibrate.apply_shift",
        version: 1,
        summary: "Shift x by the amount another step determined for the same item (e.g. a charge correction)",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.record.trim().is_empty() {
            return Err(OptionError::new(
                "record",
                "the record name must not be empty",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "The same rigid shift (the `{}` found on the reference line of each sample) was applied to the other regions of that sample.",
            o.record
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let reference = inputs.one(1)?;
        let record = reference.result(&o.record).ok_or_else(|| {
            StageError::input(format!(
                "the shift_from input has no record named `{}`",
                o.record
            ))
        })?;
        let shift = record
            .as_number()
            .ok_or_else(|| StageError::input(format!("record `{}` is not a number", o.record)))?;
        if !shift.is_finite() {
            return Err(StageError::input(format!(
                "record `{}` is not finite",
                o.record
            )));
        }
        if !record.unit.is_empty()
            && !s.x_axis.unit.is_empty()
            && !record.unit.eq_ignore_ascii_case(&s.x_axis.unit)
        {
            return Err(StageError::input(format!(
                "the shift is in {} but the x axis is in {}",
                record.unit, s.x_axis.unit
            )));
        }
        let mut out = s.clone();
        for v in &mut out.x {
            *v += shift;
        }
        out.metadata.insert("x_shift".into(), shift.to_string());
        Ok(
            Artifact::new(Value::Spectrum(out)).with_results(vec![Record::number(
                "shift",
                shift,
                None,
                &s.x_axis.unit,
            )]),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;
    use crate::value::{Axis, Spectrum};

    fn spectrum() -> Artifact {
        let s = Spectrum::new(
            vec![530.0, 529.9, 529.8],
            vec![1.0, 2.0, 1.0],
            Axis::new("binding energy", "eV"),
            Axis::new("intensity", "counts"),
        );
        Artifact::new(Value::Spectrum(s))
    }

    #[test]
    fn applies_the_shift_of_the_reference_step() {
        // Arithmetic: 530.0 + (-0.62) = 529.38.
        let spec = spectrum();
        let reference = Artifact::new(Value::Summary)
            .with_results(vec![Record::number("shift", -0.62, None, "eV")]);
        let inputs = Inputs {
            item: Some("TS-0"),
            ports: vec![PortValue::One(&spec), PortValue::One(&reference)],
        };
        let out = TypedStage::run(&ApplyShift, &inputs, &Options::default()).unwrap();
        let s = out.spectrum().unwrap();
        assert!((s.x[0] - 529.38).abs() < 1e-12);
        assert_eq!(s.x.len(), 3);
    }

    #[test]
    fn missing_or_mismatched_shift_is_an_error() {
        let spec = spectrum();
        let none = Artifact::new(Value::Summary);
        let inputs = Inputs {
            item: None,
            ports: vec![PortValue::One(&spec), PortValue::One(&none)],
        };
        let e = TypedStage::run(&ApplyShift, &inputs, &Options::default()).unwrap_err();
        assert!(e.to_string().contains("no record named `shift`"));
        let ppm = Artifact::new(Value::Summary)
            .with_results(vec![Record::number("shift", 0.1, None, "ppm")]);
        let inputs = Inputs {
            item: None,
            ports: vec![PortValue::One(&spec), PortValue::One(&ppm)],
        };
        let e = TypedStage::run(&ApplyShift, &inputs, &Options::default()).unwrap_err();
        assert!(e.to_string().contains("in ppm but the x axis is in eV"));
    }
}
