//! Bindings of [`crate::replicates`].

use std::sync::Mutex;

use numpy::ndarray::Ix3;
use numpy::{PyArray2, PyArrayMethods, PyReadonlyArray1, PyUntypedArrayMethods};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::{run_core, to_py_err, zeros, FloatArray};
use crate::members::MergeableState;
use crate::replicates::{
    replicate_spread as spread_core, ReplicateSpreadState, Row, SpreadSummary,
};

/// The per-point arrays (rows of one numpy buffer) and means over points of the replicate
/// spread, as typed getters.
#[pyclass(module = "bagwise._core", name = "ReplicateSpreadParts", frozen)]
pub struct PyReplicateSpreadParts {
    rows: Py<PyArray2<f64>>,
    summary: SpreadSummary,
}

/// Per-point arrays and means over points of the replicate spread (see the core module).
#[pyfunction]
#[pyo3(signature = (members, y=None, n_jobs=None, progress=None))]
fn replicate_spread<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: Option<PyReadonlyArray1<'py, f64>>,
    n_jobs: Option<usize>,
    progress: Option<Py<PyAny>>,
) -> PyResult<PyReplicateSpreadParts> {
    let members = FloatArray::<Ix3>::extract(members, "members")?;
    let points = with_float!(members, |view| view.dim().2);
    let rows = zeros::<f64>(py, [Row::count(y.is_some()), points])?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let out = unsafe { rows.as_slice_mut() }.expect("a new array is contiguous");
    let y = y.as_ref().map(|y| y.as_array());
    let summary = with_float!(members, |view| {
        run_core(py, n_jobs, progress, |pool, monitor| {
            spread_core(view, y, out, pool, monitor)
        })
    })?;
    let rows = rows.unbind();
    Ok(PyReplicateSpreadParts { rows, summary })
}

impl PyReplicateSpreadParts {
    /// Row `row` of the buffer as a numpy view.
    fn row<'py>(&self, py: Python<'py>, row: Row) -> PyResult<Bound<'py, PyAny>> {
        self.rows.bind(py).as_any().get_item(row.index())
    }

    /// Whether the buffer holds the rows that need targets.
    fn has_y(&self, py: Python<'_>) -> bool {
        self.rows.bind(py).shape()[0] == Row::WITH_Y
    }

    /// A row that exists only with targets.
    fn split_row<'py>(&self, py: Python<'py>, row: Row) -> PyResult<Option<Bound<'py, PyAny>>> {
        self.has_y(py).then(|| self.row(py, row)).transpose()
    }

    /// A mean that exists only with targets.
    fn with_y(&self, py: Python<'_>, value: f64) -> Option<f64> {
        self.has_y(py).then_some(value)
    }
}

#[pymethods]
impl PyReplicateSpreadParts {
    #[getter]
    fn within<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        self.row(py, Row::Within)
    }
    #[getter]
    fn between<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        self.row(py, Row::Between)
    }
    #[getter]
    fn variance<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        self.row(py, Row::Variance)
    }
    #[getter]
    fn bias<'py>(&self, py: Python<'py>) -> PyResult<Option<Bound<'py, PyAny>>> {
        self.split_row(py, Row::Bias)
    }
    #[getter]
    fn member_variance<'py>(&self, py: Python<'py>) -> PyResult<Option<Bound<'py, PyAny>>> {
        self.split_row(py, Row::MemberVariance)
    }
    #[getter]
    fn covariance<'py>(&self, py: Python<'py>) -> PyResult<Option<Bound<'py, PyAny>>> {
        self.split_row(py, Row::Covariance)
    }
    #[getter]
    fn expected_squared_error<'py>(&self, py: Python<'py>) -> PyResult<Option<Bound<'py, PyAny>>> {
        self.split_row(py, Row::ExpectedSquaredError)
    }
    #[getter]
    fn mean_within(&self) -> f64 {
        self.summary.mean_within
    }
    #[getter]
    fn mean_between(&self) -> f64 {
        self.summary.mean_between
    }
    #[getter]
    fn mean_variance(&self) -> f64 {
        self.summary.mean_variance
    }
    #[getter]
    fn n_negative_between(&self) -> u64 {
        self.summary.n_negative_between
    }
    #[getter]
    fn mean_bias_squared(&self, py: Python<'_>) -> Option<f64> {
        self.with_y(py, self.summary.mean_bias_squared)
    }
    #[getter]
    fn mean_member_variance(&self, py: Python<'_>) -> Option<f64> {
        self.with_y(py, self.summary.mean_member_variance)
    }
    #[getter]
    fn mean_covariance(&self, py: Python<'_>) -> Option<f64> {
        self.with_y(py, self.summary.mean_covariance)
    }
    #[getter]
    fn mean_expected_squared_error(&self, py: Python<'_>) -> Option<f64> {
        self.with_y(py, self.summary.mean_expected_squared_error)
    }
}

