//! `convert.axis`: the x axis from one physical quantity to another.
//!
//! Wavelength (nm), photon energy (eV, E = hc/λ), wavenumber (cm⁻¹) and frequency (Hz)
//! are converted point by point with the CODATA 2018 constants [codata2018]; chemical
//! shift (ppm) and frequency offset (Hz) are converted with the spectrometer frequency
//! (δ = Δν/ν₀). The points keep their order: a wavelength axis ascending becomes an
//! energy axis descending, and nothing is re-sorted or re-sampled. Optionally y is
//! multiplied by the Jacobian |dλ/dE| (and the like) so that a spectral density keeps
//! its area (Mooney & Kambhampati, J. Phys. Chem. Lett. 2013, 4, 3316).

use crate::stage::{Inputs, OptionError, Port, Reference, StageError, StageInfo, TypedStage};
use crate::units::{self, Quantity};
use crate::value::{Artifact, Axis, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// A quantity an x axis can be converted to or from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum AxisQuantity {
    /// Detected from the axis quantity and unit (only for `from`).
    Auto,
    /// Wavelength in nm.
    Wavelength,
    /// Photon energy in eV.
    Energy,
    /// Wavenumber in cm⁻¹.
    Wavenumber,
    /// Frequency in Hz.
    Frequency,
    /// NMR chemical shift in ppm (needs the spectrometer frequency).
    ChemicalShift,
    /// NMR frequency offset from the reference in Hz (needs the spectrometer frequency).
    FrequencyOffset,
}

impl AxisQuantity {
    fn optical(self) -> Option<Quantity> {
        match self {
            AxisQuantity::Wavelength => Some(Quantity::Wavelength),
            AxisQuantity::Energy => Some(Quantity::Energy),
            AxisQuantity::Wavenumber => Some(Quantity::Wavenumber),
            AxisQuantity::Frequency => Some(Quantity::Frequency),
            _ => None,
        }
    }
    fn label(self) -> &'static str {
        match self {
            AxisQuantity::Auto => "the detected quantity",
            AxisQuantity::Wavelength => "wavelength (nm)",
            AxisQuantity::Energy => "photon energy (eV)",
            AxisQuantity::Wavenumber => "wavenumber (cm⁻¹)",
            AxisQuantity::Frequency => "frequency (Hz)",
            AxisQuantity::ChemicalShift => "chemical shift (ppm)",
            AxisQuantity::FrequencyOffset => "frequency offset (Hz)",
        }
    }
    fn axis(self) -> Axis {
        match self {
            AxisQuantity::ChemicalShift => Axis::new("chemical shift", "ppm"),
            AxisQuantity::FrequencyOffset => Axis::new("frequency offset", "Hz"),
            q => match q.optical() {
                Some(o) => Axis::new(o.name(), o.unit()),
                None => Axis::new("x", ""),
            },
        }
    }
    /// Detects the quantity of an axis.
    pub fn detect(axis: &Axis) -> Option<AxisQuantity> {
        let q = axis.quantity.to_ascii_lowercase();
        if axis.unit.eq_ignore_ascii_case("ppm") || q.contains("shift") {
            return Some(AxisQuantity::ChemicalShift);
        }
        if q.contains("offset") {
            return Some(AxisQuantity::FrequencyOffset);
        }
        Some(match Quantity::detect(&axis.quantity, &axis.unit)? {
            Quantity::Wavelength => AxisQuantity::Wavelength,
            Quantity::Energy => AxisQuantity::Energy,
            Quantity::Wavenumber => AxisQuantity::Wavenumber,
            Quantity::Frequency => AxisQuantity::Frequency,
        })
    }
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Quantity of the input x axis; `auto` reads it from the axis quantity and unit.
    pub from: AxisQuantity,
    /// Quantity of the output x axis.
    pub to: AxisQuantity,
    /// Multiply y (and sigma) by the Jacobian |d from / d to| so a spectral density
    /// keeps its area; off by default (peak heights kept as recorded).
    pub jacobian: bool,
    /// Spectrometer (observe) frequency for ppm ↔ Hz; read from the spectrum's
    /// `observe_frequency_mhz` metadata when not given.
    #[schemars(extend("x-unit" = "MHz"))]
    pub spectrometer_mhz: Option<f64>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            from: AxisQuantity::Auto,
            to: AxisQuantity::Energy,
            jacobian: false,
            spectrometer_mhz: None,
        }
    }
}

