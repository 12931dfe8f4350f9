//! `uvvis.onset`: absorption onset by tangent extrapolation.
//!
//! Method (common practice for absorption edges): the point of steepest slope of the
//! edge (largest |dA/dx| by central differences inside `range`) is found; a least-squares
//! line through the `tangent_points` points centred there is the tangent, and the onset
//! is where it meets the baseline level — the mean absorbance of `baseline_range`, or 0.
//! Its uncertainty comes from the tangent's covariance and the baseline's standard
//! error. On a wavelength axis the onset is also given as a photon energy (E = hc/λ).

use crate::quant_util::{
    self, check_range, indices_in, line_crossing, mean_and_se, polyfit, HC_EV_NM,
};
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Curve, CurveRole, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// x range holding the edge (x units); the whole spectrum when absent.
    pub range: Option<[f64; 2]>,
    /// Number of points (odd) through which the tangent is fitted.
    pub tangent_points: usize,
    /// x range of the flat region beyond the edge whose mean is the baseline; 0 when absent.
    pub baseline_range: Option<[f64; 2]>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            range: None,
            tangent_points: 5,
            baseline_range: None,
        }
    }
}

pub struct UvvisOnset;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "an absorbance spectrum",
)];

impl TypedStage for UvvisOnset {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.onset",
        version: 1,
        summary: "Absorption onset by tangent extrapolation at the steepest point of the edge",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        check_range("range", o.range)?;
        check_range("baseline_range", o.baseline_range)?;
        if o.tangent_points < 2 || o.tangent_points.is_multiple_of(2) {
            return Err(OptionError::new(
                "tangent_points",
                "tangent_points must be odd and at least 3",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let base = o.baseline_range.map_or("zero absorbance".to_string(), |r| {
            format!("the mean absorbance between {} and {}", r[0], r[1])
        });
        let r = o
            .range
            .map_or(String::new(), |r| format!(" between {} and {}", r[0], r[1]));
        format!(
            "The absorption onset was estimated by extrapolating the tangent at the steepest point of the edge{r} (a least-squares line through {} points) to {base}, common practice, with its uncertainty from the line's covariance [jcgm2008].",
            o.tangent_points
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let mut order: Vec<usize> = match o.range {
            Some(r) => indices_in(&s.x, r),
            None => (0..s.len()).collect(),
        };
        order.sort_by(|a, b| s.x[*a].total_cmp(&s.x[*b]));
        let n = order.len();
        let k = o.tangent_points;
        if n < k.max(3) {
            return Err(StageError::input(format!(
                "fewer than {} points in the edge range",
                k.max(3)
            )));
        }
        let (x, y): (Vec<f64>, Vec<f64>) = order.iter().map(|&i| (s.x[i], s.y[i])).unzip();
        let mut best = 1;
        let mut best_slope = 0.0f64;
        for i in 1..n - 1 {
            let d = (y[i + 1] - y[i - 1]) / (x[i + 1] - x[i - 1]);
            if d.is_finite() && d.abs() > best_slope.abs() {
                best_slope = d;
                best = i;
            }
        }
        if best_slope == 0.0 {
            return Err(StageError::input("the edge range is flat: no onset"));
        }
        let half = k / 2;
        let start = best.saturating_sub(half).min(n - k);
        let fit = polyfit(&x[start..start + k], &y[start..start + k], None, 1)?;
        let (level, u_level) = match o.baseline_range {
            Some(r) => mean_and_se(&s.y, &indices_in(&s.x, r))
                .ok_or_else(|| StageError::input("no points in baseline_range"))?,
            None => (0.0, 0.0),
        };
        let (onset, u) = line_crossing(&fit, level, u_level)?;
        let mut out = s.clone();
        let lo = onset.min(x[start + k - 1]);
        let hi = onset.max(x[start]);
        let guide =
            s.x.iter()
                .map(|&v| {
                    if v >= lo && v <= hi {
                        fit.eval(v)
                    } else {
                        f64::NAN
                    }
                })
                .collect();
        out.curves.push(Curve {
            name: "onset tangent".into(),
            role: CurveRole::Guide,
            y: guide,
        });
        let mut art = Artifact::new(Value::Spectrum(out));
        art.record(Record::number("onset", onset, Some(u), &s.x_axis.unit));
        if s.x_axis.unit == "nm" && onset > 0.0 {
            let e = HC_EV_NM / onset;
            art.record(Record::number("onset_energy", e, Some(e * u / onset), "eV"));
        }
        art.record(Record::number(
            "steepest_point",
            x[best],
            None,
            &s.x_axis.unit,
        ));
        art.record(Record::number(
            "tangent_slope",
            fit.coef[1],
            Some(fit.stderr(1)),
            &quant_util::unit_ratio(&s.y_axis.unit, &s.x_axis.unit),
        ));
        art.record(Record::number(
            "baseline_level",
            level,
            Some(u_level),
            &s.y_axis.unit,
        ));
        Ok(art)
    }
}
