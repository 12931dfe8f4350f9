//! `peaks.find`: local maxima selected by height, separation, topographic prominence
//! and width, with FWHM at half prominence.
//!
//! Definitions follow the topographic prominence used by scipy.signal
//! (peak_prominences; Virtanen et al., Nat. Methods 17, 261 (2020)) [scipy2020;
//! helman2005]: a peak's prominence is its height above the higher of the two lowest
//! points reached when walking left and right until a higher sample (or the end) is
//! met. Local maxima are samples higher than both neighbours; a flat top counts once,
//! at its middle (left index + (right − left)/2, rounded down). The width is measured
//! at half the prominence below the peak, between the crossings interpolated linearly
//! on each side within the peak's bases, and converted to x units by interpolating x
//! at those fractional indices. Filters run in this order: minimum height, minimum
//! separation (the highest peak kept first, neighbours closer than the separation in
//! x dropped), minimum prominence, minimum width. Positions are refined by the vertex
//! of the parabola through the maximum and its neighbours; heights are the sample
//! values (so prominence and height refer to the same point).

use crate::measure::maximum::parabolic_vertex;
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Peak, PeakList, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Smallest prominence kept, in y units.
    #[schemars(extend("x-unit" = "y-axis unit"))]
    pub min_prominence: f64,
    /// Smallest height kept, in y units; no limit when absent.
    #[schemars(extend("x-unit" = "y-axis unit"))]
    pub min_height: Option<f64>,
    /// Smallest FWHM (at half prominence) kept, in x units.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub min_width: f64,
    /// Smallest separation between peaks, in x units: of two closer peaks the lower goes.
    #[schemars(extend("x-unit" = "x-axis unit"))]
    pub min_separation: f64,
    /// Use the background-subtracted data (y − background curve) when a background is present.
    pub subtract_background: bool,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            min_prominence: 0.0,
            min_height: None,
            min_width: 0.0,
            min_separation: 0.0,
            subtract_background: true,
        }
    }
}

pub struct FindPeaks;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to search",
)];

static REFS: &[Reference] = &[
    Reference {
        key: "scipy2020",
        citation: "P. Virtanen et al., SciPy 1.0: fundamental algorithms for scientific computing in Python, Nat. Methods 17, 261–272 (2020) (scipy.signal.find_peaks, peak_prominences, peak_widths).",
    },
    Reference {
        key: "helman2005",
        citation: "P. Helman, The Finest Peaks: Listed by Prominence (Trafford, 2005) — the topographic definition of prominence.",
    },
];

