//! `ups.work_function` and `ups.valence_band_maximum`: linear extrapolation of a
//! spectral edge to the baseline in UPS spectra.
//!
//! Method (common practice; e.g. Cahen & Kahn, Adv. Mater. 15 (2003) 271): a least-squares line is fitted
//! to the edge points whose baseline-corrected intensity lies between the fractions
//! `edge_fractions` of the edge height, found by walking from the intensity maximum in
//! `search_range` towards the edge (or to all points of `edge_range`); the edge position
//! is where that line meets the baseline level (mean intensity of `baseline_range`, else
//! of the points lying beyond the place where the edge line reaches the lowest intensity
//! beyond the maximum, so no edge point enters the baseline). Uncertainty from the line's covariance and the
//! baseline's standard error.
//!
//! Work function: φ = hν − |E_cutoff − E_F|, the spectrum width from the secondary-
//! electron cutoff to the Fermi level. On a binding-energy axis (referenced to E_F) the
//! cutoff lies at high binding energy and E_F = 0 unless given; on a kinetic-energy axis
//! (sample biased) the cutoff lies at low kinetic energy and E_F (the kinetic energy of
//! the Fermi edge of a metal reference) must be given or connected.

use crate::quant_util::{
    self, check_range, indices_in, line_crossing, mean_and_se, polyfit, record_number,
};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Curve, CurveRole, Kind, Record, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Scale {
    /// From the x-axis quantity: "binding energy" or "kinetic energy".
    #[default]
    Auto,
    /// Binding energy relative to the Fermi level (positive below E_F).
    Binding,
    /// Kinetic energy of the photoelectrons.
    Kinetic,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct EdgeOptions {
    /// Energy range holding the whole edge (all its points are fitted); found
    /// automatically from `edge_fractions` when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub edge_range: Option<[f64; 2]>,
    /// Fractions of the edge height between which points are fitted (automatic choice).
    pub edge_fractions: [f64; 2],
    /// Energy range searched for the intensity maximum next to the edge; whole spectrum when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub search_range: Option<[f64; 2]>,
    /// Energy range whose mean intensity is the baseline; the points beyond the edge when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub baseline_range: Option<[f64; 2]>,
    /// Energy scale of the x axis.
    pub scale: Scale,
}

impl Default for EdgeOptions {
    fn default() -> Self {
        EdgeOptions {
            edge_range: None,
            edge_fractions: [0.2, 0.8],
            search_range: None,
            baseline_range: None,
            scale: Scale::Auto,
        }
    }
}

fn check_edge(o: &EdgeOptions) -> Result<(), OptionError> {
    check_range("edge_range", o.edge_range)?;
    check_range("search_range", o.search_range)?;
    check_range("baseline_range", o.baseline_range)?;
    let [a, b] = o.edge_fractions;
    if !(0.0 <= a && a < b && b <= 1.0) {
        return Err(OptionError::new(
            "edge_fractions",
            "edge_fractions must be [low, high] with 0 ≤ low < high ≤ 1",
        ));
    }
    Ok(())
}

fn scale_of(s: &Spectrum, sc: Scale) -> Result<Scale, StageError> {
    if sc != Scale::Auto {
        return Ok(sc);
    }
    let q = s.x_axis.quantity.to_ascii_lowercase();
    if q.contains("binding") {
        Ok(Scale::Binding)
    } else if q.contains("kinetic") {
        Ok(Scale::Kinetic)
    } else {
        Err(StageError::input(format!(
            "cannot tell the energy scale from the x axis '{}': set scale: binding or kinetic",
            s.x_axis.quantity
        )))
    }
}

/// An extrapolated edge: position, its uncertainty, the line, points used, baseline.
pub struct Edge {
    pub position: f64,
    pub uncertainty: f64,
    pub fit: quant_util::PolyFit,
    pub from: f64,
    pub to: f64,
    pub points: usize,
    pub baseline: f64,
    /// Intensity of the maximum the edge was walked from.
    pub top: f64,
}

/// Extrapolates the edge lying in direction `dir` (+1: towards higher x) from the maximum.
pub fn extrapolate_edge(s: &Spectrum, o: &EdgeOptions, dir: isize) -> Result<Edge, StageError> {
    let mut order: Vec<usize> = (0..s.len()).collect();
    order.sort_by(|a, b| s.x[*a].total_cmp(&s.x[*b]));
    let x: Vec<f64> = order.iter().map(|&i| s.x[i]).collect();
    let y: Vec<f64> = order.iter().map(|&i| s.y[i]).collect();
    let n = x.len();
    if n < 5 {
        return Err(StageError::input("fewer than 5 points"));
    }
    let search: Vec<usize> = match o.search_range {
        Some(r) => indices_in(&x, r),
        None => (0..n).collect(),
    };
    if search.len() < 3 {
        return Err(StageError::input("fewer than 3 points in search_range"));
    }
    let imax = search
        .iter()
        .copied()
        .fold(search[0], |b, i| if y[i] > y[b] { i } else { b });
    // Preliminary baseline: the smallest intensity beyond the maximum.
    let beyond: Vec<usize> = if dir > 0 {
        (imax..n).collect()
    } else {
        (0..=imax).collect()
    };
    let pre = beyond.iter().map(|&i| y[i]).fold(f64::INFINITY, f64::min);
    let (lo_f, hi_f) = (o.edge_fractions[0], o.edge_fractions[1]);
    let edge_idx: Vec<usize> = match o.edge_range {
        Some(r) => indices_in(&x, r),
        None => {
            let h = y[imax] - pre;
            let (lo, hi) = (pre + lo_f * h, pre + hi_f * h);
            let mut v = Vec::new();
            let mut i = imax as isize;
            while i >= 0 && (i as usize) < n {
                let yi = y[i as usize];
                if yi < lo {
                    break;
                }
                if yi <= hi {
                    v.push(i as usize);
                }
                i += dir;
            }
            v.sort();
            v
        }
    };
    if edge_idx.len() < 3 {
        return Err(StageError::input(format!(
            "only {} points on the edge: widen edge_fractions or give edge_range",
            edge_idx.len()
        )));
    }
    let ex: Vec<f64> = edge_idx.iter().map(|&i| x[i]).collect();
    let ey: Vec<f64> = edge_idx.iter().map(|&i| y[i]).collect();
    let fit = polyfit(&ex, &ey, None, 1)?;
    let (level, u_level) = match o.baseline_range {
        Some(r) => mean_and_se(&y, &indices_in(&x, r))
            .ok_or_else(|| StageError::input("no points in baseline_range"))?,
        None => {
            // The points strictly beyond where the edge line reaches the lowest
            // intensity beyond the maximum (so no point of the edge itself is used).
            let (x_pre, _) = line_crossing(&fit, pre, 0.0)?;
            let idx: Vec<usize> = (0..n)
                .filter(|&i| if dir > 0 { x[i] > x_pre } else { x[i] < x_pre })
                .collect();
            mean_and_se(&y, &idx).ok_or_else(|| {
                StageError::input("no points beyond the edge for the baseline: give baseline_range")
            })?
        }
    };
    let (position, uncertainty) = line_crossing(&fit, level, u_level)?;
    Ok(Edge {
        position,
        uncertainty,
        fit,
        from: ex[0],
        to: ex[ex.len() - 1],
        points: ex.len(),
        baseline: level,
        top: y[imax],
    })
}

fn with_guide(s: &Spectrum, e: &Edge, name: &str) -> Spectrum {
    let (lo, hi) = (e.position.min(e.from), e.position.max(e.to));
    let mut out = s.clone();
    let y =
        s.x.iter()
            .map(|&v| {
                if v >= lo && v <= hi {
                    e.fit.eval(v)
                } else {
                    f64::NAN
                }
            })
            .collect();
    out.curves.push(Curve {
        name: name.into(),
        role: CurveRole::Guide,
        y,
    });
    out
}

fn edge_records(art: &mut Artifact, prefix: &str, e: &Edge, yu: &str) {
    art.record(Record::number(
        format!("{prefix}_fit_from"),
        e.from,
        None,
        "eV",
    ));
    art.record(Record::number(format!("{prefix}_fit_to"), e.to, None, "eV"));
    art.record(Record::number(
        format!("{prefix}_fit_points"),
        e.points as f64,
        None,
        "",
    ));
    art.record(Record::number(
        format!("{prefix}_baseline"),
        e.baseline,
        None,
        yu,
    ));
}

fn edge_methods(o: &EdgeOptions) -> String {
    let pts = match o.edge_range {
        Some(r) => format!("the points between {} and {} eV", r[0], r[1]),
        None => format!(
            "the points between {} % and {} % of the edge height",
            100.0 * o.edge_fractions[0],
            100.0 * o.edge_fractions[1]
        ),
    };
    let base = match o.baseline_range {
        Some(r) => format!("the mean intensity between {} and {} eV", r[0], r[1]),
        None => "the mean intensity beyond the edge".to_string(),
    };
    format!("a least-squares line through {pts} extrapolated to {base}")
}

/// The Fermi level from the options or the connected reference result.
fn fermi_level(
    inputs: &Inputs,
    given: Option<f64>,
    record: &str,
    scale: Scale,
) -> Result<(f64, f64, &'static str), StageError> {
    if let Some(v) = given {
        return Ok((v, 0.0, "given"));
    }
    if let Some(a) = inputs.optional(1) {
        let (v, u, _) = record_number(a, record)?;
        return Ok((v, u.unwrap_or(0.0), "metal reference"));
    }
    match scale {
        Scale::Binding => Ok((0.0, 0.0, "zero of the binding-energy scale")),
        _ => Err(StageError::input(
            "on a kinetic-energy axis the Fermi level is needed: give fermi_level or connect a metal reference result",
        )),
    }
}

pub const CAHEN_KAHN: Reference = Reference {
    key: "cahen2003",
    citation: "D. Cahen, A. Kahn, Electron energetics at surfaces and interfaces: concepts and experiments, Adv. Mater. 15 (2003) 271–277.",
};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct WorkFunctionOptions {
    /// Photon energy hν of the source (e.g. the He I line); required.
    #[schemars(extend("x-unit" = "eV"))]
    pub photon_energy: Option<f64>,
    /// Fermi level on the spectrum's axis; else the connected reference's result, else 0
    /// on a binding-energy axis.
    #[schemars(extend("x-unit" = "eV"))]
    pub fermi_level: Option<f64>,
    /// Name of the Fermi-level result of the connected metal reference.
    pub fermi_record: String,
    /// How the cutoff edge is found and extrapolated.
    pub edge: EdgeOptions,
}

impl Default for WorkFunctionOptions {
    fn default() -> Self {
        WorkFunctionOptions {
            photon_energy: None,
            fermi_level: None,
            fermi_record: "fermi_level".into(),
            edge: EdgeOptions::default(),
        }
    }
}

pub struct WorkFunction;

static WF_INPUTS: &[Port] = &[
    Port::each(
        "spectrum",
        Kind::Spectrum,
        "a UPS spectrum including the secondary-electron cutoff",
    ),
    Port::each(
        "fermi",
        Kind::Any,
        "a metal reference result holding the Fermi level",
    )
    .optional(),
];

impl TypedStage for WorkFunction {
    type Options = WorkFunctionOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "ups.work_function",
        version: 1,
        summary: "Work function from the secondary-electron cutoff by linear extrapolation",
        inputs: WF_INPUTS,
        output: Kind::Spectrum,
        references: &[CAHEN_KAHN, quant_util::GUM],
    };

    fn check(&self, o: &WorkFunctionOptions) -> Result<(), OptionError> {
        match o.photon_energy {
            Some(h) => quant_util::check_positive("photon_energy", h)?,
            None => {
                return Err(OptionError::new(
                    "photon_energy",
                    "give the photon energy hν in eV",
                ))
            }
        }
        check_edge(&o.edge)
    }

    fn methods(&self, o: &WorkFunctionOptions) -> String {
        let ef = match o.fermi_level {
            Some(v) => format!("a Fermi level of {v} eV"),
            None => {
                "the Fermi level of the metal reference (or the zero of the binding-energy scale)"
                    .into()
            }
        };
        format!(
            "The work function was calculated as φ = hν − |E_cutoff − E_F| with hν = {} eV and {ef}, the secondary-electron cutoff located by {} [cahen2003], with the uncertainty from the line fit [jcgm2008].",
            o.photon_energy.unwrap_or(f64::NAN),
            edge_methods(&o.edge)
        )
    }

    fn run(&self, inputs: &Inputs, o: &WorkFunctionOptions) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let hv = o
            .photon_energy
            .ok_or_else(|| StageError::input("photon_energy is required"))?;
        let scale = scale_of(s, o.edge.scale)?;
        let dir = if scale == Scale::Binding { 1 } else { -1 };
        let e = extrapolate_edge(s, &o.edge, dir)?;
        let (ef, uef, ef_src) = fermi_level(inputs, o.fermi_level, &o.fermi_record, scale)?;
        let width = (e.position - ef).abs();
        let phi = hv - width;
        let u = (e.uncertainty.powi(2) + uef * uef).sqrt();
        let mut art = Artifact::new(Value::Spectrum(with_guide(s, &e, "cutoff line")));
        art.record(Record::number("work_function", phi, Some(u), "eV"));
        art.record(Record::number(
            "cutoff",
            e.position,
            Some(e.uncertainty),
            "eV",
        ));
        art.record(Record::number("fermi_level", ef, Some(uef), "eV"));
        art.record(Record::text("fermi_level_source", ef_src));
        art.record(Record::number("photon_energy", hv, None, "eV"));
        edge_records(&mut art, "cutoff", &e, &s.y_axis.unit);
        if !(1.0..=7.0).contains(&phi) {
            art.warn(format!(
                "work function {phi:.2} eV is outside 1–7 eV: check the Fermi level and scale"
            ));
        }
        Ok(art)
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct VbmOptions {
    /// Fermi level on the spectrum's axis; else the connected reference's result, else 0
    /// on a binding-energy axis.
    #[schemars(extend("x-unit" = "eV"))]
    pub fermi_level: Option<f64>,
    /// Name of the Fermi-level result of the connected metal reference.
    pub fermi_record: String,
    /// How the leading edge is found and extrapolated (give search_range around the
    /// top of the valence band).
    pub edge: EdgeOptions,
}

impl Default for VbmOptions {
    fn default() -> Self {
        VbmOptions {
            fermi_level: None,
            fermi_record: "fermi_level".into(),
            edge: EdgeOptions::default(),
        }
    }
}

pub struct ValenceBandMaximum;

impl TypedStage for ValenceBandMaximum {
    type Options = VbmOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "ups.valence_band_maximum",
        version: 1,
        summary: "Valence-band maximum by linear extrapolation of the leading edge",
        inputs: WF_INPUTS,
        output: Kind::Spectrum,
        references: &[CAHEN_KAHN, quant_util::GUM],
    };

    fn check(&self, o: &VbmOptions) -> Result<(), OptionError> {
        check_edge(&o.edge)
    }

    fn methods(&self, o: &VbmOptions) -> String {
        format!(
            "The valence-band maximum was located by {} [cahen2003], with the uncertainty from the line fit [jcgm2008].",
            edge_methods(&o.edge)
        )
    }

    fn run(&self, inputs: &Inputs, o: &VbmOptions) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let scale = scale_of(s, o.edge.scale)?;
        // The leading edge faces the Fermi level: lower binding, higher kinetic energy.
        let dir = if scale == Scale::Binding { -1 } else { 1 };
        let e = extrapolate_edge(s, &o.edge, dir)?;
        let mut art = Artifact::new(Value::Spectrum(with_guide(s, &e, "leading-edge line")));
        art.record(Record::number(
            "valence_band_maximum",
            e.position,
            Some(e.uncertainty),
            "eV",
        ));
        if let Ok((ef, uef, src)) = fermi_level(inputs, o.fermi_level, &o.fermi_record, scale) {
            let d = (e.position - ef).abs();
            art.record(Record::number(
                "vbm_below_fermi",
                d,
                Some((e.uncertainty.powi(2) + uef * uef).sqrt()),
                "eV",
            ));
            art.record(Record::text("fermi_level_source", src));
        }
        edge_records(&mut art, "edge", &e, &s.y_axis.unit);
        if o.edge.search_range.is_none() && o.edge.edge_range.is_none() {
            art.warn("no search_range or edge_range: the leading edge was taken next to the spectrum's overall maximum");
        }
        Ok(art)
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct FermiOptions {
    /// Energy range whose mean intensity is the level just inside the metal's occupied
    /// states (below E_F); the intensity maximum next to the edge when absent.
    #[schemars(extend("x-unit" = "eV"))]
    pub plateau_range: Option<[f64; 2]>,
    /// How the Fermi edge is found and fitted (give search_range around the edge).
    pub edge: EdgeOptions,
}

pub struct FermiLevel;

static FERMI_INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "a UPS or XPS spectrum of a clean metal reference across its Fermi edge",
)];

