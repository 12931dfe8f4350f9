//! Fitting a spectrum: the fit window, weights, background, start values, the solve,
//! and the covariance-based uncertainties of parameters and derived peak quantities.

use super::guess::{height_and_width, maxima};
use super::model::{Background, FitProblem, Model, ModelParam, PeakTerm, Source};
use super::shapes::{gauss_fwhm_per_sigma, Shape};
use super::solver::{inverse_normal_matrix, solve, Bounds, Settings};
use super::spec::{BackgroundChoice, FitSpec, Layout, Weights};
use crate::stage::StageError;
use crate::value::{
    Curve, CurveRole, FitParameter, FitResult, FitStatistics, FittedPeak, Measurement, Note,
    NoteLevel, ParameterStatus, Spectrum,
};
use nalgebra::DMatrix;

/// Reduced χ² outside this interval draws a warning when the fit is weighted
/// (a rule of thumb, common practice: for a good model and right σ it is near 1).
pub const REDUCED_CHI_SQUARE_OK: [f64; 2] = [0.5, 2.0];

/// A fit result with the notes a reader must see and what was used.
#[derive(Clone, Debug)]
pub struct FitOutcome {
    pub result: FitResult,
    pub notes: Vec<Note>,
    /// The background actually used, in words.
    pub background: String,
    /// The weighting actually used, in words.
    pub weighting: String,
    /// Lowest and highest x of the fitted points.
    pub range: [f64; 2],
}

/// Fits the spectrum as the spec says. A fit that stops before converging still returns
/// a result (with `converged` false); see [`fit_spectrum_with_notes`] for the warnings.
pub fn fit_spectrum(s: &Spectrum, spec: &FitSpec) -> Result<FitResult, StageError> {
    Ok(fit_spectrum_with_notes(s, spec)?.result)
}

fn warn(notes: &mut Vec<Note>, text: String) {
    notes.push(Note {
        level: NoteLevel::Warning,
        text,
    });
}

fn unit_join(a: &str, b: &str, sep: &str) -> String {
    match (a.is_empty(), b.is_empty()) {
        (true, true) => String::new(),
        (false, true) => a.to_string(),
        (true, false) if sep == "/" => format!("1/{b}"),
        (true, false) => b.to_string(),
        (false, false) => format!("{a}{sep}{b}"),
    }
}

/// Moves a start value strictly inside its bounds (a start on a bound would leave the
/// bound transformation with a zero derivative).
fn inside(v: f64, b: Bounds, scale: f64) -> f64 {
    match (b.lo, b.hi) {
        (Some(lo), Some(hi)) => v.clamp(lo + 0.01 * (hi - lo), hi - 0.01 * (hi - lo)),
        (Some(lo), None) if v <= lo => lo + 1e-3 * scale,
        (None, Some(hi)) if v >= hi => hi - 1e-3 * scale,
        _ => v,
    }
}

