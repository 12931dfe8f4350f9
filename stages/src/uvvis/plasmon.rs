//! `uvvis.plasmon`: centre, height and full width at half maximum of a localized
//! surface plasmon band, and its shift against a reference spectrum.
//!
//! Method (common practice for plasmon bands): an optional baseline (the straight line
//! through the band range's end points, or the range's minimum) is subtracted; the
//! centre is the parabola-refined maximum; the FWHM is the distance between the
//! half-maximum crossings on either side, each found by linear interpolation between
//! the two points that bracket it. The shift is centre − reference centre, both found
//! the same way. Uncertainties are propagated to first order from the point σ (central
//! differences through the whole procedure) when the spectra carry σ.

use crate::measure::maximum::parabolic_vertex;
use crate::quant_util::{self, check_range, indices_in, jacobian};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Baseline {
    /// No baseline: half maximum of the raw band.
    None,
    /// The straight line through the first and last point of the band range.
    #[default]
    Linear,
    /// The smallest value in the band range.
    Minimum,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// x range holding the band (x units, e.g. nm); the whole spectrum when absent.
    pub range: Option<[f64; 2]>,
    /// Baseline subtracted before the half maximum is taken.
    pub baseline: Baseline,
}

pub struct UvvisPlasmon;

static INPUTS: &[Port] = &[
    Port::each(
        "spectrum",
        Kind::Spectrum,
        "the sample's extinction spectrum",
    ),
    Port::each(
        "reference",
        Kind::Spectrum,
        "a reference spectrum for the band shift",
    )
    .optional(),
];

/// (centre, height, fwhm) of the band in x[idx] with y values yv (same order as idx).
fn band(x: &[f64], yv: &[f64], baseline: Baseline) -> Result<[f64; 3], StageError> {
    let n = x.len();
    let y: Vec<f64> = match baseline {
        Baseline::None => yv.to_vec(),
        Baseline::Minimum => {
            let m = yv.iter().cloned().fold(f64::INFINITY, f64::min);
            yv.iter().map(|v| v - m).collect()
        }
        Baseline::Linear => {
            let (x0, x1, y0, y1) = (x[0], x[n - 1], yv[0], yv[n - 1]);
            x.iter()
                .zip(yv)
                .map(|(xi, v)| v - (y0 + (y1 - y0) * (xi - x0) / (x1 - x0)))
                .collect()
        }
    };
    let best = (0..n).fold(0, |b, i| if y[i] > y[b] { i } else { b });
    if best == 0 || best == n - 1 {
        return Err(StageError::input(
            "the band maximum lies on the edge of the range",
        ));
    }
    let (c, h) = parabolic_vertex(x, &y, best);
    if h <= 0.0 {
        return Err(StageError::input(
            "the band has no positive height above the baseline",
        ));
    }
    let half = h / 2.0;
    let cross = |from: usize, step: isize| -> Option<f64> {
        let mut i = from as isize;
        while i + step >= 0 && ((i + step) as usize) < n {
            let j = (i + step) as usize;
            let ii = i as usize;
            if y[j] < half {
                return Some(x[ii] + (x[j] - x[ii]) * (y[ii] - half) / (y[ii] - y[j]));
            }
            i += step;
        }
        None
    };
    let (l, r) = match (cross(best, -1), cross(best, 1)) {
        (Some(l), Some(r)) => (l, r),
        _ => {
            return Err(StageError::input(
                "the band does not fall to half maximum on both sides inside the range",
            ))
        }
    };
    Ok([c, h, (r - l).abs()])
}

/// Band metrics with first-order uncertainties from sigma (when present).
fn measure(s: &Spectrum, o: &Options) -> Result<([f64; 3], Option<[f64; 3]>), StageError> {
    let mut idx = match o.range {
        Some(r) => indices_in(&s.x, r),
        None => (0..s.len()).collect(),
    };
    idx.sort_by(|a, b| s.x[*a].total_cmp(&s.x[*b]));
    if idx.len() < 5 {
        return Err(StageError::input("fewer than 5 points in the band range"));
    }
    let x: Vec<f64> = idx.iter().map(|&i| s.x[i]).collect();
    let y: Vec<f64> = idx.iter().map(|&i| s.y[i]).collect();
    let v = band(&x, &y, o.baseline)?;
    let u = match &s.sigma {
        Some(sig) => {
            let us: Vec<f64> = idx.iter().map(|&i| sig[i]).collect();
            let f = |yy: &[f64]| {
                band(&x, yy, o.baseline)
                    .map(|r| r.to_vec())
                    .unwrap_or_else(|_| vec![f64::NAN; 3])
            };
            let jac = jacobian(&f, &y, &us);
            let mut out = [0.0; 3];
            for k in 0..3 {
                out[k] = jac[k]
                    .iter()
                    .zip(&us)
                    .map(|(g, u)| (g * u).powi(2))
                    .sum::<f64>()
                    .sqrt();
            }
            out.iter().all(|v| v.is_finite()).then_some(out)
        }
        None => None,
    };
    Ok((v, u))
}

impl TypedStage for UvvisPlasmon {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.plasmon",
        version: 1,
        summary: "Plasmon band centre, FWHM from interpolated half-maximum crossings, and shift against a reference",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        let b = match o.baseline {
            Baseline::None => "without a baseline",
            Baseline::Linear => {
                "after subtracting the straight line through the ends of the band range"
            }
            Baseline::Minimum => "after subtracting the minimum of the band range",
        };
        let r = o
            .range
            .map_or(String::new(), |r| format!(" between {} and {}", r[0], r[1]));
        format!(
            "Plasmon bands{r} were characterised {b} by the parabola-refined maximum and the full width between the linearly interpolated half-maximum crossings (common practice), with shifts taken against the reference spectrum processed identically and uncertainties propagated to first order [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let (v, u) = measure(s, o)?;
        let xu = &s.x_axis.unit;
        let mut art = Artifact::new(Value::Summary);
        art.record(Record::number("band_centre", v[0], u.map(|u| u[0]), xu));
        art.record(Record::number(
            "band_height",
            v[1],
            u.map(|u| u[1]),
            &s.y_axis.unit,
        ));
        art.record(Record::number("fwhm", v[2], u.map(|u| u[2]), xu));
        if let Some(r) = inputs.optional(1).and_then(|a| a.spectrum()) {
            let (rv, ru) =
                measure(r, o).map_err(|e| StageError::input(format!("reference: {e}")))?;
            let su = match (u, ru) {
                (Some(a), Some(b)) => Some((a[0] * a[0] + b[0] * b[0]).sqrt()),
                _ => None,
            };
            art.record(Record::number(
                "reference_centre",
                rv[0],
                ru.map(|u| u[0]),
                xu,
            ));
            art.record(Record::number("shift", v[0] - rv[0], su, xu));
            art.record(Record::number("fwhm_change", v[2] - rv[2], None, xu));
        }
        Ok(art)
    }
}
