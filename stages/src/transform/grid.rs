//! Grid helpers shared by the spectral stages: linear interpolation on ascending or
//! descending grids, index ranges, and checks on the spectrum a stage receives.

use crate::stage::StageError;
use crate::value::Spectrum;

/// Whether x is strictly monotonic (ascending or descending).
pub fn is_monotonic(x: &[f64]) -> bool {
    x.windows(2).all(|w| w[1] > w[0]) || x.windows(2).all(|w| w[1] < w[0])
}

/// An error unless the spectrum has at least `min` points and a strictly monotonic x.
pub fn require_monotonic(s: &Spectrum, min: usize) -> Result<(), StageError> {
    if s.len() < min {
        return Err(StageError::input(format!(
            "the spectrum has {} points; at least {min} are needed",
            s.len()
        )));
    }
    s.validate().map_err(StageError::input)?;
    if !is_monotonic(&s.x) {
        return Err(StageError::input(
            "x must be strictly ascending or strictly descending (sort or resample first)",
        ));
    }
    Ok(())
}

/// Linear interpolation of (x, y) at q on a strictly monotonic grid; None outside.
pub fn interp(x: &[f64], y: &[f64], q: f64) -> Option<f64> {
    let n = x.len();
    if n == 0 {
        return None;
    }
    let asc = n < 2 || x[n - 1] >= x[0];
    let (lo, hi) = if asc {
        (x[0], x[n - 1])
    } else {
        (x[n - 1], x[0])
    };
    if !(q >= lo && q <= hi) {
        return None;
    }
    if n == 1 {
        return Some(y[0]);
    }
    // Index j with q between x[j] and x[j+1].
    let j = if asc {
        x.partition_point(|&v| v <= q).saturating_sub(1)
    } else {
        x.partition_point(|&v| v >= q).saturating_sub(1)
    }
    .min(n - 2);
    let (x0, x1) = (x[j], x[j + 1]);
    let t = if x1 == x0 { 0.0 } else { (q - x0) / (x1 - x0) };
    Some(y[j] + t * (y[j + 1] - y[j]))
}

/// Indices i with lo ≤ x[i] ≤ hi (in array order).
pub fn indices_in(x: &[f64], lo: f64, hi: f64) -> Vec<usize> {
    (0..x.len()).filter(|&i| x[i] >= lo && x[i] <= hi).collect()
}

/// The mean spacing (x_last − x_first)/(n − 1), signed.
pub fn mean_step(x: &[f64]) -> f64 {
    if x.len() < 2 {
        return 0.0;
    }
    (x[x.len() - 1] - x[0]) / (x.len() - 1) as f64
}

/// Whether the grid is uniform to a relative tolerance of its mean step.
pub fn is_uniform(x: &[f64], rel: f64) -> bool {
    let h = mean_step(x);
    x.windows(2)
        .all(|w| ((w[1] - w[0]) - h).abs() <= rel * h.abs())
}

/// A `[lo, hi]` option range as (min, max), or the whole data span.
pub fn span(x: &[f64], range: Option<[f64; 2]>) -> (f64, f64) {
    match range {
        Some([a, b]) => (a.min(b), a.max(b)),
        None => (
            x.iter().copied().fold(f64::INFINITY, f64::min),
            x.iter().copied().fold(f64::NEG_INFINITY, f64::max),
        ),
    }
}

/// The unit of y·x (an area), e.g. `counts·eV`.
pub fn area_unit(s: &Spectrum) -> String {
    let (xu, yu) = (&s.x_axis.unit, &s.y_axis.unit);
    match (yu.is_empty(), xu.is_empty()) {
        (false, false) => format!("{yu}·{xu}"),
        (false, true) => yu.clone(),
        (true, false) => xu.clone(),
        (true, true) => String::new(),
    }
}

/// The background curve of a spectrum, if it carries one.
pub fn background(s: &Spectrum) -> Option<&crate::value::Curve> {
    s.curve(crate::value::CurveRole::Background)
}

/// Puts (or replaces) the background curve on a spectrum; y is never touched.
pub fn set_background(s: &mut Spectrum, name: &str, y: Vec<f64>) {
    use crate::value::{Curve, CurveRole};
    s.curves.retain(|c| c.role != CurveRole::Background);
    s.curves.push(Curve {
        name: name.to_string(),
        role: CurveRole::Background,
        y,
    });
}

/// A `range` option checker: [low, high] with low < high, both finite.
pub fn check_range(key: &str, r: Option<[f64; 2]>) -> Result<(), crate::stage::OptionError> {
    if let Some([a, b]) = r {
        if !(a.is_finite() && b.is_finite() && a < b) {
            return Err(crate::stage::OptionError::new(
                key,
                format!("must be [low, high] with low < high (got [{a}, {b}])"),
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolates_both_directions() {
        let x = [0.0, 1.0, 2.0];
        let y = [0.0, 10.0, 30.0];
        assert_eq!(interp(&x, &y, 1.5), Some(20.0));
        assert_eq!(interp(&x, &y, 2.0), Some(30.0));
        assert_eq!(interp(&x, &y, 2.1), None);
        let xd = [2.0, 1.0, 0.0];
        let yd = [30.0, 10.0, 0.0];
        assert_eq!(interp(&xd, &yd, 0.5), Some(5.0));
        assert_eq!(interp(&xd, &yd, 2.0), Some(30.0));
    }
}
