//! What to fit: the options of `fit.peaks`, also the input of [`super::fit_spectrum`],
//! and their translation into a parameter table (names, bounds, links) before any data
//! is seen.

use super::expr::Expr;
use super::shapes::Shape;
use schemars::JsonSchema;
use serde::de::{MapAccess, Visitor};
use serde::ser::SerializeMap;
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::collections::BTreeMap;
use std::fmt;

/// A string-keyed map that keeps the order its keys were written in.
#[derive(Clone, Debug, PartialEq)]
pub struct Ordered<T>(pub Vec<(String, T)>);

impl<T> Default for Ordered<T> {
    fn default() -> Self {
        Ordered(Vec::new())
    }
}

impl<T> Ordered<T> {
    pub fn get(&self, key: &str) -> Option<&T> {
        self.0.iter().find(|(k, _)| k == key).map(|(_, v)| v)
    }
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
}

impl<T: Serialize> Serialize for Ordered<T> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in &self.0 {
            m.serialize_entry(k, v)?;
        }
        m.end()
    }
}

impl<'de, T: Deserialize<'de>> Deserialize<'de> for Ordered<T> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V<T>(std::marker::PhantomData<T>);
        impl<'de, T: Deserialize<'de>> Visitor<'de> for V<T> {
            type Value = Ordered<T>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a map of names to settings")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut a: A) -> Result<Self::Value, A::Error> {
                let mut out: Vec<(String, T)> = Vec::new();
                while let Some((k, v)) = a.next_entry::<String, T>()? {
                    if out.iter().any(|(o, _)| *o == k) {
                        return Err(serde::de::Error::custom(format!("'{k}' is given twice")));
                    }
                    out.push((k, v));
                }
                Ok(Ordered(out))
            }
        }
        d.deserialize_map(V(std::marker::PhantomData))
    }
}

/// The three visitor methods that read any JSON number into `Type::Variant(f64)`.
macro_rules! numbers_visit_as {
    ($ty:ident :: $variant:ident) => {
        fn visit_f64<E: serde::de::Error>(self, v: f64) -> Result<$ty, E> {
            Ok($ty::$variant(v))
        }
        fn visit_i64<E: serde::de::Error>(self, v: i64) -> Result<$ty, E> {
            Ok($ty::$variant(v as f64))
        }
        fn visit_u64<E: serde::de::Error>(self, v: u64) -> Result<$ty, E> {
            Ok($ty::$variant(v as f64))
        }
    };
}

/// A parameter: a bare number is a start value; the long form adds bounds, fixing or a link.
/// (Read by hand rather than as an untagged enum, so a misspelt key in the long form is
/// reported by name with the keys that would have been accepted.)
#[derive(Clone, Debug, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum ParamSpec {
    /// Start value; the parameter is free and unbounded (widths stay positive).
    Value(f64),
    /// Start value, bounds, fixing or a link.
    Detail(ParamDetail),
}

/// The long form of a parameter.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct ParamDetail {
    /// Start value (the value itself when fixed); guessed from the data when absent.
    pub value: Option<f64>,
    /// Lower bound; widths default to 0, the Lorentzian fraction to 0.
    pub min: Option<f64>,
    /// Upper bound; the Lorentzian fraction defaults to 1.
    pub max: Option<f64>,
    /// Hold the parameter at `value` (default false).
    pub fixed: bool,
    /// Equal to the same parameter of the named peak (`fwhm: { same_as: cc }`).
    pub same_as: Option<String>,
    /// Computed from other parameters, e.g. `cc.center + 1.5` or `0.5 * cc.area`.
    pub expr: Option<String>,
}

impl<'de> Deserialize<'de> for ParamSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = ParamSpec;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number, or a map with value, min, max, fixed, same_as or expr")
            }
            numbers_visit_as!(ParamSpec::Value);
            fn visit_map<A: MapAccess<'de>>(self, a: A) -> Result<ParamSpec, A::Error> {
                ParamDetail::deserialize(serde::de::value::MapAccessDeserializer::new(a))
                    .map(ParamSpec::Detail)
            }
        }
        d.deserialize_any(V)
    }
}

impl ParamSpec {
    fn detail(&self) -> ParamDetail {
        match self {
            ParamSpec::Value(v) => ParamDetail {
                value: Some(*v),
                ..Default::default()
            },
            ParamSpec::Detail(d) => d.clone(),
        }
    }
}

