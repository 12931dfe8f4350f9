//! Lattice spacings from the Fourier transform of lattice-resolved micrographs.

pub mod fft;
