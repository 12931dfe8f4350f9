//! Image import and preparation: decoding, smoothing, median, background flattening,
//! clipping, and the shared helpers of the two-dimensional families.

pub mod common;
pub mod filters;
pub mod import;
