//! Bindings of [`crate::correlation`].

use numpy::ndarray::Ix2;
use numpy::{PyArray1, PyArrayMethods, PyReadonlyArray1};
use pyo3::prelude::*;

use super::{run_core, zeros, FloatArray};
use crate::correlation as core;

/// Residual variances and their mean pairwise covariance and correlation.
#[pyclass(module = "bagwise._core", frozen, get_all)]
pub struct CorrelationSummary {
    /// Per member, the variance (ddof 1) of its residuals.
    residual_variance: Py<PyArray1<f64>>,
    /// Mean of `residual_variance`.
    mean_residual_variance: f64,
    /// Mean over pairs of the residual covariance.
    mean_residual_covariance: f64,
    /// Mean over pairs of non-constant members of the residual correlation.
    mean_residual_correlation: f64,
    /// Members whose residuals are constant, int64.
    constant_members: Py<PyArray1<i64>>,
}

/// Residual variances and mean pairwise covariance / correlation without the M × M matrix.
#[pyfunction]
#[pyo3(signature = (members, y, n_jobs=None))]
fn residual_correlation<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
) -> PyResult<CorrelationSummary> {
    let y = y.as_array();
    let members = FloatArray::<Ix2>::extract(members, "members")?;
    let r = with_float!(members, |v| run_core(py, n_jobs, None, |pool, mon| {
        core::residual_correlation(v, y, pool, mon)
    }))?;
    let constant = r.constant_members.iter().map(|&b| b as i64).collect();
    Ok(CorrelationSummary {
        residual_variance: PyArray1::from_vec(py, r.residual_variance).unbind(),
        mean_residual_variance: r.mean_residual_variance,
        mean_residual_covariance: r.mean_residual_covariance,
        mean_residual_correlation: r.mean_residual_correlation,
        constant_members: PyArray1::from_vec(py, constant).unbind(),
    })
}

/// The full (members, members) residual correlation matrix.
#[pyfunction]
#[pyo3(signature = (members, y, n_jobs=None))]
fn correlation_matrix<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
) -> PyResult<Py<PyAny>> {
    let y = y.as_array();
    let members = FloatArray::<Ix2>::extract(members, "members")?;
    let m = with_float!(members, |v| v.nrows());
    let out = zeros::<f64>(py, [m, m])?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
    with_float!(members, |v| run_core(py, n_jobs, None, |pool, mon| {
        core::correlation_matrix(v, y, slice, pool, mon)
    }))?;
    Ok(out.into_any().unbind())
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<CorrelationSummary>()?;
    m.add_function(wrap_pyfunction!(residual_correlation, m)?)?;
    m.add_function(wrap_pyfunction!(correlation_matrix, m)?)
}
