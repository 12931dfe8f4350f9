//! The values that flow between steps.
//!
//! Every value carries its units. Values are plain data (serde, no behaviour beyond
//! small accessors) because the engine caches them in a binary format: keep every
//! type here free of `#[serde(untagged)]`, `flatten` and `serde_json::Value`, which
//! a non-self-describing format cannot read back.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Quantity and unit of one axis, e.g. `binding energy` / `eV`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Axis {
    pub quantity: String,
    pub unit: String,
}

impl Axis {
    pub fn new(quantity: impl Into<String>, unit: impl Into<String>) -> Self {
        Axis {
            quantity: quantity.into(),
            unit: unit.into(),
        }
    }
    /// "binding energy (eV)"; the unit is left out when empty.
    pub fn label(&self) -> String {
        if self.unit.is_empty() {
            self.quantity.clone()
        } else {
            format!("{} ({})", self.quantity, self.unit)
        }
    }
    /// The trade draws chemical shift and binding energy high-to-low.
    pub fn drawn_reversed(&self) -> bool {
        let q = self.quantity.to_ascii_lowercase();
        q.contains("chemical shift") || q.contains("binding energy")
    }
}

/// What a curve on a spectrum's grid stands for; the report styles it by role.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum CurveRole {
    /// A background that was (or may be) subtracted.
    Background,
    /// One fitted component (a peak).
    Component,
    /// The sum of all fitted components plus background.
    Envelope,
    /// Data minus model.
    Residual,
    /// A smoothed copy kept for display.
    Smoothed,
    /// A derivative of the data.
    Derivative,
    /// A reference or blank spectrum on the same grid.
    Reference,
    /// A straight line drawn for an extrapolation (Tauc, cutoff edge, onset).
    Guide,
}

/// A named curve sampled on the same x grid as the spectrum that carries it.
/// Values outside the curve's support are NaN (not drawn).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Curve {
    pub name: String,
    pub role: CurveRole,
    pub y: Vec<f64>,
}

/// A one-dimensional spectrum or profile.
///
/// Invariants (checked by [`Spectrum::validate`]): `x`, `y`, `sigma` and every curve
/// have the same length; all values finite (curves may hold NaN for "not here").
/// `x` may be ascending or descending; stages that need an order say so.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Spectrum {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    /// Standard uncertainty of each y value, when known (e.g. Poisson σ = √counts).
    pub sigma: Option<Vec<f64>>,
    pub x_axis: Axis,
    pub y_axis: Axis,
    /// Background, components, envelope, residuals... on the same x grid.
    pub curves: Vec<Curve>,
    /// Free-form metadata (instrument, source file, spectrometer frequency...).
    pub metadata: BTreeMap<String, String>,
}

impl Spectrum {
    pub fn new(x: Vec<f64>, y: Vec<f64>, x_axis: Axis, y_axis: Axis) -> Self {
        Spectrum {
            x,
            y,
            sigma: None,
            x_axis,
            y_axis,
            curves: Vec::new(),
            metadata: BTreeMap::new(),
        }
    }
    pub fn len(&self) -> usize {
        self.x.len()
    }
    pub fn is_empty(&self) -> bool {
        self.x.is_empty()
    }
    /// The first curve with the given role, if any.
    pub fn curve(&self, role: CurveRole) -> Option<&Curve> {
        self.curves.iter().find(|c| c.role == role)
    }
    /// Checks the length and finiteness invariants; the message says what is wrong.
    pub fn validate(&self) -> Result<(), String> {
        let n = self.x.len();
        if self.y.len() != n {
            return Err(format!("x has {n} points but y has {}", self.y.len()));
        }
        if let Some(s) = &self.sigma {
            if s.len() != n {
                return Err(format!("x has {n} points but sigma has {}", s.len()));
            }
        }
        for c in &self.curves {
            if c.y.len() != n {
                return Err(format!(
                    "curve '{}' has {} points, the spectrum {n}",
                    c.name,
                    c.y.len()
                ));
            }
        }
        if let Some(i) = self.x.iter().position(|v| !v.is_finite()) {
            return Err(format!("x[{i}] is not a finite number"));
        }
        if let Some(i) = self.y.iter().position(|v| !v.is_finite()) {
            return Err(format!("y[{i}] is not a finite number"));
        }
        Ok(())
    }
}

