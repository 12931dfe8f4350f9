//! `lattice.fft`: lattice spacings from the 2-D Fourier power spectrum of a micrograph.
//!
//! The image minus its mean is multiplied by a separable periodic Hann window
//! w(n) = ½(1 − cos 2πn/N) (Harris 1978), transformed by rustfft along rows then columns,
//! and its power |F|² is searched for the strongest local maxima (3×3) outside a disc of
//! `dc_exclusion` frequency bins around zero frequency. A real image's spectrum is
//! centro-symmetric, so each spot is taken once, from the half-plane ky > 0 (or ky = 0,
//! kx > 0); a spot and its Friedel mate are one pair. Each spot is located to sub-pixel
//! precision along each axis by Grandke's interpolation for the Hann window,
//! δ = (2α − 1)/(α + 1) with α the amplitude ratio of the larger neighbour to the peak
//! (exact for a single plane wave; Grandke 1983). The standard uncertainty of the spot
//! position is taken as the difference between that estimate and the Gaussian
//! (log-parabola) interpolation of the same three amplitudes, a measure of how far the spot
//! departs from a pure plane wave. Spacing d = 1/|k| with |k| in cycles per length unit,
//! u(d) = d·u(|k|)/|k|; angles between spot pairs are folded into 0–90°.

use crate::image::common::{check_image, image_in, pixel_dims};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Image, Kind, Record, Table, Value};
use rustfft::num_complex::Complex;
use rustfft::FftPlanner;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const HARRIS1978: Reference = Reference {
    key: "harris1978",
    citation: "F. J. Harris, \"On the use of windows for harmonic analysis with the discrete Fourier transform\", Proceedings of the IEEE 66(1), 51–83 (1978).",
};
pub const GRANDKE1983: Reference = Reference {
    key: "grandke1983",
    citation: "T. Grandke, \"Interpolation algorithms for discrete Fourier transforms of weighted signals\", IEEE Transactions on Instrumentation and Measurement 32(2), 350–355 (1983).",
};

/// In-place 2-D FFT of a w×h row-major complex buffer (rows, then columns).
pub fn fft2(data: &mut [Complex<f64>], w: usize, h: usize, inverse: bool) {
    let mut planner = FftPlanner::<f64>::new();
    let (fr, fc) = if inverse {
        (planner.plan_fft_inverse(w), planner.plan_fft_inverse(h))
    } else {
        (planner.plan_fft_forward(w), planner.plan_fft_forward(h))
    };
    fr.process(data);
    let mut t = vec![Complex::new(0.0, 0.0); w * h];
    for r in 0..h {
        for c in 0..w {
            t[c * h + r] = data[r * w + c];
        }
    }
    fc.process(&mut t);
    for c in 0..w {
        for r in 0..h {
            data[r * w + c] = t[c * h + r];
        }
    }
}

fn hann(n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| 0.5 * (1.0 - (2.0 * std::f64::consts::PI * i as f64 / n as f64).cos()))
        .collect()
}