/// The fit with notes, background and weighting used.
pub fn fit_spectrum_with_notes(s: &Spectrum, spec: &FitSpec) -> Result<FitOutcome, StageError> {
    s.validate()
        .map_err(|m| StageError::input(format!("the spectrum is not valid: {m}")))?;
    let curve = s.curve(CurveRole::Background);
    let choice = match (spec.background, curve) {
        (BackgroundChoice::Auto, Some(_)) => BackgroundChoice::Curve,
        (BackgroundChoice::Auto, None) => BackgroundChoice::Linear,
        (BackgroundChoice::Curve, None) => {
            return Err(StageError::input(
                "background: curve was asked for, but the input carries no background curve (run a background stage first, or choose a fitted background)",
            ))
        }
        (c, _) => c,
    };
    let fitted = match choice {
        BackgroundChoice::Curve | BackgroundChoice::None => BackgroundChoice::None,
        c => c,
    };
    let layout = spec
        .layout(fitted)
        .map_err(|e| StageError::input(format!("option '{}': {}", e.path, e.message)))?;

    // Fit window.
    let idx: Vec<usize> = (0..s.len())
        .filter(|&i| spec.range.is_none_or(|[a, b]| s.x[i] >= a && s.x[i] <= b))
        .collect();
    let x: Vec<f64> = idx.iter().map(|&i| s.x[i]).collect();
    let y_raw: Vec<f64> = idx.iter().map(|&i| s.y[i]).collect();
    // Start values come from the data above the fixed curve; the model includes it.
    let mut y_above = y_raw.clone();
    let mut curve_w = None;
    if choice == BackgroundChoice::Curve {
        // Checked above: there is a curve when the choice is Curve.
        let c = curve.ok_or_else(|| StageError::input("no background curve"))?;
        let cw: Vec<f64> = idx.iter().map(|&i| c.y[i]).collect();
        if let Some(k) = cw.iter().position(|v| !v.is_finite()) {
            return Err(StageError::input(format!(
                "the background curve '{}' is not defined at x = {} inside the fit range; fit a narrower range or recompute the background over it",
                c.name, x[k]
            )));
        }
        for (v, b) in y_above.iter_mut().zip(&cw) {
            *v -= b;
        }
        curve_w = Some(cw);
    }

    // Weights.
    let is_counts = {
        let u = s.y_axis.unit.to_ascii_lowercase();
        u == "counts" || u == "count" || u == "cts" || u == "counts/channel"
    };
    let weights = match spec.weights {
        Weights::Auto if s.sigma.is_some() => Weights::Sigma,
        Weights::Auto if is_counts => Weights::Poisson,
        Weights::Auto => Weights::None,
        w => w,
    };
    let (w, weighting): (Vec<f64>, String) = match weights {
        Weights::Sigma => {
            let sig = s.sigma.as_ref().ok_or_else(|| {
                StageError::input(
                    "weights: sigma was asked for, but the spectrum has no per-point sigma",
                )
            })?;
            let mut w = Vec::with_capacity(idx.len());
            for &i in &idx {
                if !(sig[i] > 0.0 && sig[i].is_finite()) {
                    return Err(StageError::input(format!(
                        "sigma at x = {} is {}; weighting needs positive finite sigma",
                        s.x[i], sig[i]
                    )));
                }
                w.push(1.0 / sig[i]);
            }
            (w, "weighted by the per-point standard uncertainty σ".into())
        }
        Weights::Poisson => (
            y_raw.iter().map(|v| 1.0 / v.max(1.0).sqrt()).collect(),
            "weighted by Poisson σ = √counts (floor 1)".into(),
        ),
        _ => (vec![1.0; idx.len()], "unweighted".into()),
    };
    let weighted = weights != Weights::None;

    // Parameter table.
    let (mut model, starts) = build_model(&layout, fitted, &x)?;
    set_units(&mut model, &s.x_axis.unit, &s.y_axis.unit);
    let n_free = model.n_free;
    if x.len() <= n_free {
        return Err(StageError::input(format!(
            "the fit range holds {} points, too few for {n_free} free parameters",
            x.len()
        )));
    }
    let mut values = starts;
    guess_starts(&layout, &mut model, &mut values, &x, &y_above)?;
    let span = x.iter().cloned().fold(f64::NEG_INFINITY, f64::max)
        - x.iter().cloned().fold(f64::INFINITY, f64::min);
    let mut theta = Vec::with_capacity(n_free);
    let mut bounds = Vec::with_capacity(n_free);
    for (k, p) in model.params.iter().enumerate() {
        if let Source::Free(_) = p.source {
            let scale = if p.unit == s.x_axis.unit && span > 0.0 {
                span
            } else {
                values[k].abs().max(1.0)
            };
            theta.push(inside(values[k], p.bounds, scale));
            bounds.push(p.bounds);
        }
    }
    for (k, p) in model.params.iter_mut().enumerate() {
        p.value = values[k];
    }
    if let Some(cw) = curve_w.clone() {
        model.background = Background::Curve(cw);
    }

    let settings = Settings {
        max_iterations: spec.max_iterations,
        ftol: spec.tolerance,
        xtol: spec.tolerance,
        gtol: spec.tolerance * 1e-3,
    };
    let mut problem = FitProblem::new(&model, &x, &y_raw, &w);
    let sol = solve(&mut problem, &theta, &bounds, settings)
        .map_err(|e| StageError::numeric(format!("the fit could not start: {}", e.0)))?;
    drop(problem);
    let mut vals = vec![0.0; model.params.len()];
    let mut chain = DMatrix::zeros(model.params.len(), n_free);
    let mut scratch = vec![0.0; model.params.len()];
    model
        .resolve(&sol.theta, &mut vals, &mut chain, &mut scratch)
        .map_err(|m| StageError::numeric(format!("the fitted model cannot be evaluated: {m}")))?;

    let mut notes = Vec::new();
    let dof = x.len() - n_free;
    let chi2 = sol.chi_square;
    let red = chi2 / dof as f64;
    let cov: Option<DMatrix<f64>> = if n_free == 0 {
        Some(DMatrix::zeros(0, 0))
    } else {
        inverse_normal_matrix(&sol.jacobian).map(|m| m * red)
    };
    if cov.is_none() {
        warn(
            &mut notes,
            "the covariance matrix is singular (parameters not determined by the data): no standard errors are given".into(),
        );
    }

    let mut parameters = Vec::with_capacity(model.params.len());
    for p in &model.params {
        let k = parameters.len();
        let (status, stderr) = match &p.source {
            Source::Free(j) if sol.at_bound[*j] => {
                warn(
                    &mut notes,
                    format!(
                        "'{}' ended on its bound ({}); its standard error is not meaningful and is not given (derived uncertainties treat it as free)",
                        p.name, vals[k]
                    ),
                );
                (ParameterStatus::AtBound, None)
            }
            Source::Free(j) => (
                ParameterStatus::Free,
                cov.as_ref().map(|c| c[(*j, *j)].max(0.0).sqrt()),
            ),
            Source::Fixed => (ParameterStatus::Fixed, None),
            Source::Tied(_, text) => (ParameterStatus::Tied(text.clone()), None),
        };
        parameters.push(FitParameter {
            name: p.name.clone(),
            value: vals[k],
            stderr,
            unit: p.unit.clone(),
            status,
        });
    }
    let correlation = match &cov {
        Some(c) => {
            let mut out = Vec::with_capacity(n_free * n_free);
            for a in 0..n_free {
                for b in 0..n_free {
                    let d = (c[(a, a)] * c[(b, b)]).sqrt();
                    out.push(if d > 0.0 { c[(a, b)] / d } else { 0.0 });
                }
            }
            out
        }
        None => Vec::new(),
    };

    // Derived peak quantities through the full covariance.
    let xu = &s.x_axis.unit;
    let yu = &s.y_axis.unit;
    let area_unit = unit_join(yu, xu, "·");
    let propagate = |grad_params: &[(usize, f64)]| -> (Vec<f64>, Option<f64>) {
        let mut g = vec![0.0; n_free];
        for &(k, d) in grad_params {
            for (j, gj) in g.iter_mut().enumerate() {
                *gj += d * chain[(k, j)];
            }
        }
        let var = cov.as_ref().map(|c| {
            let mut v = 0.0;
            for a in 0..n_free {
                for b in 0..n_free {
                    v += g[a] * c[(a, b)] * g[b];
                }
            }
            v
        });
        (g, var.map(|v| v.max(0.0).sqrt()).filter(|v| v.is_finite()))
    };
    let mut peaks = Vec::new();
    let mut area_grads = Vec::new();
    for pk in &model.peaks {
        let np = pk.shape.n_params();
        let pv = &vals[pk.offset..pk.offset + np];
        let mut gh = vec![0.0; np];
        let mut gw = vec![0.0; np];
        let height = pk.shape.height(pv, &mut gh);
        let fwhm = pk.shape.fwhm(pv, &mut gw);
        let along = |g: &[f64]| -> Vec<(usize, f64)> {
            g.iter()
                .enumerate()
                .map(|(q, &d)| (pk.offset + q, d))
                .collect()
        };
        let (_, uc) = propagate(&[(pk.offset, 1.0)]);
        let (ga, ua) = propagate(&[(pk.offset + 1, 1.0)]);
        let (_, uw) = propagate(&along(&gw));
        let (_, uh) = propagate(&along(&gh));
        area_grads.push(ga);
        for (v, what) in [
            (pv[0], "centre"),
            (pv[1], "area"),
            (fwhm, "FWHM"),
            (height, "height"),
        ] {
            if !v.is_finite() {
                return Err(StageError::numeric(format!(
                    "the fitted {what} of peak '{}' is not a finite number",
                    pk.name
                )));
            }
        }
        peaks.push(FittedPeak {
            name: pk.name.clone(),
            shape: pk.shape.key().to_string(),
            center: Measurement::new(pv[0], uc, xu.clone()),
            area: Measurement::new(pv[1], ua, area_unit.clone()),
            fwhm: Measurement::new(fwhm, uw, xu.clone()),
            height: Measurement::new(height, uh, yu.clone()),
        });
    }
    let np = peaks.len();
    let mut area_covariance = vec![0.0; np * np];
    if let Some(c) = &cov {
        for a in 0..np {
            for b in 0..np {
                let mut v = 0.0;
                for i in 0..n_free {
                    for j in 0..n_free {
                        v += area_grads[a][i] * c[(i, j)] * area_grads[b][j];
                    }
                }
                area_covariance[a * np + b] = v;
            }
        }
    }

    // Curves on the full grid, NaN outside the fit range.
    let n_all = s.len();
    let mut bg_curve = vec![f64::NAN; n_all];
    let mut comps = vec![vec![f64::NAN; n_all]; np];
    let mut env = vec![f64::NAN; n_all];
    let mut res = vec![f64::NAN; n_all];
    let parts = model.parts_all(&x, &vals);
    for (k, &i) in idx.iter().enumerate() {
        let b = match &curve_w {
            Some(cw) => cw[k],
            None => parts[0][k],
        };
        bg_curve[i] = b;
        let mut total = b;
        for p in 0..np {
            comps[p][i] = parts[p + 1][k];
            total += parts[p + 1][k];
        }
        env[i] = total;
        res[i] = s.y[i] - total;
    }
    let mut spectrum = s.clone();
    spectrum.curves.retain(|c| {
        !matches!(
            c.role,
            CurveRole::Background
                | CurveRole::Component
                | CurveRole::Envelope
                | CurveRole::Residual
        )
    });
    let background_words = match choice {
        BackgroundChoice::Curve => format!(
            "the input background curve '{}', held fixed",
            curve.map_or("background", |c| c.name.as_str())
        ),
        BackgroundChoice::None => "no background".to_string(),
        BackgroundChoice::Exponential => "a fitted exponential background a·exp(−b·x)".to_string(),
        c => {
            let x_ref = match model.background {
                Background::Polynomial { x_ref, .. } => x_ref,
                _ => 0.0,
            };
            format!("a fitted {} background in (x − {x_ref})", c.key())
        }
    };
    if choice != BackgroundChoice::None {
        spectrum.curves.push(Curve {
            name: "background".into(),
            role: CurveRole::Background,
            y: bg_curve,
        });
    }
    for (p, c) in peaks.iter().zip(comps) {
        spectrum.curves.push(Curve {
            name: p.name.clone(),
            role: CurveRole::Component,
            y: c,
        });
    }
    spectrum.curves.push(Curve {
        name: "envelope".into(),
        role: CurveRole::Envelope,
        y: env,
    });
    spectrum.curves.push(Curve {
        name: "residual".into(),
        role: CurveRole::Residual,
        y: res,
    });

    // Statistics.
    let sw: f64 = w.iter().map(|v| v * v).sum();
    let mean = w
        .iter()
        .zip(&y_raw)
        .map(|(wi, yi)| wi * wi * yi)
        .sum::<f64>()
        / sw;
    let ss_tot: f64 = w
        .iter()
        .zip(&y_raw)
        .map(|(wi, yi)| (wi * (yi - mean)).powi(2))
        .sum();
    let r_squared = if ss_tot > 0.0 {
        1.0 - chi2 / ss_tot
    } else if chi2 == 0.0 {
        1.0
    } else {
        0.0
    };
    if !sol.converged {
        warn(
            &mut notes,
            format!(
                "the fit did not converge ({}); its numbers are not reliable",
                sol.reason
            ),
        );
    }
    if weighted && !(REDUCED_CHI_SQUARE_OK[0]..=REDUCED_CHI_SQUARE_OK[1]).contains(&red) {
        warn(
            &mut notes,
            format!(
                "reduced χ² = {red:.3} lies outside [{}, {}] (rule of thumb for a weighted fit): the model or the uncertainties σ do not describe the data well",
                REDUCED_CHI_SQUARE_OK[0], REDUCED_CHI_SQUARE_OK[1]
            ),
        );
    }
    let mut counts: Vec<(Shape, usize)> = Vec::new();
    for p in &model.peaks {
        match counts.iter_mut().find(|(s, _)| *s == p.shape) {
            Some(c) => c.1 += 1,
            None => counts.push((p.shape, 1)),
        }
    }
    let shapes: Vec<String> = counts
        .iter()
        .map(|(s, c)| format!("{c} {} peak{}", s.words(), if *c == 1 { "" } else { "s" }))
        .collect();
    let model_words = format!("{} + {background_words}", shapes.join(" + "));
    let lo = x.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = x.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    Ok(FitOutcome {
        result: FitResult {
            model: model_words,
            parameters,
            correlation,
            peaks,
            area_covariance,
            spectrum,
            statistics: FitStatistics {
                chi_square: chi2,
                reduced_chi_square: red,
                r_squared,
                points: x.len(),
                free_parameters: n_free,
                iterations: sol.iterations,
                converged: sol.converged,
                reason: sol.reason,
                weighted,
            },
        },
        notes,
        background: background_words,
        weighting,
        range: [lo, hi],
    })
}

