//! The program's exit codes: one type, documented in `--help` and DEVELOPERS.md.

use std::process::ExitCode;

/// How a run of the program ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[repr(u8)]
pub enum Exit {
    /// Done: solved, written, every check passed.
    Success = 0,
    /// `check`: a criterion failed.
    Failed = 1,
    /// Invalid model, criteria file, data or arguments.
    Invalid = 2,
    /// The solver did not converge (or a scenario did not solve).
    NotConverged = 3,
    /// The results could not be written.
    Write = 4,
}

impl From<Exit> for ExitCode {
    fn from(e: Exit) -> ExitCode {
        ExitCode::from(e as u8)
    }
}

/// `check`: a criterion failed.
pub const EXIT_FAILED: u8 = Exit::Failed as u8;
/// Invalid model, criteria file, data or arguments.
pub const EXIT_INVALID: u8 = Exit::Invalid as u8;
/// The solver did not converge.
pub const EXIT_NOT_CONVERGED: u8 = Exit::NotConverged as u8;
/// The results could not be written.
pub const EXIT_WRITE: u8 = Exit::Write as u8;
