//! Peak detection: `peaks.find`.
pub mod find;
