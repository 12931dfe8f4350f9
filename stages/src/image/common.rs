//! Shared pieces of the image families: reading ports, physical units of a pixel,
//! separable filters and the linear-time lower envelope of parabolas.
//!
//! The lower envelope is the algorithm of Felzenszwalb & Huttenlocher (2012), used here
//! both for the exact Euclidean distance transform and for grey-scale erosion by a
//! paraboloid (a rolling-ball approximation); the cascaded box filter approximating a
//! Gaussian follows Wells (1986) with the width choice of Kovesi (2010).

use crate::stage::{Inputs, Reference, StageError};
use crate::value::{Image, Labels, Value};

pub const FELZENSZWALB2012: Reference = Reference {
    key: "felzenszwalb2012",
    citation: "P. F. Felzenszwalb and D. P. Huttenlocher, \"Distance transforms of sampled functions\", Theory of Computing 8, 415–428 (2012).",
};
pub const WELLS1986: Reference = Reference {
    key: "wells1986",
    citation: "W. M. Wells, \"Efficient synthesis of Gaussian filters by cascaded uniform filters\", IEEE Transactions on Pattern Analysis and Machine Intelligence 8(2), 234–239 (1986).",
};
pub const KOVESI2010: Reference = Reference {
    key: "kovesi2010",
    citation: "P. Kovesi, \"Fast almost-Gaussian filtering\", Proceedings of Digital Image Computing: Techniques and Applications (DICTA), 121–125 (2010).",
};

/// The image on port `i`.
pub fn image_in<'a>(inputs: &Inputs<'a>, i: usize) -> Result<&'a Image, StageError> {
    match &inputs.one(i)?.value {
        Value::Image(img) => Ok(img),
        other => Err(StageError::input(format!(
            "expected an image, got a {}",
            other.kind().name()
        ))),
    }
}

/// The input file on port `i` (importers).
pub fn file_in<'a>(
    inputs: &Inputs<'a>,
    i: usize,
) -> Result<&'a crate::value::InputFile, StageError> {
    if let Value::File(f) = &inputs.one(i)?.value {
        return Ok(f);
    }
    Err(StageError::input("an importer needs a file as its input"))
}

/// The label image on port `i`.
pub fn labels_in<'a>(inputs: &Inputs<'a>, i: usize) -> Result<&'a Labels, StageError> {
    match &inputs.one(i)?.value {
        Value::Labels(l) => Ok(l),
        other => Err(StageError::input(format!(
            "expected a label image, got a {}",
            other.kind().name()
        ))),
    }
}

/// Pixel width, height and length unit; one `px` when the image has no pixel size.
pub fn pixel_dims(ps: &Option<crate::value::PixelSize>) -> (f64, f64, String) {
    match ps {
        Some(p) => (p.x, p.y, p.unit.clone()),
        None => (1.0, 1.0, "px".to_string()),
    }
}

/// A copy of `img` with new samples (same size, pixel size, axis and metadata).
pub fn with_data(img: &Image, data: Vec<f32>) -> Image {
    Image {
        width: img.width,
        height: img.height,
        data,
        pixel_size: img.pixel_size.clone(),
        z_axis: img.z_axis.clone(),
        source_bits: img.source_bits,
        metadata: img.metadata.clone(),
    }
}

/// Checks that an image is not empty and holds only finite samples.
pub fn check_image(img: &Image) -> Result<(), StageError> {
    if img.width == 0 || img.height == 0 || img.data.len() != img.width * img.height {
        return Err(StageError::input(format!(
            "image is empty or inconsistent ({}×{}, {} samples)",
            img.width,
            img.height,
            img.data.len()
        )));
    }
    if let Some(i) = img.data.iter().position(|v| !v.is_finite()) {
        return Err(StageError::input(format!(
            "sample at column {}, row {} is not a finite number",
            i % img.width,
            i / img.width
        )));
    }
    Ok(())
}

