//! Recipe diagnostics: every problem found before anything runs, as data, with all
//! of their wording in this one file.
//!
//! A [`Diagnostic`] is a [`Problem`] (one variant per kind of mistake, carrying the
//! names involved), where it was found (file and position) and its severity. They
//! render as `file:line:column: error: message`, then the source line with a caret
//! under the offending token, then a hint (did-you-mean by edit distance).
//!
//! **Invariant:** nothing outside this module formats a recipe error message.

use crate::recipe::spans::Pos;
use std::fmt::Write as _;

#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum Severity {
    Error,
    Warning,
}

/// Every kind of recipe or command-line mistake.
#[derive(Clone, Debug, PartialEq)]
pub enum Problem {
    ReadRecipe {
        message: String,
    },
    Yaml {
        message: String,
        suggestion: Option<String>,
    },
    DuplicateKey {
        key: String,
        first_line: usize,
    },
    BadId {
        what: &'static str,
        id: String,
    },
    UnknownStage {
        stage: String,
        suggestion: Option<String>,
    },
    UnknownSource {
        step: String,
        name: String,
        suggestion: Option<String>,
    },
    UnknownPort {
        step: String,
        stage: String,
        port: String,
        ports: Vec<String>,
        suggestion: Option<String>,
    },
    MissingPort {
        step: String,
        stage: String,
        port: String,
    },
    TooManyInputs {
        step: String,
        stage: String,
        given: usize,
        ports: usize,
    },
    NoInputs {
        step: String,
        stage: String,
    },
    BadFrom {
        step: String,
    },
    KindMismatch {
        step: String,
        port: String,
        expected: String,
        source: String,
        given: String,
    },
    Cycle {
        path: Vec<String>,
    },
    BadOption {
        step: String,
        stage: String,
        path: String,
        message: String,
        suggestion: Option<String>,
    },
    UnknownParameter {
        name: String,
        suggestion: Option<String>,
    },
    BadParameter {
        name: String,
        message: String,
    },
    UnknownSetParameter {
        name: String,
        suggestion: Option<String>,
    },
    BadSetValue {
        name: String,
        expected: &'static str,
        value: String,
    },
    BadSetSyntax {
        arg: String,
    },
    BadSampleSet {
        set: String,
        message: String,
    },
    EmptyGlob {
        set: String,
        glob: String,
    },
    MissingFile {
        set: String,
        path: String,
    },
    BadGlob {
        set: String,
        glob: String,
        message: String,
    },
    BadItemRegex {
        set: String,
        regex: String,
        message: String,
    },
    NoItemName {
        set: String,
        file: String,
        regex: String,
    },
    DuplicateItem {
        set: String,
        item: String,
        first: String,
        second: String,
    },
    OutsideTree {
        path: String,
    },
    BadInclude {
        message: String,
    },
    MissingInclude {
        path: String,
        message: String,
    },
    IncludeCycle {
        chain: Vec<String>,
    },
    DuplicateStep {
        id: String,
    },
    BadCheck {
        message: String,
    },
    UnknownCheckStep {
        step: String,
        suggestion: Option<String>,
    },
    UnknownCheckItem {
        step: String,
        item: String,
        suggestion: Option<String>,
    },
    /// Warning: items present in one input of a step and not in another.
    ItemsDropped {
        step: String,
        items: Vec<String>,
    },
    /// Warning: a sample set no step reads.
    UnusedSampleSet {
        set: String,
    },
    /// Warning: a recipe (with its includes) that declares no steps.
    NoSteps,
}

/// serde names Rust types ("expected usize"); say what a recipe writer means.
fn plain_types(message: &str) -> String {
    let mut m = message.to_string();
    for (rust, plain) in [
        ("expected usize", "expected a whole number"),
        ("expected u64", "expected a whole number"),
        ("expected u32", "expected a whole number"),
        ("expected i64", "expected an integer"),
        ("expected i32", "expected an integer"),
        ("expected f64", "expected a number"),
        ("expected f32", "expected a number"),
    ] {
        m = m.replace(rust, plain);
    }
    m
}

fn hint_for(suggestion: &Option<String>) -> Option<String> {
    suggestion.as_ref().map(|s| format!("did you mean `{s}`?"))
}

