//! `particles.distribution`: the size distribution of particles gathered over images.
//!
//! Gathers the per-particle tables of `particles.measure` (one per image) and gives:
//! a histogram with bin width by the Freedman–Diaconis rule h = 2·IQR·N^(−1/3)
//! (Freedman & Diaconis 1981), or Sturges' rule k = ⌈log₂N⌉ + 1, or a given bin count;
//! mean, sample standard deviation (n − 1), median and the D10, D50, D90 percentiles
//! (linear interpolation between order statistics, Hyndman & Fan 1996 definition 7, the
//! number-weighted distribution); a log-normal fitted by maximum likelihood on ln d:
//! μ̂ = mean(ln d), σ̂² = (1/N)Σ(ln d − μ̂)², with standard errors σ̂/√N and σ̂/√(2N)
//! (from the Fisher information, e.g. Limpert, Stahel & Abbt 2001 for the log-normal in
//! the sciences); and the particle count per analysed area (particles kept / total image
//! area of all images, with the Poisson standard uncertainty √N / area). A distribution of
//! fewer than 100 particles carries a warning.

use crate::image::common::{percentile_sorted, HYNDMAN1996};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Column, ColumnData, Kind, Record, Table, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const FREEDMAN1981: Reference = Reference {
    key: "freedman1981",
    citation: "D. Freedman and P. Diaconis, \"On the histogram as a density estimator: L2 theory\", Zeitschrift für Wahrscheinlichkeitstheorie und verwandte Gebiete 57, 453–476 (1981).",
};
pub const STURGES1926: Reference = Reference {
    key: "sturges1926",
    citation: "H. A. Sturges, \"The choice of a class interval\", Journal of the American Statistical Association 21(153), 65–66 (1926).",
};
pub const LIMPERT2001: Reference = Reference {
    key: "limpert2001",
    citation: "E. Limpert, W. A. Stahel and M. Abbt, \"Log-normal distributions across the sciences: keys and clues\", BioScience 51(5), 341–352 (2001).",
};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum BinRule {
    /// Width 2·IQR·N^(−1/3).
    FreedmanDiaconis,
    /// ⌈log₂ N⌉ + 1 bins.
    Sturges,
    /// Exactly `bins` bins.
    Count,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct DistributionOptions {
    /// Column of the particle tables to describe (default `equivalent_diameter`).
    pub quantity: String,
    /// Histogram bin rule (default Freedman–Diaconis).
    pub bin_rule: BinRule,
    /// Number of bins for the `count` rule (default 20).
    pub bins: usize,
}

impl Default for DistributionOptions {
    fn default() -> Self {
        DistributionOptions {
            quantity: "equivalent_diameter".into(),
            bin_rule: BinRule::FreedmanDiaconis,
            bins: 20,
        }
    }
}

pub struct Distribution;

static INPUTS: &[Port] =
    &[Port::gather("particles", Kind::Table, "particle tables of every image").records_only()];
static REFS: &[Reference] = &[FREEDMAN1981, STURGES1926, HYNDMAN1996, LIMPERT2001];

/// Summary statistics of a sample of sizes.
#[derive(Clone, Debug, PartialEq)]
pub struct SizeStats {
    pub n: usize,
    pub mean: f64,
    pub sd: f64,
    pub median: f64,
    pub d10: f64,
    pub d50: f64,
    pub d90: f64,
    pub ln_mu: f64,
    pub ln_mu_se: f64,
    pub ln_sigma: f64,
    pub ln_sigma_se: f64,
    /// Bin edges (bins + 1) and counts.
    pub edges: Vec<f64>,
    pub counts: Vec<usize>,
}

impl TypedStage for Distribution {
    type Options = DistributionOptions;
    const INFO: &'static StageInfo = &StageInfo {
        name: "particles.distribution",
        version: 1,
        summary: "Size distribution over all images: histogram, mean, D10/D50/D90, log-normal fit, count per area",
        inputs: INPUTS,
        output: Kind::Table,
        references: REFS,
    };
    fn check(&self, o: &DistributionOptions) -> Result<(), OptionError> {
        if o.bins == 0 || o.bins > 10_000 {
            return Err(OptionError::new("bins", "bins must be between 1 and 10000"));
        }
        Ok(())
    }
    fn methods(&self, o: &DistributionOptions) -> String {
        let rule = match o.bin_rule {
            BinRule::FreedmanDiaconis => "bins of width 2·IQR·N^(−1/3) [freedman1981]".to_string(),
            BinRule::Sturges => "⌈log₂N⌉ + 1 bins [sturges1926]".to_string(),
            BinRule::Count => format!("{} equal bins", o.bins),
        };
        format!(
            "The number distribution of particle {} over all images was summarised by a histogram with {rule}, the mean, sample standard deviation, median and D10, D50 and D90 (linear interpolation between order statistics [hyndman1996]), and a log-normal fitted by maximum likelihood on the logarithms with standard errors from the Fisher information [limpert2001]; particle counts per area use the total area of the images analysed.",
            o.quantity.replace('_', " ")
        )
    }
    fn run(&self, inputs: &Inputs, o: &DistributionOptions) -> Result<Artifact, StageError> {
        let items = inputs.many(0);
        let mut values = Vec::new();
        let mut unit = String::new();
        let (mut area, mut excluded_border, mut excluded_small) = (0.0, 0.0, 0.0);
        let mut area_unit = String::new();
        let mut methods = Vec::new();
        let mut pixel_sizes = Vec::new();
        for (item, a) in &items {
            let t = match &a.value {
                Value::Table(t) => t,
                other => {
                    return Err(StageError::input(format!(
                        "{item}: expected a particle table, got a {}",
                        other.kind().name()
                    )))
                }
            };
            let col = t.column(&o.quantity).ok_or_else(|| {
                StageError::input(format!(
                    "{item}: the particle table has no column '{}'",
                    o.quantity
                ))
            })?;
            if !unit.is_empty() && col.unit != unit {
                return Err(StageError::input(format!(
                    "{item}: sizes are in {} but earlier images in {unit}; give all images the same pixel-size unit",
                    col.unit
                )));
            }
            unit = col.unit.clone();
            if let ColumnData::Number { values: v, .. } = &col.data {
                values.extend(v.iter().copied().filter(|x| x.is_finite()));
            }
            let num = |k: &str| a.result(k).and_then(|r| r.as_number()).unwrap_or(0.0);
            area += num("analysed_area");
            if let Some(r) = a.result("analysed_area") {
                area_unit = r.unit.clone();
            }
            excluded_border += num("excluded_border");
            excluded_small += num("excluded_small");
            if let Some(crate::value::Scalar::Text(m)) =
                a.result("threshold_method").map(|r| &r.value)
            {
                if !methods.contains(m) {
                    methods.push(m.clone());
                }
            }
            if let Some(r) = a.result("pixel_size") {
                let s = format!("{} {}", r.as_number().unwrap_or(f64::NAN), r.unit);
                if !pixel_sizes.contains(&s) {
                    pixel_sizes.push(s);
                }
            }
        }
        let s = size_stats(&values, o)?;
        let mut a = Artifact::new(Value::Table(histogram_table(&s, &unit)));
        let log_unit = if unit.is_empty() {
            String::new()
        } else {
            format!("ln({unit})")
        };
        let recs = vec![
            Record::number("n", s.n as f64, None, ""),
            Record::number("images", items.len() as f64, None, ""),
            Record::number("excluded_border", excluded_border, None, ""),
            Record::number("excluded_small", excluded_small, None, ""),
            Record::number("mean", s.mean, Some(s.sd / (s.n as f64).sqrt()), &unit),
            Record::number("sd", s.sd, None, &unit),
            Record::number("median", s.median, None, &unit),
            Record::number("d10", s.d10, None, &unit),
            Record::number("d50", s.d50, None, &unit),
            Record::number("d90", s.d90, None, &unit),
            Record::number("lognormal.mu", s.ln_mu, Some(s.ln_mu_se), &log_unit),
            Record::number("lognormal.sigma", s.ln_sigma, Some(s.ln_sigma_se), ""),
            Record::number(
                "lognormal.median",
                s.ln_mu.exp(),
                Some(s.ln_mu.exp() * s.ln_mu_se),
                &unit,
            ),
            Record::text("threshold_method", methods.join(", ")),
            Record::text("pixel_size", pixel_sizes.join(", ")),
        ];
        a.results = recs;
        if area > 0.0 {
            let per = s.n as f64 / area;
            let au = area_unit
                .strip_suffix("^2")
                .unwrap_or(&area_unit)
                .to_string();
            a.record(Record::number("analysed_area", area, None, &area_unit));
            a.record(Record::number(
                "count_per_area",
                per,
                Some((s.n as f64).sqrt() / area),
                &format!("1/{au}^2"),
            ));
        }
        if s.n < 100 {
            a.warn(format!(
                "only {} particles: the size distribution is statistically weak (fewer than 100)",
                s.n
            ));
        }
        if unit == "px" {
            a.warn("sizes are in pixels: no pixel size was given");
        }
        Ok(a)
    }
}

