//! Electron diffraction ring patterns: `ediff.radial_profile` and `ediff.rings`.
//!
//! Centre: by default the centre of inversion symmetry of the pattern (diffraction
//! intensities obey Friedel's law, I(g) = I(−g), away from strong dynamical effects). The
//! self-convolution C(s) = Σₓ f(x)·f(s − x) of the mean-subtracted pattern f, computed by
//! zero-padded FFTs, peaks at s = 2c for a pattern symmetric about c (Cauchy–Schwarz); the
//! peak is refined by a parabola through its neighbours along each axis. Or the
//! intensity-weighted centroid of the pixels above the 99th percentile (a bright direct
//! beam), or a centre given in the options.
//!
//! Radial profile: the azimuthal average of the intensity in rings of width `bin` pixels
//! (mean of the pixels whose centre distance r falls in each ring), up to the largest
//! circle that fits in the image, as a spectrum of intensity against radius.
//!
//! Rings: maxima of the profile with a prominence of at least `min_prominence` of the
//! profile's range, each fitted locally by a Gaussian on a straight-line background by
//! Levenberg–Marquardt (Marquardt 1963); the radius uncertainty is the standard error from
//! s²(JᵀJ)⁻¹. Spacings d = λL/R with the camera constant λL given, computed from the
//! accelerating voltage (relativistic wavelength, below), the camera length and the
//! detector pixel, or calibrated from a ring of known d of a reference material; when the
//! pattern already has a reciprocal-length pixel size, d = 1/R. Rings are indexed against
//! expected spacings within a relative tolerance.
//!
//! Electron wavelength: λ = h / √(2 m₀ e V (1 + eV / (2 m₀ c²))) (e.g. Williams & Carter,
//! Transmission Electron Microscopy, 2nd ed., 2009, eq. 1.6), CODATA 2018 constants.

use crate::image::common::{check_image, image_in, pixel_dims};
use crate::lattice::fft::fft2;
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{
    Artifact, Axis, Column, ColumnData, Image, Kind, Record, Spectrum, Table, Value,
};
use nalgebra::{DMatrix, DVector};
use rustfft::num_complex::Complex;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Planck constant, J s (CODATA 2018, exact in the SI since 2019).
pub const PLANCK: f64 = 6.626_070_15e-34;
/// Elementary charge, C (CODATA 2018, exact).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// Electron rest mass, kg (CODATA 2018: 9.109 383 7015(28) × 10⁻³¹ kg).
pub const ELECTRON_MASS: f64 = 9.109_383_701_5e-31;
/// Speed of light in vacuum, m/s (exact).
pub const SPEED_OF_LIGHT: f64 = 299_792_458.0;

pub const CODATA2018: Reference = Reference {
    key: "codata2018",
    citation: "E. Tiesinga, P. J. Mohr, D. B. Newell and B. N. Taylor, \"CODATA recommended values of the fundamental physical constants: 2018\", Reviews of Modern Physics 93, 025010 (2021).",
};
pub const WILLIAMS2009: Reference = Reference {
    key: "williams2009",
    citation: "D. B. Williams and C. B. Carter, Transmission Electron Microscopy: A Textbook for Materials Science, 2nd ed., Springer, New York (2009).",
};
pub const MARQUARDT1963: Reference = Reference {
    key: "marquardt1963",
    citation: "D. W. Marquardt, \"An algorithm for least-squares estimation of nonlinear parameters\", Journal of the Society for Industrial and Applied Mathematics 11(2), 431–441 (1963).",
};

/// Relativistic electron wavelength in metres for an accelerating voltage in volts.
pub fn electron_wavelength(volts: f64) -> f64 {
    let ev = ELEMENTARY_CHARGE * volts;
    PLANCK
        / (2.0
            * ELECTRON_MASS
            * ev
            * (1.0 + ev / (2.0 * ELECTRON_MASS * SPEED_OF_LIGHT * SPEED_OF_LIGHT)))
            .sqrt()
}