impl Problem {
    /// The one-line message.
    pub fn message(&self) -> String {
        use Problem::*;
        match self {
            ReadRecipe { message } => format!("cannot read recipe: {message}"),
            Yaml { message, .. } => message.clone(),
            DuplicateKey { key, first_line } => {
                format!("duplicate key `{key}` (first given on line {first_line})")
            }
            BadId { what, id } => format!(
                "{what} `{id}` may only contain letters, digits, `_` and `-`"
            ),
            UnknownStage { stage, .. } => format!("unknown stage `{stage}`"),
            UnknownSource { step, name, .. } => format!(
                "step `{step}` reads from `{name}`, which is neither a sample set nor a step"
            ),
            UnknownPort { step, stage, port, ports, .. } => format!(
                "step `{step}`: stage `{stage}` has no input `{port}` (its inputs: {})",
                ports.join(", ")
            ),
            MissingPort { step, stage, port } => {
                format!("step `{step}`: input `{port}` of stage `{stage}` is not given")
            }
            TooManyInputs { step, stage, given, ports } => format!(
                "step `{step}` lists {given} inputs but stage `{stage}` takes {ports}"
            ),
            NoInputs { step, stage } => {
                format!("step `{step}` has no `from`, but stage `{stage}` needs an input")
            }
            BadFrom { step } => format!(
                "step `{step}`: `from` must be a name, a list of names, or a map of input name to names"
            ),
            KindMismatch { step, port, expected, source, given } => format!(
                "step `{step}`: input `{port}` expects a {expected}, but `{source}` gives a {given}"
            ),
            Cycle { path } => format!("steps form a cycle: {}", path.join(" -> ")),
            BadOption { step, stage, path, message, .. } => {
                let message = plain_types(message);
                if path.is_empty() {
                    format!("step `{step}` ({stage}): bad options: {message}")
                } else {
                    format!("step `{step}` ({stage}): option `{path}`: {message}")
                }
            }
            UnknownParameter { name, .. } => format!("unknown parameter `{name}`"),
            BadParameter { name, message } => format!("parameter `{name}`: {message}"),
            UnknownSetParameter { name, .. } => {
                format!("--set {name}: the recipe declares no parameter `{name}`")
            }
            BadSetValue { name, expected, value } => {
                format!("--set {name}={value}: parameter `{name}` is {expected}")
            }
            BadSetSyntax { arg } => format!("--set {arg}: expected NAME=VALUE"),
            BadSampleSet { set, message } => format!("sample set `{set}`: {message}"),
            EmptyGlob { set, glob } => {
                format!("sample set `{set}`: no files match `{glob}`")
            }
            MissingFile { set, path } => format!("sample set `{set}`: file `{path}` not found"),
            BadGlob { set, glob, message } => {
                format!("sample set `{set}`: bad pattern `{glob}`: {message}")
            }
            BadItemRegex { set, regex, message } => {
                format!("sample set `{set}`: bad item pattern `{regex}`: {message}")
            }
            NoItemName { set, file, regex } => format!(
                "sample set `{set}`: item pattern `{regex}` gives no item name for `{file}`"
            ),
            DuplicateItem { set, item, first, second } => format!(
                "sample set `{set}`: `{first}` and `{second}` are both item `{item}`"
            ),
            OutsideTree { path } => {
                format!("`{path}` is outside the recipe's folder")
            }
            BadInclude { message } => format!("include: {message}"),
            MissingInclude { path, message } => {
                format!("cannot include `{path}`: {message}")
            }
            IncludeCycle { chain } => {
                format!("recipes include each other: {}", chain.join(" -> "))
            }
            DuplicateStep { id } => format!("step id `{id}` is used twice"),
            BadCheck { message } => format!("check: {message}"),
            UnknownCheckStep { step, .. } => format!("check names unknown step `{step}`"),
            UnknownCheckItem { step, item, .. } => {
                format!("check names item `{item}`, which step `{step}` does not have")
            }
            ItemsDropped { step, items } => format!(
                "step `{step}`: items {} are not in every input and are left out",
                items.join(", ")
            ),
            UnusedSampleSet { set } => format!("sample set `{set}` is not read by any step"),
            NoSteps => "the recipe has no steps".to_string(),
        }
    }

    /// A hint shown under the source line.
    pub fn hint(&self) -> Option<String> {
        use Problem::*;
        match self {
            UnknownStage { suggestion, .. } => hint_for(suggestion)
                .or_else(|| Some("`retort stages` lists every stage".to_string())),
            UnknownSource { suggestion, .. }
            | Yaml { suggestion, .. }
            | UnknownPort { suggestion, .. }
            | BadOption { suggestion, .. }
            | UnknownParameter { suggestion, .. }
            | UnknownSetParameter { suggestion, .. }
            | UnknownCheckStep { suggestion, .. }
            | UnknownCheckItem { suggestion, .. } => hint_for(suggestion),
            OutsideTree { .. } => {
                Some("pass --allow-outside to read files outside the recipe's folder".into())
            }
            EmptyGlob { .. } | MissingFile { .. } => {
                Some("paths are relative to the recipe's folder".into())
            }
            _ => None,
        }
    }
}

