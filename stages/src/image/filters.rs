//! Preparation filters: `image.gaussian`, `image.median`, `image.flatten`, `image.clip`.
//!
//! - Gaussian: exact separable convolution truncated at 4σ, borders reflected.
//! - Median: k×k window by the sliding-histogram method of Huang, Yang & Tang (1979),
//!   run over the ranks of the samples so that 16-bit and float data keep every level;
//!   the window slides in a serpentine path and the median pointer moves incrementally,
//!   so the cost is O(k) per pixel. Borders replicate the edge pixels.
//! - Flatten: background removed by subtracting (or dividing by) either a large Gaussian
//!   (three cascaded box filters, Wells 1986 / Kovesi 2010, linear whatever σ) or a rolling
//!   ball (Sternberg 1983), here a grey-scale opening by a paraboloid of the ball's apex
//!   curvature, computed exactly in linear time by the lower envelope of parabolas
//!   (Felzenszwalb & Huttenlocher 2012).
//! - Clip: samples below the p_low and above the p_high percentile (Hyndman & Fan
//!   definition 7) are set to those percentiles.

use crate::image::common::{
    self, check_image, image_in, percentile_sorted, to_pixels, with_data, FELZENSZWALB2012,
    HYNDMAN1996, KOVESI2010, WELLS1986,
};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Image, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

static IMAGE_IN: &[Port] = &[Port::each("image", Kind::Image, "the image to filter")];

fn to_f64(img: &Image) -> Vec<f64> {
    img.data.iter().map(|&v| v as f64).collect()
}
fn to_f32(d: &[f64]) -> Vec<f32> {
    d.iter().map(|&v| v as f32).collect()
}

fn positive(path: &str, v: f64) -> Result<(), OptionError> {
    if v > 0.0 && v.is_finite() {
        Ok(())
    } else {
        Err(OptionError::new(
            path,
            format!("{path} must be a positive number"),
        ))
    }
}

// ---------------------------------------------------------------- image.gaussian

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct GaussianOptions {
    /// Standard deviation of the Gaussian, in `unit` (default 1 px).
    pub sigma: f64,
    /// Unit of sigma: `px`, or the image's length unit (e.g. `nm`).
    pub unit: String,
}

impl Default for GaussianOptions {
    fn default() -> Self {
        GaussianOptions {
            sigma: 1.0,
            unit: "px".into(),
        }
    }
}

pub struct Gaussian;

impl TypedStage for Gaussian {
    type Options = GaussianOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "image.gaussian",
        version: 1,
        summary: "Separable Gaussian smoothing (σ in pixels or physical units)",
        inputs: IMAGE_IN,
        output: Kind::Image,
        references: &[],
    };
    fn check(&self, o: &GaussianOptions) -> Result<(), OptionError> {
        positive("sigma", o.sigma)
    }
    fn methods(&self, o: &GaussianOptions) -> String {
        format!(
            "Images were smoothed with a separable Gaussian filter of σ = {} {} truncated at 4σ, with reflected borders.",
            o.sigma, o.unit
        )
    }
    fn run(&self, inputs: &Inputs, o: &GaussianOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let sx = to_pixels(o.sigma, &o.unit, &img.pixel_size)?;
        let (px, py, _) = common::pixel_dims(&img.pixel_size);
        let sy = sx * px / py;
        if sx.max(sy) > img.width.max(img.height) as f64 {
            return Err(StageError::input("sigma is larger than the image"));
        }
        let mut d = to_f64(img);
        common::gaussian_exact(&mut d, img.width, img.height, sx, sy);
        Ok(Artifact::new(Value::Image(with_data(img, to_f32(&d)))))
    }
}

// ---------------------------------------------------------------- image.median

pub const HUANG1979: Reference = Reference {
    key: "huang1979",
    citation: "T. S. Huang, G. J. Yang and G. Y. Tang, \"A fast two-dimensional median filtering algorithm\", IEEE Transactions on Acoustics, Speech, and Signal Processing 27(1), 13–18 (1979).",
};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct MedianOptions {
    /// Side of the square window in pixels (odd; default 3).
    #[schemars(extend("x-unit" = "px"))]
    pub size: usize,
}

impl Default for MedianOptions {
    fn default() -> Self {
        MedianOptions { size: 3 }
    }
}

pub struct Median;

