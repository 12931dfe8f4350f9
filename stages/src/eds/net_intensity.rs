//! `eds.net_intensity`: net counts of characteristic lines in energy windows.
//!
//! Method: the gross counts G = Σ y in the window; the background B is either the sum
//! of the spectrum's Background curve over the window (σ²(N) = G + B, both Poisson —
//! common practice), or a straight line through the mean counts per channel of two side
//! windows of width `side_width` just outside the window (Goldstein et al., Scanning
//! Electron Microscopy and X-Ray Microanalysis, 4th ed., 2018, ch. 19), whose
//! variance follows from the Poisson variance of the side-window counts. Net N = G − B.

use crate::quant_util::{check_positive, check_range, indices_in};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, CurveRole, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Background {
    /// The Background curve when the spectrum has one, else side windows.
    #[default]
    Auto,
    /// The spectrum's Background curve (an error when there is none).
    Curve,
    /// A straight line through two side windows.
    SideWindows,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Line windows: name → [low, high] energy.
    #[schemars(extend("x-unit" = "keV"))]
    pub windows: BTreeMap<String, [f64; 2]>,
    /// Where the background comes from.
    pub background: Background,
    /// Width of each side window for the linear background.
    #[schemars(extend("x-unit" = "keV"))]
    pub side_width: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            windows: BTreeMap::new(),
            background: Background::Auto,
            side_width: 0.1,
        }
    }
}

pub struct NetIntensity;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "an energy-calibrated EDS spectrum in counts",
)];

pub const GOLDSTEIN: Reference = Reference {
    key: "goldstein2018",
    citation: "J. I. Goldstein, D. E. Newbury, J. R. Michael, N. W. M. Ritchie, J. H. J. Scott, D. C. Joy, Scanning Electron Microscopy and X-Ray Microanalysis, 4th ed., Springer, New York, 2018.",
};

impl TypedStage for NetIntensity {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "eds.net_intensity",
        version: 1,
        summary: "Net line counts in energy windows over a background, with Poisson uncertainty",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[GOLDSTEIN],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.windows.is_empty() {
            return Err(OptionError::new(
                "windows",
                "give at least one window, e.g. windows: { fe_ka: [6.25, 6.55] }",
            ));
        }
        for (k, r) in &o.windows {
            check_range(&format!("windows.{k}"), Some(*r))?;
        }
        check_positive("side_width", o.side_width)
    }

    fn methods(&self, o: &Options) -> String {
        let w: Vec<String> = o
            .windows
            .iter()
            .map(|(k, r)| format!("{k} ({}–{} keV)", r[0], r[1]))
            .collect();
        let bg = match o.background {
            Background::Curve => "the fitted background curve".to_string(),
            Background::SideWindows => format!("a straight line through two {} keV side windows", o.side_width),
            Background::Auto => format!("the fitted background curve where present, else a straight line through two {} keV side windows", o.side_width),
        };
        format!(
            "Net intensities of {} were obtained as the gross counts minus {bg}, with Poisson standard uncertainties [goldstein2018].",
            w.join(", ")
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        if s.x_axis.unit != "keV" {
            return Err(StageError::input(format!(
                "the x axis must be energy in keV (it is '{}')",
                s.x_axis.unit
            )));
        }
        if s.y.iter().any(|v| *v < 0.0) {
            return Err(StageError::input(
                "negative counts: net intensities need raw counts",
            ));
        }
        let curve = s.curve(CurveRole::Background);
        let use_curve = match o.background {
            Background::Curve => {
                if curve.is_none() {
                    return Err(StageError::input(
                        "background: curve, but the spectrum has no Background curve",
                    ));
                }
                true
            }
            Background::SideWindows => false,
            Background::Auto => curve.is_some(),
        };
        let mut art = Artifact::new(Value::Summary);
        for (name, r) in &o.windows {
            let idx = indices_in(&s.x, *r);
            if idx.is_empty() {
                return Err(StageError::input(format!(
                    "window {name} holds no channels"
                )));
            }
            let g: f64 = idx.iter().map(|&i| s.y[i]).sum();
            let (b, var_b) = match (use_curve, curve) {
                (true, Some(c)) => {
                    let b: f64 = idx
                        .iter()
                        .map(|&i| if c.y[i].is_finite() { c.y[i] } else { 0.0 })
                        .sum();
                    (b, b.max(0.0))
                }
                _ => {
                    let left = indices_in(&s.x, [r[0] - o.side_width, r[0]])
                        .into_iter()
                        .filter(|i| !idx.contains(i))
                        .collect::<Vec<_>>();
                    let right = indices_in(&s.x, [r[1], r[1] + o.side_width])
                        .into_iter()
                        .filter(|i| !idx.contains(i))
                        .collect::<Vec<_>>();
                    if left.is_empty() || right.is_empty() {
                        return Err(StageError::input(format!(
                            "window {name}: a side window holds no channels"
                        )));
                    }
                    let mean =
                        |v: &[usize]| v.iter().map(|&i| s.y[i]).sum::<f64>() / v.len() as f64;
                    let centre =
                        |v: &[usize]| v.iter().map(|&i| s.x[i]).sum::<f64>() / v.len() as f64;
                    let (ml, mr, xl, xr) =
                        (mean(&left), mean(&right), centre(&left), centre(&right));
                    // B = Σ_i [m_L (x_R − x_i) + m_R (x_i − x_L)]/(x_R − x_L) = c_L m_L + c_R m_R
                    let cl: f64 = idx.iter().map(|&i| (xr - s.x[i]) / (xr - xl)).sum();
                    let cr: f64 = idx.iter().map(|&i| (s.x[i] - xl) / (xr - xl)).sum();
                    // var(m) = Σ counts / n² (Poisson).
                    let vl = ml / left.len() as f64;
                    let vr = mr / right.len() as f64;
                    (cl * ml + cr * mr, cl * cl * vl + cr * cr * vr)
                }
            };
            let net = g - b;
            let u = (g + var_b).sqrt();
            art.record(Record::number(
                format!("net.{name}"),
                net,
                Some(u),
                "counts",
            ));
            art.record(Record::number(
                format!("gross.{name}"),
                g,
                Some(g.sqrt()),
                "counts",
            ));
            art.record(Record::number(
                format!("background.{name}"),
                b,
                Some(var_b.sqrt()),
                "counts",
            ));
            if net <= 3.0 * var_b.sqrt() {
                art.warn(format!("{name}: net counts {net:.0} are not above three times the background's standard deviation"));
            }
        }
        art.record(Record::text(
            "background_method",
            if use_curve {
                "background curve"
            } else {
                "linear, side windows"
            },
        ));
        Ok(art)
    }
}
