//! The report: `report.html`, `report.md`, `figures/*.svg` and `tables/*.csv`
//! rendered from a [`RunRecord`] and the artifacts it names.
//!
//! **Invariant:** the report reads only the run record and artifacts; it knows
//! nothing of recipes, the graph, the scheduler or the cache layout. Rendering is
//! deterministic: the same record and artifacts give the same bytes (timestamps
//! appear only in the provenance appendix of the HTML and Markdown).
//!
//! What is drawn: every node whose value carries a spectrum (spectra, fits, peak
//! lists) gets a figure with all its curves; micrographs and label images get a
//! thumbnail with outlines and a scale bar; tables get a figure when they look like
//! a histogram or a calibration curve (see [`figure::table_svg`]). What is tabled:
//! per step, the published records (one row per item, one column per result and
//! unit), fit statistics and fitted peaks, located peaks, and every Table value.
//! Every table shown is also written as CSV with full precision, and the methods
//! paragraph with its reference list as plain text in `methods.txt`.
//!
//! Templates are tera templates embedded from `engine/templates/`; a folder given
//! as `templates` replaces `report.html` and/or `report.md` when it holds them.
//! `report.html` is autoescaped by tera (its name ends in `.html`); only SVG made
//! by [`figure`] is inserted unescaped. `report.md` uses the `md` filter, which
//! escapes Markdown and HTML syntax in data-derived text.

pub mod figure;
pub mod lttb;
pub mod methods;
pub mod number;

use crate::record::{ArtifactSource, NodeRecord, NodeStatus, RunRecord, StepRecord};
use rayon::prelude::*;
use serde::Serialize;
use stages::{Artifact, ColumnData, NoteLevel, Scalar, Value};
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::Path;

#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error("cannot write {path}: {source}")]
    Write {
        path: String,
        source: std::io::Error,
    },
    #[error("template {name}: {message}")]
    Template { name: String, message: String },
}

/// What was written, for the run summary.
#[derive(Debug, Default)]
pub struct RenderSummary {
    pub figures: usize,
    /// Figures inlined in report.html (the rest are linked to their files).
    pub inlined: usize,
    pub tables: usize,
    /// Figures that could not be drawn (node, reason); the report says so too.
    pub figure_errors: Vec<String>,
    /// Checks that failed.
    pub failed_checks: usize,
    /// Every figure file written, with what it was drawn from (see
    /// [`figure_key`]), for the output manifest: a later render into the same folder
    /// reuses a file whose key is unchanged instead of drawing it again.
    pub figure_files: BTreeMap<String, FigureFile>,
    /// Cache keys of nodes whose head was read but whose whole artifact could not
    /// be, so their figure is missing (the caller may recompute them and render again).
    pub unreadable: Vec<String>,
}

/// A figure file of a rendered report.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, serde::Deserialize)]
pub struct FigureFile {
    /// [`figure_key`] of what was drawn.
    pub key: String,
    pub bytes: u64,
}

/// What a figure is drawn from: the node's cache key (which fixes its artifact),
/// the points per curve, the key of the image drawn under a label map, and the
/// figure code's version. Equal keys give byte-identical SVG.
pub fn figure_key(engine_version: &str, node: &str, points: usize, image: Option<&str>) -> String {
    let mut h = blake3::Hasher::new();
    h.update(FIGURE_FORMAT.as_bytes());
    for part in [
        engine_version,
        node,
        &points.to_string(),
        image.unwrap_or(""),
    ] {
        h.update(&(part.len() as u64).to_le_bytes());
        h.update(part.as_bytes());
    }
    h.finalize().to_hex().to_string()
}

/// Changes whenever the drawing code changes what it draws.
const FIGURE_FORMAT: &str = "retort-figure-1";

/// One figure's outcome in a render.
struct Drawn {
    file: String,
    /// The SVG text when the figure is inlined in report.html.
    svg: Option<String>,
}

const HTML_TEMPLATE: &str = include_str!("../../templates/report.html");
const MD_TEMPLATE: &str = include_str!("../../templates/report.md");

/// Total points drawn over all spectrum curves of a report; each curve gets an equal
/// share, between [`MIN_CURVE_POINTS`] and [`MAX_CURVE_POINTS`], so a report of a
/// thousand spectra stays a few megabytes.
const POINT_BUDGET: usize = 300_000;
const MIN_CURVE_POINTS: usize = 150;
const MAX_CURVE_POINTS: usize = 1000;
/// SVG bytes inlined in report.html, shared equally by the steps that draw; a
/// step's figures beyond its share are linked to their files instead (the
/// Markdown links every figure), so a run over thousands of spectra stays a page
/// a browser opens. Smaller runs inline everything.
const INLINE_SVG_BYTES: usize = 12_000_000;
/// Nodes whose figures are drawn together (their full artifacts in memory at once).
const FIGURE_CHUNK: usize = 256;

/// The cautions printed in every report footer (see the product brief).
pub const CAUTIONS: [&str; 3] = [
    "Results support, and do not replace, a qualified analyst.",
    "Not validated for clinical diagnosis or regulated release testing without local validation.",
    "Instrument and sample safety (X-rays, strong magnetic fields, lasers, cryogens, \
     nanoparticle handling) follow local rules and licensed practice.",
];

#[derive(Serialize)]
struct View {
    title: String,
    description: String,
    author: String,
    engine_version: String,
    started: String,
    finished: String,
    host: String,
    counts: Counts,
    failed_checks: Vec<CheckView>,
    checks: Vec<CheckView>,
    problems: Vec<ProblemView>,
    chapter: bool,
    summary: Vec<SummaryView>,
    recipes: Vec<RecipeView>,
    methods: methods::Methods,
    parameters: Vec<ParameterView>,
    provenance: Vec<ProvenanceView>,
    sources: Vec<SourceView>,
    cautions: Vec<&'static str>,
}

#[derive(Serialize, Default)]
struct Counts {
    recipes: usize,
    steps: usize,
    nodes: usize,
    ran: usize,
    cached: usize,
    failed: usize,
    skipped: usize,
    checks: usize,
    checks_failed: usize,
    figures: usize,
    tables: usize,
}

#[derive(Serialize, Clone)]
struct CheckView {
    recipe: String,
    result: String,
    item: String,
    expected: String,
    found: String,
    passed: bool,
    message: String,
}