// ---------------------------------------------------------------- ediff.radial_profile

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum CentreMethod {
    /// Centre of inversion symmetry (peak of the self-convolution).
    Symmetry,
    /// Centroid of the brightest 1% of pixels (the direct beam).
    BrightCentroid,
    /// The `centre` option.
    Given,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct ProfileOptions {
    /// How the pattern centre is found (default symmetry).
    pub centre_method: CentreMethod,
    /// Centre [x, y] in pixels (column, row of pixel centres) for the `given` method.
    pub centre: Option<[f64; 2]>,
    /// Width of the radial bins, in pixels (default 1).
    #[schemars(extend("x-unit" = "px"))]
    pub bin: f64,
    /// Largest radius, in pixels; the largest circle inside the image when absent.
    #[schemars(extend("x-unit" = "px"))]
    pub max_radius: Option<f64>,
}

impl Default for ProfileOptions {
    fn default() -> Self {
        ProfileOptions {
            centre_method: CentreMethod::Symmetry,
            centre: None,
            bin: 1.0,
            max_radius: None,
        }
    }
}

pub struct RadialProfile;

static IMAGE_IN: &[Port] = &[Port::each(
    "pattern",
    Kind::Image,
    "an electron diffraction pattern",
)];

impl TypedStage for RadialProfile {
    type Options = ProfileOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "ediff.radial_profile",
        version: 1,
        summary: "Pattern centre and azimuthally averaged radial profile of a diffraction pattern",
        inputs: IMAGE_IN,
        output: Kind::Spectrum,
        references: &[],
    };
    fn check(&self, o: &ProfileOptions) -> Result<(), OptionError> {
        if !(o.bin > 0.0 && o.bin.is_finite()) {
            return Err(OptionError::new("bin", "the bin width must be positive"));
        }
        if o.centre_method == CentreMethod::Given && o.centre.is_none() {
            return Err(OptionError::new(
                "centre",
                "the given method needs a centre [x, y]",
            ));
        }
        Ok(())
    }
    fn methods(&self, o: &ProfileOptions) -> String {
        let c = match o.centre_method {
            CentreMethod::Symmetry => "located as the centre of inversion symmetry (the peak of the pattern's self-convolution, refined by parabolas)".to_string(),
            CentreMethod::BrightCentroid => "located as the intensity centroid of the brightest 1% of pixels".to_string(),
            CentreMethod::Given => {
                let c = o.centre.unwrap_or([f64::NAN; 2]);
                format!("set to ({}, {}) px", c[0], c[1])
            }
        };
        format!(
            "The pattern centre was {c}, and the intensity was averaged azimuthally in rings {} px wide.",
            o.bin
        )
    }
    fn run(&self, inputs: &Inputs, o: &ProfileOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let (cx, cy) = match o.centre_method {
            CentreMethod::Given => {
                let c = o.centre.unwrap_or([0.0, 0.0]);
                (c[0], c[1])
            }
            CentreMethod::Symmetry => symmetry_centre(img)?,
            CentreMethod::BrightCentroid => bright_centroid(img)?,
        };
        if !(cx >= 0.0
            && cy >= 0.0
            && cx <= (img.width - 1) as f64
            && cy <= (img.height - 1) as f64)
        {
            return Err(StageError::input(format!(
                "the centre ({cx:.1}, {cy:.1}) px lies outside the pattern"
            )));
        }
        let s = radial_profile(img, (cx, cy), o.bin, o.max_radius)?;
        Ok(Artifact::new(Value::Spectrum(s)).with_results(vec![
            Record::number("centre_x", cx, None, "px"),
            Record::number("centre_y", cy, None, "px"),
        ]))
    }
}

/// Largest padded transform used for centre finding (2^24 complex values, 256 MiB).
const MAX_CENTRE_FFT: usize = 1 << 24;

/// Centre of inversion symmetry, in pixel coordinates. Patterns whose padded transform
/// would exceed 2^24 values are first binned by the smallest power of two that fits (the
/// centre is then found on the binned grid and mapped back).
pub fn symmetry_centre(img: &Image) -> Result<(f64, f64), StageError> {
    symmetry_centre_within(img, MAX_CENTRE_FFT)
}

