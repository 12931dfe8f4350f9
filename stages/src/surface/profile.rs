//! `surface.profile` and `surface.step_height`.
//!
//! Profile: heights sampled along the straight line between two points by bilinear
//! interpolation between the four nearest pixel centres (pixel (c, r) has its centre at
//! (c, r) in pixel coordinates), at a spacing of at most one pixel, giving a spectrum of
//! height against physical distance along the line.
//!
//! Step height: the difference of the mean heights of two rectangles (B − A), with the
//! standard uncertainty of a difference of means √(s_A²/n_A + s_B²/n_B) (GUM, JCGM
//! 100:2008, §4.2 and §5.1), or, when asked, the spread √(s_A² + s_B²) of single-pixel
//! differences. The standard-error form treats pixels as independent, which neighbouring
//! pixels of a scan are not; `spread` is the conservative choice.

use crate::image::common::{check_image, image_in, pixel_dims};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Image, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const GUM2008: Reference = Reference {
    key: "gum2008",
    citation: "JCGM 100:2008, Evaluation of measurement data — Guide to the expression of uncertainty in measurement, Joint Committee for Guides in Metrology (2008).",
};

static INPUTS: &[Port] = &[Port::each("height", Kind::Image, "a height map or image")];

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct ProfileOptions {
    /// Start point [x, y] (column, row from the top left), in `unit`.
    pub from: [f64; 2],
    /// End point [x, y], in `unit`.
    pub to: [f64; 2],
    /// Unit of the points: `px` (default) or the image's length unit.
    pub unit: String,
}

impl Default for ProfileOptions {
    fn default() -> Self {
        ProfileOptions {
            from: [0.0, 0.0],
            to: [1.0, 0.0],
            unit: "px".into(),
        }
    }
}

pub struct Profile;

impl TypedStage for Profile {
    type Options = ProfileOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "surface.profile",
        version: 1,
        summary: "Line profile between two points (bilinear sampling) against physical distance",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };
    fn check(&self, o: &ProfileOptions) -> Result<(), OptionError> {
        if o.from == o.to || o.from.iter().chain(&o.to).any(|v| !v.is_finite()) {
            return Err(OptionError::new(
                "to",
                "from and to must be two different finite points",
            ));
        }
        Ok(())
    }
    fn methods(&self, o: &ProfileOptions) -> String {
        format!(
            "A line profile from ({}, {}) to ({}, {}) {} was sampled by bilinear interpolation at a spacing of at most one pixel.",
            o.from[0], o.from[1], o.to[0], o.to[1], o.unit
        )
    }
    fn run(&self, inputs: &Inputs, o: &ProfileOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let (px, py, unit) = pixel_dims(&img.pixel_size);
        let to_px = |p: [f64; 2]| -> Result<(f64, f64), StageError> {
            if o.unit == "px" {
                Ok((p[0], p[1]))
            } else if o.unit == unit {
                Ok((p[0] / px, p[1] / py))
            } else {
                Err(StageError::input(format!(
                    "points are in {} but the image's pixel size is in {unit}",
                    o.unit
                )))
            }
        };
        let (a, b) = (to_px(o.from)?, to_px(o.to)?);
        let s = profile(img, a, b)?;
        let len = *s.x.last().unwrap_or(&0.0);
        Ok(
            Artifact::new(Value::Spectrum(s)).with_results(vec![Record::number(
                "profile_length",
                len,
                None,
                &unit,
            )]),
        )
    }
}

/// Bilinear sample at pixel coordinates (x, y); None outside the pixel-centre grid.
pub fn bilinear(img: &Image, x: f64, y: f64) -> Option<f64> {
    let (w, h) = (img.width as f64, img.height as f64);
    let eps = 1e-9;
    if !(x >= -eps && y >= -eps && x <= w - 1.0 + eps && y <= h - 1.0 + eps) {
        return None;
    }
    let x = x.clamp(0.0, w - 1.0);
    let y = y.clamp(0.0, h - 1.0);
    let (c0, r0) = (x.floor() as usize, y.floor() as usize);
    let (c1, r1) = ((c0 + 1).min(img.width - 1), (r0 + 1).min(img.height - 1));
    let (tx, ty) = (x - c0 as f64, y - r0 as f64);
    let g = |c, r| img.get(c, r) as f64;
    Some(
        (1.0 - ty) * ((1.0 - tx) * g(c0, r0) + tx * g(c1, r0))
            + ty * ((1.0 - tx) * g(c0, r1) + tx * g(c1, r1)),
    )
}