/// The bytes as UTF-8 text without a byte-order mark; otherwise a data error at the
/// 1-based line of the first invalid byte, with `message`.
pub fn utf8_text<'a>(name: &str, bytes: &'a [u8], message: &str) -> Result<&'a str, StageError> {
    match std::str::from_utf8(bytes) {
        Ok(t) => Ok(t.strip_prefix('\u{feff}').unwrap_or(t)),
        Err(e) => {
            let line = bytes[..e.valid_up_to()].split(|&b| b == b'\n').count();
            Err(StageError::data(name, Some(line), message))
        }
    }
}

/// Symmetric (half-sample) reflection of an index into 0..n.
#[inline]
pub fn reflect(i: isize, n: usize) -> usize {
    let n = n as isize;
    let mut i = i;
    // Reflection is periodic with period 2n; fold into [0, 2n) first.
    i = i.rem_euclid(2 * n);
    if i >= n {
        i = 2 * n - 1 - i;
    }
    i as usize
}

/// Converts a length option to pixels along x: `value` in pixels when `unit` is `px`,
/// otherwise in the image's unit (which must match).
pub fn to_pixels(
    value: f64,
    unit: &str,
    img_ps: &Option<crate::value::PixelSize>,
) -> Result<f64, StageError> {
    if unit == "px" {
        return Ok(value);
    }
    match img_ps {
        Some(p) if p.unit == unit => Ok(value / p.x),
        Some(p) => Err(StageError::input(format!(
            "a length in {unit} was given but the image's pixel size is in {}",
            p.unit
        ))),
        None => Err(StageError::input(format!(
            "a length in {unit} was given but the image has no pixel size; give it in px"
        ))),
    }
}

/// Transposes a w×h row-major buffer into h×w, in cache-friendly blocks.
pub fn transpose(src: &[f64], w: usize, h: usize, dst: &mut [f64]) {
    const B: usize = 32;
    for r0 in (0..h).step_by(B) {
        for c0 in (0..w).step_by(B) {
            for r in r0..(r0 + B).min(h) {
                for c in c0..(c0 + B).min(w) {
                    dst[c * h + r] = src[r * w + c];
                }
            }
        }
    }
}

/// Applies a 1-D operation to every row, then every column, of a w×h buffer. The flag
/// tells the operation whether it runs along x (rows) or y (columns).
pub fn separable(
    data: &mut [f64],
    w: usize,
    h: usize,
    mut op: impl FnMut(&[f64], &mut [f64], bool),
) {
    let mut out = vec![0.0; w.max(h)];
    for r in 0..h {
        op(&data[r * w..(r + 1) * w], &mut out[..w], true);
        data[r * w..(r + 1) * w].copy_from_slice(&out[..w]);
    }
    // Columns as rows of the transposed buffer.
    let mut t = vec![0.0; w * h];
    transpose(data, w, h, &mut t);
    for c in 0..w {
        op(&t[c * h..(c + 1) * h], &mut out[..h], false);
        t[c * h..(c + 1) * h].copy_from_slice(&out[..h]);
    }
    transpose(&t, h, w, data);
}

/// Normalised Gaussian kernel of standard deviation `sigma` (samples), truncated at 4σ.
pub fn gaussian_kernel(sigma: f64) -> Vec<f64> {
    let r = (4.0 * sigma).ceil().max(1.0) as usize;
    let mut k: Vec<f64> = (0..=2 * r)
        .map(|i| {
            let x = i as f64 - r as f64;
            (-0.5 * x * x / (sigma * sigma)).exp()
        })
        .collect();
    let s: f64 = k.iter().sum();
    k.iter_mut().for_each(|v| *v /= s);
    k
}

/// Convolution of one line with a symmetric odd kernel, reflecting at the ends.
pub fn convolve_line(line: &[f64], kernel: &[f64], out: &mut [f64]) {
    let n = line.len();
    let r = (kernel.len() / 2) as isize;
    for (i, o) in out.iter_mut().enumerate().take(n) {
        let mut acc = 0.0;
        let i = i as isize;
        if i >= r && i + r < n as isize {
            let start = (i - r) as usize;
            for (k, kv) in kernel.iter().enumerate() {
                acc += kv * line[start + k];
            }
        } else {
            for (k, kv) in kernel.iter().enumerate() {
                acc += kv * line[reflect(i + k as isize - r, n)];
            }
        }
        *o = acc;
    }
}

