//! `fit.peaks`: least-squares fit of Gaussian, Lorentzian, pseudo-Voigt and Voigt peaks
//! on a fitted or fixed background, with bounds, fixed and linked parameters.
//!
//! Method: Levenberg–Marquardt [levenberg1944; marquardt1963] with Marquardt's diagonal
//! scaling kept at its running maximum [more1978] and Nielsen's damping update
//! [nielsen1999]; bounds by the MINUIT transformations [james1975]; analytic Jacobians;
//! the Voigt profile from the Faddeeva function [zaghloul2011; weideman1994] and its FWHM from
//! [olivero1977]. Standard errors are the square roots of the diagonal of s²(JᵀJ)⁻¹,
//! s² = χ²/(n − p) (the covariance scaled by the reduced χ²); heights, widths and
//! areas carry first-order uncertainties propagated through the full covariance.
//! See the files beside this one for each part.

use super::run::{fit_spectrum_with_notes, REDUCED_CHI_SQUARE_OK};
use super::shapes::Shape;
use super::spec::{BackgroundChoice, FitSpec, ParamSpec, Ratio, Weights};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};

pub struct FitPeaks;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to fit (unsmoothed; with a background curve to fit on top of it)",
)];

static REFERENCES: &[Reference] = &[
    Reference {
        key: "levenberg1944",
        citation: "Levenberg, K. (1944). A method for the solution of certain non-linear problems in least squares. Quarterly of Applied Mathematics, 2(2), 164–168.",
    },
    Reference {
        key: "marquardt1963",
        citation: "Marquardt, D. W. (1963). An algorithm for least-squares estimation of nonlinear parameters. Journal of the Society for Industrial and Applied Mathematics, 11(2), 431–441.",
    },
    Reference {
        key: "more1978",
        citation: "Moré, J. J. (1978). The Levenberg–Marquardt algorithm: implementation and theory. In G. A. Watson (Ed.), Numerical Analysis, Lect. Notes Math. 630, 105–116. Springer.",
    },
    Reference {
        key: "nielsen1999",
        citation: "Nielsen, H. B. (1999). Damping parameter in Marquardt's method. Report IMM-REP-1999-05, Technical University of Denmark.",
    },
    Reference {
        key: "james1975",
        citation: "James, F., & Roos, M. (1975). Minuit – a system for function minimization and analysis of the parameter errors and correlations. Computer Physics Communications, 10(6), 343–367.",
    },
    Reference {
        key: "zaghloul2011",
        citation: "Zaghloul, M. R., & Ali, A. N. (2011). Algorithm 916: Computing the Faddeyeva and Voigt functions. ACM Transactions on Mathematical Software, 38(2), 15.",
    },
    Reference {
        key: "weideman1994",
        citation: "Weideman, J. A. C. (1994). Computation of the complex error function. SIAM Journal on Numerical Analysis, 31(5), 1497–1518.",
    },
    Reference {
        key: "olivero1977",
        citation: "Olivero, J. J., & Longbothum, R. L. (1977). Empirical fits to the Voigt line width: a brief review. Journal of Quantitative Spectroscopy and Radiative Transfer, 17(2), 233–236.",
    },
];

