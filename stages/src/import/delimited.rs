//! `import.delimited`: a spectrum from a delimited text export (CSV, TSV, whitespace).
//!
//! Reads one x column and one y column from text with an optional header line.
//! Delimiter and decimal mark are detected (or given); comment lines are skipped;
//! axis quantity and unit are taken from the header ("Energy (eV)", "Wavelength [nm]",
//! "binding_energy_eV") unless the options name them. Descending x is kept as given.
//! Free-text lines above the header are kept as metadata (`preamble`). A column headed
//! `sigma` (or `error`, `uncertainty`, `std`) gives per-point standard uncertainties;
//! for count data without one, Poisson σ = √counts with a floor of 1 count is attached
//! (common practice for counting statistics). [`parse_all`] returns one spectrum per
//! y column.
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
    /// Optional column holding the standard uncertainty of y; when absent a column
    /// headed `sigma`, `error`, `uncertainty` or `std` is used if there is one.
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
    /// Per-point σ = √counts (floor 1 count): `auto` applies it when the y unit is
    /// counts and the file gives no sigma column.
    pub poisson_sigma: PoissonSigma,
}

/// Whether to attach Poisson standard uncertainties.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum PoissonSigma {
    /// When y is in counts and no sigma column is read.
    Auto,
    /// Always (y must be counts ≥ 0).
    On,
    /// Never.
    Off,
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
            poisson_sigma: PoissonSigma::Auto,
        }
    }
}

pub struct ImportDelimited;

static INPUTS: &[Port] = &[Port::each("file", Kind::File, "a delimited text file")];

impl TypedStage for ImportDelimited {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "import.delimited",
        version: 2,
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
            "Spectra were read from delimited text exports (x from {}, y from {}, {}).",
            col(&o.x),
            col(&o.y),
            match (&o.sigma, o.poisson_sigma) {
                (_, PoissonSigma::On) => "with Poisson standard uncertainties σ = √counts (floor 1 count)".to_string(),
                (Some(c), _) => format!("with standard uncertainties from {}", col(c)),
                (None, PoissonSigma::Auto) => "with standard uncertainties from a sigma column when present, otherwise σ = √counts (floor 1 count) for count data".to_string(),
                (None, PoissonSigma::Off) => "with standard uncertainties only from a sigma column when present".to_string(),
            }
        )
    }

    fn run(&self, inputs: &crate::stage::Inputs, o: &Options) -> Result<Artifact, StageError> {
        let file = super::input_file(inputs)?;
        let spectrum = parse(&file.name, &file.bytes, o)?;
        let mut a = Artifact::new(Value::Spectrum(spectrum));
        if let Value::Spectrum(s) = &a.value {
            let n = s.len();
            a.info(format!("{n} points read from {}", file.name));
        }
        Ok(a)
    }
}

/// The text of a delimited file split into a header and numeric rows.
struct Grid<'a> {
    /// Header fields (empty when the file has no header line).
    header: Vec<String>,
    /// 1-based line of the header (or of the first data line).
    header_line: usize,
    /// Lines of free text above the header (title, instrument...), kept as metadata.
    preamble: Vec<String>,
    rows: Rows<'a>,
    decimal_comma: bool,
}

