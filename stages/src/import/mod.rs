pub mod delimited;