fn symmetry_centre_within(img: &Image, limit: usize) -> Result<(f64, f64), StageError> {
    let mut b = 1;
    while (2 * img.width / b) * (2 * img.height / b) > limit {
        b *= 2;
    }
    if b == 1 {
        return symmetry_centre_unbinned(img);
    }
    let (w, h) = (img.width / b, img.height / b);
    let mut data = vec![0f32; w * h];
    for r in 0..h * b {
        for c in 0..w * b {
            data[(r / b) * w + c / b] += img.get(c, r) / (b * b) as f32;
        }
    }
    let binned = Image {
        width: w,
        height: h,
        data,
        pixel_size: None,
        z_axis: img.z_axis.clone(),
        source_bits: 32,
        metadata: Default::default(),
    };
    let (cx, cy) = symmetry_centre_unbinned(&binned)?;
    // Binned pixel k covers original pixels kb..kb+b−1, centred at kb + (b − 1)/2.
    let half = (b as f64 - 1.0) / 2.0;
    Ok((cx * b as f64 + half, cy * b as f64 + half))
}

fn symmetry_centre_unbinned(img: &Image) -> Result<(f64, f64), StageError> {
    let (w, h) = (img.width, img.height);
    let (pw, ph) = (2 * w, 2 * h);
    let mean = img.data.iter().map(|&v| v as f64).sum::<f64>() / (w * h) as f64;
    let mut buf = vec![Complex::new(0.0, 0.0); pw * ph];
    for r in 0..h {
        for c in 0..w {
            buf[r * pw + c] = Complex::new(img.get(c, r) as f64 - mean, 0.0);
        }
    }
    fft2(&mut buf, pw, ph, false);
    buf.iter_mut().for_each(|z| *z = *z * *z);
    fft2(&mut buf, pw, ph, true);
    let re: Vec<f64> = buf.iter().map(|z| z.re).collect();
    let (mut best, mut bi) = (f64::NEG_INFINITY, 0);
    for (i, &v) in re.iter().enumerate() {
        if v > best {
            best = v;
            bi = i;
        }
    }
    if !best.is_finite() || best <= 0.0 {
        return Err(StageError::numeric(
            "the pattern has no symmetric structure to find a centre from",
        ));
    }
    let (sc, sr) = (bi % pw, bi / pw);
    let g = |c: usize, r: usize| re[(r % ph) * pw + (c % pw)];
    let refine = |m: f64, z: f64, p: f64| {
        let den = m - 2.0 * z + p;
        if den < 0.0 {
            (0.5 * (m - p) / den).clamp(-0.5, 0.5)
        } else {
            0.0
        }
    };
    let dx = refine(g(sc + pw - 1, sr), best, g(sc + 1, sr));
    let dy = refine(g(sc, sr + ph - 1), best, g(sc, sr + 1));
    Ok(((sc as f64 + dx) / 2.0, (sr as f64 + dy) / 2.0))
}

/// Intensity centroid of the brightest 1% of pixels.
pub fn bright_centroid(img: &Image) -> Result<(f64, f64), StageError> {
    let mut s: Vec<f32> = img.data.clone();
    s.sort_by(f32::total_cmp);
    let t = s[((s.len() as f64 * 0.99) as usize).min(s.len() - 1)];
    let (mut sw, mut sx, mut sy) = (0.0, 0.0, 0.0);
    for (i, &v) in img.data.iter().enumerate() {
        if v >= t {
            let wgt = (v - t) as f64 + 1e-12;
            sw += wgt;
            sx += wgt * (i % img.width) as f64;
            sy += wgt * (i / img.width) as f64;
        }
    }
    if sw <= 0.0 {
        return Err(StageError::numeric(
            "no bright pixels to take a centroid of",
        ));
    }
    Ok((sx / sw, sy / sw))
}

