//! Reading a members array and its targets from Python into the core's
//! [`crate::members::Members`] and [`crate::members::Targets`] views (no copy, any
//! strides), shared by the bindings of every family that reads member predictions.

use numpy::ndarray::{Ix2, Ix3};
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::exceptions::PyTypeError;
use pyo3::prelude::*;

use super::FloatArray;
use crate::members::Targets;

/// A members array of one of the three kinds, read without a copy.
pub(crate) enum MembersArray<'py> {
    /// float32/float64 `(n_members, n_points)`.
    Values(FloatArray<'py, Ix2>),
    /// float32/float64 `(n_members, n_points, n_classes)`.
    Probabilities(FloatArray<'py, Ix3>),
    /// int64 `(n_members, n_points)` class indices.
    Labels(PyReadonlyArray2<'py, i64>),
}

impl<'py> MembersArray<'py> {
    /// Reads `members`: int64 labels, or float values (2-D) / probabilities (3-D).
    pub(crate) fn extract(members: &Bound<'py, PyAny>) -> PyResult<Self> {
        if let Ok(labels) = members.extract::<PyReadonlyArray2<'py, i64>>() {
            return Ok(MembersArray::Labels(labels));
        }
        match members.getattr("ndim")?.extract::<usize>().unwrap_or(0) {
            3 => Ok(MembersArray::Probabilities(FloatArray::extract(
                members, "members",
            )?)),
            _ => Ok(MembersArray::Values(FloatArray::extract(
                members, "members",
            )?)),
        }
    }

    /// (n_members, n_points).
    pub(crate) fn dim(&self) -> (usize, usize) {
        let dim3 = |(m, n, _): (usize, usize, usize)| (m, n);
        match self {
            MembersArray::Values(FloatArray::F32(a)) => a.as_array().dim(),
            MembersArray::Values(FloatArray::F64(a)) => a.as_array().dim(),
            MembersArray::Probabilities(FloatArray::F32(a)) => dim3(a.as_array().dim()),
            MembersArray::Probabilities(FloatArray::F64(a)) => dim3(a.as_array().dim()),
            MembersArray::Labels(a) => a.as_array().dim(),
        }
    }
}

/// Calls `$body` with `$m` bound to the [`crate::members::Members`] view of a
/// [`MembersArray`]; `$n_classes` is the class count of labels.
macro_rules! with_members {
    ($array:expr, $n_classes:expr, |$m:ident| $body:expr) => {{
        use $crate::members::Members;
        use $crate::python::members::MembersArray;
        use $crate::python::FloatArray;
        match &$array {
            MembersArray::Values(FloatArray::F32(a)) => {
                let $m = Members::Values(a.as_array());
                $body
            }
            MembersArray::Values(FloatArray::F64(a)) => {
                let $m = Members::Values(a.as_array());
                $body
            }
            MembersArray::Probabilities(FloatArray::F32(a)) => {
                let $m = Members::Probabilities(a.as_array());
                $body
            }
            MembersArray::Probabilities(FloatArray::F64(a)) => {
                let $m = Members::Probabilities(a.as_array());
                $body
            }
            MembersArray::Labels(a) => {
                let $m = Members::<f64>::Labels(a.as_array(), $n_classes);
                $body
            }
        }
    }};
}
pub(crate) use with_members;

/// Targets read without a copy: float64 values or int64 class indices.
pub(crate) enum TargetArray<'py> {
    Values(PyReadonlyArray1<'py, f64>),
    Labels(PyReadonlyArray1<'py, i64>),
}

impl<'py> TargetArray<'py> {
    /// Reads `y` as a 1-D float64 or int64 array.
    pub(crate) fn extract(y: &Bound<'py, PyAny>) -> PyResult<Self> {
        if let Ok(values) = y.extract::<PyReadonlyArray1<'py, f64>>() {
            return Ok(TargetArray::Values(values));
        }
        if let Ok(labels) = y.extract::<PyReadonlyArray1<'py, i64>>() {
            return Ok(TargetArray::Labels(labels));
        }
        Err(PyTypeError::new_err(
            "`y`: expected a 1-D float64 (values) or int64 (class labels) numpy array",
        ))
    }

    /// The core's view.
    pub(crate) fn view(&self) -> Targets<'_> {
        match self {
            TargetArray::Values(y) => Targets::Values(y.as_array()),
            TargetArray::Labels(y) => Targets::Labels(y.as_array()),
        }
    }
}
