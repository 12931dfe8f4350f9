//! Integration: `integrate.area`.
pub mod area;