/// Physical size of one pixel.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PixelSize {
    /// Width of a pixel (x direction).
    pub x: f64,
    /// Height of a pixel (y direction).
    pub y: f64,
    /// Unit of both, e.g. `nm`.
    pub unit: String,
}

/// A greyscale image or height map, row-major, `data[row * width + col]`.
///
/// f32 holds 16-bit integer samples exactly, so 16-bit data is never squashed.
/// Without a pixel size the image is analysed in pixels and reports say so.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Image {
    pub width: usize,
    pub height: usize,
    pub data: Vec<f32>,
    pub pixel_size: Option<PixelSize>,
    /// Quantity and unit of the samples, e.g. `intensity`/`counts` or `height`/`nm`.
    pub z_axis: Axis,
    /// Bit depth of the source samples (8, 16, 32 for float); informational.
    pub source_bits: u8,
    pub metadata: BTreeMap<String, String>,
}

impl Image {
    pub fn get(&self, col: usize, row: usize) -> f32 {
        self.data[row * self.width + col]
    }
}

/// A label image: 0 is background, 1..=count are objects (particles, regions).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Labels {
    pub width: usize,
    pub height: usize,
    pub labels: Vec<u32>,
    pub count: u32,
    pub pixel_size: Option<PixelSize>,
    /// How the labels were made (threshold method and value, connectivity...).
    pub metadata: BTreeMap<String, String>,
}

/// One column of a table: numbers (with optional standard uncertainties) or text.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Column {
    pub name: String,
    /// Empty for dimensionless or text columns.
    pub unit: String,
    pub data: ColumnData,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum ColumnData {
    /// NaN marks a missing cell.
    Number {
        values: Vec<f64>,
        uncertainty: Option<Vec<f64>>,
    },
    Text(Vec<String>),
}

impl ColumnData {
    pub fn len(&self) -> usize {
        match self {
            ColumnData::Number { values, .. } => values.len(),
            ColumnData::Text(v) => v.len(),
        }
    }
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A table of named, unit-carrying columns of equal length.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Table {
    pub title: String,
    pub columns: Vec<Column>,
}

impl Table {
    pub fn rows(&self) -> usize {
        self.columns.first().map_or(0, |c| c.data.len())
    }
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }
}

/// A value with its standard uncertainty (None when not known) and unit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Measurement {
    pub value: f64,
    pub uncertainty: Option<f64>,
    pub unit: String,
}

impl Measurement {
    pub fn new(value: f64, uncertainty: Option<f64>, unit: impl Into<String>) -> Self {
        Measurement {
            value,
            uncertainty,
            unit: unit.into(),
        }
    }
    pub fn exact(value: f64, unit: impl Into<String>) -> Self {
        Self::new(value, None, unit)
    }
}

/// A located peak (from peak detection).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Peak {
    /// Index of the maximum in the spectrum's arrays.
    pub index: usize,
    /// x of the maximum (refined by a parabola through three points where possible).
    pub position: f64,
    pub height: f64,
    pub prominence: f64,
    /// Full width at half prominence, in x units.
    pub fwhm: f64,
}

/// A list of located peaks together with the spectrum they were found in.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PeakList {
    pub spectrum: Spectrum,
    pub peaks: Vec<Peak>,
}

/// One parameter of a fitted model.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitParameter {
    /// Dotted name, e.g. `cc.center`, `background.slope`.
    pub name: String,
    pub value: f64,
    /// Standard error (covariance scaled by reduced χ²); None for fixed or tied ones.
    pub stderr: Option<f64>,
    pub unit: String,
    pub status: ParameterStatus,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum ParameterStatus {
    Free,
    Fixed,
    /// Computed from others by an expression (kept verbatim).
    Tied(String),
    /// Free, but ended on a bound: its standard error is not meaningful.
    AtBound,
}

