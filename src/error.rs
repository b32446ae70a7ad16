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

/// Result alias of the core.
pub type Result<T> = std::result::Result<T, Error>;
