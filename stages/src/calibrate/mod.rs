//! Calibration of the x axis: `calibrate.shift`, `calibrate.polynomial`,
//! `calibrate.binding_energy`.
pub mod apply_shift;
pub mod binding_energy;
pub mod polynomial;
pub mod shift;

use crate::measure::maximum::parabolic_vertex;
use crate::reference;
use crate::stage::StageError;
use crate::value::Spectrum;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// A value given as a number or by its name in the reference table
/// (`stages/data/reference_energies.csv`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(untagged)]
pub enum Target {
    Value(f64),
    Named(String),
}

impl Target {
    /// The number, its unit (empty for a plain number) and where it comes from.
    pub fn resolve(&self, kinds: &[&str]) -> Result<(f64, String, String), String> {
        match self {
            Target::Value(v) => Ok((*v, String::new(), "given value".to_string())),
            Target::Named(n) => {
                // A number written as text ("284.8" from a substituted parameter).
                if let Ok(v) = n.trim().parse::<f64>() {
                    return Ok((v, String::new(), "given value".to_string()));
                }
                let r = reference::lookup_kind(n, kinds)?;
                Ok((
                    r.value,
                    r.unit.clone(),
                    format!("{} ({})", r.name, r.source),
                ))
            }
        }
    }
    /// How the methods sentence names it.
    pub fn describe(&self, kinds: &[&str]) -> String {
        match self.resolve(kinds) {
            Ok((v, u, _)) => match self {
                Target::Named(n) if n.trim().parse::<f64>().is_err() => {
                    format!("{v} {u} ({n})").replace("  ", " ")
                }
                _ => format!("{v}"),
            },
            Err(_) => format!("{self:?}"),
        }
    }
}

/// Kinds of reference row that can be an x target.
pub const X_REFERENCE_KINDS: &[&str] = &["xps_reference", "nmr_1h", "nmr_13c"];

/// Position and height of the largest y with x in [near − window, near + window],
/// refined by a parabola through the maximum and its neighbours.
pub fn locate_max_near(s: &Spectrum, near: f64, window: f64) -> Result<(f64, f64), StageError> {
    let idx: Vec<usize> = (0..s.len())
        .filter(|&i| (s.x[i] - near).abs() <= window)
        .collect();
    let best = idx
        .iter()
        .copied()
        .max_by(|&a, &b| s.y[a].total_cmp(&s.y[b]))
        .ok_or_else(|| {
            StageError::input(format!(
                "no points within {window} of {near} (the data span {} to {})",
                s.x.first().copied().unwrap_or(f64::NAN),
                s.x.last().copied().unwrap_or(f64::NAN)
            ))
        })?;
    if idx.len() >= 3 && (best == idx[0] || Some(&best) == idx.last()) {
        return Err(StageError::input(format!(
            "the largest value within {window} of {near} lies on the edge of the window (x = {}): no peak there",
            s.x[best]
        )));
    }
    Ok(parabolic_vertex(&s.x, &s.y, best))
}
