//! Errors, one type per layer. Input errors carry file, line and field so the user can fix the
//! file without guessing; the CLI maps them to exit code 2.

use std::path::PathBuf;

/// A problem with a network file: where it is and what is wrong.
#[derive(Debug, Clone, PartialEq)]
pub struct InputError {
    pub file: PathBuf,
    /// 1-based line, when the position is known.
    pub line: Option<usize>,
    /// The field (TOML key path) at fault, e.g. `reaction[2].kf`.
    pub field: String,
    pub message: String,
}

impl std::fmt::Display for InputError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, ", line {line}")?;
        }
        if !self.field.is_empty() {
            write!(f, ", field `{}`", self.field)?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for InputError {}

/// The integration could not go on: the step size fell below what double precision can resolve
/// at time `time` (the network is ill-posed: constants or orders out of proportion).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct IntegrationError {
    /// Time reached, s.
    pub time: f64,
    /// The step size it would have needed, s.
    pub step: f64,
}

impl std::fmt::Display for IntegrationError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "integration failed at t = {:.6e} s: step size fell to {:.3e} s; the network may be ill-posed (check constants and orders)",
            self.time, self.step
        )
    }
}

impl std::error::Error for IntegrationError {}

/// Everything that can stop a run.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    #[error("{0}")]
    Input(#[from] InputError),
    #[error("cannot read {path}: {source}")]
    Read { path: PathBuf, source: std::io::Error },
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// A report or file could not be composed (before anything is written).
    #[error("cannot compose {what}: {message}")]
    Compose { what: String, message: String },
    #[error(
        "{path} already holds results of an earlier run ({existing}); \
         choose another --out directory or pass --force to replace them"
    )]
    OutputExists { path: PathBuf, existing: String },
    /// A single file a command writes (such as --write-corrected's) exists already.
    #[error("{path} exists; give another file name or pass --force to replace it")]
    FileExists { path: PathBuf },
    #[error(transparent)]
    Integration(#[from] IntegrationError),
    #[error("bad option {option}: {message}")]
    Option { option: String, message: String },
    /// A library setting out of range (the command line checks its options before this).
    #[error("invalid setting `{setting}`: {message}")]
    Setting { setting: &'static str, message: String },
}

impl Error {
    /// Exit code for the command line: 2 for anything the user must fix in the input or the
    /// command, 1 for a failure of the computation itself.
    pub fn exit_code(&self) -> u8 {
        match self {
            Error::Input(_)
            | Error::OutputExists { .. }
            | Error::FileExists { .. }
            | Error::Option { .. }
            | Error::Setting { .. }
            | Error::Read { .. } => 2,
            Error::Write { .. } | Error::Compose { .. } | Error::Integration(_) => 1,
        }
    }
}