/// The data lines of a file.
enum Rows<'a> {
    /// Every data line had as many fields as the first and every field read as a
    /// finite number: the columns, parsed in one pass over the text (the common case;
    /// import speed matters for large batches).
    Numeric {
        /// 1-based line number of each row.
        lines: Vec<usize>,
        /// One vector per field position.
        columns: Vec<Vec<f64>>,
    },
    /// Anything else (ragged lines, text in a column): (1-based line number, fields)
    /// of every data line, the fields borrowing the text, parsed column by column so
    /// that an error names the line and field it concerns.
    Fields(Vec<(usize, Fields<'a>)>),
}

/// The fields of one line: up to four inline, more on the heap.
#[derive(Clone, Debug)]
enum Fields<'a> {
    Inline(usize, [&'a str; 4]),
    Heap(Vec<&'a str>),
}

impl<'a> Fields<'a> {
    fn collect(parts: impl Iterator<Item = &'a str>) -> Self {
        let mut inline = [""; 4];
        let mut n = 0;
        let mut parts = parts.map(|p| p.trim().trim_matches('"'));
        for p in parts.by_ref() {
            if n == 4 {
                let mut v = inline.to_vec();
                v.push(p);
                v.extend(parts);
                return Fields::Heap(v);
            }
            inline[n] = p;
            n += 1;
        }
        Fields::Inline(n, inline)
    }
    fn as_slice(&self) -> &[&'a str] {
        match self {
            Fields::Inline(n, a) => &a[..*n],
            Fields::Heap(v) => v,
        }
    }
    fn len(&self) -> usize {
        self.as_slice().len()
    }
    fn get(&self, i: usize) -> Option<&&'a str> {
        self.as_slice().get(i)
    }
}

/// The lines of a text that carry content, as (1-based line number, line): split like
/// `str::lines`, trailing carriage returns removed, blank and comment lines skipped.
/// Lazy and cheap to clone, so that no list of lines is built.
#[derive(Clone)]
struct ContentLines<'a> {
    rest: &'a str,
    line_no: usize,
    comment: &'a str,
}

impl<'a> ContentLines<'a> {
    fn new(text: &'a str, comment: &'a str) -> Self {
        ContentLines {
            rest: text,
            line_no: 0,
            comment,
        }
    }
}

impl<'a> Iterator for ContentLines<'a> {
    type Item = (usize, &'a str);
    fn next(&mut self) -> Option<(usize, &'a str)> {
        while !self.rest.is_empty() {
            let b = self.rest.as_bytes();
            let (mut end, next) = match b.iter().position(|&c| c == b'\n') {
                Some(i) => (i, i + 1),
                None => (b.len(), b.len()),
            };
            while end > 0 && b[end - 1] == b'\r' {
                end -= 1;
            }
            // Cuts at ASCII bytes fall on character boundaries.
            let l = &self.rest[..end];
            self.rest = &self.rest[next..];
            self.line_no += 1;
            let keep = match l.bytes().find(|&c| !is_space(c)) {
                // Blank.
                None => false,
                // An ASCII character starts the trimmed line (the usual case).
                Some(c) if c.is_ascii() => !self.comment.as_bytes().contains(&c),
                // Unicode whitespace or another character first.
                Some(_) => {
                    let t = l.trim();
                    !t.is_empty() && !t.starts_with(|c| self.comment.contains(c))
                }
            };
            if keep {
                return Some((self.line_no, l));
            }
        }
        None
    }
}

/// ASCII whitespace as `char::is_whitespace` has it (tab, line feed, vertical tab,
/// form feed, carriage return, space).
fn is_space(b: u8) -> bool {
    matches!(b, b'\t'..=b'\r' | b' ')
}

/// A field as [`Fields::collect`] trims it, for a field that is ASCII (where
/// `str::trim` trims the same characters): whitespace, then double quotes.
fn trim_field(field: &str) -> &str {
    let f = field.as_bytes();
    let a = f.iter().position(|&c| !is_space(c)).unwrap_or(f.len());
    let z = f.iter().rposition(|&c| !is_space(c)).map_or(a, |i| i + 1);
    // Cuts next to ASCII bytes fall on character boundaries.
    field[a..z].trim_matches('"')
}

/// The one-pass reader: each line is walked once, every field parsed straight into
/// its column while it is cut out of the line. None when the rows are not a full
/// numeric table (a ragged line, an empty or non-numeric field, non-ASCII text, a
/// non-finite value); the caller then reads the rows field by field to report the
/// problem exactly.
fn numeric_rows(rows: ContentLines, delimiter: Delimiter, decimal_comma: bool) -> Option<Rows> {
    let delimiter = match delimiter {
        Delimiter::Comma => Some(b','),
        Delimiter::Semicolon => Some(b';'),
        Delimiter::Tab => Some(b'\t'),
        // Runs of whitespace.
        Delimiter::Whitespace | Delimiter::Auto => None,
    };
    let mark = if decimal_comma { b',' } else { b'.' };
    // A decimal comma in comma-separated text cannot be inside a field: the field is
    // cut first (0xFF never occurs in UTF-8, so no mark is read).
    let prefix_mark = if delimiter == Some(mark) { 0xFF } else { mark };
    let ends_field = |c: u8| match delimiter {
        Some(d) => c == d,
        None => is_space(c),
    };
    // Capacity from the length of the first row (the columns need not regrow).
    let mut probe = rows.clone();
    let (_, first) = probe.next()?;
    let estimate = probe.rest.len() / (first.len() + 1) + 2;
    let mut lines = Vec::with_capacity(estimate);
    let mut columns: Vec<Vec<f64>> = Vec::new();
    for (line_no, line) in rows {
        let b = line.as_bytes();
        let first = lines.is_empty();
        let mut k = 0;
        let mut pos = 0;
        loop {
            if delimiter.is_none() {
                while pos < b.len() && is_space(b[pos]) {
                    pos += 1;
                }
                if pos == b.len() {
                    break;
                }
            }
            // A plain decimal that fills its field is read where it stands (it needs
            // no trimming); anything else is cut and trimmed as the field-by-field
            // reader does, and parsed in full.
            let (v, end) = match decimal_prefix(&b[pos..], prefix_mark) {
                Some((v, n)) if b.get(pos + n).is_none_or(|&c| ends_field(c)) => (v, pos + n),
                _ => {
                    let end = b[pos..]
                        .iter()
                        .position(|&c| ends_field(c))
                        .map_or(b.len(), |i| pos + i);
                    let v = parse_number(trim_field(&line[pos..end]), decimal_comma)
                        .filter(|v| v.is_finite())?;
                    (v, end)
                }
            };
            if first {
                columns.push(Vec::with_capacity(estimate));
            }
            columns.get_mut(k)?.push(v);
            k += 1;
            if delimiter.is_some() {
                if end == b.len() {
                    break;
                }
                pos = end + 1;
            } else {
                pos = end;
            }
        }
        if k != columns.len() || k == 0 {
            return None;
        }
        lines.push(line_no);
    }
    Some(Rows::Numeric { lines, columns })
}

/// Splits decoded text into header, preamble and rows (the rows borrow `text`);
/// `one_pass` tries the one-pass reader first (false only to test it against the
/// field-by-field reader).
fn read_grid<'a>(
    name: &str,
    text: &'a str,
    o: &'a Options,
    one_pass: bool,
) -> Result<Grid<'a>, StageError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    // The first line whose first field reads as a number starts the data; the line
    // just above it is the header; anything above that is a preamble.
    // The first token (split at any delimiter) of a data line reads as a number,
    // whatever the decimal mark ("2theta" or "Title" do not).
    let numeric_start = |l: &str| {
        l.split(|c: char| c == ',' || c == ';' || c.is_whitespace())
            .map(|t| t.trim().trim_matches('"'))
            .find(|t| !t.is_empty())
            .is_some_and(|t| t.parse::<f64>().is_ok())
    };
    let mut lines = ContentLines::new(text, &o.comment);
    // The lines from the header candidate on (the last line when none is numeric).
    let mut body = lines.clone();
    let mut above: Vec<&str> = Vec::new();
    let mut candidate: Option<&str> = None;
    loop {
        let before = lines.clone();
        match lines.next() {
            None => break,
            Some((_, l)) if numeric_start(l) => {
                if candidate.is_none() {
                    body = before;
                }
                break;
            }
            Some((_, l)) => {
                above.extend(candidate.replace(l));
                body = before;
            }
        }
    }
    let mut rest = body.clone();
    let Some((header_line, head)) = rest.next() else {
        return Err(StageError::data(
            name,
            None,
            "no data lines (file is empty or all comments)",
        ));
    };
    let sample: Vec<(usize, &str)> = std::iter::once((header_line, head))
        .chain(rest.clone().take(20))
        .collect();
    let delimiter = match o.delimiter {
        Delimiter::Auto => detect_delimiter(&sample),
        d => d,
    };
    let decimal_comma = match o.decimal {
        DecimalMark::Comma => true,
        DecimalMark::Point => false,
        DecimalMark::Auto => {
            delimiter != Delimiter::Comma
                && sample[1..].iter().any(|(_, l)| l.contains(','))
                && !sample[1..].iter().any(|(_, l)| l.contains('.'))
        }
    };
    let fields = |l: &'a str| -> Fields<'a> {
        match delimiter {
            Delimiter::Comma => Fields::collect(l.split(',')),
            Delimiter::Semicolon => Fields::collect(l.split(';')),
            Delimiter::Tab => Fields::collect(l.split('\t')),
            Delimiter::Whitespace | Delimiter::Auto => Fields::collect(l.split_whitespace()),
        }
    };
    let first = fields(head);
    let has_header = first
        .as_slice()
        .iter()
        .any(|f| parse_number(f, decimal_comma).is_none());
    let header: Vec<String> = if has_header {
        first.as_slice().iter().map(|f| f.to_string()).collect()
    } else {
        Vec::new()
    };
    let preamble = above.iter().map(|l| l.trim().to_string()).collect();
    let data = if has_header { rest } else { body };
    let rows = one_pass
        .then(|| numeric_rows(data.clone(), delimiter, decimal_comma))
        .flatten()
        .unwrap_or_else(|| Rows::Fields(data.map(|(n, l)| (n, fields(l))).collect()));
    Ok(Grid {
        header,
        header_line,
        preamble,
        rows,
        decimal_comma,
    })
}

