//! `import.jcamp`: a single spectrum from a JCAMP-DX file (versions 4.24 and 5.01).
//!
//! JCAMP-DX is the open IUPAC exchange format for spectra [mcdonald1988] [lampen1994].
//! A file is a list of labelled-data records `##LABEL=value` (labels compared without
//! case, spaces, dashes, slashes or underscores; `$$` starts a comment). Supported data
//! tables:
//! - `##XYDATA=(X++(Y..Y))`: each line an abscissa followed by ordinates, in AFFN
//!   (free-format decimal) or the compressed ASDF forms: SQZ (the first digit and the
//!   sign squeezed into one character, `@`, `A`–`I`, `a`–`i`), DIF (differences from the
//!   previous ordinate, `%`, `J`–`R`, `j`–`r`) and DUP (repeat counts, `S`–`Z`, `s`).
//!   When a line ends in DIF form the next line starts with a Y-check value, which must
//!   equal the last ordinate; a disagreement is an error naming the line. X values are
//!   FIRSTX + i·(LASTX − FIRSTX)/(NPOINTS − 1); ordinates are multiplied by YFACTOR.
//! - `##XYPOINTS=(XY..XY)` and `##PEAK TABLE=(XY..XY)` (or `(XYW..XYW)`): explicit
//!   pairs, multiplied by XFACTOR and YFACTOR.
//!
//! Compound files (several blocks, `##BLOCKS=`) are refused: one spectrum per file.
//! Lines that contain ASDF characters other than `E`/`e` are read as compressed; on an
//! AFFN line `E` is an exponent.

use crate::import::delimited::parse_f64;
use crate::stage::{Inputs, Port, Reference, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Kind, Spectrum, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::borrow::Cow;
use std::collections::BTreeMap;

/// Which data table to read when a file holds more than one.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Table {
    /// The first of XYDATA, XYPOINTS, PEAK TABLE found in the file.
    Auto,
    /// `##XYDATA=`.
    Xydata,
    /// `##XYPOINTS=`.
    Xypoints,
    /// `##PEAK TABLE=`.
    PeakTable,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Which data table to read.
    pub table: Table,
    /// Tolerance on the check of each line's X against FIRSTX + i·DELTAX, as a
    /// fraction of one point spacing (at least half an XFACTOR unit, the resolution
    /// the abscissa is written at).
    pub x_check_tolerance: f64,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            table: Table::Auto,
            x_check_tolerance: 0.5,
        }
    }
}

pub struct ImportJcamp;

static INPUTS: &[Port] = &[Port::each(
    "file",
    Kind::File,
    "a JCAMP-DX file (.jdx, .dx)",
)];

static REFS: &[Reference] = &[
    Reference {
        key: "mcdonald1988",
        citation: "R. S. McDonald, P. A. Wilks, JCAMP-DX: A standard form for exchange of infrared spectra in computer readable form, Appl. Spectrosc. 42, 151–162 (1988).",
    },
    Reference {
        key: "lampen1994",
        citation: "P. Lampen, H. Hillig, A. N. Davies, M. Linscheid, JCAMP-DX for infrared spectroscopy; and A. N. Davies, P. Lampen, JCAMP-DX for NMR, Appl. Spectrosc. 47, 1093–1099 (1993) and 48, 1545–1552 (1994).",
    },
];