/// Exact separable Gaussian filter (σ in pixels along x and y), reflecting borders.
pub fn gaussian_exact(data: &mut [f64], w: usize, h: usize, sx: f64, sy: f64) {
    let kx = gaussian_kernel(sx);
    let ky = gaussian_kernel(sy);
    separable(data, w, h, |l, o, along_x| {
        convolve_line(l, if along_x { &kx } else { &ky }, o)
    });
}

/// Widths of `passes` box filters whose cascade has variance σ² (Kovesi 2010):
/// m passes of width wl and the rest of width wl + 2.
pub fn box_widths(sigma: f64, passes: usize) -> Vec<usize> {
    let n = passes as f64;
    let w_ideal = (12.0 * sigma * sigma / n + 1.0).sqrt();
    let mut wl = w_ideal.floor() as usize;
    if wl.is_multiple_of(2) {
        wl = wl.saturating_sub(1);
    }
    let wl = wl.max(1);
    let wlf = wl as f64;
    let m = ((12.0 * sigma * sigma - n * wlf * wlf - 4.0 * n * wlf - 3.0 * n) / (-4.0 * wlf - 4.0))
        .round()
        .clamp(0.0, n) as usize;
    (0..passes)
        .map(|i| if i < m { wl } else { wl + 2 })
        .collect()
}

/// Running-sum box filter of odd width `width` along one line, reflecting at the ends.
pub fn box_line(line: &[f64], width: usize, out: &mut [f64]) {
    let n = line.len();
    let r = width / 2;
    let ri = r as isize;
    let mut acc = 0.0;
    for k in -ri..=ri {
        acc += line[reflect(k, n)];
    }
    let inv = 1.0 / width as f64;
    for i in 0..n {
        out[i] = acc * inv;
        // Index arithmetic only near the ends (reflection costs a division).
        let add = i + r + 1;
        let a = if add < n {
            line[add]
        } else {
            line[reflect(add as isize, n)]
        };
        let s = if i >= r {
            line[i - r]
        } else {
            line[reflect(i as isize - ri, n)]
        };
        acc += a - s;
    }
}

/// Gaussian approximated by three cascaded box filters per axis (Wells 1986, Kovesi 2010):
/// linear in the pixel count whatever σ. Samples are stored as f32 and summed in f64;
/// rows are filtered in a line buffer, columns by running sums over whole rows (no
/// transpose), so memory is read in order.
pub fn gaussian_boxes(data: &mut [f32], w: usize, h: usize, sx: f64, sy: f64) {
    let bx = box_widths(sx, 3);
    let by = box_widths(sy, 3);
    let mut line = vec![0.0; w];
    let mut out = vec![0.0; w];
    for row in data.chunks_mut(w) {
        for (l, &v) in line.iter_mut().zip(row.iter()) {
            *l = v as f64;
        }
        for &bw in &bx {
            box_line(&line, bw, &mut out);
            std::mem::swap(&mut line, &mut out);
        }
        for (v, &l) in row.iter_mut().zip(line.iter()) {
            *v = l as f32;
        }
    }
    let mut next = vec![0f32; w * h];
    let mut acc = vec![0f64; w];
    for &bw in &by {
        let r = (bw / 2) as isize;
        let inv = 1.0 / bw as f64;
        acc.iter_mut().for_each(|a| *a = 0.0);
        let rowref = |i: isize| -> std::ops::Range<usize> {
            let k = if i >= 0 && (i as usize) < h {
                i as usize
            } else {
                reflect(i, h)
            };
            k * w..(k + 1) * w
        };
        for k in -r..=r {
            for (a, &v) in acc.iter_mut().zip(&data[rowref(k)]) {
                *a += v as f64;
            }
        }
        for i in 0..h {
            let o = &mut next[i * w..(i + 1) * w];
            for (ov, &a) in o.iter_mut().zip(acc.iter()) {
                *ov = (a * inv) as f32;
            }
            let (add, sub) = (rowref(i as isize + r + 1), rowref(i as isize - r));
            for ((a, &p), &m) in acc.iter_mut().zip(&data[add]).zip(&data[sub]) {
                *a += p as f64 - m as f64;
            }
        }
        data.copy_from_slice(&next);
    }
}