fn parse_number(s: &str, decimal_comma: bool) -> Option<f64> {
    if !decimal_comma {
        return parse_f64(s);
    }
    if let Some(v) = fast_decimal(s.as_bytes(), b',') {
        return Some(v);
    }
    s.replace(',', ".").parse().ok()
}

/// `s.parse::<f64>().ok()`, bit for bit, with plain decimals read the fast way.
pub(crate) fn parse_f64(s: &str) -> Option<f64> {
    fast_decimal(s.as_bytes(), b'.').or_else(|| s.parse().ok())
}

/// Exact powers of ten up to 1e22 (every one is a double exactly).
const POW10: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// Plain decimals (`-12.345`, at most 15 significant digits, no exponent) the fast way:
/// the digits as an integer m < 2^53 and k decimals give m / 10^k, one correctly rounded
/// division of two exact doubles, so the result is the correctly rounded value, the same
/// bits as `str::parse` (W. D. Clinger, How to read floating point numbers accurately,
/// PLDI 1990). Anything else returns None and takes the general parser.
fn fast_decimal(b: &[u8], mark: u8) -> Option<f64> {
    decimal_prefix(b, mark)
        .filter(|&(_, n)| n == b.len())
        .map(|(v, _)| v)
}

/// The plain decimal (optional sign, digits, at most one `mark`, digits) at the start
/// of `b` and the bytes it takes, when it has 1 to 15 digits; see [`fast_decimal`].
fn decimal_prefix(b: &[u8], mark: u8) -> Option<(f64, usize)> {
    let neg = b.first() == Some(&b'-');
    let mut i = usize::from(matches!(b.first(), Some(b'-' | b'+')));
    // Wrapping arithmetic: with more than 15 digits m is wrong but then unused.
    let mut m: u64 = 0;
    let mut digits = |i: &mut usize| {
        let start = *i;
        while let Some(d) = b.get(*i).map(|c| c.wrapping_sub(b'0')).filter(|&d| d <= 9) {
            m = m.wrapping_mul(10).wrapping_add(u64::from(d));
            *i += 1;
        }
        *i - start
    };
    let mut count = digits(&mut i);
    let mut k = 0;
    if b.get(i) == Some(&mark) {
        i += 1;
        k = digits(&mut i);
        count += k;
    }
    if count == 0 || count > 15 {
        return None;
    }
    let v = m as f64 / POW10.get(k)?;
    Some((if neg { -v } else { v }, i))
}

