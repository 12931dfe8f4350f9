//! `surface.roughness`: areal (ISO 25178-2) and line (ISO 4287) roughness parameters.
//!
//! Heights z are taken relative to their arithmetic mean (the reference plane of data that
//! has already been levelled, e.g. by `surface.level`; no S-/L-filter or λc profile filter
//! is applied). Over the N sampled points of the evaluation area:
//! - Sa  = (1/N) Σ |z|                       arithmetical mean height
//! - Sq  = √((1/N) Σ z²)                     root mean square height
//! - Ssk = (1/Sq³) (1/N) Σ z³                skewness
//! - Sku = (1/Sq⁴) (1/N) Σ z⁴                kurtosis
//! - Sp  = max z                              maximum peak height
//! - Sv  = |min z|                            maximum pit height (a positive number)
//! - Sz  = Sp + Sv                            maximum height
//!
//! Line parameters on a row (each row relative to its own mean line, the row's mean):
//! - Ra = (1/n) Σ |Z|,  Rq = √((1/n) Σ Z²), for one chosen row or averaged over all rows.
//!
//! The sums are the discrete forms of the standards' integrals over the evaluation area
//! (ISO 25178-2:2012 §4.1–4.2; ISO 4287:1997 §4.2).

use crate::image::common::{check_image, image_in};
use crate::stage::{Inputs, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const ISO25178: Reference = Reference {
    key: "iso25178",
    citation: "ISO 25178-2:2012, Geometrical product specifications (GPS) — Surface texture: Areal — Part 2: Terms, definitions and surface texture parameters, International Organization for Standardization, Geneva (2012).",
};
pub const ISO4287: Reference = Reference {
    key: "iso4287",
    citation: "ISO 4287:1997, Geometrical Product Specifications (GPS) — Surface texture: Profile method — Terms, definitions and surface texture parameters, International Organization for Standardization, Geneva (1997).",
};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct RoughnessOptions {
    /// Row (0-based from the top) for the line parameters Ra and Rq; all rows averaged when absent.
    pub row: Option<usize>,
}

/// Areal parameters (heights in the map's unit).
#[derive(Clone, Debug, PartialEq)]
pub struct Areal {
    pub sa: f64,
    pub sq: f64,
    pub ssk: f64,
    pub sku: f64,
    pub sp: f64,
    pub sv: f64,
    pub sz: f64,
}

pub struct Roughness;

static INPUTS: &[Port] = &[Port::each("height", Kind::Image, "a levelled height map")];

impl TypedStage for Roughness {
    type Options = RoughnessOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "surface.roughness",
        version: 1,
        summary:
            "Areal roughness Sa, Sq, Ssk, Sku, Sp, Sv, Sz (ISO 25178-2) and line Ra, Rq (ISO 4287)",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[ISO25178, ISO4287],
    };
    fn methods(&self, o: &RoughnessOptions) -> String {
        let line = match o.row {
            Some(r) => format!("on row {r}"),
            None => "averaged over all rows".into(),
        };
        format!(
            "Areal roughness parameters Sa, Sq, Ssk, Sku, Sp, Sv and Sz were computed by their ISO 25178-2 definitions [iso25178] relative to the mean height of the levelled map, and line parameters Ra and Rq by ISO 4287 [iso4287] {line} relative to each line's mean, without further filtering."
        )
    }
    fn run(&self, inputs: &Inputs, o: &RoughnessOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let z: Vec<f64> = img.data.iter().map(|&v| v as f64).collect();
        let s = areal(&z).ok_or_else(|| {
            StageError::input(
                "the height map is flat (Sq = 0): skewness and kurtosis are undefined",
            )
        })?;
        let (ra, rq) = match o.row {
            Some(r) if r >= img.height => {
                return Err(StageError::input(format!(
                    "row {r} is outside the {}-row map",
                    img.height
                )))
            }
            Some(r) => line(&z[r * img.width..(r + 1) * img.width]),
            None => {
                let (mut a, mut q) = (0.0, 0.0);
                for row in z.chunks(img.width) {
                    let (ra, rq) = line(row);
                    a += ra;
                    q += rq;
                }
                (a / img.height as f64, q / img.height as f64)
            }
        };
        let u = &img.z_axis.unit;
        let mut a = Artifact::new(Value::Summary).with_results(vec![
            Record::number("sa", s.sa, None, u),
            Record::number("sq", s.sq, None, u),
            Record::number("ssk", s.ssk, None, ""),
            Record::number("sku", s.sku, None, ""),
            Record::number("sp", s.sp, None, u),
            Record::number("sv", s.sv, None, u),
            Record::number("sz", s.sz, None, u),
            Record::number("ra", ra, None, u),
            Record::number("rq", rq, None, u),
        ]);
        if u.is_empty() {
            a.warn("the height unit is unknown; give z_unit when importing");
        }
        if !img.metadata.contains_key("levelling") {
            a.info("the map was not levelled by surface.level in this recipe; tilt adds to the roughness");
        }
        Ok(a)
    }
}

/// ISO 25178-2 areal parameters of heights (relative to their mean); None when flat.
pub fn areal(z: &[f64]) -> Option<Areal> {
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let (mut s1, mut s2, mut s3, mut s4) = (0.0, 0.0, 0.0, 0.0);
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for &v in z {
        let d = v - mean;
        s1 += d.abs();
        s2 += d * d;
        s3 += d * d * d;
        s4 += d * d * d * d;
        lo = lo.min(d);
        hi = hi.max(d);
    }
    let sq = (s2 / n).sqrt();
    if sq.is_nan() || sq <= 0.0 {
        return None;
    }
    Some(Areal {
        sa: s1 / n,
        sq,
        ssk: s3 / n / sq.powi(3),
        sku: s4 / n / sq.powi(4),
        sp: hi,
        sv: -lo,
        sz: hi - lo,
    })
}

/// ISO 4287 Ra and Rq of one profile relative to its mean line.
pub fn line(z: &[f64]) -> (f64, f64) {
    let n = z.len() as f64;
    let mean = z.iter().sum::<f64>() / n;
    let ra = z.iter().map(|v| (v - mean).abs()).sum::<f64>() / n;
    let rq = (z.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n).sqrt();
    (ra, rq)
}