/// Sub-shell of a spin–orbit doublet, naming its area ratio.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum SubShell {
    /// p: j = 1/2 : 3/2 areas 1 : 2 (ratio 0.5).
    P,
    /// d: j = 3/2 : 5/2 areas 2 : 3 (ratio 2/3).
    D,
    /// f: j = 5/2 : 7/2 areas 3 : 4 (ratio 3/4).
    F,
}

impl SubShell {
    /// Area ratio (2j+1 degeneracies) of the minor to the major line; the
    /// degeneracy ratio of the two j levels (common practice for photoelectron lines).
    /// "d-shell 2:3" and so on, for the methods sentence.
    pub fn words(self) -> &'static str {
        match self {
            SubShell::P => "p-shell 1:2",
            SubShell::D => "d-shell 2:3",
            SubShell::F => "f-shell 3:4",
        }
    }
    pub fn ratio(self) -> f64 {
        match self {
            SubShell::P => 1.0 / 2.0,
            SubShell::D => 2.0 / 3.0,
            SubShell::F => 3.0 / 4.0,
        }
    }
}

/// An area ratio: a number, or a sub-shell letter.
#[derive(Clone, Debug, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum Ratio {
    /// Area of this peak divided by the area of the other.
    Value(f64),
    /// The degeneracy ratio of a p, d or f doublet.
    Shell(SubShell),
}

impl<'de> Deserialize<'de> for Ratio {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Ratio;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a number or one of p, d, f")
            }
            numbers_visit_as!(Ratio::Value);
            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<Ratio, E> {
                match v {
                    "p" => Ok(Ratio::Shell(SubShell::P)),
                    "d" => Ok(Ratio::Shell(SubShell::D)),
                    "f" => Ok(Ratio::Shell(SubShell::F)),
                    _ => Err(E::custom(format!(
                        "'{v}' is not a sub-shell: use p (1:2), d (2:3), f (3:4) or a number"
                    ))),
                }
            }
        }
        d.deserialize_any(V)
    }
}

impl Ratio {
    pub fn value(&self) -> f64 {
        match self {
            Ratio::Value(v) => *v,
            Ratio::Shell(s) => s.ratio(),
        }
    }
}

/// This peak is the partner of another in a spin–orbit doublet.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Doublet {
    /// The other (major) line of the doublet.
    pub of: String,
    /// Centre of this peak minus centre of the other, in x units.
    pub split: f64,
    /// Area of this peak over the other: a number or `p` (1:2), `d` (2:3), `f` (3:4).
    pub ratio: Ratio,
    /// Give this peak the widths of the other (default true).
    #[serde(default = "yes")]
    pub same_width: bool,
}

fn yes() -> bool {
    true
}

/// One peak to fit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct PeakSpec {
    /// Shape of this peak; the fit's `shape` when absent.
    pub shape: Option<Shape>,
    /// Centre (x units); guessed from the most prominent free maximum when absent.
    pub center: Option<ParamSpec>,
    /// Area (y units × x units); guessed from height and width when absent.
    pub area: Option<ParamSpec>,
    /// Full width at half maximum (gaussian, lorentzian, pseudo_voigt), in x units.
    pub fwhm: Option<ParamSpec>,
    /// Lorentzian fraction η of a pseudo-Voigt, 0..1 (start 0.5 when absent).
    pub eta: Option<ParamSpec>,
    /// Gaussian standard deviation σ of a Voigt, in x units.
    pub sigma: Option<ParamSpec>,
    /// Lorentzian half width γ of a Voigt, in x units.
    pub gamma: Option<ParamSpec>,
    /// Make this the partner line of a spin–orbit doublet (centre, area and widths linked).
    pub doublet: Option<Doublet>,
}

impl PeakSpec {
    fn param(&self, name: &str) -> Option<&ParamSpec> {
        match name {
            "center" => self.center.as_ref(),
            "area" => self.area.as_ref(),
            "fwhm" => self.fwhm.as_ref(),
            "eta" => self.eta.as_ref(),
            "sigma" => self.sigma.as_ref(),
            "gamma" => self.gamma.as_ref(),
            _ => None,
        }
    }
}