impl Grid<'_> {
    fn resolve(&self, name: &str, c: &ColumnRef, key: &str) -> Result<usize, StageError> {
        match c {
            ColumnRef::Position(p) => Ok(p.saturating_sub(1)),
            ColumnRef::Name(n) => self
                .header
                .iter()
                .position(|h| h == n || h.eq_ignore_ascii_case(n))
                .ok_or_else(|| {
                    StageError::data(
                        name,
                        Some(self.header_line),
                        format!(
                            "no column named '{n}' for {key}; the header has: {}",
                            if self.header.is_empty() {
                                "(no header line)".to_string()
                            } else {
                                self.header.join(", ")
                            }
                        ),
                    )
                }),
        }
    }

    /// A column named like an uncertainty (`sigma`, `error`, `uncertainty`, `std`...).
    fn sigma_column(&self) -> Option<usize> {
        self.header.iter().position(|h| {
            let (q, _) = split_quantity_unit(h);
            matches!(
                q.to_ascii_lowercase().as_str(),
                "sigma" | "error" | "uncertainty" | "std" | "stdev" | "stderr" | "u"
            )
        })
    }

    /// Number of data rows.
    fn len(&self) -> usize {
        match &self.rows {
            Rows::Numeric { lines, .. } => lines.len(),
            Rows::Fields(rows) => rows.len(),
        }
    }

    /// 1-based line number of data row `k` (0 past the end, never reached: callers
    /// index rows they have read).
    fn line(&self, k: usize) -> usize {
        match &self.rows {
            Rows::Numeric { lines, .. } => lines.get(k).copied(),
            Rows::Fields(rows) => rows.get(k).map(|r| r.0),
        }
        .unwrap_or(0)
    }

    /// The first row with fewer than `needed` fields: (line number, fields found).
    fn short_row(&self, needed: usize) -> Option<(usize, usize)> {
        match &self.rows {
            Rows::Numeric { lines, columns } => lines
                .first()
                .filter(|_| columns.len() < needed)
                .map(|&l| (l, columns.len())),
            Rows::Fields(rows) => rows
                .iter()
                .find(|(_, f)| f.len() < needed)
                .map(|(l, f)| (*l, f.len())),
        }
    }

    /// Reads one numeric column; `what` names it in error messages.
    fn column(&self, name: &str, i: usize, what: &str) -> Result<Vec<f64>, StageError> {
        let rows = match &self.rows {
            Rows::Numeric { columns, .. } => {
                return match columns.get(i) {
                    Some(c) => Ok(c.clone()),
                    None => Err(StageError::data(
                        name,
                        Some(self.line(0)),
                        format!(
                            "expected at least {} fields, found {}",
                            i + 1,
                            columns.len()
                        ),
                    )),
                }
            }
            Rows::Fields(rows) => rows,
        };
        let mut out = Vec::with_capacity(rows.len());
        for (line_no, f) in rows {
            let cell = f.get(i).ok_or_else(|| {
                StageError::data(
                    name,
                    Some(*line_no),
                    format!("expected at least {} fields, found {}", i + 1, f.len()),
                )
            })?;
            let v = parse_number(cell, self.decimal_comma).ok_or_else(|| {
                StageError::data(
                    name,
                    Some(*line_no),
                    format!(
                        "{what} value '{}' (field {}) is not a number",
                        crate::import::encoding::clip(cell),
                        i + 1
                    ),
                )
            })?;
            if !v.is_finite() {
                return Err(StageError::data(
                    name,
                    Some(*line_no),
                    format!(
                        "{what} value '{}' (field {}) is not finite",
                        crate::import::encoding::clip(cell),
                        i + 1
                    ),
                ));
            }
            out.push(v);
        }
        Ok(out)
    }

    /// Fields every row has (at least as many as the header names, when the first
    /// row has them).
    fn width(&self) -> usize {
        match &self.rows {
            // Every row has every column.
            Rows::Numeric { columns, .. } => columns.len(),
            Rows::Fields(rows) => rows
                .iter()
                .map(|(_, f)| f.len())
                .min()
                .unwrap_or(0)
                .max(self.header.len().min(rows.first().map_or(0, |r| r.1.len()))),
        }
    }
}

