pub mod gaussian;
pub mod moving_average;
pub mod savitzky_golay;
