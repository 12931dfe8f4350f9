//! `nmr.qnmr_purity`: mass-fraction purity of an analyte against an internal standard
//! weighed into the same NMR sample.
//!
//! Method: the internal-standard qNMR equation
//!   P_a = (I_a/I_std)·(N_std/N_a)·(M_a/M_std)·(m_std/m_a)·P_std
//! (Holzgrabe, Prog. Nucl. Magn. Reson. Spectrosc. 2010, 57, 229; BIPM qNMR internal
//! standard reference data documents), with the GUM first-order uncertainty: for a
//! product of powers, u_rel²(P) = Σ u_rel²(input), the integrals treated as
//! uncorrelated (stated in the methods).

use crate::quant_util::{self, check_positive, check_uncertainty, record_number};
use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Component {
    /// Name of the upstream result holding the integral (e.g. `integral.ch2`); the
    /// upstream uncertainty is used unless `integral_uncertainty` is given.
    pub integral: String,
    /// Standard uncertainty of the integral, overriding the upstream one.
    pub integral_uncertainty: Option<f64>,
    /// Number of nuclei giving rise to the integrated signal.
    pub nuclei: f64,
    /// Molar mass.
    #[schemars(extend("x-unit" = "g/mol"))]
    pub molar_mass: f64,
    /// Standard uncertainty of the molar mass (0 when absent).
    #[schemars(extend("x-unit" = "g/mol"))]
    pub molar_mass_uncertainty: Option<f64>,
    /// Weighed mass (any unit, the same for analyte and standard).
    pub mass: f64,
    /// Standard uncertainty of the weighed mass (0 when absent).
    pub mass_uncertainty: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// The analyte's signal, nuclei count, molar mass and weighed mass.
    pub analyte: Component,
    /// The internal standard's signal, nuclei count, molar mass and weighed mass.
    pub standard: Component,
    /// Certified purity (mass fraction) of the internal standard.
    #[schemars(extend("x-unit" = "g/g"))]
    pub standard_purity: f64,
    /// Standard uncertainty of the standard's purity.
    #[schemars(extend("x-unit" = "g/g"))]
    pub standard_purity_uncertainty: Option<f64>,
    /// Unit of the weighed masses, for the report (e.g. `mg`).
    pub mass_unit: String,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            analyte: Component::default(),
            standard: Component::default(),
            standard_purity: 1.0,
            standard_purity_uncertainty: None,
            mass_unit: "mg".into(),
        }
    }
}

pub struct QnmrPurity;

static INPUTS: &[Port] = &[Port::each(
    "integrals",
    Kind::Any,
    "a step whose results hold both integrals (e.g. nmr.integrate)",
)];

pub const HOLZGRABE: Reference = Reference {
    key: "holzgrabe2010",
    citation: "U. Holzgrabe, Quantitative NMR spectroscopy in pharmaceutical applications, Prog. Nucl. Magn. Reson. Spectrosc. 57 (2010) 229–240.",
};
pub const BIPM_QNMR: Reference = Reference {
    key: "bipmqnmr",
    citation: "Bureau International des Poids et Mesures, Internal Standard Reference Data for qNMR (rapport BIPM-2018 series), BIPM, Sèvres.",
};