/// Whether an axis holds raw counts (Poisson statistics apply).
pub fn is_counts(axis: &Axis) -> bool {
    let u = axis.unit.trim().to_ascii_lowercase();
    let q = axis.quantity.trim().to_ascii_lowercase();
    u == "counts" || u == "count" || u == "cts" || (u.is_empty() && (q == "counts" || q == "cts"))
}

/// Poisson standard uncertainty of counts: √max(y, 1) (floor at 1 count).
pub fn poisson_sigma(y: &[f64]) -> Vec<f64> {
    y.iter().map(|&v| v.max(1.0).sqrt()).collect()
}

/// Parses delimited text into a spectrum (the y column the options name).
/// `name` is used in error messages only.
pub fn parse(name: &str, bytes: &[u8], o: &Options) -> Result<Spectrum, StageError> {
    parse_with(name, bytes, o, true)
}

fn parse_with(
    name: &str,
    bytes: &[u8],
    o: &Options,
    one_pass: bool,
) -> Result<Spectrum, StageError> {
    let text = crate::import::encoding::decode_text(name, bytes)?;
    let g = read_grid(name, &text, o, one_pass)?;
    let yi = g.resolve(name, &o.y, "y")?;
    build(name, &g, o, yi)
}

/// Parses delimited text into one spectrum per y column: every column except x and
/// sigma, in file order.
pub fn parse_all(name: &str, bytes: &[u8], o: &Options) -> Result<Vec<Spectrum>, StageError> {
    parse_all_with(name, bytes, o, true)
}

fn parse_all_with(
    name: &str,
    bytes: &[u8],
    o: &Options,
    one_pass: bool,
) -> Result<Vec<Spectrum>, StageError> {
    let text = crate::import::encoding::decode_text(name, bytes)?;
    let g = read_grid(name, &text, o, one_pass)?;
    let xi = g.resolve(name, &o.x, "x")?;
    let si = match &o.sigma {
        Some(c) => Some(g.resolve(name, c, "sigma")?),
        None => g.sigma_column(),
    };
    let ys: Vec<usize> = (0..g.width())
        .filter(|&i| i != xi && Some(i) != si)
        .collect();
    if ys.is_empty() {
        return Err(StageError::data(
            name,
            Some(g.header_line),
            "no y column: every data line needs an x and at least one y value",
        ));
    }
    ys.into_iter().map(|yi| build(name, &g, o, yi)).collect()
}

