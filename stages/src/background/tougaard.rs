//! `background.tougaard`: the inelastic background with Tougaard's universal
//! cross-section [tougaard1989] [tougaard1997].
//!
//! With energy loss T, K(T) = B·T/(C + T²)² (C = 1643 eV² for the universal
//! cross-section; 1997 three-parameter forms reduce to this one). Over a range ordered
//! from the no-loss end, the background at energy E is
//! B_g(E) = I₀ + B·∫ K(T = |E − E′|) (y(E′) − I₀) dE′, the integral running over the
//! points between the no-loss end and E (trapezoidal rule), with I₀ the mean of
//! `end_points` points at the no-loss end. Unless B is given it is chosen so the
//! background meets the data at the loss end (the mean of its `end_points` points).
//! The x axis must be an energy in eV. Cost O(n²).

use super::{loss_ordered, mean_head, mean_tail, range_text, with_background, LossSide};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::transform::grid::check_range;
use crate::value::{Artifact, Kind, Record};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// C of the universal cross-section, eV² (Tougaard 1989).
pub const UNIVERSAL_C_EV2: f64 = 1643.0;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// B of the cross-section in eV²; fitted so the background meets the data at the
    /// loss end when absent.
    #[schemars(extend("x-unit" = "eV²"))]
    pub b: Option<f64>,
    /// C of the cross-section in eV².
    #[schemars(extend("x-unit" = "eV²"))]
    pub c: f64,
    /// Compute over x within [low, high]; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub range: Option<[f64; 2]>,
    /// Points averaged at each end.
    #[schemars(extend("x-unit" = "points"))]
    pub end_points: usize,
    /// Which end the background rises towards.
    pub side: LossSide,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            b: None,
            c: UNIVERSAL_C_EV2,
            range: None,
            end_points: 3,
            side: LossSide::Auto,
        }
    }
}

pub struct TougaardBackground;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a photoelectron spectrum on an eV axis",
)];

static REFS: &[Reference] = &[
    Reference {
        key: "tougaard1989",
        citation: "S. Tougaard, Practical algorithm for background subtraction, Surf. Sci. 216, 343–360 (1989); and Quantitative analysis of the inelastic background in surface electron spectroscopy, Surf. Interface Anal. 11, 453–472 (1988).",
    },
    Reference {
        key: "tougaard1997",
        citation: "S. Tougaard, Universality classes of inelastic electron scattering cross-sections, Surf. Interface Anal. 25, 137–154 (1997).",
    },
];

impl TypedStage for TougaardBackground {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "background.tougaard",
        version: 1,
        summary: "Tougaard background with the universal cross-section K(T) = B·T/(C+T²)², B fitted or given",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if !(o.c > 0.0 && o.c.is_finite()) {
            return Err(OptionError::new("c", "must be a positive number of eV²"));
        }
        if let Some(b) = o.b {
            if !b.is_finite() {
                return Err(OptionError::new("b", "must be a finite number"));
            }
        }
        if o.end_points == 0 {
            return Err(OptionError::new(
                "end_points",
                "at least 1 point at each end",
            ));
        }
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        let b = match o.b {
            Some(b) => format!("B = {b} eV²"),
            None => "B chosen so that the background meets the data at the loss end".to_string(),
        };
        format!(
            "A Tougaard background with the universal cross-section K(T) = B·T/(C + T²)² [tougaard1989] [tougaard1997] was computed {}, with C = {} eV², {b}, end intensities averaged over {} points and {}.",
            range_text(o.range),
            o.c,
            o.end_points,
            o.side.describe()
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        if !s.x_axis.unit.eq_ignore_ascii_case("eV") {
            return Err(StageError::input(format!(
                "the Tougaard cross-section needs an energy axis in eV, not '{}'",
                s.x_axis.unit
            )));
        }
        let w = loss_ordered(s, o.range, o.side, (2 * o.end_points).max(3))?;
        let r = tougaard(&w.x, &w.y, o.b, o.c, o.end_points)?;
        let mut a = with_background(s, &w, "Tougaard background", &r.background)?;
        a.record(Record::number("background.b", r.b, None, "eV²"));
        a.record(Record::number("background.c", o.c, None, "eV²"));
        if r.b < 0.0 {
            a.warn("the fitted Tougaard B is negative: the data fall towards the loss end");
        }
        Ok(a)
    }
}

/// Outcome of [`tougaard`].
#[derive(Clone, Debug, PartialEq)]
pub struct TougaardResult {
    pub background: Vec<f64>,
    /// B used (fitted or given), eV².
    pub b: f64,
}

/// Universal cross-section shape T/(C + T²)² (without B).
pub fn universal_k(t: f64, c: f64) -> f64 {
    t / (c + t * t).powi(2)
}

/// Tougaard background on points ordered from the no-loss end to the loss end.
pub fn tougaard(
    x: &[f64],
    y: &[f64],
    b: Option<f64>,
    c: f64,
    end_points: usize,
) -> Result<TougaardResult, StageError> {
    let n = y.len();
    if n < 3 || x.len() != n {
        return Err(StageError::input(
            "a Tougaard background needs at least 3 points",
        ));
    }
    let i0 = mean_head(y, end_points);
    // F[k] = ∫ K(|x_k − x'|) (y(x') − I₀) dx' over points 0..=k (trapezoid).
    let mut f = vec![0.0; n];
    for k in 1..n {
        let mut acc = 0.0;
        for j in 0..k {
            let h = (x[j + 1] - x[j]).abs();
            let g0 = universal_k((x[k] - x[j]).abs(), c) * (y[j] - i0);
            let g1 = universal_k((x[k] - x[j + 1]).abs(), c) * (y[j + 1] - i0);
            acc += 0.5 * h * (g0 + g1);
        }
        f[k] = acc;
    }
    let b = match b {
        Some(b) => b,
        None => {
            let ft = mean_tail(&f, end_points);
            let yt = mean_tail(y, end_points) - i0;
            if ft == 0.0 || !ft.is_finite() {
                return Err(StageError::numeric(
                    "the loss integral is zero: B cannot be fitted",
                ));
            }
            yt / ft
        }
    };
    Ok(TougaardResult {
        background: f.iter().map(|v| i0 + b * v).collect(),
        b,
    })
}
