//! Bindings of [`crate::learners::neighbors`].

use numpy::ndarray::Ix2;
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::learners::{self, count, rows_of, with_bag_source, YValues};
use super::{run_core, to_py_err, FloatArray};
use crate::learners::neighbors::{NeighborsEnsemble, NeighborsParams};
use crate::learners::{collect_bags, FittedMembers, Task};

/// Bagged k-nearest-neighbour members (regression or classification).
#[pyclass(module = "bagwise._core", name = "NeighborsEnsemble", frozen)]
pub struct PyNeighborsEnsemble {
    pub(super) inner: NeighborsEnsemble,
}

#[pymethods]
impl PyNeighborsEnsemble {
    /// Stores the training rows and every member's in-bag rows; `y` float64 targets or
    /// int64 class codes, `counts` (members, rows) whole counts.
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task, n_classes=None, neighbors=5, n_jobs=None,
        progress=None))]
    #[allow(clippy::too_many_arguments)]
    fn fit(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        task: &str,
        n_classes: Option<usize>,
        neighbors: i64,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        let task = Task::parse(task, n_classes.unwrap_or(0)).map_err(to_py_err)?;
        let neighbors = count(neighbors);
        let params = (NeighborsParams { task, neighbors }.check()).map_err(to_py_err)?;
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let y = YValues::read(y, task)?;
        let inner = with_bag_source(counts, rows_of(&x), |source| {
            let progress = progress.as_ref().map(|p| p.clone_ref(py));
            with_float!(x, |a| run_core(py, n_jobs, progress, |pool, monitor| {
                params.fit(a, y.view(), collect_bags(source, pool, monitor)?, monitor)
            }))
        })?;
        Ok(PyNeighborsEnsemble { inner })
    }

    /// (members, n_points) for regression, (members, n_points, n_classes) for
    /// classification, float64.
    #[pyo3(signature = (x, n_jobs=None, progress=None))]
    fn member_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::member_predictions(py, &self.inner, x, n_jobs, progress)
    }

    /// Shaped as `member_predictions` on the training rows, NaN where the member saw the
    /// row; only out-of-bag rows are computed.
    #[pyo3(signature = (x, counts, n_jobs=None, progress=None))]
    fn out_of_bag_predictions<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        counts: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::out_of_bag_predictions(py, &self.inner, x, counts, n_jobs, progress)
    }

    /// The ensemble mean over members: (n_points,) or (n_points, n_classes).
    #[pyo3(signature = (x, n_jobs=None, progress=None))]
    fn predict<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        learners::predict(py, &self.inner, x, n_jobs, progress)
    }

    /// Number of members.
    #[getter]
    fn n_members(&self) -> usize {
        self.inner.n_members()
    }

    /// Number of input features.
    #[getter]
    fn n_features(&self) -> usize {
        FittedMembers::n_features(&self.inner)
    }

    /// Number of classes (None for regression).
    #[getter]
    fn n_classes(&self) -> Option<usize> {
        learners::n_classes(&self.inner)
    }

    #[getter]
    fn neighbors(&self) -> usize {
        self.inner.neighbors()
    }

    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        learners::to_bytes(py, &self.inner)
    }

    /// One ensemble of the members of `parts`, in order: ensembles of one learner and
    /// settings fitted on consecutive member ranges of one ensemble, e.g. on several
    /// machines. ValueError for parts that disagree.
    #[staticmethod]
    fn join(parts: Vec<PyRef<'_, Self>>) -> PyResult<Self> {
        let parts = parts.iter().map(|part| part.inner.clone()).collect();
        learners::join(parts).map(|inner| Self { inner })
    }

    /// The ensemble of the members `members` (indices), in that order. ValueError when
    /// empty, out of range or repeated.
    fn select(&self, members: Vec<i64>) -> PyResult<Self> {
        learners::select(&self.inner, members).map(|inner| Self { inner })
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        learners::from_bytes(data).map(|inner| PyNeighborsEnsemble { inner })
    }

    fn __reduce__<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<(Bound<'py, PyAny>, (Bound<'py, PyBytes>,))> {
        let rebuild = py.get_type::<Self>().getattr("from_bytes")?;
        Ok((rebuild, (self.to_bytes(py)?,)))
    }

    fn __repr__(&self) -> String {
        format!(
            "NeighborsEnsemble(members={}, n_features={}, n_classes={}, neighbors={})",
            self.inner.n_members(),
            self.n_features(),
            self.n_classes().unwrap_or(0),
            self.inner.neighbors()
        )
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyNeighborsEnsemble>()
}
