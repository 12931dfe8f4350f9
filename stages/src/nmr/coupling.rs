//! `nmr.coupling`: coupling constants J (Hz) from the line positions of a first-order
//! multiplet.
//!
//! Method: adjacent line spacings Δδ (ppm) times the spectrometer frequency ν0 (MHz)
//! give Hz, since 1 ppm of ν0 MHz is ν0 Hz (J = Δδ·ν0; common practice, e.g. Claridge
//! 2016, ch. 2). Line positions come from the options, or from the peaks of a peak
//! list or fit inside `range`. The spacing uncertainty combines the two line
//! uncertainties (fit standard errors, or `position_uncertainty`) in quadrature.

use crate::nmr::integrate::CLARIDGE;
use crate::quant_util::{self, check_range, located_peaks};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Line positions of the multiplet; when empty they are taken from the input's
    /// peaks inside `range`.
    #[schemars(extend("x-unit" = "ppm"))]
    pub lines: Vec<f64>,
    /// Shift range holding the multiplet (used with a peak list or fit input).
    #[schemars(extend("x-unit" = "ppm"))]
    pub range: Option<[f64; 2]>,
    /// Spectrometer frequency for the observed nucleus; when absent it is read from the
    /// spectrum's metadata `spectrometer_frequency_mhz`.
    #[schemars(extend("x-unit" = "MHz"))]
    pub frequency: Option<f64>,
    /// Standard uncertainty of a line position where the source gives none.
    #[schemars(extend("x-unit" = "ppm"))]
    pub position_uncertainty: Option<f64>,
}

pub struct NmrCoupling;

static INPUTS: &[Port] = &[Port::each(
    "peaks",
    Kind::Any,
    "a peak list or fit holding the multiplet's lines (optional when lines are given)",
)
.optional()];

impl TypedStage for NmrCoupling {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "nmr.coupling",
        version: 1,
        summary: "Coupling constants J in Hz from multiplet line positions and the spectrometer frequency",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[CLARIDGE, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_range("range", o.range)?;
        if let Some(f) = o.frequency {
            quant_util::check_positive("frequency", f)?;
        }
        quant_util::check_uncertainty("position_uncertainty", o.position_uncertainty)?;
        if o.lines.iter().any(|v| !v.is_finite()) {
            return Err(OptionError::new(
                "lines",
                "every line position must be a number",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let f = match o.frequency {
            Some(f) => format!("{f} MHz"),
            None => "the spectrometer frequency recorded with the spectrum".to_string(),
        };
        let src = if o.lines.is_empty() {
            match o.range {
                Some(r) => format!("the located lines between {} and {} ppm", r[0], r[1]),
                None => "all located lines".to_string(),
            }
        } else {
            format!("the given line positions ({} lines)", o.lines.len())
        };
        format!(
            "Coupling constants were taken as the spacings of adjacent lines of {src} multiplied by {f} (J = Δδ·ν0) [claridge2016], with uncertainties combined in quadrature [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let input = inputs.optional(0);
        let mut lines: Vec<(f64, Option<f64>)> = if o.lines.is_empty() {
            located_peaks(input)
                .into_iter()
                .filter(|p| {
                    o.range
                        .is_none_or(|r| p.position >= r[0] && p.position <= r[1])
                })
                .map(|p| (p.position, p.uncertainty.or(o.position_uncertainty)))
                .collect()
        } else {
            o.lines
                .iter()
                .map(|v| (*v, o.position_uncertainty))
                .collect()
        };
        if lines.len() < 2 {
            return Err(StageError::input(format!(
                "a coupling needs at least 2 lines (found {})",
                lines.len()
            )));
        }
        lines.sort_by(|a, b| a.0.total_cmp(&b.0));
        let freq = match o.frequency {
            Some(f) => f,
            None => {
                let meta = input
                    .and_then(|a| a.spectrum())
                    .and_then(|s| s.metadata.get("spectrometer_frequency_mhz").cloned());
                let text = meta.ok_or_else(|| {
                    StageError::input(
                        "no spectrometer frequency: give `frequency` (MHz) or import a spectrum with spectrometer_frequency_mhz metadata",
                    )
                })?;
                text.trim()
                    .parse::<f64>()
                    .ok()
                    .filter(|f| *f > 0.0)
                    .ok_or_else(|| {
                        StageError::input(format!(
                        "metadata spectrometer_frequency_mhz = '{text}' is not a positive number"
                    ))
                    })?
            }
        };
        let mut art = Artifact::new(Value::Summary);
        let mut js = Vec::new();
        for (k, w) in lines.windows(2).enumerate() {
            let j = (w[1].0 - w[0].0) * freq;
            let u = match (w[0].1, w[1].1) {
                (Some(a), Some(b)) => Some((a * a + b * b).sqrt() * freq),
                _ => None,
            };
            art.record(Record::number(format!("j.{}", k + 1), j, u, "Hz"));
            js.push(j);
        }
        let n = js.len() as f64;
        let mean = js.iter().sum::<f64>() / n;
        let u_mean = if js.len() >= 2 {
            let v = js.iter().map(|j| (j - mean).powi(2)).sum::<f64>() / (n - 1.0);
            Some((v / n).sqrt())
        } else {
            art.results[0].uncertainty
        };
        art.record(Record::number("j_mean", mean, u_mean, "Hz"));
        let centre = lines.iter().map(|l| l.0).sum::<f64>() / lines.len() as f64;
        art.record(Record::number("multiplet_centre", centre, None, "ppm"));
        art.record(Record::number("lines", lines.len() as f64, None, ""));
        art.record(Record::number("spectrometer_frequency", freq, None, "MHz"));
        Ok(art)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;

    #[test]
    fn a_doublet_at_400_mhz() {
        // Lines 0.0175 ppm apart at 400 MHz: J = 0.0175 × 400 = 7.0 Hz.
        let o = Options {
            lines: vec![1.2175, 1.2000],
            frequency: Some(400.0),
            ..Options::default()
        };
        let out = NmrCoupling
            .run(
                &Inputs {
                    item: None,
                    ports: vec![PortValue::Missing],
                },
                &o,
            )
            .unwrap();
        let j = out.result("j.1").unwrap().as_number().unwrap();
        assert!((j - 7.0).abs() < 1e-9);
    }
}
