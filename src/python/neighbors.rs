//! Bindings of [`crate::learners::neighbors`].

use numpy::ndarray::Axis;
use numpy::{IntoPyArray, PyArrayMethods, PyReadonlyArrayDyn};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::linear::{decode, encode, read_bags, rows_of};
use super::tree::targets;
use super::{run_core, to_py_err, zeros_nd, FloatArray};
use crate::learners::neighbors::NeighborsEnsemble;
use crate::learners::Task;

/// Bagged k-nearest-neighbour members (regression or classification).
#[pyclass(module = "bagwise._core", name = "NeighborsEnsemble", frozen)]
pub struct PyNeighborsEnsemble {
    inner: NeighborsEnsemble,
}

impl PyNeighborsEnsemble {
    fn shape(&self, n: usize) -> Vec<usize> {
        match self.inner.task() {
            Task::Regression => vec![self.inner.members(), n],
            Task::Classification { n_classes } => vec![self.inner.members(), n, n_classes],
        }
    }
}

#[pymethods]
impl PyNeighborsEnsemble {
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task, n_classes=None, neighbors=5, n_jobs=None, progress=None))]
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
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let bags = read_bags(counts, rows_of(&x))?;
        let y = targets(y, task)?.view().to_f64();
        // A negative count is below 1 too: the core names `neighbors` for both.
        let neighbors = usize::try_from(neighbors).unwrap_or(0);
        let inner = with_float!(x, |a| run_core(py, n_jobs, progress, |_, monitor| {
            NeighborsEnsemble::fit(a, y.as_slice().into(), bags, task, neighbors, monitor)
        }))?;
        Ok(PyNeighborsEnsemble { inner })
    }

    /// (members, n_points) for regression, (members, n_points, n_classes) for
    /// classification, float64.
    #[pyo3(signature = (x, n_jobs=None))]
    fn member_predictions(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let array = zeros_nd::<f64>(py, self.shape(rows_of(&x)))?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        with_float!(x, |a| run_core(py, n_jobs, None, |pool, monitor| {
            self.inner.member_predictions_into(a, out, pool, monitor)
        }))?;
        Ok(array.into_any().unbind())
    }

    /// The ensemble mean over members: (n_points,) or (n_points, n_classes).
    #[pyo3(signature = (x, n_jobs=None))]
    fn predict(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let all = self.member_predictions(py, x, n_jobs)?;
        let all = all.bind(py).extract::<PyReadonlyArrayDyn<'_, f64>>()?;
        let mean = all
            .as_array()
            .mean_axis(Axis(0))
            .expect("at least one member");
        Ok(mean.into_pyarray(py).into_any().unbind())
    }

    /// Shaped as `member_predictions` on the training rows, NaN where the member saw the
    /// row; only out-of-bag rows are computed.
    #[pyo3(signature = (x, counts, n_jobs=None))]
    fn out_of_bag_predictions(
        &self,
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        n_jobs: Option<usize>,
    ) -> PyResult<Py<PyAny>> {
        let x = FloatArray::<numpy::Ix2>::extract(x, "x")?;
        let n = rows_of(&x);
        let bags = read_bags(counts, n)?;
        let array = zeros_nd::<f64>(py, self.shape(n))?;
        // SAFETY: the array was just created here and is not shared with Python yet.
        let out = unsafe { array.as_slice_mut() }.expect("a new array is contiguous");
        with_float!(x, |a| run_core(py, n_jobs, None, |pool, monitor| {
            self.inner.out_of_bag_into(a, &bags, out, pool, monitor)
        }))?;
        Ok(array.into_any().unbind())
    }

    #[getter]
    fn members(&self) -> usize {
        self.inner.members()
    }

    #[getter]
    fn n_features(&self) -> usize {
        self.inner.n_features()
    }

    /// Number of classes (0 for regression).
    #[getter]
    fn n_classes(&self) -> usize {
        match self.inner.task() {
            Task::Regression => 0,
            Task::Classification { n_classes } => n_classes,
        }
    }

    #[getter]
    fn neighbors(&self) -> usize {
        self.inner.neighbors()
    }

    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        encode(py, &self.inner)
    }

    #[staticmethod]
    fn from_bytes(data: &[u8]) -> PyResult<Self> {
        let inner: NeighborsEnsemble = decode(data, "neighbours ensemble")?;
        inner.validate().map_err(to_py_err)?;
        Ok(PyNeighborsEnsemble { inner })
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
            self.inner.members(),
            self.inner.n_features(),
            self.n_classes(),
            self.inner.neighbors()
        )
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyNeighborsEnsemble>()
}
