//! bagwise: fit bagged ensembles and turn their member predictions into diagnostics.
//!
//! The core is pure Rust (no Python types) and is organised by family:
//!
//! - [`members`]: the one model of member predictions (values, probabilities, labels),
//!   the task, the vote and its tie rule, shared tolerances and caps, the chunk driver and
//!   mergeable stream states;
//! - [`aggregation`], [`decomposition`], [`size_curve`], [`correlation`]: combining members,
//!   the ambiguity decomposition, the ensemble-size curve, residual correlation;
//! - [`resampling`]: which rows each member sees (bootstrap, subsampling, Bayesian weights,
//!   strata, groups, moving blocks);
//! - [`diversity`]: how differently classifier members err (Kuncheva & Whitaker 2003);
//! - [`ordering`]: ordered aggregation and pruning (which members are redundant);
//! - [`uncertainty`]: infinitesimal-jackknife and jackknife standard errors via count Grams;
//! - [`random`]: one reproducible random stream per member;
//! - [`numeric`]: the f32/f64 input trait and mergeable (Chan-style) moments;
//! - [`parallel`]: explicit thread counts and progress/interrupt hooks for long loops;
//! - [`learners`]: the native learners of bagged ensembles;
//! - [`persistence`]: the checksummed file container of fitted ensembles;
//! - [`fuzzing`]: seed files, mutations and the contract of the loader fuzzing.
//!
//! The pyo3 bindings live in the `python` module behind the `python` cargo feature, which
//! maturin turns on; `cargo test` builds and tests the core without linking Python.

pub mod aggregation;
pub mod correlation;
pub mod decomposition;
pub mod diversity;
pub mod error;
pub mod fuzzing;
mod gram_kernel;
pub mod intervals;
pub mod learners;
pub mod members;
pub mod numeric;
pub mod ordering;
pub mod out_of_bag;
pub mod parallel;
pub mod persistence;
pub mod random;
pub mod replicates;
pub mod resampling;
pub mod size_curve;
pub mod uncertainty;

#[cfg(feature = "python")]
mod python;

pub use error::{Error, Result};