/// Power spectrum |F|² of the Hann-windowed, mean-subtracted image, with zero frequency
/// moved to (w/2, h/2) (row-major, w×h).
pub fn power_spectrum(img: &Image) -> Vec<f64> {
    let (w, h) = (img.width, img.height);
    let mean = img.data.iter().map(|&v| v as f64).sum::<f64>() / (w * h) as f64;
    let (hx, hy) = (hann(w), hann(h));
    let mut buf: Vec<Complex<f64>> = img
        .data
        .iter()
        .enumerate()
        .map(|(i, &v)| Complex::new((v as f64 - mean) * hx[i % w] * hy[i / w], 0.0))
        .collect();
    fft2(&mut buf, w, h, false);
    let mut p = vec![0.0; w * h];
    for r in 0..h {
        for c in 0..w {
            let (sc, sr) = ((c + w / 2) % w, (r + h / 2) % h);
            p[sr * w + sc] = buf[r * w + c].norm_sqr();
        }
    }
    p
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct LatticeOptions {
    /// Number of spot pairs reported, strongest first (default 3).
    pub spots: usize,
    /// Radius around zero frequency ignored, in frequency bins (default 4).
    #[schemars(extend("x-unit" = "bins"))]
    pub dc_exclusion: f64,
    /// Spots weaker than this fraction of the strongest are not reported (default 0.01).
    pub min_relative_power: f64,
}

impl Default for LatticeOptions {
    fn default() -> Self {
        LatticeOptions {
            spots: 3,
            dc_exclusion: 4.0,
            min_relative_power: 0.01,
        }
    }
}

/// One periodic spot (half-plane representative of a Friedel pair).
#[derive(Clone, Debug, PartialEq)]
pub struct Spot {
    /// Spatial frequency components, cycles per length unit (x right, y down).
    pub kx: f64,
    pub ky: f64,
    pub k: f64,
    pub k_u: f64,
    pub d: f64,
    pub d_u: f64,
    /// Direction of the wave vector from the x axis, degrees in [0, 180).
    pub angle: f64,
    pub power: f64,
}

pub struct LatticeFft;

static INPUTS: &[Port] = &[Port::each(
    "image",
    Kind::Image,
    "a lattice-resolved micrograph",
)];

impl TypedStage for LatticeFft {
    type Options = LatticeOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "lattice.fft",
        version: 1,
        summary: "Lattice spacings and angles from the strongest spots of the 2-D power spectrum",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[HARRIS1978, GRANDKE1983],
    };
    fn check(&self, o: &LatticeOptions) -> Result<(), OptionError> {
        if o.spots == 0 || o.spots > 50 {
            return Err(OptionError::new("spots", "between 1 and 50 spots"));
        }
        if !(o.dc_exclusion >= 1.0 && o.dc_exclusion.is_finite()) {
            return Err(OptionError::new("dc_exclusion", "at least 1 bin"));
        }
        if !(0.0..1.0).contains(&o.min_relative_power) {
            return Err(OptionError::new("min_relative_power", "between 0 and 1"));
        }
        Ok(())
    }
    fn methods(&self, o: &LatticeOptions) -> String {
        format!(
            "Lattice spacings were measured from the power spectrum of the Hann-windowed [harris1978] image: the {} strongest spot pairs outside {} frequency bins of the origin (and above {} of the strongest) were located by Grandke's interpolation [grandke1983], with d = 1/|k| and the uncertainty from the difference to a log-parabola interpolation.",
            o.spots, o.dc_exclusion, o.min_relative_power
        )
    }
    fn run(&self, inputs: &Inputs, o: &LatticeOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        if img.width < 8 || img.height < 8 {
            return Err(StageError::input("the image is smaller than 8×8 pixels"));
        }
        let spots = find_spots(img, o);
        if spots.is_empty() {
            return Err(StageError::input(
                "no periodic spot found outside the zero-frequency region",
            ));
        }
        let (_, _, unit) = pixel_dims(&img.pixel_size);
        let ku = format!("1/{unit}");
        let col = |name: &str, u: &str, v: Vec<f64>, unc: Option<Vec<f64>>| Column {
            name: name.into(),
            unit: u.into(),
            data: ColumnData::Number {
                values: v,
                uncertainty: unc,
            },
        };
        let table = Table {
            title: "lattice spots".into(),
            columns: vec![
                col(
                    "spot",
                    "",
                    (1..=spots.len()).map(|i| i as f64).collect(),
                    None,
                ),
                col("kx", &ku, spots.iter().map(|s| s.kx).collect(), None),
                col("ky", &ku, spots.iter().map(|s| s.ky).collect(), None),
                col(
                    "k",
                    &ku,
                    spots.iter().map(|s| s.k).collect(),
                    Some(spots.iter().map(|s| s.k_u).collect()),
                ),
                col(
                    "d",
                    &unit,
                    spots.iter().map(|s| s.d).collect(),
                    Some(spots.iter().map(|s| s.d_u).collect()),
                ),
                col(
                    "direction",
                    "deg",
                    spots.iter().map(|s| s.angle).collect(),
                    None,
                ),
                col(
                    "relative_power",
                    "",
                    spots.iter().map(|s| s.power / spots[0].power).collect(),
                    None,
                ),
            ],
        };
        let mut a = Artifact::new(Value::Table(table));
        for (i, s) in spots.iter().enumerate() {
            a.record(Record::number(
                format!("spot{}.d", i + 1),
                s.d,
                Some(s.d_u),
                &unit,
            ));
            a.record(Record::number(
                format!("spot{}.direction", i + 1),
                s.angle,
                None,
                "deg",
            ));
        }
        for i in 0..spots.len() {
            for j in i + 1..spots.len() {
                let (p, q) = (&spots[i], &spots[j]);
                let cos = ((p.kx * q.kx + p.ky * q.ky) / (p.k * q.k)).abs().min(1.0);
                a.record(Record::number(
                    format!("angle.{}_{}", i + 1, j + 1),
                    cos.acos().to_degrees(),
                    None,
                    "deg",
                ));
            }
        }
        if img.pixel_size.is_none() {
            a.warn("the image has no pixel size: spacings are in pixels (px)");
        }
        if spots.len() < o.spots {
            a.info(format!(
                "only {} spot pair(s) above the power limit",
                spots.len()
            ));
        }
        Ok(a)
    }
}