impl TypedStage for ImportJcamp {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "import.jcamp",
        version: 1,
        summary: "Read a single spectrum from JCAMP-DX 4.24/5.01 (AFFN and compressed ASDF, XYPOINTS, PEAK TABLE)",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: REFS,
    };

    fn check(&self, o: &Options) -> Result<(), crate::stage::OptionError> {
        if !(o.x_check_tolerance > 0.0 && o.x_check_tolerance.is_finite()) {
            return Err(crate::stage::OptionError::new(
                "x_check_tolerance",
                "must be a positive fraction of the point spacing",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let t = match o.table {
            Table::Auto => "the first data table in the file",
            Table::Xydata => "the XYDATA table",
            Table::Xypoints => "the XYPOINTS table",
            Table::PeakTable => "the PEAK TABLE",
        };
        format!(
            "Spectra were read from JCAMP-DX files [mcdonald1988] [lampen1994] ({t}), decoding compressed ordinates with their Y-check values verified and checking each line's abscissa against FIRSTX and DELTAX to within {} of a point spacing (or half an XFACTOR unit).",
            o.x_check_tolerance
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let file = super::input_file(inputs)?;
        let (spectrum, warnings) = parse(&file.name, &file.bytes, o)?;
        let n = spectrum.len();
        let mut a = Artifact::new(Value::Spectrum(spectrum));
        a.info(format!("{n} points read from {}", file.name));
        for w in warnings {
            a.warn(w);
        }
        Ok(a)
    }
}

/// One labelled-data record: normalised label, value text (continuation lines joined
/// with '\n', comments removed) and the 1-based line of the label.
#[derive(Clone, Debug)]
struct Ldr<'a> {
    label: String,
    value: String,
    line: usize,
    /// (line number, trimmed text) of each continuation line (data tables), borrowed
    /// from the file's text.
    body: Vec<(usize, &'a str)>,
}

/// Label normalisation of the standard: uppercase, without spaces, dashes, slashes
/// and underscores.
fn normalise_label(l: &str) -> String {
    l.chars()
        .filter(|c| !matches!(c, ' ' | '-' | '/' | '_' | '\t'))
        .flat_map(char::to_uppercase)
        .collect()
}

fn strip_comment(l: &str) -> &str {
    // A byte search: `$` is ASCII, so the cut is on a character boundary.
    match l.as_bytes().windows(2).position(|w| w == b"$$") {
        Some(i) => &l[..i],
        None => l,
    }
}

fn records<'a>(name: &str, text: &'a str) -> Result<Vec<Ldr<'a>>, StageError> {
    let mut out: Vec<Ldr<'a>> = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        let l = strip_comment(raw.trim_end_matches('\r'));
        let t = l.trim_start();
        if let Some(rest) = t.strip_prefix("##") {
            let eq = rest.find('=').ok_or_else(|| {
                StageError::data(name, Some(line_no), "labelled-data record without '='")
            })?;
            out.push(Ldr {
                label: normalise_label(&rest[..eq]),
                value: rest[eq + 1..].trim().to_string(),
                line: line_no,
                body: Vec::new(),
            });
        } else if let Some(last) = out.last_mut() {
            if !t.trim().is_empty() {
                last.body.push((line_no, t.trim()));
            }
        } else if !t.trim().is_empty() {
            return Err(StageError::data(
                name,
                Some(line_no),
                "text before the first labelled-data record (a JCAMP-DX file starts with ##TITLE=)",
            ));
        }
    }
    Ok(out)
}