/// Lower envelope of parabolas (Felzenszwalb & Huttenlocher 2012):
/// `out[p] = min_q f[q] + weight·(p − q)²`, in O(n). Infinite `f[q]` are skipped; when
/// every `f` is infinite the output is infinite.
pub fn lower_envelope(
    f: &[f64],
    weight: f64,
    out: &mut [f64],
    v: &mut Vec<usize>,
    z: &mut Vec<f64>,
) {
    let n = f.len();
    v.clear();
    z.clear();
    for q in 0..n {
        if !f[q].is_finite() {
            continue;
        }
        let fq = f[q] + weight * (q * q) as f64;
        loop {
            match v.last() {
                None => {
                    v.push(q);
                    z.push(f64::NEG_INFINITY);
                    break;
                }
                Some(&r) => {
                    let fr = f[r] + weight * (r * r) as f64;
                    let s = (fq - fr) / (2.0 * weight * (q - r) as f64);
                    // z holds the left boundary of each parabola's interval.
                    let zl = *z.last().unwrap_or(&f64::NEG_INFINITY);
                    if s <= zl {
                        v.pop();
                        z.pop();
                    } else {
                        v.push(q);
                        z.push(s);
                        break;
                    }
                }
            }
        }
    }
    if v.is_empty() {
        out.iter_mut().for_each(|o| *o = f64::INFINITY);
        return;
    }
    let mut k = 0;
    for (p, o) in out.iter_mut().enumerate().take(n) {
        let pf = p as f64;
        while k + 1 < v.len() && z[k + 1] < pf {
            k += 1;
        }
        let d = pf - v[k] as f64;
        *o = f[v[k]] + weight * d * d;
    }
}

/// Exact squared Euclidean distance (in pixel-size units²) of every pixel to the nearest
/// pixel where `is_source` holds; infinite when there is none.
pub fn squared_distance(
    w: usize,
    h: usize,
    is_source: impl Fn(usize) -> bool,
    px: f64,
    py: f64,
) -> Vec<f64> {
    let mut d: Vec<f64> = (0..w * h)
        .map(|i| if is_source(i) { 0.0 } else { f64::INFINITY })
        .collect();
    let (mut v, mut z) = (Vec::new(), Vec::new());
    // Rows (weight px²), then columns (weight py²); exact in either order.
    separable(&mut d, w, h, |l, o, along_x| {
        lower_envelope(
            l,
            if along_x { px * px } else { py * py },
            o,
            &mut v,
            &mut z,
        )
    });
    d
}

/// Grey-scale erosion by the paraboloid z = −(x² + y²)/(2R) (R in pixels, heights in
/// sample units): `min_q f(q) + |p − q|²/(2R)`, separable and linear in the pixel count.
pub fn erode_paraboloid(data: &mut [f64], w: usize, h: usize, radius: f64) {
    let weight = 1.0 / (2.0 * radius);
    let (mut v, mut z) = (Vec::new(), Vec::new());
    separable(data, w, h, |l, o, _| {
        lower_envelope(l, weight, o, &mut v, &mut z)
    });
}

/// Grey-scale dilation by the same paraboloid (the dual of [`erode_paraboloid`]).
pub fn dilate_paraboloid(data: &mut [f64], w: usize, h: usize, radius: f64) {
    data.iter_mut().for_each(|v| *v = -*v);
    erode_paraboloid(data, w, h, radius);
    data.iter_mut().for_each(|v| *v = -*v);
}

