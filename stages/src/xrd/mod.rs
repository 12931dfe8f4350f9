//! Diffraction peak lists: Bragg d-spacings, Scherrer crystallite size, cubic lattice
//! parameter, indexing against expected d-spacings; and the built-in table of X-ray
//! source wavelengths (`stages/data/xray_wavelengths.csv`, each row with its source).

pub mod bragg;
pub mod cubic;
pub mod index;
pub mod scherrer;

use crate::eds::lines::fold_name;
use crate::quant_util::{cell_number, read_table};
use crate::stage::{OptionError, Reference, StageError};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::sync::OnceLock;

pub const WAVELENGTH_FILE: &str = "stages/data/xray_wavelengths.csv";
const WAVELENGTHS: &str = include_str!("../../data/xray_wavelengths.csv");

pub const BRAGG: Reference = Reference {
    key: "bragg1913",
    citation: "W. H. Bragg, W. L. Bragg, The reflection of X-rays by crystals, Proc. R. Soc. Lond. A 88 (1913) 428–438.",
};

/// A source wavelength: a name from the built-in table (e.g. `Cu Ka1`) or a value in Å.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(untagged)]
pub enum Wavelength {
    /// Wavelength in ångström.
    Value(f64),
    /// Name in stages/data/xray_wavelengths.csv, e.g. `Cu Ka1`, `Mo Ka`.
    Named(String),
}

#[derive(Clone, Debug, PartialEq)]
pub struct WavelengthRow {
    pub name: String,
    pub angstrom: f64,
    pub source: String,
}

pub fn wavelengths() -> Result<&'static [WavelengthRow], StageError> {
    static T: OnceLock<Result<Vec<WavelengthRow>, StageError>> = OnceLock::new();
    T.get_or_init(|| {
        read_table(
            WAVELENGTH_FILE,
            WAVELENGTHS,
            &["name", "wavelength_angstrom", "source"],
        )?
        .iter()
        .enumerate()
        .map(|(i, r)| {
            Ok(WavelengthRow {
                name: r[0].clone(),
                angstrom: cell_number(WAVELENGTH_FILE, i, &r[1])?,
                source: r[2].clone(),
            })
        })
        .collect()
    })
    .as_ref()
    .map(|v| v.as_slice())
    .map_err(Clone::clone)
}

/// The wavelength in Å and a short description of where it came from.
pub fn resolve(w: &Option<Wavelength>) -> Result<(f64, String), StageError> {
    match w {
        Some(Wavelength::Value(v)) if *v > 0.0 && v.is_finite() => {
            Ok((*v, format!("{v} Å (given)")))
        }
        Some(Wavelength::Value(v)) => Err(StageError::input(format!(
            "wavelength {v} Å is not positive"
        ))),
        Some(Wavelength::Named(n)) => {
            let key = fold_name(n);
            let row = wavelengths()?
                .iter()
                .find(|r| fold_name(&r.name) == key)
                .ok_or_else(|| {
                    let names: Vec<&str> = wavelengths()
                        .map(|t| t.iter().map(|r| r.name.as_str()).collect())
                        .unwrap_or_default();
                    StageError::input(format!(
                        "unknown wavelength '{n}' (known: {})",
                        names.join(", ")
                    ))
                })?;
            Ok((row.angstrom, format!("{} = {} Å", row.name, row.angstrom)))
        }
        None => Err(StageError::input(
            "give the wavelength (a name such as 'Cu Ka1' or a value in Å)",
        )),
    }
}

/// Option check: a wavelength is present and, if a name, known.
pub fn check_wavelength(w: &Option<Wavelength>) -> Result<(), OptionError> {
    resolve(w)
        .map(|_| ())
        .map_err(|e| OptionError::new("wavelength", e.to_string()))
}

/// Words for the methods sentence.
pub fn wavelength_words(w: &Option<Wavelength>) -> String {
    resolve(w)
        .map(|r| r.1)
        .unwrap_or_else(|_| "(no wavelength)".into())
}

/// Bragg's law d = nλ/(2 sin θ) with 2θ in degrees, and the first-order uncertainty
/// from u(2θ) (degrees) and u(λ): u_rel²(d) = (cot θ · u_θ)² + (u_λ/λ)².
pub fn bragg_d(
    two_theta_deg: f64,
    lambda: f64,
    order: u32,
    u_2theta: Option<f64>,
    u_lambda: f64,
) -> Result<(f64, Option<f64>), StageError> {
    if !(two_theta_deg > 0.0 && two_theta_deg < 180.0) {
        return Err(StageError::input(format!(
            "2θ = {two_theta_deg}° is outside (0°, 180°)"
        )));
    }
    let th = (two_theta_deg / 2.0).to_radians();
    let d = order as f64 * lambda / (2.0 * th.sin());
    let u = match (u_2theta, u_lambda > 0.0) {
        (None, false) => None,
        (ut, _) => {
            let ut = ut.unwrap_or(0.0).to_radians() / 2.0;
            Some(d * ((ut / th.tan()).powi(2) + (u_lambda / lambda).powi(2)).sqrt())
        }
    };
    Ok((d, u))
}

/// 2θ (degrees) of a d-spacing (Å) by Bragg's law, first order.
pub fn two_theta_of(d: f64, lambda: f64) -> Option<f64> {
    let s = lambda / (2.0 * d);
    (s > 0.0 && s <= 1.0).then(|| 2.0 * s.asin().to_degrees())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_rows_have_sources_and_weighted_means_are_consistent() {
        let t = wavelengths().unwrap();
        assert!(t
            .iter()
            .all(|r| !r.source.trim().is_empty() && r.angstrom > 0.0));
        // Kα = (2·Kα1 + Kα2)/3 (common practice) for every anode in the table.
        for a in ["Cu", "Mo", "Co", "Cr", "Fe", "Ag"] {
            let g = |s: &str| {
                resolve(&Some(Wavelength::Named(format!("{a} {s}"))))
                    .unwrap()
                    .0
            };
            assert!(
                (g("Ka") - (2.0 * g("Ka1") + g("Ka2")) / 3.0).abs() < 1.5e-6,
                "{a}"
            );
        }
        // International Tables for Crystallography Vol. C (2006), ch. 4.2, Table 4.2.2.6:
        // λ(Cu Kα1) = 1.54059292(45) Å and λ(Mo Kα1) = 0.70931713(41) Å; the table holds
        // them to seven decimals.
        let named = |s: &str| resolve(&Some(Wavelength::Named(s.into()))).unwrap().0;
        assert!((named("cu kα1") - 1.540_592_92).abs() < 5e-8);
        assert!((named("Mo Ka1") - 0.709_317_13).abs() < 5e-8);
        // Maskil & Deutsch, Phys. Rev. A 38 (1988) 2947, abstract: λ(Cu Kα2) =
        // 1.544 425 6 Å (1.2 ppm); the table holds it rounded to six decimals.
        let ka2 = resolve(&Some(Wavelength::Named("Cu Ka2".into())))
            .unwrap()
            .0;
        assert!((ka2 - 1.544_425_6).abs() < 5e-7, "{ka2}");
    }

    #[test]
    fn bragg_round_trip() {
        let (d, _) = bragg_d(
            two_theta_of(3.1356, 1.540598).unwrap(),
            1.540598,
            1,
            None,
            0.0,
        )
        .unwrap();
        assert!((d - 3.1356).abs() < 1e-12);
    }
}