impl TypedStage for FindPeaks {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "peaks.find",
        version: 1,
        summary: "Local maxima with prominence, minimum width, height and separation; positions, heights, prominences, FWHM",
        inputs: INPUTS,
        output: Kind::Peaks,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        for (k, v) in [
            ("min_prominence", o.min_prominence),
            ("min_width", o.min_width),
            ("min_separation", o.min_separation),
        ] {
            if !(v >= 0.0 && v.is_finite()) {
                return Err(OptionError::new(k, "must be a finite number ≥ 0"));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "Peaks were located as local maxima{} with a topographic prominence of at least {} [scipy2020] [helman2005], {}a separation of at least {} and a full width at half prominence of at least {} (x units), positions refined by parabolic interpolation.",
            if o.subtract_background { " of the background-subtracted data (when a background was present)" } else { "" },
            o.min_prominence,
            match o.min_height {
                Some(h) => format!("a height of at least {h}, "),
                None => String::new(),
            },
            o.min_separation,
            o.min_width
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        crate::transform::grid::require_monotonic(s, 3)?;
        let y: Vec<f64> = match (o.subtract_background, crate::transform::grid::background(s)) {
            (true, Some(b)) => s.y.iter().zip(&b.y).map(|(a, b)| a - b).collect(),
            _ => s.y.clone(),
        };
        // A background computed over a range is NaN outside it: search where it exists.
        let first = y.iter().position(|v| v.is_finite());
        let last = y.iter().rposition(|v| v.is_finite());
        let (lo, hi) = match (first, last) {
            (Some(a), Some(b)) if b >= a + 2 => (a, b),
            _ => {
                return Err(StageError::input(
                    "fewer than 3 points where the background is defined",
                ))
            }
        };
        if y[lo..=hi].iter().any(|v| !v.is_finite()) {
            return Err(StageError::input(
                "the background has gaps inside its range",
            ));
        }
        let mut found = find_peaks(&s.x[lo..=hi], &y[lo..=hi], o);
        for p in &mut found {
            p.index += lo;
        }
        found.retain(|p| p.position.is_finite() && p.prominence.is_finite() && p.fwhm.is_finite());
        let mut a = Artifact::new(Value::Summary);
        a.record(Record::number("peak_count", found.len() as f64, None, ""));
        for (k, p) in found.iter().enumerate() {
            let i = k + 1;
            a.record(Record::number(
                format!("peak{i}.position"),
                p.position,
                None,
                &s.x_axis.unit,
            ));
            a.record(Record::number(
                format!("peak{i}.height"),
                p.height,
                None,
                &s.y_axis.unit,
            ));
            a.record(Record::number(
                format!("peak{i}.prominence"),
                p.prominence,
                None,
                &s.y_axis.unit,
            ));
            a.record(Record::number(
                format!("peak{i}.fwhm"),
                p.fwhm,
                None,
                &s.x_axis.unit,
            ));
        }
        if found.is_empty() {
            a.warn("no peaks met the criteria");
        }
        a.value = Value::Peaks(PeakList {
            spectrum: s.clone(),
            peaks: found,
        });
        Ok(a)
    }
}

/// Local maxima (flat tops at their middle), in index order.
pub fn local_maxima(y: &[f64]) -> Vec<usize> {
    let n = y.len();
    let mut out = Vec::new();
    let mut i = 1;
    while i + 1 < n {
        if y[i - 1] < y[i] {
            let mut ahead = i + 1;
            while ahead + 1 < n && y[ahead] == y[i] {
                ahead += 1;
            }
            if y[ahead] < y[i] {
                let right = ahead - 1;
                out.push((i + right) / 2);
                i = ahead;
                continue;
            }
        }
        i += 1;
    }
    out
}

/// Prominence and the bases (left, right indices) of a peak.
pub fn prominence(y: &[f64], peak: usize) -> (f64, usize, usize) {
    let h = y[peak];
    let mut left_min = h;
    let mut left = peak;
    let mut i = peak as isize;
    while i >= 0 && y[i as usize] <= h {
        if y[i as usize] < left_min {
            left_min = y[i as usize];
            left = i as usize;
        }
        i -= 1;
    }
    let mut right_min = h;
    let mut right = peak;
    let mut j = peak;
    while j < y.len() && y[j] <= h {
        if y[j] < right_min {
            right_min = y[j];
            right = j;
        }
        j += 1;
    }
    (h - left_min.max(right_min), left, right)
}

/// Fractional indices where y crosses `height` on each side of the peak, within its bases.
pub fn crossings(
    y: &[f64],
    peak: usize,
    left_base: usize,
    right_base: usize,
    height: f64,
) -> (f64, f64) {
    let mut i = peak;
    while left_base < i && height < y[i] {
        i -= 1;
    }
    let mut left = i as f64;
    if y[i] < height {
        left += (height - y[i]) / (y[i + 1] - y[i]);
    }
    let mut j = peak;
    while j < right_base && height < y[j] {
        j += 1;
    }
    let mut right = j as f64;
    if y[j] < height {
        right -= (height - y[j]) / (y[j - 1] - y[j]);
    }
    (left, right)
}

/// x at a fractional index, by linear interpolation.
fn x_at(x: &[f64], f: f64) -> f64 {
    let i = (f.floor() as usize).min(x.len() - 1);
    if i + 1 >= x.len() {
        return x[i];
    }
    x[i] + (f - i as f64) * (x[i + 1] - x[i])
}

/// The peak search on (x, y) with the options' filters; peaks in x-index order.
pub fn find_peaks(x: &[f64], y: &[f64], o: &Options) -> Vec<Peak> {
    let mut cand = local_maxima(y);
    if let Some(h) = o.min_height {
        cand.retain(|&i| y[i] >= h);
    }
    if o.min_separation > 0.0 && cand.len() > 1 {
        // Highest first; equal heights keep the earlier peak first (stable sort).
        let mut order: Vec<usize> = (0..cand.len()).collect();
        order.sort_by(|&a, &b| y[cand[b]].total_cmp(&y[cand[a]]));
        let mut keep = vec![true; cand.len()];
        for &k in &order {
            if !keep[k] {
                continue;
            }
            let mut j = k;
            while j > 0 && (x[cand[k]] - x[cand[j - 1]]).abs() < o.min_separation {
                j -= 1;
                keep[j] = false;
            }
            let mut j = k + 1;
            while j < cand.len() && (x[cand[j]] - x[cand[k]]).abs() < o.min_separation {
                keep[j] = false;
                j += 1;
            }
        }
        cand = cand
            .into_iter()
            .zip(keep)
            .filter(|(_, k)| *k)
            .map(|(c, _)| c)
            .collect();
    }
    let mut out = Vec::new();
    for i in cand {
        let (prom, lb, rb) = prominence(y, i);
        if prom < o.min_prominence {
            continue;
        }
        let (l, r) = crossings(y, i, lb, rb, y[i] - 0.5 * prom);
        let fwhm = (x_at(x, r) - x_at(x, l)).abs();
        if fwhm < o.min_width {
            continue;
        }
        let (pos, _) = parabolic_vertex(x, y, i);
        out.push(Peak {
            index: i,
            position: pos,
            height: y[i],
            prominence: prom,
            fwhm,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn prominence_and_width_by_hand() {
        // y = 0 1 3 1 2 5 2 0 : maxima at 2 (h 3) and 5 (h 5).
        let y = [0.0, 1.0, 3.0, 1.0, 2.0, 5.0, 2.0, 0.0];
        assert_eq!(local_maxima(&y), vec![2, 5]);
        // Peak 2: left min 0, right walk stops at 5 (higher) with min 1 → prominence 2.
        assert_eq!(prominence(&y, 2).0, 2.0);
        // Peak 5: both sides reach the ends, minima 0 → prominence 5.
        assert_eq!(prominence(&y, 5).0, 5.0);
        // Half prominence of peak 5 at 2.5: left crossing between 4 (2) and 5 (5) at 4 + 1/6;
        // right between 5 (5) and 6 (2) at 6 − 1/6. Width 2 − 1/3.
        let (pr, lb, rb) = prominence(&y, 5);
        let (l, r) = crossings(&y, 5, lb, rb, 5.0 - pr / 2.0);
        assert!((r - l - (2.0 - 1.0 / 3.0)).abs() < 1e-12);
        // Flat top counts once, at its middle.
        assert_eq!(local_maxima(&[0.0, 2.0, 2.0, 2.0, 2.0, 0.0]), vec![2]);
    }
}