fn build(name: &str, g: &Grid, o: &Options, yi: usize) -> Result<Spectrum, StageError> {
    let xi = g.resolve(name, &o.x, "x")?;
    let si = match &o.sigma {
        Some(c) => Some(g.resolve(name, c, "sigma")?),
        None => g.sigma_column().filter(|&i| i != xi && i != yi),
    };
    if g.len() < 2 {
        return Err(StageError::data(
            name,
            None,
            format!("a spectrum needs at least 2 data points, found {}", g.len()),
        ));
    }
    // Check every row is wide enough before reading columns, so a short row is
    // reported as such rather than as a missing value.
    let needed = xi.max(yi).max(si.unwrap_or(0)) + 1;
    if let Some((line_no, found)) = g.short_row(needed) {
        return Err(StageError::data(
            name,
            Some(line_no),
            format!("expected at least {needed} fields, found {found}"),
        ));
    }
    let x = g.column(name, xi, "x")?;
    let y = g.column(name, yi, "y")?;
    let sigma = si.map(|i| g.column(name, i, "sigma")).transpose()?;
    if let Some(s) = &sigma {
        if let Some(k) = s.iter().position(|&v| v < 0.0) {
            return Err(StageError::data(
                name,
                Some(g.line(k)),
                format!("sigma value {} is negative", s[k]),
            ));
        }
    }
    let (hx_q, hx_u) = g
        .header
        .get(xi)
        .map(|h| split_quantity_unit(h))
        .unwrap_or_default();
    let (mut hy_q, mut hy_u) = g
        .header
        .get(yi)
        .map(|h| split_quantity_unit(h))
        .unwrap_or_default();
    // "Counts" alone names the unit: the quantity is an intensity.
    if hy_u.is_empty() && ["counts", "cts", "cps"].contains(&hy_q.to_ascii_lowercase().as_str()) {
        hy_u = hy_q.to_ascii_lowercase();
        hy_q = "intensity".into();
    }
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
    let poisson = match o.poisson_sigma {
        PoissonSigma::Auto => sigma.is_none() && is_counts(&y_axis),
        PoissonSigma::On => true,
        PoissonSigma::Off => false,
    };
    let mut s = Spectrum::new(x, y, x_axis, y_axis);
    if poisson {
        if let Some(k) = s.y.iter().position(|&v| v < 0.0) {
            return Err(StageError::data(
                name,
                Some(g.line(k)),
                format!("Poisson sigma needs counts ≥ 0, found {}", s.y[k]),
            ));
        }
        s.sigma = Some(poisson_sigma(&s.y));
        s.metadata.insert("sigma".into(), "poisson".into());
    } else if let Some(sig) = sigma {
        s.sigma = Some(sig);
        if let Some(h) = si.and_then(|i| g.header.get(i)) {
            s.metadata.insert("sigma".into(), format!("column '{h}'"));
        }
    }
    s.metadata.insert("source".into(), name.to_string());
    if let Some(h) = g.header.get(yi) {
        s.metadata.insert("column".into(), h.clone());
    }
    if !g.preamble.is_empty() {
        s.metadata.insert("preamble".into(), g.preamble.join("\n"));
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
        // A bare "Counts" header names the unit of an intensity.
        assert_eq!(s.y_axis, Axis::new("intensity", "counts"));
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

#[cfg(test)]
mod more_tests {
    use super::*;

    #[test]
    fn several_y_columns_and_preamble() {
        let text = b"Sample A, run 3\nwavelength (nm)\tA1\tA2\tA3\n400\t0.1\t0.2\t0.3\n401\t0.4\t0.5\t0.6\n";
        let all = parse_all("m.tsv", text, &Options::default()).unwrap();
        assert_eq!(all.len(), 3);
        assert_eq!(all[2].y, vec![0.3, 0.6]);
        assert_eq!(all[0].x_axis, Axis::new("wavelength", "nm"));
        assert_eq!(all[1].metadata["preamble"], "Sample A, run 3");
        let o = Options {
            y: ColumnRef::Name("A2".into()),
            ..Options::default()
        };
        assert_eq!(parse("m.tsv", text, &o).unwrap().y, vec![0.2, 0.5]);
    }

    #[test]
    fn poisson_sigma_for_counts_and_sigma_column() {
        let s = parse(
            "p.csv",
            b"BE (eV),counts\n285,0\n284,16\n",
            &Options::default(),
        )
        .unwrap();
        // σ = √max(counts, 1): floor 1 at zero counts, 4 at 16 counts.
        assert_eq!(s.sigma, Some(vec![1.0, 4.0]));
        assert_eq!(s.y_axis, Axis::new("intensity", "counts"));
        let s = parse(
            "q.csv",
            b"x,y,sigma\n1,5,0.5\n2,6,0.25\n",
            &Options::default(),
        )
        .unwrap();
        assert_eq!(s.sigma, Some(vec![0.5, 0.25]));
        let all = parse_all(
            "q.csv",
            b"x,y,sigma\n1,5,0.5\n2,6,0.25\n",
            &Options::default(),
        )
        .unwrap();
        assert_eq!(all.len(), 1);
        let o = Options {
            poisson_sigma: PoissonSigma::Off,
            ..Options::default()
        };
        assert_eq!(
            parse("p.csv", b"x,counts\n1,4\n2,9\n", &o).unwrap().sigma,
            None
        );
    }

    #[test]
    fn header_starting_with_a_digit_below_a_title() {
        let s = parse(
            "x.csv",
            b"Film 3\n2theta (deg),counts\n10.0,5\n10.1,7\n",
            &Options::default(),
        )
        .unwrap();
        assert_eq!(s.x, vec![10.0, 10.1]);
        assert_eq!(s.x_axis, Axis::new("2theta", "deg"));
        assert_eq!(s.metadata["preamble"], "Film 3");
    }

    #[test]
    fn whitespace_decimal_comma() {
        let s = parse("w.txt", b"1,5 2,5\n2,5 3,5\n", &Options::default()).unwrap();
        assert_eq!(s.x, vec![1.5, 2.5]);
        assert_eq!(s.y, vec![2.5, 3.5]);
    }
}

#[cfg(test)]
mod fuzz {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(400))]
        // Never a panic on arbitrary delimited-looking text.
        #[test]
        fn arbitrary_text_never_panics(text in "[0-9a-z,;.\t \n#%()\\-e]{0,300}") {
            let _ = parse("f.csv", text.as_bytes(), &Options::default());
            let _ = parse_all("f.csv", text.as_bytes(), &Options::default());
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(400))]
        // The lazy line reader gives what `str::lines` with the blank and comment
        // filter gives.
        #[test]
        fn content_lines_match_str_lines(text in "[0-9a,.#% \t\r\n\u{a0}\u{3000}]{0,200}") {
            let comment = "#%";
            let want: Vec<(usize, &str)> = text
                .lines()
                .enumerate()
                .map(|(i, l)| (i + 1, l.trim_end_matches('\r')))
                .filter(|(_, l)| {
                    let t = l.trim();
                    !t.is_empty() && !t.starts_with(|c| comment.contains(c))
                })
                .collect();
            let got: Vec<(usize, &str)> = ContentLines::new(&text, comment).collect();
            prop_assert_eq!(got, want);
        }

        // The one-pass reader and the field-by-field reader agree on arbitrary text.
        #[test]
        fn one_pass_matches_field_by_field_on_arbitrary_text(text in "[0-9a-z,;.\t \n\r\"#%\\-e]{0,300}") {
            same_either_way(text.as_bytes(), &Options::default());
        }
    }

    /// Both readers give the same spectra, or the same error, bit for bit.
    fn same_either_way(text: &[u8], o: &Options) {
        let shown = || String::from_utf8_lossy(text).into_owned();
        assert_eq!(
            format!("{:?}", parse("t.csv", text, o)),
            format!("{:?}", parse_with("t.csv", text, o, false)),
            "{}",
            shown()
        );
        assert_eq!(
            format!("{:?}", parse_all("t.csv", text, o)),
            format!("{:?}", parse_all_with("t.csv", text, o, false)),
            "{}",
            shown()
        );
    }

    #[test]
    fn one_pass_matches_field_by_field_on_generated_tables() {
        // Seeded tables: numbers of many shapes, delimiters, quotes, padding, CRLF,
        // comments, blank lines, preambles, and now and then a ragged line or a field
        // that is not a finite number.
        let mut state = 99u64;
        let mut next = move |n: u64| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 33) % n
        };
        let options = [
            Options::default(),
            Options {
                decimal: DecimalMark::Comma,
                delimiter: Delimiter::Semicolon,
                ..Options::default()
            },
            Options {
                y: ColumnRef::Name("b".into()),
                sigma: Some(ColumnRef::Position(3)),
                ..Options::default()
            },
            Options {
                x: ColumnRef::Position(3),
                poisson_sigma: PoissonSigma::On,
                ..Options::default()
            },
            Options {
                delimiter: Delimiter::Comma,
                decimal: DecimalMark::Comma,
                ..Options::default()
            },
            Options {
                delimiter: Delimiter::Whitespace,
                ..Options::default()
            },
        ];
        let odd = [
            "",
            "abc",
            "inf",
            "-inf",
            "NaN",
            "1e400",
            "\"2.5\"",
            " 3 ",
            "1,5",
            "+.5",
            "5.",
            "1e5",
            "-2.5E-3",
            "1234567890123456789",
            "0.1\u{a0}",
            "-",
            "1.2.3",
            "\u{3000}",
            "\"1\"",
            " 4",
            "5 ",
            "\t6",
            "7\r8",
            "1 2",
            "00012.50",
            "-0",
            "+",
            ".",
            "9.\"",
        ];
        let (mut one_pass, mut field_by_field) = (0, 0);
        for case in 0..6000 {
            let (delim, comma) = match next(6) {
                0 => (",", false),
                1 => (";", true),
                2 => ("\t", false),
                3 => (" ", false),
                4 => ("   ", true),
                _ => (";", false),
            };
            let width = 1 + next(4) as usize;
            let rows = next(12) as usize;
            let mut t = String::new();
            if next(4) == 0 {
                t.push_str("# exported\n");
            }
            if next(3) == 0 {
                t.push_str("Sample A run 3\n");
            }
            if next(3) != 0 {
                let names = ["a (eV)", "b", "sigma", "counts"];
                t.push_str(&names[..width].join(delim));
                t.push('\n');
            }
            for _ in 0..rows {
                let w = if next(20) == 0 {
                    width + 1 - next(2) as usize * 2
                } else {
                    width
                };
                let fields: Vec<String> = (0..w.max(1))
                    .map(|_| {
                        if next(40) == 0 {
                            return odd[next(odd.len() as u64) as usize].to_string();
                        }
                        let digits: String = (0..1 + next(9))
                            .map(|_| char::from(b'0' + next(10) as u8))
                            .collect();
                        let cut = next(digits.len() as u64 + 1) as usize;
                        let mark = if comma { "," } else { "." };
                        let sign = ["", "", "-", "+"][next(4) as usize];
                        if cut == digits.len() {
                            format!("{sign}{digits}")
                        } else {
                            format!("{sign}{}{mark}{}", &digits[..cut], &digits[cut..])
                        }
                    })
                    .collect();
                t.push_str(&fields.join(delim));
                t.push_str(["\n", "\r\n", " \n", "\n\n", "\n# note\n"][next(5) as usize]);
            }
            if next(2) == 0 {
                t.pop();
            }
            let o = &options[case % options.len()];
            same_either_way(t.as_bytes(), o);
            if let Ok(g) = read_grid("t.csv", &t, o, true) {
                match g.rows {
                    Rows::Numeric { .. } => one_pass += 1,
                    Rows::Fields(_) => field_by_field += 1,
                }
            }
        }
        // Both readers were exercised, each on a good share of the cases.
        assert!(
            one_pass > 1000 && field_by_field > 1000,
            "{one_pass} {field_by_field}"
        );
        // The benchmark's shape takes the one-pass reader.
        let text = "position (arb),intensity (arb)\n1.0000,2.5000\n1.0001,-0.0001\n";
        let o = Options::default();
        let g = read_grid("b.csv", text, &o, true).unwrap();
        assert_eq!(g.len(), 2);
        assert!(matches!(g.rows, Rows::Numeric { .. }));
        assert_eq!(g.column("b.csv", 1, "y").unwrap(), vec![2.5, -0.0001]);
    }

    #[test]
    fn fast_decimals_match_the_general_parser_bit_for_bit() {
        // Seeded pseudo-random decimals of 1 to 17 digits with 0 to 16 decimals.
        let mut state = 12345u64;
        let mut next = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            state >> 33
        };
        for _ in 0..200_000 {
            let digits = 1 + (next() % 17) as usize;
            let text: String = (0..digits)
                .map(|_| char::from(b'0' + (next() % 10) as u8))
                .collect();
            let cut = (next() as usize) % (digits + 1);
            let sign = ["", "-", "+"][(next() % 3) as usize];
            let s = if cut == digits {
                format!("{sign}{text}")
            } else {
                format!("{sign}{}.{}", &text[..cut], &text[cut..])
            };
            let want: f64 = s.parse().unwrap();
            let got = parse_number(&s, false).unwrap();
            assert_eq!(got.to_bits(), want.to_bits(), "{s}");
            let comma = s.replace('.', ",");
            assert_eq!(
                parse_number(&comma, true).unwrap().to_bits(),
                want.to_bits(),
                "{comma}"
            );
        }
        for s in [
            "1e5",
            "-2.5E-3",
            "inf",
            "NaN",
            ".5",
            "5.",
            "0.000000000000000000001",
        ] {
            assert_eq!(
                parse_number(s, false).map(f64::to_bits),
                s.parse::<f64>().ok().map(f64::to_bits),
                "{s}"
            );
        }
        for s in ["", "-", "1.2.3", "1,5", "abc", "--1"] {
            assert!(parse_number(s, false).is_none(), "{s}");
        }
    }

    #[test]
    fn enormous_digit_strings_take_the_general_parser() {
        // Regression: 20+ digits overflowed the fast path's u64 (found by the bad-input corpus).
        let long = "123456789012345678901234567890.5";
        assert_eq!(parse_number(long, false), long.parse::<f64>().ok());
        assert_eq!(fast_decimal(b"1234567890123456", b'.'), None);
        assert_eq!(
            fast_decimal(b"123456789012345", b'.'),
            Some(123456789012345.0)
        );
    }
}
