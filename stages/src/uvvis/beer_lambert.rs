//! `uvvis.beer_lambert`: concentration from absorbance by the Beer–Lambert law,
//! c = A/(ε·l), with first-order uncertainty u_rel²(c) = u_rel²(A) + u_rel²(ε) + u_rel²(l).
//!
//! Source: the Beer–Lambert law as defined in the IUPAC Gold Book ("Beer–Lambert law").

use crate::quant_util::{self, check_positive, check_uncertainty, record_number};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Upstream result holding the absorbance.
    pub absorbance: String,
    /// Absorbance given directly (used when there is no input, or instead of the record).
    pub absorbance_value: Option<f64>,
    /// Standard uncertainty of the absorbance, overriding the upstream one.
    pub absorbance_uncertainty: Option<f64>,
    /// Molar (decadic) absorption coefficient ε. Required.
    #[schemars(extend("x-unit" = "L/(mol·cm)"))]
    pub epsilon: Option<f64>,
    /// Standard uncertainty of ε.
    #[schemars(extend("x-unit" = "L/(mol·cm)"))]
    pub epsilon_uncertainty: Option<f64>,
    /// Optical path length.
    #[schemars(extend("x-unit" = "cm"))]
    pub path_length: f64,
    /// Standard uncertainty of the path length.
    #[schemars(extend("x-unit" = "cm"))]
    pub path_length_uncertainty: Option<f64>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            absorbance: "absorbance_at_max".into(),
            absorbance_value: None,
            absorbance_uncertainty: None,
            epsilon: None,
            epsilon_uncertainty: None,
            path_length: 1.0,
            path_length_uncertainty: None,
        }
    }
}

pub struct BeerLambert;

static INPUTS: &[Port] = &[Port::each(
    "absorbance",
    Kind::Any,
    "a step whose results hold the absorbance (e.g. uvvis.peak)",
)
.optional()];

pub const BEER: Reference = Reference {
    key: "iupacbeer",
    citation: "IUPAC, Compendium of Chemical Terminology (the \"Gold Book\"), 2nd ed., Blackwell, Oxford, 1997; online version, entry \"Beer–Lambert law\".",
};

impl TypedStage for BeerLambert {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "uvvis.beer_lambert",
        version: 1,
        summary: "Concentration c = A/(ε·l) by the Beer–Lambert law, with uncertainty",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[BEER, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        let Some(e) = o.epsilon else {
            return Err(OptionError::new(
                "epsilon",
                "give the molar absorption coefficient epsilon in L/(mol·cm)",
            ));
        };
        check_positive("epsilon", e)?;
        if o.path_length == 0.0 {
            return Err(OptionError::new(
                "path_length",
                "the path length is zero: the Beer–Lambert law has no solution (c = A/(ε·l) divides by zero)",
            ));
        }
        check_positive("path_length", o.path_length)?;
        check_uncertainty("absorbance_uncertainty", o.absorbance_uncertainty)?;
        check_uncertainty("epsilon_uncertainty", o.epsilon_uncertainty)?;
        check_uncertainty("path_length_uncertainty", o.path_length_uncertainty)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "Concentrations were calculated by the Beer–Lambert law, c = A/(εl), with ε = {} L mol⁻¹ cm⁻¹ and l = {} cm [iupacbeer], the relative uncertainties of A, ε and l combined in quadrature [jcgm2008].",
            o.epsilon.unwrap_or(f64::NAN),
            o.path_length
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let (a, ua) = match (o.absorbance_value, inputs.optional(0)) {
            (Some(v), _) => (v, None),
            (None, Some(art)) => {
                let (v, u, _) = record_number(art, &o.absorbance)?;
                (v, u)
            }
            (None, None) => {
                return Err(StageError::input(
                    "no absorbance: connect an input or give absorbance_value",
                ))
            }
        };
        let ua = o.absorbance_uncertainty.or(ua);
        let eps = o
            .epsilon
            .ok_or_else(|| StageError::input("epsilon is required"))?;
        let l = o.path_length;
        if l <= 0.0 || eps <= 0.0 {
            return Err(StageError::input(
                "epsilon and path length must be positive",
            ));
        }
        let c = a / (eps * l);
        let rel = |u: Option<f64>, v: f64| u.map_or(0.0, |u| u / v);
        let ur = (ua.map_or(0.0, |u| (u / eps / l).powi(2))
            + (c * rel(o.epsilon_uncertainty, eps)).powi(2)
            + (c * rel(o.path_length_uncertainty, l)).powi(2))
        .sqrt();
        let known =
            ua.is_some() || o.epsilon_uncertainty.is_some() || o.path_length_uncertainty.is_some();
        let mut art = Artifact::new(Value::Summary);
        art.record(Record::number(
            "concentration",
            c,
            known.then_some(ur),
            "mol/L",
        ));
        art.record(Record::number("absorbance", a, ua, ""));
        if a > 3.0 {
            art.warn(format!(
                "absorbance {a:.2} is above about 3, where the Beer–Lambert law is rarely linear"
            ));
        }
        Ok(art)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stage::TypedStage;

    #[test]
    fn zero_path_length_is_refused() {
        let o = Options {
            epsilon: Some(1000.0),
            path_length: 0.0,
            ..Options::default()
        };
        let e = BeerLambert.check(&o).unwrap_err();
        assert!(e.message.contains("path length is zero"));
    }
}