impl TypedStage for QnmrPurity {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "nmr.qnmr_purity",
        version: 1,
        summary:
            "Purity by quantitative NMR against an internal standard, with a GUM uncertainty budget",
        inputs: INPUTS,
        output: Kind::Summary,
        references: &[HOLZGRABE, BIPM_QNMR, quant_util::GUM],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        for (p, c) in [("analyte", &o.analyte), ("standard", &o.standard)] {
            if c.integral.is_empty() {
                return Err(OptionError::new(
                    format!("{p}.integral"),
                    "name the result holding the integral (e.g. integral.ch2)",
                ));
            }
            check_positive(&format!("{p}.nuclei"), c.nuclei)?;
            check_positive(&format!("{p}.molar_mass"), c.molar_mass)?;
            check_positive(&format!("{p}.mass"), c.mass)?;
            check_uncertainty(&format!("{p}.integral_uncertainty"), c.integral_uncertainty)?;
            check_uncertainty(
                &format!("{p}.molar_mass_uncertainty"),
                c.molar_mass_uncertainty,
            )?;
            check_uncertainty(&format!("{p}.mass_uncertainty"), c.mass_uncertainty)?;
        }
        check_positive("standard_purity", o.standard_purity)?;
        check_uncertainty("standard_purity_uncertainty", o.standard_purity_uncertainty)
    }

    fn methods(&self, o: &Options) -> String {
        format!(
            "The purity of the analyte was calculated with the internal-standard qNMR equation P_a = (I_a/I_std)(N_std/N_a)(M_a/M_std)(m_std/m_a)P_std [holzgrabe2010] [bipmqnmr] from the integrals {} ({} nuclei) and {} ({} nuclei of the standard), molar masses {} and {} g/mol, weighed masses {} and {} {} and a standard purity of {}, with a first-order uncertainty budget treating all inputs, including the two integrals, as uncorrelated [jcgm2008].",
            o.analyte.integral,
            o.analyte.nuclei,
            o.standard.integral,
            o.standard.nuclei,
            o.analyte.molar_mass,
            o.standard.molar_mass,
            o.analyte.mass,
            o.standard.mass,
            o.mass_unit,
            o.standard_purity
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let a = inputs.one(0)?;
        let (ia, uia, _) = record_number(a, &o.analyte.integral)?;
        let (is, uis, _) = record_number(a, &o.standard.integral)?;
        if is <= 0.0 || ia < 0.0 {
            return Err(StageError::input(format!(
                "integrals must be positive (analyte {ia}, standard {is})"
            )));
        }
        let uia = o.analyte.integral_uncertainty.or(uia);
        let uis = o.standard.integral_uncertainty.or(uis);
        let (an, st) = (&o.analyte, &o.standard);
        let p = (ia / is)
            * (st.nuclei / an.nuclei)
            * (an.molar_mass / st.molar_mass)
            * (st.mass / an.mass)
            * o.standard_purity;
        let p = quant_util::finite("purity", p)?;
        // Relative standard uncertainty of each input: a product of powers ±1.
        let rel = |u: Option<f64>, v: f64| u.map_or(0.0, |u| u / v);
        let budget = [
            ("integral_analyte", rel(uia, ia)),
            ("integral_standard", rel(uis, is)),
            (
                "molar_mass_analyte",
                rel(an.molar_mass_uncertainty, an.molar_mass),
            ),
            (
                "molar_mass_standard",
                rel(st.molar_mass_uncertainty, st.molar_mass),
            ),
            ("mass_analyte", rel(an.mass_uncertainty, an.mass)),
            ("mass_standard", rel(st.mass_uncertainty, st.mass)),
            (
                "purity_standard",
                rel(o.standard_purity_uncertainty, o.standard_purity),
            ),
        ];
        let urel = budget.iter().map(|(_, r)| r * r).sum::<f64>().sqrt();
        let mut art = Artifact::new(Value::Summary);
        art.record(Record::number("purity", p, Some(p * urel), "g/g"));
        art.record(Record::number(
            "purity_percent",
            100.0 * p,
            Some(100.0 * p * urel),
            "%",
        ));
        art.record(Record::number(
            "purity_relative_uncertainty",
            urel,
            None,
            "",
        ));
        for (name, r) in budget {
            art.record(Record::number(format!("budget.{name}"), r, None, ""));
        }
        if uia.is_none() || uis.is_none() {
            art.warn("an integral has no uncertainty: the budget leaves it out");
        }
        if p > 1.0 {
            art.warn(format!("purity {p:.4} exceeds 1: check the inputs"));
        }
        Ok(art)
    }
}
