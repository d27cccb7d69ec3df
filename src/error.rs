//! The library's one error type. Every variant tells the caller what went wrong and, where a
//! file is involved, names it, so that a batch can record the message as-is for a person.

use std::path::PathBuf;

/// Errors raised while reading inputs or validating settings.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// The file is readable but in a format or variant latchtime cannot decode.
    #[error("{}: unsupported format: {reason}", path.display())]
    Unsupported { path: PathBuf, reason: String },
    /// The file claims a format but its content is damaged or inconsistent.
    #[error("{}: {reason}", path.display())]
    Malformed { path: PathBuf, reason: String },
    /// The operating system refused a read or a write.
    #[error("{}: {source}", path.display())]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// A setting (rig profile field or command-line option) has a value that cannot be used.
    #[error("invalid setting `{field}`: {reason}")]
    InvalidConfig { field: String, reason: String },
    /// A trial cannot be analysed as specified (for example neither audio nor frames given).
    #[error("{0}")]
    Usage(String),
}

impl Error {
    /// Shorthand for a [`Error::Malformed`] naming `path`.
    pub fn malformed(path: impl Into<PathBuf>, reason: impl Into<String>) -> Self {
        Error::Malformed {
            path: path.into(),
            reason: reason.into(),
        }
    }

    /// Shorthand for an [`Error::Io`] naming `path`.
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }

    /// Shorthand for an [`Error::InvalidConfig`].
    pub fn config(field: impl Into<String>, reason: impl Into<String>) -> Self {
        Error::InvalidConfig {
            field: field.into(),
            reason: reason.into(),
        }
    }
}

/// The message carried by a caught panic, for an error record.
pub fn panic_message(panic: &(dyn std::any::Any + Send)) -> String {
    panic
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| panic.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unknown panic".into())
}

/// Result alias used across the library.
pub type Result<T> = std::result::Result<T, Error>;
