//! `calibration.curve`: a straight-line or quadratic calibration through standards,
//! with inverse prediction of the unknowns and detection/quantification limits.
//!
//! Method: ordinary or weighted (w = 1/σ² of the responses) least squares, solved by
//! SVD on a centred abscissa (see `quant_util::polyfit`); standard errors from the
//! covariance s²(XᵀWX)⁻¹. Inverse prediction x0 solves f(x0) = ȳ0 (the mean of m
//! replicate responses) and its standard uncertainty is propagated to first order,
//! u²(x0) = [u²(ȳ0) + gᵀ C g] / f'(x0)², with g = (1, x0, x0²); for the straight line
//! this is exactly the expression of ISO 8466-1:1990 and Miller & Miller,
//! s_x0 = (s/b)·√(1/m + 1/n + (ȳ0 − ȳ)²/(b² Σ(xi − x̄)²)). The limits are
//! LOD = 3.3·s/b and LOQ = 10·s/b with s the residual standard deviation and b the slope
//! at zero (ICH Q2(R1), section on detection limit "based on the standard deviation of
//! the response and the slope"). Uncertainties are standard (k = 1).

use crate::quant_util::{self, polyfit, unit_ratio, PolyFit};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Record, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Model {
    /// response = intercept + slope·x
    #[default]
    Line,
    /// response = intercept + slope·x + curvature·x²
    Quadratic,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Weighting {
    /// Ordinary least squares: every standard counts the same.
    #[default]
    None,
    /// Weighted least squares with w = 1/σ², σ the uncertainty of each response record.
    InverseVariance,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Name of the result record of each item that holds the measured response
    /// (e.g. `absorbance_at_max`, `area`).
    pub response: String,
    /// Known value of each standard, by item name; items not listed are unknowns.
    pub standards: BTreeMap<String, f64>,
    /// Unit of the known values (and of the predicted values), e.g. `mg/L`.
    pub unit: String,
    /// Calibration model.
    pub model: Model,
    /// Ordinary or weighted least squares.
    pub weighting: Weighting,
    /// Number of replicate measurements averaged in each unknown's response (m in the
    /// inverse-prediction formula).
    pub replicates: u32,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            response: String::new(),
            standards: BTreeMap::new(),
            unit: String::new(),
            model: Model::Line,
            weighting: Weighting::None,
            replicates: 1,
        }
    }
}

pub struct CalibrationCurve;

static INPUTS: &[Port] = &[Port::gather(
    "items",
    Kind::Any,
    "every standard and unknown, each carrying the response record",
)
.records_only()];

pub const ISO8466: Reference = Reference {
    key: "iso8466",
    citation: "ISO 8466-1:1990, Water quality — Calibration and evaluation of analytical methods and estimation of performance characteristics — Part 1: Statistical evaluation of the linear calibration function, International Organization for Standardization, Geneva, 1990.",
};
pub const MILLER: Reference = Reference {
    key: "miller2018",
    citation: "J. N. Miller, J. C. Miller, Statistics and Chemometrics for Analytical Chemistry, 7th ed., Pearson, Harlow, 2018, chapter 5.",
};
pub const ICH: Reference = Reference {
    key: "ichq2r1",
    citation: "ICH Harmonised Tripartite Guideline Q2(R1), Validation of Analytical Procedures: Text and Methodology, International Conference on Harmonisation, 2005.",
};

