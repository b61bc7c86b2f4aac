//! Typed errors of the library.
//!
//! Three kinds are kept apart (see docs/ARCHITECTURE.md): bad input (a file or
//! value that is not what was expected, named with its path and element),
//! I/O failure, and an algorithm that could not finish (with diagnostics).
//! The binary adds no context of its own beyond printing these; every message
//! names the file, the element and what was expected.

use std::path::{Path, PathBuf};

/// Every error the library returns.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file whose content is not what was expected.
    #[error("{}: {element}: {message}", path.display())]
    BadFile {
        path: PathBuf,
        /// The element of the file at fault (e.g. `DataArray 2`, `line 17`, `header`).
        element: String,
        /// What was found and what was expected.
        message: String,
    },
    /// A value handed to the library (not tied to one file) that is not valid.
    #[error("invalid input: {0}")]
    Invalid(String),
    /// A surface that a stage cannot take (e.g. not closed genus 0 for the mapper).
    #[error("not ready: {0}")]
    NotReady(String),
    /// Reading or writing a file failed at the operating-system level.
    #[error("{}: {source}", path.display())]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// An algorithm did not reach its tolerance; the message holds diagnostics.
    #[error("{stage}: {message}")]
    Algorithm {
        stage: &'static str,
        message: String,
    },
}

/// Result with the library's [`Error`].
pub type Result<T> = std::result::Result<T, Error>;

impl Error {
    /// Bad content in `path` at `element`.
    pub fn bad_file(path: &Path, element: impl Into<String>, message: impl Into<String>) -> Self {
        Error::BadFile {
            path: path.to_path_buf(),
            element: element.into(),
            message: message.into(),
        }
    }

    /// An I/O failure on `path`.
    pub fn io(path: &Path, source: std::io::Error) -> Self {
        Error::Io {
            path: path.to_path_buf(),
            source,
        }
    }

    /// Attach a file path to an [`Error::Invalid`] produced by in-memory validation,
    /// turning it into [`Error::BadFile`] at `element`. Other kinds pass through.
    pub fn in_file(self, path: &Path, element: &str) -> Self {
        match self {
            Error::Invalid(message) => Error::bad_file(path, element, message),
            other => other,
        }
    }
}
