//! `xrd.bragg`: d-spacings from 2θ peak positions by Bragg's law, d = nλ/(2 sin θ)
//! (Bragg & Bragg 1913), with u(d) propagated to first order from u(2θ) and u(λ).
//! Positions come from a fit (centres with standard errors), a peak list, or the options.

use super::{bragg_d, check_wavelength, resolve, wavelength_words, Wavelength, BRAGG};
use crate::quant_util::{self, check_range, located_peaks, Located};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Record, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Source wavelength: a name from the built-in table (`Cu Ka1`, `Cu Ka`, `Mo Ka1`,
    /// `Co Ka1`, `Cr Ka1`, `Fe Ka1`, `Ag Ka1`...) or a value in Å. Required.
    pub wavelength: Option<Wavelength>,
    /// Standard uncertainty of the wavelength (0 when absent).
    #[schemars(extend("x-unit" = "Å"))]
    pub wavelength_uncertainty: Option<f64>,
    /// Diffraction order n.
    pub order: u32,
    /// 2θ positions, used instead of the input's peaks when given.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta: Vec<f64>,
    /// Standard uncertainty of a 2θ position where the source gives none.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta_uncertainty: Option<f64>,
    /// Only peaks with 2θ in this range.
    #[schemars(extend("x-unit" = "°"))]
    pub range: Option<[f64; 2]>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            wavelength: None,
            wavelength_uncertainty: None,
            order: 1,
            two_theta: Vec::new(),
            two_theta_uncertainty: None,
            range: None,
        }
    }
}

pub struct XrdBragg;

static INPUTS: &[Port] = &[Port::each(
    "peaks",
    Kind::Any,
    "a peak list or fit on a 2θ axis (optional when two_theta is given)",
)
.optional()];

/// Peak positions in 2θ from the options or the input.
pub fn positions(
    input: Option<&Artifact>,
    given: &[f64],
    u_default: Option<f64>,
    range: Option<[f64; 2]>,
) -> Vec<Located> {
    let mut v: Vec<Located> = if given.is_empty() {
        located_peaks(input)
    } else {
        given
            .iter()
            .enumerate()
            .map(|(i, p)| Located {
                name: (i + 1).to_string(),
                position: *p,
                uncertainty: None,
                fwhm: None,
                height: None,
            })
            .collect()
    };
    for p in &mut v {
        p.uncertainty = p.uncertainty.or(u_default);
    }
    v.retain(|p| range.is_none_or(|r| p.position >= r[0] && p.position <= r[1]));
    v
}

impl TypedStage for XrdBragg {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xrd.bragg",
        version: 1,
        summary: "d-spacings from 2θ by Bragg's law, with uncertainty",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[BRAGG, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_wavelength(&o.wavelength)?;
        if o.order == 0 {
            return Err(OptionError::new(
                "order",
                "the diffraction order must be at least 1",
            ));
        }
        quant_util::check_uncertainty("wavelength_uncertainty", o.wavelength_uncertainty)?;
        quant_util::check_uncertainty("two_theta_uncertainty", o.two_theta_uncertainty)?;
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "Interplanar spacings were calculated by Bragg's law, d = nλ/(2 sin θ), with n = {} and λ = {} [bragg1913], propagating the uncertainty of 2θ to first order [jcgm2008].",
            o.order,
            wavelength_words(&o.wavelength)
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let (lambda, _) = resolve(&o.wavelength)?;
        let peaks = positions(
            inputs.optional(0),
            &o.two_theta,
            o.two_theta_uncertainty,
            o.range,
        );
        if peaks.is_empty() {
            return Err(StageError::input(
                "no 2θ positions: connect peaks or give two_theta",
            ));
        }
        let mut art = Artifact::new(Value::Summary);
        let (mut names, mut tt, mut utt, mut ds, mut uds) =
            (vec![], vec![], vec![], vec![], vec![]);
        for p in &peaks {
            let (d, u) = bragg_d(
                p.position,
                lambda,
                o.order,
                p.uncertainty,
                o.wavelength_uncertainty.unwrap_or(0.0),
            )?;
            art.record(Record::number(format!("d.{}", p.name), d, u, "Å"));
            names.push(p.name.clone());
            tt.push(p.position);
            utt.push(p.uncertainty.unwrap_or(f64::NAN));
            ds.push(d);
            uds.push(u.unwrap_or(f64::NAN));
        }
        art.record(Record::number(
            "wavelength",
            lambda,
            o.wavelength_uncertainty,
            "Å",
        ));
        art.value = Value::Table(Table {
            title: "Bragg d-spacings".into(),
            columns: vec![
                Column {
                    name: "peak".into(),
                    unit: String::new(),
                    data: ColumnData::Text(names),
                },
                Column {
                    name: "two_theta".into(),
                    unit: "°".into(),
                    data: ColumnData::Number {
                        values: tt,
                        uncertainty: Some(utt),
                    },
                },
                Column {
                    name: "d".into(),
                    unit: "Å".into(),
                    data: ColumnData::Number {
                        values: ds,
                        uncertainty: Some(uds),
                    },
                },
            ],
        });
        Ok(art)
    }
}