/// The model and the start values the options give (NaN where the data must say).
fn build_model(
    layout: &Layout,
    fitted: BackgroundChoice,
    x: &[f64],
) -> Result<(Model, Vec<f64>), StageError> {
    if x.is_empty() {
        return Err(StageError::input("no points lie in the fit range"));
    }
    let mut params = Vec::with_capacity(layout.slots.len());
    let mut starts = Vec::with_capacity(layout.slots.len());
    let mut n_free = 0;
    for s in &layout.slots {
        let source = if let Some((e, t)) = &s.link {
            Source::Tied(e.clone(), t.clone())
        } else if s.fixed {
            Source::Fixed
        } else {
            n_free += 1;
            Source::Free(n_free - 1)
        };
        params.push(ModelParam {
            name: s.name.clone(),
            unit: String::new(),
            value: s.value.unwrap_or(f64::NAN),
            bounds: Bounds {
                lo: s.min,
                hi: s.max,
            },
            source,
        });
        starts.push(s.value.unwrap_or(f64::NAN));
    }
    let lo = x.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = x.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    let offset = layout.background_offset;
    let background = match fitted {
        BackgroundChoice::Exponential => Background::Exponential { offset },
        BackgroundChoice::Constant
        | BackgroundChoice::Linear
        | BackgroundChoice::Quadratic
        | BackgroundChoice::Cubic => Background::Polynomial {
            degree: fitted.params().len() - 1,
            x_ref: 0.5 * (lo + hi),
            offset,
        },
        _ => Background::None,
    };
    let peaks = layout
        .peaks
        .iter()
        .map(|(name, shape, offset)| PeakTerm {
            name: name.clone(),
            shape: *shape,
            offset: *offset,
        })
        .collect();
    let mut model = Model {
        params,
        peaks,
        background,
        tie_order: Vec::new(),
        n_free,
    };
    model.order_ties().map_err(StageError::input)?;
    Ok((model, starts))
}

