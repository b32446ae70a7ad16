//! Bindings of [`crate::correlation`].

use std::sync::Mutex;

use numpy::ndarray::Ix2;
use numpy::{PyArray1, PyArrayMethods, PyReadonlyArray1};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, zeros, FloatArray};
use crate::correlation::{self as core, CorrelationState, ResidualCorrelation};
use crate::members::MergeableState;

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
#[pyo3(signature = (members, y, n_jobs=None, progress=None))]
fn residual_correlation<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<CorrelationSummary> {
    let y = y.as_array();
    let members = FloatArray::<Ix2>::extract(members, "members")?;
    let r = with_float!(members, |v| run_core(py, n_jobs, progress, |pool, mon| {
        core::residual_correlation(v, y, pool, mon)
    }))?;
    Ok(summary(py, r))
}

fn summary(py: Python<'_>, r: ResidualCorrelation) -> CorrelationSummary {
    let constant = r.constant_members.iter().map(|&b| b as i64).collect();
    CorrelationSummary {
        residual_variance: PyArray1::from_vec(py, r.residual_variance).unbind(),
        mean_residual_variance: r.mean_residual_variance,
        mean_residual_covariance: r.mean_residual_covariance,
        mean_residual_correlation: r.mean_residual_correlation,
        constant_members: PyArray1::from_vec(py, constant).unbind(),
    }
}

/// The residual co-moments of a stream of points (see `CorrelationState`).
#[pyclass(module = "bagwise._core", name = "CorrelationAccumulator", frozen)]
pub struct PyCorrelationAccumulator {
    inner: Mutex<CorrelationState>,
}

impl PyCorrelationAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, CorrelationState> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }
}

#[pymethods]
impl PyCorrelationAccumulator {
    #[new]
    fn new() -> Self {
        PyCorrelationAccumulator {
            inner: Mutex::new(CorrelationState::new()),
        }
    }

    /// Adds a chunk of points (all members).
    #[pyo3(signature = (members, y, n_jobs=None, progress=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: PyReadonlyArray1<'py, f64>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<()> {
        let (members, y) = (
            FloatArray::<Ix2>::extract(members, "members")?,
            y.as_array(),
        );
        with_float!(members, |v| run_core(py, n_jobs, progress, |pool, mon| {
            self.state().update(v, y, pool, mon)
        }))
    }

    /// Adds the points of `other` after this stream's points.
    fn merge(&self, other: &Self) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(other).map_err(to_py_err)
    }

    /// Number of members (None before the first chunk).
    #[getter]
    fn n_members(&self) -> Option<usize> {
        self.state().members()
    }

    /// Number of points seen.
    #[getter]
    fn n_points(&self) -> u64 {
        self.state().n_points()
    }

    /// Residual variances and the mean pairwise covariance and correlation so far.
    fn result(&self, py: Python<'_>) -> PyResult<CorrelationSummary> {
        Ok(summary(py, self.state().finish().map_err(to_py_err)?))
    }

    /// The (members, members) residual correlation matrix so far.
    fn matrix(&self, py: Python<'_>) -> PyResult<Py<PyAny>> {
        let state = self.state();
        let m = state.members().unwrap_or(0);
        let out = zeros::<f64>(py, [m, m])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
        state.matrix(slice).map_err(to_py_err)?;
        Ok(out.into_any().unbind())
    }

    /// The state as bytes (see `from_bytes`).
    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.state().to_bytes().map_err(to_py_err)?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// A state stored by `to_bytes`.
    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let state = CorrelationState::from_bytes(data).map_err(to_py_err)?;
        Ok(PyCorrelationAccumulator {
            inner: Mutex::new(state),
        })
    }

    fn __reduce__<'py>(
        slf: &Bound<'py, Self>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let py = slf.py();
        Ok((
            slf.get_type().getattr("from_bytes")?,
            (slf.get().to_bytes(py)?,),
        ))
    }
}

/// The full (members, members) residual correlation matrix.
#[pyfunction]
#[pyo3(signature = (members, y, n_jobs=None, progress=None))]
fn correlation_matrix<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: PyReadonlyArray1<'py, f64>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<Py<PyAny>> {
    let y = y.as_array();
    let members = FloatArray::<Ix2>::extract(members, "members")?;
    let m = with_float!(members, |v| v.nrows());
    let out = zeros::<f64>(py, [m, m])?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let slice = unsafe { out.as_slice_mut() }.expect("a new array is contiguous");
    with_float!(members, |v| run_core(py, n_jobs, progress, |pool, mon| {
        core::correlation_matrix(v, y, slice, pool, mon)
    }))?;
    Ok(out.into_any().unbind())
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<CorrelationSummary>()?;
    m.add_class::<PyCorrelationAccumulator>()?;
    m.add_function(wrap_pyfunction!(residual_correlation, m)?)?;
    m.add_function(wrap_pyfunction!(correlation_matrix, m)?)
}
