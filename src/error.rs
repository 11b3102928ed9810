//! The one place where stage errors become the CLI's exit codes: 2 for bad input (the user
//! can fix it), 1 for internal failure.

use crate::analysis::abx::AbxError;
use crate::analysis::compare::CompareError;
use crate::analysis::map::MapError;
use crate::analysis::probe::ProbeError;
use crate::capture::CaptureError;
use crate::commands::batch::BatchError;
use crate::commands::report::ReportError;
use crate::render::PlotError;
use crate::write::OutputError;

/// Any error the library returns to the CLI.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// Reading a capture failed.
    #[error(transparent)]
    Capture(#[from] CaptureError),
    /// The ABX analysis failed.
    #[error(transparent)]
    Abx(#[from] AbxError),
    /// Comparing two captures failed.
    #[error(transparent)]
    Compare(#[from] CompareError),
    /// Writing outputs failed.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// Drawing failed.
    #[error(transparent)]
    Plot(#[from] PlotError),
    /// Planning, running or assembling a split run failed.
    #[error(transparent)]
    Batch(#[from] BatchError),
    /// The report stage failed.
    #[error(transparent)]
    Report(#[from] ReportError),
    /// The probe stage failed.
    #[error(transparent)]
    Probe(#[from] ProbeError),
    /// The map stage failed.
    #[error(transparent)]
    Map(#[from] MapError),
    /// Bad input found by an analysis (options that do not fit the data).
    #[error("{0}")]
    Input(String),
    /// A command that is not built yet.
    #[error("'{0}' is not yet available in this version")]
    NotYet(&'static str),
    /// Anything else that went wrong inside.
    #[error("internal error: {0}")]
    Internal(String),
}

impl Error {
    /// Exit code: 2 for bad input (unreadable captures included), 1 for internal failure.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Capture(_) | Error::Input(_) => 2,
            Error::Output(OutputError::Refused { .. }) => 2,
            Error::Report(e) if e.is_input() => 2,
            Error::Batch(e) if e.is_input() => 2,
            Error::Batch(_) => 1,
            Error::Abx(e) if e.is_input() => 2,
            Error::Abx(_) => 1,
            Error::Report(_) => 1,
            Error::Probe(ProbeError::Internal(_)) => 1,
            Error::Probe(ProbeError::Input(_) | ProbeError::Capture(_)) => 2,
            Error::Map(MapError::Internal(_)) => 1,
            Error::Map(_) => 2,
            Error::Compare(CompareError::Internal(_)) => 1,
            Error::Compare(_) => 2,
            Error::Output(_) | Error::Plot(_) | Error::NotYet(_) | Error::Internal(_) => 1,
        }
    }
}

/// Result with the library's error.
pub type Result<T> = std::result::Result<T, Error>;