#[derive(Serialize, Clone)]
struct ProblemView {
    step: String,
    anchor: String,
    item: String,
    failed: bool,
    message: String,
}

#[derive(Serialize)]
struct SummaryView {
    title: String,
    anchor: String,
    steps: usize,
    nodes: usize,
    failed: usize,
    skipped: usize,
    checks: usize,
    checks_failed: usize,
}

#[derive(Serialize)]
struct RecipeView {
    id: String,
    anchor: String,
    title: String,
    description: String,
    author: String,
    path: String,
    steps: Vec<StepView>,
}

#[derive(Serialize, Default)]
struct StepView {
    id: String,
    anchor: String,
    stage: String,
    version: u32,
    methods: String,
    items: usize,
    figures: Vec<FigureView>,
    /// Figures written to files but not inlined (over the step's share).
    linked: Vec<FigureView>,
    tables: Vec<TableView>,
    notes: Vec<NoteView>,
    failures: Vec<ProblemView>,
}

#[derive(Serialize)]
struct FigureView {
    file: String,
    svg: String,
    caption: String,
}

#[derive(Serialize, Clone)]
struct TableView {
    title: String,
    file: String,
    headers: Vec<String>,
    rows: Vec<Vec<String>>,
    /// Per column: every non-empty cell is a number (drawn right-aligned).
    numeric: Vec<bool>,
    /// Rows left out of the report (they are all in the CSV file).
    hidden: usize,
}

/// Rows of a table shown in the report; longer tables show this many and point to
/// their CSV file, so a report over thousands of items stays a page a browser opens.
const SHOWN_ROWS: usize = 200;
/// Runs listed per step in the provenance appendix (run.json and provenance.json
/// list them all), and produced files listed per step.
const SHOWN_NODES: usize = 200;
const SHOWN_OUTPUTS: usize = 50;

impl TableView {
    fn new(title: String, file: String, headers: Vec<String>, rows: Vec<Vec<String>>) -> Self {
        // "1.5", "4.2 eV", "(1.235 ± 0.012) eV", "(1.2 ± 0.1) × 10⁻⁸": a number first,
        // then at most a unit, or "±".
        let looks_numeric = |c: &str| {
            let tokens: Vec<&str> = c.split_whitespace().collect();
            c.is_empty()
                || (tokens[0].trim_start_matches('(').parse::<f64>().is_ok()
                    && (tokens.len() <= 2 || tokens[1] == "±"))
        };
        let numeric = (0..headers.len())
            .map(|j| {
                rows.iter().any(|r| r.get(j).is_some_and(|c| !c.is_empty()))
                    && rows
                        .iter()
                        .all(|r| r.get(j).is_none_or(|c| looks_numeric(c)))
            })
            .collect();
        let mut rows = rows;
        let hidden = rows.len().saturating_sub(SHOWN_ROWS);
        rows.truncate(SHOWN_ROWS);
        TableView {
            title,
            file,
            headers,
            rows,
            numeric,
            hidden,
        }
    }
}

#[derive(Serialize)]
struct NoteView {
    item: String,
    warning: bool,
    text: String,
}

#[derive(Serialize)]
struct ParameterView {
    recipe: String,
    name: String,
    value: String,
    unit: String,
    about: String,
    overridden: bool,
}

#[derive(Serialize)]
struct ProvenanceView {
    step: String,
    anchor: String,
    recipe: String,
    stage: String,
    version: u32,
    options: String,
    inputs: String,
    outputs: Vec<String>,
    /// Produced files not listed.
    hidden_outputs: usize,
    references: Vec<String>,
    /// Runs of the step (all of them), and those listed.
    runs: usize,
    nodes: Vec<NodeView>,
}

#[derive(Serialize)]
struct NodeView {
    item: String,
    status: String,
    key: String,
    duration_ms: String,
    files: Vec<FileView>,
}

#[derive(Serialize)]
struct FileView {
    path: String,
    hash: String,
    bytes: u64,
}

#[derive(Serialize)]
struct SourceView {
    id: String,
    path: String,
    hash: String,
    source: String,
    fence: String,
}

fn write(path: &Path, bytes: &[u8]) -> Result<(), ReportError> {
    std::fs::write(path, bytes).map_err(|source| ReportError::Write {
        path: path.display().to_string(),
        source,
    })
}

/// A file-name part: ASCII letters, digits and `-` kept, `.` kept after a letter
/// or digit, runs of anything else become one `_`; at most 60 characters; never
/// empty, never a path.
pub fn sanitize(s: &str) -> String {
    let mut out = String::new();
    for c in s.chars() {
        let after_alnum = out
            .chars()
            .last()
            .is_some_and(|p| p.is_ascii_alphanumeric());
        if c.is_ascii_alphanumeric() || c == '-' || (c == '.' && after_alnum) {
            out.push(c);
        } else if !out.ends_with('_') {
            out.push('_');
        }
    }
    let out: String = out.trim_matches('_').chars().take(60).collect();
    let out = out.trim_end_matches(['_', '.']).to_string();
    if out.is_empty() {
        "x".to_string()
    } else {
        out
    }
}

/// Hands out unique file names within one folder.
#[derive(Default)]
struct Names(BTreeSet<String>);

impl Names {
    fn take(&mut self, parts: &[&str], ext: &str) -> String {
        let stem = parts
            .iter()
            .map(|p| sanitize(p))
            .collect::<Vec<_>>()
            .join("__");
        let mut name = format!("{stem}.{ext}");
        let mut n = 2;
        while self.0.contains(&name.to_ascii_lowercase()) {
            name = format!("{stem}-{n}.{ext}");
            n += 1;
        }
        self.0.insert(name.to_ascii_lowercase());
        name
    }
}

/// Escapes text for Markdown: HTML specials become entities, Markdown punctuation
/// gets a backslash, `|` is escaped for table cells and newlines become spaces.
pub fn markdown_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '\n' | '\r' => out.push(' '),
            '\\' | '`' | '*' | '_' | '[' | ']' | '|' | '#' | '!' | '{' | '}' => {
                out.push('\\');
                out.push(c);
            }
            c => out.push(c),
        }
    }
    out
}

/// A code fence longer than any run of backticks in `s`.
fn fence_for(s: &str) -> String {
    let mut longest = 0;
    let mut run = 0;
    for c in s.chars() {
        if c == '`' {
            run += 1;
            longest = longest.max(run);
        } else {
            run = 0;
        }
    }
    "`".repeat((longest + 1).max(3))
}