pub struct ConvertAxis;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "the spectrum to convert",
)];

pub(crate) const CODATA: Reference = Reference {
    key: "codata2018",
    citation: "E. Tiesinga, P. J. Mohr, D. B. Newell, B. N. Taylor, CODATA recommended values of the fundamental physical constants: 2018, Rev. Mod. Phys. 93, 025010 (2021).",
};

static REFS: &[Reference] = &[
    CODATA,
    Reference {
        key: "mooney2013",
        citation: "J. Mooney, P. Kambhampati, Get the basics right: Jacobian conversion of wavelength and energy scales for quantitative analysis of emission spectra, J. Phys. Chem. Lett. 4, 3316–3318 (2013).",
    },
];

impl TypedStage for ConvertAxis {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "convert.axis",
        version: 1,
        summary: "Convert the x axis between wavelength, photon energy, wavenumber, frequency and chemical shift",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.to == AxisQuantity::Auto {
            return Err(OptionError::new("to", "the target quantity must be named"));
        }
        if let Some(f) = o.spectrometer_mhz {
            if !(f > 0.0 && f.is_finite()) {
                return Err(OptionError::new(
                    "spectrometer_mhz",
                    "must be a positive number",
                ));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let jac = if o.jacobian {
            "with the ordinate multiplied by the Jacobian of the transformation so that areas are conserved [mooney2013]"
        } else {
            "without a Jacobian correction of the ordinate (heights kept as recorded)"
        };
        let freq = match o.spectrometer_mhz {
            Some(f) => format!(", using a spectrometer frequency of {f} MHz"),
            None => String::new(),
        };
        format!(
            "The x axis was converted from {} to {} point by point with the CODATA 2018 constants (hc = {:.6} eV·nm) [codata2018], keeping the order of the points, {jac}{freq}.",
            o.from.label(),
            o.to.label(),
            units::HC_EV_NM
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let out = convert_spectrum(s, o)?;
        Ok(Artifact::new(Value::Spectrum(out)))
    }
}

/// Converts the x axis of a spectrum as the options say.
pub fn convert_spectrum(s: &Spectrum, o: &Options) -> Result<Spectrum, StageError> {
    let from = match o.from {
        AxisQuantity::Auto => AxisQuantity::detect(&s.x_axis).ok_or_else(|| {
            StageError::input(format!(
                "cannot tell the quantity of the x axis '{}'; name it with `from`",
                s.x_axis.label()
            ))
        })?,
        q => q,
    };
    let to = o.to;
    let mut out = s.clone();
    out.x_axis = to.axis();
    if from == to {
        return Ok(out);
    }
    match (from.optical(), to.optical()) {
        (Some(f), Some(t)) => {
            if let Some(i) = s.x.iter().position(|&v| v <= 0.0) {
                return Err(StageError::input(format!(
                    "x[{i}] = {} is not positive; {} cannot be converted to {}",
                    s.x[i],
                    from.label(),
                    to.label()
                )));
            }
            out.x = s.x.iter().map(|&v| units::convert(f, t, v)).collect();
            if o.jacobian {
                let j: Vec<f64> = out.x.iter().map(|&v| units::jacobian(f, t, v)).collect();
                scale_by(&mut out, &j);
            }
        }
        _ => {
            let mhz = match o.spectrometer_mhz {
                Some(f) => f,
                None => s
                    .metadata
                    .get("observe_frequency_mhz")
                    .and_then(|v| v.trim().parse::<f64>().ok())
                    .filter(|f| *f > 0.0)
                    .ok_or_else(|| {
                        StageError::input(
                            "ppm ↔ Hz needs the spectrometer frequency: give `spectrometer_mhz`",
                        )
                    })?,
            };
            let conv: fn(f64, f64) -> f64 = match (from, to) {
                (AxisQuantity::ChemicalShift, AxisQuantity::FrequencyOffset) => units::hz_from_ppm,
                (AxisQuantity::FrequencyOffset, AxisQuantity::ChemicalShift) => units::ppm_from_hz,
                _ => {
                    return Err(StageError::input(format!(
                        "cannot convert {} to {}",
                        from.label(),
                        to.label()
                    )))
                }
            };
            out.x = s.x.iter().map(|&v| conv(v, mhz)).collect();
            if o.jacobian {
                // Linear map: |d from / d to| is constant.
                let j = (conv(1.0, mhz) - conv(0.0, mhz)).abs().recip();
                scale_by(&mut out, &vec![j; s.len()]);
            }
        }
    }
    Ok(out)
}

fn scale_by(s: &mut Spectrum, j: &[f64]) {
    for (v, f) in s.y.iter_mut().zip(j) {
        *v *= f;
    }
    if let Some(sig) = &mut s.sigma {
        for (v, f) in sig.iter_mut().zip(j) {
            *v *= f;
        }
    }
    for c in &mut s.curves {
        for (v, f) in c.y.iter_mut().zip(j) {
            *v *= f;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(x: Vec<f64>, y: Vec<f64>, q: &str, u: &str) -> Spectrum {
        Spectrum::new(x, y, Axis::new(q, u), Axis::new("intensity", ""))
    }

    #[test]
    fn wavelength_to_energy_keeps_point_order() {
        let s = spec(
            vec![400.0, 500.0, 600.0],
            vec![1.0, 2.0, 3.0],
            "wavelength",
            "nm",
        );
        let o = Options::default();
        let c = convert_spectrum(&s, &o).unwrap();
        // E = hc/λ (CODATA 2018): 1239.841984/400 = 3.09960496 eV.
        assert!((c.x[0] - 1_239.841_984 / 400.0).abs() < 1e-8);
        assert!(
            c.x[0] > c.x[2],
            "descending energy from ascending wavelength"
        );
        assert_eq!(c.y, s.y);
        assert_eq!(c.x_axis, Axis::new("photon energy", "eV"));
    }

    #[test]
    fn jacobian_conserves_area() {
        // Gaussian band in wavelength; trapezoid areas before and after must agree.
        let x: Vec<f64> = (0..2001).map(|i| 300.0 + 0.2 * i as f64).collect();
        let y: Vec<f64> = x
            .iter()
            .map(|v| (-(v - 500.0f64).powi(2) / 800.0).exp())
            .collect();
        let s = spec(x, y, "wavelength", "nm");
        let o = Options {
            jacobian: true,
            ..Options::default()
        };
        let c = convert_spectrum(&s, &o).unwrap();
        let area = |x: &[f64], y: &[f64]| -> f64 {
            x.windows(2)
                .zip(y.windows(2))
                .map(|(a, b)| 0.5 * (b[0] + b[1]) * (a[1] - a[0]))
                .sum::<f64>()
                .abs()
        };
        let a0 = area(&s.x, &s.y);
        let a1 = area(&c.x, &c.y);
        assert!((a0 - a1).abs() < 1e-4 * a0, "{a0} vs {a1}");
    }

    #[test]
    fn ppm_needs_a_frequency() {
        let mut s = spec(vec![0.0, 7.26], vec![1.0, 2.0], "chemical shift", "ppm");
        let o = Options {
            to: AxisQuantity::FrequencyOffset,
            ..Options::default()
        };
        assert!(convert_spectrum(&s, &o).is_err());
        s.metadata
            .insert("observe_frequency_mhz".into(), "400".into());
        let c = convert_spectrum(&s, &o).unwrap();
        assert!((c.x[1] - 2904.0).abs() < 1e-9);
    }
}