/// A problem with where it was found.
#[derive(Clone, Debug, PartialEq)]
pub struct Diagnostic {
    pub severity: Severity,
    pub problem: Problem,
    /// The recipe file as shown to people; None for the command line.
    pub file: Option<String>,
    pub pos: Option<Pos>,
}

impl Diagnostic {
    pub fn error(problem: Problem, file: Option<&str>, pos: Option<Pos>) -> Self {
        Diagnostic {
            severity: Severity::Error,
            problem,
            file: file.map(str::to_string),
            pos,
        }
    }
    pub fn warning(problem: Problem, file: Option<&str>, pos: Option<Pos>) -> Self {
        Diagnostic {
            severity: Severity::Warning,
            ..Self::error(problem, file, pos)
        }
    }
    pub fn is_error(&self) -> bool {
        self.severity == Severity::Error
    }

    /// Renders the diagnostic; `source` is the text of `file` when known.
    pub fn render(&self, source: Option<&str>) -> String {
        let level = match self.severity {
            Severity::Error => "error",
            Severity::Warning => "warning",
        };
        let mut out = String::new();
        let origin = match (&self.file, self.pos) {
            (Some(f), Some(p)) => format!("{f}:{}:{}", p.line, p.col),
            (Some(f), None) => f.clone(),
            (None, _) => "command line".to_string(),
        };
        let _ = writeln!(out, "{origin}: {level}: {}", self.problem.message());
        if let (Some(src), Some(p)) = (source, self.pos) {
            if let Some(text) = src.lines().nth(p.line.saturating_sub(1)) {
                // A very long line is shown only around the column.
                let text = &clip(text, p.col)[..];
                let num = p.line.to_string();
                let pad = " ".repeat(num.len());
                let _ = writeln!(out, "{pad} |");
                let _ = writeln!(out, "{num} | {text}");
                let lead: String = text
                    .chars()
                    .take(p.col.saturating_sub(1))
                    .map(|c| if c == '\t' { '\t' } else { ' ' })
                    .collect();
                let _ = writeln!(out, "{pad} | {lead}{}", "^".repeat(p.len.max(1)));
            }
        }
        if let Some(h) = self.problem.hint() {
            let _ = writeln!(out, "  = hint: {h}");
        }
        out
    }
}

/// A source line cut 60 characters past the column, so a huge line stays readable.
fn clip(text: &str, col: usize) -> String {
    text.chars().take(col.max(1) + 60).collect()
}

/// The closest candidate to `word` by edit distance, when close enough to be a typo.
pub fn did_you_mean<'a, I: IntoIterator<Item = &'a str>>(
    word: &str,
    candidates: I,
) -> Option<String> {
    let mut best: Option<(f64, &str)> = None;
    for c in candidates {
        let score = strsim::jaro_winkler(word, c);
        if score > 0.8 && best.is_none_or(|(s, _)| score > s) {
            best = Some((score, c));
        }
    }
    best.map(|(_, c)| c.to_string())
}

/// Renders all diagnostics (errors first, then warnings, each in order found) with a
/// closing count line. `source_of` gives the text of a file by its shown name.
pub fn render_all(diags: &[Diagnostic], source_of: &dyn Fn(&str) -> Option<String>) -> String {
    let mut out = String::new();
    let mut sorted: Vec<&Diagnostic> = diags.iter().collect();
    sorted.sort_by_key(|d| d.severity);
    for d in &sorted {
        let src = d.file.as_deref().and_then(source_of);
        out.push_str(&d.render(src.as_deref()));
    }
    let errors = diags.iter().filter(|d| d.is_error()).count();
    if errors > 0 {
        let _ = writeln!(
            out,
            "{errors} error{} found; nothing was run",
            if errors == 1 { "" } else { "s" }
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_position_source_caret_and_hint() {
        let d = Diagnostic::error(
            Problem::UnknownStage {
                stage: "smooth.movin".into(),
                suggestion: did_you_mean(
                    "smooth.movin",
                    ["smooth.moving_average", "import.delimited"],
                ),
            },
            Some("r.yaml"),
            Some(Pos {
                line: 2,
                col: 10,
                len: 12,
            }),
        );
        let text = d.render(Some("id: x\n  s: { stage: smooth.movin }\n"));
        assert_eq!(
            text,
            "r.yaml:2:10: error: unknown stage `smooth.movin`\n  |\n2 |   s: { stage: smooth.movin }\n  |          ^^^^^^^^^^^^\n  = hint: did you mean `smooth.moving_average`?\n"
        );
    }

    #[test]
    fn did_you_mean_ignores_far_words() {
        assert_eq!(
            did_you_mean("windw", ["window", "order"]).as_deref(),
            Some("window")
        );
        assert_eq!(did_you_mean("zzz", ["window", "order"]), None);
    }
}