/// The background under the peaks.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum BackgroundChoice {
    /// The input's background curve (held fixed) when it has one, else `linear`.
    Auto,
    /// The input's background curve, held fixed; an error when there is none.
    Curve,
    /// No background.
    None,
    /// A fitted constant c0.
    Constant,
    /// A fitted line c0 + c1·(x − x_ref), x_ref the middle of the fit range.
    Linear,
    /// A fitted quadratic in (x − x_ref).
    Quadratic,
    /// A fitted cubic in (x − x_ref).
    Cubic,
    /// A fitted a·exp(−b·x).
    Exponential,
}

impl BackgroundChoice {
    pub fn key(self) -> &'static str {
        match self {
            BackgroundChoice::Auto => "auto",
            BackgroundChoice::Curve => "curve",
            BackgroundChoice::None => "none",
            BackgroundChoice::Constant => "constant",
            BackgroundChoice::Linear => "linear",
            BackgroundChoice::Quadratic => "quadratic",
            BackgroundChoice::Cubic => "cubic",
            BackgroundChoice::Exponential => "exponential",
        }
    }
    /// Parameter names of a fitted background, None for none/curve/auto.
    pub fn params(self) -> &'static [&'static str] {
        match self {
            BackgroundChoice::Constant => &["c0"],
            BackgroundChoice::Linear => &["c0", "c1"],
            BackgroundChoice::Quadratic => &["c0", "c1", "c2"],
            BackgroundChoice::Cubic => &["c0", "c1", "c2", "c3"],
            BackgroundChoice::Exponential => &["a", "b"],
            _ => &[],
        }
    }
}

/// How residuals are weighted.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Weights {
    /// The spectrum's sigma when it has one; else Poisson when y is in counts; else none.
    Auto,
    /// 1/σ² from the spectrum's per-point sigma.
    Sigma,
    /// Poisson: σ = √counts with a floor of 1 (common practice for counting data).
    Poisson,
    /// Unweighted least squares.
    None,
}

/// The options of `fit.peaks`: which peaks, on which background, over which range.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct FitSpec {
    /// Shape of every peak that does not name its own (default pseudo_voigt).
    pub shape: Shape,
    /// The peaks by name, in order; each may give start values, bounds, links, a doublet.
    #[schemars(with = "BTreeMap<String, PeakSpec>")]
    pub peaks: Ordered<PeakSpec>,
    /// Background model (default auto: the input's background curve, else linear).
    pub background: BackgroundChoice,
    /// Start values, bounds or links of the background parameters (c0, c1... or a, b).
    #[schemars(with = "BTreeMap<String, ParamSpec>")]
    pub background_parameters: Ordered<ParamSpec>,
    /// Fit only points with x in [low, high] (x units); the whole spectrum when absent.
    pub range: Option<[f64; 2]>,
    /// Residual weighting (default auto).
    pub weights: Weights,
    /// Most Levenberg–Marquardt iterations (trial steps) before giving up (default 200).
    pub max_iterations: usize,
    /// Relative tolerance on the χ² reduction and on the step (default 1e-10).
    pub tolerance: f64,
}

impl Default for FitSpec {
    fn default() -> Self {
        FitSpec {
            shape: Shape::PseudoVoigt,
            peaks: Ordered::default(),
            background: BackgroundChoice::Auto,
            background_parameters: Ordered::default(),
            range: None,
            weights: Weights::Auto,
            max_iterations: 200,
            tolerance: 1e-10,
        }
    }
}

/// An option problem: dotted path and message.
#[derive(Clone, Debug, PartialEq)]
pub struct SpecError {
    pub path: String,
    pub message: String,
}

fn err<T>(path: impl Into<String>, message: impl Into<String>) -> Result<T, SpecError> {
    Err(SpecError {
        path: path.into(),
        message: message.into(),
    })
}

/// One parameter as the options define it, before data gives start values.
#[derive(Clone, Debug)]
pub struct Slot {
    /// `peak.param` or `background.c0`.
    pub name: String,
    /// Option path for messages.
    pub path: String,
    pub value: Option<f64>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub fixed: bool,
    /// A link: parsed expression and its text.
    pub link: Option<(Expr, String)>,
}

/// The parameter table the options define: peaks (name, shape, first slot) and slots.
#[derive(Clone, Debug)]
pub struct Layout {
    pub peaks: Vec<(String, Shape, usize)>,
    pub slots: Vec<Slot>,
    /// First slot of the fitted background's parameters (when it has any).
    pub background_offset: usize,
}