fn number(v: f64) -> String {
    if v != 0.0 && (v.abs() < 1e-3 || v.abs() >= 1e6) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

fn describe_param(name: &str, p: &ParamSpec) -> Option<String> {
    match p {
        ParamSpec::Value(v) => Some(format!("{name} started at {}", number(*v))),
        ParamSpec::Detail(d) => {
            if let Some(s) = &d.same_as {
                return Some(format!("{name} equal to that of {s}"));
            }
            if let Some(e) = &d.expr {
                return Some(format!("{name} = {e}"));
            }
            let mut parts = Vec::new();
            if d.fixed {
                parts.push(format!(
                    "{name} fixed at {}",
                    number(d.value.unwrap_or(f64::NAN))
                ));
            } else {
                if let Some(v) = d.value {
                    parts.push(format!("{name} started at {}", number(v)));
                }
                match (d.min, d.max) {
                    (Some(a), Some(b)) => {
                        parts.push(format!("{name} bounded to [{}, {}]", number(a), number(b)))
                    }
                    (Some(a), None) => parts.push(format!("{name} at least {}", number(a))),
                    (None, Some(b)) => parts.push(format!("{name} at most {}", number(b))),
                    _ => {}
                }
            }
            (!parts.is_empty()).then(|| parts.join(", "))
        }
    }
}

impl TypedStage for FitPeaks {
    type Options = FitSpec;
    const INFO: &'static StageInfo = &StageInfo {
        name: "fit.peaks",
        version: 1,
        summary: "Least-squares peak fit (Gaussian, Lorentzian, pseudo-Voigt, Voigt) with bounds, links and uncertainties",
        inputs: INPUTS,
        output: Kind::Fit,
        references: REFERENCES,
    };

    fn check(&self, o: &FitSpec) -> Result<(), OptionError> {
        let bg = match o.background {
            BackgroundChoice::Auto | BackgroundChoice::Curve => BackgroundChoice::None,
            b => b,
        };
        // With `auto` the background may turn out linear: accept its parameter names.
        let bg = if o.background == BackgroundChoice::Auto && !o.background_parameters.is_empty() {
            BackgroundChoice::Linear
        } else {
            bg
        };
        o.layout(bg)
            .map(|_| ())
            .map_err(|e| OptionError::new(e.path, e.message))
    }

    fn methods(&self, o: &FitSpec) -> String {
        let mut peaks = Vec::new();
        let mut voigt = false;
        for (name, p) in &o.peaks.0 {
            let shape = o.shape_of(p);
            voigt |= shape == Shape::Voigt;
            let mut said = Vec::new();
            if let Some(d) = &p.doublet {
                let ratio = match d.ratio {
                    Ratio::Value(v) => format!("{} times its area", number(v)),
                    Ratio::Shell(s) => format!("the {} area ratio", s.words()),
                };
                said.push(format!(
                    "spin–orbit partner of {} at {:+} with {ratio}{}",
                    d.of,
                    d.split,
                    if d.same_width {
                        " and the same widths"
                    } else {
                        ""
                    }
                ));
            }
            for &param in shape.params() {
                let spec = match param {
                    "center" => &p.center,
                    "area" => &p.area,
                    "fwhm" => &p.fwhm,
                    "eta" => &p.eta,
                    "sigma" => &p.sigma,
                    _ => &p.gamma,
                };
                if let Some(t) = spec.as_ref().and_then(|s| describe_param(param, s)) {
                    said.push(t);
                }
            }
            let said = if said.is_empty() {
                String::new()
            } else {
                format!(": {}", said.join("; "))
            };
            peaks.push(format!("{name} ({}{said})", shape.words()));
        }
        let background = match o.background {
            BackgroundChoice::Auto => "the input's background curve held fixed where present, otherwise a fitted linear background".to_string(),
            BackgroundChoice::Curve => "the input's background curve held fixed".to_string(),
            BackgroundChoice::None => "no background".to_string(),
            BackgroundChoice::Exponential => "a fitted exponential background a·exp(−b·x)".to_string(),
            b => format!("a fitted {} background centred on the middle of the fit range", b.key()),
        };
        let bgp: Vec<String> = o
            .background_parameters
            .0
            .iter()
            .filter_map(|(k, p)| describe_param(k, p))
            .collect();
        let bgp = if bgp.is_empty() {
            String::new()
        } else {
            format!(" ({})", bgp.join(", "))
        };
        let range = match o.range {
            Some([a, b]) => format!("between {} and {}", number(a), number(b)),
            None => "over the whole spectrum".to_string(),
        };
        let weights = match o.weights {
            Weights::Auto => "weighted by the per-point uncertainty where given, else by Poisson σ = √counts (floor 1) for counts, else unweighted",
            Weights::Sigma => "weighted by the per-point uncertainty",
            Weights::Poisson => "weighted by Poisson σ = √counts (floor 1)",
            Weights::None => "unweighted",
        };
        format!(
            "Peaks {} (area, centre and width parameters; widths kept positive, unspecified start values from local maxima and half-height widths) were fitted {range} on {background}{bgp}, {weights}, by Levenberg–Marquardt least squares with analytic derivatives [levenberg1944; marquardt1963; more1978; nielsen1999] and bounds by variable transformation [james1975], stopping when the relative χ² reduction and step fell below {} or after {} iterations, with standard errors from the covariance matrix scaled by the reduced χ², derived heights and widths propagated through the full covariance{}, and a warning when a weighted fit's reduced χ² lay outside [{}, {}].",
            peaks.join(", "),
            number(o.tolerance),
            o.max_iterations,
            if voigt {
                ", Voigt profiles from the Faddeeva function [zaghloul2011; weideman1994] and their FWHM from the Olivero–Longbothum approximation [olivero1977]"
            } else {
                ""
            },
            REDUCED_CHI_SQUARE_OK[0],
            REDUCED_CHI_SQUARE_OK[1],
        )
    }

    fn run(&self, inputs: &Inputs, o: &FitSpec) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let out = fit_spectrum_with_notes(s, o)?;
        let f = &out.result;
        let mut records = Vec::new();
        for p in &f.peaks {
            records.push(Record::measurement(format!("{}.center", p.name), &p.center));
            records.push(Record::measurement(format!("{}.area", p.name), &p.area));
            records.push(Record::measurement(format!("{}.fwhm", p.name), &p.fwhm));
            records.push(Record::measurement(format!("{}.height", p.name), &p.height));
        }
        let st = &f.statistics;
        records.push(Record::number("chi_square", st.chi_square, None, ""));
        records.push(Record::number(
            "reduced_chi_square",
            st.reduced_chi_square,
            None,
            "",
        ));
        records.push(Record::number("r_squared", st.r_squared, None, ""));
        records.push(Record::number("iterations", st.iterations as f64, None, ""));
        records.push(Record::text(
            "converged",
            if st.converged { "true" } else { "false" },
        ));
        records.push(Record::text("reason", st.reason.clone()));
        records.push(Record::number(
            "fit_from",
            out.range[0],
            None,
            &s.x_axis.unit,
        ));
        records.push(Record::number("fit_to", out.range[1], None, &s.x_axis.unit));
        records.push(Record::text("fit_background", out.background.clone()));
        records.push(Record::text("fit_weighting", out.weighting.clone()));
        if records
            .iter()
            .any(|r| r.as_number().is_some_and(|v| !v.is_finite()))
        {
            return Err(StageError::numeric("the fit gave a non-finite number"));
        }
        let mut a = Artifact::new(Value::Fit(out.result)).with_results(records);
        a.notes = out.notes;
        a.info(format!(
            "fitted over [{}, {}] on {}, {}",
            out.range[0], out.range[1], out.background, out.weighting
        ));
        Ok(a)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::{PortValue, Stage};
    use crate::value::{Axis, Curve, CurveRole, FitResult, NoteLevel, ParameterStatus, Spectrum};

    /// Two Gaussians (analytic construction) on a line, on [0, 20] in steps of 0.02.
    fn two_gaussians(counts: bool) -> Spectrum {
        let x: Vec<f64> = (0..=1000).map(|i| i as f64 * 0.02).collect();
        let mut d = [0.0; 3];
        let y = x
            .iter()
            .map(|&v| {
                Shape::Gaussian.eval(&[7.0, 300.0, 1.5], v, &mut d)
                    + Shape::Gaussian.eval(&[12.0, 150.0, 1.0], v, &mut d)
                    + 40.0
                    + 0.5 * (v - 10.0)
            })
            .collect();
        let unit = if counts { "counts" } else { "arb. units" };
        Spectrum::new(
            x,
            y,
            Axis::new("energy", "eV"),
            Axis::new("intensity", unit),
        )
    }

    fn run(s: &Spectrum, options: serde_json::Value) -> Result<(Artifact, FitResult), StageError> {
        let canonical = FitPeaks
            .resolve_options(&options)
            .map_err(|e| StageError::input(e.message))?;
        let input = Artifact::new(Value::Spectrum(s.clone()));
        let inputs = Inputs {
            item: None,
            ports: vec![PortValue::One(&input)],
        };
        let a = Stage::run(&FitPeaks, &inputs, &canonical)?;
        let Value::Fit(f) = a.value.clone() else {
            panic!("not a fit")
        };
        Ok((a, f))
    }

    #[test]
    fn start_values_are_found_and_noise_free_data_recovered() {
        let (a, f) = run(
            &two_gaussians(false),
            serde_json::json!({ "shape": "gaussian", "peaks": { "big": {}, "small": {} }, "tolerance": 1e-14 }),
        )
        .unwrap();
        assert!(f.statistics.converged, "{}", f.statistics.reason);
        // Analytic truth of the construction above.
        for (name, v) in [
            ("big.center", 7.0),
            ("big.area", 300.0),
            ("big.fwhm", 1.5),
            ("small.center", 12.0),
            ("small.area", 150.0),
            ("background.c0", 40.0),
            ("background.c1", 0.5),
        ] {
            let got = f.parameter(name).unwrap().value;
            assert!((got - v).abs() < 1e-8 * v, "{name} {got}");
        }
        // Height of a Gaussian: A·2√(ln2/π)/w.
        let h = 300.0 * 2.0 * (std::f64::consts::LN_2 / std::f64::consts::PI).sqrt() / 1.5;
        assert!((a.result("big.height").unwrap().as_number().unwrap() - h).abs() < 1e-7 * h);
        assert_eq!(a.result("big.center").unwrap().unit, "eV");
        assert_eq!(a.result("big.area").unwrap().unit, "arb. units·eV");
        assert_eq!(
            a.result("converged").unwrap().value,
            crate::value::Scalar::Text("true".into())
        );
        assert!(!f.statistics.weighted);
        let roles: Vec<_> = f.spectrum.curves.iter().map(|c| c.role).collect();
        assert_eq!(
            roles,
            [
                CurveRole::Background,
                CurveRole::Component,
                CurveRole::Component,
                CurveRole::Envelope,
                CurveRole::Residual
            ]
        );
    }

    #[test]
    fn descending_x_gives_the_same_fit() {
        // Binding-energy exports often run high to low; the order must not matter.
        let s = two_gaussians(false);
        let mut r = s.clone();
        r.x.reverse();
        r.y.reverse();
        let o = serde_json::json!({ "shape": "gaussian", "peaks": { "big": {}, "small": {} }, "tolerance": 1e-14 });
        let (_, a) = run(&s, o.clone()).unwrap();
        let (_, b) = run(&r, o).unwrap();
        for (p, q) in a.parameters.iter().zip(&b.parameters) {
            assert_eq!(p.name, q.name);
            assert!(
                (p.value - q.value).abs() <= 1e-8 * p.value.abs().max(1.0),
                "{}",
                p.name
            );
        }
    }

    #[test]
    fn fits_on_top_of_a_background_curve_inside_a_range() {
        let mut s = two_gaussians(false);
        let bg: Vec<f64> = s.x.iter().map(|v| 40.0 + 0.5 * (v - 10.0)).collect();
        s.curves.push(Curve {
            name: "shirley".into(),
            role: CurveRole::Background,
            y: bg,
        });
        let (a, f) = run(
            &s,
            serde_json::json!({ "shape": "gaussian", "range": [3.0, 16.0], "peaks": { "big": { "center": 6.8 }, "small": { "center": 12.1 } } }),
        )
        .unwrap();
        assert!(
            f.model.contains("background curve 'shirley'"),
            "{}",
            f.model
        );
        assert_eq!(f.statistics.free_parameters, 6);
        assert!(
            (f.peak("big").unwrap().area.value - 300.0).abs() < 1e-6,
            "{:?} {:?}",
            f.peak("big"),
            f.statistics
        );
        let env = &f.spectrum.curve(CurveRole::Envelope).unwrap().y;
        for (i, &x) in s.x.iter().enumerate() {
            assert_eq!(env[i].is_nan(), !(3.0..=16.0).contains(&x), "x = {x}");
        }
        assert_eq!(a.result("fit_from").unwrap().as_number(), Some(3.0));
        // Asking for a curve that is not there is an error, not a silent change.
        let e = run(
            &two_gaussians(false),
            serde_json::json!({ "background": "curve", "peaks": { "a": {} } }),
        );
        assert!(e.unwrap_err().to_string().contains("no background curve"));
    }

    #[test]
    fn bounds_iteration_limit_and_chi_square_are_reported() {
        // FWHM capped below the true 1.5: the parameter ends on its bound.
        let (a, f) = run(
            &two_gaussians(false),
            serde_json::json!({ "shape": "gaussian", "peaks": { "big": { "fwhm": { "max": 1.2 } }, "small": {} } }),
        )
        .unwrap();
        let p = f.parameter("big.fwhm").unwrap();
        assert_eq!(p.status, ParameterStatus::AtBound);
        assert!(p.stderr.is_none() && (p.value - 1.2).abs() < 1e-5);
        assert!(a
            .notes
            .iter()
            .any(|n| n.level == NoteLevel::Warning
                && n.text.contains("'big.fwhm' ended on its bound")));
        // One iteration only: not converged, said in the records and the notes.
        let (a, f) = run(
            &two_gaussians(false),
            serde_json::json!({ "shape": "gaussian", "max_iterations": 1, "peaks": { "big": {}, "small": {} } }),
        )
        .unwrap();
        assert!(!f.statistics.converged);
        assert_eq!(
            a.result("converged").unwrap().value,
            crate::value::Scalar::Text("false".into())
        );
        assert!(a.notes.iter().any(|n| n.text.contains("did not converge")));
        // Counts: Poisson weights by default; one peak missing gives a poor χ².
        let (a, f) = run(
            &two_gaussians(true),
            serde_json::json!({ "shape": "gaussian", "peaks": { "big": {} } }),
        )
        .unwrap();
        assert!(f.statistics.weighted && f.statistics.reduced_chi_square > 2.0);
        assert!(a.notes.iter().any(|n| n.text.contains("reduced χ²")));
        assert!(a.result("fit_weighting").is_some());
    }

    #[test]
    fn bad_requests_fail_plainly() {
        let s = two_gaussians(false);
        let e = run(
            &s,
            serde_json::json!({ "range": [0.0, 0.05], "peaks": { "a": {} } }),
        )
        .unwrap_err();
        assert!(e.to_string().contains("too few"), "{e}");
        let e = run(&s, serde_json::json!({ "peaks": {} })).unwrap_err();
        assert!(e.to_string().contains("at least one peak"));
        let e = run(
            &s,
            serde_json::json!({ "peaks": { "a": { "fwhm": { "same_as": "b" } } } }),
        )
        .unwrap_err();
        assert!(e.to_string().contains("'b.fwhm'"), "{e}");
    }

    #[test]
    fn methods_sentence_states_settings_and_cites_declared_sources() {
        let o: FitSpec = serde_json::from_value(serde_json::json!({
            "shape": "voigt",
            "peaks": { "a": { "center": { "value": 1.0, "min": 0.5, "max": 1.5 } }, "b": { "doublet": { "of": "a", "split": 2.0, "ratio": "d" } } },
            "range": [0.0, 5.0]
        }))
        .unwrap();
        let m = TypedStage::methods(&FitPeaks, &o);
        assert!(
            m.ends_with('.')
                && m.contains("between 0 and 5")
                && m.contains("1e-10")
                && m.contains("200 iterations"),
            "{m}"
        );
        assert!(
            m.contains("center bounded to [0.5, 1.5]") && m.contains("spin–orbit partner of a"),
            "{m}"
        );
        for key in m.split('[').skip(1).filter_map(|t| t.split(']').next()) {
            for k in key.split("; ") {
                if k.chars().all(|c| c.is_ascii_alphanumeric()) {
                    assert!(
                        REFERENCES.iter().any(|r| r.key == k),
                        "undeclared [{k}] in {m}"
                    );
                }
            }
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        /// Arbitrary finite data, shapes and ranges give a result or a plain error, never a panic.
        #[test]
        fn never_panics_on_odd_data(
            y in proptest::collection::vec(-1e3f64..1e3, 0..40),
            shape in 0usize..4,
            lo in -5.0f64..30.0,
            width in 0.1f64..40.0,
            bg in 0usize..4,
        ) {
            let x: Vec<f64> = (0..y.len()).map(|i| i as f64).collect();
            let s = Spectrum::new(x, y, Axis::new("x", "eV"), Axis::new("y", "counts"));
            let shape = ["gaussian", "lorentzian", "pseudo_voigt", "voigt"][shape];
            let bg = ["none", "constant", "linear", "exponential"][bg];
            let o = serde_json::json!({ "shape": shape, "background": bg, "range": [lo, lo + width], "peaks": { "a": {}, "b": { "fwhm": { "same_as": "a" } } }, "max_iterations": 50 });
            if shape != "voigt" {
                let _ = run(&s, o);
            } else {
                let o = serde_json::json!({ "shape": shape, "background": bg, "range": [lo, lo + width], "peaks": { "a": {} }, "max_iterations": 50 });
                let _ = run(&s, o);
            }
        }
    }
}
