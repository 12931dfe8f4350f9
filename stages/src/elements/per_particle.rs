//! `elements.per_particle` and `elements.overlay`: element maps (e.g. EDS maps of the same
//! field as a micrograph) read out per labelled particle.
//!
//! Registration: maps of the labels' size are used as they are, or (when `register` is on
//! and a micrograph is given) shifted by the integer offset that maximises their phase
//! correlation with the micrograph (Kuglin & Hines 1975): the peak of
//! F⁻¹[F₁F₂* / |F₁F₂*|], searched within `max_shift` pixels.
//! Per particle: the mean signal of each map over its pixels, the composition fraction
//! mean_E / Σ_maps mean (signal fractions, not calibrated atomic fractions: no sensitivity
//! factors are applied), and the share of each map's total signal that lies in the particle.
//! The overlay is an image for the report: each particle pixel holds the 1-based number of
//! the element with the largest fraction in that particle (0 = background), and its
//! metadata `overlay.classes` lists "1=name;2=name…" for a categorical false-colour legend.

use crate::image::common::labels_in;
use crate::lattice::fft::fft2;
use crate::stage::{
    Inputs, OptionError, Port, PortValue, Reference, StageError, StageInfo, TypedStage,
};
use crate::value::{Artifact, Axis, Column, ColumnData, Image, Kind, Labels, Record, Table, Value};
use rustfft::num_complex::Complex;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

pub const KUGLIN1975: Reference = Reference {
    key: "kuglin1975",
    citation: "C. D. Kuglin and D. C. Hines, \"The phase correlation image alignment method\", Proceedings of the IEEE International Conference on Cybernetics and Society, 163–165 (1975).",
};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct ElementOptions {
    /// Element names, in the order the maps are listed; by default each map's `element`
    /// metadata or its upstream step id.
    pub names: Vec<String>,
    /// Register each map to the micrograph by phase correlation (integer shift; default false).
    pub register: bool,
    /// Largest registration shift searched, in pixels (default 32).
    #[schemars(extend("x-unit" = "px"))]
    pub max_shift: usize,
}

impl Default for ElementOptions {
    fn default() -> Self {
        ElementOptions {
            names: Vec::new(),
            register: false,
            max_shift: 32,
        }
    }
}

static INPUTS: &[Port] = &[
    Port::each("labels", Kind::Labels, "the labelled particles"),
    Port::several("maps", Kind::Image, "element maps of the same field"),
    Port::each(
        "micrograph",
        Kind::Image,
        "the micrograph the labels come from (for registration)",
    )
    .optional(),
];

/// The maps with their names and (dx, dy) shifts applied when reading them.
struct Maps<'a> {
    names: Vec<String>,
    images: Vec<&'a Image>,
    shifts: Vec<(isize, isize)>,
}

fn gather_maps<'a>(
    inputs: &Inputs<'a>,
    o: &ElementOptions,
    labels: &Labels,
) -> Result<Maps<'a>, StageError> {
    let entries: Vec<(&str, &Image)> = match inputs.ports.get(1) {
        Some(PortValue::Many(v)) => v
            .iter()
            .map(|(id, a)| match &a.value {
                Value::Image(i) => Ok((*id, i)),
                other => Err(StageError::input(format!(
                    "map '{id}' is a {}, not an image",
                    other.kind().name()
                ))),
            })
            .collect::<Result<_, _>>()?,
        Some(PortValue::One(a)) => match &a.value {
            Value::Image(i) => vec![("map", i)],
            other => {
                return Err(StageError::input(format!(
                    "the map is a {}, not an image",
                    other.kind().name()
                )))
            }
        },
        _ => Vec::new(),
    };
    if entries.is_empty() {
        return Err(StageError::input("no element maps were given"));
    }
    if !o.names.is_empty() && o.names.len() != entries.len() {
        return Err(StageError::input(format!(
            "{} names for {} maps",
            o.names.len(),
            entries.len()
        )));
    }
    let micro = match inputs.optional(2).map(|a| &a.value) {
        Some(Value::Image(i)) => Some(i),
        _ => None,
    };
    let mut m = Maps {
        names: Vec::new(),
        images: Vec::new(),
        shifts: Vec::new(),
    };
    for (k, (id, img)) in entries.iter().enumerate() {
        let name = o
            .names
            .get(k)
            .cloned()
            .or_else(|| img.metadata.get("element").cloned())
            .unwrap_or_else(|| id.to_string());
        if m.names.contains(&name) {
            return Err(StageError::input(format!(
                "two maps are named '{name}'; give distinct names"
            )));
        }
        let shift = match (o.register, micro) {
            (true, Some(mi)) => {
                if mi.width != img.width || mi.height != img.height {
                    return Err(StageError::input(format!(
                        "map '{name}' and the micrograph differ in size; resample first"
                    )));
                }
                phase_correlation(mi, img, o.max_shift)?
            }
            (true, None) => {
                return Err(StageError::input(
                    "register is on but no micrograph was given",
                ))
            }
            _ => (0, 0),
        };
        if shift == (0, 0) && (img.width != labels.width || img.height != labels.height) {
            return Err(StageError::input(format!(
                "map '{name}' is {}×{} but the labels {}×{}",
                img.width, img.height, labels.width, labels.height
            )));
        }
        m.names.push(name);
        m.images.push(img);
        m.shifts.push(shift);
    }
    Ok(m)
}

