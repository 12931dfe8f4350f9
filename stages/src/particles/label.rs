//! `particles.label`: connected components of a mask, optionally split by a
//! distance-transform watershed, with particles cut by the border and small ones removed.
//!
//! Labelling: two raster passes with a union-find forest (path halving, union by smaller
//! root), 4- or 8-connectivity, linear in the pixel count; labels are then renumbered in
//! raster order of each particle's first pixel, so the result is deterministic.
//!
//! Splitting touching particles: the exact Euclidean distance of each object pixel to the
//! background (Felzenszwalb & Huttenlocher 2012), smoothed by a Gaussian of σ `smooth`;
//! markers are the regional maxima whose dynamic (height above the saddle that joins them
//! to a higher maximum, Grimaud 1992) is at least `min_height`, found by merging components
//! in decreasing order of distance; then a priority-flood watershed from the markers over the
//! object pixels (Beucher & Lantuéjoul 1979; Meyer 1994), ties broken first-in first-out.

use crate::image::common::{self, labels_in, FELZENSZWALB2012};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Labels, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::cmp::Reverse;
use std::collections::BinaryHeap;

pub const BEUCHER1979: Reference = Reference {
    key: "beucher1979",
    citation: "S. Beucher and C. Lantuéjoul, \"Use of watersheds in contour detection\", International Workshop on Image Processing: Real-time Edge and Motion Detection/Estimation, Rennes (1979).",
};
pub const MEYER1994: Reference = Reference {
    key: "meyer1994",
    citation: "F. Meyer, \"Topographic distance and watershed lines\", Signal Processing 38(1), 113–125 (1994).",
};
pub const GRIMAUD1992: Reference = Reference {
    key: "grimaud1992",
    citation: "M. Grimaud, \"A new measure of contrast: the dynamics\", Proceedings of SPIE 1769, Image Algebra and Morphological Image Processing III, 292–305 (1992).",
};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct LabelOptions {
    /// Pixel connectivity: 4 (edges) or 8 (edges and corners; default).
    pub connectivity: u8,
    /// Split touching particles by a distance-transform watershed (default false).
    pub split: bool,
    /// σ of the Gaussian smoothing the distance map before markers are found (default 1 px).
    #[schemars(extend("x-unit" = "px"))]
    pub smooth: f64,
    /// Smallest dynamic of a distance maximum that makes a separate particle (default 1 px).
    #[schemars(extend("x-unit" = "px"))]
    pub min_height: f64,
    /// Remove particles touching the image border (default true).
    pub exclude_border: bool,
    /// Remove particles smaller than this area, in `area_unit` (default 5).
    pub min_area: f64,
    /// Unit of `min_area`: `px` (pixel count) or the square of the image's length unit (e.g. `nm^2`).
    pub area_unit: String,
}

impl Default for LabelOptions {
    fn default() -> Self {
        LabelOptions {
            connectivity: 8,
            split: false,
            smooth: 1.0,
            min_height: 1.0,
            exclude_border: true,
            min_area: 5.0,
            area_unit: "px".into(),
        }
    }
}

pub struct Label;

static MASK_IN: &[Port] = &[Port::each(
    "mask",
    Kind::Labels,
    "an object mask (non-zero = object)",
)];
static REFS: &[Reference] = &[FELZENSZWALB2012, GRIMAUD1992, BEUCHER1979, MEYER1994];

