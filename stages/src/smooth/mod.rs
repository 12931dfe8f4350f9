pub mod moving_average;
pub mod gaussian;
pub mod savitzky_golay;
