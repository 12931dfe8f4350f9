//! `uvvis.tauc`: optical band gap by the Tauc method.
//!
//! Method (Tauc, Grigorovici & Vancu 1966; Davis & Mott 1970): near an absorption edge
//! αhν = B(hν − Eg)^n, so (αhν)^(1/n) is linear in hν and its extrapolation to zero
//! gives Eg; n = 1/2 for direct allowed, 2 for indirect allowed, 3/2 direct forbidden,
//! 3 indirect forbidden transitions. α = ln(10)·A/d (2.303·A/d) for a film of thickness
//! d, or the absorbance itself as a proxy (the intercept does not depend on the scale
//! of α). The linear region is either given as an energy range or chosen
//! automatically by this reproducible criterion: among all runs of `min_points`
//! consecutive points (ascending energy, inside `search_range`), keep those whose line
//! fit has positive slope, R² ≥ `min_r_squared` and an x-intercept at or below the
//! run's first energy; choose the run maximising slope × R² (the steepest straight part
//! of the edge; scores within 1e-9 relative count as tied and the lower energy wins).
//! Eg = −a/b from the line y = a + b·hν with
//! its standard uncertainty from the fit covariance.

use super::photon_energy;
use crate::quant_util::{self, check_range, polyfit, x_intercept, PolyFit};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Curve, CurveRole, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::f64::consts::LN_10;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Transition {
    /// n = 1/2: (αhν)² is plotted.
    DirectAllowed,
    /// n = 2: (αhν)^(1/2) is plotted.
    IndirectAllowed,
    /// n = 3/2: (αhν)^(2/3) is plotted.
    DirectForbidden,
    /// n = 3: (αhν)^(1/3) is plotted.
    IndirectForbidden,
}

impl Transition {
    pub fn n(self) -> f64 {
        match self {
            Transition::DirectAllowed => 0.5,
            Transition::IndirectAllowed => 2.0,
            Transition::DirectForbidden => 1.5,
            Transition::IndirectForbidden => 3.0,
        }
    }
    fn words(self) -> &'static str {
        match self {
            Transition::DirectAllowed => "direct allowed (n = 1/2)",
            Transition::IndirectAllowed => "indirect allowed (n = 2)",
            Transition::DirectForbidden => "direct forbidden (n = 3/2)",
            Transition::IndirectForbidden => "indirect forbidden (n = 3)",
        }
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Transition type; required, there is no default: `direct_allowed`,
    /// `indirect_allowed`, `direct_forbidden` or `indirect_forbidden`.
    pub transition: Option<Transition>,
    /// Film thickness d for α = 2.303·A/d (α in cm⁻¹); without it the absorbance is used
    /// as a proxy for α.
    #[schemars(extend("x-unit" = "nm"))]
    pub thickness: Option<f64>,
    /// Photon-energy range of the linear region; chosen automatically when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub fit_range: Option<[f64; 2]>,
    /// Photon-energy range searched by the automatic choice; the whole spectrum when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub search_range: Option<[f64; 2]>,
    /// Number of consecutive points in each candidate window of the automatic choice.
    pub min_points: usize,
    /// Smallest R² a candidate window may have.
    pub min_r_squared: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            transition: None,
            thickness: None,
            fit_range: None,
            search_range: None,
            min_points: 10,
            min_r_squared: 0.99,
        }
    }
}

pub struct Tauc;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "absorbance against wavelength (nm) or photon energy (eV)",
)];

pub const TAUC: Reference = Reference {
    key: "tauc1966",
    citation: "J. Tauc, R. Grigorovici, A. Vancu, Optical properties and electronic structure of amorphous germanium, Phys. Status Solidi B 15 (1966) 627–637.",
};
pub const DAVIS_MOTT: Reference = Reference {
    key: "davis1970",
    citation: "E. A. Davis, N. F. Mott, Conduction in non-crystalline systems V. Conductivity, optical absorption and photoconductivity in amorphous semiconductors, Philos. Mag. 22 (1970) 903–922.",
};