/// Azimuthal average about `centre` (pixel coordinates) in bins of `bin` pixels.
pub fn radial_profile(
    img: &Image,
    centre: (f64, f64),
    bin: f64,
    max_radius: Option<f64>,
) -> Result<Spectrum, StageError> {
    let (w, h) = (img.width, img.height);
    let (cx, cy) = centre;
    let inside = cx.min(cy).min((w - 1) as f64 - cx).min((h - 1) as f64 - cy);
    let rmax = max_radius.unwrap_or(inside).max(bin);
    let nb = (rmax / bin).floor() as usize;
    if nb < 3 {
        return Err(StageError::input(
            "fewer than 3 radial bins fit in the pattern around its centre",
        ));
    }
    let mut sum = vec![0.0; nb];
    let mut cnt = vec![0usize; nb];
    for r in 0..h {
        for c in 0..w {
            let d = ((c as f64 - cx).powi(2) + (r as f64 - cy).powi(2)).sqrt();
            let b = (d / bin) as usize;
            if b < nb {
                sum[b] += img.get(c, r) as f64;
                cnt[b] += 1;
            }
        }
    }
    let (mut x, mut y) = (Vec::new(), Vec::new());
    for b in 0..nb {
        if cnt[b] > 0 {
            x.push((b as f64 + 0.5) * bin);
            y.push(sum[b] / cnt[b] as f64);
        }
    }
    let (px, _, unit) = pixel_dims(&img.pixel_size);
    let recip = unit.starts_with("1/");
    let x_axis = if recip {
        Axis::new("scattering vector", unit.clone())
    } else {
        Axis::new("radius", "px")
    };
    if recip {
        x.iter_mut().for_each(|v| *v *= px);
    }
    let mut s = Spectrum::new(x, y, x_axis, img.z_axis.clone());
    s.metadata.insert("centre_px".into(), format!("{cx} {cy}"));
    Ok(s)
}

// ---------------------------------------------------------------- ediff.rings

/// An expected spacing of the phase being indexed.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Expected {
    /// Name of the reflection, e.g. `111`.
    pub label: String,
    /// Its spacing d, in `d_unit`.
    pub d: f64,
}

/// A ring of known spacing used to calibrate the camera constant.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Calibrant {
    /// Which found ring (1 = smallest radius).
    pub ring: usize,
    /// Its known spacing d, in `d_unit`.
    pub d: f64,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct RingsOptions {
    /// Smallest prominence of a ring, as a fraction of the profile's range (default 0.05).
    pub min_prominence: f64,
    /// Half-width of the window of each local Gaussian fit, in profile x units (default 5).
    pub window: f64,
    /// Most rings reported, most prominent first, then sorted by radius (default 10).
    pub max_rings: usize,
    /// Camera constant λL in `d_unit`·px (d = λL / R).
    pub camera_constant: Option<f64>,
    /// Accelerating voltage, in kV, for the electron wavelength.
    #[schemars(extend("x-unit" = "kV"))]
    pub voltage_kv: Option<f64>,
    /// Camera length, in mm (with voltage_kv and detector_pixel_um).
    #[schemars(extend("x-unit" = "mm"))]
    pub camera_length_mm: Option<f64>,
    /// Detector pixel size, in µm.
    #[schemars(extend("x-unit" = "µm"))]
    pub detector_pixel_um: Option<f64>,
    /// Calibrate λL from a found ring of known spacing instead.
    pub calibrant: Option<Calibrant>,
    /// Unit of all spacings (default `nm`; `nm` or `Å` when the voltage route is used).
    pub d_unit: String,
    /// Expected spacings for indexing.
    pub expected: Vec<Expected>,
    /// Largest relative deviation |d − d_expected| / d_expected of a match (default 0.02).
    pub tolerance: f64,
}

impl Default for RingsOptions {
    fn default() -> Self {
        RingsOptions {
            min_prominence: 0.05,
            window: 5.0,
            max_rings: 10,
            camera_constant: None,
            voltage_kv: None,
            camera_length_mm: None,
            detector_pixel_um: None,
            calibrant: None,
            d_unit: "nm".into(),
            expected: Vec::new(),
            tolerance: 0.02,
        }
    }
}

/// One fitted ring.
#[derive(Clone, Debug, PartialEq)]
pub struct Ring {
    pub radius: f64,
    pub radius_u: f64,
    pub fwhm: f64,
    pub height: f64,
}

pub struct Rings;

static PROFILE_IN: &[Port] = &[Port::each(
    "profile",
    Kind::Spectrum,
    "a radial profile (ediff.radial_profile)",
)];
static RING_REFS: &[Reference] = &[MARQUARDT1963, WILLIAMS2009, CODATA2018];

