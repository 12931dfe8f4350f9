//! `xps.atomic_percent`: atomic percentages from background-subtracted core-level
//! areas divided by relative sensitivity factors.
//!
//! Method: X_i = (A_i/S_i) / Σ_j (A_j/S_j) × 100 % (the standard homogeneous-sample
//! quantification, e.g. Briggs & Seah, Practical Surface Analysis, 2nd ed., vol. 1,
//! 1990, ch. 5), with the RSF S_i from the options or the built-in table
//! (stages/data/xps_sensitivity.csv). The uncertainty is propagated to first order with
//! the full Jacobian of the normalisation, ∂X_i/∂A_j = (δ_ij/S_i − X_i/S_j)/T, so the
//! correlation the sum-to-100 % constraint introduces is included; areas of different
//! regions are independent, RSF uncertainties are included when given.

use super::sensitivity;
use crate::quant_util::{self, record_number};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Region {
    /// Element symbol (e.g. `C`).
    pub element: String,
    /// Core level as written in the table (e.g. `1s`, `2p`, `2p3/2`).
    pub level: String,
    /// Relative sensitivity factor; looked up in the built-in table when absent.
    pub rsf: Option<f64>,
    /// Standard uncertainty of the RSF (0 when absent).
    pub rsf_uncertainty: Option<f64>,
    /// For a fit input: the peaks whose areas are summed (all peaks when empty).
    pub peaks: Vec<String>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// One entry per input step (by step id): its element, level and RSF.
    pub regions: BTreeMap<String, Region>,
    /// Built-in RSF set used where a region gives no rsf: `scofield_al_ka` or `wagner1981`.
    pub rsf_set: String,
    /// Name of the area record of non-fit inputs (e.g. from an integration step).
    pub area_record: String,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            regions: BTreeMap::new(),
            rsf_set: "scofield_al_ka".into(),
            area_record: "area".into(),
        }
    }
}

pub struct AtomicPercent;

static INPUTS: &[Port] = &[Port::several(
    "regions",
    Kind::Any,
    "the areas of each core-level region of one sample (area records or fits), one step each",
)
.records_only()];

pub const BRIGGS_SEAH: Reference = Reference {
    key: "briggs1990",
    citation: "D. Briggs, M. P. Seah (eds.), Practical Surface Analysis, 2nd ed., Vol. 1: Auger and X-ray Photoelectron Spectroscopy, Wiley, Chichester, 1990.",
};
pub const SCOFIELD: Reference = Reference {
    key: "scofield1976",
    citation: "J. H. Scofield, Hartree–Slater subshell photoionization cross-sections at 1254 and 1487 eV, J. Electron Spectrosc. Relat. Phenom. 8 (1976) 129–137.",
};
pub const WAGNER: Reference = Reference {
    key: "wagner1981",
    citation: "C. D. Wagner, L. E. Davis, M. V. Zeller, J. A. Taylor, R. H. Raymond, L. H. Gale, Empirical atomic sensitivity factors for quantitative analysis by electron spectroscopy for chemical analysis, Surf. Interface Anal. 3 (1981) 211–225.",
};

/// The area of one region and its standard uncertainty.
pub fn region_area(
    a: &Artifact,
    area_record: &str,
    peaks: &[String],
) -> Result<(f64, Option<f64>), StageError> {
    match &a.value {
        Value::Fit(f) => {
            let idx: Vec<usize> = if peaks.is_empty() {
                (0..f.peaks.len()).collect()
            } else {
                peaks
                    .iter()
                    .map(|p| {
                        f.peaks
                            .iter()
                            .position(|q| &q.name == p)
                            .ok_or_else(|| StageError::input(format!("the fit has no peak '{p}'")))
                    })
                    .collect::<Result<_, _>>()?
            };
            if idx.is_empty() {
                return Err(StageError::input("the fit has no peaks"));
            }
            let n = f.peaks.len();
            let area: f64 = idx.iter().map(|&i| f.peaks[i].area.value).sum();
            let u = if f.area_covariance.len() == n * n {
                let v: f64 = idx
                    .iter()
                    .flat_map(|&i| idx.iter().map(move |&j| (i, j)))
                    .map(|(i, j)| f.area_covariance[i * n + j])
                    .sum();
                Some(v.max(0.0).sqrt())
            } else {
                None
            };
            Ok((area, u))
        }
        _ => {
            let (v, u, _) = record_number(a, area_record)?;
            Ok((v, u))
        }
    }
}

