//! Typed errors for the library. The binary maps each kind to a documented exit code:
//! 0 ok, 1 other, 2 bad input or usage, 3 resource problem.
use std::path::Path;

pub type Result<T> = std::result::Result<T, Error>;

#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// The user's input is wrong: a file, a column, a value, an option. Exit code 2.
    #[error("{0}")]
    Input(String),
    /// A resource limit: memory estimate above --max-memory, disk full, not writable. Exit code 3.
    #[error("{0}")]
    Resource(String),
    /// Anything else (a numerical failure that is not the user's fault). Exit code 1.
    #[error("{0}")]
    Other(String),
}

impl Error {
    pub fn input(msg: impl Into<String>) -> Self {
        Error::Input(msg.into())
    }
    pub fn resource(msg: impl Into<String>) -> Self {
        Error::Resource(msg.into())
    }
    pub fn other(msg: impl Into<String>) -> Self {
        Error::Other(msg.into())
    }
    /// An I/O failure on `path`; reading problems are input errors, while a full disk or a
    /// permission problem on output is a resource problem.
    pub fn io(path: &Path, what: &str, e: std::io::Error) -> Self {
        use std::io::ErrorKind::*;
        let msg = format!("{}: {what}: {e}", path.display());
        match e.kind() {
            PermissionDenied | StorageFull | QuotaExceeded | ReadOnlyFilesystem | OutOfMemory => {
                Error::Resource(msg)
            }
            _ => Error::Input(msg),
        }
    }
    /// Process exit code for this error (documented in the README).
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Input(_) => 2,
            Error::Resource(_) => 3,
            Error::Other(_) => 1,
        }
    }
}
