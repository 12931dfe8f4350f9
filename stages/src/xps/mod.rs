//! Photoelectron quantification: XPS atomic percentages and component fractions,
//! UPS work function and valence-band maximum.

pub mod atomic_percent;
pub mod fractions;
pub mod sensitivity;
pub mod ups;
