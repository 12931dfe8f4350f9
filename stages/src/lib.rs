//! `stages`: the science of retort.
//!
//! Typed values ([`value`]), the [`stage::Stage`] trait and the explicit stage list
//! ([`registry::CATALOG`]). One file per stage under a folder per family
//! (`import/`, `smooth/`, ...), each with its options, methods sentence, source and tests.
//!
//! **Invariant:** this crate knows nothing of recipes, caches, scheduling or the file
//! system. Importers parse bytes the engine hands them; every stage is a pure function.

pub mod registry;
pub mod stage;
pub mod value;

pub mod gather;
pub mod import;
pub mod measure;
pub mod smooth;

// image analysis families
pub mod ediff;
pub mod elements;
pub mod image;
pub mod lattice;
pub mod particles;
pub mod surface;

pub use registry::{find, CATALOG};
pub use stage::{Stage, StageError, TypedStage};
pub use value::*;
