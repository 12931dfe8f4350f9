//! `smooth.moving_average`: centred moving average of y over an odd window of points.
//!
//! Each point becomes the mean of the `window` points centred on it; near the ends the
//! window shrinks symmetrically so the result is never shifted (common practice).
//! The smoothed copy replaces y; the original is kept as a `Reference` curve so the
//! report can show both, and sigma is scaled by 1/√(points averaged).

use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Curve, CurveRole, Kind, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Window width in points; odd, at least 3.
    #[schemars(extend("x-unit" = "points"))]
    pub window: usize,
}

impl Default for Options {
    fn default() -> Self {
        Options { window: 5 }
    }
}

pub struct MovingAverage;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to smooth",
)];

impl TypedStage for MovingAverage {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "smooth.moving_average",
        version: 1,
        summary: "Centred moving average over an odd window of points",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.window < 3 || o.window.is_multiple_of(2) {
            return Err(OptionError::new(
                "window",
                format!(
                    "window must be an odd number of points, at least 3 (got {})",
                    o.window
                ),
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "Spectra were smoothed with a centred {}-point moving average.",
            o.window
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        if o.window > s.len() {
            return Err(StageError::input(format!(
                "window of {} points is longer than the spectrum ({} points)",
                o.window,
                s.len()
            )));
        }
        let mut out = s.clone();
        let (y, counts) = moving_average(&s.y, o.window);
        if let Some(sig) = &s.sigma {
            out.sigma = Some(
                sig.iter()
                    .zip(&counts)
                    .map(|(v, &n)| v / (n as f64).sqrt())
                    .collect(),
            );
        }
        out.curves.push(Curve {
            name: "unsmoothed".into(),
            role: CurveRole::Reference,
            y: s.y.clone(),
        });
        out.y = y;
        Ok(Artifact::new(Value::Spectrum(out)))
    }
}

/// Centred moving average; returns the smoothed values and how many points each averaged.
pub fn moving_average(y: &[f64], window: usize) -> (Vec<f64>, Vec<usize>) {
    let n = y.len();
    let half = window / 2;
    let mut prefix = Vec::with_capacity(n + 1);
    prefix.push(0.0);
    for v in y {
        prefix.push(prefix.last().copied().unwrap_or(0.0) + v);
    }
    let mut out = Vec::with_capacity(n);
    let mut counts = Vec::with_capacity(n);
    for i in 0..n {
        let h = half.min(i).min(n - 1 - i);
        let (a, b) = (i - h, i + h + 1);
        out.push((prefix[b] - prefix[a]) / (b - a) as f64);
        counts.push(b - a);
    }
    (out, counts)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn averages_and_shrinks_at_edges() {
        // Hand arithmetic: (1+2+3)/3 = 2 at i=1; edges average only themselves.
        let (y, n) = moving_average(&[1.0, 2.0, 3.0, 10.0], 3);
        assert_eq!(y, vec![1.0, 2.0, 5.0, 10.0]);
        assert_eq!(n, vec![1, 3, 3, 1]);
    }

    #[test]
    fn preserves_a_straight_line() {
        // Analytic: a symmetric average of a linear function is the function itself.
        let line: Vec<f64> = (0..50).map(|i| 2.0 * i as f64 + 1.0).collect();
        let (y, _) = moving_average(&line, 7);
        for (a, b) in y.iter().zip(&line) {
            assert!((a - b).abs() < 1e-12);
        }
    }

    #[test]
    fn even_window_is_refused() {
        let e = MovingAverage.check(&Options { window: 4 }).unwrap_err();
        assert_eq!(e.path, "window");
    }
}