/// Per-peak quantities derived from the fitted parameters, with propagated uncertainty.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FittedPeak {
    pub name: String,
    /// `gaussian`, `lorentzian`, `pseudo_voigt`, `voigt`.
    pub shape: String,
    pub center: Measurement,
    pub area: Measurement,
    pub fwhm: Measurement,
    pub height: Measurement,
}

/// Goodness-of-fit and solver outcome.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitStatistics {
    pub chi_square: f64,
    pub reduced_chi_square: f64,
    pub r_squared: f64,
    pub points: usize,
    pub free_parameters: usize,
    pub iterations: usize,
    pub converged: bool,
    /// Why the solver stopped, in words.
    pub reason: String,
    /// True when residuals were weighted by per-point sigma.
    pub weighted: bool,
}

/// The outcome of a least-squares fit of a model to a spectrum.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitResult {
    /// Short description of the model, e.g. `3 pseudo-Voigt peaks + linear background`.
    pub model: String,
    pub parameters: Vec<FitParameter>,
    /// Correlation matrix of the free parameters, row-major, in the order of the
    /// parameters whose status is Free or AtBound.
    pub correlation: Vec<f64>,
    pub peaks: Vec<FittedPeak>,
    /// Covariance of the peak areas (peaks × peaks, row-major), for propagating
    /// into fractions and ratios.
    pub area_covariance: Vec<f64>,
    /// The fitted data, with curves: background, each component, envelope, residual.
    pub spectrum: Spectrum,
    pub statistics: FitStatistics,
}

impl FitResult {
    pub fn parameter(&self, name: &str) -> Option<&FitParameter> {
        self.parameters.iter().find(|p| p.name == name)
    }
    pub fn peak(&self, name: &str) -> Option<&FittedPeak> {
        self.peaks.iter().find(|p| p.name == name)
    }
}

/// An input file handed to an importer: the engine reads the bytes (and keys the
/// cache by their hash); stages never open files themselves.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct InputFile {
    /// Path as shown to people (relative to the recipe folder).
    pub name: String,
    pub bytes: Vec<u8>,
}

/// Every kind of value a step can take or give.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum Value {
    File(InputFile),
    Spectrum(Spectrum),
    Peaks(PeakList),
    Fit(FitResult),
    Image(Image),
    Labels(Labels),
    Table(Table),
    /// Only result records (a quantification step).
    Summary,
}

impl Value {
    pub fn kind(&self) -> Kind {
        match self {
            Value::File(_) => Kind::File,
            Value::Spectrum(_) => Kind::Spectrum,
            Value::Peaks(_) => Kind::Peaks,
            Value::Fit(_) => Kind::Fit,
            Value::Image(_) => Kind::Image,
            Value::Labels(_) => Kind::Labels,
            Value::Table(_) => Kind::Table,
            Value::Summary => Kind::Summary,
        }
    }
}

/// The kind of a value, used to type-check a recipe before anything runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Kind {
    File,
    Spectrum,
    Peaks,
    Fit,
    Image,
    Labels,
    Table,
    Summary,
    /// A port that accepts any kind (e.g. a gathering table of results).
    Any,
}

impl Kind {
    pub fn name(self) -> &'static str {
        match self {
            Kind::File => "file",
            Kind::Spectrum => "spectrum",
            Kind::Peaks => "peak list",
            Kind::Fit => "fit result",
            Kind::Image => "image",
            Kind::Labels => "label image",
            Kind::Table => "table",
            Kind::Summary => "summary",
            Kind::Any => "any value",
        }
    }
    /// Whether a port declared as `self` accepts a value of kind `given`.
    /// A fit or a peak list carries its spectrum, so it may feed a spectrum port.
    pub fn accepts(self, given: Kind) -> bool {
        self == Kind::Any
            || self == given
            || (self == Kind::Spectrum && matches!(given, Kind::Fit | Kind::Peaks))
    }
}

/// A number or a word published by a step (a found element, a convergence flag).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum Scalar {
    Number(f64),
    Text(String),
}

/// One published result: `name = value ± uncertainty unit`.
/// The engine adds the step and item when it writes results.json.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Record {
    pub name: String,
    pub value: Scalar,
    pub uncertainty: Option<f64>,
    pub unit: String,
}