fn md_filter(v: &tera::Value, _args: &HashMap<String, tera::Value>) -> tera::Result<tera::Value> {
    let s = match v {
        tera::Value::String(s) => s.clone(),
        tera::Value::Null => String::new(),
        other => other.to_string(),
    };
    Ok(tera::Value::String(markdown_escape(&s)))
}

/// Hands out unique element ids: `prefix-part-part`, lower case, `-2`... on repeats.
#[derive(Default)]
struct Anchors(BTreeSet<String>);

impl Anchors {
    fn take(&mut self, prefix: &str, parts: &[&str]) -> String {
        let s = parts
            .iter()
            .map(|p| sanitize(p))
            .collect::<Vec<_>>()
            .join("-");
        let base = format!("{prefix}-{}", s.to_ascii_lowercase());
        let mut id = base.clone();
        let mut n = 2;
        while !self.0.insert(id.clone()) {
            id = format!("{base}-{n}");
            n += 1;
        }
        id
    }
}

fn status_word(s: &NodeStatus) -> &'static str {
    match s {
        NodeStatus::Ran => "ran",
        NodeStatus::Cached => "cached",
        NodeStatus::Failed { .. } => "failed",
        NodeStatus::Skipped { .. } => "not run",
    }
}

/// Finds the node of the image under a label node: its own upstream, then theirs
/// (a few levels), by what each node's value is.
fn upstream_image_node(
    node: &NodeRecord,
    by_key: &HashMap<&str, usize>,
    record: &RunRecord,
    kinds: &[Option<stages::Kind>],
) -> Option<usize> {
    let mut frontier: Vec<&str> = node.upstream.iter().map(String::as_str).collect();
    for _ in 0..4 {
        let mut next = Vec::new();
        for k in frontier {
            let Some(&i) = by_key.get(k) else { continue };
            if kinds[i] == Some(stages::Kind::Image) {
                return Some(i);
            }
            next.extend(record.nodes[i].upstream.iter().map(String::as_str));
        }
        frontier = next;
    }
    None
}

/// The input files a node depends on: its own and, transitively, its upstream
/// nodes', each once, in the order found.
fn input_files<'a>(
    start: usize,
    record: &'a RunRecord,
    by_key: &HashMap<&str, usize>,
) -> Vec<&'a crate::record::FileRecord> {
    let mut seen = BTreeSet::new();
    let mut files: Vec<&crate::record::FileRecord> = Vec::new();
    let mut stack = vec![start];
    while let Some(i) = stack.pop() {
        if !seen.insert(i) {
            continue;
        }
        let node = &record.nodes[i];
        for f in &node.files {
            if !files.iter().any(|g| g.path == f.path && g.hash == f.hash) {
                files.push(f);
            }
        }
        stack.extend(
            node.upstream
                .iter()
                .rev()
                .filter_map(|k| by_key.get(k.as_str()).copied()),
        );
    }
    files
}

/// The figure of one node, if its value is drawable: None when nothing is drawn,
/// `Ok(None)` for a table that has no plottable shape, `Err` when drawing failed.
fn draw_node(
    i: usize,
    record: &RunRecord,
    loaded: &[Option<Artifact>],
    by_key: &HashMap<&str, usize>,
    points: usize,
) -> Option<Result<Option<String>, String>> {
    let art = loaded[i].as_ref()?;
    match &art.value {
        Value::Spectrum(s) | Value::Fit(stages::FitResult { spectrum: s, .. }) => {
            Some(figure::spectrum_svg(s, points, &[]).map(Some))
        }
        Value::Peaks(pl) => {
            let marks: Vec<(f64, f64)> = pl.peaks.iter().map(|p| (p.position, p.height)).collect();
            Some(figure::spectrum_svg(&pl.spectrum, points, &marks).map(Some))
        }
        Value::Image(img) => Some(figure::micrograph_svg(Some(img), None).map(Some)),
        Value::Labels(l) => {
            let kinds: Vec<Option<stages::Kind>> = loaded
                .iter()
                .map(|a| a.as_ref().map(|a| a.value.kind()))
                .collect();
            let img = upstream_image_node(&record.nodes[i], by_key, record, &kinds).and_then(|u| {
                match &loaded[u] {
                    Some(Artifact {
                        value: Value::Image(img),
                        ..
                    }) => Some(img),
                    _ => None,
                }
            });
            Some(figure::micrograph_svg(img, Some(l)).map(Some))
        }
        Value::Table(t) => Some(figure::table_svg(t, &art.results)),
        Value::File(_) | Value::Summary => None,
    }
}

/// Column key of a published record in a step's results table.
fn record_header(name: &str, unit: &str) -> String {
    if unit.is_empty() {
        name.to_string()
    } else {
        format!("{name} ({unit})")
    }
}

struct Tables<'a> {
    names: &'a mut Names,
    out: &'a Path,
}

/// A table as shown (rounded; only the rows the report shows are kept) and as
/// written to CSV (every digit; rows encoded as they come, so a table of a hundred
/// thousand fitted parameters costs its CSV bytes, not a million strings).
struct Grid {
    headers: Vec<String>,
    rows: ShownRows,
    csv_header: Vec<String>,
    csv_rows: CsvRows,
}

impl Grid {
    fn new(headers: &[&str], csv_header: &[&str]) -> Grid {
        Grid {
            headers: headers.iter().map(|s| s.to_string()).collect(),
            rows: ShownRows::default(),
            csv_header: csv_header.iter().map(|s| s.to_string()).collect(),
            csv_rows: CsvRows::default(),
        }
    }
}

/// The first [`SHOWN_ROWS`] rows as shown, and how many there were.
#[derive(Default)]
struct ShownRows {
    kept: Vec<Vec<String>>,
    total: usize,
}

impl ShownRows {
    fn push(&mut self, row: Vec<String>) {
        if self.kept.len() < SHOWN_ROWS {
            self.kept.push(row);
        }
        self.total += 1;
    }
    fn is_empty(&self) -> bool {
        self.total == 0
    }
}

/// CSV rows encoded as they come (the header is written in front at the end).
struct CsvRows {
    w: csv::Writer<Vec<u8>>,
    error: Option<String>,
}

impl Default for CsvRows {
    fn default() -> Self {
        CsvRows {
            w: csv::WriterBuilder::new()
                .flexible(true)
                .from_writer(Vec::new()),
            error: None,
        }
    }
}

