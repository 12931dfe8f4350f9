//! Start values from the data: a small local-maximum finder with prominence, and the
//! height and half-height width of a peak at a given centre. Only used to start the
//! solver, so it aims at robustness rather than precision.

/// A local maximum of a lightly smoothed copy of the data.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Maximum {
    pub index: usize,
    pub prominence: f64,
}

/// Centred 5-point moving average (shrinking symmetrically at the ends).
fn smooth(y: &[f64]) -> Vec<f64> {
    let n = y.len();
    (0..n)
        .map(|i| {
            let h = 2.min(i).min(n - 1 - i);
            let s: f64 = y[i - h..=i + h].iter().sum();
            s / (2 * h + 1) as f64
        })
        .collect()
}

/// Local maxima by decreasing prominence (the height above the higher of the two
/// lowest points reached before meeting higher ground on each side).
pub fn maxima(y: &[f64]) -> Vec<Maximum> {
    let n = y.len();
    if n < 3 {
        return Vec::new();
    }
    let s = smooth(y);
    let mut out = Vec::new();
    let mut i = 1;
    while i + 1 < n {
        if s[i] > s[i - 1] {
            // Walk across a plateau.
            let mut j = i;
            while j + 1 < n && s[j + 1] == s[i] {
                j += 1;
            }
            if j + 1 < n && s[j + 1] < s[i] {
                let top = (i + j) / 2;
                let mut left_min = s[i];
                let mut k = i;
                while k > 0 && s[k - 1] <= s[i] {
                    k -= 1;
                    left_min = left_min.min(s[k]);
                }
                let mut right_min = s[i];
                let mut k = j;
                while k + 1 < n && s[k + 1] <= s[i] {
                    k += 1;
                    right_min = right_min.min(s[k]);
                }
                out.push(Maximum {
                    index: top,
                    prominence: s[i] - left_min.max(right_min),
                });
            }
            i = j + 1;
        } else {
            i += 1;
        }
    }
    out.sort_by(|a, b| {
        b.prominence
            .total_cmp(&a.prominence)
            .then(a.index.cmp(&b.index))
    });
    out
}

/// Index of the point nearest to `x0`.
pub fn nearest(x: &[f64], x0: f64) -> usize {
    let mut best = 0;
    for i in 0..x.len() {
        if (x[i] - x0).abs() < (x[best] - x0).abs() {
            best = i;
        }
    }
    best
}

/// Height at the point nearest `x0` and the full width at half that height, walking
/// out to the first points below half height and interpolating linearly. The width
/// is None when the data never fall to half height on either side.
pub fn height_and_width(x: &[f64], y: &[f64], x0: f64) -> (f64, Option<f64>) {
    let n = x.len();
    if n == 0 {
        return (0.0, None);
    }
    let i0 = nearest(x, x0);
    let h = y[i0];
    if h <= 0.0 {
        return (h, None);
    }
    let half = h / 2.0;
    let cross = |step: isize| -> Option<f64> {
        let mut i = i0 as isize;
        loop {
            let j = i + step;
            if j < 0 || j >= n as isize {
                return None;
            }
            let (a, b) = (i as usize, j as usize);
            if y[b] <= half {
                let f = (y[a] - half) / (y[a] - y[b]);
                return Some(x[a] + f * (x[b] - x[a]));
            }
            i = j;
        }
    };
    let width = match (cross(-1), cross(1)) {
        (Some(l), Some(r)) => Some((r - l).abs()),
        (Some(e), None) | (None, Some(e)) => Some(2.0 * (e - x[i0]).abs()),
        (None, None) => None,
    };
    (h, width.filter(|w| *w > 0.0))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_two_gaussians_by_prominence_and_their_widths() {
        // Analytic: Gaussians of FWHM 2 (σ = 2/2.3548) at x = 3 (height 1) and 7 (height 2).
        let x: Vec<f64> = (0..=1000).map(|i| i as f64 * 0.01).collect();
        let s = 2.0 / (2.0 * (2.0f64 * 2f64.ln()).sqrt());
        let y: Vec<f64> = x
            .iter()
            .map(|v| {
                (-(v - 3.0f64).powi(2) / (2.0 * s * s)).exp()
                    + 2.0 * (-(v - 7.0f64).powi(2) / (2.0 * s * s)).exp()
            })
            .collect();
        let m = maxima(&y);
        assert_eq!(m.len(), 2);
        assert!((x[m[0].index] - 7.0).abs() < 0.02 && (x[m[1].index] - 3.0).abs() < 0.05);
        let (h, w) = height_and_width(&x, &y, 7.0);
        assert!(
            (h - 2.0).abs() < 0.01 && (w.unwrap() - 2.0).abs() < 0.05,
            "{h} {w:?}"
        );
        // Descending x gives the same width.
        let xr: Vec<f64> = x.iter().rev().cloned().collect();
        let yr: Vec<f64> = y.iter().rev().cloned().collect();
        let (_, w2) = height_and_width(&xr, &yr, 7.0);
        assert!((w2.unwrap() - w.unwrap()).abs() < 1e-12);
        assert!(maxima(&[1.0, 1.0]).is_empty());
    }
}