impl Record {
    pub fn number(
        name: impl Into<String>,
        value: f64,
        uncertainty: Option<f64>,
        unit: &str,
    ) -> Self {
        Record {
            name: name.into(),
            value: Scalar::Number(value),
            uncertainty,
            unit: unit.to_string(),
        }
    }
    pub fn measurement(name: impl Into<String>, m: &Measurement) -> Self {
        Self::number(name, m.value, m.uncertainty, &m.unit)
    }
    pub fn text(name: impl Into<String>, value: impl Into<String>) -> Self {
        Record {
            name: name.into(),
            value: Scalar::Text(value.into()),
            uncertainty: None,
            unit: String::new(),
        }
    }
    pub fn as_number(&self) -> Option<f64> {
        match self.value {
            Scalar::Number(v) => Some(v),
            Scalar::Text(_) => None,
        }
    }
}

/// How loud a note is in the report.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum NoteLevel {
    Info,
    Warning,
}

/// Something a person reading the results should know (a reduced χ² far from 1,
/// fewer than 100 particles, a parameter on its bound).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Note {
    pub level: NoteLevel,
    pub text: String,
}

/// What one stage run gives: the value passed downstream, the published records and notes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Artifact {
    pub value: Value,
    pub results: Vec<Record>,
    pub notes: Vec<Note>,
}

impl Artifact {
    pub fn new(value: Value) -> Self {
        Artifact {
            value,
            results: Vec::new(),
            notes: Vec::new(),
        }
    }
    pub fn with_results(mut self, results: Vec<Record>) -> Self {
        self.results = results;
        self
    }
    pub fn record(&mut self, r: Record) {
        self.results.push(r);
    }
    pub fn warn(&mut self, text: impl Into<String>) {
        self.notes.push(Note {
            level: NoteLevel::Warning,
            text: text.into(),
        });
    }
    pub fn info(&mut self, text: impl Into<String>) {
        self.notes.push(Note {
            level: NoteLevel::Info,
            text: text.into(),
        });
    }
    pub fn result(&self, name: &str) -> Option<&Record> {
        self.results.iter().find(|r| r.name == name)
    }
    /// The spectrum inside a Spectrum, Fit or Peaks value.
    pub fn spectrum(&self) -> Option<&Spectrum> {
        match &self.value {
            Value::Spectrum(s) => Some(s),
            Value::Fit(f) => Some(&f.spectrum),
            Value::Peaks(p) => Some(&p.spectrum),
            _ => None,
        }
    }
}

/// The per-point arrays of an artifact (spectrum x, y, σ and curves; image samples;
/// label maps; file bytes), taken out so that the rest — records, notes, axes, fit
/// statistics, tables — can be stored and read back on its own, cheaply.
///
/// The arrays are listed in a fixed walk order ([`Artifact::take_arrays`]), and
/// [`Artifact::put_arrays`] walks the same order, so the pair round-trips exactly.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Arrays {
    pub f64s: Vec<Vec<f64>>,
    pub f32s: Vec<Vec<f32>>,
    pub u32s: Vec<Vec<u32>>,
    pub bytes: Vec<Vec<u8>>,
}

impl Arrays {
    /// Bytes the arrays hold (for sizing buffers).
    pub fn byte_len(&self) -> usize {
        self.f64s.iter().map(|v| v.len() * 8).sum::<usize>()
            + self.f32s.iter().map(|v| v.len() * 4).sum::<usize>()
            + self.u32s.iter().map(|v| v.len() * 4).sum::<usize>()
            + self.bytes.iter().map(Vec::len).sum::<usize>()
    }
}

fn take_spectrum(s: &mut Spectrum, a: &mut Arrays) {
    a.f64s.push(std::mem::take(&mut s.x));
    a.f64s.push(std::mem::take(&mut s.y));
    if let Some(sigma) = &mut s.sigma {
        a.f64s.push(std::mem::take(sigma));
    }
    for c in &mut s.curves {
        a.f64s.push(std::mem::take(&mut c.y));
    }
}

