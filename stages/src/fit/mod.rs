//! Peak fitting: models, the Levenberg–Marquardt solver, and the `fit.peaks` stage.

pub mod expr;
pub mod model;
pub mod shapes;
pub mod solver;
