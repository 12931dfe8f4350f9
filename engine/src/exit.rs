//! Exit codes, in one place.

/// How `retort` ends.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Exit {
    /// Everything ran and every check passed.
    Ok = 0,
    /// Some step failed (or the outputs could not be written).
    StepFailed = 1,
    /// The recipe or the command line is wrong; nothing was run.
    Usage = 2,
    /// Everything ran, but a recipe check failed.
    CheckFailed = 3,
}

impl Exit {
    pub fn code(self) -> i32 {
        self as i32
    }
}
