//! Surface topography of AFM/STM height maps: levelling, roughness, profiles, step heights.

pub mod level;
pub mod profile;
pub mod roughness;