/// The replicate spread fed chunk by chunk of points (see `ReplicateSpreadState`).
#[pyclass(module = "bagwise._core", name = "ReplicateSpreadAccumulator", frozen)]
pub struct PyReplicateSpreadAccumulator {
    inner: Mutex<ReplicateSpreadState>,
}

impl PyReplicateSpreadAccumulator {
    fn state(&self) -> std::sync::MutexGuard<'_, ReplicateSpreadState> {
        self.inner.lock().unwrap_or_else(|e| e.into_inner())
    }
}

#[pymethods]
impl PyReplicateSpreadAccumulator {
    #[new]
    fn new() -> Self {
        PyReplicateSpreadAccumulator {
            inner: Mutex::new(ReplicateSpreadState::new()),
        }
    }

    /// Adds a chunk of points; returns its per-point rows (`ReplicateSpreadParts` order).
    #[pyo3(signature = (members, y=None, n_jobs=None, progress=None))]
    fn update<'py>(
        &self,
        py: Python<'py>,
        members: &Bound<'py, PyAny>,
        y: Option<PyReadonlyArray1<'py, f64>>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Py<PyArray2<f64>>> {
        let members = FloatArray::<Ix3>::extract(members, "members")?;
        let points = with_float!(members, |view| view.dim().2);
        let rows = zeros::<f64>(py, [Row::count(y.is_some()), points])?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { rows.as_slice_mut() }.expect("a new array is contiguous");
        let y = y.as_ref().map(|y| y.as_array());
        with_float!(members, |view| run_core(
            py,
            n_jobs,
            progress,
            |pool, mon| { self.state().update(view, y, out, pool, mon) }
        ))?;
        Ok(rows.unbind())
    }

    /// Adds the points of `other` after this stream's points.
    fn merge(&self, other: &Self) -> PyResult<()> {
        let other = other.state().clone();
        self.state().merge(other).map_err(to_py_err)
    }

    /// (replicates, members) after the first chunk.
    #[getter]
    fn shape(&self) -> Option<(usize, usize)> {
        self.state().shape()
    }

    /// Number of points seen.
    #[getter]
    fn n_points(&self) -> u64 {
        self.state().n_points()
    }

    /// The means over points so far: (mean_within, mean_between, mean_variance,
    /// n_negative_between, mean_bias_squared, mean_member_variance, mean_covariance,
    /// mean_expected_squared_error), the last four None without targets.
    #[allow(clippy::type_complexity)]
    fn result(&self) -> PyResult<(f64, f64, f64, u64, [Option<f64>; 4])> {
        let state = self.state();
        let s = state.finish().map_err(to_py_err)?;
        let y = |v: f64| (state.with_y() == Some(true)).then_some(v);
        Ok((
            s.mean_within,
            s.mean_between,
            s.mean_variance,
            s.n_negative_between,
            [
                y(s.mean_bias_squared),
                y(s.mean_member_variance),
                y(s.mean_covariance),
                y(s.mean_expected_squared_error),
            ],
        ))
    }

    /// The state as bytes (see `from_bytes`).
    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.state().to_bytes().map_err(to_py_err)?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// A state stored by `to_bytes`.
    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let state = ReplicateSpreadState::from_bytes(data).map_err(to_py_err)?;
        Ok(PyReplicateSpreadAccumulator {
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

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyReplicateSpreadParts>()?;
    m.add_class::<PyReplicateSpreadAccumulator>()?;
    m.add_function(wrap_pyfunction!(replicate_spread, m)?)
}