impl TypedStage for Median {
    type Options = MedianOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "image.median",
        version: 1,
        summary: "k×k median filter (sliding histogram over sample ranks, full bit depth)",
        inputs: IMAGE_IN,
        output: Kind::Image,
        references: &[HUANG1979],
    };
    fn check(&self, o: &MedianOptions) -> Result<(), OptionError> {
        if o.size.is_multiple_of(2) {
            return Err(OptionError::new("size", "the window size must be odd"));
        }
        Ok(())
    }
    fn methods(&self, o: &MedianOptions) -> String {
        format!(
            "Images were median-filtered over a {0}×{0} pixel window by the sliding-histogram method [huang1979] with replicated borders.",
            o.size
        )
    }
    fn run(&self, inputs: &Inputs, o: &MedianOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let out = median_filter(&img.data, img.width, img.height, o.size);
        Ok(Artifact::new(Value::Image(with_data(img, out))))
    }
}

/// k×k median (k odd) of a w×h image, borders replicated; O(k) per pixel.
pub fn median_filter(data: &[f32], w: usize, h: usize, k: usize) -> Vec<f32> {
    // Ranks of the distinct sample values.
    let mut levels: Vec<f32> = data.to_vec();
    levels.sort_by(|a, b| a.total_cmp(b));
    levels.dedup();
    let rank: Vec<u32> = data
        .iter()
        .map(|v| levels.partition_point(|l| l.total_cmp(v).is_lt()) as u32)
        .collect();
    let r = (k / 2) as isize;
    let at = |c: isize, row: isize| -> usize {
        let c = c.clamp(0, w as isize - 1) as usize;
        let row = row.clamp(0, h as isize - 1) as usize;
        rank[row * w + c] as usize
    };
    let mut hist = vec![0u32; levels.len()];
    let th = (k * k / 2) as u32; // median is the element of 0-based order th
    for dy in -r..=r {
        for dx in -r..=r {
            hist[at(dx, dy)] += 1;
        }
    }
    // Median pointer and the count below it.
    let mut mdn = 0usize;
    let mut lt = 0u32;
    let settle = |hist: &[u32], mdn: &mut usize, lt: &mut u32| {
        while *lt > th {
            *mdn -= 1;
            *lt -= hist[*mdn];
        }
        while *lt + hist[*mdn] <= th {
            *lt += hist[*mdn];
            *mdn += 1;
        }
    };
    let add = |hist: &mut [u32], mdn: usize, lt: &mut u32, v: usize, delta: i32| {
        if delta > 0 {
            hist[v] += 1;
            if v < mdn {
                *lt += 1;
            }
        } else {
            hist[v] -= 1;
            if v < mdn {
                *lt -= 1;
            }
        }
    };
    settle(&hist, &mut mdn, &mut lt);
    let mut out = vec![0f32; w * h];
    for row in 0..h as isize {
        let forward = row % 2 == 0;
        let cols: Vec<isize> = if forward {
            (0..w as isize).collect()
        } else {
            (0..w as isize).rev().collect()
        };
        for (i, &c) in cols.iter().enumerate() {
            if i > 0 {
                // Slide horizontally by one column.
                let (old, new) = if forward {
                    (c - r - 1, c + r)
                } else {
                    (c + r + 1, c - r)
                };
                for dy in -r..=r {
                    add(&mut hist, mdn, &mut lt, at(old, row + dy), -1);
                    add(&mut hist, mdn, &mut lt, at(new, row + dy), 1);
                }
                settle(&hist, &mut mdn, &mut lt);
            }
            out[row as usize * w + c as usize] = levels[mdn];
        }
        if row + 1 < h as isize {
            // Slide down by one row at the current column.
            let c = *cols.last().unwrap_or(&0);
            for dx in -r..=r {
                add(&mut hist, mdn, &mut lt, at(c + dx, row - r), -1);
                add(&mut hist, mdn, &mut lt, at(c + dx, row + r + 1), 1);
            }
            settle(&hist, &mut mdn, &mut lt);
        }
    }
    out
}

// ---------------------------------------------------------------- image.flatten