fn histogram_table(s: &SizeStats, unit: &str) -> Table {
    let k = s.counts.len();
    let num = |name: &str, u: &str, v: Vec<f64>| Column {
        name: name.into(),
        unit: u.into(),
        data: ColumnData::Number {
            values: v,
            uncertainty: None,
        },
    };
    Table {
        title: "size distribution".into(),
        columns: vec![
            num("bin_low", unit, s.edges[..k].to_vec()),
            num("bin_high", unit, s.edges[1..].to_vec()),
            num("count", "", s.counts.iter().map(|&c| c as f64).collect()),
            num(
                "fraction",
                "",
                s.counts.iter().map(|&c| c as f64 / s.n as f64).collect(),
            ),
        ],
    }
}

/// Statistics of a sample of positive sizes.
pub fn size_stats(values: &[f64], o: &DistributionOptions) -> Result<SizeStats, StageError> {
    let n = values.len();
    if n < 2 {
        return Err(StageError::input(format!(
            "{n} particle(s): at least 2 are needed for a distribution"
        )));
    }
    if values.iter().any(|&v| v.is_nan() || v <= 0.0) {
        return Err(StageError::input(
            "sizes must be positive for the log-normal fit",
        ));
    }
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let nf = n as f64;
    let mean = sorted.iter().sum::<f64>() / nf;
    let sd = (sorted.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0)).sqrt();
    let q = |p: f64| percentile_sorted(&sorted, p);
    let logs: Vec<f64> = sorted.iter().map(|v| v.ln()).collect();
    let ln_mu = logs.iter().sum::<f64>() / nf;
    let ln_sigma = (logs.iter().map(|v| (v - ln_mu).powi(2)).sum::<f64>() / nf).sqrt();
    let (lo, hi) = (sorted[0], sorted[n - 1]);
    let bins = match o.bin_rule {
        BinRule::Count => o.bins,
        BinRule::Sturges => (nf.log2().ceil() as usize) + 1,
        BinRule::FreedmanDiaconis => {
            let width = 2.0 * (q(0.75) - q(0.25)) * nf.powf(-1.0 / 3.0);
            if width > 0.0 && hi > lo {
                (((hi - lo) / width).ceil() as usize).clamp(1, 10_000)
            } else {
                1
            }
        }
    };
    let (lo_e, hi_e) = if hi > lo {
        (lo, hi)
    } else {
        (lo - 0.5, hi + 0.5)
    };
    let step = (hi_e - lo_e) / bins as f64;
    let edges: Vec<f64> = (0..=bins)
        .map(|i| {
            if i == bins {
                hi_e
            } else {
                lo_e + i as f64 * step
            }
        })
        .collect();
    let mut counts = vec![0usize; bins];
    for &v in &sorted {
        let i = (((v - lo_e) / step) as usize).min(bins - 1);
        counts[i] += 1;
    }
    Ok(SizeStats {
        n,
        mean,
        sd,
        median: q(0.5),
        d10: q(0.1),
        d50: q(0.5),
        d90: q(0.9),
        ln_mu,
        ln_mu_se: ln_sigma / nf.sqrt(),
        ln_sigma,
        ln_sigma_se: ln_sigma / (2.0 * nf).sqrt(),
        edges,
        counts,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn statistics_follow_their_definitions() {
        let v = [1.0, 2.0, 4.0, 8.0];
        let s = size_stats(&v, &DistributionOptions::default()).unwrap();
        // Definition 7: D10 at position 0.3 → 1.3; median 3; geometric mean 2^1.5.
        assert!((s.d10 - 1.3).abs() < 1e-12 && (s.median - 3.0).abs() < 1e-12);
        assert!((s.ln_mu.exp() - 2f64.powf(1.5)).abs() < 1e-12);
        // ln v = (0, 1, 2, 3)·ln2: MLE σ² = 1.25·ln²2.
        assert!((s.ln_sigma - 1.25f64.sqrt() * 2f64.ln()).abs() < 1e-12);
        assert_eq!(s.counts.iter().sum::<usize>(), 4);
        assert!(size_stats(&[1.0], &DistributionOptions::default()).is_err());
    }
}
