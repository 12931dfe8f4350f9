//! Element maps read out per particle, and the overlay the report draws.

pub mod per_particle;
