pub mod coupling;
pub mod integrate;
pub mod qnmr;
