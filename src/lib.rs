//! bagwise: fit bagged ensembles and turn their member predictions into diagnostics.
//!
//! The core is pure Rust (no Python types) and is organised by family:
//!
//! - [`resampling`]: which rows each member sees (bootstrap, subsampling, Bayesian weights,
//!   strata, groups, moving blocks);
//! - [`random`]: one reproducible random stream per member;
//! - [`numeric`]: the f32/f64 input trait and mergeable (Chan-style) moments;
//! - [`parallel`]: explicit thread counts and progress/interrupt hooks for long loops;
//! - [`learners`]: native learners (bagged CART trees) fit on in-bag counts as weights.
//!
//! The pyo3 bindings live in the `python` module behind the `python` cargo feature, which
//! maturin turns on; `cargo test` builds and tests the core without linking Python.

pub mod error;
pub mod learners;
pub mod numeric;
pub mod parallel;
pub mod random;
pub mod resampling;

#[cfg(feature = "python")]
mod python;

pub use error::{Error, Result};
