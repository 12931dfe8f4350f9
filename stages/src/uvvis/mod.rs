//! UV-vis absorbance, band positions, Beer–Lambert concentrations, Tauc band gaps,
//! absorption onsets and plasmon bands.

pub mod absorbance;
pub mod beer_lambert;
pub mod onset;
pub mod peak;
pub mod plasmon;
pub mod tauc;

use crate::quant_util::HC_EV_NM;
use crate::stage::StageError;
use crate::value::Spectrum;

/// Photon energy (eV) of every point: x itself on an energy axis in eV, E = hc/λ on a
/// wavelength axis in nm.
pub fn photon_energy(s: &Spectrum) -> Result<Vec<f64>, StageError> {
    match s.x_axis.unit.trim() {
        "eV" => Ok(s.x.clone()),
        "nm" => {
            if s.x.iter().any(|v| *v <= 0.0) {
                return Err(StageError::input("a wavelength is zero or negative"));
            }
            Ok(s.x.iter().map(|l| HC_EV_NM / l).collect())
        }
        u => Err(StageError::input(format!(
            "the x axis must be wavelength in nm or photon energy in eV (it is '{}' in '{u}')",
            s.x_axis.quantity
        ))),
    }
}
