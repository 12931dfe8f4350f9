//! Particle analysis: thresholding and morphology, labelling and watershed splitting,
//! per-particle measurement and size distributions.

pub mod distribution;
pub mod label;
pub mod measure;
pub mod pipeline;
pub mod threshold;