impl TypedStage for Rings {
    type Options = RingsOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "ediff.rings",
        version: 1,
        summary: "Ring radii by local Gaussian fits, d-spacings from the camera constant, indexing",
        inputs: PROFILE_IN,
        output: Kind::Table,
        references: RING_REFS,
    };
    fn check(&self, o: &RingsOptions) -> Result<(), OptionError> {
        if !(o.min_prominence > 0.0 && o.min_prominence < 1.0) {
            return Err(OptionError::new("min_prominence", "between 0 and 1"));
        }
        if !(o.window > 0.0 && o.window.is_finite()) {
            return Err(OptionError::new("window", "must be positive"));
        }
        if o.max_rings == 0 {
            return Err(OptionError::new("max_rings", "at least 1"));
        }
        if o.tolerance.is_nan() || o.tolerance <= 0.0 {
            return Err(OptionError::new("tolerance", "must be positive"));
        }
        let routes = [
            o.camera_constant.is_some(),
            o.voltage_kv.is_some(),
            o.calibrant.is_some(),
        ];
        if routes.iter().filter(|&&b| b).count() > 1 {
            return Err(OptionError::new("camera_constant", "give one of camera_constant, voltage_kv (with camera_length_mm and detector_pixel_um) or calibrant"));
        }
        if o.voltage_kv.is_some() && (o.camera_length_mm.is_none() || o.detector_pixel_um.is_none())
        {
            return Err(OptionError::new(
                "camera_length_mm",
                "voltage_kv needs camera_length_mm and detector_pixel_um",
            ));
        }
        if o.voltage_kv.is_some() && !matches!(o.d_unit.as_str(), "nm" | "Å" | "pm") {
            return Err(OptionError::new(
                "d_unit",
                "with voltage_kv the spacing unit must be nm, Å or pm",
            ));
        }
        for (k, v) in [
            ("camera_constant", o.camera_constant),
            ("voltage_kv", o.voltage_kv),
            ("camera_length_mm", o.camera_length_mm),
            ("detector_pixel_um", o.detector_pixel_um),
        ] {
            if let Some(v) = v {
                if !(v > 0.0 && v.is_finite()) {
                    return Err(OptionError::new(k, "must be positive"));
                }
            }
        }
        Ok(())
    }
    fn methods(&self, o: &RingsOptions) -> String {
        let cal = if let Some(c) = o.camera_constant {
            format!("d = λL/R with a camera constant λL = {c} {}·px", o.d_unit)
        } else if let (Some(v), Some(l), Some(p)) =
            (o.voltage_kv, o.camera_length_mm, o.detector_pixel_um)
        {
            format!(
                "d = λL/R with the relativistic electron wavelength at {v} kV [williams2009] from CODATA 2018 constants [codata2018], a camera length of {l} mm and a detector pixel of {p} µm"
            )
        } else if let Some(c) = &o.calibrant {
            format!(
                "d = λL/R with λL calibrated on ring {} of the reference (d = {} {})",
                c.ring, c.d, o.d_unit
            )
        } else {
            "d = 1/R on a profile in reciprocal length (radii in pixels when uncalibrated)"
                .to_string()
        };
        let index = if o.expected.is_empty() {
            String::new()
        } else {
            format!(
                ", and rings were indexed against {} expected spacings within {}%",
                o.expected.len(),
                o.tolerance * 100.0
            )
        };
        format!(
            "Ring radii were found as profile maxima of prominence at least {} of the profile range and fitted within ±{} of each maximum by a Gaussian on a linear background (Levenberg–Marquardt [marquardt1963]); {cal}{index}.",
            o.min_prominence, o.window
        )
    }
    fn run(&self, inputs: &Inputs, o: &RingsOptions) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        s.validate().map_err(StageError::input)?;
        let rings = find_rings(&s.x, &s.y, o)?;
        let recip = s.x_axis.unit.starts_with("1/");
        let mut a = Artifact::new(Value::Summary);
        // Camera constant (d_unit·px) and its standard uncertainty.
        let (lam_l, lam_l_u): (Option<f64>, f64) = if let Some(c) = o.camera_constant {
            (Some(c), 0.0)
        } else if let (Some(v), Some(l), Some(p)) =
            (o.voltage_kv, o.camera_length_mm, o.detector_pixel_um)
        {
            let lambda_m = electron_wavelength(v * 1e3);
            let scale = match o.d_unit.as_str() {
                "Å" => 1e10,
                "pm" => 1e12,
                _ => 1e9,
            };
            a.record(Record::number(
                "electron_wavelength",
                lambda_m * 1e12,
                None,
                "pm",
            ));
            (Some(lambda_m * scale * (l * 1e-3) / (p * 1e-6)), 0.0)
        } else if let Some(c) = &o.calibrant {
            let r = rings.get(c.ring.wrapping_sub(1)).ok_or_else(|| {
                StageError::input(format!(
                    "calibrant ring {} not found: {} ring(s) were found",
                    c.ring,
                    rings.len()
                ))
            })?;
            (Some(c.d * r.radius), c.d * r.radius_u)
        } else {
            (None, 0.0)
        };
        if let Some(l) = lam_l {
            a.record(Record::number(
                "camera_constant",
                l,
                if lam_l_u > 0.0 { Some(lam_l_u) } else { None },
                &format!("{}·px", o.d_unit),
            ));
        }
        let d_unit = if lam_l.is_some() {
            o.d_unit.clone()
        } else if recip {
            s.x_axis.unit.trim_start_matches("1/").to_string()
        } else {
            "1/px".to_string()
        };
        let mut ds = Vec::new();
        for r in &rings {
            let (d, du) = match lam_l {
                Some(l) => {
                    let d = l / r.radius;
                    (
                        d,
                        d * ((r.radius_u / r.radius).powi(2) + (lam_l_u / l).powi(2)).sqrt(),
                    )
                }
                None => (1.0 / r.radius, r.radius_u / (r.radius * r.radius)),
            };
            ds.push((d, du));
        }
        let mut labels = Vec::new();
        let mut devs = Vec::new();
        for (i, &(d, du)) in ds.iter().enumerate() {
            let n = i + 1;
            a.record(Record::number(
                format!("ring{n}.radius"),
                rings[i].radius,
                Some(rings[i].radius_u),
                &s.x_axis.unit,
            ));
            a.record(Record::number(format!("ring{n}.d"), d, Some(du), &d_unit));
            let best = o
                .expected
                .iter()
                .map(|e| (e, (d - e.d) / e.d))
                .min_by(|a, b| a.1.abs().total_cmp(&b.1.abs()));
            match best {
                Some((e, dev)) if dev.abs() <= o.tolerance => {
                    a.record(Record::text(format!("ring{n}.index"), e.label.clone()));
                    labels.push(e.label.clone());
                    devs.push(dev);
                }
                _ => {
                    labels.push(String::new());
                    devs.push(f64::NAN);
                }
            }
        }
        if !o.expected.is_empty() {
            let unmatched = labels.iter().filter(|l| l.is_empty()).count();
            if unmatched > 0 {
                a.warn(format!(
                    "{unmatched} ring(s) match no expected spacing within {}%",
                    o.tolerance * 100.0
                ));
            }
        }
        if lam_l.is_none() && !recip {
            a.warn("no camera constant, voltage or calibrant: spacings are 1/R in 1/px");
        }
        let num = |name: &str, unit: &str, v: Vec<f64>, u: Option<Vec<f64>>| Column {
            name: name.into(),
            unit: unit.into(),
            data: ColumnData::Number {
                values: v,
                uncertainty: u,
            },
        };
        a.value = Value::Table(Table {
            title: "diffraction rings".into(),
            columns: vec![
                num(
                    "ring",
                    "",
                    (1..=rings.len()).map(|i| i as f64).collect(),
                    None,
                ),
                num(
                    "radius",
                    &s.x_axis.unit,
                    rings.iter().map(|r| r.radius).collect(),
                    Some(rings.iter().map(|r| r.radius_u).collect()),
                ),
                num(
                    "fwhm",
                    &s.x_axis.unit,
                    rings.iter().map(|r| r.fwhm).collect(),
                    None,
                ),
                num(
                    "d",
                    &d_unit,
                    ds.iter().map(|v| v.0).collect(),
                    Some(ds.iter().map(|v| v.1).collect()),
                ),
                Column {
                    name: "index".into(),
                    unit: String::new(),
                    data: ColumnData::Text(labels),
                },
                num("relative_deviation", "", devs, None),
            ],
        });
        Ok(a)
    }
}

