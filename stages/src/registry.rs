//! The one explicit list of stages. Docs, `retort stages` and the recipe schema are
//! generated from it; add a stage here and nowhere else.

use crate::stage::Stage;

/// Every stage, grouped by family, in the order the catalog shows them.
pub static CATALOG: &[&dyn Stage] = &[
    // import
    &crate::import::delimited::ImportDelimited,
    // smooth
    &crate::smooth::moving_average::MovingAverage,
    // measure
    &crate::measure::maximum::Maximum,
    // fit
    &crate::fit::peaks::FitPeaks,
    // quantification: calibration curves
    &crate::calibration::curve::CalibrationCurve,
    // quantification: NMR
    &crate::nmr::integrate::NmrIntegrate,
    &crate::nmr::coupling::NmrCoupling,
    &crate::nmr::qnmr::QnmrPurity,
    // quantification: UV-vis
    &crate::uvvis::absorbance::UvvisAbsorbance,
    &crate::uvvis::peak::UvvisPeak,
    &crate::uvvis::beer_lambert::BeerLambert,
    &crate::uvvis::tauc::Tauc,
    &crate::uvvis::onset::UvvisOnset,
    &crate::uvvis::plasmon::UvvisPlasmon,
    // quantification: photoelectron spectra
    &crate::xps::atomic_percent::AtomicPercent,
    &crate::xps::fractions::XpsFractions,
    &crate::xps::ups::WorkFunction,
    &crate::xps::ups::ValenceBandMaximum,
    &crate::xps::ups::FermiLevel,
    // quantification: EDS
    &crate::eds::calibrate::EdsCalibrate,
    &crate::eds::identify::EdsIdentify,
    &crate::eds::net_intensity::NetIntensity,
    &crate::eds::cliff_lorimer::CliffLorimer,
    // quantification: diffraction
    &crate::xrd::bragg::XrdBragg,
    &crate::xrd::scherrer::Scherrer,
    &crate::xrd::cubic::CubicLattice,
    &crate::xrd::index::XrdIndex,
    // image (import and preparation)
    &crate::image::import::ImportImage,
    &crate::image::filters::Gaussian,
    &crate::image::filters::Median,
    &crate::image::filters::Flatten,
    &crate::image::filters::Clip,
    // particles
    &crate::particles::threshold::Threshold,
    &crate::particles::threshold::Morphology,
    &crate::particles::label::Label,
    &crate::particles::measure::Measure,
    &crate::particles::distribution::Distribution,
    // surface (AFM/STM height maps)
    &crate::surface::level::Level,
    &crate::surface::roughness::Roughness,
    &crate::surface::profile::Profile,
    &crate::surface::profile::StepHeight,
    // lattice
    &crate::lattice::fft::LatticeFft,
    // ediff (electron diffraction)
    &crate::ediff::rings::RadialProfile,
    &crate::ediff::rings::Rings,
    // elements (element maps)
    &crate::elements::per_particle::ElementsPerParticle,
    &crate::elements::per_particle::ElementsOverlay,
    // gather
    &crate::gather::table::GatherTable,
    &crate::gather::combine::GatherCombine,
    // spectral core: import
    &crate::import::jcamp::ImportJcamp,
    // spectral core: convert
    &crate::convert::axis::ConvertAxis,
    &crate::convert::absorbance::ConvertAbsorbance,
    // spectral core: calibrate
    &crate::calibrate::shift::CalibrateShift,
    &crate::calibrate::apply_shift::ApplyShift,
    &crate::calibrate::polynomial::CalibratePolynomial,
    &crate::calibrate::binding_energy::CalibrateBindingEnergy,
    // spectral core: transform
    &crate::transform::crop::Crop,
    &crate::transform::resample::Resample,
    &crate::transform::normalize::Normalize,
    &crate::transform::subtract::Subtract,
    &crate::transform::subtract::SubtractBackground,
    &crate::transform::average::GatherAverage,
    // spectral core: smooth
    &crate::smooth::savitzky_golay::SavitzkyGolay,
    &crate::smooth::gaussian::GaussianSmooth,
    // spectral core: background
    &crate::background::polynomial::PolynomialBackground,
    &crate::background::linear::LinearBackground,
    &crate::background::asls::AslsBackground,
    &crate::background::shirley::ShirleyBackground,
    &crate::background::tougaard::TougaardBackground,
    // spectral core: peaks
    &crate::peaks::find::FindPeaks,
    // spectral core: integrate
    &crate::integrate::area::IntegrateArea,
];

/// The stage with this exact name.
pub fn find(name: &str) -> Option<&'static dyn Stage> {
    CATALOG.iter().copied().find(|s| s.info().name == name)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeSet;

    #[test]
    fn names_are_unique_dotted_and_lowercase() {
        let mut seen = BTreeSet::new();
        for s in CATALOG {
            let n = s.info().name;
            assert!(seen.insert(n), "duplicate stage name {n}");
            let parts: Vec<_> = n.split('.').collect();
            assert_eq!(parts.len(), 2, "{n} is not family.verb");
            assert!(
                n.chars()
                    .all(|c| c.is_ascii_lowercase() || c == '.' || c == '_' || c.is_ascii_digit()),
                "{n} must be lowercase snake case"
            );
        }
    }

    #[test]
    fn every_stage_is_documented_and_defaults_resolve() {
        for s in CATALOG {
            let info = s.info();
            assert!(!info.summary.is_empty(), "{} has no summary", info.name);
            assert!(info.version >= 1, "{} version must start at 1", info.name);
            // The default options must be valid and give a methods sentence.
            let canonical = s.resolve_options(&serde_json::Value::Null).map_err(|_| ());
            if let Ok(c) = canonical {
                let m = s.methods(&c);
                assert!(
                    m.ends_with('.'),
                    "{}: methods sentence must end with a full stop: {m}",
                    info.name
                );
            }
            // Every option is documented.
            let schema = serde_json::to_value(s.options_schema()).unwrap();
            if let Some(props) = schema.get("properties").and_then(|p| p.as_object()) {
                for (k, v) in props {
                    assert!(
                        v.get("description").is_some(),
                        "{}: option '{k}' has no doc comment",
                        info.name
                    );
                }
            }
        }
    }

    #[test]
    fn every_reference_key_used_in_methods_is_declared() {
        for s in CATALOG {
            let info = s.info();
            if let Ok(c) = s.resolve_options(&serde_json::Value::Null) {
                let m = s.methods(&c);
                for key in m.split('[').skip(1).filter_map(|t| t.split(']').next()) {
                    assert!(
                        info.references.iter().any(|r| r.key == key),
                        "{}: methods cites [{key}] but declares no such reference",
                        info.name
                    );
                }
            }
        }
    }
}