/// Parses a JCAMP-DX file into a spectrum and warnings for the reader.
pub fn parse(name: &str, bytes: &[u8], o: &Options) -> Result<(Spectrum, Vec<String>), StageError> {
    let text: Cow<str> = match std::str::from_utf8(bytes) {
        Ok(t) => Cow::Borrowed(t),
        // Older files are often Latin-1: read bytes as code points rather than fail.
        Err(_) => Cow::Owned(bytes.iter().map(|&b| b as char).collect()),
    };
    let mut recs = records(name, &text)?;
    let mut warnings = Vec::new();
    let has_end = recs.iter().any(|r| r.label == "END");
    if let Some(end) = recs.iter().position(|r| r.label == "END") {
        if recs.len() > end + 1 {
            warnings.push(format!(
                "records after ##END= (line {}) were ignored: one spectrum per file",
                recs[end].line
            ));
        }
        recs.truncate(end);
    }
    if recs.is_empty() {
        return Err(StageError::data(
            name,
            None,
            "no labelled-data records: not a JCAMP-DX file",
        ));
    }
    if recs[0].label != "TITLE" {
        return Err(StageError::data(
            name,
            Some(recs[0].line),
            format!(
                "the first record must be ##TITLE=, found ##{}=",
                recs[0].label
            ),
        ));
    }
    if let Some(b) = recs.iter().find(|r| r.label == "NTUPLES") {
        return Err(StageError::data(
            name,
            Some(b.line),
            "##NTUPLES= (multi-page data such as complex NMR FIDs) is not supported; export a single XYDATA spectrum",
        ));
    }
    if let Some(b) = recs.iter().find(|r| r.label == "BLOCKS") {
        return Err(StageError::data(
            name,
            Some(b.line),
            "compound JCAMP-DX files (##BLOCKS=) are not supported; export one spectrum per file",
        ));
    }
    let get = |label: &str| recs.iter().find(|r| r.label == label);
    let num = |label: &str| -> Result<Option<f64>, StageError> {
        match get(label) {
            None => Ok(None),
            Some(r) => parse_affn(r.value.trim())
                .filter(|v| v.is_finite())
                .map(Some)
                .ok_or_else(|| {
                    StageError::data(
                        name,
                        Some(r.line),
                        format!("##{}= value '{}' is not a number", label, r.value),
                    )
                }),
        }
    };
    let xfactor = num("XFACTOR")?.unwrap_or(1.0);
    let yfactor = num("YFACTOR")?.unwrap_or(1.0);
    let tables = ["XYDATA", "XYPOINTS", "PEAKTABLE"];
    let wanted: &[&str] = match o.table {
        Table::Auto => &tables,
        Table::Xydata => &tables[..1],
        Table::Xypoints => &tables[1..2],
        Table::PeakTable => &tables[2..],
    };
    let table = recs
        .iter()
        .find(|r| wanted.contains(&r.label.as_str()))
        .ok_or_else(|| {
            StageError::data(
                name,
                None,
                format!("no ##{}= data table in the file", wanted.join("=, ##")),
            )
        })?;
    let (x, y) = if table.label == "XYDATA" {
        let form = table.value.replace(' ', "").to_ascii_uppercase();
        if form != "(X++(Y..Y))" {
            return Err(StageError::data(
                name,
                Some(table.line),
                format!(
                    "XYDATA form '{}' is not supported (only (X++(Y..Y)))",
                    table.value
                ),
            ));
        }
        let req = |label: &str| -> Result<f64, StageError> {
            num(label)?.ok_or_else(|| {
                StageError::data(
                    name,
                    Some(table.line),
                    format!("##XYDATA= needs ##{label}= to place the abscissae"),
                )
            })
        };
        let firstx = req("FIRSTX")?;
        let lastx = req("LASTX")?;
        let npoints = num("NPOINTS")?;
        let ys = decode_xydata(name, &table.body)?;
        let n = ys.values.len();
        if let Some(np) = npoints {
            if np != n as f64 {
                return Err(StageError::data(
                    name,
                    Some(table.line),
                    format!("##NPOINTS= says {np} but the XYDATA table holds {n} ordinates"),
                ));
            }
        }
        if n < 2 {
            return Err(StageError::data(
                name,
                Some(table.line),
                format!("a spectrum needs at least 2 points, the table holds {n}"),
            ));
        }
        let step = (lastx - firstx) / (n - 1) as f64;
        if let Some(dx) = num("DELTAX")? {
            if (dx - step).abs() > 1e-3 * step.abs().max(f64::MIN_POSITIVE) {
                warnings.push(format!(
                    "##DELTAX= {dx} differs from (LASTX − FIRSTX)/(NPOINTS − 1) = {step}; the latter was used"
                ));
            }
        }
        // Check each line's abscissa against the point it starts.
        for (line, start, xl) in &ys.line_x {
            let expect = firstx + step * *start as f64;
            let got = xl * xfactor;
            // The abscissa is written in XFACTOR units, so it may be rounded to half one.
            let allowed = (o.x_check_tolerance * step.abs()).max(0.5 * xfactor.abs());
            if (got - expect).abs() > allowed {
                return Err(StageError::data(
                    name,
                    Some(*line),
                    format!(
                        "line abscissa {got} (X × XFACTOR) does not match point {} at {expect}",
                        start + 1
                    ),
                ));
            }
        }
        let x: Vec<f64> = (0..n).map(|i| firstx + step * i as f64).collect();
        let y: Vec<f64> = ys.values.iter().map(|v| v * yfactor).collect();
        // ##FIRSTY= is the first ordinate in real units; writers round it, so a
        // disagreement beyond one YFACTOR unit is reported, not fatal.
        if let Some(fy) = num("FIRSTY")? {
            if (fy - y[0]).abs() > yfactor.abs() * (1.0 + 1e-9) + 1e-9 * fy.abs() {
                warnings.push(format!(
                    "##FIRSTY= {fy} differs from the first decoded ordinate {} (check YFACTOR)",
                    y[0]
                ));
            }
        }
        (x, y)
    } else {
        let form = table.value.replace(' ', "").to_ascii_uppercase();
        let per = match form.as_str() {
            "(XY..XY)" => 2,
            "(XYW..XYW)" => 3,
            "(XYM..XYM)" => 3,
            _ => {
                return Err(StageError::data(
                    name,
                    Some(table.line),
                    format!(
                        "table form '{}' is not supported (only (XY..XY), (XYW..XYW))",
                        table.value
                    ),
                ))
            }
        };
        let mut x = Vec::new();
        let mut y = Vec::new();
        for (line, text) in &table.body {
            for group in text.split(';').map(str::trim).filter(|g| !g.is_empty()) {
                let vals: Vec<&str> = group
                    .split(|c: char| c == ',' || c.is_whitespace())
                    .filter(|t| !t.is_empty())
                    .collect();
                // Pairs may also be written as a whitespace-separated run: x, y  x, y.
                if !vals.len().is_multiple_of(per) {
                    return Err(StageError::data(
                        name,
                        Some(*line),
                        format!("expected groups of {per} values, found {}", vals.len()),
                    ));
                }
                for g in vals.chunks(per) {
                    let px = parse_affn(g[0]).filter(|v| v.is_finite());
                    let py = parse_affn(g[1]).filter(|v| v.is_finite());
                    match (px, py) {
                        (Some(a), Some(b)) => {
                            x.push(a * xfactor);
                            y.push(b * yfactor);
                        }
                        _ => {
                            return Err(StageError::data(
                                name,
                                Some(*line),
                                format!("'{}' is not a pair of numbers", g.join(", ")),
                            ))
                        }
                    }
                }
            }
        }
        if x.is_empty() {
            return Err(StageError::data(
                name,
                Some(table.line),
                "the table holds no points",
            ));
        }
        if let Some(np) = num("NPOINTS")? {
            if np != x.len() as f64 {
                return Err(StageError::data(
                    name,
                    Some(table.line),
                    format!(
                        "##NPOINTS= says {np} but the table holds {} points (truncated file?)",
                        x.len()
                    ),
                ));
            }
        }
        (x, y)
    };
    // A file cut short loses its closing record; refuse rather than read part of it.
    if !has_end {
        return Err(StageError::data(
            name,
            Some(text.lines().count()),
            "the file ends without ##END=: it is truncated or incomplete",
        ));
    }

    let text_of = |label: &str| get(label).map(|r| r.value.trim().to_string());
    let xunits = text_of("XUNITS").unwrap_or_default();
    let yunits = text_of("YUNITS").unwrap_or_default();
    let observe = num(".OBSERVEFREQUENCY")?;
    let x_axis = x_axis_of(&xunits, observe.is_some());
    let y_axis = y_axis_of(&yunits);
    let mut s = Spectrum::new(x, y, x_axis, y_axis);
    let mut meta = BTreeMap::new();
    meta.insert("source".to_string(), name.to_string());
    for (label, key) in [
        ("TITLE", "title"),
        ("JCAMPDX", "jcamp_version"),
        ("DATATYPE", "data_type"),
        ("ORIGIN", "origin"),
        ("OWNER", "owner"),
        (".OBSERVENUCLEUS", "observe_nucleus"),
        ("XUNITS", "jcamp_xunits"),
        ("YUNITS", "jcamp_yunits"),
    ] {
        if let Some(v) = text_of(label) {
            meta.insert(key.to_string(), v);
        }
    }
    if let Some(f) = observe {
        meta.insert("observe_frequency_mhz".to_string(), format!("{f}"));
    }
    s.metadata = meta;
    if let Err(e) = s.validate() {
        return Err(StageError::data(name, Some(table.line), e));
    }
    Ok((s, warnings))
}

