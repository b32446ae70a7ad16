//! Bindings of [`crate::replicates`].

use numpy::ndarray::Ix3;
use numpy::{PyArray2, PyArrayMethods, PyReadonlyArray1, PyUntypedArrayMethods};
use pyo3::prelude::*;

use super::{run_core, zeros, FloatArray};
use crate::replicates::{replicate_spread as spread_core, Row, SpreadSummary};

/// The per-point arrays (rows of one numpy buffer) and means over points of the replicate
/// spread, as typed getters.
#[pyclass(module = "bagwise._core", name = "ReplicateSpreadParts", frozen)]
pub struct PyReplicateSpreadParts {
    rows: Py<PyArray2<f64>>,
    summary: SpreadSummary,
}

/// Per-point arrays and means over points of the replicate spread (see the core module).
#[pyfunction]
#[pyo3(signature = (members, y=None, n_jobs=None))]
fn replicate_spread<'py>(
    py: Python<'py>,
    members: &Bound<'py, PyAny>,
    y: Option<PyReadonlyArray1<'py, f64>>,
    n_jobs: Option<usize>,
) -> PyResult<PyReplicateSpreadParts> {
    let members = FloatArray::<Ix3>::extract(members, "members")?;
    let points = with_float!(members, |view| view.dim().2);
    let rows = zeros::<f64>(py, [Row::count(y.is_some()), points])?;
    // SAFETY: the array was just created here and is not shared with Python yet.
    let out = unsafe { rows.as_slice_mut() }.expect("a new array is contiguous");
    let y = y.as_ref().map(|y| y.as_array());
    let summary = with_float!(members, |view| {
        run_core(py, n_jobs, None, |pool, monitor| {
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

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyReplicateSpreadParts>()?;
    m.add_function(wrap_pyfunction!(replicate_spread, m)?)
}