impl TypedStage for CalibrationCurve {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "calibration.curve",
        version: 1,
        summary: "Straight-line or quadratic calibration through standards, inverse prediction of unknowns, LOD and LOQ",
        inputs: INPUTS,
        output: Kind::Table,
        references: &[ISO8466, MILLER, ICH, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.response.is_empty() {
            return Err(OptionError::new(
                "response",
                "name the result record that holds the response (e.g. response: absorbance_at_max)",
            ));
        }
        let need = match o.model {
            Model::Line => 3,
            Model::Quadratic => 4,
        };
        if o.standards.len() < need {
            return Err(OptionError::new(
                "standards",
                format!(
                    "a {} calibration needs at least {need} standards (got {})",
                    model_word(o.model),
                    o.standards.len()
                ),
            ));
        }
        if let Some((k, v)) = o.standards.iter().find(|(_, v)| !v.is_finite()) {
            return Err(OptionError::new(
                format!("standards.{k}"),
                format!("not a finite number: {v}"),
            ));
        }
        if o.replicates == 0 {
            return Err(OptionError::new(
                "replicates",
                "replicates must be at least 1",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let w = match o.weighting {
            Weighting::None => "ordinary least squares",
            Weighting::InverseVariance => {
                "weighted least squares (weights 1/σ² from the response uncertainties)"
            }
        };
        format!(
            "A {} calibration of the response '{}' against {} standards was fitted by {w}; unknowns were predicted by inverting the curve with first-order standard uncertainties for the mean of {} replicate measurement(s) [iso8466] [miller2018] [jcgm2008], and the limits of detection and quantification were taken as 3.3·s/b and 10·s/b with s the residual standard deviation and b the slope [ichq2r1].",
            model_word(o.model),
            o.response,
            o.standards.len(),
            o.replicates
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let items = inputs.many(0);
        for k in o.standards.keys() {
            if !items.iter().any(|(i, _)| i == k) {
                return Err(StageError::input(format!(
                    "standard '{k}' is not among the items ({})",
                    items.iter().map(|(i, _)| *i).collect::<Vec<_>>().join(", ")
                )));
            }
        }
        let mut rows = Vec::new();
        let mut y_unit = String::new();
        for (item, a) in &items {
            let (v, u, unit) = quant_util::record_number(a, &o.response)
                .map_err(|e| StageError::input(format!("item '{item}': {e}")))?;
            y_unit = unit;
            rows.push((item.to_string(), o.standards.get(*item).copied(), v, u));
        }
        let std_rows: Vec<_> = rows.iter().filter(|r| r.1.is_some()).collect();
        let x: Vec<f64> = std_rows.iter().filter_map(|r| r.1).collect();
        let y: Vec<f64> = std_rows.iter().map(|r| r.2).collect();
        let weights = match o.weighting {
            Weighting::None => None,
            Weighting::InverseVariance => Some(
                std_rows
                    .iter()
                    .map(|r| match r.3 {
                        Some(u) if u > 0.0 => Ok(1.0 / (u * u)),
                        _ => Err(StageError::input(format!(
                            "weighted calibration: standard '{}' has no positive response uncertainty",
                            r.0
                        ))),
                    })
                    .collect::<Result<Vec<_>, _>>()?,
            ),
        };
        let deg = match o.model {
            Model::Line => 1,
            Model::Quadratic => 2,
        };
        let fit = polyfit(&x, &y, weights.as_deref(), deg)?;
        let s = fit.residual_sd;
        let slope = fit.coef[1];
        if slope == 0.0 {
            return Err(StageError::numeric("the calibration slope is zero"));
        }
        let xu = o.unit.as_str();
        let slope_unit = unit_ratio(&y_unit, xu);
        let mut recs = vec![
            Record::number("intercept", fit.coef[0], Some(fit.stderr(0)), &y_unit),
            Record::number("slope", slope, Some(fit.stderr(1)), &slope_unit),
        ];
        if deg == 2 {
            let cu = unit_ratio(&y_unit, &format!("{xu}²"));
            recs.push(Record::number(
                "curvature",
                fit.coef[2],
                Some(fit.stderr(2)),
                &cu,
            ));
        }
        let corr = fit.cov[0][1] / (fit.stderr(0) * fit.stderr(1));
        recs.push(Record::number(
            "correlation_intercept_slope",
            corr,
            None,
            "",
        ));
        recs.push(Record::number("residual_sd", s, None, &y_unit));
        recs.push(Record::number("r_squared", fit.r_squared, None, ""));
        recs.push(Record::number("standards_count", x.len() as f64, None, ""));
        recs.push(Record::number("lod", 3.3 * s / slope.abs(), None, xu));
        recs.push(Record::number("loq", 10.0 * s / slope.abs(), None, xu));

        let (xmin, xmax) = x
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                (a.min(*v), b.max(*v))
            });
        let mut art = Artifact::new(Value::Summary);
        let mut col_item = Vec::new();
        let mut col_role = Vec::new();
        let (mut col_known, mut col_resp, mut col_resp_u) = (Vec::new(), Vec::new(), Vec::new());
        let (mut col_pred, mut col_pred_u, mut col_resid) = (Vec::new(), Vec::new(), Vec::new());
        for (item, known, resp, ru) in &rows {
            col_item.push(item.clone());
            col_resp.push(*resp);
            col_resp_u.push(ru.unwrap_or(f64::NAN));
            match known {
                Some(k) => {
                    col_role.push("standard".to_string());
                    col_known.push(*k);
                    col_resid.push(resp - fit.eval(*k));
                    col_pred.push(f64::NAN);
                    col_pred_u.push(f64::NAN);
                }
                None => {
                    col_role.push("unknown".to_string());
                    col_known.push(f64::NAN);
                    col_resid.push(f64::NAN);
                    let var_y0 = match o.weighting {
                        Weighting::None => s * s / o.replicates as f64,
                        Weighting::InverseVariance => match ru {
                            Some(u) if *u > 0.0 => s * s * u * u / o.replicates as f64,
                            _ => {
                                return Err(StageError::input(format!(
                                    "weighted calibration: unknown '{item}' has no response uncertainty"
                                )))
                            }
                        },
                    };
                    let (x0, u0) = inverse_predict(&fit, *resp, var_y0, xmin, xmax)
                        .map_err(|e| StageError::input(format!("item '{item}': {e}")))?;
                    if x0 < xmin || x0 > xmax {
                        art.warn(format!(
                            "{item}: predicted {x0:.4} {xu} lies outside the calibrated range [{xmin}, {xmax}]"
                        ));
                    }
                    recs.push(Record::number(
                        format!("predicted.{item}"),
                        x0,
                        Some(u0),
                        xu,
                    ));
                    col_pred.push(x0);
                    col_pred_u.push(u0);
                }
            }
        }
        let num = |name: &str, unit: &str, v: Vec<f64>, u: Option<Vec<f64>>| Column {
            name: name.into(),
            unit: unit.into(),
            data: ColumnData::Number {
                values: v,
                uncertainty: u,
            },
        };
        let text = |name: &str, v: Vec<String>| Column {
            name: name.into(),
            unit: String::new(),
            data: ColumnData::Text(v),
        };
        let table = Table {
            title: format!("Calibration of {}", o.response),
            columns: vec![
                text("item", col_item),
                text("role", col_role),
                num("known", xu, col_known, None),
                num(&o.response, &y_unit, col_resp, Some(col_resp_u)),
                num("residual", &y_unit, col_resid, None),
                num("predicted", xu, col_pred, Some(col_pred_u)),
            ],
        };
        art.value = Value::Table(table);
        art.results = recs;
        if fit.r_squared < 0.99 {
            art.warn(format!(
                "R² = {:.4} is below 0.99: check the linearity of the calibration",
                fit.r_squared
            ));
        }
        Ok(art)
    }
}

fn model_word(m: Model) -> &'static str {
    match m {
        Model::Line => "straight-line",
        Model::Quadratic => "quadratic",
    }
}

/// Solves f(x0) = y0 (for the quadratic, the root inside or nearest the calibrated
/// range) and propagates u²(x0) = [var_y0 + gᵀCg]/f'(x0)².
pub fn inverse_predict(
    fit: &PolyFit,
    y0: f64,
    var_y0: f64,
    xmin: f64,
    xmax: f64,
) -> Result<(f64, f64), StageError> {
    let c = &fit.coef;
    let x0 = if c.len() == 2 {
        (y0 - c[0]) / c[1]
    } else {
        let (a, b, cc) = (c[2], c[1], c[0] - y0);
        if a == 0.0 {
            -cc / b
        } else {
            let disc = b * b - 4.0 * a * cc;
            if disc < 0.0 {
                return Err(StageError::input(format!(
                    "the response {y0} is not reached by the quadratic calibration"
                )));
            }
            // Numerically stable pair of roots.
            let q = -0.5 * (b + b.signum() * disc.sqrt());
            let r1 = q / a;
            let r2 = if q != 0.0 { cc / q } else { r1 };
            let mid = 0.5 * (xmin + xmax);
            let dist = |r: f64| {
                if r >= xmin && r <= xmax {
                    0.0
                } else {
                    (r - mid).abs()
                }
            };
            if dist(r1) <= dist(r2) {
                r1
            } else {
                r2
            }
        }
    };
    let d = fit.derivative(x0);
    if d == 0.0 {
        return Err(StageError::numeric(
            "the calibration curve is flat at the prediction",
        ));
    }
    let var = (var_y0 + fit.curve_variance(x0)) / (d * d);
    let x0 = quant_util::finite("predicted value", x0)?;
    Ok((x0, var.max(0.0).sqrt()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::PortValue;

    fn item(v: f64, u: Option<f64>) -> Artifact {
        Artifact::new(Value::Summary).with_results(vec![Record::number("a", v, u, "AU")])
    }

    #[test]
    fn inverse_prediction_matches_the_miller_expression() {
        // Miller & Miller, eq. for s_x0 (straight line), evaluated directly here.
        let xs = [0.0, 2.0, 4.0, 6.0, 8.0, 10.0];
        let ys = [0.05, 0.21, 0.39, 0.58, 0.76, 0.96];
        let mut arts: Vec<(String, Artifact)> = xs
            .iter()
            .zip(&ys)
            .enumerate()
            .map(|(i, (_, y))| (format!("s{i}"), item(*y, None)))
            .collect();
        arts.push(("u1".into(), item(0.5, None)));
        let o = Options {
            response: "a".into(),
            standards: (0..6).map(|i| (format!("s{i}"), xs[i])).collect(),
            unit: "mg/L".into(),
            replicates: 3,
            ..Options::default()
        };
        let many: Vec<(&str, &Artifact)> = arts.iter().map(|(n, a)| (n.as_str(), a)).collect();
        let inputs = Inputs {
            item: None,
            ports: vec![PortValue::Many(many)],
        };
        let out = CalibrationCurve.run(&inputs, &o).unwrap();
        let b = out.result("slope").unwrap().as_number().unwrap();
        let a = out.result("intercept").unwrap().as_number().unwrap();
        let s = out.result("residual_sd").unwrap().as_number().unwrap();
        let p = out.result("predicted.u1").unwrap();
        let ybar = ys.iter().sum::<f64>() / 6.0;
        let sxx: f64 = xs.iter().map(|x| (x - 5.0f64).powi(2)).sum();
        let expect =
            (s / b) * (1.0 / 3.0 + 1.0 / 6.0 + (0.5 - ybar).powi(2) / (b * b * sxx)).sqrt();
        assert!((p.as_number().unwrap() - (0.5 - a) / b).abs() < 1e-12);
        assert!((p.uncertainty.unwrap() - expect).abs() < 1e-12);
        let lod = out.result("lod").unwrap().as_number().unwrap();
        assert!((lod - 3.3 * s / b).abs() < 1e-12);
    }

    #[test]
    fn weight_two_equals_a_duplicated_standard() {
        // Weighted least squares with w = 1/σ²: a standard with σ = 1/√2 (weight 2)
        // gives the same coefficients as ordinary least squares with it listed twice.
        let xs = [1.0, 2.0, 3.0, 4.0, 5.0];
        let ys = [2.1, 3.9, 6.2, 7.8, 10.3];
        let mut arts: Vec<(String, Artifact)> = (0..5)
            .map(|i| {
                let u = if i == 2 { 0.5f64.sqrt() } else { 1.0 };
                (format!("s{i}"), item(ys[i], Some(u)))
            })
            .collect();
        arts.push(("zz".into(), item(5.0, Some(1.0))));
        let many: Vec<(&str, &Artifact)> = arts.iter().map(|(n, a)| (n.as_str(), a)).collect();
        let o = Options {
            response: "a".into(),
            standards: (0..5).map(|i| (format!("s{i}"), xs[i])).collect(),
            weighting: Weighting::InverseVariance,
            ..Options::default()
        };
        let out = CalibrationCurve
            .run(
                &Inputs {
                    item: None,
                    ports: vec![PortValue::Many(many)],
                },
                &o,
            )
            .unwrap();
        let dup = polyfit(
            &[1.0, 2.0, 3.0, 3.0, 4.0, 5.0],
            &[2.1, 3.9, 6.2, 6.2, 7.8, 10.3],
            None,
            1,
        )
        .unwrap();
        let b = out.result("slope").unwrap().as_number().unwrap();
        let a = out.result("intercept").unwrap().as_number().unwrap();
        assert!((b - dup.coef[1]).abs() < 1e-12 && (a - dup.coef[0]).abs() < 1e-12);
        assert!(out.result("predicted.zz").unwrap().uncertainty.unwrap() > 0.0);
    }

    #[test]
    fn too_few_standards_are_refused() {
        let o = Options {
            response: "a".into(),
            standards: [("a".to_string(), 1.0)].into_iter().collect(),
            ..Options::default()
        };
        assert!(CalibrationCurve.check(&o).is_err());
    }
}