impl TypedStage for Tauc {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.tauc",
        version: 1,
        summary:
            "Optical band gap from a Tauc plot, linear region given or chosen by a stated criterion",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[TAUC, DAVIS_MOTT, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.transition.is_none() {
            return Err(OptionError::new(
                "transition",
                "the transition type is required (no default): direct_allowed, indirect_allowed, direct_forbidden or indirect_forbidden",
            ));
        }
        if let Some(d) = o.thickness {
            quant_util::check_positive("thickness", d)?;
        }
        check_range("fit_range", o.fit_range)?;
        check_range("search_range", o.search_range)?;
        if o.min_points < 3 {
            return Err(OptionError::new(
                "min_points",
                "min_points must be at least 3",
            ));
        }
        if !(0.0..=1.0).contains(&o.min_r_squared) {
            return Err(OptionError::new(
                "min_r_squared",
                "min_r_squared must lie in [0, 1]",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let t = o.transition.map_or("(unspecified)", |t| t.words());
        let alpha = match o.thickness {
            Some(d) => format!("α = 2.303·A/d with d = {d} nm"),
            None => "the absorbance as a proxy for α (the extrapolated gap does not depend on its scale)".to_string(),
        };
        let region = match o.fit_range {
            Some(r) => format!("the linear region {}–{} eV", r[0], r[1]),
            None => format!(
                "the linear region chosen automatically as the run of {} consecutive points{} with R² ≥ {} maximising slope × R²",
                o.min_points,
                o.search_range.map_or(String::new(), |r| format!(" between {} and {} eV", r[0], r[1])),
                o.min_r_squared
            ),
        };
        format!(
            "Optical band gaps were obtained by the Tauc method for a {t} transition [tauc1966] [davis1970], using {alpha}, by extrapolating a least-squares line through {region} to zero, with the gap's uncertainty from the line's covariance [jcgm2008]."
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let tr = o
            .transition
            .ok_or_else(|| StageError::input("transition is required"))?;
        let e = photon_energy(s)?;
        let mut pts: Vec<(f64, f64)> = e.iter().copied().zip(s.y.iter().copied()).collect();
        pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        let scale = o.thickness.map_or(1.0, |d| LN_10 / (d * 1e-7));
        let mut clamped = 0;
        let ty: Vec<f64> = pts
            .iter()
            .map(|(en, a)| {
                let v = scale * a * en;
                if v < 0.0 {
                    clamped += 1;
                }
                v.max(0.0).powf(1.0 / tr.n())
            })
            .collect();
        let ex: Vec<f64> = pts.iter().map(|p| p.0).collect();
        let (fit, lo, hi) = match o.fit_range {
            Some(r) => {
                let idx = quant_util::indices_in(&ex, r);
                if idx.len() < 3 {
                    return Err(StageError::input(format!(
                        "fewer than 3 points between {} and {} eV",
                        r[0], r[1]
                    )));
                }
                let (x, y): (Vec<f64>, Vec<f64>) = idx.iter().map(|&i| (ex[i], ty[i])).unzip();
                (polyfit(&x, &y, None, 1)?, idx[0], idx[idx.len() - 1])
            }
            None => auto_window(&ex, &ty, o)?,
        };
        let (eg, ueg) = x_intercept(&fit)?;
        let eg = quant_util::finite("band gap", eg)?;
        let exponent = match tr {
            Transition::DirectAllowed => "2",
            Transition::IndirectAllowed => "1/2",
            Transition::DirectForbidden => "2/3",
            Transition::IndirectForbidden => "1/3",
        };
        let base_unit = if o.thickness.is_some() {
            "cm⁻¹·eV"
        } else {
            "eV"
        };
        let guide: Vec<f64> = ex
            .iter()
            .map(|&x| {
                if x >= eg && x <= ex[hi] {
                    fit.eval(x)
                } else {
                    f64::NAN
                }
            })
            .collect();
        let mut out = Spectrum::new(
            ex.clone(),
            ty,
            Axis::new("photon energy", "eV"),
            Axis::new(
                format!("(αhν)^{exponent}"),
                format!("({base_unit})^{exponent}"),
            ),
        );
        out.metadata = s.metadata.clone();
        out.curves.push(Curve {
            name: "Tauc line".into(),
            role: CurveRole::Guide,
            y: guide,
        });
        let mut art = Artifact::new(Value::Spectrum(out));
        art.record(Record::number("band_gap", eg, Some(ueg), "eV"));
        art.record(Record::number(
            "tauc_slope",
            fit.coef[1],
            Some(fit.stderr(1)),
            "",
        ));
        art.record(Record::number(
            "tauc_intercept",
            fit.coef[0],
            Some(fit.stderr(0)),
            "",
        ));
        art.record(Record::number("fit_from", ex[lo], None, "eV"));
        art.record(Record::number("fit_to", ex[hi], None, "eV"));
        art.record(Record::number("fit_points", (hi - lo + 1) as f64, None, ""));
        art.record(Record::number("fit_r_squared", fit.r_squared, None, ""));
        art.record(Record::text("transition", tr.words()));
        art.record(Record::text(
            "alpha",
            match o.thickness {
                Some(d) => format!("2.303·A/d, d = {d} nm"),
                None => "absorbance used as proxy".to_string(),
            },
        ));
        if clamped > 0 {
            art.info(format!(
                "{clamped} points with negative absorbance were set to zero in the Tauc plot"
            ));
        }
        if o.fit_range.is_some() && fit.r_squared < o.min_r_squared {
            art.warn(format!(
                "the given linear region has R² = {:.4}",
                fit.r_squared
            ));
        }
        Ok(art)
    }
}

/// The automatic choice of the linear region (criterion in the module comment):
/// the fit, and first and last index of the chosen window.
fn auto_window(ex: &[f64], ty: &[f64], o: &Options) -> Result<(PolyFit, usize, usize), StageError> {
    let idx: Vec<usize> = match o.search_range {
        Some(r) => quant_util::indices_in(ex, r),
        None => (0..ex.len()).collect(),
    };
    let w = o.min_points;
    if idx.len() < w {
        return Err(StageError::input(format!(
            "the search range holds {} points, fewer than min_points = {w}",
            idx.len()
        )));
    }
    let mut best: Option<(f64, PolyFit, usize, usize)> = None;
    for win in idx.windows(w) {
        let x: Vec<f64> = win.iter().map(|&i| ex[i]).collect();
        let y: Vec<f64> = win.iter().map(|&i| ty[i]).collect();
        let Ok(fit) = polyfit(&x, &y, None, 1) else {
            continue;
        };
        let slope = fit.coef[1];
        if slope <= 0.0 || fit.r_squared < o.min_r_squared {
            continue;
        }
        let x0 = -fit.coef[0] / slope;
        if x0 > x[0] {
            continue;
        }
        let score = slope * fit.r_squared;
        // Scores within 1e-9 (relative) of each other count as tied: the lower energy wins.
        if best.as_ref().is_none_or(|b| score > b.0 * (1.0 + 1e-9)) {
            best = Some((score, fit, win[0], win[w - 1]));
        }
    }
    best.map(|(_, f, a, b)| (f, a, b)).ok_or_else(|| {
        StageError::input(format!(
            "no run of {w} points has a rising straight edge with R² ≥ {}: give fit_range",
            o.min_r_squared
        ))
    })
}
