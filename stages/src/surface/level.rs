//! `surface.level`: levelling of AFM/STM height maps.
//!
//! - `plane`: the least-squares plane z = a + b·x + c·y is subtracted.
//! - `quadratic`: the least-squares second-order surface a + bx + cy + dx² + exy + fy².
//!   Both solve the normal equations (coordinates centred and scaled to [−1, 1] for
//!   conditioning) with a Cholesky factorisation; a singular system is an error.
//! - `line_median`: each scan line (row) is shifted so that its median is zero, removing
//!   line-to-line offsets of the slow scan axis.
//! - `line_linear`: a least-squares straight line is subtracted from each row.
//!
//! Linear least squares (common practice of scanning-probe data processing; the plane and
//! polynomial fits are ordinary least squares, e.g. Press et al., Numerical Recipes, §15.4).

use crate::image::common::{check_image, image_in, with_data};
use crate::stage::{Inputs, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use nalgebra::{DMatrix, DVector};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const PRESS2007: Reference = Reference {
    key: "press2007",
    citation: "W. H. Press, S. A. Teukolsky, W. T. Vetterling and B. P. Flannery, Numerical Recipes: The Art of Scientific Computing, 3rd ed., Cambridge University Press (2007), §15.4 General linear least squares.",
};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Levelling {
    /// Least-squares plane.
    Plane,
    /// Least-squares second-order surface.
    Quadratic,
    /// Median of each row set to zero.
    LineMedian,
    /// Least-squares line subtracted from each row.
    LineLinear,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct LevelOptions {
    /// Levelling method (default plane).
    pub method: Levelling,
}

impl Default for LevelOptions {
    fn default() -> Self {
        LevelOptions {
            method: Levelling::Plane,
        }
    }
}

pub struct Level;

static INPUTS: &[Port] = &[Port::each("height", Kind::Image, "a height map")];

impl TypedStage for Level {
    type Options = LevelOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "surface.level",
        version: 1,
        summary:
            "Level a height map: least-squares plane or quadratic surface, or line-by-line offsets",
        inputs: INPUTS,
        output: Kind::Image,
        references: &[PRESS2007],
    };
    fn methods(&self, o: &LevelOptions) -> String {
        match o.method {
            Levelling::Plane => "Height maps were levelled by subtracting the least-squares plane [press2007].".into(),
            Levelling::Quadratic => "Height maps were levelled by subtracting the least-squares second-order polynomial surface [press2007].".into(),
            Levelling::LineMedian => "Height maps were levelled line by line, shifting each scan line to zero median.".into(),
            Levelling::LineLinear => "Height maps were levelled line by line, subtracting each scan line's least-squares straight line [press2007].".into(),
        }
    }
    fn run(&self, inputs: &Inputs, o: &LevelOptions) -> Result<Artifact, StageError> {
        let img = image_in(inputs, 0)?;
        check_image(img)?;
        let mut z: Vec<f64> = img.data.iter().map(|&v| v as f64).collect();
        level(&mut z, img.width, img.height, o.method)?;
        let rms = (z.iter().map(|v| v * v).sum::<f64>() / z.len() as f64).sqrt();
        let mut out = with_data(img, z.iter().map(|&v| v as f32).collect());
        out.source_bits = 32;
        out.metadata
            .insert("levelling".into(), format!("{:?}", o.method).to_lowercase());
        Ok(
            Artifact::new(Value::Image(out)).with_results(vec![Record::number(
                "levelled_rms",
                rms,
                None,
                &img.z_axis.unit,
            )]),
        )
    }
}

/// Levels the w×h height map in place.
pub fn level(z: &mut [f64], w: usize, h: usize, method: Levelling) -> Result<(), StageError> {
    let xs = |c: usize| {
        if w > 1 {
            2.0 * c as f64 / (w - 1) as f64 - 1.0
        } else {
            0.0
        }
    };
    let ys = |r: usize| {
        if h > 1 {
            2.0 * r as f64 / (h - 1) as f64 - 1.0
        } else {
            0.0
        }
    };
    match method {
        Levelling::Plane | Levelling::Quadratic => {
            let basis = |x: f64, y: f64| -> Vec<f64> {
                if method == Levelling::Plane {
                    vec![1.0, x, y]
                } else {
                    vec![1.0, x, y, x * x, x * y, y * y]
                }
            };
            let m = if method == Levelling::Plane { 3 } else { 6 };
            let mut ata = DMatrix::<f64>::zeros(m, m);
            let mut atb = DVector::<f64>::zeros(m);
            for r in 0..h {
                for c in 0..w {
                    let b = basis(xs(c), ys(r));
                    let zv = z[r * w + c];
                    for i in 0..m {
                        atb[i] += b[i] * zv;
                        for j in 0..m {
                            ata[(i, j)] += b[i] * b[j];
                        }
                    }
                }
            }
            let coef = ata
                .cholesky()
                .ok_or_else(|| {
                    StageError::numeric(
                        "the levelling surface is undetermined (too few rows or columns)",
                    )
                })?
                .solve(&atb);
            for r in 0..h {
                for c in 0..w {
                    let b = basis(xs(c), ys(r));
                    z[r * w + c] -= (0..m).map(|i| coef[i] * b[i]).sum::<f64>();
                }
            }
        }
        Levelling::LineMedian => {
            for row in z.chunks_mut(w) {
                let mut s = row.to_vec();
                s.sort_by(f64::total_cmp);
                let med = if s.len() % 2 == 1 {
                    s[s.len() / 2]
                } else {
                    0.5 * (s[s.len() / 2 - 1] + s[s.len() / 2])
                };
                row.iter_mut().for_each(|v| *v -= med);
            }
        }
        Levelling::LineLinear => {
            for row in z.chunks_mut(w) {
                let n = row.len() as f64;
                let mx = (0..row.len()).map(|c| c as f64).sum::<f64>() / n;
                let my = row.iter().sum::<f64>() / n;
                let sxx: f64 = (0..row.len()).map(|c| (c as f64 - mx).powi(2)).sum();
                let sxy: f64 = row
                    .iter()
                    .enumerate()
                    .map(|(c, v)| (c as f64 - mx) * (v - my))
                    .sum();
                let slope = if sxx > 0.0 { sxy / sxx } else { 0.0 };
                row.iter_mut()
                    .enumerate()
                    .for_each(|(c, v)| *v -= my + slope * (c as f64 - mx));
            }
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plane_and_quadratic_are_removed_exactly() {
        let (w, h) = (20, 15);
        let mut z: Vec<f64> = (0..w * h)
            .map(|i| 3.0 + 0.2 * (i % w) as f64 - 0.7 * (i / w) as f64)
            .collect();
        level(&mut z, w, h, Levelling::Plane).unwrap();
        assert!(z.iter().all(|v| v.abs() < 1e-9));
        let mut z: Vec<f64> = (0..w * h)
            .map(|i| {
                let (x, y) = ((i % w) as f64, (i / w) as f64);
                1.0 + 0.01 * x * x - 0.03 * x * y + 0.5 * y
            })
            .collect();
        level(&mut z, w, h, Levelling::Quadratic).unwrap();
        assert!(z.iter().all(|v| v.abs() < 1e-9));
        let mut z: Vec<f64> = (0..w * h)
            .map(|i| (i / w) as f64 * 10.0 + (i % 3) as f64)
            .collect();
        level(&mut z, w, h, Levelling::LineMedian).unwrap();
        assert!(z.iter().all(|v| v.abs() <= 1.0 + 1e-12));
    }
}