/// Integer shift (dx, dy) such that map(x + dx, y + dy) ≈ reference(x, y).
pub fn phase_correlation(
    reference: &Image,
    map: &Image,
    max_shift: usize,
) -> Result<(isize, isize), StageError> {
    let (w, h) = (reference.width, reference.height);
    let prep = |img: &Image| {
        let mean = img.data.iter().map(|&v| v as f64).sum::<f64>() / img.data.len() as f64;
        let mut b: Vec<Complex<f64>> = img
            .data
            .iter()
            .map(|&v| Complex::new(v as f64 - mean, 0.0))
            .collect();
        fft2(&mut b, w, h, false);
        b
    };
    let (f1, f2) = (prep(reference), prep(map));
    let mut r: Vec<Complex<f64>> = f1
        .iter()
        .zip(&f2)
        .map(|(a, b)| {
            let c = b * a.conj();
            let n = c.norm();
            if n > 1e-300 {
                c / n
            } else {
                Complex::new(0.0, 0.0)
            }
        })
        .collect();
    fft2(&mut r, w, h, true);
    let ms = max_shift as isize;
    let mut best = (f64::NEG_INFINITY, 0, 0);
    for dy in -ms..=ms {
        for dx in -ms..=ms {
            let (c, rr) = (
                dx.rem_euclid(w as isize) as usize,
                dy.rem_euclid(h as isize) as usize,
            );
            let v = r[rr * w + c].re;
            if v > best.0 {
                best = (v, dx, dy);
            }
        }
    }
    if !best.0.is_finite() {
        return Err(StageError::numeric(
            "phase correlation failed (flat images?)",
        ));
    }
    Ok((best.1, best.2))
}

struct PerParticle {
    labels: Vec<u32>,
    /// mean[e][p]
    mean: Vec<Vec<f64>>,
    share: Vec<Vec<f64>>,
    fraction: Vec<Vec<f64>>,
}

fn per_particle(l: &Labels, maps: &Maps) -> PerParticle {
    let n = l.count as usize;
    let mut count = vec![0usize; n + 1];
    for &v in &l.labels {
        if (v as usize) <= n {
            count[v as usize] += 1;
        }
    }
    let present: Vec<u32> = (1..=n as u32).filter(|&v| count[v as usize] > 0).collect();
    let mut mean = Vec::new();
    let mut share = Vec::new();
    for (img, &(dx, dy)) in maps.images.iter().zip(&maps.shifts) {
        let mut sum = vec![0.0; n + 1];
        let mut cnt = vec![0usize; n + 1];
        let total: f64 = img.data.iter().map(|&v| v as f64).sum();
        for r in 0..l.height {
            for c in 0..l.width {
                let v = l.labels[r * l.width + c] as usize;
                if v == 0 || v > n {
                    continue;
                }
                let (mc, mr) = (c as isize + dx, r as isize + dy);
                if mc < 0 || mr < 0 || mc as usize >= img.width || mr as usize >= img.height {
                    continue;
                }
                sum[v] += img.get(mc as usize, mr as usize) as f64;
                cnt[v] += 1;
            }
        }
        mean.push(
            present
                .iter()
                .map(|&p| {
                    if cnt[p as usize] > 0 {
                        sum[p as usize] / cnt[p as usize] as f64
                    } else {
                        f64::NAN
                    }
                })
                .collect::<Vec<_>>(),
        );
        share.push(
            present
                .iter()
                .map(|&p| {
                    if total != 0.0 {
                        sum[p as usize] / total
                    } else {
                        f64::NAN
                    }
                })
                .collect(),
        );
    }
    let mut fraction = vec![vec![f64::NAN; present.len()]; maps.images.len()];
    for p in 0..present.len() {
        let s: f64 = mean.iter().map(|m| m[p]).sum();
        for e in 0..maps.images.len() {
            if s.is_finite() && s != 0.0 {
                fraction[e][p] = mean[e][p] / s;
            }
        }
    }
    PerParticle {
        labels: present,
        mean,
        share,
        fraction,
    }
}

pub struct ElementsPerParticle;

