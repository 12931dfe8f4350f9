//! Axis and ordinate conversions: `convert.axis`, `convert.absorbance`.
pub mod absorbance;
pub mod axis;
