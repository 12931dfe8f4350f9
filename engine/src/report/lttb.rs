//! Largest-triangle-three-buckets decimation of a curve for drawing.
//!
//! Method: S. Steinarsson, "Downsampling Time Series for Visual Representation",
//! MSc thesis, University of Iceland, 2013, chapter 4.2. The first and last points
//! are kept; the points between are split into `threshold - 2` buckets of nearly
//! equal size and from each bucket the point is kept that forms the largest
//! triangle with the point kept from the previous bucket and the mean of the next
//! bucket. Peaks and spikes survive because they make large triangles.
//!
//! Only figures are decimated; data files keep every point.

/// Indices of the points kept from `(x[i], y[i])`, ascending. Returns every index
/// when there are no more than `threshold` points or `threshold < 3`.
pub fn lttb(x: &[f64], y: &[f64], threshold: usize) -> Vec<usize> {
    let n = x.len().min(y.len());
    if threshold >= n || threshold < 3 {
        return (0..n).collect();
    }
    let mut kept = Vec::with_capacity(threshold);
    kept.push(0);
    let buckets = threshold - 2;
    // Bucket b spans the inner points [edge(b), edge(b + 1)).
    let inner = (n - 2) as f64;
    let edge = |b: usize| 1 + ((b as f64 * inner) / buckets as f64).floor() as usize;
    let mut a = 0usize;
    for b in 0..buckets {
        // Each bucket holds at least one point: buckets < n - 2 inner points.
        let (start, end) = (edge(b), edge(b + 1));
        // Mean of the next bucket (the last point for the last bucket).
        let (ns, ne) = if b + 1 < buckets {
            (edge(b + 1), edge(b + 2))
        } else {
            (n - 1, n)
        };
        let count = (ne - ns).max(1) as f64;
        let mx = x[ns..ne].iter().sum::<f64>() / count;
        let my = y[ns..ne].iter().sum::<f64>() / count;
        let (ax, ay) = (x[a], y[a]);
        let mut best = start;
        let mut best_area = -1.0;
        for i in start..end {
            let area = ((ax - mx) * (y[i] - ay) - (ax - x[i]) * (my - ay)).abs();
            if area > best_area {
                best_area = area;
                best = i;
            }
        }
        kept.push(best);
        a = best;
    }
    kept.push(n - 1);
    kept
}

/// Decimates a curve that may hold NaN ("not here") into drawable runs: each run
/// of finite points is decimated on its own, with a share of `threshold`
/// proportional to its length (at least its two ends).
pub fn decimate_runs(x: &[f64], y: &[f64], threshold: usize) -> Vec<Vec<(f64, f64)>> {
    let n = x.len().min(y.len());
    let mut runs = Vec::new();
    let mut i = 0;
    while i < n {
        if !(x[i].is_finite() && y[i].is_finite()) {
            i += 1;
            continue;
        }
        let start = i;
        while i < n && x[i].is_finite() && y[i].is_finite() {
            i += 1;
        }
        runs.push(start..i);
    }
    let total: usize = runs.iter().map(|r| r.len()).sum();
    runs.into_iter()
        .map(|r| {
            let share = ((threshold as f64) * (r.len() as f64) / (total.max(1) as f64)).ceil();
            let keep = (share as usize).max(2);
            let (xs, ys) = (&x[r.clone()], &y[r.clone()]);
            lttb(xs, ys, keep)
                .into_iter()
                .map(|k| (xs[k], ys[k]))
                .collect()
        })
        .collect()
}
