//! Native learners fit on in-bag counts used as integer row weights, so no resampled copy
//! of the training rows is ever made.

pub mod tree;
