//! Bindings of [`crate::learners::linear`].

use numpy::ndarray::Ix2;
use numpy::{IntoPyArray, PyArrayMethods};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use super::learners::{self, rows_of, with_bag_source, YValues};
use super::{run_core, to_py_err, FloatArray};
use crate::learners::linear::{LinearEnsemble, LinearParams};
use crate::learners::FittedMembers;

/// Bagged least squares / ridge regression members.
#[pyclass(module = "bagwise._core", name = "LinearEnsemble", frozen)]
pub struct PyLinearEnsemble {
    pub(super) inner: LinearEnsemble,
}

#[pymethods]
impl PyLinearEnsemble {
    /// One weighted least squares / ridge fit per member; `counts` (members, rows) of
    /// unsigned integer counts or float64 weights.
    #[staticmethod]
    #[pyo3(signature = (x, y, counts, *, task="regression", n_classes=None, penalty=0.0,
        n_jobs=None, progress=None))]
    #[allow(clippy::too_many_arguments)]
    fn fit(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: &Bound<'_, PyAny>,
        counts: &Bound<'_, PyAny>,
        task: &str,
        n_classes: Option<usize>,
        penalty: f64,
        n_jobs: Option<usize>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        let params = LinearParams::from_options(task, n_classes, penalty)
            .and_then(LinearParams::check)
            .map_err(to_py_err)?;
        let x = FloatArray::<Ix2>::extract(x, "x")?;
        let y = YValues::read(y, params.task())?;
        let inner = with_bag_source(counts, rows_of(&x), |bags| {
            let progress = progress.as_ref().map(|p| p.clone_ref(py));
            with_float!(x, |a| run_core(py, n_jobs, progress, |pool, monitor| {
                params.fit(a, y.view(), bags, pool, monitor)
            }))
        })?;
        Ok(PyLinearEnsemble { inner })
    }

    /// (members, n_points) float64.
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

    /// (members, n_rows) float64, NaN where the member saw the row.
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

    /// The ensemble mean, (n_points,) float64.
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

    /// None: the linear learner does regression only.
    #[getter]
    fn n_classes(&self) -> Option<usize> {
        learners::n_classes(&self.inner)
    }

    #[getter]
    fn penalty(&self) -> f64 {
        self.inner.penalty()
    }

    /// (members,) float64.
    #[getter]
    fn intercepts<'py>(&self, py: Python<'py>) -> Bound<'py, PyAny> {
        self.inner.intercepts().to_vec().into_pyarray(py).into_any()
    }

    /// (members, n_features) float64.
    #[getter]
    fn coefficients<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        let flat = self.inner.coefficients().to_vec().into_pyarray(py);
        Ok(flat
            .reshape([self.inner.n_members(), self.n_features()])?
            .into_any())
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
        learners::from_bytes(data).map(|inner| PyLinearEnsemble { inner })
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
            "LinearEnsemble(members={}, n_features={}, penalty={})",
            self.inner.n_members(),
            self.n_features(),
            self.inner.penalty()
        )
    }
}

pub(super) fn register(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyLinearEnsemble>()
}
