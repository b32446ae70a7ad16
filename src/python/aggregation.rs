//! Bindings of [`crate::aggregation`].

use numpy::ndarray::{Ix2, Ix3};
use numpy::{Element, PyArray1, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;

use super::{run_core, to_py_err, zeros, FloatArray};
use crate::aggregation::{self as core, MemberWeights};

/// A zeroed 1-D array from `numpy.zeros` (allocation failure is a `MemoryError`).
pub(super) fn zeros1<'py, T: Element>(
    py: Python<'py>,
    len: usize,
) -> PyResult<Bound<'py, PyArray1<T>>> {
    let array = py
        .import("numpy")?
        .call_method1("zeros", (len, T::get_dtype(py)))?;
    Ok(array.cast_into::<PyArray1<T>>()?)
}

/// The checked member weights (equal when none are given).
pub(super) fn member_weights(
    weights: Option<PyReadonlyArray1<'_, f64>>,
    members: usize,
) -> PyResult<MemberWeights> {
    match weights {
        None => Ok(MemberWeights::uniform(members)),
        Some(w) => MemberWeights::new(&w.as_array().to_vec(), members).map_err(to_py_err),
    }
}

/// Weighted mean of `(members, n_points)` values, or soft vote of `(members, n_points,
/// n_classes)` probabilities.
#[pyfunction]
#[pyo3(signature = (members, member_weights=None, n_jobs=None, progress=None))]
fn mean_prediction(
    py: Python<'_>,
    members: &Bound<'_, PyAny>,
    member_weights: Option<PyReadonlyArray1<'_, f64>>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Py<PyAny>> {
    let ndim = members.getattr("ndim")?.extract::<usize>().unwrap_or(0);
    macro_rules! run {
        ($view:expr, $probabilities:expr) => {{
            let view = $view;
            let (m, n, c) = view.dim();
            let w = self::member_weights(member_weights, m)?;
            let out = zeros::<f64>(py, [n, c])?;
            // SAFETY: the array was just created here and is not shared with Python yet.
            let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
            run_core(py, n_jobs, progress, |pool, monitor| {
                core::mean_cells(view, $probabilities, &w, slice, pool, monitor)
            })?;
            Ok(if $probabilities {
                out.into_any().unbind()
            } else {
                out.reshape([n])?.into_any().unbind()
            })
        }};
    }
    if ndim == 3 {
        with_float!(FloatArray::<Ix3>::extract(members, "members")?, |v| run!(
            v, true
        ))
    } else {
        with_float!(FloatArray::<Ix2>::extract(members, "members")?, |v| run!(
            v.insert_axis(numpy::ndarray::Axis(2)),
            false
        ))
    }
}

/// Majority vote (lowest class index wins ties) and vote fractions of integer labels.
#[pyfunction]
#[pyo3(signature = (members, n_classes, member_weights=None, n_jobs=None, progress=None))]
fn majority_vote<'py>(
    py: Python<'py>,
    members: PyReadonlyArray2<'py, i64>,
    n_classes: usize,
    member_weights: Option<PyReadonlyArray1<'py, f64>>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(Py<PyAny>, Py<PyAny>)> {
    let view = members.as_array();
    let (m, n) = view.dim();
    let w = self::member_weights(member_weights, m)?;
    let labels = zeros1::<i64>(py, n)?;
    let fractions = zeros::<f64>(py, [n, n_classes])?;
    // SAFETY: both arrays were just created here and are not shared with Python yet.
    let (l, f) = unsafe { (labels.as_slice_mut(), fractions.as_slice_mut()) };
    let (l, f) = (l.expect("contiguous"), f.expect("contiguous"));
    run_core(py, n_jobs, progress, |pool, monitor| {
        core::majority_vote(view, n_classes, &w, l, f, pool, monitor)
    })?;
    Ok((labels.into_any().unbind(), fractions.into_any().unbind()))
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(mean_prediction, m)?)?;
    m.add_function(wrap_pyfunction!(majority_vote, m)?)
}
