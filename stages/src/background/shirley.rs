//! `background.shirley`: the iterative Shirley background of photoelectron spectra
//! (Shirley 1972; iterated as in Proctor & Sherwood 1982) [shirley1972] [proctor1982].
//!
//! Over a range ordered from the no-loss end (low binding / high kinetic energy) to the
//! loss end, with end intensities I₀ and I₁ the means of `end_points` points at each
//! end, the background is B(E) = I₀ + (I₁ − I₀)·Q(E)/Q(E₁), where Q(E) is the area of
//! y − B from the no-loss end up to E (trapezoidal rule). Starting from B = I₀, the
//! relation is iterated until the largest change of B is at most `tolerance`·|I₁ − I₀|
//! or `max_iterations`. Works for ascending or descending axes of either energy.

use super::{loss_ordered, mean_head, mean_tail, range_text, with_background, LossSide};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::transform::grid::check_range;
use crate::value::{Artifact, Kind, Record};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Compute over x within [low, high]; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub range: Option<[f64; 2]>,
    /// Points averaged at each end for the end intensities.
    #[schemars(extend("x-unit" = "points"))]
    pub end_points: usize,
    /// Convergence: largest change of the background, as a fraction of the step |I₁ − I₀|.
    pub tolerance: f64,
    /// Most iterations.
    pub max_iterations: usize,
    /// Which end the background rises towards.
    pub side: LossSide,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            range: None,
            end_points: 3,
            tolerance: 1e-6,
            max_iterations: 100,
            side: LossSide::Auto,
        }
    }
}

pub struct ShirleyBackground;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a photoelectron spectrum",
)];

static REFS: &[Reference] = &[
    Reference {
        key: "shirley1972",
        citation: "D. A. Shirley, High-resolution X-ray photoemission spectrum of the valence bands of gold, Phys. Rev. B 5, 4709–4714 (1972).",
    },
    Reference {
        key: "proctor1982",
        citation: "A. Proctor, P. M. A. Sherwood, Data analysis techniques in X-ray photoelectron spectroscopy, Anal. Chem. 54, 13–19 (1982).",
    },
];

impl TypedStage for ShirleyBackground {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "background.shirley",
        version: 1,
        summary: "Iterative Shirley background (converged by tolerance), for ascending or descending energy axes",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.end_points == 0 {
            return Err(OptionError::new(
                "end_points",
                "at least 1 point at each end",
            ));
        }
        if o.tolerance.is_nan() || o.tolerance <= 0.0 {
            return Err(OptionError::new("tolerance", "must be positive"));
        }
        if o.max_iterations == 0 {
            return Err(OptionError::new("max_iterations", "at least 1"));
        }
        check_range("range", o.range)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "An iterative Shirley background [shirley1972] [proctor1982] was computed {}, with end intensities averaged over {} points, {}, iterated until it changed by at most {:e} of the step height (at most {} iterations).",
            range_text(o.range),
            o.end_points,
            o.side.describe(),
            o.tolerance,
            o.max_iterations
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let w = loss_ordered(s, o.range, o.side, (2 * o.end_points).max(3))?;
        let r = shirley(&w.x, &w.y, o.end_points, o.tolerance, o.max_iterations)?;
        let mut a = with_background(s, &w, "Shirley background", &r.background)?;
        a.record(Record::number(
            "background.iterations",
            r.iterations as f64,
            None,
            "",
        ));
        if !r.converged {
            a.warn(format!(
                "the Shirley background had not converged after {} iterations",
                o.max_iterations
            ));
        }
        Ok(a)
    }
}

/// Outcome of [`shirley`].
#[derive(Clone, Debug, PartialEq)]
pub struct ShirleyResult {
    pub background: Vec<f64>,
    pub iterations: usize,
    pub converged: bool,
}

/// Iterative Shirley background on points ordered from the no-loss end to the loss
/// end (x in either direction; the trapezoid uses |Δx|).
pub fn shirley(
    x: &[f64],
    y: &[f64],
    end_points: usize,
    tol: f64,
    max_iter: usize,
) -> Result<ShirleyResult, StageError> {
    let n = y.len();
    if n < 3 || x.len() != n {
        return Err(StageError::input(
            "a Shirley background needs at least 3 points",
        ));
    }
    let i0 = mean_head(y, end_points);
    let i1 = mean_tail(y, end_points);
    let step = i1 - i0;
    let mut b = vec![i0; n];
    if step == 0.0 {
        return Ok(ShirleyResult {
            background: b,
            iterations: 0,
            converged: true,
        });
    }
    let limit = tol * step.abs();
    let mut q = vec![0.0; n];
    for it in 1..=max_iter {
        q[0] = 0.0;
        for k in 1..n {
            let h = (x[k] - x[k - 1]).abs();
            q[k] = q[k - 1] + 0.5 * h * ((y[k] - b[k]) + (y[k - 1] - b[k - 1]));
        }
        let total = q[n - 1];
        if total == 0.0 || !total.is_finite() {
            return Err(StageError::numeric(
                "the signal above the Shirley background integrates to zero: no peak in the range",
            ));
        }
        let mut change: f64 = 0.0;
        for k in 0..n {
            let nb = i0 + step * q[k] / total;
            change = change.max((nb - b[k]).abs());
            b[k] = nb;
        }
        if change <= limit {
            return Ok(ShirleyResult {
                background: b,
                iterations: it,
                converged: true,
            });
        }
    }
    Ok(ShirleyResult {
        background: b,
        iterations: max_iter,
        converged: false,
    })
}