fn x_axis_of(units: &str, nmr: bool) -> Axis {
    match normalise_label(units).as_str() {
        "1CM" | "CM1" => Axis::new("wavenumber", "cm⁻¹"),
        "NANOMETERS" | "NM" => Axis::new("wavelength", "nm"),
        "MICROMETERS" | "UM" => Axis::new("wavelength", "µm"),
        "HZ" if nmr => Axis::new("frequency offset", "Hz"),
        "HZ" => Axis::new("frequency", "Hz"),
        "PPM" => Axis::new("chemical shift", "ppm"),
        "EV" => Axis::new("energy", "eV"),
        "SECONDS" => Axis::new("time", "s"),
        "DEGREES" | "2THETA" => Axis::new("2θ", "°"),
        "" => Axis::new("x", ""),
        other => Axis::new("x", other.to_ascii_lowercase()),
    }
}

fn y_axis_of(units: &str) -> Axis {
    match normalise_label(units).as_str() {
        "ABSORBANCE" => Axis::new("absorbance", ""),
        "TRANSMITTANCE" => Axis::new("transmittance", ""),
        "REFLECTANCE" => Axis::new("reflectance", ""),
        "KUBELKAMUNK" => Axis::new("Kubelka–Munk function", ""),
        "COUNTS" => Axis::new("intensity", "counts"),
        "ARBITRARYUNITS" | "" => Axis::new("intensity", ""),
        other => Axis::new("intensity", other.to_ascii_lowercase()),
    }
}

