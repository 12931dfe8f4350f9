//! `fit.peaks`: least-squares fit of Gaussian, Lorentzian, pseudo-Voigt and Voigt peaks
//! on a fitted or fixed background, with bounds, fixed and linked parameters.
//!
//! Method: Levenberg–Marquardt [levenberg1944; marquardt1963] with Marquardt's diagonal
//! scaling kept at its running maximum [more1978] and Nielsen's damping update
//! [nielsen1999]; bounds by the MINUIT transformations [james1975]; analytic Jacobians;
//! the Voigt profile from the Faddeeva function [zaghloul2011] and its FWHM from
//! [olivero1977]. Standard errors are the square roots of the diagonal of s²(JᵀJ)⁻¹,
//! s² = χ²/(n − p) (the covariance scaled by the reduced χ²); heights, widths and
//! areas carry first-order uncertainties propagated through the full covariance.
//! See the files beside this one for each part.

use super::run::{fit_spectrum_with_notes, REDUCED_CHI_SQUARE_OK};
use super::shapes::Shape;
use super::spec::{BackgroundChoice, FitSpec, ParamSpec, Weights};
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
        citation: "Moré, J. J. (1978). The Levenberg–Marquardt algorithm: implementation and theory. In G. A. Watson (Ed.), Numerical Analysis, Lecture Notes in Mathematics 630, 105–116. Springer.",
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
        key: "olivero1977",
        citation: "Olivero, J. J., & Longbothum, R. L. (1977). Empirical fits to the Voigt line width: a brief review. Journal of Quantitative Spectroscopy and Radiative Transfer, 17(2), 233–236.",
    },
];

fn number(v: f64) -> String {
    format!("{v}")
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
                parts.push(format!("{name} fixed at {}", number(d.value.unwrap_or(f64::NAN))));
            } else {
                if let Some(v) = d.value {
                    parts.push(format!("{name} started at {}", number(v)));
                }
                match (d.min, d.max) {
                    (Some(a), Some(b)) => parts.push(format!("{name} bounded to [{}, {}]", number(a), number(b))),
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
                said.push(format!(
                    "spin–orbit partner of {} at {:+} with {} times its area{}",
                    d.of,
                    d.split,
                    number(d.ratio.value()),
                    if d.same_width { " and the same widths" } else { "" }
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
        let bgp = if bgp.is_empty() { String::new() } else { format!(" ({})", bgp.join(", ")) };
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
                ", Voigt profiles from the Faddeeva function [zaghloul2011] and their FWHM from the Olivero–Longbothum approximation [olivero1977]"
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
        records.push(Record::number("reduced_chi_square", st.reduced_chi_square, None, ""));
        records.push(Record::number("r_squared", st.r_squared, None, ""));
        records.push(Record::number("iterations", st.iterations as f64, None, ""));
        records.push(Record::text("converged", if st.converged { "true" } else { "false" }));
        records.push(Record::text("reason", st.reason.clone()));
        records.push(Record::number("fit_from", out.range[0], None, &s.x_axis.unit));
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
