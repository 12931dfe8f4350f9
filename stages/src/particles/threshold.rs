//! `particles.threshold` and `particles.morphology`: a binary mask (a label image with
//! one label) from an image, and its binary opening / closing.
//!
//! Global threshold by Otsu's method (Otsu 1979): the histogram of the image's actual
//! range in `bins` equal bins (256 by default), or one bin per integer level (`bins` = 0,
//! which keeps every level of 16-bit data),
//! and the threshold is the centre of the bin that maximises the between-class variance
//! w₁(t)·w₂(t)·(μ₁(t) − μ₂(t))², the first such bin on ties; pixels above it are bright
//! objects. Or a fixed value; or an adaptive local threshold, where a pixel is an object
//! when it exceeds the mean of its neighbourhood (a k×k box, or a Gaussian of σ = k/6) by
//! more than `offset` (bright objects) or falls below it by more than `offset` (dark).
//!
//! Morphology: binary erosion, dilation, opening (erosion then dilation) and closing
//! (dilation then erosion) by a square of side 2r+1 or a disk of radius r. The disk uses
//! the exact Euclidean distance transform (Felzenszwalb & Huttenlocher 2012): erosion keeps
//! pixels farther than r from the background, dilation adds pixels within r of an object.
//! The square uses running counts along rows then columns. Both are linear in the pixel
//! count. Pixels outside the image count as neither object nor background (they neither
//! erode nor dilate).

use crate::image::common::{self, check_image, image_in, labels_in, FELZENSZWALB2012};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Image, Kind, Labels, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

pub const OTSU1979: Reference = Reference {
    key: "otsu1979",
    citation: "N. Otsu, \"A threshold selection method from gray-level histograms\", IEEE Transactions on Systems, Man, and Cybernetics 9(1), 62–66 (1979).",
};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    /// Otsu's between-class variance maximum.
    Otsu,
    /// The fixed `value`.
    Fixed,
    /// Local mean over a k×k box.
    AdaptiveMean,
    /// Local Gaussian-weighted mean (σ = k/6).
    AdaptiveGaussian,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Objects {
    /// Objects are brighter than the background.
    Bright,
    /// Objects are darker than the background.
    Dark,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct ThresholdOptions {
    /// Threshold method (default Otsu).
    pub method: Method,
    /// Threshold for `fixed`, in the image's sample unit.
    pub value: Option<f64>,
    /// Histogram bins over the image's range for Otsu (default 256; 0 = one bin per integer level).
    pub bins: usize,
    /// Neighbourhood side k for the adaptive methods, in pixels (odd; default 51).
    #[schemars(extend("x-unit" = "px"))]
    pub window: usize,
    /// How far from the local mean an object pixel must be (adaptive methods; default 0), in sample units.
    pub offset: f64,
    /// Whether objects are bright or dark (default bright).
    pub objects: Objects,
}

impl Default for ThresholdOptions {
    fn default() -> Self {
        ThresholdOptions {
            method: Method::Otsu,
            value: None,
            bins: 256,
            window: 51,
            offset: 0.0,
            objects: Objects::Bright,
        }
    }
}

pub struct Threshold;

static IMAGE_IN: &[Port] = &[Port::each("image", Kind::Image, "the image to segment")];

impl TypedStage for Threshold {
    type Options = ThresholdOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "particles.threshold",
        version: 1,
        summary: "Binary mask by Otsu's, a fixed or an adaptive local threshold",
        inputs: IMAGE_IN,
        output: Kind::Labels,
        references: &[OTSU1979],
    };
    fn check(&self, o: &ThresholdOptions) -> Result<(), OptionError> {
        match o.method {
            Method::Fixed if o.value.is_none_or(|v| !v.is_finite()) => Err(OptionError::new(
                "value",
                "the fixed method needs a finite value",
            )),
            Method::Otsu if o.bins == 1 || o.bins > MAX_BINS => Err(OptionError::new(
                "bins",
                "bins must be 0 (one per integer level) or between 2 and 1048576",
            )),
            Method::AdaptiveMean | Method::AdaptiveGaussian
                if o.window.is_multiple_of(2) || o.window < 3 =>
            {
                Err(OptionError::new(
                    "window",
                    "the window must be odd and at least 3",
                ))
            }
            _ if !o.offset.is_finite() => Err(OptionError::new("offset", "offset must be finite")),
            _ => Ok(()),
        }
    }
    fn methods(&self, o: &ThresholdOptions) -> String {
        let obj = match o.objects {
            Objects::Bright => "bright",
            Objects::Dark => "dark",
        };
        match o.method {
            Method::Otsu => format!(
                "Images were segmented into {obj} objects and background by Otsu's threshold [otsu1979] on {}.",
                if o.bins == 0 {
                    "a histogram with one bin per integer grey level".to_string()
                } else {
                    format!("a {}-bin histogram of each image's range", o.bins)
                }
            ),
            Method::Fixed => format!(
                "Images were segmented into {obj} objects and background at a fixed threshold of {}.",
                o.value.unwrap_or(f64::NAN)
            ),
            Method::AdaptiveMean | Method::AdaptiveGaussian => format!(
                "Images were segmented into {obj} objects by an adaptive threshold: pixels differing from the {} mean of their {} px neighbourhood by more than {} were taken as objects.",
                if o.method == Method::AdaptiveMean { "box" } else { "Gaussian-weighted (σ = window/6)" },
                o.window,
                o.offset
            ),
        }
    }
    fn run(&self, inputs: &Inputs, o: &ThresholdOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let (mask, t) = threshold(img, o)?;
        let mut a = Artifact::new(Value::Labels(mask));
        let frac = match &a.value {
            Value::Labels(l) => {
                l.labels.iter().filter(|&&v| v != 0).count() as f64 / l.labels.len() as f64
            }
            _ => 0.0,
        };
        a.record(Record::text("threshold_method", method_name(o.method)));
        if let Some(t) = t {
            a.record(Record::number("threshold", t, None, &img.z_axis.unit));
        }
        a.record(Record::number("object_fraction", frac, None, ""));
        Ok(a)
    }
}