/// An AFFN number (free-format decimal, optional exponent).
fn parse_affn(s: &str) -> Option<f64> {
    let t = s.trim();
    if t.is_empty() {
        return None;
    }
    t.parse::<f64>().ok()
}

/// Decoded ordinates of an XYDATA table, plus (line, index of its first point, raw X)
/// for each line, for the abscissa check.
struct Decoded {
    values: Vec<f64>,
    line_x: Vec<(usize, usize, f64)>,
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Tok {
    /// An absolute value (AFFN or SQZ).
    Abs(f64),
    /// A difference from the previous ordinate (DIF).
    Dif(f64),
    /// Repeat the previous token, total count (DUP).
    Dup(u64),
    /// `?`: a missing value.
    Missing,
}

fn sqz_digit(c: char) -> Option<(f64, i8)> {
    match c {
        '@' => Some((0.0, 1)),
        'A'..='I' => Some(((c as u8 - b'A' + 1) as f64, 1)),
        'a'..='i' => Some(((c as u8 - b'a' + 1) as f64, -1)),
        _ => None,
    }
}

fn dif_digit(c: char) -> Option<(f64, i8)> {
    match c {
        '%' => Some((0.0, 1)),
        'J'..='R' => Some(((c as u8 - b'J' + 1) as f64, 1)),
        'j'..='r' => Some(((c as u8 - b'j' + 1) as f64, -1)),
        _ => None,
    }
}

fn dup_digit(c: char) -> Option<u64> {
    match c {
        'S'..='Z' => Some((c as u8 - b'S' + 1) as u64),
        's' => Some(9),
        _ => None,
    }
}

fn is_compressed(line: &str) -> bool {
    // Every ASDF character is ASCII, so the bytes can be tested one by one.
    line.bytes().any(|b| {
        let c = char::from(b);
        (c != 'E' && c != 'e' && sqz_digit(c).is_some())
            || dif_digit(c).is_some()
            || dup_digit(c).is_some()
    })
}

/// `d` followed by `rest` (digits and points) read as a number, without building a
/// string for the usual short values.
fn lead_value(d: u8, rest: &str) -> Option<f64> {
    let mut buf = [0u8; 32];
    match buf.get_mut(..rest.len() + 1) {
        Some(b) => {
            b[0] = b'0' + d;
            b[1..].copy_from_slice(rest.as_bytes());
            std::str::from_utf8(b).ok().and_then(parse_f64)
        }
        None => parse_f64(&format!("{d}{rest}")),
    }
}

/// Splits one XYDATA line into its X (AFFN), returned, and ordinate tokens, written to
/// `toks`. Works on byte positions: every token character is ASCII; another character
/// is a separator when it is whitespace and refused otherwise.
fn tokenize(line: &str, toks: &mut Vec<Tok>) -> Result<f64, String> {
    toks.clear();
    let compressed = is_compressed(line);
    let b = line.as_bytes();
    let mut i = 0;
    let mut x: Option<f64> = None;
    // The end of the digits (and decimal points) from `start`.
    let tail = |start: usize| {
        let mut j = start;
        while j < b.len() && (b[j].is_ascii_digit() || b[j] == b'.') {
            j += 1;
        }
        j
    };
    // `i` always sits on a character boundary: it moves over ASCII bytes one at a
    // time or over a whole character.
    while i < b.len() {
        let c = if b[i].is_ascii() {
            char::from(b[i])
        } else {
            let Some(c) = line[i..].chars().next() else {
                break;
            };
            if c.is_whitespace() {
                i += c.len_utf8();
                continue;
            }
            return Err(format!("unexpected character '{c}'"));
        };
        if c.is_whitespace() || c == ',' || c == ';' {
            i += 1;
            continue;
        }
        if c == '?' {
            toks.push(Tok::Missing);
            i += 1;
            continue;
        }
        let lead = |d: f64, sign: i8, rest: &str| -> Result<f64, String> {
            let v = lead_value(d as u8, rest).ok_or_else(|| format!("bad number after '{c}'"))?;
            Ok(if sign < 0 { -v } else { v })
        };
        if c.is_ascii_digit() || c == '.' || c == '+' || c == '-' {
            // AFFN: optional sign, digits, point, and (on uncompressed lines) exponent.
            let mut j = i + usize::from(c == '+' || c == '-');
            j = tail(j);
            // Where an exponent letter was taken (the number is read from the line
            // as written; `E` and `e` read alike).
            let mut exponent = None;
            if !compressed && j < b.len() && (b[j] == b'E' || b[j] == b'e') {
                let mut k = j + 1;
                if k < b.len() && (b[k] == b'+' || b[k] == b'-') {
                    k += 1;
                }
                let st = k;
                while k < b.len() && b[k].is_ascii_digit() {
                    k += 1;
                }
                if k > st {
                    exponent = Some(j - i);
                    j = k;
                }
            }
            let s = &line[i..j];
            let v = parse_f64(s).ok_or_else(|| {
                let mut shown = s.to_string();
                if let Some(e) = exponent {
                    shown.replace_range(e..e + 1, "e");
                }
                format!("'{shown}' is not a number")
            })?;
            if x.is_none() {
                x = Some(v);
            } else {
                toks.push(Tok::Abs(v));
            }
            i = j;
            continue;
        }
        if let Some((d, sign)) = sqz_digit(c) {
            let j = tail(i + 1);
            let v = lead(d, sign, &line[i + 1..j])?;
            if x.is_none() {
                x = Some(v);
            } else {
                toks.push(Tok::Abs(v));
            }
            i = j;
            continue;
        }
        if let Some((d, sign)) = dif_digit(c) {
            let j = tail(i + 1);
            if x.is_none() {
                return Err("a line must start with its abscissa, not a DIF value".into());
            }
            toks.push(Tok::Dif(lead(d, sign, &line[i + 1..j])?));
            i = j;
            continue;
        }
        if let Some(d) = dup_digit(c) {
            let j = tail(i + 1);
            let rest = &line[i + 1..j];
            if rest.contains('.') {
                return Err(format!("DUP count '{c}{rest}' is not a whole number"));
            }
            // The count as `u64` parsing reads it (too large is an error).
            let n = rest
                .bytes()
                .try_fold(d, |n, r| {
                    n.checked_mul(10)?.checked_add(u64::from(r - b'0'))
                })
                .ok_or_else(|| format!("bad DUP count after '{c}'"))?;
            if x.is_none() {
                return Err("a line must start with its abscissa, not a DUP count".into());
            }
            toks.push(Tok::Dup(n));
            i = j;
            continue;
        }
        return Err(format!("unexpected character '{c}'"));
    }
    x.ok_or_else(|| "empty data line".to_string())
}

/// More ordinates than any single spectrum holds (a 64 Mi-point free induction
/// decay is already unusual); a DUP count beyond it is taken as corruption.
const MAX_ORDINATES: u64 = 100_000_000;

fn decode_xydata(name: &str, body: &[(usize, &str)]) -> Result<Decoded, StageError> {
    let mut values: Vec<f64> = Vec::new();
    let mut line_x = Vec::with_capacity(body.len());
    // Whether the previous line ended in DIF form (then this line opens with a Y-check).
    let mut prev_dif: Option<usize> = None;
    // Buffers reused from line to line.
    let mut toks: Vec<Tok> = Vec::new();
    let mut line_vals: Vec<f64> = Vec::new();
    for (line_no, text) in body {
        let err = |m: String| StageError::data(name, Some(*line_no), m);
        let x = tokenize(text, &mut toks).map_err(err)?;
        line_vals.clear();
        // The last expanded token, to repeat for DUP: (was DIF, its value).
        let mut last_tok: Option<Tok> = None;
        let mut current = values.last().copied();
        let mut ended_dif = false;
        for &t in &toks {
            match t {
                Tok::Abs(v) => {
                    line_vals.push(v);
                    current = Some(v);
                    ended_dif = false;
                    last_tok = Some(t);
                }
                Tok::Dif(d) => {
                    let base = current.ok_or_else(|| {
                        err("a DIF value has no previous ordinate to add to".into())
                    })?;
                    let v = base + d;
                    line_vals.push(v);
                    current = Some(v);
                    ended_dif = true;
                    last_tok = Some(t);
                }
                Tok::Dup(n) => {
                    if n < 1 {
                        return Err(err("DUP count must be at least 1".into()));
                    }
                    // A corrupt count (`Z99999999999`) would otherwise try to expand
                    // to more points than memory holds.
                    let total = (values.len() + line_vals.len()) as u64;
                    if total.saturating_add(n) > MAX_ORDINATES {
                        return Err(err(format!(
                            "DUP count {n} would give more than {MAX_ORDINATES} ordinates"
                        )));
                    }
                    match last_tok {
                        Some(Tok::Abs(v)) => {
                            for _ in 1..n {
                                line_vals.push(v);
                            }
                        }
                        Some(Tok::Dif(d)) => {
                            for _ in 1..n {
                                let v = current.unwrap_or(0.0) + d;
                                line_vals.push(v);
                                current = Some(v);
                            }
                        }
                        _ => return Err(err("a DUP count has nothing before it to repeat".into())),
                    }
                    last_tok = Some(t);
                }
                Tok::Missing => {
                    return Err(err("missing ordinate '?' is not supported in XYDATA".into()))
                }
            }
        }
        if line_vals.is_empty() {
            return Err(err("a data line holds an abscissa but no ordinates".into()));
        }
        let start = if let Some(prev_line) = prev_dif {
            // Y-check: the first ordinate repeats the last one of the previous line.
            let last = values.last().copied().unwrap_or(f64::NAN);
            let check = line_vals[0];
            if check != last {
                return Err(err(format!(
                    "Y-check value {check} disagrees with the last ordinate {last} of line {prev_line}"
                )));
            }
            values.len() - 1
        } else {
            values.len()
        };
        line_x.push((*line_no, start, x));
        // Without the Y-check value.
        values.extend_from_slice(&line_vals[usize::from(prev_dif.is_some())..]);
        prev_dif = ended_dif.then_some(*line_no);
    }
    Ok(Decoded { values, line_x })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_enormous_dup_count_is_refused_not_expanded() {
        let body = [(7usize, "1 1Z99999999999")];
        let e = decode_xydata("t.jdx", &body).err().expect("refused");
        let msg = e.to_string();
        assert!(
            msg.contains("t.jdx:7") && msg.contains("more than 100000000 ordinates"),
            "{msg}"
        );
    }

    fn read(text: &str) -> Result<(Spectrum, Vec<String>), StageError> {
        parse("t.jdx", text.as_bytes(), &Options::default())
    }

    const HEAD: &str = "##TITLE=test\n##JCAMP-DX=4.24\n##DATA TYPE=INFRARED SPECTRUM\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n##XFACTOR=1\n##YFACTOR=0.001\n##FIRSTX=100\n##LASTX=107\n##NPOINTS=8\n";

    #[test]
    fn decodes_hand_worked_asdf_line() {
        // Worked by hand: X=100; SQZ A0 = +10; DIF J = +1 -> 11; DUP T repeats the
        // difference once more -> 12; DIF j = -1 -> 11; SQZ @ = 0; DIF % = 0 -> 0 ;
        // next line: Y-check @ (0), then SQZ B5 = 25, DIF k2 = -22 -> 3.
        let text = format!("{HEAD}##XYDATA=(X++(Y..Y))\n100A0JTj@%\n105@B5k2\n##END=\n");
        let (s, _) = read(&text).unwrap();
        let expect = [10.0, 11.0, 12.0, 11.0, 0.0, 0.0, 25.0, 3.0];
        for (a, b) in s.y.iter().zip(expect) {
            assert!((a - b * 0.001).abs() < 1e-15, "{:?}", s.y);
        }
        assert_eq!(s.x[7], 107.0);
        assert_eq!(s.x_axis, Axis::new("wavenumber", "cm⁻¹"));
    }

    #[test]
    fn bad_y_check_is_reported_with_line() {
        let text = format!("{HEAD}##XYDATA=(X++(Y..Y))\n100A0JTj@%\n105A5B5k2\n##END=\n");
        let e = read(&text).unwrap_err().to_string();
        assert!(e.starts_with("t.jdx:13: Y-check value 15 disagrees"), "{e}");
    }

    #[test]
    fn affn_with_exponents_and_xypoints() {
        let text = "##TITLE=a\n##JCAMP-DX=5.01\n##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##FIRSTX=1\n##LASTX=4\n##NPOINTS=4\n##XYDATA=(X++(Y..Y))\n1 1.5E-1 2.5e+0\n3 -3 4\n##END=\n";
        let (s, _) = read(text).unwrap();
        assert_eq!(s.y, vec![0.15, 2.5, -3.0, 4.0]);
        let text = "##TITLE=b\n##XUNITS=HZ\n##.OBSERVE FREQUENCY=400.13\n##XFACTOR=2\n##XYPOINTS=(XY..XY)\n1, 10; 2, 20\n3,30 $$ comment\n##END=\n";
        let (s, _) = read(text).unwrap();
        assert_eq!(s.x, vec![2.0, 4.0, 6.0]);
        assert_eq!(s.y, vec![10.0, 20.0, 30.0]);
        assert_eq!(s.metadata["observe_frequency_mhz"], "400.13");
        assert_eq!(s.x_axis.quantity, "frequency offset");
    }

    #[test]
    fn firsty_disagreement_is_a_warning() {
        let text =
            format!("{HEAD}##FIRSTY=0.5\n##XYDATA=(X++(Y..Y))\n100A0JTj@%\n105@B5k2\n##END=\n");
        let (_, w) = read(&text).unwrap();
        assert!(w.iter().any(|m| m.contains("FIRSTY")), "{w:?}");
        let text =
            format!("{HEAD}##FIRSTY=0.010\n##XYDATA=(X++(Y..Y))\n100A0JTj@%\n105@B5k2\n##END=\n");
        assert!(read(&text).unwrap().1.is_empty());
    }

    #[test]
    fn tokenizer_number_forms_and_messages() {
        // Values and messages as the character-by-character tokenizer gave them (the
        // byte-position tokenizer was checked identical on 40,005 generated files).
        let table = |line: &str| {
            format!("##TITLE=a\n##FIRSTX=1\n##LASTX=2\n##XYDATA=(X++(Y..Y))\n{line}\n##END=\n")
        };
        let fails = |line: &str| read(&table(line)).unwrap_err().to_string();
        // The exponent letter is quoted as `e`.
        assert_eq!(fails("1 1.2.3E5 2"), "t.jdx:5: '1.2.3e5' is not a number");
        assert_eq!(
            fails(&format!("1 S{}", "9".repeat(22))),
            "t.jdx:5: bad DUP count after 'S'"
        );
        assert_eq!(fails("1 10 µ"), "t.jdx:5: unexpected character 'µ'");
        // A no-break space separates values like a space.
        let (s, _) = read(&table("1\u{a0}10\u{a0}20")).unwrap();
        assert_eq!(s.y, vec![10.0, 20.0]);
        // SQZ `A` is the lead digit +1; a tail longer than the stack buffer: 1e40.
        let (s, _) = read(&table(&format!("1 A{} 5", "0".repeat(40)))).unwrap();
        assert_eq!(s.y, vec![1e40, 5.0]);
        // Latin-1 text is read byte for code point.
        let latin1 = b"##TITLE=\xB5\n##XYPOINTS=(XY..XY)\n1,2\n3,4\n##END=\n";
        let (s, _) = parse("t.jdx", latin1, &Options::default()).unwrap();
        assert_eq!(s.metadata["title"], "µ");
        assert_eq!(s.y, vec![2.0, 4.0]);
    }

    #[test]
    fn errors_never_panic() {
        for bad in [
            "",
            "hello",
            "##TITLE=x\n##XYDATA=(X++(Y..Y))\n1 2 3\n",
            "##TITLE=x\n##FIRSTX=1\n##LASTX=2\n##NPOINTS=3\n##XYDATA=(X++(Y..Y))\n1 2 3\n",
            "##TITLE=x\n##FIRSTX=1\n##LASTX=2\n##XYDATA=(X++(Y..Y))\n1 J2 3\n",
            "##TITLE=x\n##FIRSTX=1\n##LASTX=2\n##XYDATA=(X++(Y..Y))\n1 S2\n",
            "##TITLE=x\n##FIRSTX=1\n##LASTX=2\n##XYDATA=(X++(Y..Y))\n1 2 #\n",
            "##TITLE=x\n##PEAK TABLE=(XY..XY)\n1,2,3\n",
            "##TITLE=x\n##BLOCKS=2\n",
            "##TITLE=x\n##FIRSTX=abc\n",
        ] {
            assert!(read(bad).is_err(), "{bad:?} should fail");
        }
        let e = read(
            "##TITLE=x\n##FIRSTX=1\n##LASTX=9\n##NPOINTS=3\n##XYDATA=(X++(Y..Y))\n1 2 3\n5 4\n",
        )
        .unwrap_err();
        assert!(e.to_string().contains(":7:"), "{e}");
    }
}

#[cfg(test)]
mod fuzz {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(400))]
        // Never a panic: arbitrary text made of JCAMP-DX characters is either read or
        // refused with a data error.
        #[test]
        fn arbitrary_jcamp_like_text_never_panics(body in "[0-9A-Za-z@%?+\\-., ;\n]{0,300}") {
            let text = format!("##TITLE=f\n##FIRSTX=1\n##LASTX=20\n##XYDATA=(X++(Y..Y))\n{body}\n##END=\n");
            let _ = parse("f.jdx", text.as_bytes(), &Options::default());
            let _ = parse("g.jdx", body.as_bytes(), &Options::default());
        }
    }
}
