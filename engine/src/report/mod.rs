//! The report: `report.html`, `report.md`, `figures/*.svg` and `tables/*.csv`
//! rendered from a [`RunRecord`] and the artifacts it names.
//!
//! **Invariant:** the report reads only the run record and artifacts; it knows
//! nothing of recipes, the graph, the scheduler or the cache layout. Rendering is
//! deterministic: the same record and artifacts give the same bytes (timestamps
//! appear only in the provenance appendix).

use crate::record::{ArtifactSource, RunRecord};
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
    pub tables: usize,
}

/// Renders the report into `out` (a folder that exists; the engine moves it into
/// place afterwards). `templates` overrides the embedded templates when given.
///
/// Interim version: a plain Markdown list of steps and results. The full report
/// (HTML, figures, methods paragraph) replaces it.
pub fn render(
    record: &RunRecord,
    artifacts: &dyn ArtifactSource,
    out: &Path,
    _templates: Option<&Path>,
) -> Result<RenderSummary, ReportError> {
    let mut md = String::new();
    let title = record
        .recipes
        .first()
        .map(|r| r.title.as_str())
        .unwrap_or("");
    md.push_str(&format!("# {title}\n\n"));
    for node in &record.nodes {
        md.push_str(&format!(
            "- {} {}: {:?}\n",
            node.step,
            node.item.as_deref().unwrap_or(""),
            node.status
        ));
        if let Some(a) = artifacts.load(&node.key) {
            for r in &a.results {
                md.push_str(&format!("  - {} = {:?} {}\n", r.name, r.value, r.unit));
            }
        }
    }
    let path = out.join("report.md");
    std::fs::write(&path, md).map_err(|source| ReportError::Write {
        path: path.display().to_string(),
        source,
    })?;
    Ok(RenderSummary::default())
}