/// Ring radii from a profile: prominent maxima, each refined by a local Gaussian fit.
pub fn find_rings(x: &[f64], y: &[f64], o: &RingsOptions) -> Result<Vec<Ring>, StageError> {
    let n = y.len();
    if n < 5 {
        return Err(StageError::input("the profile has fewer than 5 points"));
    }
    let (lo, hi) = y
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        });
    let range = hi - lo;
    if range.is_nan() || range <= 0.0 {
        return Err(StageError::input("the profile is flat: no rings"));
    }
    let mut peaks = Vec::new();
    for i in 1..n - 1 {
        if !(y[i] > y[i - 1] && y[i] >= y[i + 1]) {
            continue;
        }
        // Prominence: height above the higher of the two minima reached before a higher point.
        let mut lmin = y[i];
        let mut j = i;
        while j > 0 {
            j -= 1;
            if y[j] > y[i] {
                break;
            }
            lmin = lmin.min(y[j]);
        }
        let mut rmin = y[i];
        let mut j = i;
        while j + 1 < n {
            j += 1;
            if y[j] > y[i] {
                break;
            }
            rmin = rmin.min(y[j]);
        }
        let prom = y[i] - lmin.max(rmin);
        if prom >= o.min_prominence * range {
            peaks.push((prom, i));
        }
    }
    peaks.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
    peaks.truncate(o.max_rings);
    let mut rings = Vec::new();
    for &(prom, i) in &peaks {
        let idx: Vec<usize> = (0..n)
            .filter(|&k| (x[k] - x[i]).abs() <= o.window)
            .collect();
        if idx.len() < 6 {
            continue;
        }
        let xs: Vec<f64> = idx.iter().map(|&k| x[k]).collect();
        let ys: Vec<f64> = idx.iter().map(|&k| y[k]).collect();
        if let Some(r) = fit_gaussian(&xs, &ys, x[i], prom, o.window / 3.0) {
            if (r.radius - x[i]).abs() <= o.window && r.radius > 0.0 {
                rings.push(r);
            }
        }
    }
    rings.sort_by(|a, b| a.radius.total_cmp(&b.radius));
    if rings.is_empty() {
        return Err(StageError::input("no ring could be fitted in the profile"));
    }
    Ok(rings)
}

