//! ediff
