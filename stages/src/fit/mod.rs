//! Peak fitting: profiles with analytic derivatives ([`shapes`]), a bounded
//! Levenberg–Marquardt solver ([`solver`]), linked parameters ([`expr`], [`model`]),
//! start values from the data ([`guess`]), the options ([`spec`]), the fit itself
//! ([`run`]) and the `fit.peaks` stage ([`peaks`]).
//!
//! The pure entry point for callers outside the engine (benchmarks, other crates) is
//! [`fit_spectrum`]: a [`Spectrum`](crate::value::Spectrum) and a [`FitSpec`] (the same
//! options the stage takes) give a [`FitResult`](crate::value::FitResult).

pub mod expr;
pub mod faddeeva;
pub mod guess;
pub mod model;
pub mod peaks;
pub mod run;
pub mod shapes;
pub mod solver;
pub mod spec;

pub use run::{fit_spectrum, fit_spectrum_with_notes, FitOutcome};
pub use spec::FitSpec;
