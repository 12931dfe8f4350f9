//! `engine`: recipes to a parallel, cached, provenance-keeping run.
//!
//! Phase one ([`recipe`] then [`plan`]) turns YAML into a resolved, type-checked plan
//! and reports every problem at once ([`diagnostics`]). Phase two expands the plan
//! into a graph of nodes with content keys ([`graph`]), runs them ([`scheduler`])
//! against the content-addressed [`cache`], and writes the outputs ([`outputs`],
//! [`provenance`], [`report`]). [`cli`] is the only layer that prints.

pub mod bundle;
pub mod cache;
pub mod catalog_md;
pub mod cli;
pub mod diagnostics;
pub mod exit;
pub mod graph;
pub mod lock;
pub mod outputs;
pub mod plan;
pub mod provenance;
pub mod recipe;
pub mod record;
pub mod report;
pub mod scaffold;
pub mod scheduler;
pub mod schema;
pub mod shard;
pub mod slurm;
pub mod status;
#[cfg(test)]
mod testing;
pub mod timefmt;
pub mod verify;

/// The engine version, recorded in provenance and run.json.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
