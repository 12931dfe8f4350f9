//! `engine`: recipes to a parallel, cached, provenance-keeping run.

pub mod record;
pub mod report;