impl CsvRows {
    fn push(&mut self, row: Vec<String>) {
        if let Err(e) = self.w.write_record(&row) {
            self.error.get_or_insert(e.to_string());
        }
    }
}

impl Tables<'_> {
    /// Writes the grid's CSV under tables/ and returns the table as shown.
    fn write(
        &mut self,
        parts: &[&str],
        title: String,
        grid: Grid,
    ) -> Result<TableView, ReportError> {
        let name = self.names.take(parts, "csv");
        let path = self.out.join("tables").join(&name);
        let failed = |e: String| ReportError::Write {
            path: path.display().to_string(),
            source: std::io::Error::other(e),
        };
        let mut w = csv::Writer::from_writer(Vec::new());
        w.write_record(&grid.csv_header)
            .map_err(|e| failed(e.to_string()))?;
        let mut bytes = w.into_inner().map_err(|e| failed(e.to_string()))?;
        let CsvRows { w, error } = grid.csv_rows;
        if let Some(e) = error {
            return Err(failed(e));
        }
        bytes.extend(w.into_inner().map_err(|e| failed(e.to_string()))?);
        write(&path, &bytes)?;
        let mut view = TableView::new(
            title,
            format!("tables/{name}"),
            grid.headers,
            grid.rows.kept,
        );
        view.hidden = grid.rows.total - view.rows.len();
        Ok(view)
    }
}

/// A Table value: numbers rounded with their uncertainties; in CSV each number
/// column with uncertainties is followed by a `u(name)` column.
fn table_grid(t: &stages::Table) -> Grid {
    let mut g = Grid::new(&[], &[]);
    for c in &t.columns {
        g.headers.push(record_header(&c.name, &c.unit));
        g.csv_header.push(record_header(&c.name, &c.unit));
        if let ColumnData::Number {
            uncertainty: Some(_),
            ..
        } = &c.data
        {
            g.csv_header.push(format!("u({})", c.name));
        }
    }
    for r in 0..t.rows() {
        let (mut row, mut crow) = (Vec::new(), Vec::new());
        for c in &t.columns {
            match &c.data {
                ColumnData::Text(v) => {
                    let s = v.get(r).cloned().unwrap_or_default();
                    row.push(s.clone());
                    crow.push(s);
                }
                ColumnData::Number {
                    values,
                    uncertainty,
                } => {
                    let v = values.get(r).copied().unwrap_or(f64::NAN);
                    let u = uncertainty.as_ref().and_then(|u| u.get(r).copied());
                    row.push(number::format_measurement(v, u));
                    crow.push(csv_number(v));
                    if uncertainty.is_some() {
                        crow.push(u.map(csv_number).unwrap_or_default());
                    }
                }
            }
        }
        g.rows.push(row);
        g.csv_rows.push(crow);
    }
    g
}

/// A step's published records: a row per item, a column per (name, unit). A column
/// is numeric when its first record is a number; only those get `u(name)` in CSV.
fn results_grid(
    columns: &[(String, String)],
    nodes: &[usize],
    record: &RunRecord,
    loaded: &[Option<Artifact>],
    step_id: &str,
) -> Grid {
    let numeric: Vec<bool> = columns
        .iter()
        .map(|(n, u)| {
            nodes
                .iter()
                .filter_map(|&i| loaded[i].as_ref())
                .find_map(|a| a.results.iter().find(|r| &r.name == n && &r.unit == u))
                .is_some_and(|r| matches!(r.value, Scalar::Number(_)))
        })
        .collect();
    let mut g = Grid::new(&["item"], &["item"]);
    for ((n, u), num) in columns.iter().zip(&numeric) {
        g.headers.push(record_header(n, u));
        g.csv_header.push(record_header(n, u));
        if *num {
            g.csv_header.push(format!("u({n})"));
        }
    }
    for &i in nodes {
        let Some(art) = &loaded[i] else { continue };
        let item = item_of(&record.nodes[i]);
        let mut row = vec![if item.is_empty() {
            step_id.to_string()
        } else {
            item.clone()
        }];
        let mut crow = vec![item];
        for ((n, u), num) in columns.iter().zip(&numeric) {
            let r = art.results.iter().find(|r| &r.name == n && &r.unit == u);
            let (shown, value, unc) = match r.map(|r| (&r.value, r.uncertainty)) {
                Some((Scalar::Number(v), unc)) => (
                    number::format_measurement(*v, unc),
                    csv_number(*v),
                    unc.map(csv_number).unwrap_or_default(),
                ),
                Some((Scalar::Text(t), _)) => (t.clone(), t.clone(), String::new()),
                None => Default::default(),
            };
            row.push(shown);
            crow.push(value);
            if *num {
                crow.push(unc);
            }
        }
        g.rows.push(row);
        g.csv_rows.push(crow);
    }
    g
}

/// Full-precision text of a number for CSV (shortest round-trip form).
fn csv_number(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}

fn item_of(node: &NodeRecord) -> String {
    node.item.clone().unwrap_or_default()
}

/// Renders the report into `out` (a folder that exists; the engine moves it into
/// place afterwards). `templates` overrides the embedded templates when given.
pub fn render(
    record: &RunRecord,
    artifacts: &dyn ArtifactSource,
    out: &Path,
    templates: Option<&Path>,
) -> Result<RenderSummary, ReportError> {
    render_reusing(record, artifacts, out, templates, None)
}