fn method_name(m: Method) -> &'static str {
    match m {
        Method::Otsu => "otsu",
        Method::Fixed => "fixed",
        Method::AdaptiveMean => "adaptive_mean",
        Method::AdaptiveGaussian => "adaptive_gaussian",
    }
}

/// Otsu's threshold of the samples on a `bins`-bin histogram of their range, or with
/// `bins` = 0 on one bin per integer level (integer-valued data only). Error when the
/// image is uniform.
pub fn otsu_threshold(data: &[f32], bins: usize) -> Result<f64, StageError> {
    let (lo, hi) = common::min_max(data);
    let (lo, hi) = (lo as f64, hi as f64);
    if hi <= lo {
        return Err(StageError::input(
            "the image is uniform: no threshold separates two classes",
        ));
    }
    if bins == 0 {
        if data.iter().any(|v| v.fract() != 0.0) {
            return Err(StageError::input(
                "bins = 0 (one bin per level) needs integer-valued samples",
            ));
        }
        let levels = (hi - lo) as usize + 1;
        if levels > MAX_BINS {
            return Err(StageError::input(format!(
                "{levels} integer levels exceed the {MAX_BINS} bins allowed"
            )));
        }
        let mut hist = vec![0f64; levels];
        for &v in data {
            hist[(v as f64 - lo) as usize] += 1.0;
        }
        return Ok(otsu_from_histogram(&hist, |i| lo + i as f64));
    }
    let mut hist = vec![0f64; bins];
    let norm = bins as f64 / (hi - lo);
    let step = (hi - lo) / bins as f64;
    let edge = |i: usize| if i == bins { hi } else { lo + i as f64 * step };
    for &v in data {
        let v = v as f64;
        let mut i = (((v - lo) * norm) as usize).min(bins - 1);
        // Put values on a bin edge in the upper bin (edges as equally spaced values).
        if v < edge(i) {
            i -= 1;
        } else if i + 1 < bins && v >= edge(i + 1) {
            i += 1;
        }
        hist[i] += 1.0;
    }
    Ok(otsu_from_histogram(&hist, |i| {
        (edge(i) + edge(i + 1)) / 2.0
    }))
}

/// Largest histogram accepted for Otsu's method.
const MAX_BINS: usize = 1 << 20;

/// The bin centre maximising w₁·w₂·(μ₁ − μ₂)², class 1 being bins 0..=i (first on ties).
fn otsu_from_histogram(hist: &[f64], centre: impl Fn(usize) -> f64) -> f64 {
    let total: f64 = hist.iter().sum();
    let total_m: f64 = hist.iter().enumerate().map(|(i, h)| h * centre(i)).sum();
    let (mut w1, mut m1) = (0.0, 0.0);
    let mut best = (f64::NEG_INFINITY, 0usize);
    for (i, &bin_count) in hist.iter().enumerate().take(hist.len() - 1) {
        w1 += bin_count;
        m1 += bin_count * centre(i);
        let w2 = total - w1;
        if w1 == 0.0 || w2 == 0.0 {
            continue;
        }
        let d = m1 / w1 - (total_m - m1) / w2;
        let var = w1 * w2 * d * d;
        if var > best.0 {
            best = (var, i);
        }
    }
    centre(best.1)
}

