//! Energy-dispersive X-ray spectra: energy calibration, line identification, net
//! intensities and Cliff–Lorimer thin-film composition.

pub mod calibrate;
pub mod cliff_lorimer;
pub mod identify;
pub mod lines;
pub mod net_intensity;
