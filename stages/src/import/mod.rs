pub mod delimited;
pub mod jcamp;