pub const STERNBERG1983: Reference = Reference {
    key: "sternberg1983",
    citation: "S. R. Sternberg, \"Biomedical image processing\", Computer 16(1), 22–34 (1983).",
};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Background {
    /// A Gaussian of large σ (three cascaded box filters).
    Gaussian,
    /// Rolling ball (opening by a paraboloid of the ball's apex curvature).
    RollingBall,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Removal {
    /// image − background + mean(background) (keeps the intensity scale).
    Subtract,
    /// image / background × mean(background) (for multiplicative shading).
    Divide,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct FlattenOptions {
    /// Background model (default a large Gaussian).
    pub background: Background,
    /// σ of the Gaussian or radius of the ball, in `unit` (default 50 px); should be larger than the objects.
    pub size: f64,
    /// Unit of `size`: `px`, or the image's length unit.
    pub unit: String,
    /// How the background is removed (default subtract).
    pub removal: Removal,
    /// Objects are brighter than the background (true, default) or darker (rolling ball only).
    pub bright_objects: bool,
}

impl Default for FlattenOptions {
    fn default() -> Self {
        FlattenOptions {
            background: Background::Gaussian,
            size: 50.0,
            unit: "px".into(),
            removal: Removal::Subtract,
            bright_objects: true,
        }
    }
}

pub struct Flatten;

static FLATTEN_REFS: &[Reference] = &[WELLS1986, KOVESI2010, STERNBERG1983, FELZENSZWALB2012];

impl TypedStage for Flatten {
    type Options = FlattenOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "image.flatten",
        version: 1,
        summary: "Background flattening by a large Gaussian or a rolling ball",
        inputs: IMAGE_IN,
        output: Kind::Image,
        references: FLATTEN_REFS,
    };
    fn check(&self, o: &FlattenOptions) -> Result<(), OptionError> {
        positive("size", o.size)
    }
    fn methods(&self, o: &FlattenOptions) -> String {
        let how = match o.removal {
            Removal::Subtract => "subtracted (the background mean added back)",
            Removal::Divide => "divided out (scaled by the background mean)",
        };
        match o.background {
            Background::Gaussian => format!(
                "Uneven background was estimated by a Gaussian of σ = {} {} approximated by three cascaded box filters [wells1986] [kovesi2010] and {how}.",
                o.size, o.unit
            ),
            Background::RollingBall => format!(
                "Uneven background was estimated by a rolling ball [sternberg1983] of radius {} {} rolled {} the intensity surface, computed as an opening by a paraboloid of the same apex curvature with the linear-time lower envelope of parabolas [felzenszwalb2012], and {how}.",
                o.size,
                o.unit,
                if o.bright_objects { "under" } else { "over" }
            ),
        }
    }
    fn run(&self, inputs: &Inputs, o: &FlattenOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let size = to_pixels(o.size, &o.unit, &img.pixel_size)?;
        let (out, bg_mean) = flatten(img, o.background, size, o.removal, o.bright_objects)?;
        let mut a = Artifact::new(Value::Image(out));
        a.record(Record::number(
            "background_mean",
            bg_mean,
            None,
            &img.z_axis.unit,
        ));
        Ok(a)
    }
}

/// Background-flattened copy of `img` and the background's mean (`size` in pixels).
pub fn flatten(
    img: &Image,
    background: Background,
    size: f64,
    removal: Removal,
    bright_objects: bool,
) -> Result<(Image, f64), StageError> {
    let (w, h) = (img.width, img.height);
    let bg: Vec<f32> = match background {
        Background::Gaussian => {
            let mut bg = img.data.clone();
            common::gaussian_boxes(&mut bg, w, h, size, size);
            bg
        }
        Background::RollingBall => {
            let mut bg = to_f64(img);
            if !bright_objects {
                bg.iter_mut().for_each(|v| *v = -*v);
            }
            common::erode_paraboloid(&mut bg, w, h, size);
            common::dilate_paraboloid(&mut bg, w, h, size);
            if !bright_objects {
                bg.iter_mut().for_each(|v| *v = -*v);
            }
            to_f32(&bg)
        }
    };
    let mean = bg.iter().map(|&b| b as f64).sum::<f64>() / bg.len() as f64;
    let out: Vec<f32> = match removal {
        Removal::Subtract => img
            .data
            .iter()
            .zip(&bg)
            .map(|(&v, &b)| (v as f64 - b as f64 + mean) as f32)
            .collect(),
        Removal::Divide => {
            if bg.iter().any(|&b| b <= 0.0) {
                return Err(StageError::input(
                    "the background reaches zero or below; division is not possible (use subtract)",
                ));
            }
            img.data
                .iter()
                .zip(&bg)
                .map(|(&v, &b)| (v as f64 / b as f64 * mean) as f32)
                .collect()
        }
    };
    let mut out = with_data(img, out);
    out.source_bits = 32;
    Ok((out, mean))
}

// ---------------------------------------------------------------- image.clip

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct ClipOptions {
    /// Lower percentile (0–100; default 0.5).
    #[schemars(extend("x-unit" = "%"))]
    pub low: f64,
    /// Upper percentile (0–100; default 99.5).
    #[schemars(extend("x-unit" = "%"))]
    pub high: f64,
}

impl Default for ClipOptions {
    fn default() -> Self {
        ClipOptions {
            low: 0.5,
            high: 99.5,
        }
    }
}

pub struct Clip;

static CLIP_REFS: &[Reference] = &[HYNDMAN1996];

impl TypedStage for Clip {
    type Options = ClipOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "image.clip",
        version: 1,
        summary: "Clip outlier samples to percentiles",
        inputs: IMAGE_IN,
        output: Kind::Image,
        references: CLIP_REFS,
    };
    fn check(&self, o: &ClipOptions) -> Result<(), OptionError> {
        if !(0.0 <= o.low && o.low < o.high && o.high <= 100.0) {
            return Err(OptionError::new("low", "need 0 ≤ low < high ≤ 100"));
        }
        Ok(())
    }
    fn methods(&self, o: &ClipOptions) -> String {
        format!(
            "Outlier samples were clipped to the {} and {} percentiles (linear interpolation between order statistics [hyndman1996]).",
            o.low, o.high
        )
    }
    fn run(&self, inputs: &Inputs, o: &ClipOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let mut sorted = to_f64(img);
        sorted.sort_by(f64::total_cmp);
        let lo = percentile_sorted(&sorted, o.low / 100.0) as f32;
        let hi = percentile_sorted(&sorted, o.high / 100.0) as f32;
        let mut n = 0usize;
        let out: Vec<f32> = img
            .data
            .iter()
            .map(|&v| {
                let c = v.clamp(lo, hi);
                if c != v {
                    n += 1;
                }
                c
            })
            .collect();
        let u = &img.z_axis.unit;
        Ok(
            Artifact::new(Value::Image(with_data(img, out))).with_results(vec![
                Record::number("clip_low", lo as f64, None, u),
                Record::number("clip_high", hi as f64, None, u),
                Record::number("clipped_pixels", n as f64, None, ""),
            ]),
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_matches_sorting_windows() {
        let (w, h, k) = (17usize, 11usize, 5usize);
        let data: Vec<f32> = (0..w * h)
            .map(|i| ((i * 7919) % 97) as f32 * 13.0 + 40000.0)
            .collect();
        let out = median_filter(&data, w, h, k);
        let r = (k / 2) as isize;
        for row in 0..h as isize {
            for c in 0..w as isize {
                let mut win = Vec::new();
                for dy in -r..=r {
                    for dx in -r..=r {
                        let cc = (c + dx).clamp(0, w as isize - 1) as usize;
                        let rr = (row + dy).clamp(0, h as isize - 1) as usize;
                        win.push(data[rr * w + cc]);
                    }
                }
                win.sort_by(f32::total_cmp);
                assert_eq!(out[row as usize * w + c as usize], win[win.len() / 2]);
            }
        }
    }

    fn img(w: usize, h: usize, f: impl Fn(usize, usize) -> f32) -> Image {
        Image {
            width: w,
            height: h,
            data: (0..w * h).map(|i| f(i % w, i / w)).collect(),
            pixel_size: None,
            z_axis: crate::value::Axis::new("intensity", "counts"),
            source_bits: 16,
            metadata: Default::default(),
        }
    }

    #[test]
    fn flatten_removes_a_linear_ramp() {
        // A ramp plus one small bright square: both backgrounds leave the square on a flat field.
        let im = img(256, 192, |c, r| {
            1000.0
                + 3.0 * c as f32
                + 2.0 * r as f32
                + if (120..124).contains(&c) && (90..94).contains(&r) {
                    500.0
                } else {
                    0.0
                }
        });
        for bg in [Background::Gaussian, Background::RollingBall] {
            let (out, _) = flatten(&im, bg, 20.0, Removal::Subtract, true).unwrap();
            let far = out.get(80, 60) - out.get(180, 130);
            assert!(far.abs() < 30.0, "{bg:?}: residual slope {far}");
            assert!(out.get(121, 91) - out.get(60, 91) > 350.0, "{bg:?}");
        }
    }
}
