//! Physical constants and axis conversions.
//!
//! Constants are the exact SI defining values adopted in 2019, as listed in the CODATA
//! 2018 recommended values (E. Tiesinga, P. J. Mohr, D. B. Newell, B. N. Taylor,
//! "CODATA recommended values of the fundamental physical constants: 2018",
//! Rev. Mod. Phys. 93, 025010 (2021); NIST CODATA 2018). h, c and e are exact, so
//! hc/e = 1239.841 984... eV·nm is exact to the digits of an f64.
//!
//! Conversions: photon energy E = hc/λ; wavenumber ν̃ = 1/λ (cm⁻¹ = 10⁷/λ[nm]);
//! frequency ν = c/λ; chemical shift δ[ppm] = Δν[Hz] / ν₀[MHz]; absorbance
//! A = −log10 T with %T = 100 T.

use serde::{Deserialize, Serialize};

/// Planck constant, J·s (exact, CODATA 2018).
pub const PLANCK_J_S: f64 = 6.626_070_15e-34;
/// Speed of light in vacuum, m/s (exact, CODATA 2018).
pub const SPEED_OF_LIGHT_M_S: f64 = 299_792_458.0;
/// Elementary charge, C (exact, CODATA 2018).
pub const ELEMENTARY_CHARGE_C: f64 = 1.602_176_634e-19;
/// hc/e in eV·nm (derived from the exact constants: 1239.841 984 ...).
pub const HC_EV_NM: f64 = PLANCK_J_S * SPEED_OF_LIGHT_M_S / ELEMENTARY_CHARGE_C * 1e9;
/// Nanometres per centimetre.
const NM_PER_CM: f64 = 1e7;
/// Nanometres per metre.
const NM_PER_M: f64 = 1e9;

/// A physical quantity on a spectral x axis, with its canonical unit.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// Wavelength in nm.
    Wavelength,
    /// Photon energy in eV.
    Energy,
    /// Wavenumber in cm⁻¹.
    Wavenumber,
    /// Frequency in Hz.
    Frequency,
}

impl Quantity {
    /// The quantity name used on axes.
    pub fn name(self) -> &'static str {
        match self {
            Quantity::Wavelength => "wavelength",
            Quantity::Energy => "photon energy",
            Quantity::Wavenumber => "wavenumber",
            Quantity::Frequency => "frequency",
        }
    }
    /// The canonical unit.
    pub fn unit(self) -> &'static str {
        match self {
            Quantity::Wavelength => "nm",
            Quantity::Energy => "eV",
            Quantity::Wavenumber => "cm⁻¹",
            Quantity::Frequency => "Hz",
        }
    }
    /// Guesses the quantity of an axis from its quantity and unit words.
    pub fn detect(quantity: &str, unit: &str) -> Option<Quantity> {
        let u = unit.trim().to_ascii_lowercase();
        let q = quantity.to_ascii_lowercase();
        // Electron energies (photoelectron spectra) are not photon energies.
        if q.contains("binding") || q.contains("kinetic") {
            return None;
        }
        match u.as_str() {
            "nm" => return Some(Quantity::Wavelength),
            "ev" => return Some(Quantity::Energy),
            "cm-1" | "cm^-1" | "1/cm" | "cm⁻¹" => return Some(Quantity::Wavenumber),
            "hz" => return Some(Quantity::Frequency),
            _ => {}
        }
        if q.contains("wavelength") {
            Some(Quantity::Wavelength)
        } else if q.contains("wavenumber") {
            Some(Quantity::Wavenumber)
        } else if q.contains("frequency") {
            Some(Quantity::Frequency)
        } else if q.contains("energy") {
            Some(Quantity::Energy)
        } else {
            None
        }
    }
}

/// Wavelength in nm of a value of `q` (every quantity here is proportional to 1/λ
/// except wavelength itself). Non-positive inputs give a non-finite result.
pub fn to_wavelength_nm(q: Quantity, v: f64) -> f64 {
    match q {
        Quantity::Wavelength => v,
        Quantity::Energy => HC_EV_NM / v,
        Quantity::Wavenumber => NM_PER_CM / v,
        Quantity::Frequency => SPEED_OF_LIGHT_M_S * NM_PER_M / v,
    }
}

/// A wavelength in nm expressed as quantity `q`.
pub fn from_wavelength_nm(q: Quantity, nm: f64) -> f64 {
    // Each map is its own inverse (v -> k/v).
    to_wavelength_nm(q, nm)
}

/// Converts a value from one quantity to another.
pub fn convert(from: Quantity, to: Quantity, v: f64) -> f64 {
    if from == to {
        return v;
    }
    from_wavelength_nm(to, to_wavelength_nm(from, v))
}

