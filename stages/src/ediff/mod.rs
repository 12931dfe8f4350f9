//! Electron diffraction ring patterns: centre, radial profile, ring radii, d-spacings.

pub mod rings;
