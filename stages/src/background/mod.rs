//! Backgrounds: `background.polynomial`, `background.linear`, `background.asls`,
//! `background.shirley`, `background.tougaard`.
//!
//! **Convention:** a background stage never changes y; it adds (or replaces) a curve
//! with role `Background`, NaN outside the range it was computed over. Integration and
//! fitting use that curve when present.
pub mod asls;
pub mod linear;
pub mod polynomial;
pub mod shirley;
pub mod tougaard;

use crate::stage::StageError;
use crate::transform::grid::{indices_in, require_monotonic, set_background, span};
use crate::value::{Artifact, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Which end of the spectrum the inelastic step rises towards (the loss side).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum LossSide {
    /// High x for a binding-energy axis, low x for a kinetic-energy axis; otherwise
    /// the end with the higher mean intensity.
    Auto,
    /// The background rises towards high x (binding energy).
    HighX,
    /// The background rises towards low x (kinetic energy).
    LowX,
}

impl LossSide {
    pub fn describe(self) -> &'static str {
        match self {
            LossSide::Auto => {
                "the loss side taken from the axis (high binding energy, low kinetic energy)"
            }
            LossSide::HighX => "the background rising towards high x",
            LossSide::LowX => "the background rising towards low x",
        }
    }
}

/// The points a background is computed over, ordered from the no-loss end to the
/// loss end, plus the x and y in that order.
pub struct Work {
    pub idx: Vec<usize>,
    pub x: Vec<f64>,
    pub y: Vec<f64>,
}

/// Selects the points within `range` and orders them from the no-loss end.
pub fn loss_ordered(
    s: &Spectrum,
    range: Option<[f64; 2]>,
    side: LossSide,
    min: usize,
) -> Result<Work, StageError> {
    require_monotonic(s, 2)?;
    let (lo, hi) = span(&s.x, range);
    let mut idx = indices_in(&s.x, lo, hi);
    if idx.len() < min {
        return Err(StageError::input(format!(
            "{} points between {lo} and {hi}; at least {min} are needed",
            idx.len()
        )));
    }
    // Ascending x first.
    if s.x[idx[0]] > s.x[idx[idx.len() - 1]] {
        idx.reverse();
    }
    let q = s.x_axis.quantity.to_ascii_lowercase();
    let high = match side {
        LossSide::HighX => true,
        LossSide::LowX => false,
        LossSide::Auto if q.contains("binding") => true,
        LossSide::Auto if q.contains("kinetic") => false,
        LossSide::Auto => {
            let k = (idx.len() / 10).max(1);
            let first: f64 = idx[..k].iter().map(|&i| s.y[i]).sum::<f64>() / k as f64;
            let last: f64 = idx[idx.len() - k..].iter().map(|&i| s.y[i]).sum::<f64>() / k as f64;
            last >= first
        }
    };
    if !high {
        idx.reverse();
    }
    let x = idx.iter().map(|&i| s.x[i]).collect();
    let y = idx.iter().map(|&i| s.y[i]).collect();
    Ok(Work { idx, x, y })
}

/// The selected points in array order (for stages with no loss side).
pub fn in_range(s: &Spectrum, range: Option<[f64; 2]>, min: usize) -> Result<Work, StageError> {
    require_monotonic(s, 2)?;
    let (lo, hi) = span(&s.x, range);
    let idx = indices_in(&s.x, lo, hi);
    if idx.len() < min {
        return Err(StageError::input(format!(
            "{} points between {lo} and {hi}; at least {min} are needed",
            idx.len()
        )));
    }
    let x = idx.iter().map(|&i| s.x[i]).collect();
    let y = idx.iter().map(|&i| s.y[i]).collect();
    Ok(Work { idx, x, y })
}

/// A copy of `s` with the background `b` (values for `w.idx`, NaN elsewhere).
pub fn with_background(
    s: &Spectrum,
    w: &Work,
    name: &str,
    b: &[f64],
) -> Result<Artifact, StageError> {
    if let Some(i) = b.iter().position(|v| !v.is_finite()) {
        return Err(StageError::numeric(format!(
            "the background is not finite at x = {}",
            w.x[i]
        )));
    }
    let mut full = vec![f64::NAN; s.len()];
    for (&i, &v) in w.idx.iter().zip(b) {
        full[i] = v;
    }
    let mut out = s.clone();
    set_background(&mut out, name, full);
    Ok(Artifact::new(Value::Spectrum(out)))
}

/// Mean of the first `k` values (all when fewer).
pub fn mean_head(v: &[f64], k: usize) -> f64 {
    let k = k.clamp(1, v.len().max(1));
    v.iter().take(k).sum::<f64>() / k as f64
}

/// Mean of the last `k` values (all when fewer).
pub fn mean_tail(v: &[f64], k: usize) -> f64 {
    let k = k.clamp(1, v.len().max(1));
    v.iter().rev().take(k).sum::<f64>() / k as f64
}

/// Describes a range option for methods sentences.
pub fn range_text(r: Option<[f64; 2]>) -> String {
    match r {
        Some([a, b]) => format!("between {a} and {b}"),
        None => "over the whole spectrum".to_string(),
    }
}