impl TypedStage for Label {
    type Options = LabelOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "particles.label",
        version: 1,
        summary: "Connected-component labelling, watershed splitting, border and size exclusion",
        inputs: MASK_IN,
        output: Kind::Labels,
        references: REFS,
    };
    fn check(&self, o: &LabelOptions) -> Result<(), OptionError> {
        if o.connectivity != 4 && o.connectivity != 8 {
            return Err(OptionError::new("connectivity", "connectivity is 4 or 8"));
        }
        if !(o.smooth >= 0.0 && o.smooth.is_finite()) {
            return Err(OptionError::new("smooth", "smooth must be ≥ 0"));
        }
        if !(o.min_height >= 0.0 && o.min_height.is_finite()) {
            return Err(OptionError::new("min_height", "min_height must be ≥ 0"));
        }
        if !(o.min_area >= 0.0 && o.min_area.is_finite()) {
            return Err(OptionError::new("min_area", "min_area must be ≥ 0"));
        }
        Ok(())
    }
    fn methods(&self, o: &LabelOptions) -> String {
        let split = if o.split {
            format!(
                ", touching particles were split by a watershed [beucher1979] [meyer1994] of the exact Euclidean distance transform [felzenszwalb2012] smoothed with σ = {} px from markers at distance maxima of dynamic [grimaud1992] at least {} px",
                o.smooth, o.min_height
            )
        } else {
            " (touching particles were not split)".to_string()
        };
        format!(
            "Particles were labelled as {}-connected components{split}; particles touching the image border were {}, and particles smaller than {} {} were excluded.",
            o.connectivity,
            if o.exclude_border { "excluded" } else { "kept" },
            o.min_area,
            if o.area_unit == "px" { "pixels".to_string() } else { o.area_unit.clone() }
        )
    }
    fn run(&self, inputs: &Inputs, o: &LabelOptions) -> Result<Artifact, StageError> {
        let m = labels_in(inputs, 0)?;
        if m.width == 0 || m.height == 0 || m.labels.len() != m.width * m.height {
            return Err(StageError::input("the mask is empty or inconsistent"));
        }
        let min_px = min_area_pixels(o, m)?;
        let mask: Vec<bool> = m.labels.iter().map(|&v| v != 0).collect();
        let (px, py, _) = common::pixel_dims(&m.pixel_size);
        let raw = if o.split {
            watershed_split(
                &mask,
                m.width,
                m.height,
                o.connectivity,
                o.smooth,
                o.min_height,
                px / py,
            )
        } else {
            label_components(&mask, m.width, m.height, o.connectivity).0
        };
        let (labels, count, border, small) =
            exclude(&raw, m.width, m.height, o.exclude_border, min_px);
        let mut metadata = m.metadata.clone();
        metadata.insert("connectivity".into(), o.connectivity.to_string());
        metadata.insert(
            "split".into(),
            if o.split { "watershed" } else { "none" }.into(),
        );
        metadata.insert("excluded_border".into(), border.to_string());
        metadata.insert("excluded_small".into(), small.to_string());
        metadata.insert("min_area_px".into(), min_px.to_string());
        let mut a = Artifact::new(Value::Labels(Labels {
            width: m.width,
            height: m.height,
            labels,
            count,
            pixel_size: m.pixel_size.clone(),
            metadata,
        }));
        a.record(Record::number("count", count as f64, None, ""));
        a.record(Record::number("excluded_border", border as f64, None, ""));
        a.record(Record::number("excluded_small", small as f64, None, ""));
        if count == 0 {
            a.warn("no particles remain after labelling and exclusion");
        }
        Ok(a)
    }
}

fn min_area_pixels(o: &LabelOptions, m: &Labels) -> Result<usize, StageError> {
    if o.area_unit == "px" {
        return Ok(o.min_area.ceil() as usize);
    }
    match &m.pixel_size {
        Some(p)
            if o.area_unit == format!("{}^2", p.unit) || o.area_unit == format!("{}²", p.unit) =>
        {
            Ok((o.min_area / (p.x * p.y)).ceil() as usize)
        }
        Some(p) => Err(StageError::input(format!(
            "min_area is in {} but the pixel size is in {} (use {}^2 or px)",
            o.area_unit, p.unit, p.unit
        ))),
        None => Err(StageError::input(
            "min_area has a physical unit but the image has no pixel size; use px",
        )),
    }
}

fn find(parent: &mut [u32], mut x: u32) -> u32 {
    while parent[x as usize] != x {
        let p = parent[parent[x as usize] as usize];
        parent[x as usize] = p;
        x = p;
    }
    x
}

fn union(parent: &mut [u32], a: u32, b: u32) -> u32 {
    let (ra, rb) = (find(parent, a), find(parent, b));
    let (lo, hi) = if ra < rb { (ra, rb) } else { (rb, ra) };
    parent[hi as usize] = lo;
    lo
}