fn local_mean(img: &Image, o: &ThresholdOptions) -> Vec<f64> {
    let mut d: Vec<f64> = img.data.iter().map(|&v| v as f64).collect();
    let (w, h) = (img.width, img.height);
    if o.method == Method::AdaptiveMean {
        common::separable(&mut d, w, h, |l, out, _| common::box_line(l, o.window, out));
    } else {
        let s = o.window as f64 / 6.0;
        if s <= 8.0 {
            common::gaussian_exact(&mut d, w, h, s, s);
        } else {
            let mut f: Vec<f32> = img.data.clone();
            common::gaussian_boxes(&mut f, w, h, s, s);
            d = f.iter().map(|&v| v as f64).collect();
        }
    }
    d
}

/// The object mask and, for global methods, the threshold used.
pub fn threshold(img: &Image, o: &ThresholdOptions) -> Result<(Labels, Option<f64>), StageError> {
    let bright = o.objects == Objects::Bright;
    let (mask, t): (Vec<u32>, Option<f64>) = match o.method {
        Method::Otsu | Method::Fixed => {
            let t = if o.method == Method::Otsu {
                otsu_threshold(&img.data, o.bins)?
            } else {
                o.value.unwrap_or(0.0)
            };
            let m = img
                .data
                .iter()
                .map(|&v| u32::from(if bright { v as f64 > t } else { v as f64 <= t }))
                .collect();
            (m, Some(t))
        }
        _ => {
            let mean = local_mean(img, o);
            let m = img
                .data
                .iter()
                .zip(&mean)
                .map(|(&v, &m)| {
                    let v = v as f64;
                    u32::from(if bright {
                        v > m + o.offset
                    } else {
                        v < m - o.offset
                    })
                })
                .collect();
            (m, None)
        }
    };
    let mut metadata = BTreeMap::new();
    metadata.insert("threshold.method".into(), method_name(o.method).to_string());
    if let Some(t) = t {
        metadata.insert("threshold.value".into(), format!("{t}"));
    }
    metadata.insert(
        "objects".into(),
        if bright { "bright" } else { "dark" }.into(),
    );
    if let Some(s) = img.metadata.get("source") {
        metadata.insert("source".into(), s.clone());
    }
    Ok((
        Labels {
            width: img.width,
            height: img.height,
            labels: mask,
            count: 1,
            pixel_size: img.pixel_size.clone(),
            metadata,
        },
        t,
    ))
}