impl TypedStage for AtomicPercent {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "xps.atomic_percent",
        version: 1,
        summary: "Atomic percentages from core-level areas and relative sensitivity factors",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[BRIGGS_SEAH, SCOFIELD, WAGNER, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.regions.len() < 2 {
            return Err(OptionError::new(
                "regions",
                "give at least two regions (one per input step)",
            ));
        }
        for (k, r) in &o.regions {
            if r.element.is_empty() || r.level.is_empty() {
                return Err(OptionError::new(
                    format!("regions.{k}"),
                    "give element and level",
                ));
            }
            if let Some(s) = r.rsf {
                quant_util::check_positive(&format!("regions.{k}.rsf"), s)?;
            }
            quant_util::check_uncertainty(
                &format!("regions.{k}.rsf_uncertainty"),
                r.rsf_uncertainty,
            )?;
        }
        if o.rsf_set != "scofield_al_ka" && o.rsf_set != "wagner1981" {
            return Err(OptionError::new(
                "rsf_set",
                "rsf_set is scofield_al_ka or wagner1981",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let set_key = if o.rsf_set == "wagner1981" {
            "[wagner1981]"
        } else {
            "[scofield1976]"
        };
        let regs: Vec<String> = o
            .regions
            .values()
            .map(|r| match r.rsf {
                Some(s) => format!("{} {} (RSF {s})", r.element, r.level),
                None => format!("{} {}", r.element, r.level),
            })
            .collect();
        format!(
            "Atomic percentages were calculated from the background-subtracted areas of {} divided by relative sensitivity factors (given, else from the built-in {} set {set_key}, used without further transmission or escape-depth correction), assuming a homogeneous sample [briggs1990], with uncertainties propagated to first order including the correlation introduced by normalisation [jcgm2008].",
            regs.join(", "),
            o.rsf_set
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let entries = inputs.many(0);
        let mut rows = Vec::new(); // (element, area, u_area, rsf, u_rsf, source)
        for (step, a) in &entries {
            let r = o.regions.get(*step).ok_or_else(|| {
                StageError::input(format!("input step '{step}' has no entry in regions"))
            })?;
            let (area, ua) = region_area(a, &o.area_record, &r.peaks)
                .map_err(|e| StageError::input(format!("{step}: {e}")))?;
            if area < 0.0 {
                return Err(StageError::input(format!("{step}: negative area {area}")));
            }
            let (rsf, src) = match r.rsf {
                Some(s) => (s, "given".to_string()),
                None => {
                    let t = sensitivity::lookup(&o.rsf_set, &r.element, &r.level)?;
                    (t.rsf, t.source.clone())
                }
            };
            if rows
                .iter()
                .any(|(e, ..): &(String, f64, f64, f64, f64, String)| *e == r.element)
            {
                return Err(StageError::input(format!(
                    "element {} appears in two regions",
                    r.element
                )));
            }
            rows.push((
                r.element.clone(),
                area,
                ua.unwrap_or(0.0),
                rsf,
                r.rsf_uncertainty.unwrap_or(0.0),
                src,
            ));
        }
        for k in o.regions.keys() {
            if !entries.iter().any(|(s, _)| s == k) {
                return Err(StageError::input(format!(
                    "region '{k}' names no input step"
                )));
            }
        }
        let n = rows.len();
        let inv: Vec<f64> = rows.iter().map(|r| r.1 / r.3).collect();
        let total: f64 = inv.iter().sum();
        if total <= 0.0 {
            return Err(StageError::input("all areas are zero"));
        }
        let mut art = Artifact::new(Value::Summary);
        for i in 0..n {
            let xi = inv[i] / total;
            // Areas: ∂X_i/∂A_j = (δ_ij − X_i)/(S_j T); RSFs: ∂X_i/∂S_j = −(δ_ij − X_i)·A_j/(S_j² T).
            let mut var = 0.0;
            for (j, r) in rows.iter().enumerate() {
                let d = if i == j { 1.0 } else { 0.0 };
                let ga = (d - xi) / (r.3 * total);
                let gs = -(d - xi) * r.1 / (r.3 * r.3 * total);
                var += (ga * r.2).powi(2) + (gs * r.4).powi(2);
            }
            let el = &rows[i].0;
            art.record(Record::number(
                format!("atomic_percent.{el}"),
                100.0 * xi,
                Some(100.0 * var.sqrt()),
                "%",
            ));
            art.record(Record::number(
                format!("rsf.{el}"),
                rows[i].3,
                Some(rows[i].4),
                "",
            ));
            art.record(Record::text(format!("rsf_source.{el}"), rows[i].5.clone()));
        }
        if rows.iter().all(|r| r.2 == 0.0) {
            art.warn("no area carries an uncertainty: the atomic percentages have zero propagated uncertainty");
        }
        Ok(art)
    }
}