/// Sub-pixel offset from three amplitudes by Grandke's Hann interpolation and by the
/// log-parabola; returns (Grandke offset, |difference|).
fn interpolate(am: f64, a0: f64, ap: f64) -> (f64, f64) {
    let grandke = if ap >= am {
        let al = ap / a0;
        (2.0 * al - 1.0) / (al + 1.0)
    } else {
        let al = am / a0;
        -(2.0 * al - 1.0) / (al + 1.0)
    };
    let (lm, l0, lp) = (
        am.max(1e-300).ln(),
        a0.max(1e-300).ln(),
        ap.max(1e-300).ln(),
    );
    let den = lm - 2.0 * l0 + lp;
    let para = if den < 0.0 {
        0.5 * (lm - lp) / den
    } else {
        0.0
    };
    let g = grandke.clamp(-1.0, 1.0);
    (g, (g - para).abs())
}

/// The strongest spots of the image's power spectrum.
pub fn find_spots(img: &Image, o: &LatticeOptions) -> Vec<Spot> {
    let (w, h) = (img.width, img.height);
    let p = power_spectrum(img);
    let (cx, cy) = ((w / 2) as isize, (h / 2) as isize);
    let at = |c: isize, r: isize| {
        p[(r.rem_euclid(h as isize) as usize) * w + c.rem_euclid(w as isize) as usize]
    };
    let mut cand: Vec<(f64, isize, isize)> = Vec::new();
    for r in 0..h as isize {
        for c in 0..w as isize {
            let (u, v) = (c - cx, r - cy);
            if !(v > 0 || (v == 0 && u > 0)) {
                continue;
            }
            if ((u * u + v * v) as f64).sqrt() < o.dc_exclusion {
                continue;
            }
            let val = at(c, r);
            let mut is_max = val > 0.0;
            'n: for dr in -1..=1 {
                for dc in -1..=1 {
                    if (dr, dc) == (0, 0) {
                        continue;
                    }
                    let nb = at(c + dc, r + dr);
                    // Strict against earlier neighbours, non-strict against later: one per plateau.
                    if nb > val || (nb == val && (dr, dc) < (0, 0)) {
                        is_max = false;
                        break 'n;
                    }
                }
            }
            if is_max {
                cand.push((val, u, v));
            }
        }
    }
    cand.sort_by(|a, b| b.0.total_cmp(&a.0).then((a.1, a.2).cmp(&(b.1, b.2))));
    let strongest = cand.first().map_or(0.0, |c| c.0);
    let (px, py, _) = pixel_dims(&img.pixel_size);
    cand.iter()
        .take_while(|c| c.0 >= o.min_relative_power * strongest)
        .take(o.spots)
        .map(|&(val, u, v)| {
            let (c, r) = (u + cx, v + cy);
            let a0 = val.sqrt();
            let (du, su) = interpolate(at(c - 1, r).sqrt(), a0, at(c + 1, r).sqrt());
            let (dv, sv) = interpolate(at(c, r - 1).sqrt(), a0, at(c, r + 1).sqrt());
            let kx = (u as f64 + du) / (w as f64 * px);
            let ky = (v as f64 + dv) / (h as f64 * py);
            let k = (kx * kx + ky * ky).sqrt();
            let (ukx, uky) = (su / (w as f64 * px), sv / (h as f64 * py));
            let k_u = ((kx * ukx).powi(2) + (ky * uky).powi(2)).sqrt() / k;
            let d = 1.0 / k;
            let mut angle = (-ky).atan2(kx).to_degrees();
            if angle < 0.0 {
                angle += 180.0;
            }
            if angle >= 180.0 {
                angle -= 180.0;
            }
            Spot {
                kx,
                ky,
                k,
                k_u,
                d,
                d_u: d * k_u / k,
                angle,
                power: val,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grandke_is_exact_for_the_hann_kernel() {
        // Hann DTFT magnitude near the main lobe ∝ sinc(f)/(1 − f²) (Harris 1978).
        let k = |f: f64| {
            if f.abs() < 1e-12 {
                1.0
            } else {
                (std::f64::consts::PI * f).sin() / (std::f64::consts::PI * f) / (1.0 - f * f)
            }
        };
        for delta in [0.1, 0.3, -0.45] {
            let (d, _) = interpolate(k(-1.0 - delta).abs(), k(-delta).abs(), k(1.0 - delta).abs());
            assert!((d - delta).abs() < 1e-9, "{delta}: {d}");
        }
    }
}
