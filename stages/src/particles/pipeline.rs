//! The particle pipeline as one pure function (flatten, Otsu, label, measure), for
//! benchmarks and callers outside the recipe engine. Each step is the same code the
//! stages run.

use crate::image::filters::{flatten, Background, Removal};
use crate::particles::label::{exclude, label_components};
use crate::particles::measure::{measure, Particle};
use crate::particles::threshold::{threshold, ThresholdOptions};
use crate::stage::StageError;
use crate::value::{Image, Labels};

/// Flattens by a Gaussian of σ `background_sigma` px, thresholds by Otsu (256 bins, bright
/// objects), labels 8-connected components, drops border particles and those under
/// `min_area` pixels, and measures the rest.
pub fn particle_pipeline(
    img: &Image,
    background_sigma: f64,
    min_area: usize,
) -> Result<(Labels, Vec<Particle>), StageError> {
    let (flat, _) = flatten(
        img,
        Background::Gaussian,
        background_sigma,
        Removal::Subtract,
        true,
    )?;
    let (mask, _) = threshold(&flat, &ThresholdOptions::default())?;
    let m: Vec<bool> = mask.labels.iter().map(|&v| v != 0).collect();
    let (raw, _) = label_components(&m, img.width, img.height, 8);
    let (labels, count, _, _) = exclude(&raw, img.width, img.height, true, min_area);
    let labels = Labels {
        labels,
        count,
        ..mask
    };
    let parts = measure(&labels, Some(img));
    Ok((labels, parts))
}
