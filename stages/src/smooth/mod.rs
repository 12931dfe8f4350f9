pub mod moving_average;