/// Connected components of `mask`: labels 1..=count in raster order, and the count.
pub fn label_components(mask: &[bool], w: usize, h: usize, connectivity: u8) -> (Vec<u32>, u32) {
    let mut lab = vec![0u32; w * h];
    let mut parent: Vec<u32> = vec![0];
    // Provisional labels in the first pass; a pixel takes its first labelled neighbour's
    // label and joins the sets of the others.
    let join = |cur: u32, q: u32, parent: &mut Vec<u32>| -> u32 {
        if q == 0 || q == cur {
            cur
        } else if cur == 0 {
            q
        } else {
            union(parent, cur, q)
        }
    };
    for r in 0..h {
        for c in 0..w {
            let i = r * w + c;
            if !mask[i] {
                continue;
            }
            let mut cur = 0;
            if c > 0 {
                cur = join(cur, lab[i - 1], &mut parent);
            }
            if r > 0 {
                cur = join(cur, lab[i - w], &mut parent);
                if connectivity == 8 {
                    if c > 0 {
                        cur = join(cur, lab[i - w - 1], &mut parent);
                    }
                    if c + 1 < w {
                        cur = join(cur, lab[i - w + 1], &mut parent);
                    }
                }
            }
            if cur == 0 {
                cur = parent.len() as u32;
                parent.push(cur);
            }
            lab[i] = cur;
        }
    }
    // A set's root is its smallest provisional label, the one created first in raster
    // order, so numbering roots in increasing order numbers particles by first pixel.
    let mut number = vec![0u32; parent.len()];
    let mut count = 0;
    for id in 1..parent.len() as u32 {
        let root = find(&mut parent, id);
        if root == id {
            count += 1;
            number[id as usize] = count;
        } else {
            number[id as usize] = number[root as usize];
        }
    }
    for v in lab.iter_mut() {
        *v = number[*v as usize];
    }
    (lab, count)
}

/// Removes particles touching the border (when asked) and smaller than `min_px` pixels;
/// renumbers the rest in raster order. Returns labels, count, removed at border, removed small.
pub fn exclude(
    lab: &[u32],
    w: usize,
    h: usize,
    border: bool,
    min_px: usize,
) -> (Vec<u32>, u32, usize, usize) {
    let n = lab.iter().copied().max().unwrap_or(0) as usize;
    let mut area = vec![0usize; n + 1];
    let mut touches = vec![false; n + 1];
    for r in 0..h {
        for c in 0..w {
            let l = lab[r * w + c] as usize;
            area[l] += 1;
            if r == 0 || c == 0 || r + 1 == h || c + 1 == w {
                touches[l] = true;
            }
        }
    }
    let (mut nb, mut ns) = (0, 0);
    let mut keep = vec![false; n + 1];
    for l in 1..=n {
        if area[l] == 0 {
            continue;
        }
        if border && touches[l] {
            nb += 1;
        } else if area[l] < min_px {
            ns += 1;
        } else {
            keep[l] = true;
        }
    }
    let mut number = vec![0u32; n + 1];
    let mut count = 0;
    let out = lab
        .iter()
        .map(|&l| {
            let l = l as usize;
            if l == 0 || !keep[l] {
                return 0;
            }
            if number[l] == 0 {
                count += 1;
                number[l] = count;
            }
            number[l]
        })
        .collect();
    (out, count, nb, ns)
}

fn neighbours(i: usize, w: usize, h: usize, connectivity: u8, out: &mut Vec<usize>) {
    out.clear();
    let (c, r) = ((i % w) as isize, (i / w) as isize);
    for (dc, dr) in [
        (-1, 0),
        (1, 0),
        (0, -1),
        (0, 1),
        (-1, -1),
        (1, -1),
        (-1, 1),
        (1, 1),
    ]
    .into_iter()
    .take(if connectivity == 8 { 8 } else { 4 })
    {
        let (cc, rr) = (c + dc, r + dr);
        if cc >= 0 && rr >= 0 && (cc as usize) < w && (rr as usize) < h {
            out.push(rr as usize * w + cc as usize);
        }
    }
}

/// Order-preserving integer key of a finite f64 (for heaps and sorts).
fn key(v: f64) -> u64 {
    let b = v.to_bits();
    if b >> 63 == 1 {
        !b
    } else {
        b | (1 << 63)
    }
}