/// Percentile by linear interpolation between order statistics of sorted data
/// (Hyndman & Fan 1996, definition 7: position (n − 1)·p).
pub fn percentile_sorted(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    if n == 0 {
        return f64::NAN;
    }
    let pos = (n - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = pos.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    let t = pos - lo as f64;
    sorted[lo] + t * (sorted[hi] - sorted[lo])
}

pub const HYNDMAN1996: Reference = Reference {
    key: "hyndman1996",
    citation: "R. J. Hyndman and Y. Fan, \"Sample quantiles in statistical packages\", The American Statistician 50(4), 361–365 (1996).",
};

/// Minimum and maximum of the samples.
pub fn min_max(data: &[f32]) -> (f32, f32) {
    data.iter()
        .fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), &v| {
            (a.min(v), b.max(v))
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    #[allow(clippy::needless_range_loop)]
    fn lower_envelope_matches_brute_force() {
        let f = [3.0, f64::INFINITY, 0.5, 7.0, 2.0, f64::INFINITY, 9.0, 1.0];
        let mut out = vec![0.0; f.len()];
        let (mut v, mut z) = (Vec::new(), Vec::new());
        for w in [0.1, 1.0, 3.0] {
            lower_envelope(&f, w, &mut out, &mut v, &mut z);
            for p in 0..f.len() {
                let brute = (0..f.len())
                    .map(|q| f[q] + w * ((p as f64) - q as f64).powi(2))
                    .fold(f64::INFINITY, f64::min);
                assert!((out[p] - brute).abs() < 1e-12, "p={p} w={w}");
            }
        }
    }

    #[test]
    #[allow(clippy::needless_range_loop)]
    fn distance_transform_matches_brute_force() {
        let (w, h) = (13, 9);
        let src = |i: usize| i % 7 == 3 || i == 100;
        let d = squared_distance(w, h, src, 1.0, 1.5);
        for i in 0..w * h {
            let (c, r) = ((i % w) as f64, (i / w) as f64);
            let brute = (0..w * h)
                .filter(|&j| src(j))
                .map(|j| ((j % w) as f64 - c).powi(2) + (((j / w) as f64 - r) * 1.5).powi(2))
                .fold(f64::INFINITY, f64::min);
            assert!((d[i] - brute).abs() < 1e-9);
        }
    }

    #[test]
    fn box_cascade_has_the_asked_variance() {
        // Variance of n boxes of odd width w is n(w² − 1)/12 (uniform distribution).
        for sigma in [2.0, 5.5, 20.0] {
            let ws = box_widths(sigma, 3);
            let var: f64 = ws.iter().map(|&w| ((w * w) as f64 - 1.0) / 12.0).sum();
            assert!((var.sqrt() - sigma).abs() / sigma < 0.1, "{sigma}: {ws:?}");
        }
    }

    #[test]
    fn percentile_definition_7() {
        // numpy.percentile's default ("linear") is definition 7: [1,2,3,4] at 0.25 → 1.75.
        assert!((percentile_sorted(&[1.0, 2.0, 3.0, 4.0], 0.25) - 1.75).abs() < 1e-12);
        assert_eq!(percentile_sorted(&[5.0], 0.9), 5.0);
    }

    #[test]
    #[allow(clippy::needless_range_loop)]
    fn paraboloid_erosion_matches_brute_force_in_2d() {
        // Separability: min over the plane of f(q) + |p − q|²/(2R) equals rows then columns.
        let (w, h, radius) = (15usize, 11usize, 3.0);
        let f: Vec<f64> = (0..w * h)
            .map(|i| ((i * 37 + 11) % 23) as f64 * 0.7)
            .collect();
        let mut e = f.clone();
        erode_paraboloid(&mut e, w, h, radius);
        for p in 0..w * h {
            let (pc, pr) = ((p % w) as f64, (p / w) as f64);
            let brute = (0..w * h)
                .map(|q| {
                    let d2 = ((q % w) as f64 - pc).powi(2) + ((q / w) as f64 - pr).powi(2);
                    f[q] + d2 / (2.0 * radius)
                })
                .fold(f64::INFINITY, f64::min);
            assert!((e[p] - brute).abs() < 1e-9);
        }
    }

    #[test]
    fn gaussian_kernel_has_unit_sum_and_variance_sigma_squared() {
        // Analytic: a normalised Gaussian of σ has ∑k = 1 and ∑k·x² = σ² (truncation at 4σ
        // leaves a relative error below 1e-3).
        let sigma = 2.5;
        let k = gaussian_kernel(sigma);
        let r = (k.len() / 2) as f64;
        let var: f64 = k
            .iter()
            .enumerate()
            .map(|(i, v)| v * (i as f64 - r).powi(2))
            .sum();
        assert!((k.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        assert!((var - sigma * sigma).abs() / (sigma * sigma) < 1e-3);
    }
}
