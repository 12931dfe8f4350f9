//! Spectrum transforms: `transform.crop`, `transform.resample`, `transform.normalize`,
//! `transform.subtract`, `transform.subtract_background`, and the gathering
//! `gather.average` of repeats.
pub mod average;
pub mod crop;
pub mod grid;
pub mod normalize;
pub mod resample;
pub mod subtract;
