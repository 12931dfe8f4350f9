//! `eds.identify`: candidate elements for each peak of an EDS spectrum.
//!
//! Method: every peak position (from a peak list, the centres of a fit, or a local-
//! maximum search of the spectrum) is compared with the characteristic line energies of
//! stages/data/xray_lines.csv (X-ray Data Booklet Table 1-2, after Bearden 1967); every
//! line within ±`tolerance` is a candidate, listed by increasing |mismatch|. A peak with
//! candidates from more than one element is flagged as an overlap (e.g. S Kα / Mo Lα /
//! Pb Mα near 2.3 keV), which a reader must resolve from other lines of those elements.

use super::lines::{lines, LINES_FILE};
use crate::quant_util::{located_peaks, Located};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Record, Spectrum, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Largest |measured − tabulated| energy for a candidate.
    #[schemars(extend("x-unit" = "keV"))]
    pub tolerance: f64,
    /// Only these elements are considered (all tabulated elements when empty).
    pub elements: Vec<String>,
    /// Line families considered: any of `K`, `L`, `M`.
    pub families: Vec<String>,
    /// Local-maximum search (spectrum input): a maximum must be the largest point within
    /// ±`half_window` points.
    pub half_window: usize,
    /// Local-maximum search: smallest height above the local minimum within ±5 half
    /// windows, as a fraction of the spectrum's largest value.
    pub min_height: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            tolerance: 0.05,
            elements: Vec::new(),
            families: vec!["K".into(), "L".into(), "M".into()],
            half_window: 3,
            min_height: 0.02,
        }
    }
}

pub struct EdsIdentify;

/// Table columns: peak, energy, element, line, line energy, mismatch, flag.
type Columns = (
    Vec<String>,
    Vec<f64>,
    Vec<String>,
    Vec<String>,
    Vec<f64>,
    Vec<f64>,
    Vec<String>,
);

static INPUTS: &[Port] = &[Port::each(
    "peaks",
    Kind::Any,
    "a peak list, a fit, or an EDS spectrum (keV or eV axis)",
)];

pub const BOOKLET: Reference = Reference {
    key: "xdb2009",
    citation: "A. C. Thompson et al., X-Ray Data Booklet, 3rd ed., Lawrence Berkeley National Laboratory, Berkeley, 2009, Table 1-2 (emission energies after J. A. Bearden, Rev. Mod. Phys. 39 (1967) 78).",
};

fn kev_factor(s: &Spectrum) -> Result<f64, StageError> {
    match s.x_axis.unit.as_str() {
        "keV" => Ok(1.0),
        "eV" => Ok(1e-3),
        u => Err(StageError::input(format!(
            "the x axis must be energy in keV or eV (it is '{u}'): calibrate it first"
        ))),
    }
}

/// Local maxima of a spectrum (criterion in the option docs).
pub fn local_maxima(s: &Spectrum, half_window: usize, min_height: f64) -> Vec<Located> {
    let n = s.len();
    let ymax = s.y.iter().cloned().fold(f64::MIN, f64::max);
    let mut out = Vec::new();
    for i in 0..n {
        let lo = i.saturating_sub(half_window);
        let hi = (i + half_window).min(n - 1);
        if (lo..=hi).any(|j| s.y[j] > s.y[i] || (s.y[j] == s.y[i] && j < i)) {
            continue;
        }
        let w = 5 * half_window;
        let base = (i.saturating_sub(w)..=(i + w).min(n - 1))
            .map(|j| s.y[j])
            .fold(f64::INFINITY, f64::min);
        if s.y[i] - base >= min_height * ymax && i > 0 && i + 1 < n {
            let (p, h) = crate::measure::maximum::parabolic_vertex(&s.x, &s.y, i);
            out.push(Located {
                name: (out.len() + 1).to_string(),
                position: p,
                uncertainty: None,
                fwhm: None,
                height: Some(h),
            });
        }
    }
    out
}