/// [`render`], reusing the figure files of an earlier report in `previous` (its
/// folder and the figures it wrote, as in [`RenderSummary::figure_files`]) whose
/// key and size are unchanged: they are hard-linked (or copied) instead of drawn,
/// so re-rendering after a small change costs little more than the change.
pub fn render_reusing(
    record: &RunRecord,
    artifacts: &dyn ArtifactSource,
    out: &Path,
    templates: Option<&Path>,
    previous: Option<(&Path, &BTreeMap<String, FigureFile>)>,
) -> Result<RenderSummary, ReportError> {
    for sub in ["figures", "tables"] {
        let dir = out.join(sub);
        std::fs::create_dir_all(&dir).map_err(|source| ReportError::Write {
            path: dir.display().to_string(),
            source,
        })?;
    }
    let mut summary = RenderSummary::default();
    // A node's head (records, notes, axes; no per-point arrays) is all its tables
    // need: heads are read here for the value kinds and curve counts, then again
    // one step at a time; whole artifacts are read only to draw a figure, a chunk
    // of nodes at a time. So a big run is never all in memory at once.
    let done = |n: &NodeRecord| matches!(n.status, NodeStatus::Ran | NodeStatus::Cached);
    let head = |i: usize| {
        let n = &record.nodes[i];
        if done(n) {
            artifacts.load_head(&n.key)
        } else {
            None
        }
    };
    let shapes: Vec<Option<(stages::Kind, usize)>> = (0..record.nodes.len())
        .into_par_iter()
        .map(|i| {
            head(i).map(|a| {
                let curves = a.spectrum().map_or(0, |s| 1 + s.curves.len());
                (a.value.kind(), curves)
            })
        })
        .collect();
    let kinds: Vec<Option<stages::Kind>> = shapes.iter().map(|s| s.map(|s| s.0)).collect();
    let curves: usize = shapes.iter().flatten().map(|s| s.1).sum();
    let mut loaded: Vec<Option<Artifact>> = (0..record.nodes.len()).map(|_| None).collect();
    let by_key: HashMap<&str, usize> = record
        .nodes
        .iter()
        .enumerate()
        .map(|(i, n)| (n.key.as_str(), i))
        .collect();

    // Share of points for each spectrum curve.
    let points = (POINT_BUDGET / curves.max(1)).clamp(MIN_CURVE_POINTS, MAX_CURVE_POINTS);

    // Step file-name stems: the step id, or recipe__step where ids repeat.
    let mut id_count: HashMap<&str, usize> = HashMap::new();
    for s in &record.steps {
        *id_count.entry(s.id.as_str()).or_default() += 1;
    }
    let stem = |s: &StepRecord| -> Vec<String> {
        if id_count.get(s.id.as_str()).copied().unwrap_or(0) > 1 {
            vec![s.recipe.clone(), s.id.clone()]
        } else {
            vec![s.id.clone()]
        }
    };
    let step_nodes: Vec<Vec<usize>> = record
        .steps
        .iter()
        .map(|step| {
            record
                .nodes
                .iter()
                .enumerate()
                .filter(|(_, n)| n.step == step.id && n.recipe == step.recipe)
                .map(|(i, _)| i)
                .collect()
        })
        .collect();

    // Figure names and keys, handed out in report order (step, then item).
    let mut fig_names = Names::default();
    let mut wanted: Vec<(usize, usize, String, String)> = Vec::new(); // (step, node, file, key)
    for (si, step) in record.steps.iter().enumerate() {
        let stem = stem(step);
        for &i in &step_nodes[si] {
            let Some(kind) = kinds[i] else { continue };
            if matches!(kind, stages::Kind::File | stages::Kind::Summary) || !done(&record.nodes[i])
            {
                continue;
            }
            let item = item_of(&record.nodes[i]);
            let mut parts: Vec<&str> = stem.iter().map(String::as_str).collect();
            if !item.is_empty() {
                parts.push(&item);
            }
            let file = format!("figures/{}", fig_names.take(&parts, "svg"));
            let image = match kind {
                stages::Kind::Labels => {
                    upstream_image_node(&record.nodes[i], &by_key, record, &kinds)
                        .map(|u| record.nodes[u].key.as_str())
                }
                _ => None,
            };
            let key = figure_key(&record.engine_version, &record.nodes[i].key, points, image);
            wanted.push((si, i, file, key));
        }
    }
    // Inline SVG up to each drawing step's share of the budget; link the rest.
    let drawing_steps = wanted
        .iter()
        .map(|w| w.0)
        .collect::<BTreeSet<_>>()
        .len()
        .max(1);
    let share = INLINE_SVG_BYTES / drawing_steps;
    let mut inline_used: Vec<Option<usize>> = vec![Some(0); record.steps.len()];

    let reusable = |file: &str, key: &str| -> Option<std::path::PathBuf> {
        let (dir, figs) = previous?;
        let f = figs.get(file)?;
        let path = dir.join(file);
        (f.key == key && std::fs::metadata(&path).ok()?.len() == f.bytes).then_some(path)
    };
    let mut drawn: Vec<Option<Result<Option<Drawn>, String>>> =
        (0..record.nodes.len()).map(|_| None).collect();
    for chunk in wanted.chunks(FIGURE_CHUNK) {
        // Reuse what the earlier report drew from the same inputs; draw the rest
        // with their whole artifacts (and, for labels, the image under them).
        let reuse: Vec<Option<std::path::PathBuf>> =
            chunk.iter().map(|(_, _, f, k)| reusable(f, k)).collect();
        let mut full: HashMap<usize, Artifact> = HashMap::new();
        for ((_, i, _, _), r) in chunk.iter().zip(&reuse) {
            if r.is_some() {
                continue;
            }
            let node = &record.nodes[*i];
            let whole = artifacts.load(&node.key);
            if whole.is_none() {
                summary.unreadable.push(node.key.clone());
            }
            if let Some(a) = whole {
                if matches!(a.value, Value::Labels(_)) {
                    if let Some(u) = upstream_image_node(node, &by_key, record, &kinds) {
                        if let std::collections::hash_map::Entry::Vacant(slot) = full.entry(u) {
                            if let Some(img) = artifacts.load(&record.nodes[u].key) {
                                slot.insert(img);
                            }
                        }
                    }
                }
                full.insert(*i, a);
            }
        }
        let mut slots: Vec<Option<Artifact>> = (0..record.nodes.len()).map(|_| None).collect();
        for (i, a) in full {
            slots[i] = Some(a);
        }
        let results: Vec<Result<Option<(String, u64)>, String>> = chunk
            .par_iter()
            .zip(&reuse)
            .map(|((_, i, file, _), reuse)| {
                let target = out.join(file);
                if let Some(src) = reuse {
                    let bytes = std::fs::metadata(src).map(|m| m.len()).unwrap_or(0);
                    if std::fs::hard_link(src, &target).is_err() {
                        std::fs::copy(src, &target).map_err(|e| {
                            format!("cannot copy {} to {}: {e}", src.display(), target.display())
                        })?;
                    }
                    return Ok(Some((String::new(), bytes)));
                }
                if slots[*i].is_none() {
                    return Err(format!(
                        "its stored result (cache key {}) could not be read",
                        record.nodes[*i].key
                    ));
                }
                match draw_node(*i, record, &slots, &by_key, points) {
                    Some(Ok(Some(svg))) => {
                        write(&target, svg.as_bytes()).map_err(|e| e.to_string())?;
                        let n = svg.len() as u64;
                        Ok(Some((svg, n)))
                    }
                    Some(Err(e)) => Err(e),
                    _ => Ok(None),
                }
            })
            .collect();
        drop(slots);
        for (((si, i, file, key), r), reused) in chunk.iter().zip(results).zip(&reuse) {
            drawn[*i] = Some(r.map(|ok| {
                ok.map(|(svg, bytes)| {
                    summary.figure_files.insert(
                        file.clone(),
                        FigureFile {
                            key: key.clone(),
                            bytes,
                        },
                    );
                    let inline = match inline_used[*si] {
                        Some(used) if used == 0 || used + bytes as usize <= share => {
                            inline_used[*si] = Some(used + bytes as usize);
                            true
                        }
                        _ => {
                            inline_used[*si] = None;
                            false
                        }
                    };
                    let svg = inline.then(|| match reused {
                        Some(_) => std::fs::read_to_string(out.join(file)).unwrap_or_default(),
                        None => svg,
                    });
                    Drawn {
                        file: file.clone(),
                        svg,
                    }
                })
            }));
        }
    }

    let mut anchors = Anchors::default();
    let mut table_names = Names::default();
    // The engine writes tables/results.csv itself.
    table_names.0.insert("results.csv".to_string());
    let mut counts = Counts {
        recipes: record.recipes.len(),
        steps: record.steps.len(),
        nodes: record.nodes.len(),
        ..Counts::default()
    };
    let methods = methods::assemble(record);
    let mut problems = Vec::new();
    let mut step_views: Vec<(String, StepView)> = Vec::new();
    let mut provenance = Vec::new();

    for (step, nodes) in record.steps.iter().zip(&step_nodes) {
        let stem = stem(step);
        let anchor_id = anchors.take("s", &[&step.recipe, &step.id]);
        let nodes = nodes.as_slice();
        // This step's heads, dropped again at the end of the step.
        let heads: Vec<Option<Artifact>> = nodes.par_iter().map(|&i| head(i)).collect();
        for (&i, h) in nodes.iter().zip(heads) {
            loaded[i] = h;
        }
        let mut view = StepView {
            id: step.id.clone(),
            anchor: anchor_id.clone(),
            stage: step.stage.clone(),
            version: step.stage_version,
            methods: methods.numbered(record, &step.methods),
            items: nodes.len(),
            figures: Vec::new(),
            linked: Vec::new(),
            tables: Vec::new(),
            notes: Vec::new(),
            failures: Vec::new(),
        };
        // Results: one row per item, one column per (name, unit) in order of first use.
        let mut columns: Vec<(String, String)> = Vec::new();
        let mut fit_grid = Grid::new(
            &[
                "item",
                "model",
                "χ²",
                "reduced χ²",
                "R²",
                "points",
                "free parameters",
                "iterations",
                "converged",
                "stop reason",
            ],
            &[
                "item",
                "model",
                "chi_square",
                "reduced_chi_square",
                "r_squared",
                "points",
                "free_parameters",
                "iterations",
                "converged",
                "reason",
            ],
        );
        let mut peak_csv_header = vec!["item", "peak", "shape"];
        for q in [
            "center",
            "u(center)",
            "unit(center)",
            "fwhm",
            "u(fwhm)",
            "unit(fwhm)",
            "height",
            "u(height)",
            "unit(height)",
            "area",
            "u(area)",
            "unit(area)",
        ] {
            peak_csv_header.push(q);
        }
        let mut peak_grid = Grid::new(
            &["item", "peak", "shape", "centre", "FWHM", "height", "area"],
            &peak_csv_header,
        );
        let mut param_grid = Grid::new(
            &["item", "parameter", "value", "status"],
            &["item", "parameter", "value", "stderr", "unit", "status"],
        );
        let mut found_grid = Grid::new(
            &["item", "position", "height", "prominence", "FWHM"],
            &["item", "position", "height", "prominence", "fwhm"],
        );
        let mut value_tables = Vec::new();
        for &i in nodes {
            let node = &record.nodes[i];
            let item = item_of(node);
            let label = if item.is_empty() {
                step.id.clone()
            } else {
                item.clone()
            };
            match &node.status {
                NodeStatus::Ran => counts.ran += 1,
                NodeStatus::Cached => counts.cached += 1,
                NodeStatus::Failed { .. } => counts.failed += 1,
                NodeStatus::Skipped { .. } => counts.skipped += 1,
            }
            let problem = match (&node.status, &loaded[i]) {
                (NodeStatus::Failed { error }, _) => Some((true, error.clone())),
                (NodeStatus::Skipped { because }, _) => Some((false, because.clone())),
                (_, None) => Some((
                    true,
                    format!(
                        "its stored result (cache key {}) could not be read",
                        node.key
                    ),
                )),
                (_, Some(_)) => None,
            };
            if let Some((failed, message)) = problem {
                let p = ProblemView {
                    step: step.id.clone(),
                    anchor: anchor_id.clone(),
                    item: label.clone(),
                    failed,
                    message,
                };
                view.failures.push(p.clone());
                problems.push(p);
                continue;
            }
            let Some(art) = &loaded[i] else { continue };
            for r in &art.results {
                let key = (r.name.clone(), r.unit.clone());
                if !columns.contains(&key) {
                    columns.push(key);
                }
            }
            for n in &art.notes {
                view.notes.push(NoteView {
                    item: label.clone(),
                    warning: n.level == NoteLevel::Warning,
                    text: n.text.clone(),
                });
            }
            let mut parts: Vec<&str> = stem.iter().map(String::as_str).collect();
            if !item.is_empty() {
                parts.push(&item);
            }
            match drawn[i].take() {
                Some(Ok(Some(d))) => {
                    let inline = d.svg.is_some();
                    let fig = FigureView {
                        file: d.file,
                        svg: d.svg.unwrap_or_default(),
                        caption: figure_caption(step, &label, &art.value),
                    };
                    if inline {
                        summary.inlined += 1;
                        view.figures.push(fig);
                    } else {
                        view.linked.push(fig);
                    }
                }
                Some(Err(e)) => {
                    summary
                        .figure_errors
                        .push(format!("{} {label}: {e}", step.id));
                    view.notes.push(NoteView {
                        item: label.clone(),
                        warning: true,
                        text: format!("no figure: {e}"),
                    });
                }
                _ => {}
            }
            // Value-specific tables.
            match &art.value {
                Value::Fit(f) => {
                    let s = &f.statistics;
                    fit_grid.rows.push(vec![
                        label.clone(),
                        f.model.clone(),
                        number::format_significant(s.chi_square, 4),
                        number::format_significant(s.reduced_chi_square, 4),
                        number::format_significant(s.r_squared, 5),
                        s.points.to_string(),
                        s.free_parameters.to_string(),
                        s.iterations.to_string(),
                        if s.converged { "yes" } else { "no" }.to_string(),
                        s.reason.clone(),
                    ]);
                    fit_grid.csv_rows.push(vec![
                        item.clone(),
                        f.model.clone(),
                        csv_number(s.chi_square),
                        csv_number(s.reduced_chi_square),
                        csv_number(s.r_squared),
                        s.points.to_string(),
                        s.free_parameters.to_string(),
                        s.iterations.to_string(),
                        s.converged.to_string(),
                        s.reason.clone(),
                    ]);
                    for p in &f.parameters {
                        let status = match &p.status {
                            stages::ParameterStatus::Free => "free".to_string(),
                            stages::ParameterStatus::Fixed => "fixed".to_string(),
                            stages::ParameterStatus::Tied(expr) => format!("tied: {expr}"),
                            stages::ParameterStatus::AtBound => {
                                "at a bound (its error is not meaningful)".to_string()
                            }
                        };
                        param_grid.rows.push(vec![
                            label.clone(),
                            p.name.clone(),
                            with_unit(number::format_measurement(p.value, p.stderr), &p.unit),
                            status.clone(),
                        ]);
                        param_grid.csv_rows.push(vec![
                            item.clone(),
                            p.name.clone(),
                            csv_number(p.value),
                            p.stderr.map(csv_number).unwrap_or_default(),
                            p.unit.clone(),
                            status,
                        ]);
                    }
                    for p in &f.peaks {
                        let m = |m: &stages::Measurement| {
                            with_unit(number::format_measurement(m.value, m.uncertainty), &m.unit)
                        };
                        peak_grid.rows.push(vec![
                            label.clone(),
                            p.name.clone(),
                            p.shape.clone(),
                            m(&p.center),
                            m(&p.fwhm),
                            m(&p.height),
                            m(&p.area),
                        ]);
                        let c = |m: &stages::Measurement| {
                            [
                                csv_number(m.value),
                                m.uncertainty.map(csv_number).unwrap_or_default(),
                                m.unit.clone(),
                            ]
                        };
                        let mut row = vec![item.clone(), p.name.clone(), p.shape.clone()];
                        for q in [&p.center, &p.fwhm, &p.height, &p.area] {
                            row.extend(c(q));
                        }
                        peak_grid.csv_rows.push(row);
                    }
                }
                Value::Peaks(pl) => {
                    let unit = &pl.spectrum.x_axis.unit;
                    for p in &pl.peaks {
                        found_grid.rows.push(vec![
                            label.clone(),
                            with_unit(number::format_plain(p.position), unit),
                            number::format_plain(p.height),
                            number::format_plain(p.prominence),
                            with_unit(number::format_plain(p.fwhm), unit),
                        ]);
                        found_grid.csv_rows.push(vec![
                            item.clone(),
                            csv_number(p.position),
                            csv_number(p.height),
                            csv_number(p.prominence),
                            csv_number(p.fwhm),
                        ]);
                    }
                }
                Value::Table(t) => value_tables.push((
                    parts.iter().map(|s| s.to_string()).collect::<Vec<_>>(),
                    label.clone(),
                    t.clone(),
                )),
                _ => {}
            }
        }

        let mut tables = Tables {
            names: &mut table_names,
            out,
        };
        // Table values first: they are what a gathering step is for.
        for (parts, label, t) in &value_tables {
            let p: Vec<&str> = parts.iter().map(String::as_str).collect();
            let title = if t.title.is_empty() {
                label.clone()
            } else {
                t.title.clone()
            };
            view.tables.push(tables.write(&p, title, table_grid(t))?);
        }
        if !columns.is_empty() {
            let grid = results_grid(&columns, nodes, record, loaded.as_slice(), &step.id);
            view.tables
                .push(tables.write(&with_part(&stem, "results"), "Results".into(), grid)?);
        }
        for (suffix, title, grid) in [
            ("fit", "Fit statistics", fit_grid),
            ("peaks", "Fitted peaks", peak_grid),
            ("parameters", "Fit parameters", param_grid),
            ("located", "Located peaks", found_grid),
        ] {
            if !grid.rows.is_empty() {
                view.tables
                    .push(tables.write(&with_part(&stem, suffix), title.into(), grid)?);
            }
        }
        counts.figures += view.figures.len() + view.linked.len();
        counts.tables += view.tables.len();

        let mut outputs: Vec<String> = view
            .figures
            .iter()
            .chain(&view.linked)
            .map(|f| f.file.clone())
            .collect();
        outputs.extend(view.tables.iter().map(|t| t.file.clone()));
        provenance.push(ProvenanceView {
            step: step.id.clone(),
            anchor: anchor_id.clone(),
            recipe: step.recipe.clone(),
            stage: step.stage.clone(),
            version: step.stage_version,
            options: serde_json::to_string(&step.options).unwrap_or_default(),
            inputs: step.inputs.join(", "),
            hidden_outputs: outputs.len().saturating_sub(SHOWN_OUTPUTS),
            outputs: outputs.into_iter().take(SHOWN_OUTPUTS).collect(),
            references: step.references.iter().map(|r| r.citation.clone()).collect(),
            runs: nodes.len(),
            nodes: nodes
                .iter()
                .take(SHOWN_NODES)
                .map(|&i| {
                    let n = &record.nodes[i];
                    NodeView {
                        item: item_of(n),
                        status: status_word(&n.status).to_string(),
                        key: n.key.clone(),
                        duration_ms: format!("{:.0}", n.duration_ms),
                        files: input_files(i, record, &by_key)
                            .into_iter()
                            .map(|f| FileView {
                                path: f.path.clone(),
                                hash: f.hash.clone(),
                                bytes: f.bytes,
                            })
                            .collect(),
                    }
                })
                .collect(),
        });
        step_views.push((step.recipe.clone(), view));
        for &i in nodes {
            loaded[i] = None;
        }
    }

    // Checks.
    let checks: Vec<CheckView> = record
        .checks
        .iter()
        .map(|c| CheckView {
            recipe: c.recipe.clone(),
            result: c.result.clone(),
            item: c.item.clone().unwrap_or_default(),
            expected: with_unit(c.expected.clone(), &c.unit),
            found: c
                .found
                .map(|v| with_unit(number::format_plain(v), &c.unit))
                .unwrap_or_else(|| "none".into()),
            passed: c.passed,
            message: c.message.clone(),
        })
        .collect();
    counts.checks = checks.len();
    counts.checks_failed = checks.iter().filter(|c| !c.passed).count();
    summary.failed_checks = counts.checks_failed;
    let failed_checks: Vec<CheckView> = checks
        .iter()
        .filter(|c| !c.passed)
        .map(CheckView::clone)
        .collect();

    // Recipes, each with its steps; a chapter gets a summary.
    let mut recipes = Vec::new();
    let mut summaries = Vec::new();
    for r in &record.recipes {
        let steps: Vec<StepView> = step_views
            .iter_mut()
            .filter(|(rid, _)| rid == &r.id)
            .map(|(_, v)| std::mem::take(v))
            .collect();
        let anchor_id = anchors.take("r", &[&r.id]);
        let rnodes: Vec<&NodeRecord> = record.nodes.iter().filter(|n| n.recipe == r.id).collect();
        let rchecks: Vec<_> = record.checks.iter().filter(|c| c.recipe == r.id).collect();
        summaries.push(SummaryView {
            title: r.title.clone(),
            anchor: anchor_id.clone(),
            steps: steps.len(),
            nodes: rnodes.len(),
            failed: rnodes
                .iter()
                .filter(|n| matches!(n.status, NodeStatus::Failed { .. }))
                .count(),
            skipped: rnodes
                .iter()
                .filter(|n| matches!(n.status, NodeStatus::Skipped { .. }))
                .count(),
            checks: rchecks.len(),
            checks_failed: rchecks.iter().filter(|c| !c.passed).count(),
        });
        recipes.push(RecipeView {
            id: r.id.clone(),
            anchor: anchor_id,
            title: r.title.clone(),
            description: r.description.clone(),
            author: r.author.clone(),
            path: r.path.clone(),
            steps,
        });
    }

    // The methods paragraph on its own, for pasting into a manuscript.
    write(&out.join("methods.txt"), methods.plain_text().as_bytes())?;

    let top = record.recipes.first();
    let view = View {
        title: top
            .map(|r| r.title.clone())
            .unwrap_or_else(|| "Report".into()),
        description: top.map(|r| r.description.clone()).unwrap_or_default(),
        author: top.map(|r| r.author.clone()).unwrap_or_default(),
        engine_version: record.engine_version.clone(),
        started: record.started.clone(),
        finished: record.finished.clone(),
        host: record.host.clone(),
        failed_checks,
        checks,
        problems,
        chapter: record.recipes.len() > 1,
        summary: summaries,
        recipes,
        methods,
        parameters: record
            .parameters
            .iter()
            .map(|p| ParameterView {
                recipe: p.recipe.clone(),
                name: p.name.clone(),
                value: match &p.value {
                    serde_json::Value::String(s) => s.clone(),
                    v => v.to_string(),
                },
                unit: p.unit.clone(),
                about: p.about.clone(),
                overridden: p.overridden,
            })
            .collect(),
        provenance,
        sources: record
            .recipes
            .iter()
            .map(|r| SourceView {
                id: r.id.clone(),
                path: r.path.clone(),
                hash: r.hash.clone(),
                source: r.source.clone(),
                fence: fence_for(&r.source),
            })
            .collect(),
        cautions: CAUTIONS.to_vec(),
        counts,
    };
    summary.figures = view.counts.figures;
    summary.tables = view.counts.tables;

    let mut tera = tera::Tera::default();
    tera.register_filter("md", md_filter);
    for (name, embedded) in [("report.html", HTML_TEMPLATE), ("report.md", MD_TEMPLATE)] {
        let custom = templates
            .map(|d| d.join(name))
            .filter(|p| p.is_file())
            .map(|p| {
                std::fs::read_to_string(&p).map_err(|e| ReportError::Template {
                    name: p.display().to_string(),
                    message: e.to_string(),
                })
            })
            .transpose()?;
        tera.add_raw_template(name, custom.as_deref().unwrap_or(embedded))
            .map_err(|e| template_error(name, &e))?;
    }
    let ctx = tera::Context::from_serialize(&view).map_err(|e| template_error("context", &e))?;
    // The two pages are independent: render them at once.
    ["report.html", "report.md"]
        .par_iter()
        .map(|name| {
            let text = tera
                .render(name, &ctx)
                .map_err(|e| template_error(name, &e))?;
            write(&out.join(name), text.as_bytes())
        })
        .collect::<Result<Vec<()>, ReportError>>()?;
    Ok(summary)
}