fn is_name(s: &str) -> bool {
    let mut c = s.chars();
    matches!(c.next(), Some(ch) if ch.is_ascii_alphabetic() || ch == '_')
        && c.all(|ch| ch.is_ascii_alphanumeric() || ch == '_')
}

fn slot_from(
    name: String,
    path: String,
    spec: Option<&ParamSpec>,
    default_min: Option<f64>,
    default_max: Option<f64>,
) -> Result<Slot, SpecError> {
    let d = spec.map(ParamSpec::detail).unwrap_or_default();
    let link = match (&d.same_as, &d.expr) {
        (Some(_), Some(_)) => return err(&path, "give either same_as or expr, not both"),
        (Some(peak), None) => {
            let param = name.split('.').nth(1).unwrap_or("");
            let text = format!("{peak}.{param}");
            Some((
                Expr::parse(&text).map_err(|e| SpecError {
                    path: format!("{path}.same_as"),
                    message: format!("'{peak}' is not a peak name: {e}"),
                })?,
                text,
            ))
        }
        (None, Some(text)) => Some((
            Expr::parse(text).map_err(|e| SpecError {
                path: format!("{path}.expr"),
                message: format!("cannot read '{text}': {e}"),
            })?,
            text.clone(),
        )),
        (None, None) => None,
    };
    if link.is_some() && (d.fixed || d.value.is_some() || d.min.is_some() || d.max.is_some()) {
        return err(
            &path,
            "a linked parameter takes no value, bounds or fixed: it is computed",
        );
    }
    if d.fixed && d.value.is_none() {
        return err(&path, "a fixed parameter needs a value");
    }
    for (v, what) in [(d.value, "value"), (d.min, "min"), (d.max, "max")] {
        if let Some(v) = v {
            if !v.is_finite() {
                return err(format!("{path}.{what}"), "must be a finite number");
            }
        }
    }
    let min = d.min.or(default_min);
    let max = d.max.or(default_max);
    if let (Some(lo), Some(hi)) = (min, max) {
        if lo >= hi {
            return err(&path, format!("min ({lo}) must be below max ({hi})"));
        }
    }
    if let Some(v) = d.value {
        if min.is_some_and(|lo| v < lo) || max.is_some_and(|hi| v > hi) {
            return err(
                &path,
                format!("value {v} lies outside its bounds [{min:?}, {max:?}]"),
            );
        }
    }
    Ok(Slot {
        name,
        path,
        value: d.value,
        min,
        max,
        fixed: d.fixed,
        link,
    })
}

impl FitSpec {
    /// The shape each peak gets.
    pub fn shape_of(&self, p: &PeakSpec) -> Shape {
        p.shape.unwrap_or(self.shape)
    }

