//! The library's error type, and the kind of failure that decides a
//! command's exit code (bad input 2, a stage that does not work 1).

use std::path::PathBuf;

use crate::data::collect::CollectError;
use crate::data::log::LogError;
use crate::data::store::StoreError;
use crate::stage::file::StageFileError;

/// Anything the library refuses or fails at, as one line for the user.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A stage file that cannot be read, or a value in it out of range.
    #[error(transparent)]
    StageFile(#[from] StageFileError),
    /// A measurement log with a bad line.
    #[error(transparent)]
    Log(#[from] LogError),
    /// The measurement store refused or failed.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// Collecting records (`listen`, `ingest`) failed.
    #[error(transparent)]
    Collect(#[from] CollectError),
    /// An option or value outside what is accepted; the message names it
    /// and the accepted range.
    #[error("{0}")]
    Input(String),
    /// The stage is well formed but does not work as a hold stage.
    #[error("{0}")]
    StageFails(String),
    /// Reading or writing a file failed.
    #[error("{}: {error}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// What the system said.
        error: std::io::Error,
    },
    /// A simulated run could not be carried out.
    #[error("{0}")]
    Sim(String),
}

/// What kind of failure an [`Error`] is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// The user's input (a file, a value, an option) is not accepted.
    BadInput,
    /// The stage does not work as a hold stage.
    StageFails,
    /// The machine failed: a file could not be written, a simulation broke.
    Environment,
}

impl Kind {
    /// The exit code of a command that failed this way: 2 bad input or
    /// environment, 1 a stage that does not work.
    #[must_use]
    pub const fn exit_code(self) -> u8 {
        match self {
            Kind::StageFails => 1,
            Kind::BadInput | Kind::Environment => 2,
        }
    }
}

impl Error {
    /// The kind of this failure.
    #[must_use]
    pub fn kind(&self) -> Kind {
        match self {
            Error::StageFile(_) | Error::Log(_) | Error::Store(_) | Error::Collect(_) | Error::Input(_) => {
                Kind::BadInput
            }
            Error::StageFails(_) => Kind::StageFails,
            Error::Io { .. } | Error::Sim(_) => Kind::Environment,
        }
    }

    /// An I/O failure on `path`.
    pub fn io(path: impl Into<PathBuf>, error: std::io::Error) -> Self {
        Error::Io { path: path.into(), error }
    }
}

/// The library's result.
pub type Result<T, E = Error> = std::result::Result<T, E>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kinds_decide_exit_codes() {
        assert_eq!(Error::Input("--x".into()).kind().exit_code(), 2);
        assert_eq!(Error::StageFails("never activates".into()).kind().exit_code(), 1);
        let io = Error::io("out/a.svg", std::io::Error::other("disk full"));
        assert_eq!(io.kind(), Kind::Environment);
        assert_eq!(io.to_string(), "out/a.svg: disk full");
    }
}