// ---------------------------------------------------------------- particles.morphology

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Operation {
    /// Erosion then dilation: removes specks and thin bridges.
    Open,
    /// Dilation then erosion: fills small holes and gaps.
    Close,
    /// Erosion only.
    Erode,
    /// Dilation only.
    Dilate,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Shape {
    /// A square of side 2r + 1.
    Square,
    /// A disk of radius r (Euclidean).
    Disk,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct MorphologyOptions {
    /// The operation (default open).
    pub operation: Operation,
    /// Structuring element shape (default disk).
    pub shape: Shape,
    /// Radius r of the structuring element, in pixels (default 1).
    #[schemars(extend("x-unit" = "px"))]
    pub radius: usize,
}

impl Default for MorphologyOptions {
    fn default() -> Self {
        MorphologyOptions {
            operation: Operation::Open,
            shape: Shape::Disk,
            radius: 1,
        }
    }
}

pub struct Morphology;

static MASK_IN: &[Port] = &[Port::each(
    "mask",
    Kind::Labels,
    "a mask or label image (non-zero = object)",
)];

impl TypedStage for Morphology {
    type Options = MorphologyOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "particles.morphology",
        version: 1,
        summary: "Binary opening, closing, erosion or dilation by a square or disk",
        inputs: MASK_IN,
        output: Kind::Labels,
        references: &[FELZENSZWALB2012],
    };
    fn check(&self, o: &MorphologyOptions) -> Result<(), OptionError> {
        if o.radius == 0 {
            return Err(OptionError::new("radius", "the radius must be at least 1"));
        }
        Ok(())
    }
    fn methods(&self, o: &MorphologyOptions) -> String {
        let op = match o.operation {
            Operation::Open => "opened",
            Operation::Close => "closed",
            Operation::Erode => "eroded",
            Operation::Dilate => "dilated",
        };
        let se = match o.shape {
            Shape::Square => format!("a {0}×{0} pixel square", 2 * o.radius + 1),
            Shape::Disk => format!(
                "a disk of radius {} px (by the exact Euclidean distance transform [felzenszwalb2012])",
                o.radius
            ),
        };
        format!("The object masks were morphologically {op} with {se}.")
    }
    fn run(&self, inputs: &Inputs, o: &MorphologyOptions) -> Result<Artifact, StageError> {
        let l = labels_in(inputs, 0)?;
        let mask: Vec<bool> = l.labels.iter().map(|&v| v != 0).collect();
        let out = morphology(&mask, l.width, l.height, o);
        let mut metadata = l.metadata.clone();
        metadata.insert(
            "morphology".into(),
            format!("{:?} {:?} r={}", o.operation, o.shape, o.radius).to_lowercase(),
        );
        Ok(Artifact::new(Value::Labels(Labels {
            width: l.width,
            height: l.height,
            labels: out.into_iter().map(u32::from).collect(),
            count: 1,
            pixel_size: l.pixel_size.clone(),
            metadata,
        })))
    }
}

/// Binary morphology on a w×h mask.
pub fn morphology(mask: &[bool], w: usize, h: usize, o: &MorphologyOptions) -> Vec<bool> {
    let r = o.radius;
    let erode = |m: &[bool]| match o.shape {
        Shape::Disk => {
            let d = common::squared_distance(w, h, |i| !m[i], 1.0, 1.0);
            d.iter().map(|&v| v > (r * r) as f64).collect::<Vec<bool>>()
        }
        Shape::Square => square(m, w, h, r, true),
    };
    let dilate = |m: &[bool]| match o.shape {
        Shape::Disk => {
            let d = common::squared_distance(w, h, |i| m[i], 1.0, 1.0);
            d.iter()
                .map(|&v| v <= (r * r) as f64)
                .collect::<Vec<bool>>()
        }
        Shape::Square => square(m, w, h, r, false),
    };
    match o.operation {
        Operation::Open => dilate(&erode(mask)),
        Operation::Close => erode(&dilate(mask)),
        Operation::Erode => erode(mask),
        Operation::Dilate => dilate(mask),
    }
}

/// Square erosion (all of the window set) or dilation (any set), by running counts.
fn square(m: &[bool], w: usize, h: usize, r: usize, erode: bool) -> Vec<bool> {
    let mut d: Vec<f64> = m.iter().map(|&b| if b { 1.0 } else { 0.0 }).collect();
    let mut prefix = Vec::new();
    common::separable(&mut d, w, h, |l, out, _| {
        let n = l.len();
        prefix.clear();
        prefix.push(0.0);
        for &v in l {
            prefix.push(prefix.last().unwrap_or(&0.0) + v);
        }
        for (i, o) in out.iter_mut().enumerate() {
            let a = i.saturating_sub(r);
            let b = (i + r + 1).min(n);
            let ones = prefix[b] - prefix[a];
            *o = if erode {
                if ones == (b - a) as f64 {
                    1.0
                } else {
                    0.0
                }
            } else if ones > 0.0 {
                1.0
            } else {
                0.0
            };
        }
    });
    d.iter().map(|&v| v > 0.5).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn otsu_splits_two_levels_between_them() {
        let data: Vec<f32> = (0..1000)
            .map(|i| if i % 3 == 0 { 200.0 } else { 50.0 })
            .collect();
        let t = otsu_threshold(&data, 256).unwrap();
        assert!(t > 50.0 && t < 200.0, "{t}");
        assert!(otsu_threshold(&[3.0; 10], 256).is_err());
    }

    #[test]
    fn opening_removes_a_speck_and_keeps_a_disc() {
        let (w, h) = (40, 40);
        let mut m = vec![false; w * h];
        for r in 0..h {
            for c in 0..w {
                let d2 = (c as f64 - 20.0).powi(2) + (r as f64 - 20.0).powi(2);
                m[r * w + c] = d2 <= 64.0 || (c == 3 && r == 3);
            }
        }
        for shape in [Shape::Disk, Shape::Square] {
            let o = MorphologyOptions {
                operation: Operation::Open,
                shape,
                radius: 1,
            };
            let out = morphology(&m, w, h, &o);
            assert!(!out[3 * w + 3], "{shape:?}");
            assert!(out[20 * w + 20] && out[20 * w + 27], "{shape:?}");
        }
    }
}