/// |d(from)/d(to)| at the value `v_to` of the target quantity: the factor that keeps
/// the area of a density when the axis changes (y_to = y_from · |d from / d to|).
pub fn jacobian(from: Quantity, to: Quantity, v_to: f64) -> f64 {
    if from == to {
        return 1.0;
    }
    // from = k(from,to) / to for every pair of distinct reciprocal quantities,
    // except when both are reciprocal to λ (then from ∝ to).
    let recip = |q| q != Quantity::Wavelength;
    if recip(from) && recip(to) {
        // from = a · to, with a = from(λ)/to(λ) constant.
        let a = convert(to, from, 1.0);
        a.abs()
    } else {
        // from = k / to with k = from(to=1)·1.
        let k = convert(to, from, 1.0);
        (k / (v_to * v_to)).abs()
    }
}

/// Photon energy (eV) of a wavelength (nm): E = hc/λ.
pub fn ev_from_nm(nm: f64) -> f64 {
    HC_EV_NM / nm
}

/// Wavelength (nm) of a photon energy (eV).
pub fn nm_from_ev(ev: f64) -> f64 {
    HC_EV_NM / ev
}

/// Wavenumber (cm⁻¹) of a wavelength (nm).
pub fn wavenumber_from_nm(nm: f64) -> f64 {
    NM_PER_CM / nm
}

/// Frequency (Hz) of a wavelength (nm).
pub fn hz_from_nm(nm: f64) -> f64 {
    SPEED_OF_LIGHT_M_S * NM_PER_M / nm
}

/// Chemical shift (ppm) of an offset from the reference (Hz) at a spectrometer
/// frequency (MHz): δ = Δν / ν₀ (Hz/MHz = ppm).
pub fn ppm_from_hz(hz: f64, spectrometer_mhz: f64) -> f64 {
    hz / spectrometer_mhz
}

/// Offset from the reference (Hz) of a chemical shift (ppm).
pub fn hz_from_ppm(ppm: f64, spectrometer_mhz: f64) -> f64 {
    ppm * spectrometer_mhz
}

/// Absorbance of a transmittance fraction: A = −log10 T.
pub fn absorbance_from_transmittance(t: f64) -> f64 {
    -t.log10()
}

/// Transmittance fraction of an absorbance: T = 10^−A.
pub fn transmittance_from_absorbance(a: f64) -> f64 {
    10f64.powf(-a)
}

/// Absorbance of a percent transmittance: A = 2 − log10 %T.
pub fn absorbance_from_percent_transmittance(pt: f64) -> f64 {
    absorbance_from_transmittance(pt / 100.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hc_matches_codata_2018() {
        // NIST CODATA 2018: hc = 1239.841 984... eV nm (exact).
        assert!((HC_EV_NM - 1_239.841_984).abs() < 1e-6);
        assert!((ev_from_nm(1.0) - 1_239.841_984).abs() < 1e-6);
    }

    #[test]
    fn conversions_round_trip_and_jacobian_is_derivative() {
        let qs = [
            Quantity::Wavelength,
            Quantity::Energy,
            Quantity::Wavenumber,
            Quantity::Frequency,
        ];
        for &a in &qs {
            for &b in &qs {
                let v = 532.0;
                let w = convert(a, b, v);
                assert!((convert(b, a, w) - v).abs() < 1e-9 * v);
                // Numerical derivative d a / d b at w.
                let h = w * 1e-6;
                let d = (convert(b, a, w + h) - convert(b, a, w - h)) / (2.0 * h);
                let j = jacobian(a, b, w);
                assert!((d.abs() - j).abs() < 1e-6 * j, "{a:?}->{b:?}");
            }
        }
    }

    #[test]
    fn electron_energies_are_not_photon_energies() {
        assert_eq!(Quantity::detect("binding energy", "eV"), None);
        assert_eq!(
            Quantity::detect("photon energy", "eV"),
            Some(Quantity::Energy)
        );
        assert_eq!(
            Quantity::detect("Wavelength", ""),
            Some(Quantity::Wavelength)
        );
    }

    #[test]
    fn shift_and_absorbance() {
        // 400 MHz spectrometer: 2904 Hz from TMS is 7.26 ppm (arithmetic).
        assert!((ppm_from_hz(2904.0, 400.0) - 7.26).abs() < 1e-12);
        assert!((hz_from_ppm(7.26, 400.0) - 2904.0).abs() < 1e-9);
        // A = −log10 T: T = 0.1 gives 1, 1 %T gives 2.
        assert!((absorbance_from_transmittance(0.1) - 1.0).abs() < 1e-15);
        assert!((absorbance_from_percent_transmittance(1.0) - 2.0).abs() < 1e-15);
        assert!((transmittance_from_absorbance(2.0) - 0.01).abs() < 1e-15);
    }
}
