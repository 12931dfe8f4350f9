pub mod combine;
pub mod table;