/// Levenberg–Marquardt fit of A·exp(−(x − r)²/(2s²)) + b₀ + b₁(x − x₀); None on failure.
pub fn fit_gaussian(x: &[f64], y: &[f64], x0: f64, a0: f64, s0: f64) -> Option<Ring> {
    let n = x.len();
    let ymin = y.iter().cloned().fold(f64::INFINITY, f64::min);
    let mut p = [a0.max(1e-12), x0, s0.max(1e-6), ymin, 0.0];
    let model = |p: &[f64; 5], xi: f64| {
        let t = (xi - p[1]) / p[2];
        p[0] * (-0.5 * t * t).exp() + p[3] + p[4] * (xi - x0)
    };
    let jac_row = |p: &[f64; 5], xi: f64| {
        let t = (xi - p[1]) / p[2];
        let e = (-0.5 * t * t).exp();
        [
            e,
            p[0] * e * t / p[2],
            p[0] * e * t * t / p[2],
            1.0,
            xi - x0,
        ]
    };
    let ssr = |p: &[f64; 5]| {
        x.iter()
            .zip(y)
            .map(|(&xi, &yi)| (yi - model(p, xi)).powi(2))
            .sum::<f64>()
    };
    let mut cost = ssr(&p);
    let mut lambda = 1e-3;
    for _ in 0..200 {
        let mut jtj = DMatrix::<f64>::zeros(5, 5);
        let mut jtr = DVector::<f64>::zeros(5);
        for (&xi, &yi) in x.iter().zip(y) {
            let j = jac_row(&p, xi);
            let r = yi - model(&p, xi);
            for a in 0..5 {
                jtr[a] += j[a] * r;
                for b in 0..5 {
                    jtj[(a, b)] += j[a] * j[b];
                }
            }
        }
        let mut improved = false;
        for _ in 0..20 {
            let mut m = jtj.clone();
            for a in 0..5 {
                m[(a, a)] *= 1.0 + lambda;
            }
            let step = m.lu().solve(&jtr)?;
            let mut q = p;
            for a in 0..5 {
                q[a] += step[a];
            }
            q[2] = q[2].abs().max(1e-9);
            let c = ssr(&q);
            if c.is_finite() && c <= cost {
                let rel = (cost - c) / cost.max(1e-300);
                p = q;
                cost = c;
                lambda = (lambda / 10.0).max(1e-12);
                improved = true;
                if rel < 1e-12 {
                    return finish(&p, cost, n, x, &jac_row);
                }
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            break;
        }
    }
    finish(&p, cost, n, x, &jac_row)
}

fn finish(
    p: &[f64; 5],
    cost: f64,
    n: usize,
    x: &[f64],
    jac_row: &dyn Fn(&[f64; 5], f64) -> [f64; 5],
) -> Option<Ring> {
    if n <= 5 || p[0].is_nan() || p[0] <= 0.0 {
        return None;
    }
    let mut jtj = DMatrix::<f64>::zeros(5, 5);
    for &xi in x {
        let j = jac_row(p, xi);
        for a in 0..5 {
            for b in 0..5 {
                jtj[(a, b)] += j[a] * j[b];
            }
        }
    }
    let cov = jtj.try_inverse()?;
    let s2 = cost / (n - 5) as f64;
    let ru = (s2 * cov[(1, 1)]).max(0.0).sqrt();
    if !p[1].is_finite() || !ru.is_finite() {
        return None;
    }
    Some(Ring {
        radius: p[1],
        radius_u: ru,
        fwhm: 2.0 * (2.0 * 2f64.ln()).sqrt() * p[2],
        height: p[0],
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gaussian_fit_recovers_its_parameters() {
        let x: Vec<f64> = (0..30).map(|i| 40.0 + i as f64 * 0.5).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|&v| 7.0 * (-0.5 * ((v - 47.3) / 1.8f64).powi(2)).exp() + 2.0 - 0.05 * v)
            .collect();
        let r = fit_gaussian(&x, &y, 47.0, 6.0, 1.5).unwrap();
        assert!((r.radius - 47.3).abs() < 1e-6, "{r:?}");
        assert!((r.fwhm - 2.0 * (2.0 * 2f64.ln()).sqrt() * 1.8).abs() < 1e-5);
    }

    #[test]
    fn binned_centre_finding_maps_back() {
        // A centro-symmetric pattern (rings about (101.3, 77.8)); binned 2× and 4× the centre
        // is still found within a quarter of the bin size.
        let (w, h, cx, cy) = (200usize, 160usize, 101.3, 77.8);
        let img = Image {
            width: w,
            height: h,
            data: (0..w * h)
                .map(|i| {
                    let r = (((i % w) as f64 - cx).powi(2) + ((i / w) as f64 - cy).powi(2)).sqrt();
                    (100.0 * (-0.5 * ((r - 30.0) / 3.0).powi(2)).exp()
                        + 60.0 * (-0.5 * ((r - 55.0) / 3.0).powi(2)).exp())
                        as f32
                })
                .collect(),
            pixel_size: None,
            z_axis: Axis::new("intensity", "counts"),
            source_bits: 32,
            metadata: Default::default(),
        };
        for (limit, b) in [
            (usize::MAX, 1.0),
            (4 * w * h / 4, 2.0),
            (4 * w * h / 16, 4.0),
        ] {
            let (x, y) = symmetry_centre_within(&img, limit).unwrap();
            assert!(
                (x - cx).abs() < 0.25 * b && (y - cy).abs() < 0.25 * b,
                "bin {b}: ({x}, {y})"
            );
        }
    }
}