impl TypedStage for EdsIdentify {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "eds.identify",
        version: 1,
        summary: "Candidate elements for each EDS peak from tabulated line energies, with overlaps flagged",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[BOOKLET],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        crate::quant_util::check_positive("tolerance", o.tolerance)?;
        if let Some(f) = o
            .families
            .iter()
            .find(|f| !matches!(f.as_str(), "K" | "L" | "M"))
        {
            return Err(OptionError::new(
                "families",
                format!("'{f}' is not one of K, L, M"),
            ));
        }
        if o.half_window == 0 {
            return Err(OptionError::new(
                "half_window",
                "half_window must be at least 1",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let els = if o.elements.is_empty() {
            "all tabulated elements".to_string()
        } else {
            o.elements.join(", ")
        };
        format!(
            "Peaks were assigned by comparing their energies with the {} lines of {els} from the X-ray Data Booklet [xdb2009] within ±{} keV, listing every candidate and flagging peaks with candidates from more than one element as overlaps.",
            o.families.join("/"),
            o.tolerance
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let a = inputs.one(0)?;
        let s = a
            .spectrum()
            .ok_or_else(|| StageError::input("the input carries no spectrum"))?;
        let f = kev_factor(s)?;
        let mut peaks = located_peaks(Some(a));
        if matches!(a.value, Value::Spectrum(_)) {
            peaks = local_maxima(s, o.half_window, o.min_height);
        }
        if peaks.is_empty() {
            return Err(StageError::input("no peaks to identify"));
        }
        let table = lines()?;
        let mut art = Artifact::new(Value::Summary);
        let mut cols: Columns = Default::default();
        let mut found = Vec::new();
        for p in &peaks {
            let e = p.position * f;
            let mut cands: Vec<_> = table
                .iter()
                .filter(|l| {
                    o.families
                        .iter()
                        .any(|fam| l.line.starts_with(fam.as_str()))
                })
                .filter(|l| {
                    o.elements.is_empty()
                        || o.elements
                            .iter()
                            .any(|x| x.eq_ignore_ascii_case(&l.element))
                })
                .filter(|l| (l.energy_kev - e).abs() <= o.tolerance)
                .collect();
            cands.sort_by(|x, y| {
                (x.energy_kev - e)
                    .abs()
                    .total_cmp(&(y.energy_kev - e).abs())
            });
            let mut els: Vec<&str> = cands.iter().map(|l| l.element.as_str()).collect();
            els.dedup();
            let mut distinct = els.clone();
            distinct.sort();
            distinct.dedup();
            let overlap = distinct.len() > 1;
            let id = &p.name;
            art.record(Record::number(
                format!("peak.{id}.energy"),
                e,
                p.uncertainty.map(|u| u * f),
                "keV",
            ));
            let text: Vec<String> = cands
                .iter()
                .map(|l| format!("{} {} ({:+.3})", l.element, l.line, l.energy_kev - e))
                .collect();
            art.record(Record::text(
                format!("peak.{id}.candidates"),
                if text.is_empty() {
                    "none".into()
                } else {
                    text.join(", ")
                },
            ));
            if let Some(b) = cands.first() {
                art.record(Record::text(
                    format!("peak.{id}.best"),
                    format!("{} {}", b.element, b.line),
                ));
                art.record(Record::number(
                    format!("peak.{id}.mismatch"),
                    b.energy_kev - e,
                    None,
                    "keV",
                ));
                if !found.contains(&b.element) {
                    found.push(b.element.clone());
                }
            }
            if overlap {
                art.warn(format!(
                    "peak at {e:.3} keV: overlapping candidates {}",
                    distinct.join(", ")
                ));
            }
            if cands.is_empty() {
                cols.0.push(id.clone());
                cols.1.push(e);
                cols.2.push(String::new());
                cols.3.push(String::new());
                cols.4.push(f64::NAN);
                cols.5.push(f64::NAN);
                cols.6.push(String::new());
            }
            for l in &cands {
                cols.0.push(id.clone());
                cols.1.push(e);
                cols.2.push(l.element.clone());
                cols.3.push(l.line.clone());
                cols.4.push(l.energy_kev);
                cols.5.push(l.energy_kev - e);
                cols.6.push(if overlap {
                    "overlap".into()
                } else {
                    String::new()
                });
            }
        }
        art.record(Record::text("elements", found.join(", ")));
        art.record(Record::text("line_table", LINES_FILE));
        let text = |name: &str, v: Vec<String>| Column {
            name: name.into(),
            unit: String::new(),
            data: ColumnData::Text(v),
        };
        let num = |name: &str, v: Vec<f64>| Column {
            name: name.into(),
            unit: "keV".into(),
            data: ColumnData::Number {
                values: v,
                uncertainty: None,
            },
        };
        art.value = Value::Table(Table {
            title: "Peak identification".into(),
            columns: vec![
                text("peak", cols.0),
                num("energy", cols.1),
                text("element", cols.2),
                text("line", cols.3),
                num("line_energy", cols.4),
                num("mismatch", cols.5),
                text("flag", cols.6),
            ],
        });
        Ok(art)
    }
}