fn put_spectrum(s: &mut Spectrum, f: &mut impl Iterator<Item = Vec<f64>>) -> Result<(), String> {
    let mut next = || f.next().ok_or_else(|| "too few arrays".to_string());
    s.x = next()?;
    s.y = next()?;
    if s.sigma.is_some() {
        s.sigma = Some(next()?);
    }
    for c in &mut s.curves {
        c.y = next()?;
    }
    Ok(())
}

impl Artifact {
    /// Moves every per-point array out of the artifact, leaving them empty.
    pub fn take_arrays(&mut self) -> Arrays {
        let mut a = Arrays::default();
        match &mut self.value {
            Value::Spectrum(s) => take_spectrum(s, &mut a),
            Value::Fit(fit) => take_spectrum(&mut fit.spectrum, &mut a),
            Value::Peaks(p) => take_spectrum(&mut p.spectrum, &mut a),
            Value::Image(img) => a.f32s.push(std::mem::take(&mut img.data)),
            Value::Labels(l) => a.u32s.push(std::mem::take(&mut l.labels)),
            Value::File(file) => a.bytes.push(std::mem::take(&mut file.bytes)),
            Value::Table(_) | Value::Summary => {}
        }
        a
    }

    /// Puts back arrays taken by [`Artifact::take_arrays`] from an artifact of the
    /// same shape; an error (never a panic) when they do not fit.
    pub fn put_arrays(&mut self, a: Arrays) -> Result<(), String> {
        let mut f64s = a.f64s.into_iter();
        let mut f32s = a.f32s.into_iter();
        let mut u32s = a.u32s.into_iter();
        let mut bytes = a.bytes.into_iter();
        let missing = || "too few arrays".to_string();
        match &mut self.value {
            Value::Spectrum(s) => put_spectrum(s, &mut f64s)?,
            Value::Fit(fit) => put_spectrum(&mut fit.spectrum, &mut f64s)?,
            Value::Peaks(p) => put_spectrum(&mut p.spectrum, &mut f64s)?,
            Value::Image(img) => img.data = f32s.next().ok_or_else(missing)?,
            Value::Labels(l) => l.labels = u32s.next().ok_or_else(missing)?,
            Value::File(file) => file.bytes = bytes.next().ok_or_else(missing)?,
            Value::Table(_) | Value::Summary => {}
        }
        if f64s.next().is_some()
            || f32s.next().is_some()
            || u32s.next().is_some()
            || bytes.next().is_some()
        {
            return Err("too many arrays".into());
        }
        Ok(())
    }
}

#[cfg(test)]
mod array_tests {
    use super::*;

    #[test]
    fn arrays_round_trip_for_every_value_with_arrays() {
        let mut s = Spectrum::new(
            vec![1.0, 2.0],
            vec![3.0, 4.0],
            Axis::new("x", ""),
            Axis::new("y", ""),
        );
        s.sigma = Some(vec![0.5, 0.25]);
        s.curves.push(Curve {
            name: "bg".into(),
            role: CurveRole::Background,
            y: vec![f64::NAN, 1.0],
        });
        let values = vec![
            Value::Spectrum(s.clone()),
            Value::Peaks(PeakList {
                spectrum: s,
                peaks: Vec::new(),
            }),
            Value::Image(Image {
                width: 2,
                height: 1,
                data: vec![1.0, 2.0],
                pixel_size: None,
                z_axis: Axis::new("z", ""),
                source_bits: 16,
                metadata: BTreeMap::new(),
            }),
            Value::Labels(Labels {
                width: 1,
                height: 1,
                labels: vec![7],
                count: 1,
                pixel_size: None,
                metadata: BTreeMap::new(),
            }),
            Value::Summary,
        ];
        for v in values {
            let whole = Artifact::new(v);
            let mut shell = whole.clone();
            let arrays = shell.take_arrays();
            shell.put_arrays(arrays.clone()).unwrap();
            // NaN != NaN, so compare through the debug text.
            assert_eq!(format!("{shell:?}"), format!("{whole:?}"));
            let mut short = whole.clone();
            let mut a = short.take_arrays();
            if a.byte_len() > 0 {
                a.f64s.pop();
                a.f32s.pop();
                a.u32s.pop();
                assert!(short.put_arrays(a).is_err());
            }
        }
    }
}