/// A tera error with its chain of causes (tera puts the useful part in the source).
fn template_error(name: &str, e: &dyn std::error::Error) -> ReportError {
    let mut message = e.to_string();
    let mut src = e.source();
    while let Some(s) = src {
        message.push_str(": ");
        message.push_str(&s.to_string());
        src = s.source();
    }
    ReportError::Template {
        name: name.to_string(),
        message,
    }
}

fn with_part<'a>(stem: &'a [String], last: &'a str) -> Vec<&'a str> {
    let mut v: Vec<&str> = stem.iter().map(String::as_str).collect();
    v.push(last);
    v
}

fn with_unit(s: String, unit: &str) -> String {
    if unit.is_empty() || s.is_empty() {
        s
    } else if s.contains('±') && !s.starts_with('(') {
        format!("({s}) {unit}")
    } else {
        format!("{s} {unit}")
    }
}

fn figure_caption(step: &StepRecord, label: &str, value: &Value) -> String {
    let what = match value {
        Value::Fit(f) => format!("{} fitted", f.model),
        Value::Peaks(p) => format!("{} located peaks", p.peaks.len()),
        Value::Image(i) => format!("{} × {} px image", i.width, i.height),
        Value::Labels(l) => format!("{} labelled objects", l.count),
        Value::Table(t) if !t.title.is_empty() => t.title.clone(),
        _ => step.stage.clone(),
    };
    if label == step.id {
        format!("{}: {what}", step.id)
    } else {
        format!("{}, {label}: {what}", step.id)
    }
}