impl TypedStage for FermiLevel {
    type Options = FermiOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "ups.fermi_level",
        version: 1,
        summary: "Fermi level of a metal reference at the half height of its Fermi edge",
        inputs: FERMI_INPUTS,
        output: Kind::Spectrum,
        references: &[CAHEN_KAHN, quant_util::GUM],
    };

    fn check(&self, o: &FermiOptions) -> Result<(), OptionError> {
        check_range("plateau_range", o.plateau_range)?;
        check_edge(&o.edge)
    }

    fn methods(&self, o: &FermiOptions) -> String {
        let top = match o.plateau_range {
            Some(r) => format!("the mean intensity between {} and {} eV", r[0], r[1]),
            None => "the intensity maximum next to the edge".to_string(),
        };
        format!(
            "The Fermi level of the metal reference was taken where the Fermi edge (fitted by {}) reaches half the height between the baseline and {top}, where the Fermi–Dirac occupancy is 1/2 (common practice) [cahen2003], with the uncertainty from the line fit [jcgm2008].",
            edge_methods(&o.edge)
        )
    }

    fn run(&self, inputs: &Inputs, o: &FermiOptions) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let scale = scale_of(s, o.edge.scale)?;
        // Occupied states lie at higher binding / lower kinetic energy than E_F.
        let dir = if scale == Scale::Binding { -1 } else { 1 };
        let e = extrapolate_edge(s, &o.edge, dir)?;
        let (top, u_top) = match o.plateau_range {
            Some(r) => mean_and_se(&s.y, &indices_in(&s.x, r))
                .ok_or_else(|| StageError::input("no points in plateau_range"))?,
            None => (e.top, 0.0),
        };
        let mid = 0.5 * (e.baseline + top);
        let (ef, u) = line_crossing(&e.fit, mid, 0.5 * u_top)?;
        let mut art = Artifact::new(Value::Spectrum(with_guide(s, &e, "Fermi-edge line")));
        art.record(Record::number("fermi_level", ef, Some(u), "eV"));
        art.record(Record::number("half_height", mid, None, &s.y_axis.unit));
        edge_records(&mut art, "edge", &e, &s.y_axis.unit);
        Ok(art)
    }
}
