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

pub mod fit;
pub mod gather;
pub mod import;
pub mod measure;
pub mod smooth;

// spectral core
pub mod background;
pub mod calibrate;
pub mod convert;
pub mod integrate;
pub mod peaks;
pub mod reference;
pub mod transform;
pub mod units;
// quantification (issue 4)
pub mod calibration;
pub mod eds;
pub mod nmr;
pub mod quant_util;
pub mod uvvis;
pub mod xps;
pub mod xrd;
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
