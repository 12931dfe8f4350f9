//! `xrd.index`: match measured d-spacings against a user-given list of expected
//! reflections (label and d) within a tolerance (common practice of phase
//! identification against a reference pattern; Cullity & Stock 2001, ch. 14).
//! Each measured peak takes the expected line nearest in d, if within the tolerance.

use super::bragg::positions;
use super::{bragg_d, resolve, wavelength_words, Wavelength, BRAGG};
use crate::quant_util::{self, check_range};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Record, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Expected {
    /// Label of the reflection, e.g. `111` or `Si 220`.
    pub label: String,
    /// Expected interplanar spacing.
    #[schemars(extend("x-unit" = "Å"))]
    pub d: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Source wavelength (name or value in Å). Required.
    pub wavelength: Option<Wavelength>,
    /// The expected reflections.
    pub expected: Vec<Expected>,
    /// Largest |d_measured − d_expected| for a match.
    #[schemars(extend("x-unit" = "Å"))]
    pub tolerance: f64,
    /// 2θ positions, used instead of the input's peaks when given.
    #[schemars(extend("x-unit" = "°"))]
    pub two_theta: Vec<f64>,
    /// Only peaks with 2θ in this range.
    #[schemars(extend("x-unit" = "°"))]
    pub range: Option<[f64; 2]>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            wavelength: None,
            expected: Vec::new(),
            tolerance: 0.02,
            two_theta: Vec::new(),
            range: None,
        }
    }
}

pub struct XrdIndex;

static INPUTS: &[Port] = &[Port::each(
    "peaks",
    Kind::Any,
    "a peak list or fit on a 2θ axis (optional when two_theta is given)",
)
.optional()];

impl TypedStage for XrdIndex {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xrd.index",
        version: 1,
        summary: "Match measured d-spacings to expected reflections within a tolerance",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[BRAGG, super::cubic::CULLITY],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        super::check_wavelength(&o.wavelength)?;
        if o.expected.is_empty() {
            return Err(OptionError::new(
                "expected",
                "give the expected reflections: [{label, d}]",
            ));
        }
        for (i, e) in o.expected.iter().enumerate() {
            quant_util::check_positive(&format!("expected.{i}.d"), e.d)?;
        }
        quant_util::check_positive("tolerance", o.tolerance)?;
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "Measured reflections (d by Bragg's law with λ = {} [bragg1913]) were assigned to the nearest of {} expected d-spacings within ±{} Å [cullity2001].",
            wavelength_words(&o.wavelength),
            o.expected.len(),
            o.tolerance
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let (lambda, _) = resolve(&o.wavelength)?;
        let peaks = positions(inputs.optional(0), &o.two_theta, None, o.range);
        if peaks.is_empty() {
            return Err(StageError::input(
                "no 2θ positions: connect peaks or give two_theta",
            ));
        }
        let mut art = Artifact::new(Value::Summary);
        let (mut names, mut tts, mut ds, mut labels, mut eds, mut deltas) =
            (vec![], vec![], vec![], vec![], vec![], vec![]);
        let mut used = vec![false; o.expected.len()];
        for p in &peaks {
            let (d, ud) = bragg_d(p.position, lambda, 1, p.uncertainty, 0.0)?;
            let best = o
                .expected
                .iter()
                .enumerate()
                .min_by(|a, b| (a.1.d - d).abs().total_cmp(&(b.1.d - d).abs()));
            art.record(Record::number(format!("d.{}", p.name), d, ud, "Å"));
            names.push(p.name.clone());
            tts.push(p.position);
            ds.push(d);
            match best {
                Some((i, e)) if (e.d - d).abs() <= o.tolerance => {
                    used[i] = true;
                    art.record(Record::text(format!("match.{}", p.name), e.label.clone()));
                    art.record(Record::number(
                        format!("delta_d.{}", p.name),
                        d - e.d,
                        ud,
                        "Å",
                    ));
                    labels.push(e.label.clone());
                    eds.push(e.d);
                    deltas.push(d - e.d);
                }
                _ => {
                    art.record(Record::text(format!("match.{}", p.name), "unmatched"));
                    labels.push(String::new());
                    eds.push(f64::NAN);
                    deltas.push(f64::NAN);
                }
            }
        }
        let matched = labels.iter().filter(|l| !l.is_empty()).count();
        art.record(Record::number("matched", matched as f64, None, ""));
        art.record(Record::number(
            "unmatched",
            (peaks.len() - matched) as f64,
            None,
            "",
        ));
        if matched < peaks.len() {
            art.warn(format!(
                "{} of {} peaks match no expected reflection within ±{} Å",
                peaks.len() - matched,
                peaks.len(),
                o.tolerance
            ));
        }
        let missing: Vec<&str> = o
            .expected
            .iter()
            .zip(&used)
            .filter(|(_, u)| !**u)
            .map(|(e, _)| e.label.as_str())
            .collect();
        if !missing.is_empty() {
            art.info(format!(
                "expected reflections not observed: {}",
                missing.join(", ")
            ));
        }
        let num = |name: &str, unit: &str, v: Vec<f64>| Column {
            name: name.into(),
            unit: unit.into(),
            data: ColumnData::Number {
                values: v,
                uncertainty: None,
            },
        };
        art.value = Value::Table(Table {
            title: "Indexing".into(),
            columns: vec![
                Column {
                    name: "peak".into(),
                    unit: String::new(),
                    data: ColumnData::Text(names),
                },
                num("two_theta", "°", tts),
                num("d", "Å", ds),
                Column {
                    name: "reflection".into(),
                    unit: String::new(),
                    data: ColumnData::Text(labels),
                },
                num("d_expected", "Å", eds),
                num("delta_d", "Å", deltas),
            ],
        });
        Ok(art)
    }
}
