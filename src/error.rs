//! The one error type of the core. Every variant names the argument at fault so the
//! bindings can turn it into a `ValueError`/`TypeError` whose message starts with it.

use thiserror::Error;

/// An error raised by a core routine.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[non_exhaustive]
pub enum Error {
    /// An argument has an invalid value (maps to `ValueError`).
    #[error("`{argument}`: {message}")]
    InvalidValue {
        argument: &'static str,
        message: String,
    },
    /// An argument has the wrong kind, e.g. an unsupported dtype (maps to `TypeError`).
    #[error("`{argument}`: {message}")]
    InvalidType {
        argument: &'static str,
        message: String,
    },
    /// A count did not fit the integer width it was being written in. The callers that
    /// choose a width retry with a wider one, so users never see a wrapped count.
    #[error("a count exceeded {max}, the largest value of its integer type")]
    CountOverflow { max: u64 },
    /// A [`Monitor`](crate::parallel::Monitor) asked the work to stop (e.g. Ctrl-C).
    #[error("interrupted")]
    Interrupted,
    /// Working memory sized by an argument could not be allocated (maps to `MemoryError`).
    #[error("`{argument}`: needs {bytes} bytes of working memory, which could not be allocated")]
    OutOfMemory {
        argument: &'static str,
        bytes: usize,
    },
}

impl Error {
    /// Shorthand for [`Error::InvalidValue`].
    pub fn value(argument: &'static str, message: impl Into<String>) -> Self {
        Error::InvalidValue {
            argument,
            message: message.into(),
        }
    }

    /// Shorthand for [`Error::InvalidType`].
    pub fn kind(argument: &'static str, message: impl Into<String>) -> Self {
        Error::InvalidType {
            argument,
            message: message.into(),
        }
    }
}

/// A vector of `len` zeros, or [`Error::OutOfMemory`] naming `argument` (the input that
/// sized it) instead of aborting the process when the allocation fails.
pub fn zeroed<T: Clone + Default>(len: usize, argument: &'static str) -> Result<Vec<T>> {
    let bytes = len.saturating_mul(std::mem::size_of::<T>());
    let mut v = Vec::new();
    v.try_reserve_exact(len)
        .map_err(|_| Error::OutOfMemory { argument, bytes })?;
    v.resize(len, T::default());
    Ok(v)
}

/// Result alias of the core.
pub type Result<T> = std::result::Result<T, Error>;