/// Evaluates the links with the values known so far (NaN where still unknown).
fn resolve_links(model: &Model, values: &mut [f64]) {
    for &k in &model.tie_order {
        if let Source::Tied(e, _) = &model.params[k].source {
            values[k] = e.value(&|n| model.index(n), values).unwrap_or(f64::NAN);
        }
    }
}

fn unknown(model: &Model, values: &[f64], k: usize) -> bool {
    values[k].is_nan() && !matches!(model.params[k].source, Source::Tied(..))
}

/// Fills missing start values from the data: background from the ends of the window,
/// centres from the most prominent local maxima not already taken, widths from the
/// half-height crossings, areas from the height; also sets the parameters' units.
fn guess_starts(
    layout: &Layout,
    model: &mut Model,
    values: &mut [f64],
    x: &[f64],
    y: &[f64],
) -> Result<(), StageError> {
    let n = x.len();
    let lo = x.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = x.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    let span = (hi - lo).max(f64::MIN_POSITIVE);
    // Background from the mean of the first and last few points.
    let k = (n / 20).max(3).min(n.div_ceil(2));
    let mean = |r: std::ops::Range<usize>| {
        let m = r.len() as f64;
        let (sx, sy) = r.fold((0.0, 0.0), |(a, b), i| (a + x[i], b + y[i]));
        (sx / m, sy / m)
    };
    let (x1, y1) = mean(0..k);
    let (x2, y2) = mean(n - k..n);
    let off = layout.background_offset;
    let mut bg_start = vec![0.0; model.params.len() - off];
    match model.background {
        Background::Polynomial { degree, x_ref, .. } => {
            if degree == 0 {
                bg_start[0] = y1.min(y2);
            } else {
                let slope = if x2 != x1 { (y2 - y1) / (x2 - x1) } else { 0.0 };
                bg_start[0] = y1 + slope * (x_ref - x1);
                bg_start[1] = slope;
            }
        }
        Background::Exponential { .. } => {
            if y1 > 0.0 && y2 > 0.0 && x1 != x2 {
                let b = (y1 / y2).ln() / (x2 - x1);
                bg_start[0] = y1 * (b * x1).exp();
                bg_start[1] = b;
            } else {
                bg_start[0] = y1.min(y2);
                bg_start[1] = 0.0;
            }
        }
        _ => {}
    }
    for (j, b) in bg_start.iter().enumerate() {
        if unknown(model, values, off + j) {
            values[off + j] = *b;
        }
    }
    // Data above the start background.
    let mut bgv = vec![0.0; model.params.len()];
    bgv[off..].copy_from_slice(&values[off..]);
    let mut yr = y.to_vec();
    let bg_only = Model {
        params: model.params.clone(),
        peaks: Vec::new(),
        background: model.background.clone(),
        tie_order: Vec::new(),
        n_free: model.n_free,
    };
    if !matches!(model.background, Background::None) {
        let parts = bg_only.parts_all(x, &bgv);
        for (v, b) in yr.iter_mut().zip(&parts[0]) {
            if b.is_finite() {
                *v -= b;
            }
        }
    }
    // Centres.
    let mut taken: Vec<f64> = model
        .peaks
        .iter()
        .map(|p| values[p.offset])
        .filter(|v| v.is_finite())
        .collect();
    let step = span / (n.max(2) - 1) as f64;
    let need_centre = model.peaks.iter().any(|p| unknown(model, values, p.offset));
    let found = if need_centre { maxima(&yr) } else { Vec::new() };
    let mut next = found.iter();
    for p in &model.peaks {
        if unknown(model, values, p.offset) {
            let c = loop {
                match next.next() {
                    Some(m) if taken.iter().any(|t| (t - x[m.index]).abs() < 3.0 * step) => continue,
                    Some(m) => break x[m.index],
                    None => {
                        return Err(StageError::input(format!(
                            "no local maximum is left in the fit range to start peak '{}'; give its center",
                            p.name
                        )))
                    }
                }
            };
            values[p.offset] = c;
            taken.push(c);
        }
    }
    resolve_links(model, values);
    // Widths, then areas (which need the widths).
    let ymax = yr.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    for p in &model.peaks {
        let c = values[p.offset];
        if !c.is_finite() {
            return Err(StageError::input(format!(
                "the start centre of peak '{}' cannot be computed; give it",
                p.name
            )));
        }
        let (_, width) = height_and_width(x, &yr, c);
        let fw = width.unwrap_or(span / 10.0).min(span).max(2.0 * step);
        let o = p.offset;
        match p.shape {
            Shape::Voigt => {
                // Equal Gaussian and Lorentzian FWHM a: f_V ≈ (0.5346 + √1.2166)·a (Olivero–Longbothum).
                let a = fw / (0.5346 + (1.0f64 + 0.2166).sqrt());
                if unknown(model, values, o + 2) {
                    values[o + 2] = a / gauss_fwhm_per_sigma();
                }
                if unknown(model, values, o + 3) {
                    values[o + 3] = a / 2.0;
                }
            }
            _ => {
                if unknown(model, values, o + 2) {
                    values[o + 2] = fw;
                }
                if p.shape == Shape::PseudoVoigt && unknown(model, values, o + 3) {
                    values[o + 3] = 0.5;
                }
            }
        }
    }
    resolve_links(model, values);
    for p in &model.peaks {
        let o = p.offset;
        if unknown(model, values, o + 1) {
            let (h, _) = height_and_width(x, &yr, values[o]);
            let h = if h > 0.0 {
                h
            } else {
                0.1 * ymax.abs().max(f64::MIN_POSITIVE)
            };
            let np = p.shape.n_params();
            let mut unit = values[o..o + np].to_vec();
            unit[1] = 1.0;
            let mut g = vec![0.0; np];
            let per_area = p.shape.height(&unit, &mut g);
            values[o + 1] = if per_area > 0.0 && per_area.is_finite() {
                h / per_area
            } else {
                h * span / 10.0
            };
        }
    }
    resolve_links(model, values);
    if let Some(k) = (0..values.len()).find(|&k| !values[k].is_finite()) {
        return Err(StageError::input(format!(
            "no start value could be found for '{}'; give one",
            model.params[k].name
        )));
    }
    Ok(())
}

/// Sets each parameter's unit from the axes.
pub(crate) fn set_units(model: &mut Model, xu: &str, yu: &str) {
    let area = unit_join(yu, xu, "·");
    for p in model.params.iter_mut() {
        let last = p.name.rsplit('.').next().unwrap_or("");
        p.unit = match last {
            "center" | "fwhm" | "sigma" | "gamma" => xu.to_string(),
            "area" => area.clone(),
            "eta" => String::new(),
            "c0" | "a" => yu.to_string(),
            "c1" => unit_join(yu, xu, "/"),
            "b" => unit_join("", xu, "/"),
            "c2" => unit_join(yu, &format!("{xu}²"), "/"),
            "c3" => unit_join(yu, &format!("{xu}³"), "/"),
            _ => String::new(),
        };
    }
}
