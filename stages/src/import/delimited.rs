//! `import.delimited`: a spectrum from a delimited text export (CSV, TSV, whitespace).
//!
//! Reads one x column and one y column from text with an optional header line.
//! Delimiter and decimal mark are detected (or given); comment lines are skipped;
//! axis quantity and unit are taken from the header ("Energy (eV)", "Wavelength [nm]",
//! "binding_energy_eV") unless the options name them. Descending x is kept as given.
//! Method: plain parsing, no published source needed (common practice).

use crate::stage::{OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// A column, by header name or by 1-based position.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(untagged)]
pub enum ColumnRef {
    Position(usize),
    Name(String),
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Delimiter {
    /// Detected from the first data lines: tab, then semicolon, then comma, then whitespace.
    Auto,
    Comma,
    Semicolon,
    Tab,
    Whitespace,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum DecimalMark {
    /// A comma is the decimal mark when the delimiter is not a comma and numbers hold
    /// commas but no points.
    Auto,
    Point,
    Comma,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Column holding x: header name or 1-based position.
    pub x: ColumnRef,
    /// Column holding y: header name or 1-based position.
    pub y: ColumnRef,
    /// Optional column holding the standard uncertainty of y.
    pub sigma: Option<ColumnRef>,
    /// Field delimiter.
    pub delimiter: Delimiter,
    /// Decimal mark of the numbers.
    pub decimal: DecimalMark,
    /// Lines starting with any of these characters are comments.
    pub comment: String,
    /// Quantity on x (e.g. `binding energy`); taken from the header when not given.
    pub x_quantity: Option<String>,
    /// Unit of x (e.g. `eV`); taken from the header when not given.
    pub x_unit: Option<String>,
    /// Quantity on y (e.g. `intensity`); taken from the header when not given.
    pub y_quantity: Option<String>,
    /// Unit of y (e.g. `counts`); taken from the header when not given.
    pub y_unit: Option<String>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            x: ColumnRef::Position(1),
            y: ColumnRef::Position(2),
            sigma: None,
            delimiter: Delimiter::Auto,
            decimal: DecimalMark::Auto,
            comment: "#%".into(),
            x_quantity: None,
            x_unit: None,
            y_quantity: None,
            y_unit: None,
        }
    }
}

pub struct ImportDelimited;

static INPUTS: &[Port] = &[Port::each("file", Kind::File, "a delimited text file")];

impl TypedStage for ImportDelimited {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "import.delimited",
        version: 1,
        summary: "Read a spectrum from delimited text (CSV, TSV, whitespace), with header and unit detection",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        for (key, c) in [
            ("x", Some(&o.x)),
            ("y", Some(&o.y)),
            ("sigma", o.sigma.as_ref()),
        ] {
            if let Some(ColumnRef::Position(0)) = c {
                return Err(OptionError::new(key, "column positions start at 1"));
            }
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let col = |c: &ColumnRef| match c {
            ColumnRef::Position(p) => format!("column {p}"),
            ColumnRef::Name(n) => format!("column '{n}'"),
        };
        format!(
            "Spectra were read from delimited text exports (x from {}, y from {}).",
            col(&o.x),
            col(&o.y)
        )
    }

    fn run(&self, inputs: &crate::stage::Inputs, o: &Options) -> Result<Artifact, StageError> {
        let file = match &inputs.one(0)?.value {
            Value::File(f) => f,
            other => {
                return Err(StageError::input(format!(
                    "expected a file, got a {}",
                    other.kind().name()
                )))
            }
        };
        let spectrum = parse(&file.name, &file.bytes, o)?;
        let mut a = Artifact::new(Value::Spectrum(spectrum));
        if let Value::Spectrum(s) = &a.value {
            let n = s.len();
            a.info(format!("{n} points read from {}", file.name));
        }
        Ok(a)
    }
}

/// Parses delimited text into a spectrum. `name` is used in error messages only.
pub fn parse(name: &str, bytes: &[u8], o: &Options) -> Result<Spectrum, StageError> {
    let text = std::str::from_utf8(bytes).map_err(|e| {
        let line = bytes[..e.valid_up_to()]
            .iter()
            .filter(|&&b| b == b'\n')
            .count()
            + 1;
        StageError::data(name, Some(line), "not valid UTF-8 text")
    })?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let lines: Vec<(usize, &str)> = text
        .lines()
        .enumerate()
        .map(|(i, l)| (i + 1, l.trim_end_matches('\r')))
        .filter(|(_, l)| {
            let t = l.trim();
            !t.is_empty() && !t.starts_with(|c| o.comment.contains(c))
        })
        .collect();
    if lines.is_empty() {
        return Err(StageError::data(
            name,
            None,
            "no data lines (file is empty or all comments)",
        ));
    }
    let delimiter = match o.delimiter {
        Delimiter::Auto => detect_delimiter(&lines),
        d => d,
    };
    let decimal_comma = match o.decimal {
        DecimalMark::Comma => true,
        DecimalMark::Point => false,
        DecimalMark::Auto => {
            delimiter != Delimiter::Comma
                && lines.iter().skip(1).take(20).any(|(_, l)| l.contains(','))
                && !lines.iter().skip(1).take(20).any(|(_, l)| l.contains('.'))
        }
    };
    let fields = |l: &str| -> Vec<String> {
        let parts: Vec<&str> = match delimiter {
            Delimiter::Comma => l.split(',').collect(),
            Delimiter::Semicolon => l.split(';').collect(),
            Delimiter::Tab => l.split('\t').collect(),
            Delimiter::Whitespace | Delimiter::Auto => l.split_whitespace().collect(),
        };
        parts
            .into_iter()
            .map(|p| p.trim().trim_matches('"').to_string())
            .collect()
    };
    let number = |s: &str| -> Option<f64> {
        let v: f64 = if decimal_comma {
            s.replace(',', ".").parse().ok()?
        } else {
            s.parse().ok()?
        };
        Some(v)
    };
    let first = fields(lines[0].1);
    let has_header = first.iter().any(|f| number(f).is_none());
    let header: Vec<String> = if has_header { first } else { Vec::new() };
    let resolve = |c: &ColumnRef, key: &str| -> Result<usize, StageError> {
        match c {
            ColumnRef::Position(p) => Ok(p - 1),
            ColumnRef::Name(n) => header
                .iter()
                .position(|h| h == n || h.eq_ignore_ascii_case(n))
                .ok_or_else(|| {
                    StageError::data(
                        name,
                        Some(lines[0].0),
                        format!(
                            "no column named '{n}' for {key}; the header has: {}",
                            if header.is_empty() {
                                "(no header line)".to_string()
                            } else {
                                header.join(", ")
                            }
                        ),
                    )
                }),
        }
    };
    let xi = resolve(&o.x, "x")?;
    let yi = resolve(&o.y, "y")?;
    let si = o.sigma.as_ref().map(|c| resolve(c, "sigma")).transpose()?;
    let needed = xi.max(yi).max(si.unwrap_or(0)) + 1;
    let (mut x, mut y, mut sigma) = (Vec::new(), Vec::new(), Vec::new());
    for (line_no, line) in lines.iter().skip(usize::from(has_header)) {
        let f = fields(line);
        if f.len() < needed {
            return Err(StageError::data(
                name,
                Some(*line_no),
                format!("expected at least {needed} fields, found {}", f.len()),
            ));
        }
        let get = |i: usize, what: &str| -> Result<f64, StageError> {
            let v = number(&f[i]).ok_or_else(|| {
                StageError::data(
                    name,
                    Some(*line_no),
                    format!("{what} value '{}' (field {}) is not a number", f[i], i + 1),
                )
            })?;
            if !v.is_finite() {
                return Err(StageError::data(
                    name,
                    Some(*line_no),
                    format!("{what} value '{}' (field {}) is not finite", f[i], i + 1),
                ));
            }
            Ok(v)
        };
        x.push(get(xi, "x")?);
        y.push(get(yi, "y")?);
        if let Some(si) = si {
            sigma.push(get(si, "sigma")?);
        }
    }
    if x.len() < 2 {
        return Err(StageError::data(
            name,
            None,
            format!("a spectrum needs at least 2 data points, found {}", x.len()),
        ));
    }
    let (hx_q, hx_u) = header
        .get(xi)
        .map(|h| split_quantity_unit(h))
        .unwrap_or_default();
    let (hy_q, hy_u) = header
        .get(yi)
        .map(|h| split_quantity_unit(h))
        .unwrap_or_default();
    let pick = |given: &Option<String>, from_header: String, fallback: &str| {
        given.clone().unwrap_or(if from_header.is_empty() {
            fallback.to_string()
        } else {
            from_header
        })
    };
    let x_axis = Axis::new(pick(&o.x_quantity, hx_q, "x"), pick(&o.x_unit, hx_u, ""));
    let y_axis = Axis::new(
        pick(&o.y_quantity, hy_q, "intensity"),
        pick(&o.y_unit, hy_u, ""),
    );
    let mut s = Spectrum::new(x, y, x_axis, y_axis);
    if si.is_some() {
        s.sigma = Some(sigma);
    }
    s.metadata.insert("source".into(), name.to_string());
    if let Some(h) = header.get(yi) {
        s.metadata.insert("column".into(), h.clone());
    }
    Ok(s)
}

fn detect_delimiter(lines: &[(usize, &str)]) -> Delimiter {
    let sample: Vec<&str> = lines.iter().take(21).map(|(_, l)| *l).collect();
    // Most lines, not all: one ragged line must be reported, not change the delimiter.
    let all = |c: char| 2 * sample.iter().filter(|l| l.contains(c)).count() > sample.len();
    if all('\t') {
        Delimiter::Tab
    } else if all(';') {
        Delimiter::Semicolon
    } else if all(',') {
        // "1,5 2,5" (decimal comma, whitespace-separated) vs "1.5,2.5".
        let probe = sample.get(1).unwrap_or(&sample[0]);
        let ws_fields = probe.split_whitespace().count();
        if ws_fields >= 2 && probe.split(',').count() == ws_fields + 1 {
            Delimiter::Whitespace
        } else {
            Delimiter::Comma
        }
    } else {
        Delimiter::Whitespace
    }
}

/// Units recognised as a trailing `_unit` in a header name.
const KNOWN_UNITS: &[&str] = &[
    "eV", "keV", "meV", "nm", "um", "cm-1", "ppm", "Hz", "kHz", "MHz", "deg", "counts", "cps",
    "au", "a.u.", "%T", "%", "s", "K",
];

/// "Energy (eV)" / "Energy [eV]" / "binding_energy_eV" -> ("Energy", "eV").
pub fn split_quantity_unit(header: &str) -> (String, String) {
    let h = header.trim();
    for (open, close) in [('(', ')'), ('[', ']')] {
        if let (Some(a), true) = (h.rfind(open), h.ends_with(close)) {
            let q = h[..a].trim().to_string();
            let u = h[a + 1..h.len() - 1].trim().to_string();
            if !q.is_empty() {
                return (q, u);
            }
        }
    }
    if let Some(i) = h.rfind('_') {
        let unit = &h[i + 1..];
        if KNOWN_UNITS.contains(&unit) {
            return (h[..i].replace('_', " "), unit.to_string());
        }
    }
    (h.replace('_', " "), String::new())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn opts() -> Options {
        Options::default()
    }

    #[test]
    fn reads_csv_with_header_and_units() {
        let s = parse("a.csv", b"Energy (eV),Counts\n1.5,10\n2.5,20\n", &opts()).unwrap();
        assert_eq!(s.x, vec![1.5, 2.5]);
        assert_eq!(s.y, vec![10.0, 20.0]);
        assert_eq!(s.x_axis, Axis::new("Energy", "eV"));
        assert_eq!(s.y_axis.quantity, "Counts");
    }

    #[test]
    fn reads_semicolon_with_decimal_comma_and_comments() {
        let s = parse(
            "b.csv",
            b"# exported\nnm;A\n400,5;0,25\n401,5;0,5\n",
            &opts(),
        )
        .unwrap();
        assert_eq!(s.x, vec![400.5, 401.5]);
        assert_eq!(s.y, vec![0.25, 0.5]);
    }

    #[test]
    fn reads_headerless_whitespace_and_keeps_descending_x() {
        let s = parse("c.txt", b"3 1\n2 4\n1 9\n", &opts()).unwrap();
        assert_eq!(s.x, vec![3.0, 2.0, 1.0]);
        assert_eq!(s.x_axis.quantity, "x");
    }

    #[test]
    fn picks_columns_by_name_and_underscore_units() {
        let o = Options {
            x: ColumnRef::Name("binding_energy_eV".into()),
            y: ColumnRef::Name("counts".into()),
            ..opts()
        };
        let s = parse("d.csv", b"counts,binding_energy_eV\n5,290\n6,289\n", &o).unwrap();
        assert_eq!(s.x, vec![290.0, 289.0]);
        assert_eq!(s.x_axis, Axis::new("binding energy", "eV"));
    }

    #[test]
    fn errors_name_file_and_line() {
        let e = parse("e.csv", b"x,y\n1,2\n2,abc\n", &opts()).unwrap_err();
        assert_eq!(
            e.to_string(),
            "e.csv:3: y value 'abc' (field 2) is not a number"
        );
        let e = parse("f.csv", b"x,y\n1,2\n3\n", &opts()).unwrap_err();
        assert_eq!(
            e.to_string(),
            "f.csv:3: expected at least 2 fields, found 1"
        );
        let e = parse("g.csv", b"", &opts()).unwrap_err();
        assert!(e.to_string().starts_with("g.csv: no data lines"));
        let o = Options {
            y: ColumnRef::Name("cnts".into()),
            ..opts()
        };
        let e = parse("h.csv", b"x,counts\n1,2\n2,3\n", &o).unwrap_err();
        assert_eq!(
            e.to_string(),
            "h.csv:1: no column named 'cnts' for y; the header has: x, counts"
        );
    }
}