    /// Checks the options and lays out the parameter table; `fitted_background` is the
    /// background model that will be fitted (None for a curve or no background).
    pub fn layout(&self, fitted_background: BackgroundChoice) -> Result<Layout, SpecError> {
        if self.peaks.is_empty() {
            return err(
                "peaks",
                "name at least one peak to fit, e.g. peaks: { main: {} }",
            );
        }
        if self.max_iterations == 0 {
            return err("max_iterations", "must be at least 1");
        }
        if !(self.tolerance > 0.0 && self.tolerance < 1.0) {
            return err("tolerance", "must lie between 0 and 1 (e.g. 1e-10)");
        }
        if let Some([a, b]) = self.range {
            if a.partial_cmp(&b) != Some(std::cmp::Ordering::Less) {
                return err(
                    "range",
                    format!("range must be [low, high] with low < high (got [{a}, {b}])"),
                );
            }
        }
        let mut slots = Vec::new();
        let mut peaks = Vec::new();
        for (name, p) in &self.peaks.0 {
            let path = format!("peaks.{name}");
            if !is_name(name) || name == "background" {
                return err(
                    &path,
                    format!(
                        "'{name}' cannot name a peak: use letters, digits and _ (not 'background')"
                    ),
                );
            }
            let shape = self.shape_of(p);
            for other in ["fwhm", "eta", "sigma", "gamma"] {
                if p.param(other).is_some() && !shape.params().contains(&other) {
                    return err(
                        format!("{path}.{other}"),
                        format!(
                            "a {} peak has no '{other}' (it takes {})",
                            shape.key(),
                            shape.params().join(", ")
                        ),
                    );
                }
            }
            let offset = slots.len();
            for &param in shape.params() {
                let ppath = format!("{path}.{param}");
                let (dmin, dmax) = match param {
                    "fwhm" | "sigma" | "gamma" => (Some(0.0), None),
                    "eta" => (Some(0.0), Some(1.0)),
                    _ => (None, None),
                };
                let mut spec = p.param(param).cloned();
                if let Some(d) = &p.doublet {
                    let link = match param {
                        "center" => Some(format!("{}.center + {}", d.of, d.split)),
                        "area" => Some(format!("{} * {}.area", d.ratio.value(), d.of)),
                        _ if d.same_width => Some(format!("{}.{param}", d.of)),
                        _ => None,
                    };
                    if let Some(text) = link {
                        if spec.is_some() {
                            return err(
                                &ppath,
                                format!("'{param}' is set by the doublet with '{}'", d.of),
                            );
                        }
                        spec = Some(ParamSpec::Detail(ParamDetail {
                            expr: Some(text),
                            ..Default::default()
                        }));
                    }
                }
                slots.push(slot_from(
                    format!("{name}.{param}"),
                    ppath,
                    spec.as_ref(),
                    dmin,
                    dmax,
                )?);
            }
            if let Some(d) = &p.doublet {
                if !(d.split.is_finite() && d.ratio.value().is_finite() && d.ratio.value() > 0.0) {
                    return err(
                        format!("{path}.doublet"),
                        "split must be a number and ratio a positive number",
                    );
                }
                match self.peaks.get(&d.of) {
                    None => {
                        return err(
                            format!("{path}.doublet.of"),
                            format!("there is no peak '{}'", d.of),
                        )
                    }
                    Some(o) if d.same_width && self.shape_of(o) != shape => {
                        return err(
                            format!("{path}.doublet"),
                            format!(
                                "same_width needs both lines of one shape ({} vs {})",
                                shape.key(),
                                self.shape_of(o).key()
                            ),
                        )
                    }
                    _ => {}
                }
            }
            peaks.push((name.clone(), shape, offset));
        }
        let background_offset = slots.len();
        let names = fitted_background.params();
        for (k, _) in &self.background_parameters.0 {
            if !names.contains(&k.as_str()) {
                return err(
                    format!("background_parameters.{k}"),
                    if names.is_empty() {
                        "this background (a fixed curve, or none) has no fitted parameters"
                            .to_string()
                    } else {
                        format!(
                            "the {} background has parameters {}",
                            fitted_background.key(),
                            names.join(", ")
                        )
                    },
                );
            }
        }
        for &n in names {
            slots.push(slot_from(
                format!("background.{n}"),
                format!("background_parameters.{n}"),
                self.background_parameters.get(n),
                None,
                None,
            )?);
        }
        // Links must name parameters of this fit and must not loop.
        for s in &slots {
            if let Some((e, text)) = &s.link {
                for n in e.names() {
                    if !slots.iter().any(|o| o.name == n) {
                        return err(
                            &s.path,
                            format!(
                                "'{text}' refers to '{n}', which is not a parameter of this fit"
                            ),
                        );
                    }
                }
            }
        }
        let mut state = vec![0u8; slots.len()];
        fn visit(slots: &[Slot], k: usize, state: &mut [u8]) -> Result<(), SpecError> {
            match state[k] {
                2 => return Ok(()),
                1 => {
                    return err(
                        &slots[k].path,
                        format!("the links through '{}' form a cycle", slots[k].name),
                    )
                }
                _ => {}
            }
            state[k] = 1;
            if let Some((e, _)) = &slots[k].link {
                for n in e.names() {
                    if let Some(j) = slots.iter().position(|o| o.name == n) {
                        visit(slots, j, state)?;
                    }
                }
            }
            state[k] = 2;
            Ok(())
        }
        for k in 0..slots.len() {
            visit(&slots, k, &mut state)?;
        }
        Ok(Layout {
            peaks,
            slots,
            background_offset,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(json: serde_json::Value) -> FitSpec {
        serde_json::from_value(json).unwrap()
    }

    #[test]
    fn doublet_expands_to_links_and_order_is_kept() {
        let s = spec(serde_json::json!({
            "shape": "gaussian",
            "peaks": {
                "p32": { "center": 100.0 },
                "p12": { "doublet": { "of": "p32", "split": 5.9, "ratio": "p" } },
                "a": {}
            }
        }));
        let l = s.layout(BackgroundChoice::Linear).unwrap();
        let names: Vec<_> = l.peaks.iter().map(|p| p.0.as_str()).collect();
        assert_eq!(names, ["p32", "p12", "a"]);
        let links: Vec<_> = l
            .slots
            .iter()
            .filter_map(|s| s.link.as_ref().map(|(_, t)| (s.name.as_str(), t.as_str())))
            .collect();
        assert_eq!(
            links,
            [
                ("p12.center", "p32.center + 5.9"),
                ("p12.area", "0.5 * p32.area"),
                ("p12.fwhm", "p32.fwhm")
            ]
        );
        assert_eq!(l.slots.last().unwrap().name, "background.c1");
        // Round trip through JSON keeps the order.
        let back: FitSpec = serde_json::from_value(serde_json::to_value(&s).unwrap()).unwrap();
        assert_eq!(back, s);
    }

    #[test]
    fn bad_options_name_their_path() {
        let cases = [
            (serde_json::json!({}), "peaks"),
            (
                serde_json::json!({"peaks": {"a": {"fwhm": {"min": 2.0, "max": 1.0}}}}),
                "peaks.a.fwhm",
            ),
            (
                serde_json::json!({"peaks": {"a": {"sigma": 1.0}}}),
                "peaks.a.sigma",
            ),
            (
                serde_json::json!({"peaks": {"a": {"fwhm": {"same_as": "zz"}}}}),
                "peaks.a.fwhm",
            ),
            (
                serde_json::json!({"peaks": {"a": {"area": {"expr": "2 * "}}}}),
                "peaks.a.area.expr",
            ),
            (
                serde_json::json!({"peaks": {"a": {"area": {"expr": "b.area"}}, "b": {"area": {"expr": "a.area"}}}}),
                "peaks.a.area",
            ),
            (
                serde_json::json!({"peaks": {"a": {"center": {"fixed": true}}}}),
                "peaks.a.center",
            ),
            (
                serde_json::json!({"peaks": {"a": {"doublet": {"of": "q", "split": 1.0, "ratio": "d"}}}}),
                "peaks.a.doublet.of",
            ),
            (
                serde_json::json!({"peaks": {"a": {}}, "background_parameters": {"q": 1.0}}),
                "background_parameters.q",
            ),
            (
                serde_json::json!({"peaks": {"a": {}}, "range": [5.0, 1.0]}),
                "range",
            ),
        ];
        for (json, path) in cases {
            let e = spec(json.clone())
                .layout(BackgroundChoice::Linear)
                .unwrap_err();
            assert_eq!(e.path, path, "{json}: {}", e.message);
        }
        let e =
            serde_json::from_value::<FitSpec>(serde_json::json!({"peaks": {"a": {"centre": 1}}}));
        assert!(e.is_err());
        assert_eq!(SubShell::D.ratio(), 2.0 / 3.0);
        // A misspelt key in a parameter's long form is named, with the accepted keys.
        let e = crate::stage::parse_options::<FitSpec>(
            &serde_json::json!({"peaks": {"a": {"fwhm": {"maxx": 2.0}}}}),
        )
        .unwrap_err();
        assert_eq!(e.path, "peaks.a.fwhm.maxx");
        let u = e.unknown_key.expect("unknown key reported");
        assert_eq!(u.key, "maxx");
        assert!(u.expected.contains(&"max".to_string()));
        let e = crate::stage::parse_options::<FitSpec>(&serde_json::json!(
            {"peaks": {"a": {"doublet": {"of": "b", "split": 1, "ratio": "q"}}}}
        ))
        .unwrap_err();
        assert!(e.message.contains("not a sub-shell"), "{}", e.message);
        let ok: FitSpec = serde_json::from_value(serde_json::json!(
            {"peaks": {"a": {"center": 3, "area": {"value": 2, "min": 0}}}}
        ))
        .unwrap();
        assert_eq!(
            ok.peaks.get("a").unwrap().center,
            Some(ParamSpec::Value(3.0))
        );
    }
}