/// Watershed split of the mask's particles (labels 1.. in raster order of marker flooding,
/// renumbered by [`exclude`] afterwards). `aspect` = pixel width / height.
pub fn watershed_split(
    mask: &[bool],
    w: usize,
    h: usize,
    connectivity: u8,
    smooth: f64,
    min_height: f64,
    aspect: f64,
) -> Vec<u32> {
    let d2 = common::squared_distance(w, h, |i| !mask[i], aspect, 1.0);
    let mut dist: Vec<f64> = d2
        .iter()
        .map(|v| {
            if v.is_finite() {
                v.sqrt()
            } else {
                (w + h) as f64
            }
        })
        .collect();
    if smooth > 0.0 {
        common::gaussian_exact(&mut dist, w, h, smooth, smooth);
    }
    let fg: Vec<usize> = (0..w * h).filter(|&i| mask[i]).collect();
    // Markers: maxima with dynamic ≥ min_height, by merging in decreasing order.
    let mut order = fg.clone();
    order.sort_by_key(|&i| (Reverse(key(dist[i])), i));
    let mut parent: Vec<u32> = (0..(w * h) as u32).collect();
    let mut done = vec![false; w * h];
    let mut peak = vec![0usize; w * h];
    let mut markers = Vec::new();
    let mut nb = Vec::new();
    for &p in &order {
        done[p] = true;
        peak[p] = p;
        neighbours(p, w, h, connectivity, &mut nb);
        for &q in &nb {
            if !done[q] {
                continue;
            }
            let (rp, rq) = (
                find(&mut parent, p as u32) as usize,
                find(&mut parent, q as u32) as usize,
            );
            if rp == rq {
                continue;
            }
            let (pp, pq) = (peak[rp], peak[rq]);
            // The lower peak (later in the order on ties) dies here.
            let p_wins = (Reverse(key(dist[pp])), pp) < (Reverse(key(dist[pq])), pq);
            let (winner, loser) = if p_wins { (rp, rq) } else { (rq, rp) };
            let dying_peak = peak[loser];
            if dist[dying_peak] - dist[p] >= min_height {
                markers.push(dying_peak);
            }
            parent[loser] = winner as u32;
        }
    }
    // Each surviving root keeps its peak as a marker.
    for &p in &fg {
        if find(&mut parent, p as u32) as usize == p {
            markers.push(peak[p]);
        }
    }
    markers.sort_by_key(|&i| (Reverse(key(dist[i])), i));
    // Priority flood from the markers, highest distance first, FIFO on ties.
    let mut lab = vec![0u32; w * h];
    let mut heap = BinaryHeap::new();
    let mut seq = 0u64;
    for (k, &m) in markers.iter().enumerate() {
        lab[m] = k as u32 + 1;
        heap.push((key(dist[m]), Reverse(seq), m));
        seq += 1;
    }
    while let Some((_, _, p)) = heap.pop() {
        neighbours(p, w, h, connectivity, &mut nb);
        for &q in &nb {
            if mask[q] && lab[q] == 0 {
                lab[q] = lab[p];
                heap.push((key(dist[q]), Reverse(seq), q));
                seq += 1;
            }
        }
    }
    // Renumber in raster order.
    let mut number = vec![0u32; markers.len() + 1];
    let mut count = 0;
    for v in lab.iter_mut() {
        if *v != 0 {
            if number[*v as usize] == 0 {
                count += 1;
                number[*v as usize] = count;
            }
            *v = number[*v as usize];
        }
    }
    lab
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn four_and_eight_connectivity_differ_on_a_diagonal() {
        // Two pixels touching at a corner, and a U shape that the first pass sees as two.
        let m = [
            true, false, false, true, false, true, //
            false, true, false, true, false, true, //
            false, false, false, true, true, true,
        ];
        assert_eq!(label_components(&m, 6, 3, 8).1, 2);
        assert_eq!(label_components(&m, 6, 3, 4).1, 3);
    }

    #[test]
    fn exclusion_counts_border_and_small() {
        let lab = [
            1, 0, 0, 0, 0, 0, 2, 2, 0, 0, 0, 2, 2, 3, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0,
        ];
        let (out, n, b, s) = exclude(&lab, 5, 5, true, 2);
        assert_eq!((n, b, s), (1, 1, 1));
        assert_eq!(out[6], 1);
        assert_eq!(out[13], 0);
    }
}