/// Profile between two points in pixel coordinates.
pub fn profile(img: &Image, a: (f64, f64), b: (f64, f64)) -> Result<Spectrum, StageError> {
    let (px, py, unit) = pixel_dims(&img.pixel_size);
    let len_px = ((b.0 - a.0).powi(2) + (b.1 - a.1).powi(2)).sqrt();
    let n = len_px.ceil() as usize + 1;
    let phys = (((b.0 - a.0) * px).powi(2) + ((b.1 - a.1) * py).powi(2)).sqrt();
    let (mut x, mut y) = (Vec::with_capacity(n), Vec::with_capacity(n));
    for i in 0..n {
        let t = i as f64 / (n - 1) as f64;
        let (cx, cy) = (a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1));
        let v = bilinear(img, cx, cy).ok_or_else(|| {
            StageError::input(format!(
                "the profile leaves the image at ({cx:.1}, {cy:.1}) px; pixel centres span 0..{} × 0..{}",
                img.width - 1,
                img.height - 1
            ))
        })?;
        x.push(t * phys);
        y.push(v);
    }
    let mut s = Spectrum::new(x, y, Axis::new("distance", unit), img.z_axis.clone());
    s.metadata
        .insert("profile.from_px".into(), format!("{} {}", a.0, a.1));
    s.metadata
        .insert("profile.to_px".into(), format!("{} {}", b.0, b.1));
    Ok(s)
}

// ---------------------------------------------------------------- surface.step_height

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum StepUncertainty {
    /// √(s_A²/n_A + s_B²/n_B): standard uncertainty of the difference of the two means.
    StandardError,
    /// √(s_A² + s_B²): spread of single-pixel height differences.
    Spread,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct StepOptions {
    /// Lower reference region A: [column, row, width, height] in pixels.
    pub region_a: [usize; 4],
    /// Region B: [column, row, width, height] in pixels; the step is mean(B) − mean(A).
    pub region_b: [usize; 4],
    /// Which uncertainty is published (default standard_error).
    pub uncertainty: StepUncertainty,
}

impl Default for StepOptions {
    fn default() -> Self {
        StepOptions {
            region_a: [0, 0, 1, 1],
            region_b: [1, 0, 1, 1],
            uncertainty: StepUncertainty::StandardError,
        }
    }
}

pub struct StepHeight;

impl TypedStage for StepHeight {
    type Options = StepOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "surface.step_height",
        version: 1,
        summary: "Step height between two regions with its uncertainty",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[GUM2008],
    };
    fn check(&self, o: &StepOptions) -> Result<(), OptionError> {
        for (k, r) in [("region_a", o.region_a), ("region_b", o.region_b)] {
            if r[2] == 0 || r[3] == 0 {
                return Err(OptionError::new(
                    k,
                    "a region needs a width and height of at least 1 pixel",
                ));
            }
        }
        Ok(())
    }
    fn methods(&self, o: &StepOptions) -> String {
        let u = match o.uncertainty {
            StepUncertainty::StandardError => {
                "the standard uncertainty of a difference of two means [gum2008]"
            }
            StepUncertainty::Spread => {
                "the combined standard deviation of the two regions [gum2008]"
            }
        };
        format!(
            "Step heights were the difference of the mean heights of region B (columns {}–{}, rows {}–{}) and region A (columns {}–{}, rows {}–{}), with {u}.",
            o.region_b[0],
            o.region_b[0] + o.region_b[2] - 1,
            o.region_b[1],
            o.region_b[1] + o.region_b[3] - 1,
            o.region_a[0],
            o.region_a[0] + o.region_a[2] - 1,
            o.region_a[1],
            o.region_a[1] + o.region_a[3] - 1
        )
    }
    fn run(&self, inputs: &Inputs, o: &StepOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let stats = |r: [usize; 4], name: &str| -> Result<(f64, f64, usize), StageError> {
            if r[0] + r[2] > img.width || r[1] + r[3] > img.height {
                return Err(StageError::input(format!(
                    "{name} {:?} does not fit in the {}×{} image",
                    r, img.width, img.height
                )));
            }
            let mut v = Vec::with_capacity(r[2] * r[3]);
            for row in r[1]..r[1] + r[3] {
                for c in r[0]..r[0] + r[2] {
                    v.push(img.get(c, row) as f64);
                }
            }
            let n = v.len();
            let m = v.iter().sum::<f64>() / n as f64;
            let s = if n > 1 {
                (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
            } else {
                0.0
            };
            Ok((m, s, n))
        };
        let (ma, sa, na) = stats(o.region_a, "region_a")?;
        let (mb, sb, nb) = stats(o.region_b, "region_b")?;
        let u = match o.uncertainty {
            StepUncertainty::StandardError => (sa * sa / na as f64 + sb * sb / nb as f64).sqrt(),
            StepUncertainty::Spread => (sa * sa + sb * sb).sqrt(),
        };
        let unit = &img.z_axis.unit;
        let mut a = Artifact::new(Value::Summary).with_results(vec![
            Record::number("step_height", mb - ma, Some(u), unit),
            Record::number("mean_a", ma, Some(sa / (na as f64).sqrt()), unit),
            Record::number("mean_b", mb, Some(sb / (nb as f64).sqrt()), unit),
            Record::number("sd_a", sa, None, unit),
            Record::number("sd_b", sb, None, unit),
        ]);
        if na < 2 || nb < 2 {
            a.warn("a region holds a single pixel: its standard deviation is unknown (taken as 0)");
        }
        Ok(a)
    }
}