impl TypedStage for ElementsPerParticle {
    type Options = ElementOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "elements.per_particle",
        version: 1,
        summary: "Per-particle mean signal and signal fractions of element maps",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[KUGLIN1975],
    };
    fn check(&self, o: &ElementOptions) -> Result<(), OptionError> {
        if o.names.iter().any(|n| n.trim().is_empty()) {
            return Err(OptionError::new("names", "names must not be empty"));
        }
        Ok(())
    }
    fn methods(&self, o: &ElementOptions) -> String {
        let reg = if o.register {
            format!("registered to the micrograph by phase correlation [kuglin1975] (integer shifts up to {} px)", o.max_shift)
        } else {
            "taken as registered to the micrograph".into()
        };
        format!("Element maps were {reg}, and each particle's mean map signal and its fraction of the summed signals (uncalibrated signal fractions) were computed over the particle's pixels.")
    }
    fn run(&self, inputs: &Inputs, o: &ElementOptions) -> Result<Artifact, StageError> {
        let l = labels_in(inputs, 0)?;
        let maps = gather_maps(inputs, o, l)?;
        let pp = per_particle(l, &maps);
        let num = |name: String, v: Vec<f64>| Column {
            name,
            unit: String::new(),
            data: ColumnData::Number {
                values: v,
                uncertainty: None,
            },
        };
        let mut columns = vec![num(
            "label".into(),
            pp.labels.iter().map(|&v| v as f64).collect(),
        )];
        for (e, name) in maps.names.iter().enumerate() {
            let mut c = num(format!("{name}.mean"), pp.mean[e].clone());
            c.unit = maps.images[e].z_axis.unit.clone();
            columns.push(c);
            columns.push(num(format!("{name}.fraction"), pp.fraction[e].clone()));
            columns.push(num(format!("{name}.share"), pp.share[e].clone()));
        }
        let mut a = Artifact::new(Value::Table(Table {
            title: "per-particle composition".into(),
            columns,
        }));
        a.record(Record::number("count", pp.labels.len() as f64, None, ""));
        for (e, name) in maps.names.iter().enumerate() {
            let f: Vec<f64> = pp.fraction[e]
                .iter()
                .copied()
                .filter(|v| v.is_finite())
                .collect();
            if !f.is_empty() {
                let m = f.iter().sum::<f64>() / f.len() as f64;
                let sd = if f.len() > 1 {
                    (f.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (f.len() - 1) as f64).sqrt()
                } else {
                    0.0
                };
                a.record(Record::number(
                    format!("fraction.{name}"),
                    m,
                    Some(sd / (f.len() as f64).sqrt()),
                    "",
                ));
            }
            let (dx, dy) = maps.shifts[e];
            if (dx, dy) != (0, 0) {
                a.info(format!(
                    "map '{name}' shifted by ({dx}, {dy}) px to match the micrograph"
                ));
            }
        }
        if pp.labels.is_empty() {
            a.warn("no particles: the composition table is empty");
        }
        Ok(a)
    }
}

pub struct ElementsOverlay;

impl TypedStage for ElementsOverlay {
    type Options = ElementOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "elements.overlay",
        version: 1,
        summary:
            "Categorical image of each particle's dominant element, for a false-colour overlay",
        inputs: INPUTS,
        output: Kind::Image,
        references: &[KUGLIN1975],
    };
    fn methods(&self, _o: &ElementOptions) -> String {
        "Each particle was coloured by the element map with the largest fraction of its signal."
            .into()
    }
    fn run(&self, inputs: &Inputs, o: &ElementOptions) -> Result<Artifact, StageError> {
        let l = labels_in(inputs, 0)?;
        let maps = gather_maps(inputs, o, l)?;
        let pp = per_particle(l, &maps);
        let mut class = vec![0f32; l.count as usize + 1];
        for (p, &lab) in pp.labels.iter().enumerate() {
            let mut best = (f64::NEG_INFINITY, 0usize);
            for e in 0..maps.names.len() {
                let f = pp.fraction[e][p];
                if f.is_finite() && f > best.0 {
                    best = (f, e + 1);
                }
            }
            class[lab as usize] = best.1 as f32;
        }
        let data = l
            .labels
            .iter()
            .map(|&v| class.get(v as usize).copied().unwrap_or(0.0))
            .collect();
        let mut metadata = BTreeMap::new();
        metadata.insert("overlay.kind".into(), "categorical".into());
        metadata.insert(
            "overlay.classes".into(),
            maps.names
                .iter()
                .enumerate()
                .map(|(i, n)| format!("{}={n}", i + 1))
                .collect::<Vec<_>>()
                .join(";"),
        );
        Ok(Artifact::new(Value::Image(Image {
            width: l.width,
            height: l.height,
            data,
            pixel_size: l.pixel_size.clone(),
            z_axis: Axis::new("dominant element", ""),
            source_bits: 8,
            metadata,
        })))
    }
}
